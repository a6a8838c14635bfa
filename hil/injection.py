"""Fault injection for bench drills: what can be broken, where, when, and what must follow.

A drill is given on the command line as ``KIND[:TARGET]@START_S[+DURATION_S][=VALUE]``, e.g.
``drop-feedback:port@30``, ``delay-feedback:stbd@20+10=0.5``, ``disconnect-motion@45``. Without
``+DURATION_S`` the fault lasts to the end of the run. Times are run time (s) from the first step.

The matrix (each row has a test in ``tests/test_injection.py`` that checks the fault bit and the
bound on the reaction time, in control steps, from the step the injection starts):

====================  ======  ===============================================  =====================
kind                  side    what happens                                     controller reaction
====================  ======  ===============================================  =====================
drop-feedback:SIDE    rig     the rig stops sending that fin's feedback        FEEDBACK_<SIDE>
corrupt-feedback:SIDE rig     that fin's feedback frames carry a wrong CRC     FEEDBACK_<SIDE>
stall-alive:SIDE      rig     that fin's alive counter stops counting          FEEDBACK_<SIDE>
delay-feedback:SIDE   rig     frames held back VALUE s (gap > timeout)         FEEDBACK_<SIDE>
freeze-motion         rig     the motion sensor stops sending (line stays up)  ROLL_ANGLE, ROLL_RATE
disconnect-motion     rig     the motion serial line goes away                 ROLL_ANGLE, ROLL_RATE
freeze-speed          rig     the speed log stops sending                      SPEED (after the hold)
bus-error             rig     the CAN adapter stops (no frames either way)     FEEDBACK_PORT|STBD
drop-demand           runner  demand frames are not sent                       TRACKING (rig centres)
corrupt-demand        runner  demand frames carry a wrong CRC                  TRACKING (rig centres)
====================  ======  ===============================================  =====================

Every reaction latches FAULT; the fins then ramp to centre at the rate limit (the controller's
own guarantee, proven in ``tests/test_controller_properties.py``). The emulated rig also has its
own demand watchdog: without a valid demand frame for ``DEMAND_WATCHDOG_S`` it drives the fins to
centre (what a servo drive with a command-timeout does; emulator behaviour).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

RIG_KINDS = (
    "drop-feedback",
    "corrupt-feedback",
    "stall-alive",
    "delay-feedback",
    "freeze-motion",
    "disconnect-motion",
    "freeze-speed",
    "bus-error",
)
RUNNER_KINDS = ("drop-demand", "corrupt-demand")
_SIDED = ("drop-feedback", "corrupt-feedback", "stall-alive", "delay-feedback")
_VALUED = ("delay-feedback",)

_RE = re.compile(r"^(?P<kind>[a-z-]+)(?::(?P<target>[a-z]+))?@(?P<start>[0-9.]+)(?:\+(?P<dur>[0-9.]+))?(?:=(?P<value>[0-9.]+))?$")


class InjectionError(ValueError):
    """A drill specification that cannot be used (message names the text and what is allowed)."""


@dataclass(frozen=True)
class Injection:
    kind: str
    target: str | None  # "port" / "stbd" for the sided kinds
    start_s: float
    duration_s: float  # inf = to the end
    value: float | None  # delay-feedback: the delay, s

    def active(self, t_s: float) -> bool:
        return self.start_s <= t_s < self.start_s + self.duration_s

    @property
    def side(self) -> str:
        return "rig" if self.kind in RIG_KINDS else "runner"

    def __str__(self) -> str:
        s = self.kind + (f":{self.target}" if self.target else "") + f"@{self.start_s:g}"
        if math.isfinite(self.duration_s):
            s += f"+{self.duration_s:g}"
        if self.value is not None:
            s += f"={self.value:g}"
        return s


def parse_injection(text: str, allowed: tuple[str, ...] = RIG_KINDS + RUNNER_KINDS) -> Injection:
    """Parse ``KIND[:TARGET]@START_S[+DURATION_S][=VALUE]``; :class:`InjectionError` if unusable."""
    m = _RE.match(text.strip())
    if not m:
        raise InjectionError(f"--inject {text!r}: expected KIND[:port|stbd]@START_S[+DURATION_S][=VALUE], e.g. drop-feedback:port@30+5")
    kind = m["kind"]
    if kind not in allowed:
        raise InjectionError(f"--inject {text!r}: unknown kind {kind!r} here (allowed: {', '.join(allowed)})")
    target = m["target"]
    if kind in _SIDED:
        if target not in ("port", "stbd"):
            raise InjectionError(f"--inject {text!r}: {kind} needs a side, :port or :stbd")
    elif target is not None:
        raise InjectionError(f"--inject {text!r}: {kind} takes no side")
    try:
        start = float(m["start"])
        dur = float(m["dur"]) if m["dur"] else math.inf
        value = float(m["value"]) if m["value"] else None
    except ValueError:
        raise InjectionError(f"--inject {text!r}: times must be numbers of seconds") from None
    if not (dur > 0):
        raise InjectionError(f"--inject {text!r}: the duration must be > 0 s")
    if kind in _VALUED:
        if value is None or not (0.0 < value <= 60.0):
            raise InjectionError(f"--inject {text!r}: {kind} needs =DELAY_S in (0, 60] s")
    elif value is not None:
        raise InjectionError(f"--inject {text!r}: {kind} takes no =VALUE")
    return Injection(kind, target, start, dur, value)
