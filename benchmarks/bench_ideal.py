"""Ideal-bound QP on the demo beam sea: 20-minute record at 10 Hz (prints figures, asserts nothing).

    python benchmarks/bench_ideal.py [scenario.toml] [--rate-hz 10] [--no-stall]

Prints: passive run time, QP size, OSQP setup and solve time (target ≤ 30 s), iterations, status,
the ideal roll reduction, the same bound with ε/10 (ε must not matter) and with a looser solver
tolerance, and the largest constraint violations.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from hil.config import load_scenario  # noqa: E402
from hil.ideal import ideal_bound  # noqa: E402
from hil.simulate import run_passive  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scenario", nargs="?", default=str(ROOT / "configs/scenarios/beam_sea_service_speed.toml"))
    ap.add_argument("--rate-hz", type=float, default=10.0)
    ap.add_argument("--no-stall", action="store_true", help="leave out the effective-angle (stall/load) rows")
    args = ap.parse_args()

    sc = load_scenario(args.scenario)
    t0 = time.perf_counter()
    passive = run_passive(sc)
    t_passive = time.perf_counter() - t0
    print(f"scenario           {sc.name}  ({sc.setup.duration_s:g} s, warm-up {sc.warmup_s:g} s)")
    print(f"passive run        {t_passive:6.2f} s wall   roll σ {passive.metrics['roll_std_deg']:.3f} deg")

    stall = not args.no_stall
    runs = [
        ("default (ε = 1e-4, eps 1e-5)", dict()),
        ("ε = 1e-5", dict(epsilon=1e-5)),
        ("solver eps 1e-4", dict(osqp_settings=dict(eps_abs=1e-4, eps_rel=1e-4))),
        ("objective rms", dict(objective="rms")),
    ]
    for label, kw in runs:
        t0 = time.perf_counter()
        b = ideal_bound(sc, records=passive.records, rate_hz=args.rate_hz, include_stall=stall, **kw)
        wall = time.perf_counter() - t0
        s = b.summary()
        viol = ", ".join(f"{k} {v:.1e}" for k, v in s["max_violation_deg"].items())
        print(f"\n[{label}]")
        print(f"  steps            {s['steps']} at {s['rate_hz']:g} Hz")
        print(f"  setup / solve    {s['setup_time_s']:6.2f} s / {s['solve_time_s']:6.2f} s   (wall incl. model {wall:.2f} s; target ≤ 30 s)")
        print(f"  iterations       {s['iterations']}   status {s['status']}")
        print(f"  ideal RR         {s['ideal_roll_reduction_pct']:8.3f} %   σ_off lin {s['roll_sigma_off_linear_deg']:.3f} deg"
              f" (plant {s['roll_sigma_off_plant_deg']:.3f})   σ_opt {s['roll_sigma_opt_deg']:.3f} deg")
        print(f"  limits           angle {s['angle_limit_deg']:.1f} deg, rate {s['rate_limit_deg_s']:.1f} deg/s, "
              f"effective {s['effective_angle_limit_deg'] if s['effective_angle_limit_deg'] is None else round(s['effective_angle_limit_deg'], 2)} deg")
        print(f"  damping φa       {s['roll_amplitude_for_damping_deg']:.2f} deg   max violation [deg]: {viol}")
        print(f"  |δ| max          {math.degrees(abs(b.delta_rad).max()):.2f} deg")
        for note in s["notes"]:
            print(f"  note: {note}")


if __name__ == "__main__":
    main()
