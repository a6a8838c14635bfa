"""Polarity: the controller's demands, applied by the plant, restore a starboard-down roll.

Conventions (DEVELOPERS.md): φ > 0 starboard side down; fin angle > 0 leading edge up; the
controller's roll command δ gives α_stbd = +δ, α_port = −δ. Physics: a fin at y with upward lift L
makes a roll moment −y·L, so lifting the starboard fin (y > 0) and pushing the port fin down makes
a negative (port-down, restoring) moment for φ > 0. These tests prove the chain end to end on the
plant rather than assume it.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest

from controller import ControllerInputs, Mode, initial_state, step
from hil.config import load_vessel
from hil.controller_config import load_controller
from plant.simulation import Plant, PlantSetup

ROOT = Path(__file__).resolve().parents[1]
KNOT = 1852 / 3600


def _plant(duration_s, roll0_deg=0.0, rate0_deg_s=0.0, speed_kn=20.0):
    v = load_vessel(ROOT / "configs/vessels/demo_pax_135.toml")
    s = PlantSetup(
        vessel=v.params, fin_port=v.fin_port, fin_stbd=v.fin_stbd, actuator_port=v.actuator_port,
        actuator_stbd=v.actuator_stbd, duration_s=duration_s, control_dt_s=0.02,
        speed_values_ms=(speed_kn * KNOT,), initial_roll_rad=math.radians(roll0_deg),
        initial_rate_rad_s=math.radians(rate0_deg_s),
    )  # fmt: skip
    return Plant(s, None, np.random.default_rng(0))


def _closed_loop(plant, params, active=True):
    state = initial_state(params, mode=Mode.ACTIVE if active else Mode.OFF, speed=plant.setup.speed_values_ms[0])
    m = plant.meas[0]
    outs = []
    for _ in range(plant.n_steps):
        state, out = step(params, state, ControllerInputs(*m[1:]))
        outs.append(out)
        m = plant.step(out.fin_port, out.fin_stbd)
    return plant.records(), outs


def _demo_params(**only):
    """The demo controller with every feedback gain zeroed except those given (single-term tests)."""
    p = load_controller(ROOT / "configs/controller/demo_pax_135.toml")
    gains = {"k_roll": 0.0, "k_rate": 0.0, "k_accel": 0.0}
    gains.update(only)
    return dataclasses.replace(p, **gains)


def test_starboard_down_heel_gives_starboard_leading_edge_up_and_a_restoring_fin_moment():
    # roll-angle feedback alone (rate and acceleration gains zeroed)
    params = _demo_params(k_roll=load_controller(ROOT / "configs/controller/demo_pax_135.toml").k_roll)
    rec, outs = _closed_loop(_plant(2.0, roll0_deg=5.0), params)
    # after the servo has moved (a few control periods), while the ship is still heeled to starboard
    k = 25
    assert rec["roll_rad"][k] > 0
    assert outs[k].fin_stbd > 0 and outs[k].fin_port < 0  # starboard leading edge up, port down
    assert rec["fin_stbd_rad"][k] > 0 and rec["fin_port_rad"][k] < 0  # actuators followed
    assert rec["fin_stbd_lift_n"][k] > 0 > rec["fin_port_lift_n"][k]  # lift up on starboard
    assert rec["fin_moment_n_m"][k] < 0  # restoring: opposes φ > 0


def test_roll_rate_to_starboard_gives_a_moment_against_the_rate():
    # roll-rate feedback alone
    params = _demo_params(k_rate=load_controller(ROOT / "configs/controller/demo_pax_135.toml").k_rate)
    rec, outs = _closed_loop(_plant(1.0, rate0_deg_s=2.0), params)
    k = 20
    assert rec["roll_rate_rad_s"][k] > 0
    assert outs[k].term_rate > 0 and outs[k].fin_stbd > 0
    assert rec["fin_moment_n_m"][k] < 0


def test_active_fins_damp_a_free_roll_decay_faster_than_centred_fins():
    # With restoring polarity the closed loop adds damping: the roll amplitude one natural period
    # (≈13 s) after a 5° release is smaller with the controller active than with fins centred.
    # (With the polarity reversed the fins would pump energy in and the amplitude would grow.)
    params = load_controller(ROOT / "configs/controller/demo_pax_135.toml")
    on, _ = _closed_loop(_plant(40.0, roll0_deg=5.0), params, active=True)
    off, _ = _closed_loop(_plant(40.0, roll0_deg=5.0), params, active=False)
    late = on["t_s"] >= 10.0
    amp_on = np.max(np.abs(on["roll_rad"][late]))
    amp_off = np.max(np.abs(off["roll_rad"][late]))
    assert amp_off > math.radians(2.5)
    assert amp_on < 0.5 * amp_off


@pytest.mark.parametrize("speed_kn", [3.0])
def test_below_cut_out_speed_the_fins_stay_centred(speed_kn):
    # Common practice: below about 6 kn fins give too little lift; the controller cuts out.
    params = load_controller(ROOT / "configs/controller/demo_pax_135.toml")
    rec, outs = _closed_loop(_plant(5.0, roll0_deg=5.0, speed_kn=speed_kn), params)
    assert all(o.mode == Mode.CUTOUT for o in outs)
    assert np.all(rec["fin_stbd_rad"] == 0.0) and np.all(rec["fin_port_rad"] == 0.0)
