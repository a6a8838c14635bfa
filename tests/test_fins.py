"""Fin hydrodynamics: lift slopes, lift and drag, stall, roll moment sign."""

from __future__ import annotations

import math

import numpy as np
import pytest

from plant.fins import (
    fin_forces,
    helmbold_lift_slope,
    lift_coefficient,
    lift_coefficient_array,
    thin_aerofoil_lift_slope,
    whicker_fehlner_lift_slope,
)

from .plant_fixtures import fin


@pytest.mark.parametrize(
    "ar, sweep_deg, expected",
    [
        # Whicker & Fehlner (1958): CLα = 1.8π A / (1.8 + cosΛ √(A²/cos⁴Λ + 4)); worked by hand:
        (1.0, 0.0, 1.8 * math.pi / (1.8 + math.sqrt(5.0))),  # = 1.401083
        (2.0, 0.0, 3.6 * math.pi / (1.8 + math.sqrt(8.0))),  # = 2.443537
        # Λ = 30°: cos⁴Λ = 0.5625, A²/cos⁴Λ = 4 → √8; cosΛ√8 = 2.449490
        (1.5, 30.0, 2.7 * math.pi / (1.8 + math.cos(math.radians(30)) * math.sqrt(8.0))),  # = 1.996075
    ],
)
def test_whicker_fehlner_lift_slope_worked_values(ar, sweep_deg, expected):
    assert whicker_fehlner_lift_slope(ar, math.radians(sweep_deg)) == pytest.approx(expected, rel=1e-12)


def test_whicker_fehlner_numbers_to_five_figures():
    # Decimals of the worked values above (5.654867/4.036068, 11.309734/4.628427, 8.482300/4.249490)
    assert whicker_fehlner_lift_slope(1.0) == pytest.approx(1.401083, abs=2e-6)
    assert whicker_fehlner_lift_slope(2.0) == pytest.approx(2.443537, abs=2e-6)
    assert whicker_fehlner_lift_slope(1.5, math.radians(30)) == pytest.approx(1.996075, abs=2e-6)


def test_helmbold_lift_slope_worked_values_and_limits():
    # Helmbold (1942): CLα = 2πA/(2 + √(A²+4)). A = 1: 6.283185/4.236068 = 1.483259;
    # A = 6: 37.699112/8.324555 = 4.528664.
    assert helmbold_lift_slope(1.0) == pytest.approx(1.483259, abs=2e-6)
    assert helmbold_lift_slope(6.0) == pytest.approx(4.528664, abs=2e-6)
    # Large aspect ratio tends to the thin-aerofoil 2π (Abbott & von Doenhoff 1959, ch. 4)
    assert helmbold_lift_slope(1e6) == pytest.approx(thin_aerofoil_lift_slope(), rel=1e-5)
    # Small aspect ratio tends to slender-wing theory πA/2 (Jones 1946)
    assert helmbold_lift_slope(1e-4) == pytest.approx(math.pi * 1e-4 / 2, rel=1e-4)


def test_fin_lift_and_induced_drag_worked_case():
    # L = ½ρU²A·CLα·α; CD = cd0 + CL²/(π e A_R) (Prandtl lifting line, Anderson ch. 5).
    # ρ = 1025, U = 10 m/s, A = 8 m², CLα = 2, α = 0.1 rad: L = 0.5·1025·100·8·0.2 = 82 000 N.
    # CL = 0.2, e = 0.9, A_R = 1.5: CDi = 0.04/(π·0.9·1.5) = 0.00943140; Di = 410 000·0.00943140 = 3866.87 N
    f = fin(+1, lift_slope_per_rad=2.0, cd0=0.0, water_density_kg_m3=1025.0)
    r = fin_forces(0.1, 0.0, 10.0, f)
    assert r.lift_n == pytest.approx(82_000.0, rel=1e-12)
    assert r.drag_n == pytest.approx(3866.87, abs=0.01)
    # profile drag adds ½ρU²A·cd0
    f2 = fin(+1, lift_slope_per_rad=2.0, cd0=0.01, water_density_kg_m3=1025.0)
    assert fin_forces(0.1, 0.0, 10.0, f2).drag_n == pytest.approx(3866.87 + 4100.0, abs=0.01)


def test_roll_induced_incidence_is_atan_of_rate_times_lever_over_speed():
    # α_eff = α + atan(p·y/U) (DESIGN §4 "roll-induced angle of attack"); y = +r_f starboard.
    f = fin(+1)
    r = fin_forces(0.0, 0.1, 10.0, f)
    assert r.alpha_eff_rad == pytest.approx(math.atan(0.1 * 10.0 / 10.0), rel=1e-12)
    port = fin(-1)
    assert fin_forces(0.0, 0.1, 10.0, port).alpha_eff_rad == pytest.approx(-math.atan(0.1), rel=1e-12)


def test_centred_fins_damp_roll_rate():
    # A descending fin sees more incidence, so centred fins resist roll rate (passive lift damping):
    # p > 0 must give a negative total fin moment.
    m = fin_forces(0.0, 0.05, 10.0, fin(+1)).roll_moment_n_m + fin_forces(0.0, 0.05, 10.0, fin(-1)).roll_moment_n_m
    assert m < 0.0


def test_stall_model_is_continuous_odd_and_drops_to_post_stall_fraction():
    f = fin(+1)
    s = f.stall_angle_rad
    k = f.lift_slope_per_rad
    assert lift_coefficient(s, f) == pytest.approx(k * s)
    assert lift_coefficient(s + 1e-9, f) == pytest.approx(k * s, rel=1e-6)  # no jump at stall
    assert lift_coefficient(s + f.stall_drop_rad, f) == pytest.approx(0.6 * k * s)
    assert lift_coefficient(math.radians(60), f) == pytest.approx(0.6 * k * s)
    for a in (0.1, 0.45, 0.5, 1.0):
        assert lift_coefficient(-a, f) == -lift_coefficient(a, f)


def test_vectorised_lift_coefficient_equals_scalar():
    f = fin(+1)
    a = np.linspace(-1.2, 1.2, 2001)
    np.testing.assert_allclose(lift_coefficient_array(a, f), [lift_coefficient(x, f) for x in a], rtol=0, atol=1e-14)
