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


def cmd_sim(args) -> int:
    from .config import file_sha256, load_scenario
    from .runfolder import base_meta, new_run_folder, utc_now, write_json, write_steps_csv
    from .simulate import run_passive

    scenario = load_scenario(args.scenario)
    for w in scenario.warnings:
        print(str(w), file=sys.stderr)
    seed = scenario.setup.seed if args.seed is None else args.seed
    start = utc_now()
    folder = new_run_folder(Path(args.runs_dir), Path(args.scenario).stem, Path(args.out) if args.out else None, start)
    result = run_passive(scenario, seed)
    v = scenario.vessel.params
    metrics = dict(result.metrics)
    metrics.update(
        natural_period_s=v.natural_period_s,
        duration_s=float(result.records["t_s"][-1]),
        seed=seed,
        stabiliser="off",
    )
    header = write_steps_csv(folder / "steps.csv", result.records)
    meta = base_meta(start)
    meta.update(
        scenario=scenario.name,
        scenario_file=str(Path(args.scenario)),
        seed=seed,
        config_sha256=file_sha256(scenario.files),
        files={str(p): file_sha256([p]) for p in scenario.files},
        stabiliser="off",
        control_rate_hz=1.0 / scenario.setup.control_dt_s,
        substeps=scenario.setup.substeps,
        warmup_s=scenario.warmup_s,
        fins_when_off=scenario.setup.fins_when_off,
        warnings=[str(w) for w in scenario.warnings],
        excitation_notes=list(result.excitation_notes),
        stopped_early=result.error,
        csv_columns=header,
    )
    write_json(folder / "meta.json", _clean(meta))
    write_json(folder / "metrics.json", _clean(metrics))
    plots = []
    if not args.no_plots:
        from .plots import plot_passive

        plots = plot_passive(folder, result.records, scenario)
    out = {"run_folder": str(folder), **_clean(metrics), "plots": [str(p) for p in plots]}
    if result.error:
        out["stopped_early"] = result.error
    text = _sim_text(scenario, folder, metrics, result.error)
    _emit(args, out, text)
    if result.error:
        print(f"finloop sim: run stopped early: {result.error} (records up to then are in {folder})", file=sys.stderr)
        return EXIT_RUN_STOPPED
    return EXIT_OK


def _sim_text(scenario, folder, m, error) -> str:
    lines = [
        f"{scenario.name} — stabiliser off, seed {m['seed']}",
        f"  natural roll period   {m['natural_period_s']:8.2f} s",
        f"  duration              {m['duration_s']:8.1f} s  (statistics from {m['stats_from_s']:.0f} s)",
        f"  roll RMS              {m['roll_rms_deg']:8.2f} deg",
        f"  roll mean             {m['roll_mean_deg']:8.2f} deg",
        f"  significant amplitude {m['roll_sig_amp_deg']:8.2f} deg  (2 sigma)",
        f"  roll max              {m['roll_max_deg']:8.2f} deg",
        f"  fin drag power        {m['fin_drag_power_kw']:8.1f} kW  (mean)",
        f"  run folder            {folder}",
    ]
    if error:
        lines.append(f"  STOPPED EARLY: {error}")
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
        else:
            problems.add(Problem(str(path), "", NO_VALUE, "",
                                 "not a finloop config: expected a [scenario], [vessel] or [controller] table"))
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
            "Simulate SCENARIO.toml at its fixed control rate and write a run folder: steps.csv "
            "(one row per control step, units in the column names), meta.json (seed, config hash, "
            "version), metrics.json and PNG plots. Prints roll statistics (RMS, significant "
            "amplitude = 2 sigma, max) taken after the scenario's warm-up."
        ),
        epilog="example: finloop sim configs/scenarios/beam_sea_service_speed.toml --stabiliser off",
    )
    s.add_argument("scenario", metavar="SCENARIO.toml", help="scenario file (see configs/scenarios/)")
    s.add_argument(
        "--stabiliser",
        choices=["off"],
        default="off",
        help="off: fins demanded to centre all run (the passive ship). Closed-loop modes arrive with the tuning work.",
    )
    s.add_argument("--seed", type=_nonneg_int, default=None, help="override the scenario's random seed")
    s.add_argument("--out", default=None, help="run folder to create (must be new or empty); default: RUNS_DIR/<scenario>-<UTC time>")
    s.add_argument("--runs-dir", default="runs", help="parent folder for run folders (default: ./runs)")
    s.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    s.add_argument("--json", action="store_true", help="print the metrics as JSON on stdout")
    s.set_defaults(func=cmd_sim)

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
    except Exception as exc:  # a bug: one line, traceback only on request
        if args.debug:
            traceback.print_exc()
        print(f"finloop {args.command}: internal error: {type(exc).__name__}: {exc} (rerun with --debug for the traceback)",
              file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
