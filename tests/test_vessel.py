"""Vessel roll model: roll period, free decay, nonlinear integration, regular-wave response."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.signal import find_peaks

from plant.constants import G
from plant.vessel import (
    GZTable,
    damping_ratio_to_log_decrement,
    imo_roll_period_s,
    inertia_from_period,
    log_decrement_to_damping_ratio,
)

from .plant_fixtures import DISP, GM, plant, run, setup, vessel


def test_imo_roll_period_matches_hand_worked_example():
    # IMO 2008 IS Code (MSC.267(85)) Part A §2.3: T = 2CB/√GM, C = 0.373 + 0.023 B/d − 0.043 L/100.
    # Worked by hand: B = 22, d = 5.8, L = 135, GM = 1.8:
    #   C = 0.373 + 0.023·3.793103 − 0.043·1.35 = 0.402191;  T = 2·0.402191·22/1.341641 = 13.190 s
    assert imo_roll_period_s(22.0, 5.8, 135.0, 1.8) == pytest.approx(13.190, abs=5e-3)


def test_imo_roll_period_second_worked_example():
    # Same formula, B = 10, d = 4, L = 50, GM = 1.0: C = 0.373 + 0.0575 − 0.0215 = 0.409; T = 8.18 s
    assert imo_roll_period_s(10.0, 4.0, 50.0, 1.0) == pytest.approx(8.18, abs=1e-9)


def test_natural_period_follows_inertia_and_gm():
    # Physics: T0 = 2π √(I / (Δ g GM)) (Fossen 2021, ch. 4; undamped 1-DOF oscillator).
    v = vessel(period=12.0)
    assert v.natural_period_s == pytest.approx(12.0, rel=1e-12)
    inertia = inertia_from_period(DISP, GM, 12.0)
    assert 2 * math.pi * math.sqrt(inertia / (DISP * G * GM)) == pytest.approx(12.0, rel=1e-12)
    # T0 ∝ 1/√GM at fixed inertia: quadrupling GM halves the period
    v4 = type(v)(**{**v.__dict__, "gm_m": 4 * GM})
    assert v4.natural_period_s == pytest.approx(6.0, rel=1e-12)


@pytest.mark.parametrize("zeta", [0.01, 0.05, 0.2])
def test_log_decrement_round_trip(zeta):
    # Linear oscillator: δ = 2πζ/√(1−ζ²) ⇔ ζ = δ/√(4π²+δ²) (Thomson & Dahleh, Theory of Vibration, ch. 2).
    d = damping_ratio_to_log_decrement(zeta)
    assert d == pytest.approx(2 * math.pi * zeta / math.sqrt(1 - zeta**2), rel=1e-12)
    assert log_decrement_to_damping_ratio(d) == pytest.approx(zeta, rel=1e-12)


@pytest.mark.parametrize("zeta", [0.02, 0.08])
def test_free_decay_log_decrement_gives_the_damping_ratio(zeta):
    # A small free decay (1 deg, fins retracted, calm water, linear damping only) must show the
    # logarithmic decrement of a linear oscillator with the model's ζ (Thomson & Dahleh ch. 2;
    # ITTC 7.5-02-07-04.5 decay analysis). Peaks of successive cycles; sin φ ≈ φ to 5e-5 at 1 deg.
    s = setup(200.0, v=vessel(zeta=zeta), fins_when_off="retracted", initial_roll_rad=math.radians(1.0))
    rec = run(plant(s))
    phi = rec["roll_rad"]
    peaks, _ = find_peaks(phi)
    amps = phi[peaks][:6]
    # refine each peak with a parabola through 3 samples (dt = 0.02 s on a 13 s period)
    refined = []
    for i in peaks[:6]:
        y0, y1, y2 = phi[i - 1], phi[i], phi[i + 1]
        refined.append(y1 - 0.125 * (y2 - y0) ** 2 / (y2 - 2 * y1 + y0))
    deltas = np.log(np.array(refined[:-1]) / np.array(refined[1:]))
    assert len(amps) >= 4
    assert log_decrement_to_damping_ratio(float(np.mean(deltas))) == pytest.approx(zeta, rel=0.01)


def test_nonlinear_decay_matches_solve_ivp_reference():
    # Reference: the same ODE written independently here and integrated by scipy.integrate.solve_ivp
    # (DOP853, rtol 1e-11). Large decay from 25 deg with quadratic damping and a GZ table.
    # Accepted RK4 error at h = 0.02 s: 1e-6 rad (RK4 global error O(h⁴); measured ≈ 2e-8 rad; the GZ table's kinks limit RK4's order).
    heel = tuple(math.radians(x) for x in (0, 10, 20, 30, 40, 50))
    gz = GZTable(heel, (0.0, 0.31, 0.60, 0.82, 0.85, 0.70))
    v = vessel(zeta=0.02, b2=4.0e8, gz=gz)
    s = setup(60.0, v=v, fins_when_off="retracted", initial_roll_rad=math.radians(25.0))
    rec = run(plant(s))

    def rhs(t, y):
        phi, p = y
        a = abs(phi)
        lever = np.interp(a, heel, gz.gz_m) * (1 if phi >= 0 else -1)
        return [p, (-v.b1_n_m_s * p - v.b2_n_m_s2 * p * abs(p) - v.displacement_kg * G * lever) / v.inertia_kg_m2]

    ref = solve_ivp(rhs, (0, 60.0), [math.radians(25.0), 0.0], method="DOP853", rtol=1e-11, atol=1e-13,
                    t_eval=rec["t_s"], max_step=0.01)
    err = np.max(np.abs(ref.y[0] - rec["roll_rad"]))
    assert err < 1e-6


def _steady_amplitude(t, x, omega, t_from):
    sel = t >= t_from
    a = np.column_stack([np.cos(omega * t[sel]), np.sin(omega * t[sel])])
    c, *_ = np.linalg.lstsq(a, x[sel], rcond=None)
    return math.hypot(*c)


@pytest.mark.parametrize("ratio", [0.5, 0.8, 1.0, 1.25, 2.0])
def test_regular_wave_steady_amplitude_matches_linear_rao(ratio):
    # Closed-form linear RAO of I φ̈ + B φ̇ + C φ = M0 cos ωt:
    #   |φ|/M0 = 1/√((C − Iω²)² + (Bω)²)  (Fossen 2021 ch. 4; any vibration text, steady state).
    # Roll kept ~1-2 deg so that sin φ ≈ φ (relative error < 2e-4). Fins retracted, B2 = 0.
    v = vessel(zeta=0.1)
    w0 = v.natural_frequency_rad_s
    w = ratio * w0
    c = v.restoring_n_m_per_rad
    m0 = c * math.radians(1.0) * 2 * 0.1  # 1 deg at resonance
    s = setup(400.0, v=v, fins_when_off="retracted")
    rec = run(plant(s, moment=lambda t: m0 * np.cos(w * t)))
    amp = _steady_amplitude(rec["t_s"], rec["roll_rad"], w, 250.0)
    expected = m0 / math.hypot(c - v.inertia_kg_m2 * w * w, v.b1_n_m_s * w)
    assert amp == pytest.approx(expected, rel=0.01)


def test_steady_heel_from_external_moment_equals_moment_over_restoring():
    # Statics: Δ g GZ(φ) = M  ⇒ with GZ = GM sin φ, φ = asin(M/(Δ g GM)) (any ship-stability text,
    # e.g. Biran & López-Pulido, Ship Hydrostatics and Stability, 2014, ch. 6 on heeling moments).
    from plant.simulation import ExternalMoment

    v = vessel(zeta=0.3)
    m = v.displacement_kg * G * 0.05  # heeling arm 0.05 m
    s = setup(200.0, v=v, fins_when_off="retracted", external_moments=(ExternalMoment("steady", m),))
    rec = run(plant(s))
    assert rec["roll_rad"][-1] == pytest.approx(math.asin(0.05 / GM), rel=1e-4)
    assert rec["roll_rad"][-1] > 0  # positive moment heels to starboard (φ > 0)


def test_fast_gz_function_equals_the_table_interpolation_everywhere():
    # The stepping loop's cached-segment GZ must give exactly the table's linear interpolation
    # (numpy.interp as the reference), including sign mirroring and the error beyond the table.
    from plant.vessel import gz_function

    heel = tuple(math.radians(x) for x in (0, 5, 10, 20, 35, 50, 70))
    gz = GZTable(heel, (0.0, 0.15, 0.31, 0.60, 0.88, 0.72, 0.1))
    f = gz_function(gz)
    rng = np.random.default_rng(3)
    phis = np.concatenate([rng.uniform(-1.22, 1.22, 5000), np.linspace(-1.2, 1.2, 2001), np.array(heel), -np.array(heel)])
    for phi in phis:  # random order exercises the segment cache and the bisection fallback
        ref = math.copysign(float(np.interp(abs(phi), heel, gz.gz_m)), phi)
        assert f(phi) == pytest.approx(ref, abs=1e-12)
        assert gz.gz(phi) == pytest.approx(ref, abs=1e-12)
    with pytest.raises(ValueError, match="beyond the GZ table"):
        f(math.radians(71.0))
