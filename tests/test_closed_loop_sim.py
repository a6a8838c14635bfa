"""The controller in closed loop with the plant: linear prediction, cut-out, sim/sweep commands."""

from __future__ import annotations

import dataclasses
import json
import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.signal import lsim, lti

from controller import ControllerParams, Mode
from hil.closed_loop import drive, run_closed_loop
from hil.config import load_scenario
from hil.simulate import run_passive
from plant.constants import G, KNOT
from plant.sea import EffectiveSlope, Jonswap, frequency_band, synthesise, wave_loads
from plant.simulation import Excitation, Plant, distance_run, half_step_grid

from .plant_fixtures import actuator, fin, setup, vessel

BEAM = "configs/scenarios/beam_sea_service_speed.toml"


def _linear_loop_params(dt: float, speed: float, k_rate: float) -> ControllerParams:
    """Rate feedback only, with every limit and filter far away (the loop is then linear)."""
    return ControllerParams(
        dt=dt, k_roll=0.0, k_rate=k_rate, k_accel=0.0, u_ref=speed, u_min=0.5 * speed, u_max=2.0 * speed,
        u_cutout=1.0, u_reengage=1.5, angle_limit=math.radians(45.0), rate_limit=math.radians(200.0),
        stall_angle=math.radians(45.0), stall_margin=0.0, rated_lift=1e8, fin_area=8.0,
        lift_slope=fin(1).lift_slope_per_rad, lever_arm=10.0, rho=1025.0, lowpass_hz=4.0, notch_hz=0.0,
        roll_range=math.radians(60.0), rate_range=math.radians(60.0), roll_jump=math.radians(20.0),
        feedback_range=math.radians(50.0),
    )


def test_linear_closed_loop_roll_matches_transfer_function_prediction_in_irregular_sea():
    # Linear closed loop, limits far away: rate feedback δ = K_p p on a fin pair adds the damping
    # K_p·K_f, K_f = Σ r ½ρU²A CLα (lift ½ρU²A CLα α, moment r·L per fin; Whicker & Fehlner 1958
    # lift slope), and the centred fins' roll-induced incidence p·r/U adds B_f = Σ r² ½ρU A CLα.
    # Response of a linear oscillator to a sea (Lloyd, Seakeeping 1989, ch. 8; Price & Bishop 1974):
    # σφ² = ∫ |H(ω)|²|X(ω)|² S(ω) dω, H = 1/(C − Iω² + iBω), integrated with scipy.integrate.quad.
    # Checks: (a) the run's own wave-moment record through H (scipy.signal.lsim) gives the run's
    # roll; (b) against the spectrum, within 3 ε, ε = 1/√(B_e T) the random error of a mean-square
    # estimate (Bendat & Piersol, Random Data, ch. 8).
    u = 10.0
    dt = 0.1
    v = vessel(zeta=0.1)
    f_p, f_s = fin(-1, stall_angle_rad=math.radians(85.0)), fin(+1, stall_angle_rad=math.radians(85.0))
    act = actuator(angle_limit_rad=math.radians(80.0), rate_limit_rad_s=math.radians(2000.0), time_constant_s=0.0, delay_s=0.0)
    record_s, warmup_s = 3600.0, 200.0
    s = setup(record_s + warmup_s, dt=dt, speed_ms=u, v=v, fin_port=f_p, fin_stbd=f_s, actuator_port=act, actuator_stbd=act)
    q_per = 0.5 * 1025.0 * 8.0 * fin(1).lift_slope_per_rad  # ½ρ A CLα per fin
    k_f = 2 * 10.0 * q_per * u * u
    b_f = 2 * 10.0**2 * q_per * u
    c, inertia = v.restoring_n_m_per_rad, v.inertia_kg_m2
    crit = 2 * math.sqrt(c * inertia)
    k_rate = 0.15 * crit / k_f  # adds 0.15 of critical damping
    params = _linear_loop_params(dt, u, k_rate)

    sp = Jonswap(3.0, 12.0, 3.3)
    beta = math.pi / 2
    model = EffectiveSlope(v.displacement_kg, v.gm_m, 0.7)
    comps = synthesise(sp, 400, np.random.default_rng(5))
    g = half_step_grid(s)
    loads = wave_loads(comps, g, beta, distance_run(s, g), model)

    def run(on: bool):
        p = Plant(s, Excitation(loads.moment, loads.elevation), np.random.default_rng(0))
        if on:
            rec, err = drive(p, params)
            assert err is None
            return rec
        for _ in range(p.n_steps):
            p.step(0.0, 0.0)
        return p.records()

    def gain2(w, b):
        return abs(model.transfer(np.array([w]), beta)[0]) ** 2 / ((c - inertia * w * w) ** 2 + (b * w) ** 2)

    lo, hi = frequency_band(sp)
    w0 = v.natural_frequency_rad_s
    var = {}
    for on, b in ((False, v.b1_n_m_s + b_f), (True, v.b1_n_m_s + b_f + k_rate * k_f)):
        rec = run(on)
        phi = rec["roll_rad"][rec["t_s"] >= warmup_s]
        var[on] = np.var(phi)
        # (a) the same wave-moment record through the linear oscillator with damping b (scipy lsim)
        t = rec["t_s"][:-1]
        sys_ = lti([1.0], [inertia, b, c])
        _, y, _ = lsim(sys_, rec["wave_moment_n_m"][:-1], t)
        sel = t >= warmup_s
        err = np.std(rec["roll_rad"][:-1][sel] - y[sel]) / np.std(y[sel])
        # off: the plant integrates this very ODE (RK4; lsim interpolates the input linearly): 1 %.
        # on: the discrete controller adds a small lag (4 Hz Butterworth, half-sample hold at 10 Hz,
        # 5 ms sensor latency): 5 %.
        assert err < (0.05 if on else 0.01)
        psd = lambda w, b=b: gain2(w, b) * float(sp(np.array([w]))[0])  # noqa: E731
        predicted = quad(psd, lo, hi, limit=400, points=[w0])[0]
        be_hz = predicted**2 / quad(lambda w: psd(w) ** 2, lo, hi, limit=400, points=[w0])[0] / (2 * math.pi)
        eps = 1.0 / math.sqrt(be_hz * record_s)
        assert var[on] == pytest.approx(predicted, rel=3 * eps)
    # the stabiliser works: the predicted and the simulated roll reduction agree
    rr_sim = 1 - math.sqrt(var[True] / var[False])
    rr_det = 1 - math.sqrt(
        sum(gain2(w, v.b1_n_m_s + b_f + k_rate * k_f) * a * a for w, a in zip(comps.omega, comps.amplitude))
        / sum(gain2(w, v.b1_n_m_s + b_f) * a * a for w, a in zip(comps.omega, comps.amplitude))
    )
    assert rr_sim > 0.2
    assert rr_sim == pytest.approx(rr_det, abs=0.02)


def _short(path=BEAM, duration=120.0, **setup_kw):
    sc = load_scenario(path)
    st = dataclasses.replace(sc.setup, duration_s=duration, **setup_kw)
    return dataclasses.replace(sc, setup=st, warmup_s=20.0)


def test_below_cutout_speed_fins_stay_centred_and_roll_reduction_is_zero():
    # Common practice: below about 6 kn fins give too little lift; the controller cuts out and
    # centres them. Started ACTIVE at 5 kn the controller drops to CUTOUT at once; the demands
    # stay exactly 0, so the run is identical to the passive one (same sea, same seed).
    sc = _short(speed_values_ms=(5.0 * KNOT,))
    on = run_closed_loop(sc, sc.controller)
    off = run_passive(sc)
    assert np.all(on.records["demand_stbd_rad"][:-1] == 0.0)
    assert np.all(on.records["demand_port_rad"][:-1] == 0.0)
    assert set(np.unique(on.records["ctl_mode"][:-1])) == {int(Mode.CUTOUT)}
    np.testing.assert_array_equal(on.records["roll_rad"], off.records["roll_rad"])
    assert on.metrics["roll_std_deg"] == off.metrics["roll_std_deg"]


def test_closed_loop_run_is_deterministic_and_records_controller_signals():
    sc = _short(duration=60.0)
    a = run_closed_loop(sc, sc.controller, seed=7)
    b = run_closed_loop(sc, sc.controller, seed=7)
    for key in ("roll_rad", "demand_stbd_rad", "ctl_command_rad", "ctl_limiter", "ctl_mode"):
        np.testing.assert_array_equal(a.records[key], b.records[key])
    # the demands are the controller's outputs: port = −stbd (antisymmetric pair)
    np.testing.assert_array_equal(a.records["demand_port_rad"][:-1], -a.records["demand_stbd_rad"][:-1])
    assert np.all(np.abs(a.records["demand_stbd_rad"][:-1]) <= sc.controller.angle_limit)


def test_controller_rate_must_match_scenario_rate():
    sc = _short(duration=10.0)
    wrong = dataclasses.replace(sc.controller, dt=0.04)  # 25 Hz against the scenario's 50 Hz
    with pytest.raises(ValueError, match="sample period"):
        run_closed_loop(sc, wrong)


def _short_scenario_file(tmp_path, duration=120, extra=""):
    text = open(BEAM, encoding="utf-8").read()
    text = text.replace("duration_s = 1200.0", f"duration_s = {duration:.1f}").replace("warmup_s = 60.0", "warmup_s = 20.0")
    text = text.replace('"../vessels/', '"' + str((__import__("pathlib").Path(BEAM).parent.parent / "vessels").resolve()) + "/")
    text = text.replace('"../controller/', '"' + str((__import__("pathlib").Path(BEAM).parent.parent / "controller").resolve()) + "/")
    p = tmp_path / "short.toml"
    p.write_text(text + extra, encoding="utf-8")
    return p


def test_sim_both_writes_both_runs_and_reports_roll_reduction(tmp_path, capsys):
    from hil.cli import main

    sc_file = _short_scenario_file(tmp_path)
    out = tmp_path / "run"
    assert main(["sim", str(sc_file), "--stabiliser", "both", "--out", str(out), "--json"]) == 0
    m = json.loads(capsys.readouterr().out)
    for key in ("roll_rms_deg", "roll_sig_amp_deg", "roll_max_deg", "roll_reduction_pct", "fin_rms_deg", "fin_max_deg",
                "fin_rate_rms_deg_s", "time_at_angle_limit_pct", "time_at_rate_limit_pct",
                "time_at_stall_or_load_limit_pct", "fin_drag_power_kw"):
        assert key in m and m[key] is not None and math.isfinite(m[key]), key
    assert m["roll_reduction_pct"] == pytest.approx(100 * (1 - m["on"]["roll_std_deg"] / m["off"]["roll_std_deg"]))
    assert m["off"]["fin_rms_deg"] == 0.0 and m["on"]["fin_rms_deg"] > 0.0
    for name in ("steps_off.csv", "steps_on.csv", "meta.json", "metrics.json", "roll.png", "roll_spectrum.png", "fins.png"):
        assert (out / name).is_file(), name
    header = (out / "steps_on.csv").read_text().splitlines()[0].split(",")
    assert "ctl_mode" in header and "ctl_command_deg" in header and "demand_stbd_deg" in header


def test_sim_on_without_controller_is_a_clear_bad_input(tmp_path, capsys):
    from hil.cli import main

    sc_file = _short_scenario_file(tmp_path)
    text = sc_file.read_text().splitlines()
    sc_file.write_text("\n".join(line for line in text if not line.startswith("controller =")) + "\n")
    assert main(["sim", str(sc_file), "--stabiliser", "on", "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert "names no controller file" in err and "Traceback" not in err


def test_encounter_period_at_peak_follows_the_closed_form():
    # ω_e = ω − ω² U cos β / g (Fossen 2021, Handbook of Marine Craft Hydrodynamics, §8; DESIGN §4):
    # beam seas: T_e = T_p; head seas (β = 180°): ω_e = ω_p + ω_p² U/g.
    from hil.sweep import encounter_period_at_peak_s
    from plant.excitation import SeaSpec

    sea = SeaSpec("jonswap", 3.0, 9.5, None, None, None, 300, None, None, None)
    assert encounter_period_at_peak_s(sea, 10.0, math.pi / 2) == pytest.approx(9.5, rel=1e-12)
    wp = 2 * math.pi / 9.5
    assert encounter_period_at_peak_s(sea, 10.0, math.pi) == pytest.approx(2 * math.pi / (wp + wp * wp * 10.0 / G), rel=1e-12)


def _small_envelope(tmp_path):
    base = _short_scenario_file(tmp_path, duration=60)
    p = tmp_path / "env.toml"
    p.write_text(
        f'[envelope]\nname = "test"\nbase_scenario = "{base}"\nspeeds_kn = [5, 20]\nheadings_deg = [30, 90]\n'
        'duration_s = 60.0\nwarmup_s = 10.0\n[[envelope.sea_states]]\nname = "moderate"\nspectrum = "jonswap"\n'
        "hs_m = 2.0\ntp_s = 8.0\ncomponents = 100\n",
        encoding="utf-8",
    )
    return p


def test_sweep_gives_the_same_rows_in_process_and_through_a_plugged_in_executor(tmp_path):
    from hil.sweep import load_envelope, run_sweep

    env = load_envelope(_small_envelope(tmp_path))
    assert env.n_points == 4
    serial = run_sweep(env, workers=1)
    with ThreadPoolExecutor(max_workers=2) as ex:  # any concurrent.futures executor plugs in
        pooled = run_sweep(env, executor=ex)
    assert serial == pooled
    slow = [r for r in serial if r["speed_kn"] == 5.0]
    assert all(r["roll_reduction_pct"] == 0.0 and r["fin_rms_deg"] == 0.0 for r in slow)  # below cut-out
    for r in serial:
        assert r["synchronous"] == (abs(r["encounter_to_roll_period_ratio"] - 1) <= 0.2)


def test_sweep_cli_writes_csv_json_and_polar_plots(tmp_path, capsys):
    from hil.cli import main

    out = tmp_path / "sw"
    assert main(["sweep", str(_small_envelope(tmp_path)), "--workers", "2", "--out", str(out), "--json", "--no-progress"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert res["points"] and len(res["points"]) == 4 and res["runs"] == 8
    assert (out / "sweep.csv").read_text().count("\n") == 5
    assert (out / "polar_roll_reduction_moderate.png").is_file()
    assert (out / "polar_residual_roll_moderate.png").is_file()


def test_envelope_errors_name_the_key_and_range(tmp_path, capsys):
    from hil.cli import main

    p = _small_envelope(tmp_path)
    p.write_text(p.read_text().replace("speeds_kn = [5, 20]", "speeds_kn = [5, 99]"))
    assert main(["sweep", str(p), "--out", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert "envelope.speeds_kn[1]" in err and "99" in err


def test_sim_inputs_replayed_through_the_law_give_bit_identical_demands():
    # Determinism: the sensor sequence the simulated controller saw, replayed through the same law
    # from the same initial state, reproduces every demand exactly (== on floats, no tolerance).
    from hil.runner import replay_inputs

    sc = _short(duration=60.0)
    res = run_closed_loop(sc, sc.controller, seed=3)
    r = res.records
    n = len(r["t_s"]) - 1
    keys = ("meas_roll_rad", "meas_roll_valid", "meas_roll_age_s", "meas_roll_rate_rad_s", "meas_roll_rate_valid",
            "meas_roll_rate_age_s", "meas_speed_ms", "meas_speed_valid", "meas_speed_age_s", "meas_fin_port_rad",
            "meas_fin_port_valid", "meas_fin_stbd_rad", "meas_fin_stbd_valid")
    rows = [[r[k][i] for k in keys] + [0, 100.0, False, False, 0.0, False] for i in range(n)]
    outs = replay_inputs(sc.controller, rows, start_mode=Mode.ACTIVE, speed=sc.setup.speed_values_ms[0])
    assert [o.fin_stbd for o in outs] == list(r["demand_stbd_rad"][:n])
    assert [o.fin_port for o in outs] == list(r["demand_port_rad"][:n])


@pytest.mark.parametrize("scenario_file,controller_file", [
    ("configs/scenarios/beam_sea_service_speed.toml", None),
    ("configs/scenarios/beam_sea_service_speed.toml", "configs/controller/demo_pax_135.toml"),
    ("configs/scenarios/quartering_sea.toml", None),
])
def test_ideal_bound_is_never_beaten_by_the_controller(scenario_file, controller_file):
    # The ideal bound (perfect foresight, same fins and limits, hil/ideal.py) is an upper bound by
    # construction (a feasible controller is one point of the QP's feasible set): the simulated RR
    # of a real controller on the same sea and seed must not exceed it.
    from hil.controller_config import load_controller
    from hil.ideal import ideal_bound
    from hil.metrics import roll_reduction_pct

    sc = _short(scenario_file, duration=300.0)
    sc = dataclasses.replace(sc, warmup_s=60.0)
    params = load_controller(controller_file) if controller_file else sc.controller
    off = run_passive(sc)
    on = run_closed_loop(sc, params)
    rr = roll_reduction_pct(off.metrics, on.metrics)
    bound = ideal_bound(sc, records=off.records)
    assert 0.0 < rr < bound.ideal_roll_reduction_pct
