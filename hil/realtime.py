"""Fixed-rate timing for the real-time runner: deadlines on the monotonic clock, lateness statistics.

The loop sleeps to just before each deadline and then spins on ``time.perf_counter`` (the sleep
alone wakes 0.1–1 ms late on a general-purpose kernel; the spin takes the last stretch to a few µs).
Where the OS permits, the process asks for real-time FIFO scheduling (Linux ``SCHED_FIFO``, needs
root or CAP_SYS_NICE) and a 1 ns timer slack (Linux ``prctl(PR_SET_TIMERSLACK)``); what was granted
and what was refused is reported, never silently assumed.

Deadlines are absolute: period k starts at t0 + k·T, so lateness never accumulates. A step that
starts later than one period after its deadline is a *deadline miss*; the runner then skips the
missed periods (it does not try to catch up with a burst of steps) and tells the controller through
its ``overrun`` input.
"""

from __future__ import annotations

import ctypes
import math
import os
import sys
import time
from dataclasses import dataclass, field

import numpy as np

SPIN_S = 0.0012  # wake this long before the deadline, then spin (the runner uses up to 5 ms, see
# `finloop run --spin-ms`: on a virtual machine an idle vCPU can take > 1 ms to wake)


@dataclass
class RealtimeReport:
    """What the process was granted."""

    fifo_priority: int | None = None
    timer_slack_ns: int | None = None
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {"fifo_priority": self.fifo_priority, "timer_slack_ns": self.timer_slack_ns, "notes": list(self.notes)}


def request_realtime(priority: int = 50, want_fifo: bool = True) -> RealtimeReport:
    """Ask for SCHED_FIFO at ``priority`` and a 1 ns timer slack; report what was granted."""
    rep = RealtimeReport()
    if want_fifo:
        if hasattr(os, "sched_setscheduler") and hasattr(os, "SCHED_FIFO"):
            try:
                os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(priority))
                rep.fifo_priority = priority
            except (PermissionError, OSError) as exc:
                rep.notes.append(f"real-time priority (SCHED_FIFO {priority}) refused: {exc.strerror or exc}; "
                                 "running at normal priority (run as root or grant CAP_SYS_NICE for it)")
        else:
            rep.notes.append("real-time priority is not available on this OS; running at normal priority")
    if sys.platform.startswith("linux"):
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            pr_set_timerslack = 29
            if libc.prctl(pr_set_timerslack, 1, 0, 0, 0) == 0:
                rep.timer_slack_ns = 1
            else:
                rep.notes.append(f"timer slack unchanged: prctl failed (errno {ctypes.get_errno()})")
        except OSError as exc:  # pragma: no cover - no libc
            rep.notes.append(f"timer slack unchanged: {exc}")
    else:
        rep.notes.append("timer slack control is Linux-only; left at the OS default")
    return rep


class Lateness:
    """Lateness of each step start against its deadline (s), kept in a preallocated ring."""

    def __init__(self, capacity: int = 1 << 20):
        self.values = np.zeros(capacity)
        self.n = 0
        self.misses = 0

    def add(self, late_s: float, missed: int) -> None:
        if self.n < len(self.values):
            self.values[self.n] = late_s
        self.n += 1
        self.misses += missed

    def summary(self) -> dict:
        v = self.values[: min(self.n, len(self.values))]
        if v.size == 0:
            return {"steps": 0, "deadline_misses": self.misses}
        q = np.percentile(v, [50, 99, 99.9])
        return {
            "steps": int(self.n),
            "deadline_misses": int(self.misses),
            "lateness_p50_us": float(q[0] * 1e6),
            "lateness_p99_us": float(q[1] * 1e6),
            "lateness_p999_us": float(q[2] * 1e6),
            "lateness_max_us": float(v.max() * 1e6),
        }


class FixedRate:
    """Absolute deadlines t0 + k·period on ``time.perf_counter`` (monotonic).

    ``wait()`` returns (k, lateness_s, missed_periods) at the start of each step.
    """

    def __init__(self, period_s: float, spin_s: float = SPIN_S, clock=time.perf_counter, sleep=time.sleep):
        if not (period_s > 0.0 and math.isfinite(period_s)):
            raise ValueError(f"period must be > 0 s, got {period_s!r}")
        self.period = period_s
        self.spin = spin_s
        self.clock = clock
        self.sleep = sleep
        self.t0 = clock()
        self.k = 0

    def deadline(self, k: int) -> float:
        return self.t0 + k * self.period

    def wait(self) -> tuple[int, float, int]:
        clock = self.clock
        d = self.deadline(self.k)
        now = clock()
        if d - now > self.spin:
            self.sleep(d - now - self.spin)
        while clock() < d:
            pass
        now = clock()
        late = now - d
        missed = 0
        if late >= self.period:  # skip whole missed periods, do not burst
            missed = int(late // self.period)
            self.k += missed
            late = now - self.deadline(self.k)
        k = self.k
        self.k += 1
        return k, late, missed
