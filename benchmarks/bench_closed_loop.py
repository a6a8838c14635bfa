"""Benchmark: closed-loop simulation, envelope sweep and the ideal-bound QP, side by side.

Prints figures; asserts nothing. Run from the repository root (takes ~5 minutes on 2 cores):

    python benchmarks/bench_closed_loop.py [--repeat N] [--sweep-points N] [--skip-sweep] [--skip-qp]

1. ``finloop sim --stabiliser on`` of the 20-minute demo beam sea at 50 Hz: the controller
   (``controller.step``) against the fixed-step plant (RK4, sensors, actuators, records), whole run
   including sea synthesis; simulated seconds per wall second.
2. The same closed loop written with ``scipy.integrate.solve_ivp``: the same ``controller.step`` at
   50 Hz on the true roll and rate, the roll ODE (inertia, B1, B2, GZ, fin lift with roll-induced
   incidence, the same pre-computed wave moment) plus first-order fin servos integrated by RK45
   (rtol 1e-6) over each control period with the demands held. No sensor models: a lighter model.
   Run over the first ``--ivp-seconds`` of the record and scaled.
3. A sweep of >= 100 runs of 20 minutes (points × off/on) with one and with two worker processes:
   wall time, runs per second, speed-up.
4. The ideal-bound QP (OSQP) for the 20-minute record at 10 Hz: solve time (target <= 30 s).
Also prints the control quality on the demo beam sea: RR, ideal RR, efficiency.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from controller import ControllerInputs, Mode, initial_state, step  # noqa: E402
from hil.closed_loop import run_closed_loop  # noqa: E402
from hil.config import load_scenario  # noqa: E402
from hil.simulate import build_plant, run_passive  # noqa: E402
from plant.constants import G  # noqa: E402
from plant.fins import lift_coefficient  # noqa: E402

BEAM = ROOT / "configs/scenarios/beam_sea_service_speed.toml"


def closed_loop_ivp(scenario, params, seconds: float):
    """The closed loop with solve_ivp between control instants; returns (roll record, wall s)."""
    from scipy.integrate import solve_ivp

    plant, _ = build_plant(scenario)
    s = scenario.setup
    v = s.vessel
    tg = plant.t_half
    mom = plant.excitation.moment_n_m + plant.ext_half
    u = s.speed_values_ms[0]
    fins = (s.fin_port, s.fin_stbd)
    taus = (max(s.actuator_port.time_constant_s, 1e-3), max(s.actuator_stbd.time_constant_s, 1e-3))
    dg = v.displacement_kg * G
    dt = s.control_dt_s
    n = int(round(seconds / dt))

    def rhs(t, y, dem_p, dem_s):
        phi, p, a_p, a_s = y
        m = np.interp(t, tg, mom)
        mf = 0.0
        for f, a in zip(fins, (a_p, a_s)):
            a_eff = a + math.atan2(p * f.y_m, u)
            mf += -f.y_m * 0.5 * f.water_density_kg_m3 * u * u * f.area_m2 * lift_coefficient(a_eff, f)
        rest = dg * (v.gz.gz(phi) if v.gz is not None else v.gm_m * math.sin(phi))
        return (p, (m + mf - v.b1_n_m_s * p - v.b2_n_m_s2 * p * abs(p) - rest) / v.inertia_kg_m2,
                (dem_p - a_p) / taus[0], (dem_s - a_s) / taus[1])

    state = initial_state(params, mode=Mode.ACTIVE, speed=u)
    y = np.zeros(4)
    roll = np.empty(n + 1)
    roll[0] = 0.0
    t0 = time.perf_counter()
    for k in range(n):
        inp = ControllerInputs(y[0], True, 0.0, y[1], True, 0.0, u, True, 0.0, y[2], True, y[3], True)
        state, out = step(params, state, inp)
        sol = solve_ivp(rhs, (k * dt, (k + 1) * dt), y, method="RK45", rtol=1e-6, atol=1e-9,
                        args=(out.fin_port, out.fin_stbd))
        y = sol.y[:, -1]
        roll[k + 1] = y[0]
    return roll, time.perf_counter() - t0


def sweep_envelope(n_points: int):
    from hil.sweep import Envelope, SeaState, load_envelope
    from plant.constants import KNOT

    env = load_envelope(ROOT / "configs/envelopes/demo_pax_135.toml")
    speeds = tuple(k * KNOT for k in (8.0, 12.0, 16.0, 20.0, 24.0))
    n_head = max(1, math.ceil(n_points / len(speeds)))
    heads = tuple(math.radians(h) for h in np.linspace(0.0, 180.0, n_head))
    sea = env.sea_states[-1]
    return dataclasses.replace(env, speeds_ms=speeds, headings_rad=heads, sea_states=(SeaState(sea.name, sea.sea),),
                               duration_s=1200.0), Envelope


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--ivp-seconds", type=float, default=60.0)
    ap.add_argument("--sweep-points", type=int, default=50, help="grid points (x2 runs each); default 50 = 100 runs")
    ap.add_argument("--skip-sweep", action="store_true")
    ap.add_argument("--skip-qp", action="store_true")
    args = ap.parse_args()

    sc = load_scenario(BEAM)
    params = sc.controller
    dur = sc.setup.duration_s
    walls = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        on = run_closed_loop(sc, params)
        walls.append(time.perf_counter() - t0)
    wall = statistics.median(walls)
    print(f"1. closed-loop sim, {sc.name}: {dur:.0f} s at {1 / sc.setup.control_dt_s:g} Hz")
    print(f"   finloop (plant + controller, whole run) : {wall:7.3f} s -> {dur / wall:7.0f} x real time "
          f"[median of {args.repeat}; target >= 500 x]")
    roll_ivp, t_ivp = closed_loop_ivp(sc, params, args.ivp_seconds)
    per_s_ivp = t_ivp / args.ivp_seconds
    print(f"   solve_ivp closed loop ({args.ivp_seconds:g} s, scaled)     : {per_s_ivp * dur:7.3f} s -> "
          f"{1 / per_s_ivp:7.0f} x real time; ratio solve_ivp / finloop = {per_s_ivp * dur / wall:.1f} x")
    k = len(roll_ivp)
    diff = np.max(np.abs(roll_ivp - on.records["roll_rad"][:k]))
    print(f"   max |roll difference| over that stretch (sensor models and servo details differ): {math.degrees(diff):.3f} deg")

    off = run_passive(sc)
    rr = 100 * (1 - on.metrics["roll_std_deg"] / off.metrics["roll_std_deg"])
    print(f"   control quality: roll sigma off {off.metrics['roll_std_deg']:.3f} deg, on {on.metrics['roll_std_deg']:.3f} deg, "
          f"RR {rr:.1f} % [target >= 80 %]")

    if not args.skip_qp:
        try:
            from hil.ideal import efficiency, ideal_bound
        except ImportError as exc:
            print(f"4. ideal bound: not available ({exc})")
        else:
            t0 = time.perf_counter()
            b = ideal_bound(sc, records=off.records, rate_hz=10.0)
            t_qp = time.perf_counter() - t0
            print(f"4. ideal-bound QP, 20 min at 10 Hz: {t_qp:.2f} s total [target <= 30 s]; ideal RR "
                  f"{b.ideal_roll_reduction_pct:.1f} %; efficiency {efficiency(rr, b):.3f} [target >= 0.85]")
            print(f"   {b.summary()}")

    if not args.skip_sweep:
        from hil.sweep import run_sweep

        env, _ = sweep_envelope(args.sweep_points)
        runs = 2 * env.n_points
        res = {}
        for workers in (1, 2):
            t0 = time.perf_counter()
            rows = run_sweep(env, workers=workers)
            res[workers] = time.perf_counter() - t0
            print(f"3. sweep, {env.n_points} points = {runs} runs of {env.duration_s:.0f} s, {workers} worker(s): "
                  f"{res[workers]:7.1f} s wall, {runs / res[workers]:.2f} runs/s, "
                  f"{runs * env.duration_s / res[workers]:.0f} simulated s per wall s")
        print(f"   speed-up of 2 workers over 1: {res[1] / res[2]:.2f} x  (machine has {__import__('os').cpu_count()} CPUs)")
        sync = sum(r["synchronous"] for r in rows)
        sat = sum(r["saturated"] for r in rows)
        print(f"   flags: {sync} synchronous, {sat} saturated of {env.n_points} points")


if __name__ == "__main__":
    main()
