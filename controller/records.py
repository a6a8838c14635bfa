"""The values that go in and out of one controller step (SI units), and the starting state.

All three records are ``NamedTuple``: immutable values, cheap to build (the step builds one state
and one output record per call), comparable with ``==`` for the determinism checks.
"""

from __future__ import annotations

import math
from typing import NamedTuple

from .modes import Mode
from .params import ControllerParams

__all__ = ["ControllerInputs", "ControllerOutputs", "ControllerState", "initial_state"]


class ControllerInputs(NamedTuple):
    """Everything the controller reads in one step.

    Sensor values are SI; ``*_valid`` is the sensor's own validity flag; ``*_age`` is how old the
    sample is (s, measured by the caller, e.g. now − sample time). NaN is fine for an absent value.
    """

    roll: float  # rad, φ > 0 starboard side down
    roll_valid: bool
    roll_age: float  # s
    roll_rate: float  # rad/s, p = dφ/dt (ignored with rate_source "derivative")
    roll_rate_valid: bool
    roll_rate_age: float  # s
    speed: float  # m/s through water
    speed_valid: bool
    speed_age: float  # s
    fin_port: float  # rad, port fin position feedback (α > 0 leading edge up)
    fin_port_valid: bool
    fin_stbd: float  # rad, starboard fin position feedback
    fin_stbd_valid: bool
    mode_request: int = 0  # a ModeRequest value; 0 = none this step
    gain_trim_pct: float = 100.0  # %, operator gain trim (clamped to the trim range)
    heel_trim_on: bool = False  # operator: heel trim integral enabled
    fault_reset: bool = False  # operator: reset latched faults (acts in FAULT mode)
    bench_signal: float = 0.0  # rad, roll command δ followed in BENCH mode
    overrun: bool = False  # the loop around the step missed its deadline


class ControllerOutputs(NamedTuple):
    """What one step produces: demands, mode, faults and diagnostics (SI)."""

    fin_port: float  # rad, port fin angle demand (= −δ)
    fin_stbd: float  # rad, starboard fin angle demand (= +δ)
    mode: Mode
    prev_mode: Mode  # mode before this step (≠ mode ⇔ a transition happened this step)
    faults: int  # latched Fault bits
    refused_request: int  # the ModeRequest that could not be honoured this step (0 = none)
    roll: float  # rad, conditioned roll angle
    roll_rate: float  # rad/s, conditioned roll rate
    roll_accel: float  # rad/s², roll acceleration estimate
    speed: float  # m/s, filtered speed (last good one held while the log is out)
    speed_factor: float  # gain-schedule factor s(U)
    gain_roll: float  # rad/rad, scheduled and trimmed
    gain_rate: float  # s
    gain_accel: float  # s²
    term_roll: float  # rad of δ from roll angle feedback (before fade)
    term_rate: float  # rad of δ from roll rate feedback
    term_accel: float  # rad of δ from roll acceleration feedback
    term_heel: float  # rad of δ from the heel trim integral
    command: float  # rad, law output after the fade, before limits
    target: float  # rad, after stall, load and angle limits, before the rate limit
    fade: float  # 0..1 engage/disengage fade
    limiter: int  # Limiter bits active this step


class ControllerState(NamedTuple):
    """Everything the controller remembers between steps (start from :func:`initial_state`)."""

    step: int  # steps taken (saturates at 2**62)
    mode: int
    faults: int  # latched Fault bits
    delta: float  # rad, last roll command demand δ
    fade_count: int  # 0..n_fade
    heel_i: float  # rad, heel trim integral
    trim: float  # last good gain trim (fraction)
    roll_primed: bool
    rn1: float  # roll notch state
    rn2: float
    rl1: float  # roll low-pass state
    rl2: float
    roll_f: float  # rad, conditioned roll
    roll_prev: float  # last raw roll inside its range (NaN: none), for the jump check
    rate_primed: bool
    pn1: float  # rate notch state
    pn2: float
    pl1: float  # rate low-pass state
    pl2: float
    pd1: float  # roll-to-rate derivative state (rate_source "derivative")
    rate_f: float  # rad/s, conditioned roll rate
    ad1: float  # rate-to-acceleration derivative state
    accel_f: float  # rad/s²
    heel_lp: float  # rad, slow low-passed roll for the heel trim
    speed_primed: bool
    speed_f: float  # m/s, filtered speed
    speed_prev: float  # last raw speed inside its range (NaN: none), for the jump check
    roll_bad: int  # consecutive bad-sample counters (saturating)
    rate_bad: int
    speed_bad: int
    fbp_bad: int
    fbs_bad: int
    trk_p: int
    trk_s: int
    overrun_bad: int
    above: int  # consecutive steps with filtered speed >= re-engage speed (saturates at n_dwell + 1)


def initial_state(
    params: ControllerParams, *, mode: Mode | int = Mode.OFF, speed: float | None = None
) -> ControllerState:
    """The state at power-up: fins centred, filters empty, no faults.

    ``mode`` may be ``OFF`` (default), ``STANDBY`` or ``ACTIVE``. ``speed`` (m/s) pre-loads the
    speed filter, e.g. to start a simulation under way. Starting ``ACTIVE`` (as when a simulation
    begins mid-voyage) needs ``speed``: at or above the re-engage speed the mode is ``ACTIVE`` with
    the fade complete, below it ``CUTOUT``. The demand always starts at centre.
    """
    m = int(mode)
    if m not in (Mode.OFF, Mode.STANDBY, Mode.ACTIVE):
        raise ValueError(f"initial mode must be OFF, STANDBY or ACTIVE, got {mode!r}")
    primed = False
    u = 0.0
    if speed is not None:
        u = float(speed)
        if not (math.isfinite(u) and abs(u) <= params.speed_range):
            raise ValueError(f"initial speed {speed!r} m/s is not finite or beyond the speed range")
        primed = True
    above = params.n_dwell + 1 if (primed and u >= params.u_reengage) else 0
    fade = 0
    if m == Mode.ACTIVE:
        if speed is None:
            raise ValueError("starting ACTIVE needs the speed")
        if u >= params.u_reengage:
            fade = params.n_fade
        else:
            m = int(Mode.CUTOUT)
    nan = math.nan
    return ControllerState(
        0, m, 0, 0.0, fade, 0.0, 1.0,
        False, 0.0, 0.0, 0.0, 0.0, 0.0, nan,
        False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
        primed, u, u if primed else nan,
        0, 0, 0, 0, 0, 0, 0, 0, above,
    )  # fmt: skip
