"""Benchmark: the runner's fixed-rate loop at 50 Hz — lateness and deadline misses, idle and loaded.

Prints figures; asserts nothing. Run from the repository root:

    python benchmarks/bench_realtime.py [--minutes 10] [--rate-hz 50]

Each step runs the real controller step (``controller.step`` on synthetic inputs) like the runner
does, so the figure includes its cost. Two runs of ``--minutes`` each: idle, then with one busy
background process spinning on a core. Targets: p99 < 100 µs and zero misses idle; p99.9 < 1 ms
with one busy core. Also reports whether real-time priority and timer slack were granted.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing as mp
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from controller import ControllerInputs, Mode, initial_state, step  # noqa: E402
from hil.controller_config import load_controller  # noqa: E402
from hil.realtime import FixedRate, Lateness, request_realtime  # noqa: E402


def _busy(stop):
    x = 0
    while not stop.is_set():
        for _ in range(10000):
            x += 1


def run(minutes: float, rate_hz: float, params, spin_s: float) -> dict:
    n = int(minutes * 60 * rate_hz)
    fr = FixedRate(1.0 / rate_hz, spin_s=spin_s)
    lat = Lateness(n + 10)
    state = initial_state(params, mode=Mode.ACTIVE, speed=10.0)
    for _ in range(n):
        k, late, missed = fr.wait()
        lat.add(late, missed)
        t = k / rate_hz
        inp = ControllerInputs(0.05 * math.sin(0.5 * t), True, 0.0, 0.025 * math.cos(0.5 * t), True, 0.0,
                               10.0, True, 0.0, 0.0, True, 0.0, True)
        state, _ = step(params, state, inp)
    return lat.summary()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--rate-hz", type=float, default=50.0)
    ap.add_argument("--spin-ms", type=float, default=1.2, help="wake this long before each deadline and spin (default 1.2 ms)")
    ap.add_argument("--only", choices=["idle", "busy"], default=None, help="run one of the two cases")
    args = ap.parse_args()
    params = load_controller(ROOT / "configs/controller/demo_pax_135.toml")
    rep = request_realtime()
    print(f"real-time request: fifo priority {rep.fifo_priority}, timer slack {rep.timer_slack_ns} ns; {'; '.join(rep.notes)}")
    print(f"spin window {args.spin_ms:g} ms")
    cases = (("idle", False), ("one busy core", True))
    if args.only:
        cases = cases[:1] if args.only == "idle" else cases[1:]
    for label, load in cases:
        stop = mp.Event()
        proc = None
        if load:
            proc = mp.Process(target=_busy, args=(stop,), daemon=True)
            proc.start()
        try:
            s = run(args.minutes, args.rate_hz, params, args.spin_ms / 1000.0)
        finally:
            stop.set()
            if proc is not None:
                proc.join(5)
        print(f"{label:14s}: {s['steps']} steps at {args.rate_hz:g} Hz; misses {s['deadline_misses']}; lateness "
              f"p50 {s['lateness_p50_us']:.1f} us, p99 {s['lateness_p99_us']:.1f} us, p99.9 {s['lateness_p999_us']:.1f} us, "
              f"max {s['lateness_max_us']:.1f} us")


if __name__ == "__main__":
    main()
