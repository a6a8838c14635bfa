"""``finloop tune``: speed-scheduled gains from the linearised roll loop (see :mod:`hil.tune`).

Wire it into the CLI with one line in ``hil.cli.build_parser`` after the other sub-parsers::

    from .cmd_tune import register as _register_tune; _register_tune(sub)

``register(subparsers, common=None)`` adds the ``tune`` sub-parser; ``common`` may be a parent
parser (or a list of them) whose options every command shares. ``cmd_tune(args) -> int`` runs it
and handles its own bad input (one line per problem, exit 2), so it works with or without
:func:`hil.cli.main` around it. ``python -m hil.cmd_tune …`` runs it stand-alone.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import math
import sys
from pathlib import Path

EXIT_OK, EXIT_BAD_INPUT = 0, 2

_DESCRIPTION = """\
Design speed-scheduled stabiliser gains for VESSEL.toml from a linear model of the roll loop
(hull + fins + servo lag and delay + the controller's own filters), starting from the controller
file given with --base.

Two objectives (--objective):
  damping         (default) the gain SHAPE of the base controller (roll : roll rate : roll
                  acceleration) is kept and one factor per speed gives the dominant closed-loop roll
                  motion the target damping ratio.
  roll-reduction  the three gains are chosen to give the largest predicted roll reduction in the
                  design sea: first the shape at the reference speed, then one factor per speed on
                  that shape (the file holds one gain table for all three gains). For comparison the
                  best gains with a shape of each speed's own are listed too.
Either way a gain is held back, and the speed reported as LIMITED (damping) or the binding limits
named (roll-reduction), when the fin demand would run out of angle or rate in the design sea
(peak factor x RMS beyond the limit; sensor noise included when known), or when gain margin,
phase margin, peak sensitivity or the crossover frequency would fall short. The factors are
written as a gain table (schedule rule "table") in a copy of the base file; nothing else changes.

Columns of the table:
  factor    gain multiplier at that speed relative to the written gains (1 at the reference speed)
  zeta      closed-loop damping ratio of the roll motion (passive ship: a few hundredths)
  wn        natural frequency of that roll motion, rad/s
  GM / PM   gain margin (dB) and phase margin (deg) of the loop broken at the fin demand
            ("inf": the loop gain never reaches that crossing); larger = more robust
  |S|max    peak sensitivity: the most any wave frequency is amplified by the control
            (1 = never; 2 is a common upper bound)
  roll off/on  predicted RMS roll without / with the stabiliser in the design sea, deg
  RR        roll reduction 1 - RMS on / RMS off
  fin, rate predicted RMS fin angle (deg) and fin rate (deg/s) as the servo moves the fin
  d.rate    predicted RMS rate of the fin demand (deg/s), the figure checked against the rate
            limit: peak factor x d.rate <= limit (sensor noise, differentiated by the
            acceleration term, can be a large part of it)
The predictions are linear: they ignore stall and saturation and assume 100 % gain trim."""

_EPILOG = """\
example:
  finloop tune configs/vessels/demo_pax_135.toml --base configs/controller/demo_pax_135.toml \\
      --hs-m 3 --tp-s 9.5 --heading-deg 90 --out my_tuned.toml
  finloop tune configs/vessels/demo_pax_135.toml --base configs/controller/demo_pax_135.toml \\
      --objective roll-reduction --scenario configs/scenarios/beam_sea_service_speed.toml

tune moves no fins: prove tuned gains on the simulator and on the bench before any sea trial."""

NOTE = "note: tune predicts from a linear model and moves no fins; prove the gains on the simulator and the bench first."


class _BadInput(Exception):
    """Bad option value (exit 2)."""


def _positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return v


def register(subparsers, common=None) -> argparse.ArgumentParser:
    """Add the ``tune`` sub-parser to ``subparsers`` (from ``add_subparsers``); returns it."""
    parents = [] if common is None else (list(common) if isinstance(common, (list, tuple)) else [common])
    t = subparsers.add_parser(
        "tune",
        parents=parents,
        help="design speed-scheduled gains from the linearised roll loop and write a controller file",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    t.add_argument("vessel", metavar="VESSEL.toml", help="vessel file (hull, fins, actuators; see configs/vessels/)")
    t.add_argument("--base", required=True, metavar="CONTROLLER.toml",
                   help="controller file to start from: its gain shape, filters, limits and everything else are kept")
    t.add_argument("--objective", choices=("damping", "roll-reduction"), default="damping",
                   help="damping: keep the base gain shape, reach --target-damping (default); roll-reduction: "
                        "choose roll, rate and acceleration gains for the largest predicted roll reduction")
    t.add_argument("--target-damping", type=_positive_float, default=0.3, metavar="ZETA",
                   help="closed-loop roll damping ratio to aim for, 0.05..0.9 (default 0.3: resonant roll "
                        "amplification 1/(2 zeta) of about 1.7 instead of about 10 for the passive ship)")
    t.add_argument("--speeds-kn", default=None, metavar="LIST",
                   help="comma-separated design speeds in knots, increasing, 2..16 of them, all above the cut-out "
                        "speed (default: every 2 kn from the re-engage speed to the base schedule's top speed)")
    sea = t.add_argument_group("design sea state (JONSWAP) — or take it from a scenario")
    sea.add_argument("--hs-m", type=_positive_float, default=None, help="significant wave height, m (default 3.0)")
    sea.add_argument("--tp-s", type=_positive_float, default=None, help="peak period, s (default 9.5)")
    sea.add_argument("--gamma", type=_positive_float, default=None,
                     help="JONSWAP peak enhancement 1..7 (default: DNV-RP-C205 rule from Tp/sqrt(Hs))")
    sea.add_argument("--heading-deg", type=_positive_float, default=None,
                     help="wave heading, deg: 0 following, 90 beam from starboard, 180 head (default 90)")
    sea.add_argument("--scenario", default=None, metavar="SCENARIO.toml",
                     help="take the sea, the heading and the motion sensor latency from this scenario instead")
    sea.add_argument("--roll-noise-deg", type=_positive_float, default=None,
                     help="motion sensor roll noise, 1 sigma per sample, deg (default: from --scenario, else 0)")
    sea.add_argument("--rate-noise-deg-s", type=_positive_float, default=None,
                     help="motion sensor roll-rate noise, 1 sigma per sample, deg/s (default: from --scenario, else 0)")
    lim = t.add_argument_group("constraints")
    lim.add_argument("--peak-factor", type=_positive_float, default=3.0,
                     help="peak factor x RMS fin angle and rate must stay within the limits (default 3)")
    lim.add_argument("--min-gain-margin-db", type=_positive_float, default=6.0, help="default 6 dB")
    lim.add_argument("--min-phase-margin-deg", type=_positive_float, default=30.0, help="default 30 deg")
    lim.add_argument("--max-sensitivity", type=_positive_float, default=2.0, help="largest |S|max, default 2")
    t.add_argument("--heel-trim", action="store_true",
                   help="include the heel-trim integral in the loop (as with the operator's heel trim switched on)")
    t.add_argument("--out", default=None, metavar="FILE.toml", help="write the tuned controller file here")
    t.add_argument("--force", action="store_true", help="overwrite --out if it exists")
    t.add_argument("--json", action="store_true", help="print the results as JSON")
    t.set_defaults(func=cmd_tune)
    return t


# ----------------------------------------------------------------------------------------------


def _check_range(name: str, v: float, lo: float, hi: float, unit: str = "") -> None:
    if not lo <= v <= hi:
        u = f" {unit}" if unit else ""
        raise _BadInput(f"{name} = {v:g}{u}: must be in [{lo:g}, {hi:g}]{u}")


def _speeds(args, base) -> list[float]:
    from controller import KNOT, TABLE_MAX

    cut = base.u_cutout / KNOT
    if args.speeds_kn is None:
        re = base.u_reengage / KNOT
        top = (base.table_speeds[-1] if base.schedule_table else base.u_max) / KNOT
        first = 2.0 * math.ceil(re / 2.0 - 1e-9)
        if first <= cut:
            first += 2.0
        out = []
        s = first
        while s <= top + 1e-9:
            out.append(s)
            s += 2.0
        if len(out) < 2:
            out = [max(first, top - 2.0), max(first, top - 2.0) + 2.0]
        if len(out) > TABLE_MAX:
            step = (out[-1] - out[0]) / (TABLE_MAX - 1)
            out = [round(out[0] + i * step, 3) for i in range(TABLE_MAX)]
        return out
    parts = [p.strip() for p in args.speeds_kn.split(",") if p.strip()]
    try:
        vals = [float(p) for p in parts]
    except ValueError:
        raise _BadInput(f"--speeds-kn = {args.speeds_kn!r}: expected numbers separated by commas, e.g. 8,12,16,20") from None
    if not 2 <= len(vals) <= TABLE_MAX:
        raise _BadInput(f"--speeds-kn = {args.speeds_kn!r}: give 2 to {TABLE_MAX} speeds (got {len(vals)})")
    for v in vals:
        if not (math.isfinite(v) and cut < v <= 60.0):
            raise _BadInput(f"--speeds-kn: {v:g} kn is outside ({cut:g}, 60] kn (above the base controller's cut-out speed)")
    if any(b <= a for a, b in zip(vals, vals[1:])):
        raise _BadInput(f"--speeds-kn = {args.speeds_kn!r}: speeds must be strictly increasing")
    return vals


def _sea(args):
    from . import tune

    sea_opts = [o for o in ("hs_m", "tp_s", "gamma", "heading_deg") if getattr(args, o) is not None]
    if args.scenario is not None:
        if sea_opts:
            raise _BadInput("give either --scenario or --hs-m/--tp-s/--gamma/--heading-deg, not both "
                            f"(got --{sea_opts[0].replace('_', '-')} with --scenario)")
        from plant.excitation import spectrum_of

        from .config import load_scenario

        sc = load_scenario(args.scenario)
        spec = spectrum_of(sc.sea)
        if spec is None:
            raise _BadInput(f"{args.scenario}: sea.spectrum = {sc.sea.kind!r}: tune needs an irregular sea "
                            "(pierson_moskowitz, ittc or jonswap)")
        m = sc.setup.sensors.motion
        sensor_delay = m.latency_s + 0.5 / m.sample_rate_hz
        # noise of each delivered sample; quantisation as uniform noise of variance q²/12 (Widrow &
        # Kollár, Quantization Noise, 2008, ch. 4)
        noise = (math.hypot(m.noise_roll_rad, m.quantisation_roll_rad / math.sqrt(12.0)),
                 math.hypot(m.noise_rate_rad_s, m.quantisation_rate_rad_s / math.sqrt(12.0)) if m.provides_rate else 0.0)
        heading_deg = math.degrees(sc.heading_rad)
        label = f"{sc.sea.kind} Hs {sc.sea.hs_m:g} m"
        for key, name in (("tp_s", "Tp"), ("t1_s", "T1"), ("tz_s", "Tz")):
            if getattr(sc.sea, key) is not None:
                label += f", {name} {getattr(sc.sea, key):g} s"
        if getattr(spec, "gamma", None) is not None:
            label += f", gamma {spec.gamma:.2f}"
        label += f", heading {heading_deg:g} deg (from {args.scenario})"
        return tune.SeaState(spec, sc.heading_rad, label), sensor_delay, noise
    hs = 3.0 if args.hs_m is None else args.hs_m
    tp = 9.5 if args.tp_s is None else args.tp_s
    heading = 90.0 if args.heading_deg is None else args.heading_deg
    _check_range("--hs-m", hs, 0.1, 20.0, "m")
    _check_range("--tp-s", tp, 2.0, 30.0, "s")
    _check_range("--heading-deg", heading, 0.0, 360.0, "deg")
    if args.gamma is not None:
        _check_range("--gamma", args.gamma, 1.0, 7.0)
    return tune.SeaState.jonswap(hs, tp, heading, args.gamma), 0.0, (0.0, 0.0)


def _sha256(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _command_line(args, speeds) -> str:
    parts = ["finloop tune", str(args.vessel), "--base", str(args.base)]
    if args.objective == "damping":
        parts += ["--target-damping", f"{args.target_damping:g}"]
    else:
        parts += ["--objective", args.objective]
    parts += ["--speeds-kn", ",".join(f"{s:g}" for s in speeds)]
    if args.scenario:
        parts += ["--scenario", str(args.scenario)]
    else:
        for opt in ("hs_m", "tp_s", "gamma", "heading_deg"):
            v = getattr(args, opt)
            if v is not None:
                parts += ["--" + opt.replace("_", "-"), f"{v:g}"]
    for opt in ("roll_noise_deg", "rate_noise_deg_s"):
        v = getattr(args, opt, None)
        if v is not None:
            parts += ["--" + opt.replace("_", "-"), f"{v:g}"]
    for opt, default in (("peak_factor", 3.0), ("min_gain_margin_db", 6.0), ("min_phase_margin_deg", 30.0),
                         ("max_sensitivity", 2.0)):
        v = getattr(args, opt)
        if v != default:
            parts += ["--" + opt.replace("_", "-"), f"{v:g}"]
    if args.heel_trim:
        parts.append("--heel-trim")
    if args.out:
        parts += ["--out", str(args.out)]
    return " ".join(parts)


def _fmt(x: float, spec: str) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if isinstance(x, float) and math.isinf(x):
        return "inf"
    return format(x, spec)


def _table(result) -> list[str]:
    head = (f"{'speed':>6} {'factor':>7} {'zeta':>6} {'wn':>6} {'GM':>6} {'PM':>6} {'|S|max':>6} "
            f"{'roll off':>8} {'roll on':>8} {'RR':>5} {'fin':>6} {'rate':>6} {'d.rate':>6}  status")
    unit = (f"{'kn':>6} {'-':>7} {'-':>6} {'rad/s':>6} {'dB':>6} {'deg':>6} {'-':>6} "
            f"{'deg':>8} {'deg':>8} {'%':>5} {'deg':>6} {'deg/s':>6} {'deg/s':>6}")
    rows = [head, unit]
    rr_mode = result.options.objective == "roll-reduction"
    for d, r in zip(result.designs, result.reports):
        status = "ok" if not d.limited_by else "LIMITED: " + ", ".join(d.limited_by)
        if rr_mode:
            status = "binding: " + (", ".join(d.limited_by) or "none")
        elif d.target_factor == 0.0:
            status = "passive damping meets target"
        rows.append(
            f"{r.speed_kn:6.1f} {r.factor:7.4f} {r.zeta:6.3f} {r.omega_n_rad_s:6.3f} {_fmt(r.gain_margin_db, '6.1f'):>6} "
            f"{_fmt(r.phase_margin_deg, '6.1f'):>6} {r.max_sensitivity:6.3f} {r.roll_rms_off_deg:8.2f} "
            f"{r.roll_rms_on_deg:8.2f} {100 * r.roll_reduction:5.1f} {r.fin_rms_deg:6.2f} {r.fin_rate_rms_deg_s:6.2f} "
            f"{r.command_rate_rms_deg_s:6.2f}  {status}"
        )
    return rows


def _shape_table(result) -> list[str]:
    """Roll-reduction objective: gains per speed with the common shape vs a shape of its own."""
    rows = [f"{'speed':>6} {'K_roll':>7} {'K_rate':>7} {'K_accel':>7} {'RR':>5}   {'own shape:':>10} {'K_roll':>7} "
            f"{'K_rate':>7} {'K_accel':>7} {'RR':>5} {'loss':>5}",
            f"{'kn':>6} {'-':>7} {'s':>7} {'s2':>7} {'%':>5}   {'':>10} {'-':>7} {'s':>7} {'s2':>7} {'%':>5} {'%pt':>5}"]
    for d, r in zip(result.designs, result.reports):
        loss = 100 * (d.free_roll_reduction - r.roll_reduction)
        rows.append(f"{r.speed_kn:6.1f} {r.k_roll:7.3f} {r.k_rate_s:7.3f} {r.k_accel_s2:7.3f} {100 * r.roll_reduction:5.1f}   "
                    f"{'':>10} {d.free_gains[0]:7.3f} {d.free_gains[1]:7.3f} {d.free_gains[2]:7.3f} "
                    f"{100 * d.free_roll_reduction:5.1f} {loss:5.1f}")
    return rows


def _header(args, result, command: str, vessel_name: str) -> str:
    o = result.options
    lines = [
        "# GENERATED by finloop tune — edit with care, or regenerate:",
        f"#   {command}",
        f"# base controller: {args.base} (sha256 {_sha256(args.base)[:16]}…)",
        f"# vessel: {args.vessel} — {vessel_name} (sha256 {_sha256(args.vessel)[:16]}…)",
        f"# design sea: {result.sea.label}",
        (f"# objective: damping — base gain shape kept, target closed-loop roll damping ratio {o.target_damping:g}"
         if o.objective == "damping" else
         "# objective: roll-reduction — gains (shape at the reference speed, one factor per speed) chosen for the "
         "largest predicted roll reduction in the design sea"),
        f"# constraints: {o.peak_factor:g} x RMS fin demand angle/rate within limits, GM >= {o.min_gain_margin_db:g} dB, "
        f"PM >= {o.min_phase_margin_deg:g} deg, |S|max <= {o.max_sensitivity:g}; sensor noise roll "
        f"{math.degrees(o.roll_noise_rad):.3g} deg, rate {math.degrees(o.rate_noise_rad_s):.3g} deg/s (1 sigma per sample)",
        f"# linear loop: loop delay {result.delay_s:.3f} s (Padé order {o.pade_order}), heel trim "
        f"{'in' if o.heel_trim else 'not in'} the loop, gain trim 100 %",
        "# Only [controller.gains] roll / roll_rate_s / roll_accel_s2 and [controller.schedule] differ from the base;",
        "# the base file's comments are not carried over.",
        "#",
        "# Predicted per speed (linear model; stall and saturation ignored):",
    ]
    lines += ["# " + row for row in _table(result)]
    if o.objective == "roll-reduction":
        lines += ["#", "# Gains per speed (common shape) and the best gains with a shape of that speed's own:"]
        lines += ["# " + row for row in _shape_table(result)]
    lines += ["#", "# Prove these gains on the simulator and on the bench before any sea trial.", ""]
    return "\n".join(lines)


def _run(args) -> int:
    import tomllib

    from controller import KNOT

    from . import tune
    from .config import load_vessel
    from .configio import Problems
    from .controller_config import load_controller

    _check_range("--target-damping", args.target_damping, 0.05, 0.9)
    _check_range("--peak-factor", args.peak_factor, 1.0, 6.0)
    _check_range("--min-gain-margin-db", args.min_gain_margin_db, 0.0, 40.0, "dB")
    _check_range("--min-phase-margin-deg", args.min_phase_margin_deg, 0.0, 90.0, "deg")
    _check_range("--max-sensitivity", args.max_sensitivity, 1.0, 10.0)
    out = Path(args.out) if args.out else None
    if out is not None and out.exists() and not args.force:
        raise FileExistsError(f"--out {out} already exists (use --force to overwrite it)")
    if out is not None and not out.parent.is_dir():
        raise _BadInput(f"--out {out}: folder {out.parent} does not exist")
    vessel = load_vessel(args.vessel)
    problems = Problems()
    base = load_controller(args.base, problems)
    warnings = [str(p) for p in problems.warnings]
    speeds = _speeds(args, base)
    sea, sensor_delay, noise = _sea(args)
    if args.roll_noise_deg is not None:
        _check_range("--roll-noise-deg", args.roll_noise_deg, 0.0, 1.0, "deg")
        noise = (math.radians(args.roll_noise_deg), noise[1])
    if args.rate_noise_deg_s is not None:
        _check_range("--rate-noise-deg-s", args.rate_noise_deg_s, 0.0, 5.0, "deg/s")
        noise = (noise[0], math.radians(args.rate_noise_deg_s))
    options = tune.DesignOptions(
        target_damping=args.target_damping, peak_factor=args.peak_factor,
        min_gain_margin_db=args.min_gain_margin_db, min_phase_margin_deg=args.min_phase_margin_deg,
        max_sensitivity=args.max_sensitivity, heel_trim=args.heel_trim, sensor_delay_s=sensor_delay,
        objective=args.objective, roll_noise_rad=noise[0], rate_noise_rad_s=noise[1],
    )  # fmt: skip
    result = tune.design(vessel, base, speeds, sea, options)
    for d in result.designs:
        if args.objective == "damping" and (d.limited_by or not math.isfinite(d.target_factor)):
            warnings.append(f"warning: {d.speed_kn:g} kn: {d.note}")
    command = _command_line(args, speeds)
    written = None
    if out is not None:
        with open(args.base, "rb") as fh:
            base_doc = tomllib.load(fh)
        text = tune.toml_text(tune.tuned_document(base_doc, result), _header(args, result, command, vessel.params.name))
        out.write_text(text, encoding="utf-8")
        check = load_controller(out)  # the file must load with the ordinary loader
        if (check.k_roll, check.k_rate, check.k_accel, check.table_factors) != (
            result.params.k_roll, result.params.k_rate, result.params.k_accel, result.params.table_factors):
            raise RuntimeError(f"{out} does not read back as written")  # pragma: no cover - a bug
        written = str(out)
    for w in warnings:
        print(w, file=sys.stderr)
    ref_kn = base.u_ref / KNOT
    if args.json:
        from .cli import _clean

        obj = {
            "ok": True,
            "command": command,
            "vessel": str(args.vessel),
            "base": str(args.base),
            "sea": result.sea.label,
            "options": {k: getattr(result.options, k) for k in result.options.__dataclass_fields__},
            "loop_delay_s": result.delay_s,
            "reference_speed_kn": ref_kn,
            "gains": {"roll": result.gains[0], "roll_rate_s": result.gains[1], "roll_accel_s2": result.gains[2]},
            "schedule": {"rule": "table", "speeds_kn": list(result.speeds_kn), "factors": list(result.factors)},
            "objective": args.objective,
            "speeds": [
                {**r.as_dict(), "target_met": not d.limited_by and math.isfinite(d.target_factor),
                 "limited_by": list(d.limited_by), "note": d.note,
                 "design_factor_on_base_gains": d.factor, "target_factor_on_base_gains": d.target_factor,
                 **({"own_shape_gains": {"roll": d.free_gains[0], "roll_rate_s": d.free_gains[1],
                                         "roll_accel_s2": d.free_gains[2]},
                     "own_shape_roll_reduction": d.free_roll_reduction} if d.free_gains else {})}
                for d, r in zip(result.designs, result.reports)
            ],
            "out": written,
            "warnings": warnings,
            "note": NOTE,
        }
        print(json.dumps(_clean(obj), indent=2))
        return EXIT_OK
    o = result.options
    lines = [
        f"finloop tune — {vessel.params.name}, base {args.base}",
        f"design sea: {result.sea.label}",
        (f"target roll damping ratio {o.target_damping:g}" if o.objective == "damping"
         else "objective: largest predicted roll reduction (gain shape chosen at the reference speed)")
        + f"; limits: {o.peak_factor:g} x RMS fin demand angle and rate, "
        f"GM >= {o.min_gain_margin_db:g} dB, PM >= {o.min_phase_margin_deg:g} deg, |S|max <= {o.max_sensitivity:g}; "
        f"loop delay {result.delay_s:.3f} s",
        "",
        *_table(result),
        "",
        *((["gains per speed (common shape) and with a shape of each speed's own:", *_shape_table(result), ""])
          if o.objective == "roll-reduction" else []),
        f"gains at the reference speed {ref_kn:g} kn: roll {result.gains[0]:g} deg/deg, roll_rate_s {result.gains[1]:g} s, "
        f"roll_accel_s2 {result.gains[2]:g} s2",
        f"written: {written}" if written else "no file written (give --out FILE.toml to write one)",
        NOTE,
    ]
    print("\n".join(lines))
    return EXIT_OK


def cmd_tune(args) -> int:
    """Run ``finloop tune``; bad input → one line per problem on stderr, exit 2."""
    from .configio import ConfigError

    try:
        return _run(args)
    except ConfigError as exc:
        for p in exc.problems:
            print(str(p), file=sys.stderr)
        if getattr(args, "json", False):
            print(json.dumps({"ok": False, "errors": [str(p) for p in exc.errors]}, indent=2))
        return EXIT_BAD_INPUT
    except (_BadInput, FileExistsError) as exc:
        print(f"finloop tune: {exc}", file=sys.stderr)
        if getattr(args, "json", False):
            print(json.dumps({"ok": False, "errors": [str(exc)]}, indent=2))
        return EXIT_BAD_INPUT


def main(argv: list[str] | None = None) -> int:
    """Stand-alone entry (``python -m hil.cmd_tune``): the same parser as ``finloop tune``."""
    from .cli import _Parser

    p = _Parser(prog="finloop")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    register(sub)
    args = p.parse_args(["tune", *(sys.argv[1:] if argv is None else argv)])
    return args.func(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
