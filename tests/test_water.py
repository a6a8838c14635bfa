"""Tests of plant.water: seawater and fresh-water density and viscosity."""

from __future__ import annotations

import pytest

from plant.water import (
    STANDARD_SALINITY_G_KG,
    seawater_density,
    seawater_dynamic_viscosity,
    seawater_kinematic_viscosity,
)

# ITTC Recommended Procedure 7.5-02-01-03 (2011), Fresh Water and Seawater Properties, tables
# for standard seawater (S_A = 35.16504 g/kg) and fresh water. The procedure's PDF could not be
# opened while writing these tests: the values are from memory and agree with copies of the
# table quoted in public code.
ITTC_SEAWATER_DENSITY = {  # °C: kg/m³
    1.0: 1028.0941,
    4.0: 1027.8336,
    15.0: 1026.0210,
    20.0: 1024.8103,
    25.0: 1023.3873,
    30.0: 1021.7694,
}
ITTC_SEAWATER_NU_15C = 1.1892e-6  # m²/s, 15 °C
ITTC_FRESH_DENSITY_15C = 999.1026  # kg/m³, 15 °C
ITTC_FRESH_NU_15C = 1.1386e-6  # m²/s, 15 °C


def test_seawater_density_at_15c_matches_the_ittc_table() -> None:
    # ITTC 7.5-02-01-03 (2011) table, 15 °C: 1026.021 kg/m³. The table sits 0.045 kg/m³ above the
    # surface value (see the module notes), hence 0.01 % — 0.1 kg/m³ — rather than the last digit.
    assert seawater_density(15.0) == pytest.approx(ITTC_SEAWATER_DENSITY[15.0], rel=1e-4)


@pytest.mark.parametrize("temp_c", sorted(ITTC_SEAWATER_DENSITY))
def test_seawater_density_matches_the_ittc_table_across_temperature(temp_c: float) -> None:
    # ITTC 7.5-02-01-03 (2011) table rows, 0.01 %.
    assert seawater_density(temp_c) == pytest.approx(ITTC_SEAWATER_DENSITY[temp_c], rel=1e-4)


@pytest.mark.parametrize("temp_c", sorted(ITTC_SEAWATER_DENSITY))
def test_ittc_densities_correspond_to_a_sea_pressure_of_one_atmosphere(temp_c: float) -> None:
    # The procedure computes at "the standard pressure of 0.101325 MPa"; evaluated at that sea
    # (gauge) pressure EOS-80 gives the table to 0.005 kg/m³, a tenth of the surface offset.
    assert seawater_density(temp_c, sea_pressure_pa=101_325.0) == pytest.approx(
        ITTC_SEAWATER_DENSITY[temp_c], abs=0.005
    )


def test_seawater_kinematic_viscosity_at_15c_matches_the_ittc_table() -> None:
    # ITTC 7.5-02-01-03 (2011) table, 15 °C: 1.1892e-6 m²/s, to 0.1 %.
    assert seawater_kinematic_viscosity(15.0) == pytest.approx(ITTC_SEAWATER_NU_15C, rel=1e-3)


def test_fresh_water_at_15c_matches_the_ittc_table() -> None:
    # ITTC 7.5-02-01-03 (2011) fresh-water table, 15 °C: 999.1026 kg/m³ and 1.1386e-6 m²/s.
    assert seawater_density(15.0, 0.0) == pytest.approx(ITTC_FRESH_DENSITY_15C, rel=1e-5)
    assert seawater_kinematic_viscosity(15.0, 0.0) == pytest.approx(ITTC_FRESH_NU_15C, rel=1e-3)


def test_eos80_check_value_at_high_salinity_temperature_and_pressure() -> None:
    # UNESCO Technical Papers in Marine Science 44 (Fofonoff & Millard 1983), EOS-80 check value
    # (from memory): ρ(S = 40, t68 = 40 °C, p = 10 000 dbar) = 1059.82037 kg/m³. Converted to this
    # module's inputs: t90 = 40/1.00024 °C, S_A = 40 · 35.16504/35 g/kg, p = 1e8 Pa.
    rho = seawater_density(40.0 / 1.00024, 40.0 * 35.16504 / 35.0, 1.0e8)
    assert rho == pytest.approx(1059.82037, abs=1e-5)


def test_fresh_water_density_is_highest_near_four_degrees() -> None:
    # Textbook property of water (maximum density at 3.98 °C, e.g. IAPWS-95; from memory).
    rho = {t: seawater_density(t, 0.0) for t in (2.0, 3.0, 4.0, 5.0, 6.0)}
    assert max(rho, key=rho.get) == 4.0


def test_dynamic_viscosity_of_pure_water_at_20c() -> None:
    # IAPWS 2008 viscosity of water at 20 °C, 0.1 MPa: 1.0016e-3 Pa·s (from memory); the
    # Sharqawy et al. (2010) fit claims ±0.05 % of IAPWS 2008.
    assert seawater_dynamic_viscosity(20.0, 0.0) == pytest.approx(1.0016e-3, rel=1e-3)


def test_default_salinity_is_standard_seawater() -> None:
    # Millero et al. (2008): practical salinity 35 ↔ absolute salinity 35.16504 g/kg.
    assert STANDARD_SALINITY_G_KG == 35.16504
    assert seawater_density() == seawater_density(15.0, 35.16504)


def test_out_of_range_inputs_are_refused() -> None:
    with pytest.raises(ValueError, match=r"-2 to 40"):
        seawater_density(60.0)
    with pytest.raises(ValueError, match=r"0 to 42"):
        seawater_kinematic_viscosity(15.0, 50.0)
    with pytest.raises(ValueError, match="sea_pressure_pa"):
        seawater_density(15.0, 35.0, -1.0)
