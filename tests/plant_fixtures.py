"""Small builders for plant tests (invented test vessel; numbers chosen for round arithmetic)."""

from __future__ import annotations

import math

import numpy as np

from plant.actuator import ActuatorParams
from plant.fins import FinParams, whicker_fehlner_lift_slope
from plant.sensors import SensorSuite
from plant.simulation import Excitation, Plant, PlantSetup, half_step_grid
from plant.vessel import VesselParams, damping_from_ratio, inertia_from_period

DISP = 9.8e6  # kg
GM = 1.8  # m
T0 = 13.0  # s


def vessel(zeta: float = 0.05, b2: float = 0.0, gz=None, period: float = T0) -> VesselParams:
    inertia = inertia_from_period(DISP, GM, period)
    c = DISP * 9.80665 * GM
    return VesselParams("test vessel", 135.0, 22.0, 5.8, DISP, GM, inertia, damping_from_ratio(zeta, c, inertia), b2, gz)


def fin(side: int, **kw) -> FinParams:
    base = dict(
        side=side,
        area_m2=8.0,
        aspect_ratio=1.5,
        sweep_rad=0.0,
        lever_arm_m=10.0,
        lift_slope_per_rad=whicker_fehlner_lift_slope(1.5),
        stall_angle_rad=math.radians(24.0),
        stall_drop_rad=math.radians(4.0),
        post_stall_lift_fraction=0.6,
        cd0=0.008,
        oswald_efficiency=0.9,
        water_density_kg_m3=1025.0,
    )
    base.update(kw)
    return FinParams(**base)


def actuator(**kw) -> ActuatorParams:
    base = dict(angle_limit_rad=math.radians(25.0), rate_limit_rad_s=math.radians(22.0), time_constant_s=0.08, delay_s=0.02, deadband_rad=0.0)
    base.update(kw)
    return ActuatorParams(**base)


def setup(duration_s: float, dt: float = 0.02, speed_ms: float = 10.0, v: VesselParams | None = None, **kw) -> PlantSetup:
    base = dict(
        vessel=v or vessel(),
        fin_port=fin(-1),
        fin_stbd=fin(+1),
        actuator_port=actuator(),
        actuator_stbd=actuator(),
        duration_s=duration_s,
        control_dt_s=dt,
        substeps=1,
        seed=1,
        speed_times_s=(0.0,),
        speed_values_ms=(speed_ms,),
        sensors=SensorSuite(),
    )
    base.update(kw)
    return PlantSetup(**base)


def plant(s: PlantSetup, moment=None, seed: int = 0) -> Plant:
    """A plant with a wave moment given as a function of time (None = calm)."""
    exc = None
    if moment is not None:
        g = half_step_grid(s)
        m = moment(g)
        exc = Excitation(m, np.zeros_like(g))
    return Plant(s, exc, np.random.default_rng(seed))


def run(p: Plant, demand=lambda k, m: (0.0, 0.0)) -> dict[str, np.ndarray]:
    m = p.meas[0]
    for k in range(p.n_steps):
        m = p.step(*demand(k, m))
    return p.records()
