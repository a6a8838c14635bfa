"""Benchmark: passive 20-minute demo — simulated seconds per wall second, vs scipy solve_ivp.

Prints figures; asserts nothing. Run from the repository root:

    python benchmarks/bench_plant.py [SCENARIO.toml] [--repeat N]

Measured, in the same process:
1. finloop's fixed-step plant (RK4, sensors, actuators, records) stepping the scenario with both
   fins demanded to centre — the step loop alone and the whole run (synthesis + loop + records);
2. the same roll ODE (inertia, B1, B2, GZ, centred-fin lift with roll-induced incidence, the same
   pre-computed wave moment interpolated in time) through ``scipy.integrate.solve_ivp`` (RK45,
   rtol 1e-6, atol 1e-9 rad), without sensors or actuators — a lighter model, so the ratio
   flatters solve_ivp, not finloop.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from hil.config import load_scenario  # noqa: E402
from hil.simulate import build_plant  # noqa: E402
from plant.constants import G  # noqa: E402
from plant.fins import lift_coefficient  # noqa: E402


def run_loop(scenario):
    t0 = time.perf_counter()
    plant, _ = build_plant(scenario)
    t1 = time.perf_counter()
    step = plant.step
    for _ in range(plant.n_steps):
        step(0.0, 0.0)
    t2 = time.perf_counter()
    rec = plant.records()
    t3 = time.perf_counter()
    return plant, rec, t1 - t0, t2 - t1, t3 - t0


def run_solve_ivp(scenario, plant):
    from scipy.integrate import solve_ivp

    s = scenario.setup
    v = s.vessel
    tg = plant.t_half
    mom = plant.excitation.moment_n_m + plant.ext_half
    spd = plant.speed_half
    fins = (s.fin_port, s.fin_stbd)
    dg = v.displacement_kg * G

    def rhs(t, y):
        phi, p = y
        m = np.interp(t, tg, mom)
        u = np.interp(t, tg, spd)
        mf = 0.0
        for f in fins:
            a_eff = math.atan2(p * f.y_m, u)
            mf += -f.y_m * 0.5 * f.water_density_kg_m3 * u * u * f.area_m2 * lift_coefficient(a_eff, f)
        rest = dg * (v.gz.gz(phi) if v.gz is not None else v.gm_m * math.sin(phi))
        return (p, (m + mf - v.b1_n_m_s * p - v.b2_n_m_s2 * p * abs(p) - rest) / v.inertia_kg_m2)

    t0 = time.perf_counter()
    sol = solve_ivp(rhs, (0.0, s.duration_s), (0.0, 0.0), method="RK45", rtol=1e-6, atol=1e-9, t_eval=plant.t)
    return sol, time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scenario", nargs="?", default=str(ROOT / "configs/scenarios/beam_sea_service_speed.toml"))
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    sc = load_scenario(args.scenario)
    dur = sc.setup.duration_s
    loops, totals, builds = [], [], []
    for _ in range(args.repeat):
        plant, rec, build, loop, total = run_loop(sc)
        loops.append(loop)
        totals.append(total)
        builds.append(build)
    loop = statistics.median(loops)
    total = statistics.median(totals)
    sol, t_ivp = run_solve_ivp(sc, plant)
    err = float(np.max(np.abs(sol.y[0] - rec["roll_rad"]))) if sol.success else math.nan
    n = plant.n_steps
    print(f"scenario: {sc.name}  ({dur:.0f} s simulated, {n} control steps at {1 / sc.setup.control_dt_s:g} Hz, "
          f"{sc.setup.substeps} RK4 substep(s))")
    print(f"finloop step loop      : {loop:7.3f} s  -> {dur / loop:8.0f} x real time  ({loop / n * 1e6:.2f} us/step)  "
          f"[median of {args.repeat}]")
    print(f"finloop whole run      : {total:7.3f} s  -> {dur / total:8.0f} x real time  "
          f"(synthesis + set-up {statistics.median(builds):.3f} s, records {total - loop - statistics.median(builds):.3f} s)")
    print(f"scipy solve_ivp (RK45) : {t_ivp:7.3f} s  -> {dur / t_ivp:8.0f} x real time  ({sol.nfev} rhs evaluations)")
    print(f"ratio solve_ivp / finloop step loop: {t_ivp / loop:6.1f}x   whole run: {t_ivp / total:6.1f}x")
    print(f"max |roll difference| finloop vs solve_ivp: {math.degrees(err):.2e} deg")


if __name__ == "__main__":
    main()
