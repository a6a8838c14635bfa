"""Envelope sweeps: speeds × headings × sea states, each point off and on over the same sea.

An envelope file (``[envelope]``) names a base scenario (vessel, sensors, control rate, seed) and a
controller, and lists the grid. Every grid point is the base scenario with its speed, heading and sea
replaced; it is simulated twice with the same seed (stabiliser off, then on), so the roll reduction
compares like with like. All points use the same seed (common random numbers): differences between
points come from the point, not from a different draw of the sea.

Points run through any ``concurrent.futures.Executor`` (a process pool by default; a distributed
executor such as ``dask.distributed.Client.get_executor()`` can be passed in): the unit of work is a
top-level function of picklable arguments, :func:`run_point`.

Flags per point
---------------
- **synchronous**: the encounter period at the spectral peak, T_e = 2π/ω_e(ω_p), lies within
  ``sync_band`` (default ±20 %, our threshold) of the natural roll period: roll resonance is driven
  at the peak of the sea (the situation operational guidance warns about; e.g. IMO MSC.1/Circ.1228,
  2007, from memory).
- **saturated**: the fins spend more than ``saturation_pct`` of the time (after warm-up) at the angle,
  rate or stall/load limit: the fins run out of authority there.
"""

from __future__ import annotations

import dataclasses
import math
import os
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

from plant.constants import G, KNOT
from plant.excitation import SeaSpec, spectrum_of

from .config import Scenario, _read_sea, load_scenario, read_controller_ref
from .configio import NO_VALUE, Problem, Problems, Reader, deg, kn, read_toml

ENVELOPE_TOP_KEY = "envelope"


def _one_blas_thread() -> None:
    """Process-pool initializer: limit native thread pools (BLAS, OpenMP) to one thread."""
    from threadpoolctl import threadpool_limits

    global _LIMITS
    _LIMITS = threadpool_limits(1)  # kept alive for the worker's life


_LIMITS = None


@dataclass(frozen=True)
class SeaState:
    name: str
    sea: SeaSpec


@dataclass(frozen=True)
class Envelope:
    name: str
    base: Scenario
    controller: object  # ControllerParams
    controller_file: Path
    speeds_ms: tuple[float, ...]
    headings_rad: tuple[float, ...]
    sea_states: tuple[SeaState, ...]
    duration_s: float
    warmup_s: float
    seed: int
    sync_band: float
    saturation_pct: float
    source: Path
    files: tuple[Path, ...]

    @property
    def n_points(self) -> int:
        return len(self.speeds_ms) * len(self.headings_rad) * len(self.sea_states)


@dataclass(frozen=True)
class Point:
    index: int
    speed_ms: float
    heading_rad: float
    sea_state: SeaState


def load_envelope(path: str | Path, problems: Problems | None = None) -> Envelope:
    """Read an envelope file (and its base scenario and controller); ConfigError lists every problem."""
    problems = problems if problems is not None else Problems()
    table = read_toml(path, problems)
    env = None
    if table is not None:
        if ENVELOPE_TOP_KEY not in table:
            problems.add(Problem(str(path), "", NO_VALUE, "", "not an envelope file (no [envelope] table)"))
        else:
            env = _read_envelope(Path(path), table, problems)
    problems.raise_if_errors()
    assert env is not None
    return env


def _read_envelope(path: Path, table: dict, problems: Problems) -> Envelope | None:
    top = Reader(path, table, problems)
    er = top.table_reader(ENVELOPE_TOP_KEY)
    name = er.string("name")
    base_path = er.path_value("base_scenario")
    ctl_path = er.path_value("controller", default=None)
    speeds = er.numbers("speeds_kn", unit="kn", lo=0.0, hi=60.0, increasing=True, max_len=100, si=kn)
    headings = er.numbers("headings_deg", unit="deg", lo=0.0, hi=360.0, hi_open=True, increasing=True, max_len=72, si=deg)
    duration = er.number("duration_s", unit="s", lo=0.0, lo_open=True, hi=86_400.0, default=None)
    warmup = er.number("warmup_s", unit="s", lo=0.0, default=None)
    seed = er.integer("seed", lo=0, hi=2**63 - 1, default=None)
    sync_band = er.number("sync_band_pct", unit="%", lo=0.0, lo_open=True, hi=100.0, default=20.0) / 100.0
    sat = er.number("saturation_pct", unit="%", lo=0.0, hi=100.0, default=5.0)
    seas = []
    for sr in er.tables("sea_states", required=True):
        sname = sr.string("name")
        seas.append(SeaState(sname, _read_sea(sr, duration if duration is not None else math.nan)))
    if not seas and er.table is not None and "sea_states" in er.table:
        er.error("sea_states", er.table["sea_states"], "", "needs at least one [[envelope.sea_states]] table")
    names = [s.name for s in seas]
    if len(set(names)) != len(names):
        er.error("sea_states", names, "", "sea state names must be unique")
    for s in seas:
        if s.sea.kind not in ("pierson_moskowitz", "ittc", "jonswap"):
            er.error("sea_states", s.name, "", f"sea state {s.name!r}: a sweep needs an irregular-sea spectrum (pierson_moskowitz, ittc or jonswap), got {s.sea.kind!r}")
    top.done()
    er.done()
    base = controller = None
    if base_path is not None:
        try:
            base = load_scenario(base_path)
        except Exception as exc:  # ConfigError: fold its problems into ours
            for p in getattr(exc, "problems", []):
                problems.add(p)
            if not getattr(exc, "problems", None):
                raise
    if ctl_path is not None:
        controller = read_controller_ref(ctl_path, problems)
    elif base is not None:
        controller, ctl_path = base.controller, base.controller_file
        if controller is None:
            er.error("controller", NO_VALUE, "", f"missing: the base scenario {base_path} names no controller either")
    if problems.errors or base is None or controller is None:
        return None
    dur = base.setup.duration_s if duration is None else duration
    wu = base.warmup_s if warmup is None else warmup
    rate = 1.0 / base.setup.control_dt_s
    if abs(round(dur * rate) - dur * rate) > 1e-6:
        er.error("duration_s", dur, "s", f"must be a whole number of control periods (1/{rate:g} s)")
    if wu >= dur:
        er.error("warmup_s", wu, "s", f"must be shorter than the duration ({dur:g} s)")
    if abs(controller.dt * rate - 1.0) > 1e-9:
        er.error("controller", str(ctl_path), "", f"controller sample rate {1 / controller.dt:g} Hz differs from the base scenario's control rate {rate:g} Hz")
    if problems.errors:
        return None
    files = (path, *base.files, *((ctl_path,) if ctl_path not in base.files else ()))
    return Envelope(name, base, controller, ctl_path, tuple(speeds), tuple(headings), tuple(seas), dur, wu,
                    base.setup.seed if seed is None else seed, sync_band, sat, path, files)


def points(env: Envelope) -> list[Point]:
    """The grid in a fixed order: sea state, then speed, then heading."""
    out = []
    for s in env.sea_states:
        for u in env.speeds_ms:
            for b in env.headings_rad:
                out.append(Point(len(out), u, b, s))
    return out


def point_scenario(env: Envelope, pt: Point) -> Scenario:
    """The base scenario with this point's speed, heading, sea and duration."""
    setup = dataclasses.replace(
        env.base.setup, duration_s=env.duration_s, speed_times_s=(0.0,), speed_values_ms=(pt.speed_ms,), seed=env.seed
    )
    return dataclasses.replace(
        env.base, name=f"{env.name}: {pt.sea_state.name}, {pt.speed_ms / KNOT:g} kn, {math.degrees(pt.heading_rad):g} deg",
        setup=setup, sea=pt.sea_state.sea, heading_rad=pt.heading_rad, warmup_s=env.warmup_s,
    )


def encounter_period_at_peak_s(sea: SeaSpec, speed_ms: float, heading_rad: float) -> float:
    """T_e = 2π/|ω_e| at the spectral peak, ω_e = ω_p − ω_p² U cosβ / g (deep water; DESIGN §4)."""
    sp = spectrum_of(sea)
    wp = 2.0 * math.pi / sp.tp
    we = abs(wp - wp * wp * speed_ms * math.cos(heading_rad) / G)
    return 2.0 * math.pi / we if we > 0.0 else math.inf


def run_point(env: Envelope, pt: Point) -> dict:
    """Simulate one grid point off and on (same seed); return one flat result row (trade units)."""
    from .cli import run_metrics
    from .closed_loop import run_closed_loop
    from .metrics import roll_reduction_pct
    from .simulate import run_passive

    sc = point_scenario(env, pt)
    off = run_passive(sc, env.seed)
    on = run_closed_loop(sc, env.controller, env.seed)
    m_off = run_metrics(off, sc)
    m_on = run_metrics(on, sc)
    t0 = env.base.vessel.params.natural_period_s
    te = encounter_period_at_peak_s(pt.sea_state.sea, pt.speed_ms, pt.heading_rad)
    ratio = te / t0
    sat = max(m_on["time_at_angle_limit_pct"], m_on["time_at_rate_limit_pct"], m_on["time_at_stall_or_load_limit_pct"])
    row = {
        "index": pt.index,
        "sea_state": pt.sea_state.name,
        "hs_m": pt.sea_state.sea.hs_m,
        "tp_s": spectrum_of(pt.sea_state.sea).tp,
        "speed_kn": pt.speed_ms / KNOT,
        "heading_deg": math.degrees(pt.heading_rad),
        "roll_std_off_deg": m_off["roll_std_deg"],
        "roll_std_on_deg": m_on["roll_std_deg"],
        "roll_rms_off_deg": m_off["roll_rms_deg"],
        "roll_rms_on_deg": m_on["roll_rms_deg"],
        "roll_sig_amp_on_deg": m_on["roll_sig_amp_deg"],
        "roll_max_on_deg": m_on["roll_max_deg"],
        "roll_reduction_pct": roll_reduction_pct(m_off, m_on),
        "fin_rms_deg": m_on["fin_rms_deg"],
        "fin_max_deg": m_on["fin_max_deg"],
        "fin_rate_rms_deg_s": m_on["fin_rate_rms_deg_s"],
        "time_at_angle_limit_pct": m_on["time_at_angle_limit_pct"],
        "time_at_rate_limit_pct": m_on["time_at_rate_limit_pct"],
        "time_at_stall_or_load_limit_pct": m_on["time_at_stall_or_load_limit_pct"],
        "fin_drag_power_kw": m_on["fin_drag_power_kw"],
        "lateral_accel_rms_on_g": m_on.get("lateral_accel_rms_g", math.nan),
        "mii_on_per_min": m_on.get("mii_per_min", math.nan),
        "encounter_period_peak_s": te,
        "encounter_to_roll_period_ratio": ratio,
        "synchronous": bool(abs(ratio - 1.0) <= env.sync_band),
        "saturated": bool(sat > env.saturation_pct),
        "stopped_early": "; ".join(e for e in (off.error, on.error) if e) or "",
    }
    return row


def run_sweep(env: Envelope, executor: Executor | None = None, workers: int | None = None, progress=None) -> list[dict]:
    """Run every point; rows come back in grid order.

    ``executor``: any ``concurrent.futures.Executor`` (not shut down here); default a process pool
    of ``workers`` processes (default: the number of CPUs), or in-process when ``workers == 1``.
    ``progress(done, total)`` is called after each point.
    """
    pts = points(env)
    rows: list[dict | None] = [None] * len(pts)
    if executor is None and workers == 1:
        for i, pt in enumerate(pts):
            rows[i] = run_point(env, pt)
            if progress:
                progress(i + 1, len(pts))
        return rows  # type: ignore[return-value]
    own = executor is None
    # One BLAS thread per worker (threadpoolctl): numpy's BLAS would otherwise run a thread per core
    # in every worker and the workers would fight over the cores (measured on 2 cores: two workers
    # 1.25× the speed of one without this, 1.8× with it).
    ex = executor if executor is not None else ProcessPoolExecutor(
        max_workers=workers or os.cpu_count() or 1, initializer=_one_blas_thread)
    try:
        futs = {ex.submit(run_point, env, pt): pt.index for pt in pts}
        done = 0
        for fut in as_completed(futs):
            rows[futs[fut]] = fut.result()
            done += 1
            if progress:
                progress(done, len(pts))
    finally:
        if own:
            ex.shutdown(cancel_futures=True)
    return rows  # type: ignore[return-value]


def write_sweep_csv(path: Path, rows: list[dict]) -> list[str]:
    import csv

    header = list(rows[0].keys())
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([(f"{v:.6g}" if isinstance(v, float) else v) for v in r.values()])
    return header


def plot_sweep(folder: Path, rows: list[dict], env: Envelope) -> list[Path]:
    """Polar plots per sea state: roll reduction and residual roll (on) against heading, one line per speed."""
    import numpy as np

    from .plots import _pyplot

    plt = _pyplot()
    out = []
    for s in env.sea_states:
        sub = [r for r in rows if r["sea_state"] == s.name]
        for key, label, fname in (
            ("roll_reduction_pct", "roll reduction, %", "polar_roll_reduction"),
            ("roll_std_on_deg", "residual roll σ (on), deg", "polar_residual_roll"),
        ):
            fig = plt.figure(figsize=(7, 7))
            ax = fig.add_subplot(projection="polar")
            ax.set_theta_zero_location("S")  # 0° = following seas from astern: waves from below on the plot
            ax.set_theta_direction(-1)
            for u in env.speeds_ms:
                pts = sorted((r for r in sub if abs(r["speed_kn"] - u / KNOT) < 1e-9), key=lambda r: r["heading_deg"])
                th = np.radians([r["heading_deg"] for r in pts])
                val = np.array([r[key] for r in pts], dtype=float)
                ax.plot(th, np.clip(val, 0.0, None) if key == "roll_reduction_pct" else val, marker="o", ms=3,
                        label=f"{u / KNOT:g} kn")
                for r, t_, v in zip(pts, th, val):
                    if r["synchronous"]:
                        ax.plot([t_], [max(v, 0.0)], marker="s", mfc="none", mec="r", ms=9)
                    if r["saturated"]:
                        ax.plot([t_], [max(v, 0.0)], marker="x", color="k", ms=7)
            ax.set_title(f"{env.name} — {s.name}\n{label} vs wave heading (0° following, 90° beam from stbd)\n"
                         "red square: synchronous rolling risk; x: fins saturated", fontsize=9)
            ax.legend(loc="lower left", bbox_to_anchor=(-0.1, -0.12), fontsize=8, ncol=3)
            fig.tight_layout()
            safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in s.name)
            p = folder / f"{fname}_{safe}.png"
            fig.savefig(p, dpi=110)
            plt.close(fig)
            out.append(p)
    return out
