"""Sensor models: sampling, latency, noise, quantisation, dropouts and injected faults."""

from __future__ import annotations

import math

import numpy as np
import pytest

from plant.constants import KNOT
from plant.sensors import Fault, FinFeedbackParams, MotionSensorParams, SensorSuite, SpeedLogParams

from .plant_fixtures import plant, run, setup


def _decay_setup(sensors, faults=(), duration=40.0, **kw):
    return setup(duration, sensors=sensors, faults=tuple(faults), fins_when_off="retracted",
                 initial_roll_rad=math.radians(5.0), **kw)


def test_motion_sensor_reports_the_true_roll_one_latency_ago_sampled_at_its_own_rate():
    # sample rate 25 Hz (every 0.04 s), latency 0.05 s, control 50 Hz, no noise: the value seen at t
    # is the truth at s = floor((t − 0.05)·25)/25, and the age is t − s.
    sens = SensorSuite(MotionSensorParams(sample_rate_hz=25.0, latency_s=0.05))
    rec = run(plant(_decay_setup(sens)))
    t = rec["t_s"]
    for k in (10, 11, 57, 500, 1999):
        s = math.floor((t[k] - 0.05) * 25.0 + 1e-9) / 25.0
        truth = np.interp(s, t, rec["roll_rad"])
        assert rec["meas_roll_rad"][k] == pytest.approx(truth, abs=1e-12)
        assert rec["meas_roll_age_s"][k] == pytest.approx(t[k] - s, abs=1e-12)
        assert rec["meas_roll_rate_rad_s"][k] == pytest.approx(np.interp(s, t, rec["roll_rate_rad_s"]), abs=1e-12)


def test_motion_sensor_noise_has_the_configured_standard_deviation_and_bias():
    # White Gaussian noise: the sample std of n independent draws lies within ±3·σ/√(2n) of σ
    # (standard error of a standard deviation, e.g. Bendat & Piersol, Random Data, ch. 4).
    sens = SensorSuite(MotionSensorParams(sample_rate_hz=50.0, latency_s=0.0, noise_roll_rad=1e-3, bias_roll_rad=2e-3))
    rec = run(plant(setup(200.0, sensors=sens, fins_when_off="retracted")))
    err = rec["meas_roll_rad"] - rec["roll_rad"]
    n = err.size
    assert abs(np.std(err) - 1e-3) < 3 * 1e-3 / math.sqrt(2 * n)
    assert abs(np.mean(err) - 2e-3) < 3 * 1e-3 / math.sqrt(n)


def test_quantisation_rounds_to_the_resolution():
    q = math.radians(0.1)
    sens = SensorSuite(MotionSensorParams(latency_s=0.0, sample_rate_hz=50.0, quantisation_roll_rad=q))
    rec = run(plant(_decay_setup(sens)))
    ratio = rec["meas_roll_rad"] / q
    np.testing.assert_allclose(ratio, np.round(ratio), atol=1e-9)
    assert np.max(np.abs(rec["meas_roll_rad"] - rec["roll_rad"])) <= q / 2 + 1e-12


def test_sensor_without_rate_reports_rate_as_invalid_nan():
    sens = SensorSuite(MotionSensorParams(provides_rate=False))
    rec = run(plant(_decay_setup(sens, duration=2.0)))
    assert np.all(np.isnan(rec["meas_roll_rate_rad_s"]))
    assert not np.any(rec["meas_roll_rate_valid"].astype(bool))


@pytest.mark.parametrize("kind", ["freeze", "spike", "nan", "stuck", "invalid", "dropout"])
def test_injected_roll_fault_acts_only_inside_its_window(kind):
    sens = SensorSuite(MotionSensorParams(sample_rate_hz=50.0, latency_s=0.0))
    f = Fault("roll", kind, start_s=10.0, duration_s=2.0, value=math.radians(7.0))
    rec = run(plant(_decay_setup(sens, faults=[f])))
    t = rec["t_s"]
    inside = (t >= 10.0 - 1e-9) & (t < 12.0 - 1e-9)
    outside = ~inside
    m, truth = rec["meas_roll_rad"], rec["roll_rad"]
    np.testing.assert_allclose(m[outside], truth[outside], atol=1e-12)
    assert np.all(rec["meas_roll_valid"][outside] == 1)
    k0 = int(np.argmax(inside))
    if kind == "freeze":
        assert np.all(m[inside] == truth[k0 - 1])
        assert np.all(rec["meas_roll_age_s"][inside] < 0.03)  # frozen values still arrive fresh
    elif kind == "spike":
        np.testing.assert_allclose(m[inside], truth[inside] + math.radians(7.0), atol=1e-12)
    elif kind == "nan":
        assert np.all(np.isnan(m[inside])) and np.all(rec["meas_roll_valid"][inside] == 1)
    elif kind == "stuck":
        assert np.all(m[inside] == pytest.approx(math.radians(7.0)))
    elif kind == "invalid":
        assert np.all(rec["meas_roll_valid"][inside] == 0)
    elif kind == "dropout":
        assert np.all(m[inside] == truth[k0 - 1])
        ages = rec["meas_roll_age_s"][inside]
        assert np.all(np.diff(ages) > 0)  # the held value grows old
        assert ages[-1] == pytest.approx(2.0, abs=0.03)


def test_speed_log_samples_slowly_and_dropouts_age_the_value():
    sl = SpeedLogParams(sample_rate_hz=1.0, noise_ms=0.0)
    f = Fault("speed", "dropout", start_s=20.0, duration_s=5.0)
    s = setup(40.0, speed_ms=8.0, sensors=SensorSuite(speed_log=sl), faults=(f,), fins_when_off="retracted")
    rec = run(plant(s))
    t = rec["t_s"]
    assert np.all(rec["meas_speed_ms"] == pytest.approx(8.0))
    age = rec["meas_speed_age_s"]
    # normal: age cycles 0..1 s; in the dropout the last sample (t = 19 s) grows to ~6 s old
    assert np.max(age[t < 19.0]) < 1.0
    k = int(np.searchsorted(t, 24.9 - 1e-9))  # t = 24.90 s, still inside the dropout
    assert age[k] == pytest.approx(5.9, abs=1e-9)
    assert age[k + 5] == pytest.approx(0.0, abs=1e-9)  # t = 25.0 s: a fresh sample again


def test_speed_log_noise_and_random_dropouts_are_reproducible_per_seed():
    sl = SpeedLogParams(sample_rate_hz=2.0, noise_ms=0.1 * KNOT, dropouts_per_hour=200.0, dropout_duration_s=3.0)
    s = setup(300.0, speed_ms=8.0, sensors=SensorSuite(speed_log=sl), fins_when_off="retracted")
    a = run(plant(s, seed=5))
    b = run(plant(s, seed=5))
    c = run(plant(s, seed=6))
    np.testing.assert_array_equal(a["meas_speed_ms"], b["meas_speed_ms"])
    assert not np.array_equal(a["meas_speed_ms"], c["meas_speed_ms"])
    assert np.max(a["meas_speed_age_s"]) >= 3.0  # at least one dropout happened (expected 16.7)


def test_fin_feedback_reports_actuator_position_with_noise_and_resolution():
    q = math.radians(0.05)
    sens = SensorSuite(fin_feedback=FinFeedbackParams(noise_rad=0.0, quantisation_rad=q))
    s = setup(5.0, sensors=sens)
    rec = run(plant(s), demand=lambda k, m: (-0.1, 0.1))
    np.testing.assert_allclose(rec["meas_fin_stbd_rad"], np.round(rec["fin_stbd_rad"] / q) * q, atol=1e-12)
    assert rec["fin_stbd_rad"][-1] == pytest.approx(0.1, abs=1e-6)
    assert rec["fin_port_rad"][-1] == pytest.approx(-0.1, abs=1e-6)


def test_stuck_actuator_fault_freezes_one_fin():
    f = Fault("fin_port_actuator", "stuck", start_s=1.0)
    s = setup(5.0, faults=(f,))
    rec = run(plant(s), demand=lambda k, m: (-0.2, 0.2))
    t = rec["t_s"]
    port = rec["fin_port_rad"]
    k1 = int(np.searchsorted(t, 1.0))
    assert np.all(port[k1:] == port[k1])
    assert rec["fin_stbd_rad"][-1] == pytest.approx(0.2, abs=1e-6)
