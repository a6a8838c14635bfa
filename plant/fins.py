"""Stabiliser fin hydrodynamics: lift slope, stall, lift, drag and roll moment.

Conventions (DEVELOPERS.md): fin angle α > 0 is leading edge up (lift up). The starboard fin sits
at y = +r_f, the port fin at y = −r_f. A fin at y moving with the ship's roll rate p sees a
roll-induced incidence atan(p·y/U), so α_eff = α + atan(p·y/U). An upward lift L at y gives a roll
moment M_x = −y·L.

Sources
-------
- Thin-aerofoil lift slope 2π per rad (Abbott & von Doenhoff, Theory of Wing Sections, 1959, ch. 4).
- Helmbold (1942) low-aspect-ratio lift slope: CLα = 2π A / (2 + √(A² + 4)).
- Whicker & Fehlner (1958), DTMB Report 933: CLα = 1.8π A / (1.8 + cosΛ √(A²/cos⁴Λ + 4)).
- Induced drag CD_i = CL² / (π e A) (Prandtl lifting-line; e.g. Anderson, Fundamentals of
  Aerodynamics, ch. 5).
- Lift L = ½ ρ U² A_fin CL.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


def thin_aerofoil_lift_slope() -> float:
    """2π per rad (two-dimensional thin aerofoil)."""
    return 2.0 * math.pi


def helmbold_lift_slope(aspect_ratio: float) -> float:
    """Helmbold (1942) lift slope for an unswept wing, per rad."""
    a = aspect_ratio
    return 2.0 * math.pi * a / (2.0 + math.sqrt(a * a + 4.0))


def whicker_fehlner_lift_slope(aspect_ratio: float, sweep_rad: float = 0.0) -> float:
    """Whicker & Fehlner (1958) low-aspect-ratio lift slope, per rad.

    CLα = 1.8π A / (1.8 + cosΛ √(A²/cos⁴Λ + 4)), Λ = quarter-chord sweep.
    """
    a = aspect_ratio
    c = math.cos(sweep_rad)
    return 1.8 * math.pi * a / (1.8 + c * math.sqrt(a * a / c**4 + 4.0))


@dataclass(frozen=True)
class FinParams:
    """One fin (SI units).

    Attributes
    ----------
    side: +1 starboard, −1 port.
    area_m2: planform area A_fin.
    aspect_ratio: effective aspect ratio used for induced drag (and lift slope if not given).
    sweep_rad: quarter-chord sweep Λ.
    lever_arm_m: r_f > 0, roll lever arm of the lift force about the roll axis.
    lift_slope_per_rad: CLα.
    stall_angle_rad: effective angle at which lift peaks.
    stall_drop_rad: angle beyond stall over which CL falls linearly to the post-stall value.
    post_stall_lift_fraction: CL after the drop as a fraction of the peak CL.
    cd0: profile drag coefficient.
    oswald_efficiency: span efficiency e for induced drag.
    water_density_kg_m3: ρ.
    """

    side: int
    area_m2: float
    aspect_ratio: float
    sweep_rad: float
    lever_arm_m: float
    lift_slope_per_rad: float
    stall_angle_rad: float
    stall_drop_rad: float
    post_stall_lift_fraction: float
    cd0: float
    oswald_efficiency: float
    water_density_kg_m3: float

    @property
    def y_m(self) -> float:
        """Signed transverse position of the lift force, m (stbd +)."""
        return self.side * self.lever_arm_m


def lift_coefficient(alpha_eff: float, fin: FinParams) -> float:
    """CL(α_eff): linear to the stall angle, then a linear drop to the post-stall plateau.

    Odd in α_eff. Continuous (no jump at stall), which keeps the fixed-step integration honest.
    """
    a = -alpha_eff if alpha_eff < 0.0 else alpha_eff
    s = fin.stall_angle_rad
    k = fin.lift_slope_per_rad
    if a <= s:
        cl = k * a
    else:
        peak = k * s
        low = peak * fin.post_stall_lift_fraction
        x = (a - s) / fin.stall_drop_rad
        cl = low if x >= 1.0 else peak + (low - peak) * x
    return -cl if alpha_eff < 0.0 else cl


def effective_angle(alpha: float, roll_rate: float, speed: float, y_m: float) -> float:
    """α_eff = α + atan2(p·y, U) (rad). At U = 0 the incidence is ±90° (no lift anyway)."""
    return alpha + math.atan2(roll_rate * y_m, speed)


@dataclass(frozen=True)
class FinForces:
    """Forces on one fin at one instant (SI)."""

    alpha_eff_rad: float
    cl: float
    lift_n: float
    drag_n: float
    roll_moment_n_m: float


def fin_forces(alpha: float, roll_rate: float, speed: float, fin: FinParams) -> FinForces:
    """Lift, drag and roll moment of one fin.

    Lift L = ½ρU²A CL(α_eff); drag D = ½ρU²A (cd0 + CL²/(π e A_R)) along the flow; roll moment
    M = −y L. The drag counts the fin's own incidence (the small rotation of the force by the
    roll-induced flow is neglected; it is second order).
    """
    y = fin.y_m
    a_eff = effective_angle(alpha, roll_rate, speed, y)
    cl = lift_coefficient(a_eff, fin)
    q = 0.5 * fin.water_density_kg_m3 * speed * speed * fin.area_m2
    lift = q * cl
    cd = fin.cd0 + cl * cl / (math.pi * fin.oswald_efficiency * fin.aspect_ratio)
    drag = q * cd
    return FinForces(a_eff, cl, lift, drag, -y * lift)


def lift_coefficient_array(alpha_eff, fin: FinParams):
    """Vectorised :func:`lift_coefficient` over a numpy array of effective angles (rad)."""
    import numpy as np

    a = np.abs(np.asarray(alpha_eff, dtype=float))
    s = fin.stall_angle_rad
    k = fin.lift_slope_per_rad
    peak = k * s
    low = peak * fin.post_stall_lift_fraction
    x = np.clip((a - s) / fin.stall_drop_rad, 0.0, 1.0)
    cl = np.where(a <= s, k * a, peak + (low - peak) * x)
    return np.sign(alpha_eff) * cl
