"""Vessel roll model: one degree of freedom, nonlinear damping and restoring.

.. math::

    (I_{44} + A_{44})\\,\\ddot\\phi + B_1\\dot\\phi + B_2\\dot\\phi|\\dot\\phi|
        + \\Delta g\\,GZ(\\phi) = M_{wave} + M_{fin} + M_{ext}

φ > 0 is starboard side down (x forward, y starboard, z down). Δ is the displacement *mass* (kg).

Restoring is ``GM·sin φ`` when only GM is given, or a GZ table (heel ≥ 0, mirrored for negative
heel) when one is given. Inertia comes from a dry radius of gyration plus an added-inertia fraction,
or from a given natural roll period. Damping comes from a fraction of critical damping or from
B1/B2 directly (bilge keels belong in these numbers).

Sources: IMO 2008 Intact Stability Code (MSC.267(85)) Part A §2.3 (roll period);
Fossen (2021) ch. 4 (roll equation); ITTC 7.5-02-07-04.5 (equivalent linear damping).
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass

from .constants import G


@dataclass(frozen=True)
class GZTable:
    """Righting lever curve, heel angles ≥ 0 (rad, strictly increasing, first = 0) and GZ (m).

    Mirrored for negative heel: GZ(−φ) = −GZ(φ).
    """

    heel_rad: tuple[float, ...]
    gz_m: tuple[float, ...]

    def __post_init__(self) -> None:
        if len(self.heel_rad) != len(self.gz_m) or len(self.heel_rad) < 2:
            raise ValueError("GZ table needs matching heel and GZ arrays of at least 2 points")
        if self.heel_rad[0] != 0.0 or self.gz_m[0] != 0.0:
            raise ValueError("GZ table must start at heel 0 with GZ 0")
        if any(b <= a for a, b in zip(self.heel_rad, self.heel_rad[1:])):
            raise ValueError("GZ table heel angles must be strictly increasing")

    @property
    def initial_slope_m(self) -> float:
        """dGZ/dφ at φ = 0 from the first segment (≈ GM), m/rad."""
        return self.gz_m[1] / self.heel_rad[1]

    def gz(self, phi: float) -> float:
        """GZ(φ) in m by linear interpolation; raises ``ValueError`` beyond the table."""
        a = -phi if phi < 0.0 else phi
        xs = self.heel_rad
        if a > xs[-1]:
            raise ValueError(f"heel {math.degrees(phi):.1f} deg is beyond the GZ table")
        i = bisect.bisect_right(xs, a) - 1
        if i >= len(xs) - 1:
            i = len(xs) - 2
        x0, x1 = xs[i], xs[i + 1]
        y0, y1 = self.gz_m[i], self.gz_m[i + 1]
        v = y0 + (y1 - y0) * (a - x0) / (x1 - x0)
        return -v if phi < 0.0 else v


def gz_function(table: GZTable):
    """A fast GZ(φ) for stepping loops: same values as :meth:`GZTable.gz`, no allocation.

    Remembers the last table segment (roll changes little between calls) and falls back to a
    bisection when φ has left it; raises ``ValueError`` beyond the table like the method.
    """
    xs = list(table.heel_rad)
    ys = list(table.gz_m)
    slopes = [(ys[i + 1] - ys[i]) / (xs[i + 1] - xs[i]) for i in range(len(xs) - 1)]
    last_x = xs[-1]
    n_seg = len(slopes)
    seg = [0]
    bisect_right = bisect.bisect_right

    def gz(phi: float) -> float:
        a = -phi if phi < 0.0 else phi
        i = seg[0]
        if not (xs[i] <= a <= xs[i + 1]):
            if not a <= last_x:
                raise ValueError(f"heel {math.degrees(phi):.1f} deg is beyond the GZ table")
            i = bisect_right(xs, a) - 1
            if i >= n_seg:
                i = n_seg - 1
            seg[0] = i
        v = ys[i] + slopes[i] * (a - xs[i])
        return -v if phi < 0.0 else v

    return gz


@dataclass(frozen=True)
class VesselParams:
    """Roll-relevant properties of a vessel (SI units).

    Attributes
    ----------
    name: display name.
    length_wl_m, beam_m, draught_m: main dimensions (m).
    displacement_kg: Δ, displacement mass (kg).
    gm_m: transverse metacentric height, fluid (m), > 0.
    inertia_kg_m2: total roll inertia I44 + A44 (kg·m²).
    b1_n_m_s: linear roll damping B1 (N·m·s/rad).
    b2_n_m_s2: quadratic roll damping B2 (N·m·s²/rad²).
    gz: optional GZ table; when ``None`` the restoring lever is GM·sin φ.
    """

    name: str
    length_wl_m: float
    beam_m: float
    draught_m: float
    displacement_kg: float
    gm_m: float
    inertia_kg_m2: float
    b1_n_m_s: float
    b2_n_m_s2: float
    gz: GZTable | None = None

    @property
    def restoring_n_m_per_rad(self) -> float:
        """Linear restoring coefficient C44 = Δ g GM (N·m/rad); uses the GZ slope if a table is given."""
        gm = self.gz.initial_slope_m if self.gz is not None else self.gm_m
        return self.displacement_kg * G * gm

    @property
    def natural_frequency_rad_s(self) -> float:
        """Undamped natural roll frequency ω0 = √(C44 / (I44 + A44)), rad/s."""
        return math.sqrt(self.restoring_n_m_per_rad / self.inertia_kg_m2)

    @property
    def natural_period_s(self) -> float:
        """Undamped natural roll period T0 = 2π/ω0, s."""
        return 2.0 * math.pi / self.natural_frequency_rad_s

    @property
    def critical_damping_n_m_s(self) -> float:
        """Critical roll damping 2√(C44 (I44 + A44)), N·m·s/rad."""
        return 2.0 * math.sqrt(self.restoring_n_m_per_rad * self.inertia_kg_m2)

    @property
    def linear_damping_ratio(self) -> float:
        """ζ = B1 / (2√(C44 I)), the linear part only."""
        return self.b1_n_m_s / self.critical_damping_n_m_s

    def equivalent_damping_ratio(self, roll_amplitude_rad: float) -> float:
        """Equivalent linear damping ratio at a roll amplitude φa.

        B_e = B1 + (8/(3π)) ω0 φa B2 (ITTC 7.5-02-07-04.5 §2; energy-equivalent linearisation of
        the quadratic term for harmonic roll at ω0).
        """
        be = self.b1_n_m_s + 8.0 / (3.0 * math.pi) * self.natural_frequency_rad_s * roll_amplitude_rad * self.b2_n_m_s2
        return be / self.critical_damping_n_m_s

    def restoring_moment(self, phi: float) -> float:
        """Δ g GZ(φ), N·m (positive for positive φ)."""
        if self.gz is not None:
            return self.displacement_kg * G * self.gz.gz(phi)
        return self.displacement_kg * G * self.gm_m * math.sin(phi)


def imo_roll_period_s(beam_m: float, draught_m: float, length_wl_m: float, gm_m: float) -> float:
    """Roll period by the IMO 2008 IS Code, Part A §2.3.

    T = 2 C B / √GM with C = 0.373 + 0.023 (B/d) − 0.043 (L_wl/100).
    """
    c = 0.373 + 0.023 * (beam_m / draught_m) - 0.043 * (length_wl_m / 100.0)
    return 2.0 * c * beam_m / math.sqrt(gm_m)


def inertia_from_period(displacement_kg: float, gm_m: float, period_s: float) -> float:
    """Total roll inertia from a natural period: I = Δ g GM T² / (4π²), kg·m²."""
    return displacement_kg * G * gm_m * period_s**2 / (4.0 * math.pi**2)


def damping_from_ratio(ratio: float, restoring_n_m: float, inertia_kg_m2: float) -> float:
    """Linear damping B1 = 2 ζ √(C I), N·m·s/rad."""
    return 2.0 * ratio * math.sqrt(restoring_n_m * inertia_kg_m2)


def log_decrement_to_damping_ratio(delta: float) -> float:
    """Damping ratio from the logarithmic decrement δ = ln(φ_n / φ_{n+1}) of successive peaks.

    ζ = δ / √(4π² + δ²) (exact for a linear oscillator; e.g. Thomson, Theory of Vibration, ch. 2).
    """
    return delta / math.sqrt(4.0 * math.pi**2 + delta**2)


def damping_ratio_to_log_decrement(zeta: float) -> float:
    """Inverse of :func:`log_decrement_to_damping_ratio`: δ = 2π ζ / √(1 − ζ²)."""
    return 2.0 * math.pi * zeta / math.sqrt(1.0 - zeta**2)
