"""The real-time runner: the controller at a fixed rate against real (or emulated) links.

:class:`RunnerCore` is the runner's logic without clock or I/O: it takes serial bytes (motion
sensor, speed log) and CAN frames (fin feedback) with their receive times, assembles the
controller's inputs with their ages (staleness is the controller's to judge), steps the law and
produces the frames to send (FIN_DEMAND every step, CONTROLLER_STATUS every ``status_every``
steps, a heartbeat every second). :func:`hil.live.run_live` drives it on the monotonic clock.

Input rules (the runner's only judgement; everything else is the controller's):

- roll, roll rate, speed: the latest reading, its validity flag and its age now − t_rx; before
  the first reading the value is NaN, invalid, age ∞. A serial line that reports an error is
  treated as silent from then on (its readings age).
- fin feedback (per fin): the latest FIN_FEEDBACK frame that decoded cleanly (CRC, ranges); valid
  when its VALID status bit is set, it is at most ``feedback_timeout_s`` old, and its alive counter
  has not repeated twice in a row (a sender whose task stopped).
- mode requests (the power-up sequence): the controller starts OFF (no fault latches in OFF, so a
  rig that is still starting up is not a fault). Once roll, roll rate, speed and both fin feedbacks
  have all been valid in one step the runner asks for STANDBY (monitoring: faults latch from now
  on), then, with ``engage``, for ACTIVE. After a FAULT it asks for nothing more (only an operator
  may re-engage: a new run). On shutdown it asks for STANDBY (fins ramp to centre at the rate
  limit) and then OFF.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from controller import ControllerInputs, ControllerOutputs, ControllerParams, Mode, ModeRequest, initial_state, step

from .catalogue import (
    DEFAULT_IDS,
    AliveMonitor,
    CanIds,
    FinFeedback,
    FrameCounters,
    NodeState,
    decode_frame,
    encode_controller_status,
    encode_fin_demand,
    encode_heartbeat,
)
from .injection import Injection
from .serial_codec import SensorStreamParser

RUNNER_NODE_ID = 1

#: per-step record columns of a live run (SI; names carry units). Inputs are written at full
#: precision so that replaying them through the law reproduces the demands bit for bit.
INPUT_COLUMNS = (
    "roll_rad", "roll_valid", "roll_age_s", "roll_rate_rad_s", "roll_rate_valid", "roll_rate_age_s",
    "speed_m_s", "speed_valid", "speed_age_s", "fin_port_rad", "fin_port_valid", "fin_stbd_rad",
    "fin_stbd_valid", "mode_request", "gain_trim_pct", "heel_trim_on", "fault_reset", "bench_signal_rad",
    "overrun",
)
OUTPUT_COLUMNS = (
    "demand_port_rad", "demand_stbd_rad", "mode", "faults", "limiter", "command_rad", "speed_factor",
)
STEP_COLUMNS = ("t_s", "lateness_us", "missed_periods", *INPUT_COLUMNS, *OUTPUT_COLUMNS)


@dataclass
class _Latest:
    value: float = math.nan
    valid: bool = False
    t_rx: float = -math.inf


class RunnerCore:
    """Controller + input assembly + frame production for one live run (no clock, no I/O)."""

    def __init__(
        self,
        params: ControllerParams,
        *,
        ids: CanIds = DEFAULT_IDS,
        engage: bool = True,
        feedback_timeout_s: float = 0.1,
        injections: tuple[Injection, ...] = (),
        status_every: int = 5,
    ):
        self.params = params
        self.ids = ids
        self.engage = engage
        self.feedback_timeout_s = feedback_timeout_s
        self.injections = tuple(i for i in injections if i.side == "runner")
        self.status_every = max(1, status_every)
        self.state = initial_state(params, mode=Mode.OFF)
        self.k = 0
        self.t0: float | None = None
        self.parsers = {"motion": SensorStreamParser(), "speed": SensorStreamParser()}
        self.line_down = {"motion": False, "speed": False}
        self.latest = {"roll": _Latest(), "roll_rate": _Latest(), "speed": _Latest()}
        self.feedback: dict[str, tuple[FinFeedback, float] | None] = {"port": None, "stbd": None}
        self.fb_alive = {"port": AliveMonitor(), "stbd": AliveMonitor()}
        self.can_counters = FrameCounters()
        self.alive = 0
        self.status_alive = 0
        self.hb_counter = 0
        self.ever_faulted = False
        self.shutdown = False
        self.last_out: ControllerOutputs | None = None
        self.last_inputs: ControllerInputs | None = None

    # -- inputs -----------------------------------------------------------------------------------
    def on_serial(self, line: str, data: bytes, t_rx: float) -> None:
        """Bytes from serial line ``line`` ("motion" or "speed") received at ``t_rx`` (s)."""
        if self.line_down[line]:
            return
        for r in self.parsers[line].feed(data, t_rx):
            slot = self.latest.get(r.kind)
            if slot is not None:
                slot.value, slot.valid, slot.t_rx = r.value, r.valid, r.t_rx

    def serial_down(self, line: str) -> None:
        """The serial line reported an error or went away: no more readings from it."""
        self.line_down[line] = True

    def on_can(self, arbitration_id: int, data: bytes, t_rx: float, *, is_extended: bool = False,
               is_remote: bool = False) -> None:
        ids = self.ids
        if arbitration_id not in (ids.fin_feedback_port, ids.fin_feedback_stbd):
            return  # own frames echoed, other nodes' heartbeats: not inputs
        r = self.can_counters.count(decode_frame(arbitration_id, data, ids, is_remote=is_remote, is_extended=is_extended))
        if type(r) is FinFeedback:
            self.fb_alive[r.side].update(r.alive)
            self.feedback[r.side] = (r, t_rx)

    def _feedback(self, side: str, now: float) -> tuple[float, bool]:
        fb = self.feedback[side]
        if fb is None:
            return math.nan, False
        frame, t_rx = fb
        ok = frame.valid and (now - t_rx) <= self.feedback_timeout_s and self.fb_alive[side].stalled_run < 2
        return frame.angle, ok

    def inputs(self, now: float, overrun: bool) -> ControllerInputs:
        lr, lp, ls = self.latest["roll"], self.latest["roll_rate"], self.latest["speed"]
        fp, fp_ok = self._feedback("port", now)
        fs, fs_ok = self._feedback("stbd", now)
        mode = int(self.state.mode)
        req = 0
        if self.shutdown:
            if mode in (Mode.ACTIVE, Mode.CUTOUT, Mode.BENCH):
                req = int(ModeRequest.STANDBY)
            elif mode in (Mode.STANDBY, Mode.FAULT):
                req = int(ModeRequest.OFF)
        elif not self.ever_faulted:
            if mode == Mode.OFF and lr.valid and lp.valid and ls.valid and fp_ok and fs_ok:
                req = int(ModeRequest.STANDBY)
            elif mode == Mode.STANDBY and self.engage:
                req = int(ModeRequest.ACTIVE)
        return ControllerInputs(
            lr.value, lr.valid, now - lr.t_rx, lp.value, lp.valid, now - lp.t_rx, ls.value, ls.valid, now - ls.t_rx,
            fp, fp_ok, fs, fs_ok, req, 100.0, False, False, 0.0, bool(overrun),
        )

    # -- the step ---------------------------------------------------------------------------------
    def step(self, now: float, overrun: bool = False) -> tuple[ControllerOutputs, list[tuple[int, bytes]]]:
        """One control step at time ``now`` (s); returns the outputs and the CAN frames to send."""
        if self.t0 is None:
            self.t0 = now
        inp = self.inputs(now, overrun)
        self.state, out = step(self.params, self.state, inp)
        self.last_inputs, self.last_out = inp, out
        if out.mode == Mode.FAULT:
            self.ever_faulted = True
        self.k += 1
        frames = []
        self.alive = (self.alive + 1) & 0xF
        data = encode_fin_demand(out.fin_port, out.fin_stbd, int(out.mode), self.alive, self.ids)
        t_run = now - self.t0
        drop = corrupt = False
        for inj in self.injections:
            if inj.active(t_run):
                drop |= inj.kind == "drop-demand"
                corrupt |= inj.kind == "corrupt-demand"
        if corrupt:
            data = data[:7] + bytes([data[7] ^ 0x5A])
        if not drop:
            frames.append((self.ids.fin_demand, data))
        if self.k % self.status_every == 0:
            self.status_alive = (self.status_alive + 1) & 0xF
            frames.append((self.ids.controller_status, encode_controller_status(
                int(out.mode), int(out.prev_mode), int(out.faults), int(out.limiter),
                out.speed if math.isfinite(out.speed) and out.speed >= 0 else 0.0, self.status_alive, self.ids)))
        if self.k % max(1, round(1.0 / self.params.dt)) == 0:
            state = NodeState.DEGRADED if out.mode == Mode.FAULT else NodeState.OPERATIONAL
            frames.append((self.ids.heartbeat_id(RUNNER_NODE_ID), encode_heartbeat(state, self.hb_counter)))
            self.hb_counter = (self.hb_counter + 1) & 0xFF
        return out, frames

    def row(self, now: float, lateness_s: float, missed: int) -> list[float]:
        """The record row of the last step (SI, full precision)."""
        inp, out = self.last_inputs, self.last_out
        return [now - (self.t0 or 0.0), lateness_s * 1e6, missed,
                *(float(x) for x in inp[:17]), float(inp.bench_signal), float(inp.overrun),
                out.fin_port, out.fin_stbd, int(out.mode), int(out.faults), int(out.limiter), out.command, out.speed_factor]

    def centred(self, tolerance_rad: float = math.radians(0.5)) -> bool:
        """Safe to close the links: demands at centre, the controller OFF or FAULT, and every fin
        whose feedback is valid reported within ``tolerance_rad`` of centre."""
        out, inp = self.last_out, self.last_inputs
        if out is None or out.fin_port != 0.0 or out.fin_stbd != 0.0 or out.mode not in (Mode.OFF, Mode.FAULT):
            return False
        for angle, ok in ((inp.fin_port, inp.fin_port_valid), (inp.fin_stbd, inp.fin_stbd_valid)):
            if ok and not abs(angle) <= tolerance_rad:
                return False
        return True

    def summary(self) -> dict:
        return {
            "steps": self.k,
            "feedback_frames": self.can_counters.as_dict(),
            "feedback_alive": {s: m.as_dict() for s, m in self.fb_alive.items()},
            "serial": {n: {**p.counters.as_dict(), "garbage_bytes": p.garbage_bytes, "line_down": self.line_down[n]}
                       for n, p in self.parsers.items()},
        }


def replay_inputs(params: ControllerParams, rows, start_mode: Mode = Mode.OFF,
                  speed: float | None = None) -> list[ControllerOutputs]:
    """Feed recorded input rows (INPUT_COLUMNS order, SI) through the law from ``initial_state``
    (power-up in ``start_mode``; ``speed`` pre-loads the speed filter as a simulation does)."""
    state = initial_state(params, mode=start_mode, speed=speed)
    outs = []
    for r in rows:
        inp = ControllerInputs(
            float(r[0]), bool(r[1]), float(r[2]), float(r[3]), bool(r[4]), float(r[5]), float(r[6]), bool(r[7]),
            float(r[8]), float(r[9]), bool(r[10]), float(r[11]), bool(r[12]), int(r[13]), float(r[14]), bool(r[15]),
            bool(r[16]), float(r[17]), bool(r[18]),
        )
        state, out = step(params, state, inp)
        outs.append(out)
    return outs
