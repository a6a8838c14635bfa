"""Operating modes, operator mode requests, limiter flags and the legal mode transitions.

Modes
-----
``OFF``      the stabiliser is switched off: no fault latches, the demand ramps to centre.
``STANDBY``  powered and monitored, fins held centred.
``ACTIVE``   the law drives the fins (fading in over the fade time after engaging).
``CUTOUT``   selected active, but the speed is too low for the fins to work: the law fades out and
             the fins centre; re-engages by itself above the re-engage speed after the dwell time.
``FAULT``    a fault is latched: the demand ramps to centre at the rate limit; left only by an
             operator reset once every cause has gone (→ STANDBY), or by switching off.
``BENCH``    the fins follow the bench test signal (angle and rate limits still apply); allowed only
             below the cut-out speed, or at any speed when the parameters say the controller runs
             on a test rig.

Requests are events (one step long): ``NONE`` means no request this step.

The step makes at most one transition per step and only along :data:`LEGAL_TRANSITIONS`; a request
that cannot be honoured is reported in ``ControllerOutputs.refused_request``.
"""

from __future__ import annotations

from enum import IntEnum, IntFlag

__all__ = ["Mode", "ModeRequest", "Limiter", "LEGAL_TRANSITIONS", "MODES", "REQUESTS"]


class Mode(IntEnum):
    OFF = 0
    STANDBY = 1
    ACTIVE = 2
    CUTOUT = 3
    FAULT = 4
    BENCH = 5


class ModeRequest(IntEnum):
    NONE = 0
    OFF = 1
    STANDBY = 2
    ACTIVE = 3
    BENCH = 4


class Limiter(IntFlag):
    """Which limiter shaped the demand this step (diagnostics; several may be set)."""

    NONE = 0
    STALL = 1  # effective angle of attack (stall) limit cut the command
    LOAD = 2  # rated-lift limit cut the command
    ANGLE = 4  # mechanical angle limit cut the command
    RATE = 8  # slew-rate limit held the demand back
    HEEL = 16  # heel-trim integral at its authority limit


MODES: tuple[Mode, ...] = tuple(Mode)
"""``MODES[i]`` is the :class:`Mode` with value ``i`` (cheap look-up for the step)."""

REQUESTS: tuple[ModeRequest, ...] = tuple(ModeRequest)

_M = Mode
LEGAL_TRANSITIONS: frozenset[tuple[Mode, Mode]] = frozenset(
    {
        (_M.OFF, _M.STANDBY),  # operator: standby
        (_M.STANDBY, _M.OFF),  # operator: off
        (_M.STANDBY, _M.ACTIVE),  # operator: active, speed above re-engage for the dwell time
        (_M.STANDBY, _M.CUTOUT),  # operator: active, speed not yet high enough
        (_M.STANDBY, _M.BENCH),  # operator: bench (below cut-out speed, or on a rig)
        (_M.STANDBY, _M.FAULT),  # a fault latched
        (_M.ACTIVE, _M.STANDBY),  # operator: standby
        (_M.ACTIVE, _M.CUTOUT),  # filtered speed fell below cut-out
        (_M.ACTIVE, _M.FAULT),  # a fault latched
        (_M.CUTOUT, _M.ACTIVE),  # speed above re-engage for the dwell time
        (_M.CUTOUT, _M.STANDBY),  # operator: standby
        (_M.CUTOUT, _M.FAULT),  # a fault latched
        (_M.BENCH, _M.STANDBY),  # operator: standby, or speed rose to cut-out (not on a rig)
        (_M.BENCH, _M.FAULT),  # a fault latched
        (_M.FAULT, _M.STANDBY),  # operator reset with every cause gone
        (_M.FAULT, _M.OFF),  # operator: off
    }
)
"""Every (from, to) pair the step may produce. Staying in the same mode is always allowed."""
