"""finloop fin stabiliser controller: a pure, fixed-step, deterministic law (standard library only).

Public API::

    params = ControllerParams(dt=0.02, k_rate=4.0, ...)      # or hil.controller_config.load_controller
    state = initial_state(params)                           # fins centred, OFF
    state, out = step(params, state, ControllerInputs(...)) # once per sample period
    out.fin_port, out.fin_stbd, out.mode, out.faults, ...

Sign convention: one roll command δ (rad); α_stbd = +δ, α_port = −δ; positive gains restore a
starboard-down roll (φ > 0). See :mod:`controller.law` for the order of work in a step,
:mod:`controller.modes` for the modes and legal transitions and :mod:`controller.faults` for the
fault bits and when they latch.
"""

from .faults import ALL_FAULTS, Fault, fault_names
from .filters import butter2_lowpass, dirty_derivative, first_order_hold_gain, notch
from .law import step
from .modes import LEGAL_TRANSITIONS, MODES, Limiter, Mode, ModeRequest
from .params import ANGLE_LIMIT_MAX, KNOT, TABLE_MAX, ControllerParams
from .records import ControllerInputs, ControllerOutputs, ControllerState, initial_state

__all__ = [
    "ControllerParams",
    "ControllerState",
    "ControllerInputs",
    "ControllerOutputs",
    "initial_state",
    "step",
    "Mode",
    "ModeRequest",
    "Limiter",
    "Fault",
    "ALL_FAULTS",
    "fault_names",
    "LEGAL_TRANSITIONS",
    "MODES",
    "KNOT",
    "ANGLE_LIMIT_MAX",
    "TABLE_MAX",
    "butter2_lowpass",
    "notch",
    "dirty_derivative",
    "first_order_hold_gain",
]
