"""Ideal-bound QP (hil/ideal.py): discretisation, the QP against independent solutions, limits.

Short records (2–4 min at 10 Hz) keep the file fast. Outside references: scipy.integrate.solve_ivp
(the continuous ODE), the frequency response of the roll equation, a dense least-squares solution
of the condensed problem (numpy.linalg), and the optimality of a QP over any feasible point.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.signal import dlsim

from hil.config import load_scenario, load_vessel
from hil.ideal import (
    IdealBoundError,
    discretise,
    efficiency,
    ideal_bound,
    ideal_bound_from_moment,
    interval_average,
    linearisation_amplitude,
    simulate_discrete,
)
from plant.constants import KNOT
from plant.linear import linear_roll

ROOT = Path(__file__).resolve().parents[1]
DEG = math.pi / 180.0
DT = 0.1


@pytest.fixture(scope="module")
def model():
    v = load_vessel(ROOT / "configs/vessels/demo_pax_135.toml")
    return linear_roll(v.params, (v.fin_port, v.fin_stbd), 20.0 * KNOT, 3.0 * DEG)


def wave_moment(model, duration_s, seed=1, n=40, dt=DT):
    """Random-phase sum of sines around the roll resonance, ~2° RMS roll (interval values)."""
    rng = np.random.default_rng(seed)
    w0 = model.natural_frequency_rad_s
    om = rng.uniform(0.6 * w0, 1.6 * w0, n)
    ph = rng.uniform(0, 2 * np.pi, n)
    t = dt * (np.arange(int(round(duration_s / dt))) + 0.5)
    amp = 0.02 * model.restoring_n_m_per_rad / math.sqrt(n)
    return amp * np.sin(om[None, :] * t[:, None] + ph[None, :]).sum(axis=1)


def test_zoh_discretisation_matches_the_continuous_ode_with_held_inputs(model):
    # Reference: scipy.integrate.solve_ivp on I φ̈ + B φ̇ + C φ = M − K_f δ with δ, M held per
    # interval (ZOH is exact for piecewise-constant inputs; Franklin, Powell & Workman ch. 4).
    rng = np.random.default_rng(3)
    n = 60
    delta = rng.uniform(-0.3, 0.3, n)
    m = rng.uniform(-2e7, 2e7, n)
    ad, bd = discretise(model, DT)
    x = simulate_discrete(ad, bd, delta, m, (0.02, -0.01))
    i, b, c, kf = model.inertia_kg_m2, model.total_damping_n_m_s, model.restoring_n_m_per_rad, model.fin_moment_per_rad
    y = np.array([0.02, -0.01])
    for k in range(n):
        sol = solve_ivp(lambda t, s: [s[1], (m[k] - kf * delta[k] - b * s[1] - c * s[0]) / i],
                        (0, DT), y, rtol=1e-11, atol=1e-13, method="DOP853")
        y = sol.y[:, -1]
        assert x[k + 1] == pytest.approx(y, rel=1e-7, abs=1e-10)


def test_discrete_simulation_equals_scipy_dlsim(model):
    # Reference: scipy.signal.dlsim on the same (A_d, B_d).
    ad, bd = discretise(model, DT)
    m = wave_moment(model, 60.0)
    delta = 0.1 * np.sin(0.3 * np.arange(m.size))
    x = simulate_discrete(ad, bd, delta, m)
    _, _, xs = dlsim((ad, bd, np.eye(2), np.zeros((2, 2)), DT), np.column_stack([delta, m]), x0=[0.0, 0.0])
    assert np.allclose(x[:-1], xs, rtol=1e-12, atol=1e-15)


def test_passive_sigma_equals_the_frequency_response_prediction(model):
    # σ² = Σ |H(ω_i)|² a_i²/2 for a sum of sines on the window's Fourier grid (cross terms vanish
    # exactly; Bendat & Piersol, Random Data, ch. 5: output spectrum |H|²S). H = 1/(C − Iω² + iBω).
    # ZOH sampling at 10 Hz changes |H| by O((ωΔt)²/24) ≈ 1e-4 at ω ≈ 0.5 rad/s.
    warm, win = 300.0, 1200.0
    rng = np.random.default_rng(5)
    ks = np.arange(60, 150)  # ω_k = 2πk/win: 0.31 … 0.79 rad/s around ω0 ≈ 0.48
    om = 2 * np.pi * ks / win
    a = 0.01 * model.restoring_n_m_per_rad * rng.uniform(0.2, 1.0, ks.size) / math.sqrt(ks.size)
    ph = rng.uniform(0, 2 * np.pi, ks.size)
    n = int(round((warm + win) / DT))
    edges = DT * np.arange(n + 1)
    # interval average of each sine (exact): [−cos]/(ωΔt)
    m = ((a / om)[None, :] * (np.cos(om[None, :] * edges[:-1, None] + ph) - np.cos(om[None, :] * edges[1:, None] + ph))).sum(axis=1) / DT
    expected = math.sqrt(np.sum(np.abs(model.roll_response(om)) ** 2 * a**2 / 2))
    res = ideal_bound_from_moment(model, m, DT, 25 * DEG, 22 * DEG, warmup_s=warm, objective="rms")
    assert res.sigma_off_rad == pytest.approx(expected, rel=2e-3)


def condensed_optimum(model, m, warm, eps, dmax, objective):
    """Unconstrained optimum of the same objective, condensed to δ and solved densely."""
    ad, bd = discretise(model, DT)
    n = m.size
    c = np.array([[1.0, 0.0]])
    # impulse response of φ to δ and free response to M, both with scipy.signal.dlsim;
    # φ_k (k = 1..N) = φ_free,k + Σ_j h[k−j] δ_j, h[i] = φ i steps after a unit pulse of δ at 0
    pulse = np.zeros(n + 1)
    pulse[0] = 1.0
    _, h, _ = dlsim((ad, bd[:, 0:1], c, np.zeros((1, 1)), DT), pulse)
    _, _, xf = dlsim((ad, bd[:, 1:2], np.eye(2), np.zeros((2, 1)), DT), np.append(m, 0.0))
    phi_free = xf[1:, 0]  # φ_1 … φ_N
    hh = h[:, 0]  # hh[i] = φ_i after a pulse at 0 (hh[0] = 0)
    g = np.zeros((n, n))
    for j in range(n):
        g[j:, j] = hh[1:n - j + 1]
    t = DT * np.arange(1, n + 1)
    w = t >= warm
    s_phi = math.sqrt(np.mean(phi_free[w] ** 2))
    gw, fw = g[w] / s_phi, phi_free[w] / s_phi
    nw = int(w.sum())
    if objective == "std":  # remove the window mean (the free m̃ of the QP, minimised out)
        gw = gw - gw.mean(axis=0)
        fw = fw - fw.mean()
    hess = gw.T @ gw / nw + eps / (n * dmax**2) * np.eye(n)
    return np.linalg.solve(hess, -gw.T @ fw / nw)


@pytest.mark.parametrize("objective", ["rms", "std"])
def test_far_limits_give_the_unconstrained_least_squares_optimum(model, objective):
    # Reference: the equality-constrained least-squares problem condensed to δ (φ = φ_free + Gδ,
    # G from scipy.signal.dlsim impulse responses) and solved with numpy.linalg.solve (normal
    # equations; Boyd & Vandenberghe, Convex Optimization, 2004, §4.2.5 / §10.1).
    m = wave_moment(model, 120.0) + (3e6 if objective == "std" else 0.0)  # a steady heel for "std"
    # ε large enough that the optimum is unique and well conditioned (perfect cancellation is not
    # reached), limits (1 rad, 1e4 rad/s) far outside the optimum so no constraint is active
    eps, dmax = 1e-2, 1.0
    ref = condensed_optimum(model, m, 20.0, eps, dmax, objective)
    assert np.max(np.abs(ref)) < 0.5 * dmax
    res = ideal_bound_from_moment(model, m, DT, dmax, 1e4, warmup_s=20.0, epsilon=eps, objective=objective,
                                  osqp_settings=dict(eps_abs=1e-9, eps_rel=1e-9, max_iter=200000))
    assert res.status == "solved"
    scale = np.max(np.abs(ref))
    assert np.max(np.abs(res.delta_rad - ref)) <= 1e-4 * scale
    assert res.ideal_roll_reduction_pct > 50.0  # with no limits, fins cancel most of the roll


def demo_limits():
    return dict(angle_limit_rad=25 * DEG, rate_limit_rad_s=22 * DEG)


def test_returned_solution_satisfies_all_limits_to_solver_tolerance(model):
    # Tight limits so that all three kinds of constraint are active somewhere.
    m = 3.0 * wave_moment(model, 180.0)
    res = ideal_bound_from_moment(model, m, DT, 8 * DEG, 4 * DEG, effective_angle_limit_rad=6 * DEG,
                                  lever_arms_m=(10.0,), warmup_s=30.0)
    d = res.delta_rad
    p = res.rate_opt_rad_s
    u = model.speed_ms
    viol_angle = np.max(np.abs(d)) - 8 * DEG
    viol_rate = np.max(np.abs(np.diff(np.concatenate(([0.0], d))))) - 4 * DEG * DT
    viol_eff = max(np.max(np.abs(d + p[1:] * 10.0 / u)), np.max(np.abs(d + p[:-1] * 10.0 / u))) - 6 * DEG
    tol = 1e-4 * DEG * 10  # OSQP eps 1e-5 on variables scaled by the angle limit
    assert max(viol_angle, viol_rate, viol_eff) <= tol
    # every limit is reached (otherwise this test would not test them)
    assert viol_angle > -1e-3 * DEG and viol_rate > -1e-3 * DEG and viol_eff > -1e-3 * DEG
    assert max(res.max_violation_rad.values()) <= tol


def test_tighter_limits_never_increase_the_bound(model):
    # A smaller feasible set cannot give a lower optimum (optimality of a minimum over nested sets).
    m = 2.0 * wave_moment(model, 150.0, seed=7)
    rr = [ideal_bound_from_moment(model, m, DT, a * DEG, r * DEG, effective_angle_limit_rad=e * DEG,
                                  lever_arms_m=(10.0,), warmup_s=30.0).ideal_roll_reduction_pct
          for a, r, e in [(25, 22, 22), (12, 22, 22), (12, 6, 22), (12, 6, 5), (4, 3, 3)]]
    assert all(b <= a + 0.05 for a, b in zip(rr, rr[1:])), rr
    assert rr[0] - rr[-1] > 5.0, rr  # the limits matter on this record


def test_bound_beats_a_saturated_rate_feedback_on_the_same_model(model):
    # Any feasible δ sequence is a candidate of the QP, so its RR cannot exceed the optimum's.
    m = 2.0 * wave_moment(model, 180.0, seed=11)
    ad, bd = discretise(model, DT)
    a_lim, r_step, e_lim, rf, u = 20 * DEG, 10 * DEG * DT, 15 * DEG, 10.0, model.speed_ms
    x = np.zeros(2)
    prev = 0.0
    phis = [0.0]
    for k in range(m.size):
        want = 6.0 * x[1]  # δ = K·p (rate feedback), K = 6 s
        lo = max(-a_lim, prev - r_step, -e_lim - x[1] * rf / u)
        hi = min(a_lim, prev + r_step, e_lim - x[1] * rf / u)
        d = min(max(want, lo), hi)
        x = ad @ x + bd[:, 0] * d + bd[:, 1] * m[k]
        # keep the end-of-interval effective angle within the limit too (shrink δ if needed)
        prev = d
        phis.append(x[0])
    phis = np.array(phis)
    res = ideal_bound_from_moment(model, m, DT, a_lim, 10 * DEG, effective_angle_limit_rad=e_lim,
                                  lever_arms_m=(rf,), warmup_s=30.0)
    t = DT * np.arange(m.size + 1)
    w = t >= 30.0
    rr_fb = 100.0 * (1.0 - np.std(phis[w]) / np.std(res.roll_off_rad[w]))
    assert 10.0 < rr_fb  # the feedback law does reduce roll
    assert rr_fb <= res.ideal_roll_reduction_pct + 0.05


def test_solver_failure_raises_instead_of_returning_a_number(model):
    m = wave_moment(model, 60.0)
    with pytest.raises(IdealBoundError, match="status"):
        ideal_bound_from_moment(model, m, DT, 10 * DEG, 5 * DEG, osqp_settings=dict(max_iter=3, polishing=False))


def test_epsilon_does_not_change_the_bound(model):
    m = 2.0 * wave_moment(model, 150.0, seed=4)
    kw = dict(effective_angle_limit_rad=15 * DEG, lever_arms_m=(10.0,), warmup_s=30.0)
    a = ideal_bound_from_moment(model, m, DT, 20 * DEG, 10 * DEG, epsilon=1e-4, **kw)
    b = ideal_bound_from_moment(model, m, DT, 20 * DEG, 10 * DEG, epsilon=1e-5, **kw)
    assert abs(a.ideal_roll_reduction_pct - b.ideal_roll_reduction_pct) < 0.05


def test_interval_average_of_a_sine_matches_its_integral():
    # ∫ sin = −cos (calculus); trapezoid error on 0.02 s samples is O(h²ω²/12) ≈ 3e-5.
    t = np.arange(0, 10.0001, 0.02)
    y = np.sin(0.7 * t)
    got = interval_average(t, y, 0.5)
    e = 0.5 * np.arange(21)
    exact = (np.cos(0.7 * e[:-1]) - np.cos(0.7 * e[1:])) / (0.7 * 0.5)
    assert got == pytest.approx(exact, abs=1e-4)


def test_linearisation_amplitude_matches_gaussian_damping_equivalence():
    # (8/3π) ω0 φa = √(8/π) σ_p (E|p|³ = 2√(2/π) σ³ for Gaussian p; Roberts & Spanos 1990 ch. 5)
    p = np.random.default_rng(2).normal(0.0, 0.03, 200000)
    w0 = 0.48
    phi_a = linearisation_amplitude(p, w0)
    b2_eq = float(np.mean(np.abs(p) ** 3) / np.mean(p**2))  # sample E[p|p|p]/E[p²]
    assert 8.0 / (3.0 * math.pi) * w0 * phi_a == pytest.approx(b2_eq, rel=0.01)


def test_efficiency_is_the_ratio_and_rejects_a_zero_bound():
    assert efficiency(30.0, 60.0) == pytest.approx(0.5)
    with pytest.raises(ValueError, match="must be > 0"):
        efficiency(30.0, 0.0)


def test_scenario_bound_uses_the_scenarios_limits_and_speed():
    # Demo controller file: angle 25°, rate 22°/s, stall 24 − 2 = 22°, rated-lift angle at 20 kn
    # 350 kN / (½·1026·(20·0.5144)²·8·1.97) ≈ 23.4° (hand calculation in
    # configs/controller/demo_pax_135.toml) → effective-angle limit 22°.
    from hil.simulate import run_passive
    from dataclasses import replace

    sc = load_scenario(ROOT / "configs/scenarios/beam_sea_service_speed.toml")
    short = replace(sc, setup=replace(sc.setup, duration_s=240.0))
    rec = run_passive(short).records
    res = ideal_bound(short, records=rec)
    assert res.angle_limit_rad == pytest.approx(25 * DEG)
    assert res.rate_limit_rad_s == pytest.approx(22 * DEG)
    assert res.effective_angle_limit_rad == pytest.approx(22 * DEG)
    assert res.speed_ms == pytest.approx(20 * KNOT, rel=1e-9)
    assert 0.0 < res.ideal_roll_reduction_pct < 100.0
    s = res.summary()
    assert s["status"] == "solved" and s["steps"] == 2400
    # the linear model's passive σ is within 10 % of the nonlinear plant's on the same sea
    # (statistical linearisation of the quadratic damping; common practice tolerance)
    assert res.sigma_off_rad == pytest.approx(res.passive_sim_sigma_rad, rel=0.10)
