"""Fault bits reported by the controller.

A fault *latches* when its condition has lasted long enough (see below); latched faults put every
monitored mode into ``FAULT``, where the demand ramps to centre at the rate limit. An operator
reset clears each latched bit whose condition is absent in that step; when none remain the mode
goes to ``STANDBY``. Nothing latches in ``OFF`` (the conditions are still counted, except the
tracking error, since the actuators may be unpowered; bits latched earlier are kept), so a condition
that lasted through ``OFF`` latches as soon as the controller is put in ``STANDBY``.

Conditions and how long they must last (``n_deb`` = ``debounce_steps``):

========================  ======================================================  =================
bit                       condition in one step                                   latches after
========================  ======================================================  =================
``ROLL_ANGLE``            roll flag invalid, age outside [0, max age], value      ``n_deb`` steps
                          non-finite or beyond the roll range, or a jump from
                          the previous sample faster than the plausible rate
``ROLL_RATE``             (rate source "sensor") flag invalid, age outside        ``n_deb`` steps
                          [0, max age], non-finite or beyond the rate range
``SPEED``                 flag invalid, age outside [0, speed max age],           hold steps + 1
                          non-finite, beyond the range, or an implausible jump   (last good speed
                                                                                  held meanwhile)
``FEEDBACK_PORT/STBD``    fin feedback invalid, non-finite or beyond its range    ``n_deb`` steps
``TRACKING_PORT/STBD``    |feedback − previous demand| > tracking threshold       tracking steps + 1
``OVERRUN``               the loop-overrun input flag is set                      ``n_deb`` steps
``INTERNAL``              the step caught an exception or a non-finite value      at once
========================  ======================================================  =================
"""

from __future__ import annotations

from enum import IntFlag

__all__ = ["Fault", "fault_names"]


class Fault(IntFlag):
    NONE = 0
    ROLL_ANGLE = 1
    ROLL_RATE = 2
    SPEED = 4
    FEEDBACK_PORT = 8
    FEEDBACK_STBD = 16
    TRACKING_PORT = 32
    TRACKING_STBD = 64
    OVERRUN = 128
    INTERNAL = 256


ALL_FAULTS = 511


def fault_names(bits: int) -> tuple[str, ...]:
    """Names of the set bits, lowest first (``fault_names(5) == ("ROLL_ANGLE", "SPEED")``)."""
    return tuple(f.name for f in Fault if f.value and (int(bits) & f.value))
