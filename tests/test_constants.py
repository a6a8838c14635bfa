"""Constants and unit conversions against their named definitions."""

from __future__ import annotations

import math

from plant.constants import DEG, G, KNOT, TONNE, kn_to_ms, ms_to_kn


def test_knot_is_one_international_nautical_mile_per_hour():
    # International nautical mile = 1852 m exactly (International Hydrographic Conference 1929;
    # BIPM SI Brochure, 9th ed. 2019, Table 8): 1 kn = 1852/3600 m/s = 0.514444... m/s.
    assert KNOT == 1852.0 / 3600.0
    assert abs(KNOT - 0.5144444444) < 1e-10
    assert kn_to_ms(20.0) == 20.0 * 1852.0 / 3600.0
    assert abs(ms_to_kn(kn_to_ms(13.7)) - 13.7) < 1e-12


def test_standard_gravity_degree_and_tonne():
    # Standard acceleration of gravity g_n = 9.80665 m/s² (3rd CGPM 1901; ISO 80000-3).
    assert G == 9.80665
    # 1° = π/180 rad (ISO 80000-3); 1 t = 1000 kg (BIPM SI Brochure, Table 8).
    assert DEG == math.pi / 180.0
    assert TONNE == 1000.0
