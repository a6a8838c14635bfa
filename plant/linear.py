"""Linearised roll model of the vessel with its fin pair, about upright at a given speed.

The nonlinear plant (:mod:`plant.simulation`) linearised for small roll and small fin angles:

    I φ̈ + (B_e + B_f) φ̇ + C φ = M_wave − K_f δ_fin

- I = I44 + A44, C = Δ g GM (GZ slope when a table is given).
- B_e = B1 + (8/3π) ω0 φa B2, the equivalent linear damping at a roll amplitude φa
  (ITTC 7.5-02-07-04.5 §2).
- δ_fin is the antisymmetric fin angle (α_stbd = +δ, α_port = −δ). Each fin at y = ±r_f gives the
  roll moment −y·L with L = ½ρU²A CLα α_eff and α_eff = α + p·y/U (small-angle form of the
  roll-induced incidence atan(p·y/U)), so the pair gives −K_f (δ + …) with
  K_f = Σ r_f ½ρU²A CLα (N·m per rad of δ) and a passive damping B_f = Σ r_f² ½ρU A CLα
  (N·m·s/rad) that is present even with the fins centred.

States x = [φ, p] (rad, rad/s); inputs u = [δ_fin, M_wave] (rad, N·m); output φ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .fins import FinParams
from .vessel import VesselParams


@dataclass(frozen=True)
class LinearRoll:
    """Coefficients of the linear roll equation at one speed (SI)."""

    inertia_kg_m2: float
    damping_n_m_s: float  # hull B_e (without the fins' passive part)
    fin_damping_n_m_s: float  # B_f of the pair (roll-induced incidence)
    restoring_n_m_per_rad: float
    fin_moment_per_rad: float  # K_f: roll moment = −K_f·δ_fin
    speed_ms: float

    @property
    def total_damping_n_m_s(self) -> float:
        return self.damping_n_m_s + self.fin_damping_n_m_s

    @property
    def natural_frequency_rad_s(self) -> float:
        return math.sqrt(self.restoring_n_m_per_rad / self.inertia_kg_m2)

    @property
    def damping_ratio(self) -> float:
        """Passive damping ratio with the fins centred (hull + fins' roll-induced lift)."""
        return self.total_damping_n_m_s / (2.0 * math.sqrt(self.restoring_n_m_per_rad * self.inertia_kg_m2))

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Continuous (A, B, C, D): x = [φ, p], u = [δ_fin, M_wave], y = φ."""
        i = self.inertia_kg_m2
        a = np.array([[0.0, 1.0], [-self.restoring_n_m_per_rad / i, -self.total_damping_n_m_s / i]])
        b = np.array([[0.0, 0.0], [-self.fin_moment_per_rad / i, 1.0 / i]])
        c = np.array([[1.0, 0.0]])
        d = np.zeros((1, 2))
        return a, b, c, d

    def roll_response(self, omega_rad_s) -> np.ndarray:
        """Complex φ/M_wave (rad per N·m) with the fins centred, at frequencies ω (rad/s)."""
        s = 1j * np.asarray(omega_rad_s, dtype=float)
        return 1.0 / (self.inertia_kg_m2 * s * s + self.total_damping_n_m_s * s + self.restoring_n_m_per_rad)


def fin_pair_coefficients(fins: tuple[FinParams, ...], speed_ms: float) -> tuple[float, float]:
    """(K_f, B_f) of a set of fins at speed U: K_f = Σ r ½ρU²A CLα, B_f = Σ r² ½ρU A CLα."""
    k_f = 0.0
    b_f = 0.0
    for fin in fins:
        q_per_u2 = 0.5 * fin.water_density_kg_m3 * fin.area_m2 * fin.lift_slope_per_rad
        r = fin.lever_arm_m
        k_f += r * q_per_u2 * speed_ms * speed_ms
        b_f += r * r * q_per_u2 * speed_ms
    return k_f, b_f


def linear_roll(
    vessel: VesselParams,
    fins: tuple[FinParams, ...],
    speed_ms: float,
    roll_amplitude_rad: float = 0.0,
) -> LinearRoll:
    """The linear roll model at ``speed_ms``; quadratic damping linearised at ``roll_amplitude_rad``."""
    if not (speed_ms >= 0.0 and math.isfinite(speed_ms)):
        raise ValueError(f"speed_ms must be finite and >= 0, got {speed_ms!r}")
    if not (roll_amplitude_rad >= 0.0 and math.isfinite(roll_amplitude_rad)):
        raise ValueError(f"roll_amplitude_rad must be finite and >= 0, got {roll_amplitude_rad!r}")
    be = vessel.equivalent_damping_ratio(roll_amplitude_rad) * vessel.critical_damping_n_m_s
    k_f, b_f = fin_pair_coefficients(fins, speed_ms)
    return LinearRoll(
        inertia_kg_m2=vessel.inertia_kg_m2,
        damping_n_m_s=be,
        fin_damping_n_m_s=b_f,
        restoring_n_m_per_rad=vessel.restoring_n_m_per_rad,
        fin_moment_per_rad=k_f,
        speed_ms=speed_ms,
    )
