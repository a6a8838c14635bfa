"""Controller parameters: one frozen object, SI units, checked and designed once.

:class:`ControllerParams` holds what an engineer tunes (gains, schedule, limits, filters, fault
thresholds, what the controller knows of its fins). Building one checks every field (``ValueError``
listing every problem) and designs the discrete filters for the sample period ``dt``; the step
never re-checks or re-designs anything. Files are read by :mod:`hil.controller_config`, which
reports problems with file, key, value, unit and allowed range; the checks here are the last line
for parameters built in code.

Sign convention (DEVELOPERS.md): the law computes one roll command δ (rad) and demands
α_stbd = +δ, α_port = −δ. Positive gains are restoring: a starboard-down roll (φ > 0) gives δ > 0,
which lifts the starboard side.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from .filters import (
    IDENTITY,
    butter2_lowpass,
    dirty_derivative,
    first_order_hold_gain,
    notch,
)

__all__ = ["ControllerParams", "KNOT", "ANGLE_LIMIT_MAX", "TABLE_MAX", "U_FLOOR"]

KNOT = 1852.0 / 3600.0
"""One knot in m/s (the controller imports nothing of ours, so it keeps its own copy)."""

_D = math.pi / 180.0

ANGLE_LIMIT_MAX = 45.0 * _D
"""Largest mechanical angle limit accepted (rad): beyond this a fin is a brake, not a stabiliser."""

RATE_LIMIT_MAX = 200.0 * _D
"""Largest slew-rate limit accepted (rad/s)."""

TABLE_MAX = 16
"""Most rows in a gain-schedule table (bounds the look-up in the step)."""

U_FLOOR = 0.1
"""Speed (m/s) below which the stall and load limits use this value (avoids dividing by zero)."""

RATE_SOURCES = ("sensor", "derivative")


def _steps(seconds: float, dt: float) -> int:
    """Whole steps covering ``seconds`` (at least 0); exact multiples are not rounded up."""
    return max(0, math.ceil(seconds / dt - 1e-9))


@dataclass(frozen=True, slots=True)
class ControllerParams:
    """Everything the step needs, in SI units. Build once; share freely (immutable).

    Angles in rad, rates in rad/s, speeds in m/s, times in s, lift in N, area in m², density in
    kg/m³. Gains: δ per unit of the fed-back signal at the reference speed (``k_roll`` rad/rad,
    ``k_rate`` rad/(rad/s) = s, ``k_accel`` rad/(rad/s²) = s²); ``heel_gain`` rad of δ per rad of
    heel per second.
    """

    dt: float = 0.02
    rate_source: str = "sensor"  # "sensor": roll rate from the motion sensor; "derivative": from roll
    allow_negative_gains: bool = False

    # law (gains at the reference speed) and operator gain trim range (fractions, 1.0 = nominal)
    k_roll: float = 0.5
    k_rate: float = 4.0
    k_accel: float = 0.2
    trim_min: float = 0.0
    trim_max: float = 1.5

    # speed schedule: factor s(U) multiplies every gain
    schedule_table: bool = False  # False: s = (u_ref/U)² with U clamped to [u_min, u_max]
    u_ref: float = 20.0 * KNOT
    u_min: float = 8.0 * KNOT
    u_max: float = 24.0 * KNOT
    table_speeds: tuple[float, ...] = ()
    table_factors: tuple[float, ...] = ()
    speed_tau: float = 2.0  # speed filter time constant

    # low-speed cut-out with hysteresis
    u_cutout: float = 6.0 * KNOT
    u_reengage: float = 7.0 * KNOT
    dwell: float = 5.0
    fade: float = 3.0

    # limits
    angle_limit: float = 25.0 * _D
    rate_limit: float = 22.0 * _D
    stall_margin: float = 2.0 * _D

    # what the controller knows of each fin
    fin_area: float = 8.0
    lift_slope: float = 1.97
    lever_arm: float = 10.0
    rated_lift: float = 350e3
    rho: float = 1026.0
    stall_angle: float = 24.0 * _D

    # filters
    lowpass_hz: float = 2.0
    notch_hz: float = 0.0  # 0 = no notch
    notch_q: float = 2.0
    derivative_tau: float = 0.1
    accel_tau: float = 0.25

    # signal checks
    roll_range: float = 40.0 * _D
    rate_range: float = 30.0 * _D
    roll_jump: float = 2.0 * _D  # largest plausible change of roll between two steps
    max_age: float = 0.1
    speed_range: float = 40.0 * KNOT
    speed_jump: float = 2.0 * KNOT  # largest plausible change between two speed samples
    speed_max_age: float = 3.0

    # faults
    debounce_steps: int = 3
    speed_hold: float = 10.0
    tracking_error: float = 5.0 * _D
    tracking_time: float = 1.0
    feedback_range: float = 30.0 * _D

    # heel trim (slow integral of low-passed roll)
    heel_gain: float = 0.05
    heel_authority: float = 4.0 * _D
    heel_tau: float = 10.0

    # bench mode allowed at any speed (controller on a test rig)
    bench_any_speed: bool = False

    # ---- derived at construction (not arguments) ----
    n_fade: int = field(init=False, repr=False, compare=False)
    n_dwell: int = field(init=False, repr=False, compare=False)
    n_hold: int = field(init=False, repr=False, compare=False)
    n_track: int = field(init=False, repr=False, compare=False)
    lowpass: tuple = field(init=False, repr=False, compare=False)
    notch_coef: tuple = field(init=False, repr=False, compare=False)
    deriv_coef: tuple = field(init=False, repr=False, compare=False)
    accel_coef: tuple = field(init=False, repr=False, compare=False)
    c_speed: float = field(init=False, repr=False, compare=False)
    c_heel: float = field(init=False, repr=False, compare=False)
    packed: tuple = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        problems = self.problems()
        if problems:
            raise ValueError("invalid controller parameters:\n  " + "\n  ".join(problems))
        dt = float(self.dt)
        fs = 1.0 / dt
        s = object.__setattr__
        s(self, "n_fade", max(1, _steps(self.fade, dt)))
        s(self, "n_dwell", _steps(self.dwell, dt))
        s(self, "n_hold", _steps(self.speed_hold, dt))
        s(self, "n_track", _steps(self.tracking_time, dt))
        s(self, "lowpass", butter2_lowpass(self.lowpass_hz, fs))
        s(self, "notch_coef", notch(self.notch_hz, self.notch_q, fs) if self.notch_hz > 0 else IDENTITY)
        s(self, "deriv_coef", dirty_derivative(self.derivative_tau, dt))
        s(self, "accel_coef", dirty_derivative(self.accel_tau, dt))
        s(self, "c_speed", first_order_hold_gain(self.speed_tau, dt))
        s(self, "c_heel", first_order_hold_gain(self.heel_tau, dt))
        # one tuple for the step to unpack in a single operation (order = law._step's unpacking)
        s(
            self,
            "packed",
            (
                dt,
                self.rate_source == "derivative",
                self.k_roll,
                self.k_rate,
                self.k_accel,
                self.trim_min,
                self.trim_max,
                self.schedule_table,
                self.u_ref,
                self.u_min,
                self.u_max,
                tuple(self.table_speeds),
                tuple(self.table_factors),
                self.c_speed,
                self.u_cutout,
                self.u_reengage,
                self.n_dwell,
                self.n_fade,
                self.angle_limit,
                self.rate_limit * dt,
                self.stall_angle - self.stall_margin,
                self.rated_lift / (0.5 * self.rho * self.fin_area * self.lift_slope),
                self.lever_arm,
                self.lowpass,
                self.notch_coef,
                self.deriv_coef,
                self.accel_coef,
                self.roll_range,
                self.rate_range,
                self.roll_jump,
                self.max_age,
                self.speed_range,
                self.speed_jump,
                self.speed_max_age,
                int(self.debounce_steps),
                self.n_hold,
                self.tracking_error,
                self.n_track,
                self.feedback_range,
                self.heel_gain * dt,
                self.heel_authority,
                self.c_heel,
                self.heel_authority / self.n_fade,
                self.bench_any_speed,
            ),
        )

    # ------------------------------------------------------------------------------------------
    def load_limit_angle(self, speed: float) -> float:
        """Largest fin angle (rad) whose lift stays at the rated lift at ``speed`` (m/s).

        α_load = L_rated / (½ ρ U² A CLα), with U floored at :data:`U_FLOOR`.
        """
        u = max(float(speed), U_FLOOR)
        return self.rated_lift / (0.5 * self.rho * u * u * self.fin_area * self.lift_slope)

    def speed_factor(self, speed: float) -> float:
        """Gain factor s(U) of the schedule at ``speed`` (m/s) (same rule the step applies)."""
        u = max(float(speed), 0.0)
        if self.schedule_table:
            return self.speed_factor_table(self.table_speeds, self.table_factors, u)
        uc = min(max(u, self.u_min), self.u_max)
        return (self.u_ref / uc) ** 2

    @staticmethod
    def speed_factor_table(speeds, factors, speed: float) -> float:
        """Linear interpolation in a (speed, factor) table, held constant beyond either end."""
        xs, ys, u = speeds, factors, float(speed)
        if u <= xs[0]:
            return ys[0]
        for i in range(1, len(xs)):
            if u <= xs[i]:
                return ys[i - 1] + (ys[i] - ys[i - 1]) * (u - xs[i - 1]) / (xs[i] - xs[i - 1])
        return ys[-1]

    def fin_moment_per_rad(self, speed: float) -> float:
        """Roll moment magnitude of the fin pair per rad of δ at ``speed``: 2 r_f ½ρU²A CLα (N·m/rad)."""
        u = float(speed)
        return 2.0 * self.lever_arm * 0.5 * self.rho * u * u * self.fin_area * self.lift_slope

    # ------------------------------------------------------------------------------------------
    def problems(self) -> list[str]:
        """Every problem with these values, one line each (empty when all is well)."""
        out: list[str] = []

        def num(name: str, lo: float | None = None, hi: float | None = None, *, lo_open=False, hi_open=False):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                out.append(f"{name} = {v!r}: expected a finite number")
                return None
            if lo is not None and (v < lo or (lo_open and v == lo)):
                out.append(f"{name} = {v!r}: must be {'>' if lo_open else '>='} {lo:g}")
                return None
            if hi is not None and (v > hi or (hi_open and v == hi)):
                out.append(f"{name} = {v!r}: must be {'<' if hi_open else '<='} {hi:g}")
                return None
            return float(v)

        dt = num("dt", 1e-4, 1.0)
        if self.rate_source not in RATE_SOURCES:
            out.append(f"rate_source = {self.rate_source!r}: expected one of {', '.join(RATE_SOURCES)}")
        for name in ("allow_negative_gains", "schedule_table", "bench_any_speed"):
            if not isinstance(getattr(self, name), bool):
                out.append(f"{name} = {getattr(self, name)!r}: expected True or False")
        glo = None if self.allow_negative_gains is True else 0.0
        for name, bound in (("k_roll", 50.0), ("k_rate", 200.0), ("k_accel", 200.0), ("heel_gain", 10.0)):
            num(name, glo if glo is not None else -bound, bound)
        tmin = num("trim_min", 0.0, 10.0)
        tmax = num("trim_max", 0.0, 10.0)
        if tmin is not None and tmax is not None and not tmin <= 1.0 <= tmax:
            out.append(f"trim_min, trim_max = {tmin!r}, {tmax!r}: must bracket 1.0 (nominal gain)")
        umax_all = 60.0 * KNOT
        uref = num("u_ref", 0.0, umax_all, lo_open=True)
        umin = num("u_min", 0.0, umax_all, lo_open=True)
        umax = num("u_max", 0.0, umax_all, lo_open=True)
        if umin is not None and umax is not None and not umin < umax:
            out.append(f"u_min = {umin!r} must be below u_max = {umax!r}")
        del uref
        if self.schedule_table:
            xs, ys = self.table_speeds, self.table_factors
            ok = isinstance(xs, tuple) and isinstance(ys, tuple)
            if not ok or not (2 <= len(xs) <= TABLE_MAX) or len(xs) != len(ys):
                out.append(
                    f"table_speeds/table_factors: expected two tuples of equal length 2..{TABLE_MAX}"
                )
            else:
                vals = xs + ys
                if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in vals):
                    out.append("table_speeds/table_factors: every entry must be a finite number")
                else:
                    if any(not b > a for a, b in zip(xs, xs[1:])) or xs[0] < 0.0:
                        out.append(f"table_speeds = {xs!r}: must be >= 0 and strictly increasing")
                    if any(not (0.0 <= f <= 100.0) for f in ys):
                        out.append(f"table_factors = {ys!r}: each must be in [0, 100]")
        num("speed_tau", 0.0, 600.0, lo_open=True)
        ucut = num("u_cutout", 0.0, umax_all)
        ure = num("u_reengage", 0.0, umax_all)
        if ucut is not None and ure is not None and not ucut < ure:
            out.append(f"u_cutout = {ucut!r} must be below u_reengage = {ure!r} (hysteresis)")
        num("dwell", 0.0, 600.0)
        fade = num("fade", 0.0, 600.0, lo_open=True)
        if fade is not None and dt is not None and fade < dt:
            out.append(f"fade = {fade!r}: must be at least one step ({dt!r} s)")
        ang = num("angle_limit", 0.0, ANGLE_LIMIT_MAX, lo_open=True)
        num("rate_limit", 0.0, RATE_LIMIT_MAX, lo_open=True)
        stall = num("stall_angle", 0.0, ANGLE_LIMIT_MAX, lo_open=True)
        margin = num("stall_margin", 0.0, ANGLE_LIMIT_MAX)
        if stall is not None and margin is not None and not margin < stall:
            out.append(f"stall_margin = {margin!r} must be below stall_angle = {stall!r}")
        num("fin_area", 0.0, 200.0, lo_open=True)
        num("lift_slope", 0.0, 2.0 * math.pi + 1e-9, lo_open=True)
        num("lever_arm", 0.0, 100.0, lo_open=True)
        num("rated_lift", 0.0, 1e8, lo_open=True)
        num("rho", 900.0, 1100.0)
        nyq = 0.5 / dt if dt is not None else math.inf
        num("lowpass_hz", 0.0, 0.9 * nyq, lo_open=True)
        nh = num("notch_hz", 0.0, nyq, hi_open=True)
        if nh is not None and nh > 0.0:
            num("notch_q", 0.1, 100.0)
        num("derivative_tau", 0.0, 10.0, lo_open=True)
        num("accel_tau", 0.0, 10.0, lo_open=True)
        num("roll_range", 0.0, math.pi / 2, lo_open=True)
        num("rate_range", 0.0, math.pi, lo_open=True)
        num("roll_jump", 0.0, math.pi / 2, lo_open=True)
        num("max_age", 0.0, 60.0, lo_open=True)
        num("speed_range", 0.0, umax_all, lo_open=True)
        num("speed_jump", 0.0, umax_all, lo_open=True)
        num("speed_max_age", 0.0, 600.0, lo_open=True)
        n = self.debounce_steps
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= 1000:
            out.append(f"debounce_steps = {n!r}: expected an integer in [1, 1000]")
        num("speed_hold", 0.0, 600.0)
        num("tracking_error", 0.0, math.pi / 2, lo_open=True)
        num("tracking_time", 0.0, 600.0)
        fb = num("feedback_range", 0.0, math.pi / 2, lo_open=True)
        if fb is not None and ang is not None and fb < ang:
            out.append(f"feedback_range = {fb!r} must be at least angle_limit = {ang!r}")
        ha = num("heel_authority", 0.0, ANGLE_LIMIT_MAX)
        if ha is not None and ang is not None and ha > ang:
            out.append(f"heel_authority = {ha!r} must not exceed angle_limit = {ang!r}")
        num("heel_tau", 0.0, 3600.0, lo_open=True)
        return out
