"""``finloop`` command line: simulate, validate (and, as they land, tune, sweep, bench).

Every command has ``--help`` and ``--json``. Bad input gives one clear line per problem (file, key
path, value, unit, allowed range) and exit code 2, never a traceback. Exit codes: 0 ok, 1 internal
error (a bug: please report), 2 bad input, 3 the run stopped early (results up to then are kept).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import traceback
from pathlib import Path

EXIT_OK, EXIT_INTERNAL, EXIT_BAD_INPUT, EXIT_RUN_STOPPED = 0, 1, 2, 3

SAFETY = (
    "CAUTION: stabiliser fins are powerful hydraulic machinery. Keep clear of moving fins; have the\n"
    "emergency stop and hydraulic isolation within reach; class society rules and local codes\n"
    "prevail. finloop does not replace the ship's certified stabiliser control system."
)


class UsageError(Exception):
    """Bad command-line input (exit 2)."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one clear line, exit 2 (argparse prints usage first)
        self.print_usage(sys.stderr)
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message}\n")


def _emit(args, obj: dict, text: str) -> None:
    if getattr(args, "json", False):
        print(json.dumps(obj, indent=2, default=_jsonable))
    elif text:
        print(text)


def _jsonable(o):
    try:
        import numpy as np

        if isinstance(o, (np.floating, np.integer)):
            return o.item()
    except ImportError:  # pragma: no cover
        pass
    if isinstance(o, Path):
        return str(o)
    return str(o)


def _clean(x):
    """JSON has no NaN/inf: give ``None`` for them."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    return x


# ----------------------------------------------------------------------------------------------
# finloop sim
# ----------------------------------------------------------------------------------------------


def _sim_controller(args, scenario):
    """The controller parameters for a closed-loop run: --controller FILE, else the scenario's."""
    if args.controller:
        from .controller_config import load_controller

        return load_controller(args.controller), Path(args.controller)
    if scenario.controller is None:
        raise UsageError(
            f"{args.scenario}: the scenario names no controller file (key controller_file); "
            "give one with --controller CONTROLLER.toml for --stabiliser on/both"
        )
    return scenario.controller, scenario.controller_file


def run_metrics(result, scenario) -> dict:
    """Roll, fin and comfort metrics of one run (trade units)."""
    from .metrics import fin_metrics

    m = dict(result.metrics)
    m.update(fin_metrics(result.records, scenario.warmup_s))
    m.update(_comfort(result.records, scenario))
    return m


def _comfort(records, scenario) -> dict:
    try:
        from .comfort import comfort_metrics
    except ImportError:  # pragma: no cover - comfort module not present
        return {}
    spec = getattr(scenario, "comfort", None)
    if spec is None:
        return {}
    return comfort_metrics(records, spec, scenario.warmup_s)


def cmd_sim(args) -> int:
    from .config import file_sha256, load_scenario
    from .metrics import roll_reduction_pct
    from .runfolder import base_meta, new_run_folder, utc_now, write_json, write_steps_csv
    from .simulate import run_passive

    scenario = load_scenario(args.scenario)
    for w in scenario.warnings:
        print(str(w), file=sys.stderr)
    seed = scenario.setup.seed if args.seed is None else args.seed
    modes = {"off": ["off"], "on": ["on"], "both": ["off", "on"]}[args.stabiliser]
    params = controller_file = None
    if "on" in modes:
        from .closed_loop import check_rates

        params, controller_file = _sim_controller(args, scenario)
        try:
            check_rates(scenario, params)
        except ValueError as exc:
            raise UsageError(str(exc)) from None
    if args.ideal and "off" not in modes:
        modes = ["off", *modes]  # the bound needs the passive record (same sea); not written unless asked
    start = utc_now()
    folder = new_run_folder(Path(args.runs_dir), Path(args.scenario).stem, Path(args.out) if args.out else None, start)
    results, metrics = {}, {}
    for mode in modes:
        if mode == "off":
            results[mode] = run_passive(scenario, seed)
        else:
            from .closed_loop import run_closed_loop

            results[mode] = run_closed_loop(scenario, params, seed)
        metrics[mode] = run_metrics(results[mode], scenario)
    shown = [m for m in ("off", "on") if m in modes and (m != "off" or args.stabiliser != "on")]
    files = list(scenario.files) + ([controller_file] if controller_file and Path(controller_file) not in scenario.files else [])
    headers = {}
    for mode in shown:
        name = "steps.csv" if len(shown) == 1 else f"steps_{mode}.csv"
        headers[name] = write_steps_csv(folder / name, results[mode].records)
    v = scenario.vessel.params
    common = dict(
        natural_period_s=v.natural_period_s,
        duration_s=float(results[modes[-1]].records["t_s"][-1]),
        seed=seed,
        stabiliser=args.stabiliser,
    )
    out_metrics = dict(metrics[shown[-1]])
    out_metrics.update(common)
    if "off" in metrics and "on" in metrics:
        out_metrics["roll_reduction_pct"] = roll_reduction_pct(metrics["off"], metrics["on"])
    elif "on" in shown:
        out_metrics["roll_reduction_pct"] = None  # needs the passive run: use --stabiliser both
    if args.ideal:
        from .ideal import efficiency, ideal_bound

        bound = ideal_bound(scenario, seed=seed, records=results["off"].records)
        out_metrics["ideal_roll_reduction_pct"] = bound.ideal_roll_reduction_pct
        if out_metrics.get("roll_reduction_pct") is not None:
            out_metrics["efficiency"] = efficiency(out_metrics["roll_reduction_pct"], bound)
        out_metrics["ideal_bound"] = bound.summary()
    if len(shown) == 2:
        out_metrics["off"] = metrics["off"]
        out_metrics["on"] = metrics["on"]
    meta = base_meta(start)
    meta.update(
        scenario=scenario.name,
        scenario_file=str(Path(args.scenario)),
        controller_file=str(controller_file) if controller_file else None,
        seed=seed,
        config_sha256=file_sha256(files),
        files={str(p): file_sha256([p]) for p in files},
        stabiliser=args.stabiliser,
        control_rate_hz=1.0 / scenario.setup.control_dt_s,
        substeps=scenario.setup.substeps,
        warmup_s=scenario.warmup_s,
        fins_when_off=scenario.setup.fins_when_off,
        warnings=[str(w) for w in scenario.warnings],
        excitation_notes=list(results[modes[-1]].excitation_notes),
        stopped_early={m: results[m].error for m in modes if results[m].error} or None,
        csv_columns=headers,
    )
    write_json(folder / "meta.json", _clean(meta))
    write_json(folder / "metrics.json", _clean(out_metrics))
    plots = []
    if not args.no_plots:
        from .plots import plot_closed_loop, plot_passive

        if shown == ["off"]:
            plots = plot_passive(folder, results["off"].records, scenario)
        else:
            plots = plot_closed_loop(folder, {m: results[m].records for m in shown}, scenario, params)
    out = {"run_folder": str(folder), **_clean(out_metrics), "plots": [str(p) for p in plots]}
    errors = {m: results[m].error for m in modes if results[m].error}
    if errors:
        out["stopped_early"] = errors
    _emit(args, out, _sim_text(scenario, folder, out_metrics, metrics, shown, errors))
    if errors:
        for m, e in errors.items():
            print(f"finloop sim: run stopped early (stabiliser {m}): {e} (records up to then are in {folder})",
                  file=sys.stderr)
        return EXIT_RUN_STOPPED
    return EXIT_OK


_SIM_ROWS = (
    ("roll RMS", "roll_rms_deg", "deg", ".2f"),
    ("roll mean", "roll_mean_deg", "deg", ".2f"),
    ("significant amplitude", "roll_sig_amp_deg", "deg", ".2f"),
    ("roll max", "roll_max_deg", "deg", ".2f"),
    ("fin RMS", "fin_rms_deg", "deg", ".2f"),
    ("fin max", "fin_max_deg", "deg", ".2f"),
    ("fin rate RMS", "fin_rate_rms_deg_s", "deg/s", ".2f"),
    ("time at angle limit", "time_at_angle_limit_pct", "%", ".1f"),
    ("time at rate limit", "time_at_rate_limit_pct", "%", ".1f"),
    ("time at stall/load limit", "time_at_stall_or_load_limit_pct", "%", ".1f"),
    ("lateral accel RMS", "lateral_accel_rms_g", "g", ".4f"),
    ("MII standing people", "mii_per_min", "/min", ".3f"),
    ("MII object", "mii_object_per_min", "/min", ".3f"),
    ("fin drag power (mean)", "fin_drag_power_kw", "kW", ".1f"),
)


def _sim_text(scenario, folder, out, per_run, shown, errors) -> str:
    lines = [f"{scenario.name} — stabiliser {out['stabiliser']}, seed {out['seed']}",
             f"  natural roll period {out['natural_period_s']:.2f} s; duration {out['duration_s']:.1f} s "
             f"(statistics from {out['stats_from_s']:.0f} s)"]
    lines.append(f"  {'':30s}" + "".join(f"{('stabiliser ' + m):>16s}" for m in shown))
    for label, key, unit, fmt in _SIM_ROWS:
        vals = [per_run[m].get(key) for m in shown]
        if all(v is None for v in vals):
            continue
        cells = "".join(f"{format(v, fmt) if isinstance(v, (int, float)) and math.isfinite(v) else '-':>16s}" for v in vals)
        lines.append(f"  {label + ', ' + unit:30s}{cells}")
    crit = per_run[shown[-1]].get("nordforsk_criterion")
    if crit:
        for m in shown:
            r = per_run[m]
            ok = lambda b: "within" if b else "OUTSIDE"  # noqa: E731
            lines.append(f"  NORDFORSK 1987 '{crit}' ({m}): roll {ok(r.get('nordforsk_roll_ok'))}, "
                         f"lateral acceleration {ok(r.get('nordforsk_lat_acc_ok'))} the limits")
    rr = out.get("roll_reduction_pct")
    if rr is not None:
        lines.append(f"  roll reduction          {rr:8.1f} %  (1 - sigma_on/sigma_off, same sea and seed)")
    if out.get("ideal_roll_reduction_pct") is not None:
        lines.append(f"  ideal bound             {out['ideal_roll_reduction_pct']:8.1f} %  (perfect foresight, same fins and limits)")
        if out.get("efficiency") is not None:
            lines.append(f"  efficiency              {out['efficiency']:8.3f}    (roll reduction / ideal bound)")
    lines.append(f"  run folder              {folder}")
    for m, e in errors.items():
        lines.append(f"  STOPPED EARLY ({m}): {e}")
    return "\n".join(lines)


# ----------------------------------------------------------------------------------------------
# finloop sweep
# ----------------------------------------------------------------------------------------------


def cmd_sweep(args) -> int:
    import time

    from .config import file_sha256
    from .runfolder import base_meta, new_run_folder, utc_now, write_json
    from .sweep import load_envelope, plot_sweep, run_sweep, write_sweep_csv

    env = load_envelope(args.envelope)
    for w in env.base.warnings:
        print(str(w), file=sys.stderr)
    if args.workers is not None and args.workers < 1:
        raise UsageError(f"--workers must be >= 1, got {args.workers}")
    start = utc_now()
    folder = new_run_folder(Path(args.runs_dir), Path(args.envelope).stem, Path(args.out) if args.out else None, start)
    t0 = time.perf_counter()
    if args.no_progress:
        rows = run_sweep(env, workers=args.workers)
    else:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

        with Progress(TextColumn("sweep"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(), TimeRemainingColumn(),
                      console=Console(stderr=True), transient=True) as prog:
            task = prog.add_task("points", total=env.n_points)
            rows = run_sweep(env, workers=args.workers, progress=lambda d, n: prog.update(task, completed=d))
    wall = time.perf_counter() - t0
    header = write_sweep_csv(folder / "sweep.csv", rows)
    summary = {
        "envelope": env.name,
        "points": env.n_points,
        "runs": 2 * env.n_points,
        "run_duration_s": env.duration_s,
        "seed": env.seed,
        "wall_time_s": wall,
        "runs_per_s": 2 * env.n_points / wall if wall > 0 else None,
        "synchronous_points": sum(r["synchronous"] for r in rows),
        "saturated_points": sum(r["saturated"] for r in rows),
        "stopped_early_points": sum(bool(r["stopped_early"]) for r in rows),
    }
    write_json(folder / "sweep.json", _clean({"summary": summary, "points": rows}))
    meta = base_meta(start)
    meta.update(envelope_file=str(Path(args.envelope)), seed=env.seed, config_sha256=file_sha256(env.files),
                files={str(p): file_sha256([p]) for p in env.files}, csv_columns=header, workers=args.workers)
    write_json(folder / "meta.json", _clean(meta))
    plots = [] if args.no_plots else plot_sweep(folder, rows, env)
    out = {"run_folder": str(folder), **_clean(summary), "plots": [str(p) for p in plots]}
    if args.json:
        out["points"] = _clean(rows)
    _emit(args, out, _sweep_text(env, rows, summary, folder))
    return EXIT_OK if not summary["stopped_early_points"] else EXIT_RUN_STOPPED


def _sweep_text(env, rows, summary, folder) -> str:
    lines = [f"{env.name}: {summary['points']} points x (off, on), {env.duration_s:g} s each, seed {env.seed}; "
             f"{summary['wall_time_s']:.1f} s wall ({summary['runs_per_s']:.2f} runs/s)",
             f"  {'sea':>10s} {'speed kn':>8s} {'head deg':>8s} {'off deg':>8s} {'on deg':>8s} {'RR %':>7s} {'fin deg':>8s} "
             f"{'T_e/T_r':>8s}  flags"]
    for r in rows:
        flags = ",".join(f for f, on in (("synchronous", r["synchronous"]), ("saturated", r["saturated"]),
                                          ("STOPPED", bool(r["stopped_early"]))) if on)
        rr = r["roll_reduction_pct"]
        rr_text = f"{rr:7.1f}" if math.isfinite(rr) else f"{'-':>7s}"  # no roll without the stabiliser (e.g. following seas)
        lines.append(f"  {r['sea_state'][:10]:>10s} {r['speed_kn']:8.1f} {r['heading_deg']:8.0f} {r['roll_std_off_deg']:8.2f} "
                     f"{r['roll_std_on_deg']:8.2f} {rr_text} {r['fin_rms_deg']:8.2f} "
                     f"{r['encounter_to_roll_period_ratio']:8.2f}  {flags}")
    lines.append(f"  run folder {folder}")
    return "\n".join(lines)


# ----------------------------------------------------------------------------------------------
# finloop validate
# ----------------------------------------------------------------------------------------------


def validate_file(path: str):
    """Check one config file of any kind; returns (kind, problems list)."""
    from .config import detect_kind, read_scenario, read_vessel
    from .configio import NO_VALUE, Problem, Problems, read_toml

    problems = Problems()
    table = read_toml(path, problems)
    kind = None
    if table is not None:
        kind = detect_kind(table)
        if kind == "scenario":
            read_scenario(Path(path), table, problems)
        elif kind == "vessel":
            read_vessel(Path(path), table, problems)
        elif kind == "controller":
            from .controller_config import read_controller_file

            read_controller_file(Path(path), table, problems)
        elif kind == "envelope":
            from .sweep import _read_envelope

            _read_envelope(Path(path), table, problems)
        elif kind == "links":
            from .links_config import read_links_file

            read_links_file(Path(path), table, problems)
        else:
            problems.add(Problem(str(path), "", NO_VALUE, "",
                                 "not a finloop config: expected a [scenario], [vessel], [controller], [envelope] or [links] table"))
    return kind, problems.items


def cmd_validate(args) -> int:
    results = []
    bad = False
    for f in args.files:
        kind, items = validate_file(f)
        errors = [str(p) for p in items if p.severity == "error"]
        warnings = [str(p) for p in items if p.severity == "warning"]
        bad |= bool(errors)
        results.append({"file": f, "kind": kind, "ok": not errors, "errors": errors, "warnings": warnings})
    if args.json:
        print(json.dumps({"ok": not bad, "files": results}, indent=2))
    else:
        for r in results:
            for line in r["errors"] + r["warnings"]:
                print(line, file=sys.stderr if line in r["errors"] else sys.stdout)
            status = "ok" if r["ok"] else f"{len(r['errors'])} error(s)"
            extra = f", {len(r['warnings'])} warning(s)" if r["warnings"] else ""
            print(f"{r['file']}: {r['kind'] or 'unknown kind'}: {status}{extra}")
    return EXIT_BAD_INPUT if bad else EXIT_OK


# ----------------------------------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="finloop",
        description=(
            "Tune, bench-prove and trial-analyse active fin roll stabilisers. "
            "Configs are TOML files in trade units (see configs/)."
        ),
        epilog=SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--debug", action="store_true", help="show a full traceback on internal errors")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    s = sub.add_parser(
        "sim",
        help="simulate a scenario (vessel, sea, fins, sensors) and write a run folder",
        description=(
            "Simulate SCENARIO.toml at its fixed control rate, with the stabiliser off (fins centred), on "
            "(the controller in closed loop with modelled sensors and actuators) or both over the same "
            "sea, and write a run folder: steps.csv (one row per control step, units in the column "
            "names; steps_off.csv and steps_on.csv for both), meta.json (seed, config hashes, version), "
            "metrics.json and PNG plots. Statistics are taken after the scenario's warm-up: roll RMS, "
            "significant amplitude (2 sigma), max; fin angle and rate; time at the angle, rate and "
            "stall/load limits; lateral acceleration, motion-induced interruptions (Graham 1990) and "
            "the NORDFORSK 1987 check at the scenario's deck point; fin drag power; and for both the "
            "roll reduction RR = 1 - sigma_on/sigma_off."
        ),
        epilog=("examples:\n  finloop sim configs/scenarios/beam_sea_service_speed.toml --stabiliser both\n"
                "  finloop sim configs/scenarios/beam_sea_service_speed.toml --stabiliser both --ideal --json\n\n" + SAFETY),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    s.add_argument("scenario", metavar="SCENARIO.toml", help="scenario file (see configs/scenarios/)")
    s.add_argument(
        "--stabiliser",
        choices=["off", "on", "both"],
        default="off",
        help=("off: fins demanded to centre all run (the passive ship); on: the controller in closed loop; "
              "both: off and on over the same sea (same seed), with the roll reduction (default: off)"),
    )
    s.add_argument("--controller", default=None, metavar="CONTROLLER.toml",
                   help="controller config for on/both (default: the scenario's controller_file)")
    s.add_argument("--ideal", action="store_true",
                   help="also compute the ideal bound (best roll reduction with perfect foresight, same fins and "
                        "limits; a QP, ~10 s) and the efficiency = roll reduction / ideal bound")
    s.add_argument("--seed", type=_nonneg_int, default=None, help="override the scenario's random seed")
    s.add_argument("--out", default=None, help="run folder to create (must be new or empty); default: RUNS_DIR/<scenario>-<UTC time>")
    s.add_argument("--runs-dir", default="runs", help="parent folder for run folders (default: ./runs)")
    s.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    s.add_argument("--json", action="store_true", help="print the metrics as JSON on stdout")
    s.set_defaults(func=cmd_sim)

    w = sub.add_parser(
        "sweep",
        help="simulate a grid of speeds x headings x sea states, off and on, and map the roll reduction",
        description=(
            "Run every point of ENVELOPE.toml (speeds x headings x sea states; see configs/envelopes/) twice "
            "over the same sea (same seed): stabiliser off and on. Points run in parallel worker processes. "
            "Writes sweep.csv and sweep.json (one row per point: roll sigma off/on, roll reduction, fin use, "
            "time at limits, encounter period at the spectral peak over the natural roll period, and flags), "
            "meta.json and polar plots of roll reduction and residual roll against heading, one line per "
            "speed. Flags: 'synchronous' when the encounter period at the spectral peak is within the "
            "envelope's sync_band_pct of the natural roll period; 'saturated' when the fins spend more than "
            "saturation_pct of the time at the angle, rate or stall/load limit."
        ),
        epilog="example: finloop sweep configs/envelopes/demo_pax_135.toml --workers 2",
    )
    w.add_argument("envelope", metavar="ENVELOPE.toml", help="envelope file (see configs/envelopes/)")
    w.add_argument("--workers", type=int, default=None, help="worker processes (default: one per CPU; 1 = run in this process)")
    w.add_argument("--out", default=None, help="folder to create (must be new or empty); default: RUNS_DIR/<envelope>-<UTC time>")
    w.add_argument("--runs-dir", default="runs", help="parent folder for result folders (default: ./runs)")
    w.add_argument("--no-plots", action="store_true", help="skip the polar plots")
    w.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    w.add_argument("--json", action="store_true", help="print the summary and every point as JSON on stdout")
    w.set_defaults(func=cmd_sweep)

    v = sub.add_parser(
        "validate",
        help="check config files (scenario, vessel, controller) and list every problem",
        description=(
            "Check each FILE and report every problem at once: unknown or missing keys, wrong types, "
            "values outside their physical range (with the allowed range), plus warnings for legal "
            "but unusual values. A scenario is checked together with the vessel file it names. "
            "Exit code 0 when all files are valid, 2 otherwise."
        ),
    )
    v.add_argument("files", nargs="+", metavar="FILE", help="TOML config file(s)")
    v.add_argument("--json", action="store_true", help="print the result as JSON")
    v.set_defaults(func=cmd_validate)

    from .cmd_hil import register as _register_hil
    from .cmd_tune import register as _register_tune

    _register_tune(sub)
    _register_hil(sub)
    return p


def _nonneg_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {v}")
    return v


def main(argv: list[str] | None = None) -> int:
    from .configio import ConfigError

    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except ConfigError as exc:
        for p in exc.problems:
            print(str(p), file=sys.stderr)
        if getattr(args, "json", False):
            print(json.dumps({"ok": False, "errors": [str(p) for p in exc.errors],
                              "warnings": [str(p) for p in exc.problems if p.severity == "warning"]}, indent=2))
        return EXIT_BAD_INPUT
    except (FileExistsError, UsageError) as exc:
        print(f"finloop {args.command}: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:  # output piped into e.g. `head`: not an error of ours
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except KeyboardInterrupt:
        print(f"finloop {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a link that cannot be used, or a bug: one line, traceback only on request
        from .links import LinkError

        if isinstance(exc, LinkError):
            print(f"finloop {args.command}: link problem: {exc} (is the rig or adapter connected, and the path in the "
                  "links file right?)", file=sys.stderr)
            return EXIT_BAD_INPUT
        if args.debug:
            traceback.print_exc()
        print(f"finloop {args.command}: internal error: {type(exc).__name__}: {exc} (rerun with --debug for the traceback)",
              file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
