"""Tests of plant.spectra: spectra, moments, period conversions, dispersion, encounter frequency."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import integrate, optimize, special

from plant.constants import DEG, KNOT
from plant.spectra import (
    PM_T1_OVER_TP,
    PM_TZ_OVER_TP,
    Ittc,
    Jonswap,
    PiersonMoskowitz,
    encounter_frequency,
    frequency_band,
    hm0,
    ittc,
    jonswap,
    jonswap_gamma_dnv,
    mean_period,
    pierson_moskowitz,
    spectral_moment,
    t1_over_tp,
    tz_over_tp,
    wave_number,
    wavelength,
    zero_crossing_period,
)

GAMMAS = [1.0, 1.5, 2.0, 3.3, 4.0, 5.0]


# --- significant wave height --------------------------------------------------------------------


@pytest.mark.parametrize("hs, tp", [(1.0, 5.0), (4.0, 10.0), (9.0, 15.0)])
def test_pierson_moskowitz_hm0_equals_input_hs(hs: float, tp: float) -> None:
    # DNV-RP-C205 §3.5.1 / §3.5.5.1: Hm0 = 4 √m0 and the PM spectrum is scaled so Hm0 = Hs.
    assert hm0(PiersonMoskowitz(hs, tp)) == pytest.approx(hs, rel=0.005)


@pytest.mark.parametrize("hs, t1", [(1.0, 4.0), (4.0, 8.0), (9.0, 12.0)])
def test_ittc_hm0_equals_input_hs(hs: float, t1: float) -> None:
    # ITTC (1978) two-parameter spectrum; Hm0 = 4 √m0 (DNV-RP-C205 §3.5.1).
    assert hm0(Ittc(hs, t1)) == pytest.approx(hs, rel=0.005)


@pytest.mark.parametrize("gamma", GAMMAS)
def test_jonswap_hm0_equals_input_hs_for_gamma_1_to_5(gamma: float) -> None:
    # DNV-RP-C205 §3.5.5.2: with A_γ = 1 − 0.287 ln γ the JONSWAP spectrum keeps Hm0 ≈ Hs.
    assert hm0(Jonswap(3.0, 9.0, gamma)) == pytest.approx(3.0, rel=0.005)


def test_spectral_moment_agrees_with_scipy_quad_on_the_whole_axis() -> None:
    # Reference library: scipy.integrate.quad of ω² S(ω) over (0, ∞) in one call.
    sp = Jonswap(2.5, 8.0, 3.3)
    ref, _ = integrate.quad(lambda w: w**2 * float(sp(w)), 0.0, np.inf, limit=500)
    assert spectral_moment(sp, 2) == pytest.approx(ref, rel=1e-4)


# --- shape -------------------------------------------------------------------------------------


@pytest.mark.parametrize("gamma", GAMMAS)
def test_jonswap_to_pm_ratio_at_the_peak_is_gamma_times_normalising_factor(gamma: float) -> None:
    # DNV-RP-C205 §3.5.5.2: at ω = ωp the peak factor is γ^1, so S_J/S_PM = γ (1 − 0.287 ln γ).
    hs, tp = 3.0, 9.0
    wp = 2.0 * math.pi / tp
    ratio = jonswap(wp, hs, tp, gamma) / pierson_moskowitz(wp, hs, tp)
    assert ratio == pytest.approx(gamma * (1.0 - 0.287 * math.log(gamma)), rel=1e-12)


def test_jonswap_with_gamma_one_is_pierson_moskowitz() -> None:
    # DNV-RP-C205 §3.5.5.2: for γ = 1 JONSWAP reduces to Pierson–Moskowitz.
    w = np.linspace(0.05, 4.0, 500)
    np.testing.assert_allclose(jonswap(w, 2.0, 7.0, 1.0), pierson_moskowitz(w, 2.0, 7.0), rtol=1e-14)


@pytest.mark.parametrize("gamma", [1.0, 3.3, 5.0])
def test_spectrum_peaks_at_two_pi_over_tp(gamma: float) -> None:
    # DNV-RP-C205 §3.5.5: Tp is the period of the spectral peak, ωp = 2π/Tp.
    tp = 11.0
    wp = 2.0 * math.pi / tp
    res = optimize.minimize_scalar(
        lambda w: -float(jonswap(w, 2.0, tp, gamma)), bounds=(0.7 * wp, 1.3 * wp), method="bounded",
        options={"xatol": 1e-10},
    )
    assert res.x == pytest.approx(wp, rel=1e-5)


def test_ittc_spectrum_constants_are_the_published_173_and_691() -> None:
    # ITTC (1978) / Lloyd (1989) Seakeeping: S = 173 Hs² T1⁻⁴ ω⁻⁵ exp(−691 T1⁻⁴ ω⁻⁴); the exact
    # constants used here must round to the published three figures.
    hs, t1 = 1.0, 1.0
    w1, w2 = 3.0, 7.0
    # ln(S ω⁵) = ln A − B ω⁻⁴: two points give A and B.
    y1, y2 = math.log(ittc(w1, hs, t1) * w1**5), math.log(ittc(w2, hs, t1) * w2**5)
    b = (y2 - y1) / (w1**-4 - w2**-4)
    a = math.exp(y1 + b * w1**-4)
    assert a == pytest.approx(173.0, rel=0.002)
    assert b == pytest.approx(691.0, rel=0.002)


def test_spectra_are_zero_and_finite_at_and_below_zero_frequency() -> None:
    # Physical requirement (no energy at ω ≤ 0); the ω⁻⁵ factor must not overflow to NaN.
    w = np.array([-1.0, 0.0, 1e-300, 1e-3])
    for s in (pierson_moskowitz(w, 2, 8), jonswap(w, 2, 8, 3.3), ittc(w, 2, 7)):
        assert np.all(np.isfinite(s))
        np.testing.assert_array_equal(s, 0.0)


# --- periods -----------------------------------------------------------------------------------


@pytest.mark.parametrize("gamma", [1.0, 2.0, 3.3, 5.0, 6.0])
def test_tz_over_tp_from_moments_matches_dnv_polynomial(gamma: float) -> None:
    # DNV-RP-C205 §3.5.5.4: Tz/Tp = 0.6673 + 0.05037γ − 0.006230γ² + 0.0003341γ³.
    sp = Jonswap(2.0, 10.0, gamma)
    published = 0.6673 + 0.05037 * gamma - 0.006230 * gamma**2 + 0.0003341 * gamma**3
    assert zero_crossing_period(sp) / sp.tp == pytest.approx(published, rel=0.003)
    assert tz_over_tp(gamma) == pytest.approx(published, rel=1e-12)


@pytest.mark.parametrize("gamma", [1.0, 2.0, 3.3, 5.0, 6.0])
def test_t1_over_tp_from_moments_matches_dnv_polynomial(gamma: float) -> None:
    # DNV-RP-C205 §3.5.5.4: T1/Tp = 0.7303 + 0.04936γ − 0.006556γ² + 0.0003610γ³.
    sp = Jonswap(2.0, 10.0, gamma)
    published = 0.7303 + 0.04936 * gamma - 0.006556 * gamma**2 + 0.0003610 * gamma**3
    assert mean_period(sp) / sp.tp == pytest.approx(published, rel=0.003)
    assert t1_over_tp(gamma) == pytest.approx(published, rel=1e-12)


def test_pierson_moskowitz_period_ratios_match_closed_form() -> None:
    # Closed form for S ∝ ω⁻⁵ exp(−B ω⁻⁴): m_n ∝ B^((n−4)/4) Γ((4−n)/4), ωp⁴ = 4B/5, so
    # Tz/Tp = (4/5)^¼/π^¼ and T1/Tp = (4/5)^¼/Γ(3/4) (scipy.special.gamma as reference).
    sp = PiersonMoskowitz(3.0, 12.0)
    assert zero_crossing_period(sp) / sp.tp == pytest.approx(0.8**0.25 / math.pi**0.25, rel=1e-6)
    assert mean_period(sp) / sp.tp == pytest.approx(0.8**0.25 / special.gamma(0.75), rel=1e-6)
    # Published rounded values: Tz = 0.710 Tp, T1 = 0.772 Tp (DNV-RP-C205 §3.5.5.1, from memory).
    assert PM_TZ_OVER_TP == pytest.approx(0.710, abs=5e-4)
    assert PM_T1_OVER_TP == pytest.approx(0.772, abs=5e-4)


def test_ittc_conversions_from_tz_and_tp() -> None:
    # Journée & Massie, Offshore Hydromechanics (2001) ch. 5, Bretschneider spectrum:
    # T1 = 1.086 Tz and Tp = 1.408 Tz (from memory).
    sea = Ittc.from_tz(2.0, 7.0)
    assert sea.t1 / 7.0 == pytest.approx(1.086, abs=5e-4)
    assert sea.tp / 7.0 == pytest.approx(1.408, abs=5e-4)
    # The integrated moments give back the periods asked for (Tz = 2π √(m0/m2), T1 = 2π m0/m1).
    assert zero_crossing_period(sea) == pytest.approx(7.0, rel=1e-6)
    assert mean_period(Ittc.from_tp(2.0, 9.0)) == pytest.approx(9.0 * PM_T1_OVER_TP, rel=1e-6)
    assert Ittc.from_tp(2.0, 9.0).peak_frequency == pytest.approx(2 * math.pi / 9.0, rel=1e-12)


def test_jonswap_from_tz_and_t1_use_the_dnv_polynomials() -> None:
    # DNV-RP-C205 §3.5.5.4 polynomials, γ = 3.3: Tz/Tp = 0.77768, T1/Tp = 0.83477 (hand-evaluated).
    assert Jonswap.from_tz(3.0, 7.7768, 3.3).tp == pytest.approx(10.0, rel=1e-4)
    assert Jonswap.from_t1(3.0, 8.3477, 3.3).tp == pytest.approx(10.0, rel=1e-4)


@pytest.mark.parametrize("hs, tz", [(4.0, 5.0), (4.0, 6.0), (4.0, 7.0), (2.0, 8.0)])
def test_jonswap_from_tz_with_the_gamma_rule_is_self_consistent(hs: float, tz: float) -> None:
    # DNV-RP-C205 §3.5.5.4 and §3.5.5.5 together: the chosen Tp gives γ by the Tp/√Hs rule, and
    # that γ's Tz/Tp polynomial gives back the Tz asked for; the integrated Tz agrees to 0.3 %.
    sea = Jonswap.from_tz(hs, tz)
    assert sea.gamma == pytest.approx(jonswap_gamma_dnv(hs, sea.tp), rel=1e-12)
    g = sea.gamma
    assert sea.tp * (0.6673 + 0.05037 * g - 0.006230 * g**2 + 0.0003341 * g**3) == pytest.approx(tz, rel=1e-9)
    assert zero_crossing_period(sea) == pytest.approx(tz, rel=0.003)


# --- peak enhancement rule ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "tp, expected",
    [
        (6.0, 5.0),  # Tp/√Hs = 3.0 ≤ 3.6 → γ = 5
        (7.2, 5.0),  # Tp/√Hs = 3.6 (boundary) → γ = 5
        (8.0, 3.1582),  # Tp/√Hs = 4.0 → γ = exp(5.75 − 4.6) = e^1.15 = 3.1582 (hand-computed)
        (9.0, 1.7771),  # Tp/√Hs = 4.5 → γ = e^0.575 = 1.7771 (hand-computed)
        (10.0, 1.0),  # Tp/√Hs = 5.0 (boundary) → γ = 1
        (14.0, 1.0),  # Tp/√Hs = 7.0 ≥ 5 → γ = 1
    ],
)
def test_gamma_rule_follows_dnv_three_branches(tp: float, expected: float) -> None:
    # DNV-RP-C205 §3.5.5.5 with Hs = 4 m (√Hs = 2).
    assert jonswap_gamma_dnv(4.0, tp) == pytest.approx(expected, rel=1e-4)
    assert Jonswap(4.0, tp).gamma == pytest.approx(expected, rel=1e-4)


def test_gamma_rule_is_continuous_at_its_branch_points() -> None:
    # DNV-RP-C205 §3.5.5.5: exp(5.75 − 1.15·3.6) = 5.003 and exp(5.75 − 1.15·5) = 1 (hand).
    assert jonswap_gamma_dnv(1.0, 3.6 + 1e-9) == pytest.approx(5.0, rel=1e-3)
    assert jonswap_gamma_dnv(1.0, 5.0 - 1e-9) == pytest.approx(1.0, rel=1e-6)


def test_out_of_range_inputs_are_refused_with_the_allowed_range() -> None:
    with pytest.raises(ValueError, match=r"1 to 7"):
        Jonswap(2.0, 8.0, 0.5)
    with pytest.raises(ValueError, match="hs"):
        PiersonMoskowitz(-1.0, 8.0)
    with pytest.raises(ValueError, match="tp"):
        jonswap(1.0, 2.0, float("nan"), 3.3)


# --- band --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "sea", [PiersonMoskowitz(2.0, 8.0), Jonswap(4.0, 10.0, 3.3), Jonswap(4.0, 10.0, 5.0), Ittc(1.0, 5.0)]
)
def test_automatic_band_leaves_less_than_a_thousandth_of_m0_in_the_tails(sea) -> None:
    # Requirement (design): truncated tails < 0.1 % of m0, with m0 = Hs²/16 (DNV-RP-C205 §3.5.1);
    # tails integrated independently with scipy.integrate.quad.
    lo, hi = frequency_band(sea)
    low, _ = integrate.quad(lambda w: float(sea(w)), 0.0, lo, limit=200)
    high, _ = integrate.quad(lambda w: float(sea(w)), hi, np.inf, limit=200)
    m0 = sea.hs**2 / 16.0
    assert 0.0 < lo < sea.peak_frequency < hi
    assert (low + high) / m0 < 1e-3
    assert (low + high) / m0 > 5e-4  # the band is not wastefully wide either


# --- dispersion and encounter ------------------------------------------------------------------


def test_deep_water_wavelength_of_a_ten_second_wave() -> None:
    # DNV-RP-C205 §3.2.2 deep water: λ = g T²/(2π) = 1.5613 T² → 156.08 m for T = 10 s (hand).
    assert wavelength(10.0) == pytest.approx(156.08, rel=1e-4)
    assert wave_number(2 * math.pi / 10.0) == pytest.approx(2 * math.pi / 156.08, rel=1e-4)


@pytest.mark.parametrize(
    "heading_deg, expected",
    [
        (0.0, 0.31767),  # following: 0.62832 − 0.31065
        (90.0, 0.62832),  # beam: ω_e = ω
        (135.0, 0.84798),  # bow seas: 0.62832 + 0.31065 · 0.70711
        (180.0, 0.93897),  # head: 0.62832 + 0.31065
    ],
)
def test_encounter_frequency_for_ten_second_waves_at_fifteen_knots(heading_deg: float, expected: float) -> None:
    # Fossen (2021) Handbook of Marine Craft Hydrodynamics, ch. 10, and Lloyd (1989) Seakeeping:
    # ω_e = ω − ω² U cos β / g with β = 180° head seas in both, the same as ours.
    # Hand-computed: ω = 2π/10 = 0.62832 rad/s, U = 15 kn = 7.7167 m/s, ω²U/g = 0.31065 rad/s.
    w = 2.0 * math.pi / 10.0
    assert encounter_frequency(w, 15.0 * KNOT, heading_deg * DEG) == pytest.approx(expected, rel=1e-4)


@given(
    omega=st.floats(0.05, 5.0),
    speed=st.floats(0.0, 20.0),
    heading=st.floats(0.0, 2 * math.pi),
)
def test_encounter_frequency_of_opposite_headings_averages_to_the_wave_frequency(
    omega: float, speed: float, heading: float
) -> None:
    # From the closed form (Fossen 2021, ch. 10): cos(π − β) = −cos β, so ω_e(β) + ω_e(π − β) = 2ω,
    # and ω_e(β) = ω_e(−β) (waves from port and starboard are met at the same rate).
    a = encounter_frequency(omega, speed, heading)
    b = encounter_frequency(omega, speed, math.pi - heading)
    assert a + b == pytest.approx(2 * omega, rel=1e-12, abs=1e-12)
    assert encounter_frequency(omega, speed, -heading) == pytest.approx(a, rel=1e-12, abs=1e-12)
