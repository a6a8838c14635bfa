"""Loading and validating controller files (``[controller]``, trade units → SI ``ControllerParams``).

Every problem in a file is reported at once, one line each (``FILE: key.path = value unit: what is
wrong (allowed range)``), through :class:`hil.configio.ConfigError`.

Schema (all tables under ``[controller]``; every key required unless marked optional)::

    [controller]
    name = "..."                       # optional
    sample_rate_hz = 50                # control rate; dt = 1/rate
    roll_rate_source = "sensor"        # or "derivative" (filtered derivative of roll)
    allow_negative_gains = false       # optional; true accepts gains of either sign

    [controller.fin]                   # what the controller knows of each fin
    area_m2, lift_slope_per_rad, lever_arm_m, rated_lift_kN, water_density_kg_m3, stall_angle_deg

    [controller.gains]                 # at the reference speed; positive = restoring
    roll                               # deg fin per deg roll
    roll_rate_s                        # deg fin per deg/s of roll rate
    roll_accel_s2                      # deg fin per deg/s² of roll acceleration
    trim_min_pct, trim_max_pct         # operator gain-trim range (must bracket 100 %)

    [controller.schedule]
    rule = "speed_squared"             # K(U) = K·(U_ref/U)², U clamped to [min, max]; or "table"
    reference_speed_kn
    min_speed_kn, max_speed_kn         # rule "speed_squared" only
    speeds_kn, factors                 # rule "table" only: gain factor at each speed (linear between)
    speed_filter_s                     # time constant of the speed low-pass

    [controller.cutout]
    cutout_speed_kn, reengage_speed_kn, dwell_s, fade_s

    [controller.limits]
    angle_deg, rate_deg_s, stall_margin_deg

    [controller.filters]
    lowpass_hz                         # 2nd-order Butterworth on roll and roll rate
    notch_hz, notch_q                  # optional notch against hull vibration
    derivative_s                       # optional (default 0.1): roll-to-rate derivative time constant
    accel_s                            # roll acceleration estimate time constant

    [controller.signals]               # plausibility checks on the inputs
    roll_range_deg, roll_rate_range_deg_s, roll_step_max_deg, max_age_s,
    speed_range_kn, speed_step_max_kn, speed_max_age_s

    [controller.faults]
    debounce_steps, speed_hold_s, tracking_error_deg, tracking_time_s, feedback_range_deg

    [controller.heel_trim]
    gain_per_s                         # deg fin per (deg heel · s)
    authority_deg, filter_s

    [controller.bench]                 # optional table
    at_any_speed = false               # true only when the controller runs on a test rig
"""

from __future__ import annotations

import math
from pathlib import Path

from controller import ANGLE_LIMIT_MAX, TABLE_MAX, ControllerParams

from .configio import NO_VALUE, ConfigError, Problem, Problems, Reader, deg, kilo, kn, pct, read_toml

__all__ = [
    "CONTROLLER_TOP_KEY",
    "load_controller",
    "read_controller",
    "read_controller_file",
    "ConfigError",
]

CONTROLLER_TOP_KEY = "controller"
"""Top-level table that marks a controller file."""

_ANGLE_MAX_DEG = math.degrees(ANGLE_LIMIT_MAX)



def _ok(*xs) -> bool:
    return all(isinstance(x, float) and math.isfinite(x) for x in xs)


def _gain(r: Reader, key: str, unit: str, hi: float, allow_negative: bool) -> float:
    """A feedback gain in [−hi, hi]; negative values only with ``allow_negative_gains``."""
    v = r.number(key, unit=unit, lo=-hi, hi=hi)
    if _ok(v) and v < 0.0 and not allow_negative:
        r.error(
            key, r.table[key], unit,
            f"negative gain is not restoring (allowed [0, {hi:g}]{' ' + unit if unit else ''}; "
            f"set controller.allow_negative_gains = true to accept it)",
        )  # fmt: skip
        return math.nan
    return v


def read_controller(r: Reader) -> ControllerParams | None:
    """Read the ``[controller]`` table (``r``) into parameters; ``None`` when it has errors.

    Problems go to ``r.problems``; the caller raises (``Problems.raise_if_errors``).
    """
    if r.table is None:  # missing or not a table: already reported by whoever asked for it
        return None
    before = len(r.problems.errors)
    r.string("name", default="")
    rate_hz = r.number("sample_rate_hz", unit="Hz", lo=1.0, hi=1000.0)
    dt = 1.0 / rate_hz if _ok(rate_hz) else math.nan
    source = r.string("roll_rate_source", choices=("sensor", "derivative"))
    allow_neg = r.boolean("allow_negative_gains", default=False)

    # -- fin -------------------------------------------------------------------------------------
    fr = r.table_reader("fin")
    area = fr.number("area_m2", unit="m2", lo=0.1, hi=100.0)
    slope = fr.number("lift_slope_per_rad", unit="1/rad", lo=0.1, hi=2.0 * math.pi)
    arm = fr.number("lever_arm_m", unit="m", lo=0.5, hi=60.0)
    rated = fr.number("rated_lift_kN", unit="kN", lo=1.0, hi=50_000.0, si=kilo)
    rho = fr.number("water_density_kg_m3", unit="kg/m3", lo=990.0, hi=1050.0)
    stall = fr.number("stall_angle_deg", unit="deg", lo=5.0, hi=_ANGLE_MAX_DEG, si=deg)
    fr.done()

    # -- gains -----------------------------------------------------------------------------------
    gr = r.table_reader("gains")
    k_roll = _gain(gr, "roll", "deg/deg", 50.0, allow_neg)
    k_rate = _gain(gr, "roll_rate_s", "s", 200.0, allow_neg)
    k_accel = _gain(gr, "roll_accel_s2", "s2", 200.0, allow_neg)
    tmin = gr.number("trim_min_pct", unit="%", lo=0.0, hi=100.0, si=pct)
    tmax = gr.number("trim_max_pct", unit="%", lo=100.0, hi=300.0, si=pct)
    if _ok(k_roll, k_rate, k_accel) and k_roll == 0.0 and k_rate == 0.0 and k_accel == 0.0:
        gr.warn("roll_rate_s", 0.0, "s", "every feedback gain is zero: the fins will not act")
    gr.done()

    # -- schedule --------------------------------------------------------------------------------
    sr = r.table_reader("schedule")
    rule = sr.string("rule", choices=("speed_squared", "table"))
    u_ref = sr.number("reference_speed_kn", unit="kn", lo=1.0, hi=50.0, si=kn)
    u_min = u_max = math.nan  # only with rule "speed_squared"
    speeds: tuple[float, ...] = ()
    factors: tuple[float, ...] = ()
    table_keys = ("speeds_kn", "factors")
    rule_keys = ("min_speed_kn", "max_speed_kn")
    if rule == "speed_squared":
        u_min = sr.number("min_speed_kn", unit="kn", lo=0.5, hi=50.0, si=kn)
        u_max = sr.number("max_speed_kn", unit="kn", lo=0.5, hi=60.0, si=kn)
        if _ok(u_min, u_max) and not u_min < u_max:
            sr.error("max_speed_kn", sr.table["max_speed_kn"], "kn",
                     f"must be above min_speed_kn = {sr.table['min_speed_kn']!r} kn")
        if _ok(u_min, u_max, u_ref) and not u_min <= u_ref <= u_max:
            sr.warn("reference_speed_kn", sr.table["reference_speed_kn"], "kn",
                    "outside [min_speed_kn, max_speed_kn]: the gains are never used as written")
        for k in table_keys:
            sr.known(k)
            if sr.has(k):
                sr.error(k, sr.table[k], "", 'only used with rule = "table"')
    elif rule == "table":
        speeds = sr.numbers("speeds_kn", unit="kn", lo=0.0, hi=60.0, min_len=2, max_len=TABLE_MAX,
                            increasing=True, si=kn)
        factors = sr.numbers("factors", lo=0.0, hi=100.0, min_len=2, max_len=TABLE_MAX)
        if speeds and factors and len(speeds) != len(factors):
            sr.error("factors", list(sr.table["factors"]), "",
                     f"needs as many values as speeds_kn ({len(speeds)}), got {len(factors)}")
        elif speeds and factors and _ok(u_ref):
            probe = ControllerParams.speed_factor_table(speeds, factors, u_ref)
            if abs(probe - 1.0) > 0.05:
                sr.warn("factors", list(sr.table["factors"]), "",
                        f"factor at reference_speed_kn is {probe:.3g}, not 1: the gains are not "
                        "the gains at the reference speed")
        for k in rule_keys:
            sr.known(k)
            if sr.has(k):
                sr.error(k, sr.table[k], "kn", 'only used with rule = "speed_squared"')
    speed_tau = sr.number("speed_filter_s", unit="s", lo=0.05, hi=120.0)
    sr.done()

    # -- cut-out ---------------------------------------------------------------------------------
    cr = r.table_reader("cutout")
    u_cut = cr.number("cutout_speed_kn", unit="kn", lo=0.0, hi=30.0, si=kn)
    u_re = cr.number("reengage_speed_kn", unit="kn", lo=0.0, hi=30.0, si=kn)
    dwell = cr.number("dwell_s", unit="s", lo=0.0, hi=600.0)
    fade = cr.number("fade_s", unit="s", lo=0.0, lo_open=True, hi=600.0)
    if _ok(u_cut, u_re) and not u_cut < u_re:
        cr.error("reengage_speed_kn", cr.table["reengage_speed_kn"], "kn",
                 f"must be above cutout_speed_kn = {cr.table['cutout_speed_kn']!r} kn (hysteresis)")
    if _ok(fade, dt) and fade < dt:
        cr.error("fade_s", cr.table["fade_s"], "s", f"must be at least one control step ({dt:g} s)")
    cr.done()

    # -- limits ----------------------------------------------------------------------------------
    lr = r.table_reader("limits")
    angle = lr.number("angle_deg", unit="deg", lo=0.0, lo_open=True, hi=_ANGLE_MAX_DEG, si=deg)
    rate = lr.number("rate_deg_s", unit="deg/s", lo=0.0, lo_open=True, hi=200.0, si=deg)
    margin = lr.number("stall_margin_deg", unit="deg", lo=0.0, hi=20.0, si=deg)
    if _ok(margin, stall) and not margin < stall:
        lr.error("stall_margin_deg", lr.table["stall_margin_deg"], "deg",
                 f"must be below fin.stall_angle_deg = {math.degrees(stall):g} deg")
    lr.done()

    # -- filters ---------------------------------------------------------------------------------
    flt = r.table_reader("filters")
    nyq = 0.5 * rate_hz if _ok(rate_hz) else None
    # upper bounds follow the sample rate: 0.9 × Nyquist for the low-pass, below Nyquist for the notch
    lp_hz = flt.number("lowpass_hz", unit="Hz", lo=0.0, lo_open=True, hi=0.9 * nyq if nyq else 450.0,
                       warn_lo=0.5, warn_why="adds phase lag at roll frequencies")
    notch_hz = flt.number("notch_hz", unit="Hz", lo=0.0, hi=nyq if nyq else 500.0, hi_open=True, default=0.0)
    notch_q = 2.0
    if _ok(notch_hz) and notch_hz > 0.0:
        notch_q = flt.number("notch_q", lo=0.5, hi=50.0)
    elif flt.has("notch_q"):
        notch_q = flt.number("notch_q", lo=0.5, hi=50.0)
    deriv = flt.number("derivative_s", unit="s", lo=0.001, hi=5.0, default=0.1)
    accel = flt.number("accel_s", unit="s", lo=0.001, hi=5.0)
    flt.done()

    # -- signal plausibility ---------------------------------------------------------------------
    sg = r.table_reader("signals")
    roll_range = sg.number("roll_range_deg", unit="deg", lo=1.0, hi=90.0, si=deg)
    rate_range = sg.number("roll_rate_range_deg_s", unit="deg/s", lo=1.0, hi=180.0, si=deg)
    roll_jump = sg.number("roll_step_max_deg", unit="deg", lo=0.01, hi=90.0, si=deg)
    max_age = sg.number("max_age_s", unit="s", lo=0.001, hi=10.0)
    speed_range = sg.number("speed_range_kn", unit="kn", lo=1.0, hi=60.0, si=kn)
    speed_jump = sg.number("speed_step_max_kn", unit="kn", lo=0.01, hi=60.0, si=kn)
    speed_age = sg.number("speed_max_age_s", unit="s", lo=0.01, hi=600.0)
    if _ok(roll_jump, rate_range, dt) and roll_jump < rate_range * dt:
        sg.warn("roll_step_max_deg", sg.table["roll_step_max_deg"], "deg",
                f"below roll_rate_range × step ({math.degrees(rate_range * dt):.3g} deg): "
                "genuine fast rolling would be flagged implausible")
    if _ok(max_age, dt) and max_age < dt:
        sg.warn("max_age_s", sg.table["max_age_s"], "s", f"shorter than one control step ({dt:g} s)")
    sg.done()

    # -- faults ----------------------------------------------------------------------------------
    fa = r.table_reader("faults")
    debounce = fa.integer("debounce_steps", lo=1, hi=1000)
    hold = fa.number("speed_hold_s", unit="s", lo=0.0, hi=600.0)
    trk = fa.number("tracking_error_deg", unit="deg", lo=0.1, hi=90.0, si=deg)
    trk_t = fa.number("tracking_time_s", unit="s", lo=0.0, hi=600.0)
    fb_range = fa.number("feedback_range_deg", unit="deg", lo=1.0, hi=90.0, si=deg)
    if _ok(fb_range, angle) and fb_range < angle:
        fa.error("feedback_range_deg", fa.table["feedback_range_deg"], "deg",
                 f"must be at least limits.angle_deg = {math.degrees(angle):g} deg")
    fa.done()

    # -- heel trim -------------------------------------------------------------------------------
    hr = r.table_reader("heel_trim")
    heel_gain = _gain(hr, "gain_per_s", "1/s", 10.0, allow_neg)
    heel_auth = hr.number("authority_deg", unit="deg", lo=0.0, hi=_ANGLE_MAX_DEG, si=deg)
    heel_tau = hr.number("filter_s", unit="s", lo=0.1, hi=3600.0)
    if _ok(heel_auth, angle) and heel_auth > angle:
        hr.error("authority_deg", hr.table["authority_deg"], "deg",
                 f"must not exceed limits.angle_deg = {math.degrees(angle):g} deg")
    hr.done()

    # -- bench -----------------------------------------------------------------------------------
    br = r.table_reader("bench", required=False)
    bench_any = False
    if br is not None:
        bench_any = br.boolean("at_any_speed", default=False)
        br.done()
    r.done()

    if len(r.problems.errors) > before:
        return None
    clamp = {} if rule == "table" else {"u_min": u_min, "u_max": u_max}
    try:
        return ControllerParams(
            dt=dt, rate_source=source, allow_negative_gains=allow_neg,
            k_roll=k_roll, k_rate=k_rate, k_accel=k_accel, trim_min=tmin, trim_max=tmax,
            schedule_table=(rule == "table"), u_ref=u_ref, **clamp,
            table_speeds=speeds, table_factors=factors, speed_tau=speed_tau,
            u_cutout=u_cut, u_reengage=u_re, dwell=dwell, fade=fade,
            angle_limit=angle, rate_limit=rate, stall_margin=margin,
            fin_area=area, lift_slope=slope, lever_arm=arm, rated_lift=rated, rho=rho, stall_angle=stall,
            lowpass_hz=lp_hz, notch_hz=notch_hz, notch_q=notch_q, derivative_tau=deriv, accel_tau=accel,
            roll_range=roll_range, rate_range=rate_range, roll_jump=roll_jump, max_age=max_age,
            speed_range=speed_range, speed_jump=speed_jump, speed_max_age=speed_age,
            debounce_steps=debounce, speed_hold=hold, tracking_error=trk, tracking_time=trk_t,
            feedback_range=fb_range, heel_gain=heel_gain, heel_authority=heel_auth, heel_tau=heel_tau,
            bench_any_speed=bench_any,
        )  # fmt: skip
    except ValueError as exc:  # a combination the checks above missed: still one line per problem
        for line in str(exc).splitlines()[1:]:
            r.problems.add(Problem(r.file, r.prefix or CONTROLLER_TOP_KEY, NO_VALUE, "", line.strip()))
        return None


def read_controller_file(path: str | Path, table: dict | None, problems: Problems) -> ControllerParams | None:
    """Read a parsed controller file (the whole TOML document); ``None`` when it has errors."""
    top = Reader(path, table, problems)
    params = read_controller(top.table_reader(CONTROLLER_TOP_KEY))
    top.done()
    return params if not problems.errors else None


def load_controller(path: str | Path, problems: Problems | None = None) -> ControllerParams:
    """Load a controller file; raises :class:`ConfigError` listing every problem at once."""
    problems = problems if problems is not None else Problems()
    table = read_toml(path, problems)
    params = read_controller_file(path, table, problems) if table is not None else None
    problems.raise_if_errors()
    assert params is not None
    return params
