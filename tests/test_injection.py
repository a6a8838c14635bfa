"""Fault-injection matrix (hil/injection.py): each drill gives its documented fault and safe
reaction within a bound in control steps. Rig and runner cores run in lockstep (deterministic,
no links): the same cores run behind real links in `finloop rig` / `finloop run`."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from controller import Fault, Mode
from hil.config import load_scenario
from hil.injection import InjectionError, parse_injection
from hil.rig import RigCore, lockstep
from hil.runner import RunnerCore, replay_inputs

BEAM = "configs/scenarios/beam_sea_service_speed.toml"
T_INJECT = 30.0


def _scenario(duration=45.0, hs_m=None):
    sc = load_scenario(BEAM)
    sea = sc.sea if hs_m is None else dataclasses.replace(sc.sea, hs_m=hs_m)
    return dataclasses.replace(sc, setup=dataclasses.replace(sc.setup, duration_s=duration), sea=sea, warmup_s=10.0)


def _drill(spec: str | None, duration=45.0, params=None, rig_kw=None, hs_m=None):
    sc = _scenario(duration, hs_m)
    params = params or sc.controller
    inj = (parse_injection(spec),) if spec else ()
    rig = RigCore(sc, injections=inj, **(rig_kw or {}))
    run = RunnerCore(params, injections=inj)
    log = {"mode": [], "faults": [], "port": [], "stbd": [], "rig_port": [], "rows": []}

    def on_step(k, out, ctl):
        log["mode"].append(int(ctl.mode))
        log["faults"].append(int(ctl.faults))
        log["port"].append(ctl.fin_port)
        log["stbd"].append(ctl.fin_stbd)
        log["rig_port"].append(rig.meas.fin_port_rad)
        log["rows"].append(tuple(run.last_inputs))

    lockstep(rig, run, 10**9, on_step)
    return sc, params, rig, run, {k: np.array(v) if k != "rows" else v for k, v in log.items()}


def _latch_step(log, bit: int) -> int:
    hit = np.nonzero(log["faults"] & bit)[0]
    assert hit.size, f"fault {Fault(bit)!r} never latched"
    return int(hit[0])


def _check_reaction(params, log, bit: int, bound_steps: int):
    k0 = int(round(T_INJECT / params.dt))
    assert np.all((log["faults"][:k0] & bit) == 0), "fault before the injection"
    assert log["mode"][k0 - 1] == Mode.ACTIVE, "the drill must start with the stabiliser active"
    k = _latch_step(log, bit)
    assert 0 < k - k0 <= bound_steps, (k - k0, bound_steps)
    assert log["mode"][k] == Mode.FAULT
    # safe reaction: the demands ramp to centre at the rate limit (controller guarantee; the bound
    # is the largest demand over the rate step, plus the step that latches)
    n_centre = math.ceil(params.angle_limit / (params.rate_limit * params.dt)) + 1
    assert np.all(log["stbd"][k + n_centre:] == 0.0) and np.all(log["port"][k + n_centre:] == 0.0)
    return k - k0


def test_no_injection_gives_no_fault_and_the_stabiliser_engages():
    sc, params, rig, run, log = _drill(None)
    assert not np.any(log["faults"])
    assert log["mode"][-1] == Mode.ACTIVE
    assert rig.watchdog_trips == 0 and run.can_counters.total_rejected == 0


@pytest.mark.parametrize("spec,bit", [
    ("drop-feedback:port@30", Fault.FEEDBACK_PORT),
    ("corrupt-feedback:stbd@30", Fault.FEEDBACK_STBD),
    ("delay-feedback:port@30=0.5", Fault.FEEDBACK_PORT),
    ("bus-error@30", Fault.FEEDBACK_PORT | Fault.FEEDBACK_STBD),
])
def test_feedback_loss_latches_the_feedback_fault_within_timeout_plus_debounce(spec, bit):
    sc, params, rig, run, log = _drill(spec)
    # the last good frame arrives at the injection step; it is stale after the runner's feedback
    # timeout; then the controller counts debounce_steps bad samples; +2 for transport and rounding
    bound = math.ceil(run.feedback_timeout_s / params.dt) + params.debounce_steps + 2
    for b in Fault(bit):
        _check_reaction(params, log, int(b), bound)
    if spec.startswith("corrupt"):
        assert run.can_counters.rejected.get("crc", 0) > 0


def test_stalled_alive_counter_latches_the_feedback_fault():
    sc, params, rig, run, log = _drill("stall-alive:port@30")
    bound = 2 + params.debounce_steps + 2  # two repeated counters mark the sender dead
    _check_reaction(params, log, int(Fault.FEEDBACK_PORT), bound)
    assert run.fb_alive["port"].stalled > 0


@pytest.mark.parametrize("spec", ["freeze-motion@30", "disconnect-motion@30"])
def test_silent_or_lost_motion_sensor_latches_roll_faults_within_age_limit_plus_debounce(spec):
    sc, params, rig, run, log = _drill(spec)
    bound = math.ceil(params.max_age / params.dt) + params.debounce_steps + 2
    _check_reaction(params, log, int(Fault.ROLL_ANGLE), bound)
    _check_reaction(params, log, int(Fault.ROLL_RATE), bound)
    if spec.startswith("disconnect"):
        assert run.line_down["motion"]


def test_silent_speed_log_latches_the_speed_fault_after_its_hold_time():
    sc, params, rig, run, log = _drill("freeze-speed@30", duration=50.0)
    # the last reading may be up to one log period (1 s) old at the injection; it is stale after
    # speed_max_age; the controller then holds the last speed for speed_hold (n_hold steps)
    bound = math.ceil((1.0 + params.speed_max_age) / params.dt) + params.n_hold + 2
    lat = _check_reaction(params, log, int(Fault.SPEED), bound)
    assert lat > params.n_hold  # held first: no fault during the hold


@pytest.mark.parametrize("spec", ["drop-demand@30", "corrupt-demand@30"])
def test_lost_demands_make_the_rig_centre_the_fins_and_the_controller_flag_tracking(spec):
    # a rougher sea (Hs 5 m) and a tighter tracking threshold (1 deg) for the drill, so that the
    # centred fins are clearly off demand for longer than the tracking time
    from hil.controller_config import load_controller

    base = load_controller("configs/controller/demo_pax_135.toml")  # the untuned demo gains: calm fin motion
    params = dataclasses.replace(base, tracking_error=math.radians(1.0))
    sc, params, rig, run, log = _drill(spec, params=params, hs_m=5.0)
    k0 = int(round(T_INJECT / params.dt))
    assert not np.any(log["faults"][:k0]) and log["mode"][k0 - 1] == Mode.ACTIVE
    assert rig.watchdog_trips == 1
    # rig side: with no valid demand for the watchdog time the emulated drive centres the fins,
    # reaching centre within watchdog + angle/rate (+ servo lag) steps
    n_rig = rig.watchdog_steps + math.ceil(sc.setup.actuator_port.angle_limit_rad /
                                           (sc.setup.actuator_port.rate_limit_rad_s * params.dt)) + 25
    assert np.all(np.abs(log["rig_port"][k0 + n_rig:]) < math.radians(0.5))
    # controller side: TRACKING latches at the first step where |previous demand − feedback|
    # exceeded tracking_error for more than n_track consecutive steps (rule of controller/law.py)
    prev = np.concatenate([[0.0], log["port"][:-1]])
    fb = np.array([r[9] for r in log["rows"]])
    over = np.abs(prev - fb) > params.tracking_error
    run_len = 0
    expected = None
    for k in range(k0, len(over)):
        run_len = run_len + 1 if over[k] else 0
        if run_len > params.n_track:
            expected = k
            break
    assert expected is not None
    bit = int(Fault.TRACKING_PORT)
    k = _latch_step(log, bit | int(Fault.TRACKING_STBD))
    assert abs(k - expected) <= 1 and k > k0
    assert log["mode"][k] == Mode.FAULT
    if spec.startswith("corrupt"):
        assert rig.counters.rejected.get("crc", 0) > 0


def test_runner_inputs_replay_bit_identically_through_the_law():
    # Determinism: the inputs the runner fed the law, replayed from power-up, give the same demands.
    sc, params, rig, run, log = _drill(None, duration=20.0)
    outs = replay_inputs(params, log["rows"])
    assert [o.fin_port for o in outs] == list(log["port"])
    assert [o.fin_stbd for o in outs] == list(log["stbd"])


@pytest.mark.parametrize("text,msg", [
    ("drop-feedback@30", "needs a side"),
    ("freeze-motion:port@30", "takes no side"),
    ("delay-feedback:port@30", "needs =DELAY_S"),
    ("explode@3", "unknown kind"),
    ("drop-feedback:port", "expected KIND"),
])
def test_bad_drill_specs_are_refused_with_a_clear_message(text, msg):
    with pytest.raises(InjectionError, match=msg):
        parse_injection(text)
