"""Offline simulation of a scenario: build the plant, run it, collect records and metrics.

Random streams: the scenario seed feeds a ``numpy.random.SeedSequence`` spawned into fixed roles
(0 = sea phases and frequencies, 1 = sensor noise and dropouts), so changing a sensor setting never
changes the sea a run sees.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plant.excitation import build_excitation
from plant.simulation import Plant, PlantError, distance_run, half_step_grid

from .config import Scenario
from .metrics import roll_metrics


@dataclass
class SimResult:
    records: dict[str, np.ndarray]
    metrics: dict[str, float]
    error: str | None  # the plant left its validity range (run stopped early)
    excitation_notes: tuple[str, ...] = ()


def random_streams(seed: int) -> tuple[np.random.Generator, np.random.Generator]:
    """(sea, sensors) generators for a scenario seed."""
    sea_ss, sensor_ss = np.random.SeedSequence(seed).spawn(2)
    return np.random.default_rng(sea_ss), np.random.default_rng(sensor_ss)


def build_plant(scenario: Scenario, seed: int | None = None) -> tuple[Plant, tuple[str, ...]]:
    """The scenario's plant, with its wave excitation synthesised ahead of the run."""
    setup = scenario.setup
    seed = setup.seed if seed is None else seed
    rng_sea, rng_sensors = random_streams(seed)
    t_half = half_step_grid(setup)
    x_half = distance_run(setup, t_half)
    excitation, notes = build_excitation(
        scenario.sea, scenario.vessel.wave_moment, scenario.vessel.params, scenario.heading_rad, t_half, x_half, rng_sea
    )
    return Plant(setup, excitation, rng_sensors), notes


def run_passive(scenario: Scenario, seed: int | None = None) -> SimResult:
    """Run the scenario with the stabiliser off: both fins demanded to zero throughout.

    With ``fins_when_off = "centred"`` the centred fins still give lift from roll-induced
    incidence (some passive damping); with ``"retracted"`` they give no force at all.
    """
    plant, notes = build_plant(scenario, seed)
    error = None
    step = plant.step
    try:
        for _ in range(plant.n_steps):
            step(0.0, 0.0)
    except PlantError as exc:
        error = str(exc)
    records = plant.records()
    metrics = roll_metrics(records, scenario.warmup_s)
    return SimResult(records, metrics, error, notes)
