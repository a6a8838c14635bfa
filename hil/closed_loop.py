"""The controller in closed loop with the simulated vessel: one step of the law per control period.

Data flow per control period k (one way): the plant's measurements at t_k (sensor models: noise,
latency, quantisation, dropouts, faults) → ``controller.step`` → the two fin demands → the
actuator models and the vessel over [t_k, t_k+1] → measurements at t_k+1. The same
``controller.step`` runs on the bench and in replay.

Controller outputs are recorded on the row of the measurement they were computed from (row k),
like the plant's demand columns; the last row (t_N, no step taken) holds NaN / 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from controller import ControllerInputs, ControllerOutputs, ControllerParams, Mode, initial_state, step
from plant.simulation import PlantError

from .config import Scenario
from .simulate import SimResult, build_plant

#: controller record key → ControllerOutputs field (float records)
CONTROLLER_FLOAT_FIELDS = (
    ("ctl_roll_rad", "roll"),
    ("ctl_roll_rate_rad_s", "roll_rate"),
    ("ctl_roll_accel_rad_s2", "roll_accel"),
    ("ctl_speed_ms", "speed"),
    ("ctl_speed_factor", "speed_factor"),
    ("ctl_command_rad", "command"),
    ("ctl_target_rad", "target"),
    ("ctl_fade", "fade"),
    ("ctl_term_roll_rad", "term_roll"),
    ("ctl_term_rate_rad", "term_rate"),
    ("ctl_term_accel_rad", "term_accel"),
    ("ctl_term_heel_rad", "term_heel"),
)
#: controller record key → ControllerOutputs field (integer records)
CONTROLLER_INT_FIELDS = (
    ("ctl_mode", "mode"),
    ("ctl_faults", "faults"),
    ("ctl_limiter", "limiter"),
)


@dataclass(frozen=True)
class LoopOptions:
    """How the controller is started and driven in a simulation.

    start_mode: the mode at t = 0 (``ACTIVE`` = stabiliser running when the record starts; it
        falls to CUTOUT on its own below the cut-out speed).
    heel_trim_on: operator switch for the heel trim integral.
    gain_trim_pct: operator gain trim.
    """

    start_mode: Mode = Mode.ACTIVE
    heel_trim_on: bool = False
    gain_trim_pct: float = 100.0


def check_rates(scenario: Scenario, params: ControllerParams) -> None:
    """The controller's sample period must equal the scenario's control period."""
    dt_plant = scenario.setup.control_dt_s
    if not math.isclose(params.dt, dt_plant, rel_tol=1e-9):
        raise ValueError(
            f"controller sample period {params.dt:.6g} s ({1 / params.dt:.6g} Hz) differs from the scenario's control "
            f"period {dt_plant:.6g} s ({1 / dt_plant:.6g} Hz); set the controller's sample_rate_hz to the scenario's control_rate_hz"
        )


def run_closed_loop(
    scenario: Scenario,
    params: ControllerParams,
    seed: int | None = None,
    options: LoopOptions = LoopOptions(),
) -> SimResult:
    """Run the scenario with ``params`` in the loop; records hold plant and controller signals.

    The run stops early (``SimResult.error`` set, records kept up to then) only when the plant
    leaves its validity range (capsize); the controller itself never raises.
    """
    from .metrics import roll_metrics

    check_rates(scenario, params)
    plant, notes = build_plant(scenario, seed)
    records, error = drive(plant, params, options)
    metrics = roll_metrics(records, scenario.warmup_s)
    return SimResult(records, metrics, error, notes)


def drive(plant, params: ControllerParams, options: LoopOptions = LoopOptions()) -> tuple[dict[str, np.ndarray], str | None]:
    """Step ``params``' controller against a fresh ``plant`` to its end; (records, error or None)."""
    n = plant.n_steps
    speed0 = plant.setup.speed_values_ms[0]
    state = initial_state(params, mode=options.start_mode, speed=speed0 if options.start_mode != Mode.OFF else None)
    trim = float(options.gain_trim_pct)
    heel = bool(options.heel_trim_on)
    meas = plant.meas[0]
    plant_step = plant.step
    outs = []
    keep = outs.append
    error = None
    try:
        for _ in range(n):
            state, out = step(params, state, ControllerInputs(*meas[1:], 0, trim, heel))
            keep(out)
            meas = plant_step(out.fin_port, out.fin_stbd)
    except PlantError as exc:
        error = str(exc)
    records = plant.records()
    rows = len(records["t_s"])
    cols = list(zip(*outs)) if outs else [() for _ in ControllerOutputs._fields]
    for key, field in CONTROLLER_FLOAT_FIELDS:
        a = np.full(rows, np.nan)
        v = cols[_out_index(field)][: rows]
        a[: len(v)] = v
        records[key] = a
    for key, field in CONTROLLER_INT_FIELDS:
        a = np.zeros(rows, dtype=np.int64)
        v = cols[_out_index(field)][: rows]
        a[: len(v)] = np.fromiter((int(x) for x in v), dtype=np.int64, count=len(v))
        records[key] = a
    return records, error


def _out_index(field: str) -> int:
    return ControllerOutputs._fields.index(field)
