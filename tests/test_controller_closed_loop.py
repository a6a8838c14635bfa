"""The time-stepped law in a loop with a linear roll model, against python-control and closed forms.

Roll model (linear, one degree of freedom; e.g. Fossen, Handbook of Marine Craft Hydrodynamics and
Motion Control, 2nd ed. 2021, ch. 7, with the fin moment of DEVELOPERS.md):

    I φ̈ + B φ̇ + C φ = M_wave + M_fin,   M_fin = −K_f δ,   K_f = 2 r_f · ½ρU²A·CLα

Sign of M_fin from the conventions: the starboard fin (y = +r_f) at α = +δ lifts L = ½ρU²A·CLα·δ
and gives M_x = −y·L = −r_f L; the port fin (y = −r_f) at α = −δ lifts −L and gives
M_x = −(−r_f)(−L) = −r_f L; together −2 r_f L.

Invented demo vessel "Demo Pax 135": I = 7.6e8 kg·m², C = ΔgGM = 9.8e6·9.80665·1.8 N·m/rad,
B = 5 % of critical. The plant is discretised exactly with a zero-order hold
(scipy.signal.cont2discrete), the controller's linear model is built from scipy.signal designs
(butter, iirnotch, bilinear) — not from controller.filters — and the loop is closed with
python-control (control.feedback). Limits are set far away and the run asserts no limiter acts.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import signal

from controller import Mode, initial_state, step

from .test_controller_support import D, KN, demo_params, good

I44 = 7.6e8
C44 = 9.8e6 * 9.80665 * 1.8
B44 = 0.05 * 2.0 * math.sqrt(I44 * C44)
U = 20 * KN


def far_limits(**kw):
    """Demo gains and filters; every limit far away (angle 45°, slew 200°/s, no stall, no load)."""
    return demo_params(angle_limit=45 * D, rate_limit=200 * D, stall_angle=45 * D, stall_margin=0.0,
                       rated_lift=1e8, feedback_range=45 * D, **kw)  # fmt: skip


def k_fin(p, u=U):
    return 2.0 * p.lever_arm * 0.5 * p.rho * u * u * p.fin_area * p.lift_slope


def plant_d(dt):
    a = np.array([[0.0, 1.0], [-C44 / I44, -B44 / I44]])
    b = np.array([[0.0], [1.0 / I44]])
    ad, bd, *_ = signal.cont2discrete((a, b, np.eye(2), np.zeros((2, 1))), dt, method="zoh")
    return ad, bd


def controller_model(p, factor=1.0):
    """1×2 discrete transfer matrix δ = [C_φ, C_p]·[φ, p] from scipy.signal designs."""
    fs = 1.0 / p.dt
    n = control.tf(*signal.iirnotch(p.notch_hz, p.notch_q, fs=fs), p.dt)
    lp = control.tf(*signal.butter(2, p.lowpass_hz, fs=fs), p.dt)
    da = control.tf(*signal.bilinear([1.0, 0.0], [p.accel_tau, 1.0], fs=fs), p.dt)
    nl = n * lp
    if p.rate_source == "sensor":
        c_phi = factor * p.k_roll * nl
        c_p = factor * (p.k_rate + p.k_accel * da) * nl
    else:
        dd = control.tf(*signal.bilinear([1.0, 0.0], [p.derivative_tau, 1.0], fs=fs), p.dt)
        c_phi = factor * (p.k_roll + p.k_rate * dd + p.k_accel * da * dd) * nl
        c_p = control.tf([0.0], [1.0], p.dt)
    # side by side (1 output, 2 inputs) as one state-space block: A = diag(A₁, A₂), C = [C₁ C₂]
    s1, s2 = control.ss(c_phi), control.ss(c_p)
    n1, n2 = s1.nstates, s2.nstates
    a = np.zeros((n1 + n2, n1 + n2))
    a[:n1, :n1], a[n1:, n1:] = s1.A, s2.A
    b = np.zeros((n1 + n2, 2))
    b[:n1, :1], b[n1:, 1:] = s1.B, s2.B
    c = np.hstack([s1.C, s2.C])
    d = np.hstack([s1.D, s2.D])
    return control.ss(a, b, c, d, p.dt)


def closed_loop(p, u=U):
    ad, bd = plant_d(p.dt)
    plant = control.ss(ad, bd, np.eye(2), np.zeros((2, 1)), p.dt)
    return control.feedback(plant, k_fin(p, u) * controller_model(p, p.speed_factor(u)), sign=-1)


def simulate(p, moment, phi0=0.0, u=U, heel=False):
    """Step the real controller against the exactly discretised plant; returns (φ, δ, outputs)."""
    ad, bd = plant_d(p.dt)
    (a11, a12), (a21, a22) = ad
    b1, b2 = bd[:, 0]
    kf = k_fin(p, u)
    s = initial_state(p, mode=Mode.ACTIVE, speed=u)
    x1, x2 = phi0, 0.0
    phis, deltas, outs = [], [], []
    prev = 0.0
    for m in moment:
        s, out = step(p, s, good(roll=x1, rate=x2, speed=u, fin_port=-prev, fin_stbd=prev, heel_trim_on=heel))
        d = out.fin_stbd
        prev = d
        phis.append(x1)
        deltas.append(d)
        outs.append(out)
        mt = m - kf * d
        x1, x2 = a11 * x1 + a12 * x2 + b1 * mt, a21 * x1 + a22 * x2 + b2 * mt
    return np.array(phis), np.array(deltas), outs


def roll_pair(poles, dt):
    """The closed-loop roll poles: continuous equivalents s = ln z / T below 2 rad/s."""
    s = np.log(poles.astype(complex)) / dt
    pair = s[(np.abs(s) < 2.0) & (np.abs(s.imag) > 1e-6)]
    assert len(pair) == 2, s
    return pair[pair.imag > 0][0]


@pytest.mark.parametrize("source", ["sensor", "derivative"])
def test_stepped_loop_equals_python_control_forced_response(source):
    p = far_limits(rate_source=source)
    n = 4000
    t = np.arange(n) * p.dt
    rng = np.random.default_rng(7)
    # irregular wave moment: a few components around the roll frequency, ~1° of roll
    moment = sum(a * np.sin(w * t + ph) for a, w, ph in
                 zip(2e6 * rng.random(4), [0.3, 0.45, 0.6, 0.9], 2 * np.pi * rng.random(4)))  # fmt: skip
    phi, _, outs = simulate(p, moment)
    assert all(o.limiter == 0 and o.mode == Mode.ACTIVE and o.faults == 0 for o in outs)
    cl = closed_loop(p)
    resp = control.forced_response(cl, T=t, U=moment)  # python-control reference
    phi_ref = resp.outputs[0]
    assert np.max(np.abs(phi)) > 0.5 * D
    np.testing.assert_allclose(phi, phi_ref, rtol=0, atol=1e-9 * np.max(np.abs(phi_ref)))


def test_closed_loop_frequency_response_matches_python_control():
    p = far_limits()
    cl = closed_loop(p)
    n = 12000  # 240 s: the slowest closed-loop mode has decayed by ≈ e^-20
    t = np.arange(n) * p.dt
    tail = slice(n - 5000, n)
    for w in (0.3, 0.48, 0.7, 1.2):
        m0 = 2e6
        phi, _, outs = simulate(p, m0 * np.sin(w * t))
        assert all(o.limiter == 0 for o in outs)
        # least-squares fit φ ≈ a sin ωt + b cos ωt on the last 100 s
        basis = np.column_stack([np.sin(w * t[tail]), np.cos(w * t[tail])])
        (a, b), *_ = np.linalg.lstsq(basis, phi[tail], rcond=None)
        measured = complex(a, b) / m0  # φ = Im{H e^{jωt}} = |H| sin(ωt + ∠H) → a + jb = H
        h = control.frequency_response(cl, [w]).frdata  # python-control reference
        expected = complex(np.asarray(h)[0, 0, 0])
        # tolerance: what is left of the start-up transient after 140 s (≈ e^-11 at resonance)
        assert abs(measured - expected) <= 1e-4 * abs(expected), (w, measured, expected)


def test_closed_loop_roll_poles_match_the_second_order_closed_form():
    # continuous approximation (filters fast compared with roll): I' = I + K_f K_a,
    # B' = B + K_f K_p, C' = C + K_f K_φ; ω_n = √(C'/I'), ζ = B'/(2√(C'I')) (Ogata, Modern Control
    # Engineering, 5th ed., ch. 5). The low-pass lag (≈ 3° at the roll frequency) and the
    # hold make the sampled loop differ by a few percent at most.
    p = far_limits()
    kf = k_fin(p)
    i_ = I44 + kf * p.k_accel
    b_ = B44 + kf * p.k_rate
    c_ = C44 + kf * p.k_roll
    wn = math.sqrt(c_ / i_)
    zeta = b_ / (2 * math.sqrt(c_ * i_))
    s = roll_pair(control.poles(closed_loop(p)), p.dt)
    assert abs(s) == pytest.approx(wn, rel=0.01)
    assert -s.real / abs(s) == pytest.approx(zeta, rel=0.03)
    # hand numbers for the demo file: K_f = 1.7117e7 N·m/rad; B = 0.1·√(7.6e8·1.7299e8) = 3.6259e7;
    # B' = 3.6259e7 + 5·1.7117e7 = 1.2185e8; C' = 1.8155e8; I' = 7.6856e8;
    # ζ = 1.2185e8 / (2·√(1.8155e8·7.6856e8)) = 1.2185e8 / 7.4707e8 = 0.1631
    assert kf == pytest.approx(1.7117e7, rel=1e-4)
    assert zeta == pytest.approx(0.1631, rel=1e-3)


def test_roll_decay_of_the_stepped_loop_has_the_predicted_damping():
    # logarithmic decrement between successive peaks: Λ = ln(φ_k/φ_{k+1}), ζ = Λ/√(4π² + Λ²)
    # (closed form for a damped second-order decay), against python-control's roll pole
    p = far_limits()
    n = 3500
    phi, _, outs = simulate(p, np.zeros(n), phi0=2 * D)
    peaks = [k for k in range(1, n - 1) if phi[k] > phi[k - 1] and phi[k] >= phi[k + 1] and phi[k] > 0]
    assert len(peaks) >= 3
    lam = math.log(phi[peaks[0]] / phi[peaks[1]])
    zeta_decay = lam / math.sqrt(4 * math.pi**2 + lam**2)
    s = roll_pair(control.poles(closed_loop(p)), p.dt)
    assert zeta_decay == pytest.approx(-s.real / abs(s), rel=0.01)
    period = (peaks[1] - peaks[0]) * p.dt
    assert period == pytest.approx(2 * math.pi / s.imag, rel=0.01)


@pytest.mark.parametrize("speed_kn", [8.0, 12.0, 16.0, 20.0, 24.0])
def test_demo_gains_stabilise_and_add_damping_across_the_scheduled_speeds(speed_kn):
    # restoring sign: with the fins acting the roll damping ratio rises above the passive 5 %;
    # with (U_ref/U)² scheduling the added damping is the same at every speed (closed form)
    p = demo_params()
    u = speed_kn * KN
    cl = closed_loop(p, u)
    assert np.all(np.abs(control.poles(cl)) < 1.0)
    s = roll_pair(control.poles(cl), p.dt)
    zeta = -s.real / abs(s)
    assert zeta > 0.15
    s_ref = roll_pair(control.poles(closed_loop(p, U)), p.dt)
    assert zeta == pytest.approx(-s_ref.real / abs(s_ref), rel=0.02)


def test_reversed_gains_would_reduce_damping_so_the_sign_matters():
    # the same model with negative gains (allowed only explicitly): damping falls below passive
    p = far_limits(allow_negative_gains=True, k_roll=-0.5, k_rate=-1.0, k_accel=0.0)
    s = roll_pair(control.poles(closed_loop(p)), p.dt)
    assert -s.real / abs(s) < 0.05


def test_heel_trim_removes_a_steady_heel_and_settles_on_the_closed_form_fin_angle():
    # steady heeling moment M_h: without heel trim φ_ss = M_h / (C + K_f K_φ) (final value);
    # with it the integral drives φ → 0 and δ → M_h / K_f
    p = far_limits()
    kf = k_fin(p)
    m_h = 0.2 * D * C44  # ≈ 0.2° of heel on the bare hull
    n = 60000  # 1200 s: the slowest heel-trim mode (≈ 95 s) has decayed by ≈ e^-12
    phi, delta, outs = simulate(p, np.full(n, m_h), heel=False)
    assert phi[-1] == pytest.approx(m_h / (C44 + kf * p.k_roll), rel=1e-6)
    phi, delta, outs = simulate(p, np.full(n, m_h), heel=True)
    assert abs(phi[-1]) < 1e-5 * D
    assert delta[-1] == pytest.approx(m_h / kf, rel=1e-4)
    assert outs[-1].term_heel == pytest.approx(m_h / kf, rel=1e-3)
    assert all(abs(o.term_heel) <= p.heel_authority for o in outs)
