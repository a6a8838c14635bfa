"""Physical constants and unit conversions used across finloop (SI inside).

Sources
-------
- Standard gravity g_n = 9.80665 m/s² (CGPM 1901; ISO 80000-3).
- International nautical mile = 1852 m (International Hydrographic Conference 1929), so
  1 knot = 1852/3600 m/s.
"""

from __future__ import annotations

import math

G = 9.80665
"""Standard gravity, m/s²."""

KNOT = 1852.0 / 3600.0
"""One knot in m/s."""

DEG = math.pi / 180.0
"""One degree in radians."""

TONNE = 1000.0
"""One metric tonne in kg."""


def kn_to_ms(speed_kn: float) -> float:
    """Convert knots to m/s."""
    return speed_kn * KNOT


def ms_to_kn(speed_ms: float) -> float:
    """Convert m/s to knots."""
    return speed_ms / KNOT
