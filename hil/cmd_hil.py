"""``finloop rig``, ``finloop run`` and ``finloop replay``: the bench and trial commands."""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

RIG_EPILOG = """\
example (two terminals, on this machine):
  finloop rig configs/links/emulated_rig.toml configs/scenarios/beam_sea_service_speed.toml
  finloop run configs/links/emulated_rig.toml configs/controller/demo_pax_135.toml

Fault drills (--inject, repeatable; times in seconds of run time):
  drop-feedback:port|stbd@T[+D]      corrupt-feedback:port|stbd@T[+D]   stall-alive:port|stbd@T[+D]
  delay-feedback:port|stbd@T[+D]=S   freeze-motion@T[+D]                disconnect-motion@T[+D]
  freeze-speed@T[+D]                 bus-error@T[+D]
"""

RUN_EPILOG = """\
Fault drills on the runner side (--inject, repeatable): drop-demand@T[+D], corrupt-demand@T[+D].

Stop with Ctrl-C (or SIGTERM): the runner asks the controller for OFF, keeps sending demands
until both fins are demanded to centre and their feedback reports centre (within 0.5 deg;
at most angle/rate + 1 s), then closes the links and the recorder.
"""


def register(sub) -> None:
    from .cli import SAFETY

    r = sub.add_parser(
        "rig",
        help="emulate a fin stabiliser rig (vessel, fins, actuators, sensors) behind CAN and serial ptys",
        description=(
            "Run the plant of SCENARIO.toml as an emulated rig behind real links: an SLCAN USB-CAN adapter "
            "and serial lines on pseudo-terminals at the paths LINKS.toml names (its [links] must say "
            "emulated = true). The rig takes FIN_DEMAND frames, publishes fin feedback frames every control "
            "period and motion (roll, roll rate) and speed on the serial lines at their configured rates "
            "and formats. The plant starts with the first demand frame and runs in real time (or "
            "--time-scale times faster) until the scenario ends or Ctrl-C. Writes a run folder: "
            "steps.csv (per step, flushed every second), can.log (raw CAN), steps_truth.csv (the plant's "
            "true state, at the end) and meta.json."
        ),
        epilog=RIG_EPILOG + "\n" + SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    r.add_argument("links", metavar="LINKS.toml", help="links file with emulated = true (see configs/links/)")
    r.add_argument("scenario", metavar="SCENARIO.toml", help="scenario file: vessel, sea, sensors (see configs/scenarios/)")
    r.add_argument("--seed", type=int, default=None, help="override the scenario's random seed")
    r.add_argument("--time-scale", type=float, default=1.0, help="simulated seconds per wall second (default 1 = real time; max 20)")
    r.add_argument("--duration-s", type=float, default=None, help="stop after this much run time (default: the scenario's duration)")
    r.add_argument("--inject", action="append", default=[], metavar="DRILL", help="fault drill, e.g. drop-feedback:port@30+5 (see below)")
    r.add_argument("--wait-s", type=float, default=120.0, help="how long to wait for the controller's first demand (default 120 s)")
    r.add_argument("--out", default=None, help="run folder to create (new or empty); default RUNS_DIR/rig-<UTC time>")
    r.add_argument("--runs-dir", default="runs", help="parent folder for run folders (default ./runs)")
    r.add_argument("--json", action="store_true", help="print the summary as JSON when the rig stops")
    r.set_defaults(func=cmd_rig)

    u = sub.add_parser(
        "run",
        help="run the controller in real time against a rig or ship over CAN and serial, recording everything",
        description=(
            "Step the controller of CONTROLLER.toml at its sample rate on the monotonic clock against the "
            "links of LINKS.toml: motion sensor and speed log on serial lines (NMEA 0183 or the binary "
            "motion frame), fin demands out and fin feedback in over CAN (docs/MESSAGES.md). Inputs go to "
            "the controller with their ages; it judges staleness. Shows a live view (roll, rate, speed, "
            "demands and feedback, mode, faults, timing) and records steps.csv (inputs at full precision, "
            "outputs, timing; flushed every second), can.log and meta.json. The controller starts OFF, is "
            "asked for STANDBY once every input has been valid, then for ACTIVE (unless --no-engage); "
            "after a fault it stays in FAULT (start a new run to re-engage). Reports step lateness (p50/p99/max) and deadline misses."
        ),
        epilog=RUN_EPILOG + "\n" + SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    u.add_argument("links", metavar="LINKS.toml", help="links file (see configs/links/)")
    u.add_argument("controller", metavar="CONTROLLER.toml", help="controller file (see configs/controller/)")
    u.add_argument("--time-scale", type=float, default=1.0, help="must equal the rig's --time-scale when the rig is emulated (default 1)")
    u.add_argument("--duration-s", type=float, default=None, help="stop (fins to centre) after this much run time; default: until Ctrl-C")
    u.add_argument("--no-engage", action="store_true", help="stay in STANDBY: read and record only, fins held at centre")
    u.add_argument("--inject", action="append", default=[], metavar="DRILL", help="runner-side fault drill: drop-demand@T[+D] or corrupt-demand@T[+D]")
    u.add_argument("--feedback-timeout-s", type=float, default=0.1, help="fin feedback older than this is invalid (default 0.1 s)")
    u.add_argument("--no-live", action="store_true", help="no live terminal view")
    u.add_argument("--spin-ms", type=float, default=None,
                   help="wake this long before each step's deadline and spin to it (default: 5 ms or a quarter of a "
                        "step, whichever is less; less = less CPU, more = steadier timing on virtual machines)")
    u.add_argument("--out", default=None, help="run folder to create (new or empty); default RUNS_DIR/run-<UTC time>")
    u.add_argument("--runs-dir", default="runs", help="parent folder for run folders (default ./runs)")
    u.add_argument("--json", action="store_true", help="print the summary as JSON at the end")
    u.set_defaults(func=cmd_run)

    p = sub.add_parser(
        "replay",
        help="replay a recorded run's inputs through the controller and compare the demands bit for bit",
        description=(
            "Read RUN_FOLDER/steps.csv of a `finloop run`, feed its recorded controller inputs through the "
            "controller of CONTROLLER.toml (default: the file the run used) from power-up, and compare "
            "the demands with the recorded ones. Identical code, config and inputs give identical "
            "demands; any difference is reported with the first step where it appears. Exit 0 when "
            "identical, 4 when they differ."
        ),
    )
    p.add_argument("run_folder", metavar="RUN_FOLDER", help="folder written by finloop run")
    p.add_argument("--controller", default=None, metavar="CONTROLLER.toml", help="controller file (default: the run's)")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=cmd_replay)


def _folder(args, stem: str):
    from .runfolder import new_run_folder, utc_now

    return new_run_folder(Path(args.runs_dir), stem, Path(args.out) if args.out else None, utc_now())


def _injections(texts, allowed):
    from .cli import UsageError
    from .injection import InjectionError, parse_injection

    out = []
    for t in texts:
        try:
            out.append(parse_injection(t, allowed))
        except InjectionError as exc:
            raise UsageError(str(exc)) from None
    return tuple(out)


def _time_scale(v: float) -> float:
    from .cli import UsageError

    if not (math.isfinite(v) and 0.1 <= v <= 20.0):
        raise UsageError(f"--time-scale = {v!r}: must be between 0.1 and 20")
    return v


def cmd_rig(args) -> int:
    from .cli import EXIT_OK, SAFETY, UsageError, _clean, _emit
    from .config import load_scenario
    from .injection import RIG_KINDS
    from .links_config import load_links
    from .live import serve_rig

    links = load_links(args.links)
    if not links.emulated:
        raise UsageError(f"{args.links}: [links] emulated = false; `finloop rig` emulates a rig on this machine and needs "
                         "a links file with emulated = true (pty endpoints)")
    scenario = load_scenario(args.scenario)
    inj = _injections(args.inject, RIG_KINDS)
    scale = _time_scale(args.time_scale)
    folder = _folder(args, "rig")
    print(SAFETY.replace("CAUTION:", "CAUTION (emulated rig — no fins move; the same commands against real hardware move them):"),
          file=sys.stderr)

    def ready(paths):
        print("rig ready: " + ", ".join(f"{k} at {v}" for k, v in paths.items()) + f"; waiting for the controller; folder {folder}",
              file=sys.stderr, flush=True)

    summary = serve_rig(scenario, links, folder, seed=args.seed, time_scale=scale, injections=inj,
                        duration_s=args.duration_s, wait_for_controller_s=args.wait_s, ready=ready)
    out = {"run_folder": str(folder), **_clean(summary)}
    t = summary["timing"]
    text = (f"rig {summary['status']} ({summary['reason']}): {summary['rig']['steps']} steps, "
            f"demand frames {summary['rig']['demand_frames']}, watchdog trips {summary['rig']['watchdog_trips']}, "
            f"lateness p99 {t.get('lateness_p99_us', float('nan')):.0f} us, misses {t.get('deadline_misses', 0)}; folder {folder}")
    _emit(args, out, text)
    return EXIT_OK


def cmd_run(args) -> int:
    from .cli import EXIT_OK, SAFETY, UsageError, _clean, _emit
    from .controller_config import load_controller
    from .injection import RUNNER_KINDS
    from .links_config import load_links
    from .live import run_live

    links = load_links(args.links)
    params = load_controller(args.controller)
    inj = _injections(args.inject, RUNNER_KINDS)
    scale = _time_scale(args.time_scale)
    if not links.emulated and scale != 1.0:
        raise UsageError("--time-scale other than 1 is only for emulated rigs (real hardware runs in real time)")
    if args.spin_ms is None:
        args.spin_ms = min(5.0, 0.25 * params.dt * 1000.0 / scale)
    if not (0.0 <= args.spin_ms <= 0.5 * params.dt * 1000.0 / scale):
        raise UsageError(f"--spin-ms = {args.spin_ms!r}: must be between 0 and half a step ({0.5 * params.dt * 1000.0 / scale:g} ms)")
    if not (0.0 < args.feedback_timeout_s <= 5.0):
        raise UsageError(f"--feedback-timeout-s = {args.feedback_timeout_s!r}: must be in (0, 5] s")
    folder = _folder(args, "run")
    if not links.emulated:
        print(SAFETY + "\nThis run commands REAL fin actuators through " + links.can.channel +
              ". Everyone clear of the fins; e-stop and hydraulic isolation within reach.", file=sys.stderr, flush=True)
    summary = run_live(params, links, folder, time_scale=scale, duration_s=args.duration_s, engage=not args.no_engage,
                       injections=inj, feedback_timeout_s=args.feedback_timeout_s,
                       live_view=not args.no_live and sys.stderr.isatty(), controller_file=str(Path(args.controller).resolve()),
                       spin_s=args.spin_ms / 1000.0)
    out = {"run_folder": str(folder), **_clean(summary)}
    t = summary["timing"]
    text = (f"run {summary['status']} ({summary['reason']}): {t.get('steps', 0)} steps, misses {t.get('deadline_misses', 0)}, "
            f"lateness p50 {t.get('lateness_p50_us', float('nan')):.0f} us / p99 {t.get('lateness_p99_us', float('nan')):.0f} us / "
            f"max {t.get('lateness_max_us', float('nan')):.0f} us; final mode {summary['final_mode']}, faults {summary['final_faults']}, "
            f"fins centred at close: {summary['centred_at_close']}; folder {folder}")
    _emit(args, out, text)
    return EXIT_OK


def cmd_replay(args) -> int:
    from .cli import EXIT_OK, UsageError, _emit
    from .controller_config import load_controller
    from .recorder import read_steps_csv
    from .runner import INPUT_COLUMNS, replay_inputs

    folder = Path(args.run_folder)
    meta_p, steps_p = folder / "meta.json", folder / "steps.csv"
    if not steps_p.is_file() or not meta_p.is_file():
        raise UsageError(f"{folder}: not a run folder (needs steps.csv and meta.json written by finloop run)")
    meta = json.loads(meta_p.read_text())
    ctl = args.controller or meta.get("controller_file")
    if not ctl:
        raise UsageError(f"{meta_p}: names no controller file; give --controller")
    params = load_controller(ctl)
    table = read_steps_csv(steps_p)
    cols = list(table.columns)
    missing = [c for c in INPUT_COLUMNS + ("demand_port_rad", "demand_stbd_rad") if c not in cols]
    if missing:
        raise UsageError(f"{steps_p}: missing columns {', '.join(missing)} (not a finloop run record?)")
    data = table.data
    rows = data[:, [cols.index(c) for c in INPUT_COLUMNS]]
    outs = replay_inputs(params, rows.tolist())
    rec_p, rec_s = data[:, cols.index("demand_port_rad")], data[:, cols.index("demand_stbd_rad")]
    first = None
    for k, o in enumerate(outs):
        if o.fin_port != rec_p[k] or o.fin_stbd != rec_s[k]:
            first = k
            break
    res = {"run_folder": str(folder), "controller_file": str(ctl), "steps": len(outs), "identical": first is None,
           "first_difference_step": first, "torn_lines_dropped": getattr(table, "dropped", 0)}
    _emit(args, res, f"replayed {len(outs)} steps of {folder}: " +
          ("demands identical bit for bit" if first is None else f"DIFFERENT from step {first}"))
    return EXIT_OK if first is None else 4
