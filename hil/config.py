"""Loading and validating vessel and scenario files (TOML, trade units → SI).

Every problem in a file (and in the files it refers to) is reported at once through
:class:`hil.configio.ConfigError`; legal-but-unusual values become warnings.

File kinds are told apart by their top-level table: ``[vessel]`` (a vessel with its fins),
``[scenario]`` (a run: vessel + sea + speed + sensors + faults), ``[controller]`` (see
:mod:`hil.controller_config`).
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from pathlib import Path

from plant.actuator import ActuatorParams
from plant.constants import G, KNOT, TONNE
from plant.excitation import MOMENT_METHODS, SEA_KINDS, SeaSpec, WaveMomentSpec
from plant.fins import FinParams, whicker_fehlner_lift_slope
from plant.sensors import (
    ACTUATOR_CHANNELS,
    ACTUATOR_FAULT_KINDS,
    FAULT_KINDS,
    SENSOR_CHANNELS,
    Fault,
    FinFeedbackParams,
    MotionSensorParams,
    SensorSuite,
    SpeedLogParams,
)
from plant.simulation import ExternalMoment, PlantSetup
from plant.vessel import GZTable, VesselParams, damping_from_ratio, imo_roll_period_s, inertia_from_period

from .configio import NO_VALUE, ConfigError, Problem, Problems, Reader, deg, kilo, kn, pct, read_toml

__all__ = [
    "Vessel",
    "Scenario",
    "load_vessel",
    "load_scenario",
    "detect_kind",
    "file_sha256",
    "ConfigError",
]

DEFAULT_SEAWATER_DENSITY = 1026.0  # kg/m³ at 15 °C, 35 g/kg — ITTC 7.5-02-01-03 (see plant.water)



@dataclass(frozen=True)
class Vessel:
    """A vessel file, loaded: hull, fins, actuators and how waves act on it."""

    params: VesselParams
    fin_port: FinParams
    fin_stbd: FinParams
    actuator_port: ActuatorParams
    actuator_stbd: ActuatorParams
    wave_moment: WaveMomentSpec
    source: Path


@dataclass(frozen=True)
class Scenario:
    """A scenario file, loaded and resolved."""

    name: str
    setup: PlantSetup
    vessel: Vessel
    sea: SeaSpec
    heading_rad: float
    warmup_s: float
    controller_file: Path | None
    controller: object | None  # controller.ControllerParams when the scenario names one
    source: Path
    files: tuple[Path, ...]  # every file this scenario depends on (for hashing)
    warnings: tuple[Problem, ...] = field(default=())
    comfort: object | None = None  # hil.comfort.ComfortSpec (defaults when the file has no [comfort])


def file_sha256(paths) -> str:
    """SHA-256 over the bytes of the given files, in order (the run's config hash)."""
    h = hashlib.sha256()
    for p in paths:
        h.update(Path(p).read_bytes())
    return h.hexdigest()


def detect_kind(table: dict) -> str | None:
    for kind in ("scenario", "vessel", "controller", "envelope", "links"):
        if kind in table:
            return kind
    return None


# ----------------------------------------------------------------------------------------------
# vessel files
# ----------------------------------------------------------------------------------------------

_FIN_KEYS = (
    "area_m2",
    "span_m",
    "chord_m",
    "aspect_ratio",
    "sweep_deg",
    "lever_arm_m",
    "lift_slope_per_rad",
    "stall_angle_deg",
    "stall_drop_deg",
    "post_stall_lift_pct",
    "profile_drag_coefficient",
    "oswald_efficiency",
    "water_density_kg_m3",
)
_ACT_KEYS = ("angle_limit_deg", "rate_limit_deg_s", "time_constant_s", "delay_s", "deadband_deg")


def _overlay(path, problems, base: dict, override: dict, keys, base_prefix: str, over_prefix: str, allow=()):
    """Merge common keys with per-side overrides; returns (merged table, key → key path)."""
    merged, paths = {}, {}
    for k, v in base.items():
        if k in keys:
            merged[k] = v
            paths[k] = f"{base_prefix}.{k}"
    for k, v in override.items():
        if k in keys:
            merged[k] = v
            paths[k] = f"{over_prefix}.{k}"
        elif k not in allow:
            problems.add(Problem(str(path), f"{over_prefix}.{k}", v, "", f"unknown key (known keys here: {', '.join(keys)})"))
    return merged, paths


def _read_fin(r: Reader, side: int) -> FinParams:
    area = r.number("area_m2", unit="m2", lo=0.0, lo_open=True, hi=100.0, warn_hi=40.0, warn_why="very large for a stabiliser fin")
    sweep = r.number("sweep_deg", unit="deg", lo=0.0, hi=60.0, default=0.0, si=deg)
    which = None
    if r.table is not None:
        has_ar = "aspect_ratio" in r.table
        has_sc = "span_m" in r.table or "chord_m" in r.table
        if has_ar and has_sc:
            r.error("aspect_ratio", r.table["aspect_ratio"], "", "give either aspect_ratio or span_m + chord_m, not both")
        which = "ar" if has_ar else "sc"
    if which == "ar":
        ar = r.number("aspect_ratio", lo=0.1, hi=10.0, warn_hi=4.0, warn_why="stabiliser fins are usually 1-2")
    else:
        span = r.number("span_m", unit="m", lo=0.0, lo_open=True, hi=20.0)
        chord = r.number("chord_m", unit="m", lo=0.0, lo_open=True, hi=20.0)
        ar = span / chord if (span == span and chord == chord) else math.nan
        if ar == ar and area == area and abs(span * chord - area) > 0.25 * area:
            r.warn("area_m2", area, "m2", f"differs from span × chord = {span * chord:.2f} m2 by more than 25 %")
    lever = r.number("lever_arm_m", unit="m", lo=0.0, lo_open=True, hi=60.0)
    if r.has("lift_slope_per_rad"):
        cla = r.number("lift_slope_per_rad", unit="1/rad", lo=0.0, lo_open=True, hi=2.0 * math.pi,
                       warn_hi=4.5, warn_why="above typical low-aspect-ratio fins")
    else:
        r.known("lift_slope_per_rad")
        cla = whicker_fehlner_lift_slope(ar, sweep) if (ar == ar and sweep == sweep) else math.nan
    stall = r.number("stall_angle_deg", unit="deg", lo=0.0, lo_open=True, hi=90.0, hi_open=True, si=deg)
    drop = r.number("stall_drop_deg", unit="deg", lo=0.0, lo_open=True, hi=30.0, default=4.0, si=deg)
    post = r.number("post_stall_lift_pct", unit="%", lo=0.0, hi=100.0, default=60.0, si=pct)
    cd0 = r.number("profile_drag_coefficient", lo=0.0, hi=0.2, default=0.008)
    e = r.number("oswald_efficiency", lo=0.0, lo_open=True, hi=1.0, default=0.9)
    rho = r.number("water_density_kg_m3", unit="kg/m3", lo=990.0, hi=1050.0, default=DEFAULT_SEAWATER_DENSITY)
    return FinParams(side, area, ar, sweep, lever, cla, stall, drop, post, cd0, e, rho)


def _read_actuator(r: Reader) -> ActuatorParams:
    lim = r.number("angle_limit_deg", unit="deg", lo=0.0, lo_open=True, hi=90.0, hi_open=True, si=deg,
                   warn_hi=40.0, warn_why="beyond usual mechanical fin limits")
    rate = r.number("rate_limit_deg_s", unit="deg/s", lo=0.0, lo_open=True, hi=200.0, si=deg)
    tau = r.number("time_constant_s", unit="s", lo=0.0, hi=5.0, default=0.0)
    delay = r.number("delay_s", unit="s", lo=0.0, hi=2.0, default=0.0)
    db = r.number("deadband_deg", unit="deg", lo=0.0, hi=5.0, default=0.0, si=deg)
    return ActuatorParams(lim, rate, tau, delay, db)


def read_vessel(path: Path, table: dict | None, problems: Problems) -> Vessel | None:
    """Read the ``[vessel]`` and ``[fins]`` tables of a parsed vessel file."""
    top = Reader(path, table, problems)
    vr = top.table_reader("vessel")
    name = vr.string("name")
    lwl = vr.number("length_wl_m", unit="m", lo=5.0, hi=500.0)
    beam = vr.number("beam_m", unit="m", lo=1.0, hi=80.0)
    draught = vr.number("draught_m", unit="m", lo=0.3, hi=30.0)
    disp = vr.number("displacement_t", unit="t", lo=1.0, hi=600_000.0, si=lambda x: x * TONNE)
    gm = vr.number("gm_m", unit="m", lo=0.0, lo_open=True, hi=20.0, warn_hi=5.0,
                   warn_why="very stiff; check the loading condition")
    # inertia
    inertia = math.nan
    which = vr.one_of(["roll_gyradius_m", "natural_roll_period_s"])
    if which == "roll_gyradius_m":
        k = vr.number("roll_gyradius_m", unit="m", lo=0.0, lo_open=True, hi=100.0)
        add = vr.number("added_inertia_pct", unit="%", lo=0.0, hi=200.0, default=20.0, si=pct)
        if k == k and beam == beam and not (0.25 * beam <= k <= 0.55 * beam):
            vr.warn("roll_gyradius_m", k, "m", f"outside the usual 0.25..0.55 × beam ({0.25 * beam:.1f}..{0.55 * beam:.1f} m)")
        inertia = disp * k * k * (1.0 + add)
    elif which == "natural_roll_period_s":
        t0 = vr.number("natural_roll_period_s", unit="s", lo=1.0, hi=60.0)
        inertia = inertia_from_period(disp, gm, t0) if gm == gm and t0 == t0 else math.nan
        vr.known("added_inertia_pct")
        if vr.has("added_inertia_pct"):
            vr.error("added_inertia_pct", vr.table["added_inertia_pct"], "%", "only used with roll_gyradius_m (a natural period already includes added inertia)")
    # GZ table
    gz = None
    gzr = vr.table_reader("gz", required=False)
    if gzr is not None:
        heel = gzr.numbers("heel_deg", unit="deg", lo=0.0, hi=90.0, hi_open=True, min_len=2, increasing=True, si=deg)
        gzv = gzr.numbers("gz_m", unit="m", lo=-5.0, hi=20.0, min_len=2)
        gzr.done()
        if heel and gzv:
            if len(heel) != len(gzv):
                gzr.error("gz_m", list(gzv), "m", f"needs as many values as heel_deg ({len(heel)}), got {len(gzv)}")
            elif heel[0] != 0.0 or gzv[0] != 0.0:
                gzr.error("heel_deg", [math.degrees(h) for h in heel][:3], "deg", "the table must start at heel 0 with GZ 0")
            else:
                gz = GZTable(heel, gzv)
                slope = gz.initial_slope_m
                if gm == gm and abs(slope - gm) > 0.25 * gm:
                    gzr.warn("gz_m", gzv[1], "m", f"initial slope {slope:.2f} m/rad differs from gm_m = {gm:g} m by more than 25 %")
    # damping
    b1 = b2 = math.nan
    dr = vr.table_reader("damping")
    which_d = dr.one_of(["linear_ratio_pct", "b1_kN_m_s"])
    restoring = disp * G * (gz.initial_slope_m if gz is not None else gm)
    if which_d == "linear_ratio_pct":
        ratio = dr.number("linear_ratio_pct", unit="%", lo=0.0, hi=100.0, hi_open=True, si=pct,
                          warn_hi=20.0, warn_why="passive roll damping is usually a few percent of critical")
        b1 = damping_from_ratio(ratio, restoring, inertia) if all(x == x for x in (ratio, restoring, inertia)) else math.nan
    elif which_d == "b1_kN_m_s":
        b1 = dr.number("b1_kN_m_s", unit="kN.m.s", lo=0.0, si=kilo)
    b2 = dr.number("b2_kN_m_s2", unit="kN.m.s2", lo=0.0, default=0.0, si=kilo)
    dr.done()
    # wave moment
    wr = vr.table_reader("wave_moment")
    method = wr.string("method", choices=MOMENT_METHODS)
    reff = wr.number("effective_slope_coefficient", lo=0.0, hi=1.5, default=0.7)
    # short-wave reduction: average the slope over the waterplane beam (plant/waves.EffectiveSlope)
    swr = wr.string("short_wave_reduction", choices=("beam_average", "none"), default="beam_average")
    if method == "rao_table" and wr.has("short_wave_reduction"):
        wr.error("short_wave_reduction", wr.table["short_wave_reduction"], "", 'only used with method = "effective_slope"')
    rao = None
    if method == "rao_table":
        rao = wr.path_value("rao_file")
        if rao is not None:
            from plant.waves import SeaInputError, read_rao_csv

            try:
                read_rao_csv(rao)
            except SeaInputError as exc:
                wr.error("rao_file", str(wr.table["rao_file"]), "", f"unusable RAO table: {exc}")
    elif wr.has("rao_file"):
        wr.path_value("rao_file", must_exist=False)
        wr.error("rao_file", wr.table["rao_file"], "", "only used with method = \"rao_table\"")
    wr.done()
    vr.done()

    # fins: [fins] holds keys common to both; [fins.port] / [fins.starboard] override any of them,
    # and [fins.actuator] / [fins.<side>.actuator] likewise for the servo.
    fr = top.table_reader("fins")
    common = fr.table or {}
    for k in common:
        if k not in _FIN_KEYS and k not in ("port", "starboard", "actuator"):
            fr.error(k, common[k], "", f"unknown key (known keys here: {', '.join(_FIN_KEYS + ('port', 'starboard', 'actuator'))})")
    base_act = common.get("actuator", {})
    if fr.table is not None and not isinstance(base_act, dict):
        fr.error("actuator", base_act, "", "expected a table ([fins.actuator])")
        base_act = {}
    fins, acts = [], []
    for side_key, side in (("port", -1), ("starboard", +1)):
        sub = common.get(side_key, {})
        if not isinstance(sub, dict):
            fr.error(side_key, sub, "", f"expected a table ([fins.{side_key}])")
            sub = {}
        sub_act = sub.get("actuator", {})
        if not isinstance(sub_act, dict):
            fr.problems.add(Problem(str(path), f"fins.{side_key}.actuator", sub_act, "", "expected a table"))
            sub_act = {}
        merged, paths = _overlay(path, problems, common, sub, _FIN_KEYS, "fins", f"fins.{side_key}", allow=("actuator",))
        fins.append(_read_fin(Reader(path, merged if fr.table is not None else None, problems, "fins", paths), side))
        merged_a, paths_a = _overlay(path, problems, base_act, sub_act, _ACT_KEYS, "fins.actuator", f"fins.{side_key}.actuator")
        if fr.table is not None and not merged_a:
            fr.problems.add(Problem(str(path), "fins.actuator", NO_VALUE, "", "missing [fins.actuator] table (angle_limit_deg, rate_limit_deg_s, ...)"))
        acts.append(_read_actuator(Reader(path, merged_a if fr.table is not None else None, problems, "fins.actuator", paths_a)))
    # cross-checks
    fin_p, fin_s = fins
    act_p, act_s = acts
    for fin in (fin_p, fin_s):
        if fin.lever_arm_m == fin.lever_arm_m and beam == beam and fin.lever_arm_m > 0.75 * beam:
            problems.add(Problem(str(path), "fins.lever_arm_m", fin.lever_arm_m, "m",
                                 f"longer than 0.75 × beam ({0.75 * beam:.1f} m); check the lever arm", "warning"))
    vp = VesselParams(name, lwl, beam, draught, disp, gm, inertia, b1, b2, gz)
    if all(x == x for x in (lwl, beam, draught, gm, inertia)) and gm > 0 and inertia > 0 and not problems.errors:
        t_model = vp.natural_period_s
        t_imo = imo_roll_period_s(beam, draught, lwl, gm)
        if lwl >= 80.0 and t_model < 7.0:
            problems.add(Problem(str(path), "vessel", t_model, "s",
                                 f"natural roll period {t_model:.1f} s is very short for a {lwl:g} m ship", "warning"))
        elif not 0.6 <= t_model / t_imo <= 1.6:
            problems.add(Problem(str(path), "vessel", t_model, "s",
                                 f"natural roll period {t_model:.1f} s differs from the IMO 2008 IS Code estimate "
                                 f"{t_imo:.1f} s by more than a factor 1.6", "warning"))
    top.done()
    if problems.errors:
        return None
    return Vessel(vp, fin_p, fin_s, act_p, act_s, WaveMomentSpec(method, reff, rao, beam if swr == "beam_average" else 0.0), Path(path))


def load_vessel(path: str | Path, problems: Problems | None = None) -> Vessel:
    """Load a vessel file; raises :class:`ConfigError` listing every problem."""
    problems = problems if problems is not None else Problems()
    table = read_toml(path, problems)
    v = read_vessel(Path(path), table, problems) if table is not None else None
    problems.raise_if_errors()
    assert v is not None
    return v


# ----------------------------------------------------------------------------------------------
# scenario files
# ----------------------------------------------------------------------------------------------


def _read_sea(r: Reader, duration: float) -> SeaSpec:
    kind = r.string("spectrum", choices=SEA_KINDS)
    hs = tp = t1 = tz = gamma = h = per = None
    n = 300
    file = None
    if kind in ("pierson_moskowitz", "ittc", "jonswap"):
        hs = r.number("hs_m", unit="m", lo=0.0, hi=25.0, warn_hi=14.0, warn_why="beyond recorded sea states")
        n = r.integer("components", lo=20, hi=5000, default=300)
        if kind == "ittc":
            which = r.one_of(["t1_s", "tp_s", "tz_s"])
            if which:
                val = r.number(which, unit="s", lo=0.0, lo_open=True, hi=30.0)
                t1, tp, tz = (val if which == "t1_s" else None, val if which == "tp_s" else None, val if which == "tz_s" else None)
        else:
            tp = r.number("tp_s", unit="s", lo=0.0, lo_open=True, hi=30.0)
        if kind == "jonswap" and r.has("gamma"):
            gamma = r.number("gamma", lo=1.0, hi=7.0)
        if hs is not None and hs == hs and tp is not None and tp == tp and hs > 0:
            # steepness check (DNV-RP-C205 §3.5.5.4: limiting steepness Ss = 2π Hs/(g Tp²) ≈ 1/15)
            steep = 2.0 * math.pi * hs / (G * tp * tp)
            if steep > 1.0 / 15.0:
                r.warn("hs_m", hs, "m", f"sea steepness 2πHs/(gTp²) = {steep:.3f} exceeds the breaking limit 1/15 for tp_s = {tp:g} s")
    elif kind == "regular":
        h = r.number("wave_height_m", unit="m", lo=0.0, hi=30.0)
        per = r.number("period_s", unit="s", lo=0.0, lo_open=True, hi=40.0)
    elif kind == "time_series":
        file = r.path_value("file")
        if file is not None:
            from plant.waves import MomentRecord, SeaInputError, read_time_series_csv

            try:
                rec = read_time_series_csv(file)
            except SeaInputError as exc:
                r.error("file", str(r.table["file"]), "", f"unusable time series: {exc}")
            else:
                if isinstance(rec, MomentRecord) and duration == duration and rec.time[-1] < duration:
                    r.error("file", str(r.table["file"]), "",
                            f"the roll-moment record ends at {rec.time[-1]:g} s, before the run ends "
                            f"(scenario.duration_s = {duration:g} s)")
    r.done()
    return SeaSpec(kind, hs, tp, t1, tz, gamma, n, h, per, file)


def _read_sensors(r: Reader | None) -> SensorSuite:
    if r is None:
        return SensorSuite()
    mr = r.table_reader("motion", required=False)
    m = MotionSensorParams()
    if mr is not None:
        m = MotionSensorParams(
            sample_rate_hz=mr.number("sample_rate_hz", unit="Hz", lo=1.0, hi=2000.0, default=100.0),
            latency_s=mr.number("latency_s", unit="s", lo=0.0, hi=2.0, default=0.005),
            noise_roll_rad=mr.number("roll_noise_deg", unit="deg", lo=0.0, hi=5.0, default=0.0, si=deg),
            noise_rate_rad_s=mr.number("rate_noise_deg_s", unit="deg/s", lo=0.0, hi=10.0, default=0.0, si=deg),
            bias_roll_rad=mr.number("roll_bias_deg", unit="deg", lo=-10.0, hi=10.0, default=0.0, si=deg),
            bias_rate_rad_s=mr.number("rate_bias_deg_s", unit="deg/s", lo=-10.0, hi=10.0, default=0.0, si=deg),
            quantisation_roll_rad=mr.number("roll_resolution_deg", unit="deg", lo=0.0, hi=1.0, default=0.0, si=deg),
            quantisation_rate_rad_s=mr.number("rate_resolution_deg_s", unit="deg/s", lo=0.0, hi=1.0, default=0.0, si=deg),
            provides_rate=mr.boolean("provides_rate", default=True),
        )
        mr.done()
    sr = r.table_reader("speed_log", required=False)
    s = SpeedLogParams()
    if sr is not None:
        s = SpeedLogParams(
            sample_rate_hz=sr.number("sample_rate_hz", unit="Hz", lo=0.01, hi=100.0, default=1.0),
            latency_s=sr.number("latency_s", unit="s", lo=0.0, hi=10.0, default=0.0),
            noise_ms=sr.number("noise_kn", unit="kn", lo=0.0, hi=5.0, default=0.0, si=kn),
            bias_ms=sr.number("bias_kn", unit="kn", lo=-5.0, hi=5.0, default=0.0, si=kn),
            dropouts_per_hour=sr.number("dropouts_per_hour", unit="1/h", lo=0.0, hi=3600.0, default=0.0),
            dropout_duration_s=sr.number("dropout_duration_s", unit="s", lo=0.0, hi=3600.0, default=5.0),
        )
        sr.done()
    fr = r.table_reader("fin_feedback", required=False)
    f = FinFeedbackParams()
    if fr is not None:
        f = FinFeedbackParams(
            noise_rad=fr.number("noise_deg", unit="deg", lo=0.0, hi=5.0, default=0.0, si=deg),
            quantisation_rad=fr.number("resolution_deg", unit="deg", lo=0.0, hi=2.0, default=0.0, si=deg),
        )
        fr.done()
    r.done()
    return SensorSuite(m, s, f)


_FAULT_VALUE_KEY = {
    "roll": ("value_deg", "deg", deg),
    "roll_rate": ("value_deg_s", "deg/s", deg),
    "speed": ("value_kn", "kn", kn),
    "fin_port_feedback": ("value_deg", "deg", deg),
    "fin_stbd_feedback": ("value_deg", "deg", deg),
}


def _read_faults(top: Reader, duration: float) -> tuple[Fault, ...]:
    out = []
    for fr in top.tables("faults"):
        ch = fr.string("channel", choices=SENSOR_CHANNELS + ACTUATOR_CHANNELS)
        kinds = ACTUATOR_FAULT_KINDS if ch in ACTUATOR_CHANNELS else FAULT_KINDS
        kind = fr.string("kind", choices=kinds)
        start = fr.number("start_s", unit="s", lo=0.0)
        dur = fr.number("duration_s", unit="s", lo=0.0, lo_open=True, default=math.inf)
        value = 0.0
        if ch in _FAULT_VALUE_KEY:
            key, unit, conv = _FAULT_VALUE_KEY[ch]
            if kind in ("spike", "stuck"):
                value = fr.number(key, unit=unit, lo=-1e6, hi=1e6, si=conv)
            elif fr.has(key):
                fr.number(key, unit=unit)
                fr.error(key, fr.table[key], unit, "only used with kind = \"spike\" or \"stuck\"")
        if start == start and duration == duration and start >= duration:
            fr.warn("start_s", start, "s", f"at or after the end of the run ({duration:g} s): the fault never happens")
        fr.done()
        out.append(Fault(ch, kind, start, dur, value))
    return tuple(out)


def _read_external(top: Reader, disp_kg: float) -> tuple[ExternalMoment, ...]:
    out = []
    for er in top.tables("external_moments"):
        kind = er.string("kind", choices=("steady", "step", "gust"))
        which = er.one_of(["moment_kN_m", "heeling_arm_m", "mass_t"])
        m = math.nan
        if which == "moment_kN_m":
            m = er.number("moment_kN_m", unit="kN.m", lo=-1e7, hi=1e7, si=kilo)
        elif which == "heeling_arm_m":
            arm = er.number("heeling_arm_m", unit="m", lo=-10.0, hi=10.0)
            m = disp_kg * G * arm
        elif which == "mass_t":
            mass = er.number("mass_t", unit="t", lo=0.0, hi=1e5, si=lambda x: x * TONNE)
            shift = er.number("transverse_shift_m", unit="m", lo=-100.0, hi=100.0)
            m = mass * G * shift
        start = dur = 0.0
        if kind in ("step", "gust"):
            start = er.number("start_s", unit="s", lo=0.0)
        elif er.has("start_s"):
            er.number("start_s", unit="s")
            er.error("start_s", er.table["start_s"], "s", "a steady moment acts for the whole run; use kind = \"step\"")
        if kind == "gust":
            dur = er.number("duration_s", unit="s", lo=0.0, lo_open=True, hi=3600.0)
        elif er.has("duration_s"):
            er.number("duration_s", unit="s")
            er.error("duration_s", er.table["duration_s"], "s", "only used with kind = \"gust\"")
        er.done()
        out.append(ExternalMoment(kind, m, start, dur))
    return tuple(out)


def read_controller_ref(path: Path, problems: Problems):
    """The controller file another file names: its parameters, or ``None`` with problems added."""
    ctable = read_toml(path, problems)
    if ctable is None:
        return None
    from .controller_config import CONTROLLER_TOP_KEY, read_controller_file

    if CONTROLLER_TOP_KEY not in ctable:
        problems.add(Problem(str(path), "", NO_VALUE, "", "not a controller file (no [controller] table)"))
        return None
    return read_controller_file(path, ctable, problems)


def _read_comfort(top: Reader):
    """``[comfort]`` (optional): deck point, NORDFORSK criterion, tipping person and a second object."""
    from .comfort import NORDFORSK_NAMES, ComfortSpec

    cr = top.table_reader("comfort", required=False)
    if cr is None:
        return ComfortSpec()
    h = cr.number("deck_point_height_m", unit="m", lo=0.0, hi=60.0)
    y = cr.number("deck_point_offset_m", unit="m", lo=-30.0, hi=30.0, default=0.0)
    crit = cr.string("criterion", choices=NORDFORSK_NAMES)
    ratio = cr.number("person_tipping_ratio", lo=0.05, hi=1.0, default=0.25)
    hyst = cr.number("hysteresis_pct", unit="%", lo=0.0, hi=90.0, default=0.0)
    obj = cr.table_reader("object", required=False)
    hw, cg, mu = 0.25, 0.8, 0.5
    if obj is not None:
        hw = obj.number("half_width_m", unit="m", lo=0.01, hi=5.0)
        cg = obj.number("cg_height_m", unit="m", lo=0.01, hi=5.0)
        mu = obj.number("friction", lo=0.0, hi=2.0)
        obj.done()
    cr.done()
    try:
        return ComfortSpec(h, y, crit, ratio, hw, cg, mu, hyst / 100.0)
    except (ValueError, TypeError):  # only reachable with values already reported above
        return None


def read_scenario(path: Path, table: dict, problems: Problems) -> Scenario | None:
    top = Reader(path, table, problems)
    sr = top.table_reader("scenario")
    name = sr.string("name")
    vessel_path = sr.path_value("vessel")
    controller_path = sr.path_value("controller", default=None)
    duration = sr.number("duration_s", unit="s", lo=0.0, lo_open=True, hi=86_400.0)
    warmup = sr.number("warmup_s", unit="s", lo=0.0, default=60.0)
    seed = sr.integer("seed", lo=0, hi=2**63 - 1)
    rate = sr.number("control_rate_hz", unit="Hz", lo=1.0, hi=1000.0, default=50.0)
    substeps = sr.integer("substeps", lo=1, hi=100, default=1)
    heading = sr.number("heading_deg", unit="deg", lo=0.0, hi=360.0, hi_open=True, si=deg)
    fins_off = sr.string("fins_when_off", choices=("centred", "retracted"), default="centred")
    which_speed = sr.one_of(["speed_kn", "speed_profile"])
    times: tuple[float, ...] = (0.0,)
    speeds: tuple[float, ...] = (math.nan,)
    if which_speed == "speed_kn":
        speeds = (sr.number("speed_kn", unit="kn", lo=0.0, hi=60.0, si=kn),)
    elif which_speed == "speed_profile":
        pr = sr.table_reader("speed_profile")
        times = pr.numbers("time_s", unit="s", lo=0.0, increasing=True)
        speeds = pr.numbers("speed_kn", unit="kn", lo=0.0, hi=60.0, si=kn)
        if times and speeds and len(times) != len(speeds):
            pr.error("speed_kn", [round(s / KNOT, 3) for s in speeds], "kn", f"needs as many values as time_s ({len(times)})")
        pr.done()
    if duration == duration and warmup == warmup and warmup >= duration:
        sr.error("warmup_s", warmup, "s", f"must be shorter than duration_s = {duration:g} s")
    if rate == rate and duration == duration:
        n = duration * rate
        if abs(n - round(n)) > 1e-6:
            sr.error("duration_s", duration, "s", f"must be a whole number of control periods (1/{rate:g} s)")
    sr.done()

    sea = _read_sea(top.table_reader("sea"), duration)
    sensors = _read_sensors(top.table_reader("sensors", required=False))

    vessel = None
    if vessel_path is not None:
        vtable = read_toml(vessel_path, problems)
        if vtable is not None:
            if "vessel" not in vtable:
                problems.add(Problem(str(vessel_path), "", NO_VALUE, "", "not a vessel file (no [vessel] table)"))
            else:
                vessel = read_vessel(vessel_path, vtable, problems)
    controller = read_controller_ref(controller_path, problems) if controller_path is not None else None
    if controller is not None and rate == rate and abs(controller.dt * rate - 1.0) > 1e-9:
        sr.error("control_rate_hz", rate, "Hz",
                 f"must equal the controller's sample_rate_hz ({1.0 / controller.dt:g} Hz in {controller_path.name})")
    disp = vessel.params.displacement_kg if vessel is not None else math.nan
    external = _read_external(top, disp)
    faults = _read_faults(top, duration)
    comfort = _read_comfort(top)
    top.done()

    files: list[Path] = [Path(path)]
    if vessel_path is not None:
        files.append(vessel_path)
    if controller_path is not None:
        files.append(controller_path)
    if vessel is not None and vessel.wave_moment.rao_file is not None:
        files.append(vessel.wave_moment.rao_file)
    if sea.file is not None:
        files.append(sea.file)

    if vessel is not None and vessel.wave_moment.method == "rao_table" and heading == heading and not problems.errors:
        import numpy as np

        from plant.excitation import roll_moment_model

        try:
            roll_moment_model(vessel.wave_moment, vessel.params).transfer(np.array([1.0]), heading)
        except ValueError as exc:
            sr.error("heading_deg", sr.table["heading_deg"], "deg", f"not covered by the vessel's RAO table ({exc})")
    if problems.errors or vessel is None:
        return None
    # speed vs heading sanity: following seas faster than the waves make the encounter period huge
    setup = PlantSetup(
        vessel=vessel.params,
        fin_port=vessel.fin_port,
        fin_stbd=vessel.fin_stbd,
        actuator_port=vessel.actuator_port,
        actuator_stbd=vessel.actuator_stbd,
        duration_s=duration,
        control_dt_s=1.0 / rate,
        substeps=substeps,
        seed=seed,
        speed_times_s=tuple(times),
        speed_values_ms=tuple(speeds),
        sensors=sensors,
        external_moments=external,
        faults=faults,
        fins_when_off=fins_off,
    )
    return Scenario(name, setup, vessel, sea, heading, warmup, controller_path, controller, Path(path), tuple(files),
                    tuple(problems.warnings), comfort)


def load_scenario(path: str | Path, problems: Problems | None = None) -> Scenario:
    """Load a scenario (and the vessel it names); raises :class:`ConfigError` listing every problem."""
    problems = problems if problems is not None else Problems()
    table = read_toml(path, problems)
    sc = None
    if table is not None:
        if "scenario" not in table:
            kind = detect_kind(table)
            problems.add(Problem(str(path), "", NO_VALUE, "",
                                 f"not a scenario file (no [scenario] table{'; it looks like a ' + kind + ' file' if kind else ''})"))
        else:
            sc = read_scenario(Path(path), table, problems)
    problems.raise_if_errors()
    assert sc is not None
    return sc
