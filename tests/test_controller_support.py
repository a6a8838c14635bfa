"""Helpers shared by the controller tests (no tests here).

Units: SI inside; ``D`` is one degree in rad and ``KN`` one knot in m/s (1852/3600, the
international nautical mile per hour).
"""

from __future__ import annotations

import dataclasses
import math
from functools import lru_cache
from pathlib import Path

from controller import ControllerInputs, ControllerParams, initial_state, step

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "controller" / "demo_pax_135.toml"
D = math.pi / 180.0
KN = 1852.0 / 3600.0


@lru_cache(maxsize=1)
def _demo() -> ControllerParams:
    from hil.controller_config import load_controller

    return load_controller(DEMO)


def demo_params(**changes) -> ControllerParams:
    """The demo controller file, optionally with fields replaced (re-validated and re-designed)."""
    p = _demo()
    return dataclasses.replace(p, **changes) if changes else p


def good(roll=0.0, rate=0.0, speed=20.0 * KN, fin_port=0.0, fin_stbd=0.0, **kw) -> ControllerInputs:
    """Inputs with every sensor valid and fresh."""
    base = dict(
        roll=roll, roll_valid=True, roll_age=0.01, roll_rate=rate, roll_rate_valid=True,
        roll_rate_age=0.01, speed=speed, speed_valid=True, speed_age=0.5, fin_port=fin_port,
        fin_port_valid=True, fin_stbd=fin_stbd, fin_stbd_valid=True,
    )  # fmt: skip
    base.update(kw)
    return ControllerInputs(**base)


def run(params, state, inputs, follow=True):
    """Step through ``inputs``; with ``follow`` the fin feedback equals the previous demand
    (a perfect actuator), so tracking faults cannot trip. Returns (state, [outputs])."""
    outs = []
    prev_p = -state.delta
    prev_s = state.delta
    for inp in inputs:
        if follow:
            inp = inp._replace(fin_port=prev_p, fin_stbd=prev_s, fin_port_valid=True, fin_stbd_valid=True)
        state, out = step(params, state, inp)
        prev_p, prev_s = out.fin_port, out.fin_stbd
        outs.append(out)
    return state, outs


def active_state(params, speed=20.0 * KN):
    """A state already ACTIVE with the fade complete (as a simulation starting under way)."""
    return initial_state(params, mode=2, speed=speed)
