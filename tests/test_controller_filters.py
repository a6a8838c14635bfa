"""Discrete filters of the controller against scipy.signal (the outside reference).

- 2nd-order Butterworth: scipy.signal.butter(2, fc, fs=fs) (bilinear transform with pre-warping;
  Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., §7.1.2).
- Notch: scipy.signal.iirnotch(f0, Q, fs) (Orfanidis, Introduction to Signal Processing, 1996, §11.3).
- Band-limited derivative s/(τs+1): scipy.signal.bilinear([1, 0], [τ, 1], fs).
- First-order low-pass: scipy.signal.cont2discrete(..., method="zoh") and the closed-form step
  response 1 − exp(−t/τ).
- The filters as stepped inside controller.step: scipy.signal.lfilter with lfilter_zi start.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from controller import butter2_lowpass, dirty_derivative, first_order_hold_gain, notch
from controller.filters import biquad_response, biquad_steady_state
from .test_controller_support import D, KN, active_state, demo_params, good, run


def _ba(c):
    b0, b1, b2, a1, a2 = c
    return np.array([b0, b1, b2]), np.array([1.0, a1, a2])


@pytest.mark.parametrize("fc, fs", [(2.0, 50.0), (0.5, 50.0), (5.0, 100.0), (20.0, 50.0), (0.05, 10.0)])
def test_butterworth_lowpass_coefficients_equal_scipy_butter(fc, fs):
    b, a = _ba(butter2_lowpass(fc, fs))
    b_ref, a_ref = signal.butter(2, fc, btype="low", fs=fs)  # scipy.signal.butter reference
    np.testing.assert_allclose(b, b_ref, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(a, a_ref, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("f0, q, fs", [(8.0, 2.0, 50.0), (3.0, 10.0, 50.0), (12.0, 0.7, 50.0), (40.0, 5.0, 100.0)])
def test_notch_coefficients_equal_scipy_iirnotch(f0, q, fs):
    b, a = _ba(notch(f0, q, fs))
    b_ref, a_ref = signal.iirnotch(f0, q, fs=fs)  # scipy.signal.iirnotch reference
    np.testing.assert_allclose(b, b_ref, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(a, a_ref, rtol=1e-12, atol=1e-15)


def test_notch_removes_its_centre_frequency_and_passes_dc():
    b, a = _ba(notch(8.0, 2.0, 50.0))
    w, h = signal.freqz(b, a, worN=[0.0, 8.0, 24.9], fs=50.0)  # scipy.signal.freqz reference
    assert abs(h[0]) == pytest.approx(1.0, abs=1e-12)
    assert abs(h[1]) < 1e-12
    # −3 dB points at f0 ± bandwidth/2 (bandwidth = f0/Q), to first order: |H| at f0 is 0, and
    # the half-power bandwidth definition of iirnotch is the one scipy uses
    _, h3 = signal.freqz(b, a, worN=[6.0, 10.0], fs=50.0)
    assert np.all(np.abs(h3) > 0.6)


@pytest.mark.parametrize("tau, dt", [(0.1, 0.02), (0.25, 0.02), (0.01, 0.02), (1.0, 0.1)])
def test_dirty_derivative_equals_scipy_bilinear_of_s_over_tau_s_plus_one(tau, dt):
    b0, b1, a1 = dirty_derivative(tau, dt)
    b_ref, a_ref = signal.bilinear([1.0, 0.0], [tau, 1.0], fs=1.0 / dt)  # scipy.signal.bilinear
    np.testing.assert_allclose([b0, b1], b_ref, rtol=1e-12)
    np.testing.assert_allclose([1.0, a1], a_ref, rtol=1e-12)


def test_dirty_derivative_of_a_ramp_settles_on_its_slope():
    # closed form: the DC gain of H(z)/(1 − z⁻¹)·(1 − z⁻¹) ... i.e. y_ss = b0·(slope·T)/(1 + a1) = slope
    b0, b1, a1 = dirty_derivative(0.1, 0.02)
    x = 0.3 * 0.02 * np.arange(500)  # ramp of slope 0.3 per s
    y = signal.lfilter([b0, b1], [1.0, a1], x)  # scipy.signal.lfilter reference
    assert y[-1] == pytest.approx(0.3, rel=1e-9)


@pytest.mark.parametrize("tau, dt", [(2.0, 0.02), (10.0, 0.02), (0.05, 0.02)])
def test_first_order_lowpass_is_the_zoh_discretisation_one_sample_early(tau, dt):
    c = first_order_hold_gain(tau, dt)
    # scipy.signal.cont2discrete (zero-order hold) of 1/(τs+1): b = [0, c], a = [1, −exp(−T/τ)]
    num, den, _ = signal.cont2discrete(([1.0], [tau, 1.0]), dt, method="zoh")
    np.testing.assert_allclose(np.ravel(num), [0.0, c], atol=1e-15, rtol=1e-12)
    np.testing.assert_allclose(den, [1.0, -(1.0 - c)], rtol=1e-12)
    # closed form: unit step at n = 0 → y[n] = 1 − exp(−(n+1)T/τ)
    y, out = 0.0, []
    for _ in range(200):
        y += c * (1.0 - y)
        out.append(y)
    n = np.arange(200)
    np.testing.assert_allclose(out, 1.0 - np.exp(-(n + 1) * dt / tau), rtol=1e-12, atol=1e-14)


def test_reference_biquad_helpers_match_lfilter_and_its_steady_state_start():
    c = butter2_lowpass(2.0, 50.0)
    b, a = _ba(c)
    x = np.sin(0.7 * np.arange(300)) + 0.5
    np.testing.assert_allclose(biquad_response(c, x), signal.lfilter(b, a, x), rtol=1e-12, atol=1e-14)
    (z1, z2), y = biquad_steady_state(c, 0.5)
    np.testing.assert_allclose([z1, z2], signal.lfilter_zi(b, a) * 0.5, rtol=1e-12)  # lfilter_zi
    assert y == pytest.approx(0.5, rel=1e-15)


@pytest.mark.parametrize("bad", [(0.0, 50.0), (25.0, 50.0), (math.nan, 50.0), (2.0, -1.0), (math.inf, 50.0)])
def test_filter_design_rejects_impossible_frequencies(bad):
    with pytest.raises(ValueError):
        butter2_lowpass(*bad)


def _cascade(x, *sections):
    """scipy.signal.lfilter through each (b, a) in turn, each started in steady state on its input."""
    y = np.asarray(x, dtype=float)
    for b, a in sections:
        y = signal.lfilter(b, a, y, zi=signal.lfilter_zi(b, a) * y[0])[0]
    return y


def _motion(n, dt, seed):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * dt
    roll = 4 * D * np.sin(2 * np.pi * t / 13.0) + 0.8 * D * np.sin(2 * np.pi * 8.0 * t) + 0.05 * D * rng.standard_normal(n)
    rate = (4 * D * 2 * np.pi / 13.0) * np.cos(2 * np.pi * t / 13.0) + 0.5 * D * np.sin(2 * np.pi * 8.0 * t + 1.0)
    return roll, rate


def test_roll_rate_and_acceleration_inside_the_step_equal_lfilter_cascades():
    p = demo_params()
    dt = p.dt
    roll, rate = _motion(3000, dt, seed=1)
    _, outs = run(p, active_state(p), [good(float(r), float(q)) for r, q in zip(roll, rate)])
    n = signal.iirnotch(8.0, 2.0, fs=50.0)  # scipy references for the demo file's filters
    lp = signal.butter(2, 2.0, fs=50.0)
    acc = signal.bilinear([1.0, 0.0], [0.25, 1.0], fs=50.0)
    roll_ref = _cascade(roll, n, lp)
    rate_ref = _cascade(rate, n, lp)
    acc_ref = _cascade(rate_ref, acc)
    np.testing.assert_allclose([o.roll for o in outs], roll_ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose([o.roll_rate for o in outs], rate_ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose([o.roll_accel for o in outs], acc_ref, rtol=0, atol=1e-10)


def test_derived_roll_rate_equals_lfilter_derivative_of_filtered_roll():
    p = demo_params(rate_source="derivative")
    roll, _ = _motion(3000, p.dt, seed=2)
    _, outs = run(p, active_state(p), [good(float(r), rate=math.nan, roll_rate_valid=False) for r in roll])
    n = signal.iirnotch(8.0, 2.0, fs=50.0)
    lp = signal.butter(2, 2.0, fs=50.0)
    der = signal.bilinear([1.0, 0.0], [0.1, 1.0], fs=50.0)
    acc = signal.bilinear([1.0, 0.0], [0.25, 1.0], fs=50.0)
    roll_ref = _cascade(roll, n, lp)
    rate_ref = _cascade(roll_ref, der)
    acc_ref = _cascade(rate_ref, acc)
    np.testing.assert_allclose([o.roll_rate for o in outs], rate_ref, rtol=0, atol=1e-10)
    np.testing.assert_allclose([o.roll_accel for o in outs], acc_ref, rtol=0, atol=1e-8)


def test_derived_roll_rate_of_a_clean_roll_matches_its_true_rate_at_the_roll_frequency():
    # d/dt [A sin ωt] = Aω cos ωt; at ω = 2π/13 s the filters' gain is 1 within ~0.1 % (|H| of
    # s/(τs+1) is ω/√(1+ω²τ²), and the 2 Hz low-pass is flat there)
    p = demo_params(rate_source="derivative")
    t = np.arange(3000) * p.dt
    w = 2 * np.pi / 13.0
    _, outs = run(p, active_state(p), [good(float(4 * D * np.sin(w * x)), rate=math.nan, roll_rate_valid=False) for x in t])
    assert max(abs(o.roll_rate) for o in outs[1000:]) == pytest.approx(4 * D * w, rel=2e-3)


def test_speed_filter_step_response_is_the_closed_form_exponential():
    p = demo_params()
    tau, dt = p.speed_tau, p.dt
    s = active_state(p, speed=10.0 * KN)
    _, outs = run(p, s, [good(speed=11.0 * KN)] * 300)
    n = np.arange(300)
    # 1/(τs+1) step response 1 − exp(−t/τ), at t = (n+1)·T (see controller.filters)
    expected = 10.0 * KN + 1.0 * KN * (1.0 - np.exp(-(n + 1) * dt / tau))
    np.testing.assert_allclose([o.speed for o in outs], expected, rtol=1e-12)
