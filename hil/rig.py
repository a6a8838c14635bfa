"""The rig emulator: the simulated vessel, fins, actuators and sensors behind real links.

:class:`RigCore` is the emulator's logic without clock or I/O: it takes fin demand frames (CAN),
steps the plant one control period, and produces fin feedback frames (CAN) and motion / speed data
(serial bytes: NMEA 0183 or the binary motion frame), with injected faults applied
(:mod:`hil.injection`). :func:`serve` runs it in real time (or time-scaled) behind a pseudo-terminal
SLCAN adapter and serial pty endpoints, so a controller on the other side cannot tell it from a rig.

The emulated servo drive has a demand watchdog: with no valid FIN_DEMAND frame for
``watchdog_s`` it drives both fins to centre (emulator behaviour, like a drive's command timeout).
Until the first demand arrives the plant waits (``wait_for_controller``), so runs line up with
offline simulations of the same scenario and seed.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

from .catalogue import (
    DEFAULT_IDS,
    AliveMonitor,
    CanIds,
    FinDemand,
    FinStatus,
    FrameCounters,
    NodeState,
    decode_frame,
    encode_fin_feedback,
    encode_heartbeat,
)
from .injection import Injection
from .serial_codec import MotionFlags, encode_motion_frame, format_vhw, format_xdr_roll

RIG_NODE_ID = 2
DEMAND_WATCHDOG_S = 0.5


@dataclass
class RigOutput:
    """What one rig step produces (the process wrapper writes it to the links)."""

    can: list[tuple[int, bytes]] = field(default_factory=list)
    motion: bytes = b""
    speed: bytes = b""
    can_down: bool = False  # bus-error injection active: the adapter is silent both ways
    motion_disconnected: bool = False  # disconnect-motion active: close the motion line


class RigCore:
    """Emulated rig: plant + fin servo drives + sensors, talking the finloop catalogue."""

    def __init__(
        self,
        scenario,
        *,
        seed: int | None = None,
        ids: CanIds = DEFAULT_IDS,
        motion_format: str = "binary",
        motion_rate_hz: float = 50.0,
        speed_rate_hz: float = 1.0,
        injections: tuple[Injection, ...] = (),
        watchdog_s: float = DEMAND_WATCHDOG_S,
    ):
        from .simulate import build_plant

        if motion_format not in ("binary", "nmea"):
            raise ValueError(f"motion format must be 'binary' or 'nmea', got {motion_format!r}")
        self.scenario = scenario
        self.plant, self.notes = build_plant(scenario, seed)
        self.dt = scenario.setup.control_dt_s
        self.ids = ids
        self.motion_format = motion_format
        self.motion_every = max(1, round(1.0 / (motion_rate_hz * self.dt)))
        self.speed_every = max(1, round(1.0 / (speed_rate_hz * self.dt)))
        self.injections = tuple(i for i in injections if i.side == "rig")
        self.watchdog_steps = max(1, math.ceil(watchdog_s / self.dt - 1e-9))
        self.k = 0
        self.meas = self.plant.meas[0]
        self.demand = (0.0, 0.0)
        self.demand_mode = 0
        self.last_demand_k: int | None = None
        self.counters = FrameCounters()
        self.demand_alive = AliveMonitor()
        self.fb_alive = {"port": 0, "stbd": 0}
        self.seq = 0
        self.hb_counter = 0
        self.delayed: deque[tuple[int, int, bytes]] = deque()
        self.watchdog_trips = 0
        self.watchdog_on = False  # the emulated drive is centring the fins for want of demands
        self.angle_limit = {"port": scenario.setup.actuator_port.angle_limit_rad,
                            "stbd": scenario.setup.actuator_stbd.angle_limit_rad}

    @property
    def t_s(self) -> float:
        return self.k * self.dt

    @property
    def finished(self) -> bool:
        return self.k >= self.plant.n_steps

    def on_can(self, arbitration_id: int, data: bytes, *, is_extended: bool = False, is_remote: bool = False) -> None:
        """A frame from the bus; FIN_DEMAND frames set the servo targets, others are ignored."""
        if arbitration_id != self.ids.fin_demand:
            return  # status / heartbeats of other nodes: not for the servo drive
        if self._active_at("bus-error", None, self.t_s) is not None:
            return  # bus-error drill: the adapter hears nothing
        r = self.counters.count(decode_frame(arbitration_id, data, self.ids, is_remote=is_remote, is_extended=is_extended))
        if type(r) is not FinDemand:
            return
        if self.demand_alive.update(r.alive) == "stalled":
            return  # a repeated frame is not a fresh command
        self.demand = (r.port, r.stbd)
        self.demand_mode = int(r.mode)
        self.last_demand_k = self.k

    def step(self) -> RigOutput:
        """One control period of the plant; returns the frames and bytes to publish."""
        out = RigOutput()
        stale = self.last_demand_k is None or self.k - self.last_demand_k > self.watchdog_steps
        if stale and self.last_demand_k is not None and not self.watchdog_on:
            self.watchdog_trips += 1
        self.watchdog_on = stale
        dp, ds = (0.0, 0.0) if stale else self.demand
        t_step = self.t_s
        bus_down = self._active_at("bus-error", None, t_step) is not None
        out.can_down = bus_down
        self.meas = m = self.plant.step(dp, ds)
        self.k += 1
        k = self.k
        # fin feedback, every step
        frames = []
        for side, angle, valid in (("port", m.fin_port_rad, m.fin_port_valid), ("stbd", m.fin_stbd_rad, m.fin_stbd_valid)):
            if self._active_at("stall-alive", side, t_step) is None:
                self.fb_alive[side] = (self.fb_alive[side] + 1) & 0xF
            status = FinStatus.HYDRAULICS_OK
            if valid and math.isfinite(angle):
                status |= FinStatus.VALID
            else:
                angle = 0.0
            if abs(angle) >= self.angle_limit[side] - 1e-3:
                status |= FinStatus.AT_LIMIT
            if stale:
                status |= FinStatus.LOCKED_CENTRE
            fid = self.ids.feedback_id(side)
            data = encode_fin_feedback(side, angle, int(status), self.fb_alive[side], self.ids)
            if self._active_at("drop-feedback", side, t_step) is not None:
                continue
            if self._active_at("corrupt-feedback", side, t_step) is not None:
                data = data[:7] + bytes([data[7] ^ 0x5A])
            delay = self._active_at("delay-feedback", side, t_step)
            if delay is not None:
                self.delayed.append((k + max(1, round(delay.value / self.dt)), fid, data))
                continue
            frames.append((fid, data))
        while self.delayed and self.delayed[0][0] <= k:
            _, fid, data = self.delayed.popleft()
            frames.append((fid, data))
        if k % round(1.0 / self.dt) == 0:
            frames.append((self.ids.heartbeat_id(RIG_NODE_ID), encode_heartbeat(NodeState.OPERATIONAL, self.hb_counter)))
            self.hb_counter = (self.hb_counter + 1) & 0xFF
        out.can = [] if bus_down else frames
        # motion sensor
        out.motion_disconnected = self._active_at("disconnect-motion", None, t_step) is not None
        if k % self.motion_every == 0 and not out.motion_disconnected and self._active_at("freeze-motion", None, t_step) is None:
            out.motion = self._motion_bytes(m)
        if k % self.speed_every == 0 and self._active_at("freeze-speed", None, t_step) is None:
            if m.speed_valid and math.isfinite(m.speed_ms):
                out.speed = format_vhw(max(0.0, m.speed_ms))
        return out

    def _active_at(self, kind: str, target: str | None, t: float) -> Injection | None:
        for inj in self.injections:
            if inj.kind == kind and (target is None or inj.target == target) and inj.active(t):
                return inj
        return None

    def _motion_bytes(self, m) -> bytes:
        roll_ok = bool(m.roll_valid) and math.isfinite(m.roll_rad)
        rate_ok = bool(m.roll_rate_valid) and math.isfinite(m.roll_rate_rad_s)
        if self.motion_format == "binary":
            self.seq = (self.seq + 1) & 0xFFFF
            flags = (MotionFlags.ROLL_VALID if roll_ok else 0) | (MotionFlags.RATE_VALID if rate_ok else 0)
            t_us = int(round(self.t_s * 1e6))
            return encode_motion_frame(self.seq, t_us, m.roll_rad if roll_ok else 0.0, m.roll_rate_rad_s if rate_ok else 0.0, flags)
        if not roll_ok:
            return b""  # an NMEA sensor with no valid reading sends nothing
        return format_xdr_roll(m.roll_rad, m.roll_rate_rad_s if rate_ok else None)

    def summary(self) -> dict:
        return {
            "steps": self.k,
            "t_s": self.t_s,
            "demand_frames": self.counters.as_dict(),
            "demand_alive": self.demand_alive.as_dict(),
            "watchdog_trips": self.watchdog_trips,
            "injections": [str(i) for i in self.injections],
        }


def lockstep(rig: RigCore, runner, n_steps: int, on_step=None) -> None:
    """Run a rig core and a runner core alternately in one process, without links or clock.

    Per period: the rig steps on the demands delivered so far and publishes; the runner receives
    that at the rig's new time, steps, and its frames reach the rig before its next step (one
    period of transport, as over a bus). Deterministic: used by the fault-injection matrix tests
    and for replay checks. ``on_step(k, rig_output, controller_outputs)`` is called each period.
    """
    for k in range(n_steps):
        if rig.finished:
            break
        out = rig.step()
        t = rig.t_s
        if not out.can_down:
            for fid, data in out.can:
                runner.on_can(fid, data, t)
        if out.motion_disconnected:
            runner.serial_down("motion")
        elif out.motion:
            runner.on_serial("motion", out.motion, t)
        if out.speed:
            runner.on_serial("speed", out.speed, t)
        ctl, frames = runner.step(t)
        if not out.can_down:
            for fid, data in frames:
                rig.on_can(fid, data)
        if on_step is not None:
            on_step(k, out, ctl)
