"""Live loops: the rig emulator behind pseudo-terminals, and the runner against real links.

Both loops keep absolute deadlines on the monotonic clock (:class:`hil.realtime.FixedRate`) and
can run time-scaled (``time_scale`` simulated seconds per wall second; 1 = real time) so that a
long drill or a CI check takes less wall time. Control time inside both is ``k·dt``; the wall
clock only sets when a step starts and how old an input is.

Shutdown: SIGINT (Ctrl-C) and SIGTERM set a flag; the runner then asks the controller for OFF
and keeps stepping — and sending demands — until both demands are at centre (at most
angle/rate + a margin of steps), then closes its links and the recorder. The rig stops its plant
and closes its endpoints. Data recorded up to then stays on disk in both cases.
"""

from __future__ import annotations

import math
import signal
import sys
import time
from pathlib import Path

from .catalogue import CanIds
from .injection import Injection
from .realtime import FixedRate, Lateness, request_realtime
from .recorder import TrialRecorder

#: the rig's per-step log (what its sensors report and what it was told); the plant's full truth
#: records go to steps_truth.csv when the rig stops
RIG_COLUMNS = (
    "t_s", "lateness_us", "meas_roll_rad", "meas_roll_rate_rad_s", "meas_speed_m_s", "demand_port_rad",
    "demand_stbd_rad", "meas_fin_port_rad", "meas_fin_stbd_rad", "watchdog",
)


class _Stop:
    """SIGINT/SIGTERM → a flag the loop polls (restores the old handlers on exit)."""

    def __init__(self):
        self.requested = False
        self.signal_name = ""
        self._old = {}

    def __enter__(self):
        for sig in (signal.SIGINT, signal.SIGTERM):
            self._old[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum, frame):
        self.requested = True
        self.signal_name = signal.Signals(signum).name

    def __exit__(self, *exc):
        for sig, h in self._old.items():
            signal.signal(sig, h)


def serve_rig(scenario, links, folder: Path, *, seed=None, time_scale: float = 1.0, injections=(),
              duration_s: float | None = None, wait_for_controller_s: float = 60.0, ready=None,
              realtime: bool = True) -> dict:
    """Run the rig emulator behind pty endpoints until the scenario ends, SIGINT/SIGTERM, or
    ``duration_s``. ``ready(paths)`` is called once the endpoints exist. Returns a summary."""
    from .rig import RigCore
    from .slcan_device import PtyEndpoint, SlcanDevice

    ids = CanIds.from_mapping(links.can.ids) if links.can.ids else CanIds()
    mcfg, scfg = links.motion, links.speed
    core = RigCore(scenario, seed=seed, ids=ids, motion_format=mcfg.format if mcfg else "binary",
                   motion_rate_hz=mcfg.rate_hz if mcfg else 50.0, speed_rate_hz=scfg.rate_hz if scfg else 1.0,
                   injections=tuple(injections))
    dt = core.dt
    can_dev = SlcanDevice(links.can.channel)
    endpoints: dict[str, PtyEndpoint] = {}
    paths = {"can": can_dev.open()}
    for name, cfg in (("motion", mcfg), ("speed", scfg)):
        if cfg is None:
            continue
        same = [n for n, c in (("motion", mcfg),) if name == "speed" and c is not None and c.url == cfg.url]
        if same:
            endpoints[name] = endpoints[same[0]]  # one line carries both
        else:
            endpoints[name] = PtyEndpoint(cfg.url)
            paths[name] = endpoints[name].open()
    rt = request_realtime() if realtime else None
    rec = TrialRecorder(folder, RIG_COLUMNS, {
        "kind": "rig", "scenario": scenario.name, "scenario_file": str(scenario.source), "seed": seed if seed is not None else scenario.setup.seed,
        "time_scale": time_scale, "links": links.name, "endpoints": paths, "injections": [str(i) for i in injections],
        "realtime": rt.as_dict() if rt else None,
    }, can_log_format=links.can.log_format)
    if ready is not None:
        ready(paths)
    lat = Lateness()
    status, stop_reason = "finished", "scenario ended"
    n_max = core.plant.n_steps if duration_s is None else min(core.plant.n_steps, int(round(duration_s / dt)))
    try:
        with _Stop() as stop:
            # wait for the controller's first demand so the plant starts with the controller
            t_wait = time.monotonic()
            while core.last_demand_k is None and not stop.requested:
                for f in can_dev.poll(0.05):
                    core.on_can(f.arbitration_id, f.data, is_extended=f.is_extended_id, is_remote=f.is_remote)
                    if rec.can_log:
                        rec.can_log.log_frame(f.arbitration_id, f.data, is_extended_id=f.is_extended_id)
                for ep in set(endpoints.values()):
                    ep.read_available()
                if time.monotonic() - t_wait > wait_for_controller_s:
                    raise TimeoutError(f"no FIN_DEMAND frame from a controller within {wait_for_controller_s:g} s")
            fr = FixedRate(dt / time_scale, clock=time.monotonic)
            motion_closed = False
            while core.k < n_max:
                if stop.requested:
                    status, stop_reason = "stopped", stop.signal_name
                    break
                _, late, missed = fr.wait()
                lat.add(late, missed)
                for f in can_dev.poll(0.0):
                    if rec.can_log:
                        rec.can_log.log_frame(f.arbitration_id, f.data, is_extended_id=f.is_extended_id, is_rx=True)
                    core.on_can(f.arbitration_id, f.data, is_extended=f.is_extended_id, is_remote=f.is_remote)
                out = core.step()
                for fid, data in out.can:
                    can_dev.send(fid, data)
                    if rec.can_log:
                        rec.can_log.log_frame(fid, data, is_rx=False)
                if out.motion_disconnected and not motion_closed and "motion" in endpoints:
                    endpoints["motion"].close()
                    motion_closed = True
                elif out.motion and not motion_closed and "motion" in endpoints:
                    endpoints["motion"].write(out.motion)
                if out.speed and "speed" in endpoints and not (motion_closed and endpoints["speed"] is endpoints.get("motion")):
                    endpoints["speed"].write(out.speed)
                for ep in set(endpoints.values()):
                    if ep.is_open:
                        ep.read_available()  # nothing is expected from the host; keep the pty drained
                m = core.meas
                rec.write_step((core.t_s, late * 1e6, m.roll_rad, m.roll_rate_rad_s, m.speed_ms, core.demand[0],
                                core.demand[1], m.fin_port_rad, m.fin_stbd_rad, float(core.watchdog_on)))
    except BaseException as exc:
        status, stop_reason = "stopped", f"{type(exc).__name__}: {exc}"
        raise
    finally:
        summary = {"status": status, "reason": stop_reason, "rig": core.summary(), "timing": lat.summary(),
                   "slcan": dict(can_dev.stats)}
        can_dev.close()
        for ep in set(endpoints.values()):
            ep.close()
        _write_rig_records(folder, core)
        rec.close(status, summary=summary)
    return summary


def _write_rig_records(folder: Path, core) -> None:
    """The plant's full records (truth) at the end, as in `finloop sim` (steps_truth.csv)."""
    from .runfolder import write_steps_csv

    try:
        write_steps_csv(folder / "steps_truth.csv", core.plant.records())
    except Exception as exc:  # never lose the step log because of the summary file
        print(f"finloop rig: could not write steps_truth.csv: {exc}", file=sys.stderr)


def run_live(params, links, folder: Path, *, time_scale: float = 1.0, duration_s: float | None = None,
             engage: bool = True, injections: tuple[Injection, ...] = (), feedback_timeout_s: float = 0.1,
             live_view: bool = True, realtime: bool = True, controller_file: str = "", spin_s: float = 0.0012) -> dict:
    """Step the controller at its rate against ``links`` until SIGINT/SIGTERM or ``duration_s``."""
    from .links import LinkError, open_link
    from .runner import STEP_COLUMNS, RunnerCore

    ids = CanIds.from_mapping(links.can.ids) if links.can.ids else CanIds()
    core = RunnerCore(params, ids=ids, engage=engage, feedback_timeout_s=feedback_timeout_s, injections=injections)
    dt = params.dt
    rt = request_realtime() if realtime else None
    rec = TrialRecorder(folder, STEP_COLUMNS, {
        "kind": "run", "controller_file": controller_file, "links": links.name, "time_scale": time_scale,
        "injections": [str(i) for i in injections], "realtime": rt.as_dict() if rt else None,
        "start_mode": "OFF", "engage": engage, "feedback_timeout_s": feedback_timeout_s,
    }, can_log_format=None, fmt="%.17g")
    can_log = folder / f"can.{links.can.log_format}"
    rec.update_meta(files={"steps": "steps.csv", "can_log": can_log.name})
    serial = {}
    link_errors = {"can": 0}
    can = None
    try:
        can = open_link(links.can, log_path=can_log)
        for name, cfg in links.serial_links.items():
            same = [n for n, lk in serial.items() if links.serial_links[n].url == cfg.url]
            if same:
                serial[name] = serial[same[0]]
                continue
            serial[name] = open_link(cfg)
            serial[name].reset_input()
            link_errors[name] = 0
    except BaseException as exc:
        if can is not None:
            can.close()
        for lk in serial.values():
            lk.close()
        rec.close("stopped", error=f"could not open the links: {exc}")
        raise
    lat = Lateness()
    view = _LiveView(core, lat, params) if live_view else None
    status, reason = "finished", "duration reached"
    n_centre = math.ceil(params.angle_limit / (params.rate_limit * dt)) + 50
    closing = None
    t_start = time.monotonic()
    try:
        with _Stop() as stop, (view.live() if view else _Null()):
            fr = FixedRate(dt / time_scale, spin_s=spin_s, clock=time.monotonic)
            overrun = False
            while True:
                k, late, missed = fr.wait()
                lat.add(late, missed)
                now = (time.monotonic() - t_start) * time_scale
                # inputs: serial lines, then CAN
                for name, lk in serial.items():
                    if core.line_down[name]:
                        continue
                    try:
                        data = lk.read_available()
                    except LinkError:
                        link_errors[name] = link_errors.get(name, 0) + 1
                        core.serial_down(name)
                        if name == "motion" and serial.get("speed") is lk:
                            core.serial_down("speed")
                        continue
                    if data:
                        core.on_serial(name, data, now)
                        if name == "motion" and serial.get("speed") is lk:
                            pass  # one line carries both: the motion parser sees the speed too
                try:
                    for f in can.drain():
                        core.on_can(f.arbitration_id, f.data, (f.t_rx_s - t_start) * time_scale,
                                    is_extended=f.is_extended_id, is_remote=f.is_remote)
                except LinkError:
                    link_errors["can"] += 1
                overrun = missed > 0
                if (stop.requested or (duration_s is not None and now >= duration_s)) and closing is None:
                    closing = core.k
                    core.shutdown = True
                    if stop.requested:
                        status, reason = "stopped", stop.signal_name
                out, frames = core.step(now, overrun)
                for fid, data in frames:
                    try:
                        can.send(fid, data)
                    except LinkError:
                        link_errors["can"] += 1
                rec.write_step(core.row(now, late, missed))
                if closing is not None and (core.centred() or core.k - closing > n_centre):
                    break
    finally:
        summary = {"status": status, "reason": reason, "runner": core.summary(), "timing": lat.summary(),
                   "links": {"can": can.stats.as_dict(), **{n: lk.stats.as_dict() for n, lk in serial.items()}},
                   "link_errors": link_errors, "centred_at_close": core.centred(),
                   "final_mode": core.last_out.mode.name if core.last_out else None,
                   "final_faults": int(core.last_out.faults) if core.last_out else None}
        can.close()
        for lk in set(serial.values()):
            lk.close()
        rec.close(status, summary=summary)
    return summary


class _Null:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


class _LiveView:
    """The terminal view (rich), redrawn 4× a second by rich's own thread from the latest step."""

    def __init__(self, core, lat, params):
        self.core, self.lat, self.params = core, lat, params

    def live(self):
        from rich.console import Console
        from rich.live import Live

        return Live(self, console=Console(stderr=True), refresh_per_second=4, transient=False)

    def __rich__(self):
        from rich.table import Table

        from controller import Fault

        c = self.core
        out, inp = c.last_out, c.last_inputs
        t = Table(title="finloop run — live", show_header=True, header_style="bold")
        t.add_column("signal")
        t.add_column("value", justify="right")
        if out is None:
            t.add_row("state", "starting")
            return t
        deg = 180.0 / math.pi
        faults = ", ".join(f.name for f in Fault if f and out.faults & f) or "none"
        s = self.lat.summary()
        rows = [
            ("roll", f"{inp.roll * deg:7.2f} deg" + ("" if inp.roll_valid else " (invalid)")),
            ("roll rate", f"{inp.roll_rate * deg:7.2f} deg/s" + ("" if inp.roll_rate_valid else " (invalid)")),
            ("speed", f"{inp.speed / (1852 / 3600):7.2f} kn" + ("" if inp.speed_valid else " (invalid)")),
            ("demand port / stbd", f"{out.fin_port * deg:6.2f} / {out.fin_stbd * deg:6.2f} deg"),
            ("feedback port / stbd", f"{inp.fin_port * deg:6.2f} / {inp.fin_stbd * deg:6.2f} deg"),
            ("mode", out.mode.name),
            ("faults", faults),
            ("steps / misses", f"{s.get('steps', 0)} / {s.get('deadline_misses', 0)}"),
            ("lateness p99", f"{s.get('lateness_p99_us', float('nan')):.0f} us"),
        ]
        for r in rows:
            t.add_row(*r)
        return t
