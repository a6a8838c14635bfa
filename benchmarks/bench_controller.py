"""Controller step cost: median and p99 in CPython, and the share of a 50 Hz budget (20 ms).

    python benchmarks/bench_controller.py [--steps N] [--config PATH] [--json]

The demo controller runs ACTIVE at 20 kn on typical inputs: irregular roll of a few degrees with
sensor noise (precomputed, seeded), fresh valid sensors, fin feedback following the demand, heel
trim on. Each step is timed on its own with ``time.perf_counter_ns`` (the timer call itself is
measured and subtracted). For reference it also prints the cost of building the state record
alone, as a NamedTuple (what the step uses) and as a frozen dataclass.
"""

from __future__ import annotations

import argparse
import dataclasses
import gc
import json
import math
import random
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from controller import ControllerInputs, Mode, initial_state, step  # noqa: E402
from controller.records import ControllerState  # noqa: E402
from hil.controller_config import load_controller  # noqa: E402

BUDGET_NS = 20_000_000  # one period at 50 Hz


def typical_inputs(n: int, dt: float, speed: float, seed: int = 1) -> list[ControllerInputs]:
    rnd = random.Random(seed)
    comps = [(rnd.uniform(0.5, 2.0) * math.pi / 180, rnd.uniform(0.3, 0.8), rnd.uniform(0, 2 * math.pi)) for _ in range(6)]
    out = []
    for k in range(n):
        t = k * dt
        roll = sum(a * math.sin(w * t + ph) for a, w, ph in comps) + rnd.gauss(0.0, 0.02 * math.pi / 180)
        rate = sum(a * w * math.cos(w * t + ph) for a, w, ph in comps) + rnd.gauss(0.0, 0.05 * math.pi / 180)
        out.append(ControllerInputs(roll, True, 0.012, rate, True, 0.012, speed + rnd.gauss(0.0, 0.02), True,
                                    0.6, 0.0, True, 0.0, True, 0, 100.0, True))  # fmt: skip
    return out


def timer_overhead_ns(n: int = 20000) -> int:
    clock = time.perf_counter_ns
    samples = []
    for _ in range(n):
        t0 = clock()
        samples.append(clock() - t0)
    return int(statistics.median(samples))


def percentile(sorted_values, q):
    i = min(len(sorted_values) - 1, max(0, int(round(q * (len(sorted_values) - 1)))))
    return sorted_values[i]


@dataclasses.dataclass(frozen=True, slots=True)
class _StateAsDataclass:  # same fields as ControllerState, for the record-cost comparison only
    __annotations__ = {name: object for name in ControllerState._fields}


def record_costs(state: ControllerState, n: int = 50000) -> tuple[float, float]:
    fields = tuple(state)
    clock = time.perf_counter_ns
    t0 = clock()
    for _ in range(n):
        ControllerState(*fields)
    nt = (clock() - t0) / n
    t0 = clock()
    for _ in range(n):
        _StateAsDataclass(*fields)
    dc = (clock() - t0) / n
    return nt, dc


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=100_000)
    ap.add_argument("--config", default=str(ROOT / "configs" / "controller" / "demo_pax_135.toml"))
    ap.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = ap.parse_args(argv)

    params = load_controller(args.config)
    speed = 20.0 * 1852.0 / 3600.0
    inputs = typical_inputs(args.steps, params.dt, speed)
    state = initial_state(params, mode=Mode.ACTIVE, speed=speed)
    # warm up (and settle the filters), fin feedback following the demand
    prev = 0.0
    for inp in inputs[:2000]:
        state, out = step(params, state, inp._replace(fin_port=-prev, fin_stbd=prev))
        prev = out.fin_stbd
    overhead = timer_overhead_ns()
    clock = time.perf_counter_ns
    costs = []
    prev = out.fin_stbd
    gc_was = gc.isenabled()
    gc.disable()
    try:
        for inp in inputs:
            inp = inp._replace(fin_port=-prev, fin_stbd=prev)
            t0 = clock()
            state, out = step(params, state, inp)
            t1 = clock()
            costs.append(t1 - t0 - overhead)
            prev = out.fin_stbd
    finally:
        if gc_was:
            gc.enable()
    assert out.mode == Mode.ACTIVE and out.faults == 0, out
    costs.sort()
    med = statistics.median(costs) / 1000.0
    p99 = percentile(costs, 0.99) / 1000.0
    mean = statistics.fmean(costs) / 1000.0
    nt, dc = record_costs(state)
    figures = {
        "python": sys.version.split()[0],
        "steps": len(costs),
        "median_us": round(med, 3),
        "p99_us": round(p99, 3),
        "mean_us": round(mean, 3),
        "max_us": round(costs[-1] / 1000.0, 3),
        "timer_overhead_us": round(overhead / 1000.0, 3),
        "share_of_50hz_budget_pct": round(100.0 * med * 1000.0 / BUDGET_NS, 4),
        "p99_share_of_50hz_budget_pct": round(100.0 * p99 * 1000.0 / BUDGET_NS, 4),
        "target_median_us": 15.0,
        "state_record_namedtuple_us": round(nt / 1000.0, 3),
        "state_record_frozen_dataclass_us": round(dc / 1000.0, 3),
    }
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        print(f"controller step (ACTIVE, demo config, {len(costs)} steps, Python {figures['python']})")
        print(f"  median {med:7.2f} µs   p99 {p99:7.2f} µs   mean {mean:7.2f} µs   max {figures['max_us']:7.1f} µs")
        print(f"  share of a 50 Hz budget (20 ms): median {figures['share_of_50hz_budget_pct']:.3f} %, "
              f"p99 {figures['p99_share_of_50hz_budget_pct']:.3f} %")  # fmt: skip
        print(f"  target median <= 15 µs: {'met' if med <= 15.0 else 'NOT met'}")
        print(f"  building the state record alone: NamedTuple {nt / 1000:.2f} µs, "
              f"frozen dataclass {dc / 1000:.2f} µs")  # fmt: skip
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
