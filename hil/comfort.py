"""Comfort and operability from a roll record: deck lateral acceleration, lateral force estimator,
motion-induced interruptions (MII) and the NORDFORSK (1987) RMS criteria.

Pure numpy functions on whole records; SI in, units named in every output key.

Kinematics (roll only; the plant has no sway, heave or yaw)
------------------------------------------------------------
Body axes x forward, y starboard, z down; roll φ > 0 = starboard side down; p = φ̇, ṗ = φ̈. A
deck point sits at height ``h`` above the roll axis and ``d`` to starboard of it, i.e. at
r = (0, d, −h) in body axes. For a rotation about the fixed x axis (Fossen, Handbook of Marine
Craft Hydrodynamics and Motion Control, 2nd ed. 2021, ch. 2: a_P = ω̇ × r + ω × (ω × r) with
ω = (p, 0, 0)) the point's acceleration in body axes is

    a_y = ṗ h − p² d,        a_z = ṗ d + p² h.

Gravity in body axes (Fossen 2021, ch. 2, roll only): g_b = (0, g sin φ, g cos φ). An
accelerometer fixed to the deck measures the specific force f = a − g_b:

    f_y = ṗ h − p² d − g sin φ,        f_z = ṗ d + p² h − g cos φ.

A person or object on the deck is pushed by −f per unit mass: toward starboard by
g sin φ − ṗ h + p² d and into the deck by g cos φ − ṗ d − p² h. At rest on an even keel f_z = −g
(the accelerometer's "1 g up"). The gravity term g sin φ is what people feel most — it is the
lateral part of the lateral force estimator (Graham, "The lateral force estimator in a seaway",
Naval Engineers Journal 102(3), 1990; Lloyd, Seakeeping: Ship Behaviour in Rough Weather, 1989,
chapter on motion-induced interruptions). The p² terms are second order and optional.

Lateral force estimator and MII (Graham 1990)
---------------------------------------------
LFE = f_y / f_z = (felt lateral) / (felt vertical), dimensionless, positive = pushed toward
starboard. A rigid object (or a standing person modelled as one) with half-width ``l`` and
centre of gravity at height ``h_o`` above the deck tips when |LFE| > l/h_o; it slides when
|LFE| > μ (friction coefficient). The interruption threshold is the lower of the two. A standing
person: l/h = 1/4 laterally — the tipping coefficient commonly quoted from Graham (1990) (from
memory: the number could not be checked against the paper here).

Counting: an MII is an upward crossing of the threshold by |LFE|, i.e. the record enters
|LFE| > x from below on either side. An episode ends when |LFE| falls back below
x·(1 − ``hysteresis``); the default hysteresis 0 makes the count the classical level-crossing
count used by Rice's formula. Per minute = count / record length in minutes.

Spectral (Rice) estimate: for a stationary Gaussian record with mean μ, variance m0 and rate
variance m2 (= ∫ω² S(ω) dω), the mean rate of up-crossings of level a is
(1/2π) √(m2/m0) exp(−(a − μ)²/(2 m0)) (Rice, "Mathematical analysis of random noise", Bell Syst.
Tech. J. 23–24, 1944/45; Bendat & Piersol, Random Data, 4th ed. 2010, ch. 5). Exceeding +x and
falling below −x are both interruptions, so the rate is the sum of both terms (twice the one-sided
rate when μ = 0).

NORDFORSK (1987) criteria
-------------------------
RMS limits of roll and lateral (and vertical) acceleration by type of work and by ship type, as
tabulated in NORDFORSK (1987), "Assessment of ship performance in a seaway", and reproduced in
Faltinsen, Sea Loads on Ships and Offshore Structures, 1990, ch. 1 (tables of operability
criteria). The values below are **from memory** of those tables; they were not found in the
sources searchable here. For the ship-type rows the lateral limit applies at the bridge.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from plant.constants import G

__all__ = [
    "PERSON_TIPPING_RATIO",
    "NORDFORSK_CRITERIA",
    "NORDFORSK_NAMES",
    "NordforskLimit",
    "ComfortSpec",
    "deck_specific_force",
    "lateral_acceleration",
    "lateral_force_estimator",
    "interruption_threshold",
    "count_exceedances",
    "mii_rate_time_domain",
    "spectral_moments",
    "rice_exceedance_rate",
    "mii_rate_spectral",
    "nordforsk_check",
    "comfort_metrics",
]

PERSON_TIPPING_RATIO = 0.25
"""l/h of a standing person, lateral tipping (Graham 1990; from memory)."""


@dataclass(frozen=True)
class NordforskLimit:
    """RMS limits of one NORDFORSK (1987) criterion (from memory; see module docstring)."""

    label: str
    roll_rms_deg: float
    lat_acc_rms_g: float
    vert_acc_rms_g: float  # at the bridge for ship types; NaN where the table gives a length rule
    group: str  # "work" or "ship"


# NORDFORSK (1987), via Faltinsen (1990) ch. 1 — every value from memory.
NORDFORSK_CRITERIA: dict[str, NordforskLimit] = {
    # by type of work: RMS vertical acceleration, RMS lateral acceleration, RMS roll
    "light_manual_work": NordforskLimit("Light manual work", 6.0, 0.10, 0.20, "work"),
    "heavy_manual_work": NordforskLimit("Heavy manual work", 4.0, 0.07, 0.15, "work"),
    "intellectual_work": NordforskLimit("Intellectual work", 3.0, 0.05, 0.10, "work"),
    "transit_passengers": NordforskLimit("Transit passengers", 2.5, 0.04, 0.05, "work"),
    "cruise_liner": NordforskLimit("Cruise liner", 2.0, 0.03, 0.02, "work"),
    # by ship type (general operability limits): roll, lateral acc. at bridge, vertical at bridge
    "merchant_ship": NordforskLimit("Merchant ships", 6.0, 0.12, 0.15, "ship"),
    "naval_vessel": NordforskLimit("Naval vessels", 4.0, 0.10, 0.20, "ship"),
    "fast_small_craft": NordforskLimit("Fast small craft", 4.0, 0.10, 0.275, "ship"),
}
NORDFORSK_NAMES: tuple[str, ...] = tuple(NORDFORSK_CRITERIA)
"""Stable snake_case names accepted by :func:`nordforsk_check` (config key ``criterion``)."""


# ------------------------------------------------------------------------------------------------
# kinematics
def deck_specific_force(
    roll_rad,
    roll_accel_rad_s2,
    height_m: float,
    offset_m: float = 0.0,
    roll_rate_rad_s=None,
    g: float = G,
) -> tuple[np.ndarray, np.ndarray]:
    """Specific force (f_y, f_z) an accelerometer fixed to the deck measures, m/s².

    Parameters
    ----------
    roll_rad, roll_accel_rad_s2: φ (rad, starboard down > 0) and φ̈ (rad/s²), arrays.
    height_m: height of the point above the roll axis (m, up > 0).
    offset_m: transverse offset of the point from the roll axis (m, starboard > 0).
    roll_rate_rad_s: p (rad/s); when given, the centripetal terms −p²d and +p²h are included.
    g: gravity (m/s²).

    Returns
    -------
    (f_y, f_z) in deck axes (y starboard, z down): f_y = φ̈h − p²d − g sin φ,
    f_z = φ̈d + p²h − g cos φ (≈ −g at rest).
    """
    phi = np.asarray(roll_rad, dtype=float)
    acc = np.asarray(roll_accel_rad_s2, dtype=float)
    fy = acc * height_m - g * np.sin(phi)
    fz = acc * offset_m - g * np.cos(phi)
    if roll_rate_rad_s is not None:
        p2 = np.asarray(roll_rate_rad_s, dtype=float) ** 2
        fy = fy - p2 * offset_m
        fz = fz + p2 * height_m
    return fy, fz


def lateral_acceleration(roll_rad, roll_accel_rad_s2, height_m: float, offset_m: float = 0.0,
                         roll_rate_rad_s=None, g: float = G) -> np.ndarray:
    """Lateral specific force along the deck's y axis (m/s²), the deck accelerometer reading f_y.

    Includes the gravity component −g sin φ (what a person feels as a sideways push of
    +g sin φ toward the low side). Sign: accelerometer convention (f = a − g); the felt push
    toward starboard is −f_y. RMS values do not depend on the sign.
    """
    return deck_specific_force(roll_rad, roll_accel_rad_s2, height_m, offset_m, roll_rate_rad_s, g)[0]


def lateral_force_estimator(roll_rad, roll_accel_rad_s2, height_m: float, offset_m: float = 0.0,
                            roll_rate_rad_s=None, g: float = G) -> np.ndarray:
    """Graham's (1990) lateral force estimator LFE = f_y / f_z (dimensionless).

    Positive = a loose object is pushed toward starboard. For small motions
    LFE ≈ φ − φ̈ h / g.
    """
    fy, fz = deck_specific_force(roll_rad, roll_accel_rad_s2, height_m, offset_m, roll_rate_rad_s, g)
    return fy / fz


def interruption_threshold(half_width_m: float, cg_height_m: float, friction: float | None = None) -> float:
    """|LFE| above which an object is interrupted: min(l/h (tipping), μ (sliding)).

    Raises ValueError for non-positive geometry or a negative friction coefficient.
    """
    if not (half_width_m > 0.0 and cg_height_m > 0.0 and math.isfinite(half_width_m) and math.isfinite(cg_height_m)):
        raise ValueError(f"half_width_m and cg_height_m must be finite and > 0, got {half_width_m!r}, {cg_height_m!r}")
    x = half_width_m / cg_height_m
    if friction is not None:
        if not (friction >= 0.0 and math.isfinite(friction)):
            raise ValueError(f"friction must be finite and >= 0, got {friction!r}")
        x = min(x, friction)
    return x


# ------------------------------------------------------------------------------------------------
# counting
def count_exceedances(signal, threshold: float, hysteresis: float = 0.0) -> int:
    """Number of separate episodes in which |signal| rises above ``threshold``.

    An episode starts when |signal| goes from ≤ threshold to > threshold (either side) and ends
    when |signal| drops below threshold·(1 − hysteresis); only then may the next one start. A
    record that starts above the threshold does not count that first episode (it began before
    the record). Non-finite samples end any episode and are skipped.
    """
    if not (threshold > 0.0):
        raise ValueError(f"threshold must be > 0, got {threshold!r}")
    if not (0.0 <= hysteresis < 1.0):
        raise ValueError(f"hysteresis must be in [0, 1), got {hysteresis!r}")
    a = np.abs(np.asarray(signal, dtype=float))
    a = np.where(np.isfinite(a), a, 0.0)
    if hysteresis == 0.0:
        above = a > threshold
        return int(np.count_nonzero(above[1:] & ~above[:-1]))
    rearm = threshold * (1.0 - hysteresis)
    count = 0
    armed = bool(a[0] <= threshold) if a.size else True
    for v in a.tolist():  # plain-float state machine: ~0.1 s per million samples
        if armed and v > threshold:
            count += 1
            armed = False
        elif not armed and v < rearm:
            armed = True
    return count


def mii_rate_time_domain(lfe, dt_s: float, threshold: float, hysteresis: float = 0.0) -> float:
    """Interruptions per minute counted in the time domain (see :func:`count_exceedances`)."""
    lfe = np.asarray(lfe, dtype=float)
    minutes = lfe.size * dt_s / 60.0
    if minutes <= 0.0:
        raise ValueError("empty record")
    return count_exceedances(lfe, threshold, hysteresis) / minutes


def spectral_moments(signal, dt_s: float) -> tuple[float, float, float]:
    """(mean, m0, m2) of a sampled record: m0 = variance, m2 = variance of the rate (σ²_ẋ).

    m2 = ∫ω² S(ω) dω equals the variance of the time derivative (Bendat & Piersol, Random Data,
    ch. 5); the derivative is taken by central differences (second order in dt).
    """
    x = np.asarray(signal, dtype=float)
    if x.size < 3:
        raise ValueError("need at least 3 samples")
    mean = float(np.mean(x))
    m0 = float(np.var(x))
    m2 = float(np.var(np.gradient(x, dt_s)))
    return mean, m0, m2


def rice_exceedance_rate(threshold: float, m0: float, m2: float, mean: float = 0.0) -> float:
    """Mean rate (per second) at which a Gaussian record leaves the band |x| ≤ threshold.

    ν = (1/2π)√(m2/m0) [exp(−(x−μ)²/2m0) + exp(−(x+μ)²/2m0)] (Rice 1944/45).
    """
    if m0 <= 0.0:
        return 0.0
    nu0 = math.sqrt(m2 / m0) / (2.0 * math.pi)
    return nu0 * (math.exp(-((threshold - mean) ** 2) / (2.0 * m0)) + math.exp(-((threshold + mean) ** 2) / (2.0 * m0)))


def mii_rate_spectral(lfe, dt_s: float, threshold: float) -> float:
    """Interruptions per minute from the record's moments (Rice's formula, both sides)."""
    mean, m0, m2 = spectral_moments(lfe, dt_s)
    return 60.0 * rice_exceedance_rate(threshold, m0, m2, mean)


# ------------------------------------------------------------------------------------------------
# NORDFORSK
def nordforsk_check(roll_rms_deg: float, lat_acc_rms_g: float, criterion_name: str,
                    vert_acc_rms_g: float | None = None) -> dict:
    """Compare RMS roll and lateral (optionally vertical) acceleration with a NORDFORSK criterion.

    Returns a dict with the limits, the margins (limit − value; > 0 = inside), per-item pass
    flags and the overall ``ok``. Unknown names raise ValueError listing the allowed names.
    """
    try:
        lim = NORDFORSK_CRITERIA[criterion_name]
    except KeyError:
        raise ValueError(f"unknown NORDFORSK criterion {criterion_name!r} (allowed: {', '.join(NORDFORSK_NAMES)})") from None
    out = {
        "criterion": criterion_name,
        "label": lim.label,
        "roll_rms_deg": float(roll_rms_deg),
        "roll_limit_deg": lim.roll_rms_deg,
        "roll_margin_deg": lim.roll_rms_deg - float(roll_rms_deg),
        "roll_ok": bool(roll_rms_deg <= lim.roll_rms_deg),
        "lat_acc_rms_g": float(lat_acc_rms_g),
        "lat_acc_limit_g": lim.lat_acc_rms_g,
        "lat_acc_margin_g": lim.lat_acc_rms_g - float(lat_acc_rms_g),
        "lat_acc_ok": bool(lat_acc_rms_g <= lim.lat_acc_rms_g),
        "source": "NORDFORSK (1987), as tabulated in Faltinsen (1990) ch. 1 (values from memory)",
    }
    ok = out["roll_ok"] and out["lat_acc_ok"]
    if vert_acc_rms_g is not None:
        out.update(
            vert_acc_rms_g=float(vert_acc_rms_g),
            vert_acc_limit_g=lim.vert_acc_rms_g,
            vert_acc_margin_g=lim.vert_acc_rms_g - float(vert_acc_rms_g),
            vert_acc_ok=bool(vert_acc_rms_g <= lim.vert_acc_rms_g),
        )
        ok = ok and out["vert_acc_ok"]
    out["ok"] = bool(ok)
    return out


# ------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ComfortSpec:
    """Where comfort is judged and against what (SI).

    deck_point_height_m: height of the judged deck point above the roll axis (m).
    deck_point_offset_m: transverse offset, starboard > 0 (m).
    criterion: a name from :data:`NORDFORSK_NAMES`.
    person_tipping_ratio: l/h of a standing person (Graham 1990: 1/4, from memory).
    object_half_width_m, object_cg_height_m, object_friction: a second object (e.g. a trolley).
    hysteresis: episode re-arm fraction for MII counting (0 = plain level crossings).
    """

    deck_point_height_m: float = 10.0
    deck_point_offset_m: float = 0.0
    criterion: str = "transit_passengers"
    person_tipping_ratio: float = PERSON_TIPPING_RATIO
    object_half_width_m: float = 0.25
    object_cg_height_m: float = 0.8
    object_friction: float = 0.5
    hysteresis: float = 0.0

    def __post_init__(self) -> None:
        if self.criterion not in NORDFORSK_CRITERIA:
            raise ValueError(f"unknown NORDFORSK criterion {self.criterion!r} (allowed: {', '.join(NORDFORSK_NAMES)})")
        for name in ("deck_point_height_m", "deck_point_offset_m"):
            if not math.isfinite(getattr(self, name)):
                raise ValueError(f"{name} must be finite")
        if not (self.person_tipping_ratio > 0.0):
            raise ValueError("person_tipping_ratio must be > 0")
        interruption_threshold(self.object_half_width_m, self.object_cg_height_m, self.object_friction)


def comfort_metrics(records: dict[str, np.ndarray], spec: ComfortSpec = ComfortSpec(), warmup_s: float = 0.0) -> dict:
    """Comfort figures of a run after ``warmup_s`` (trade units: deg, g, per minute).

    Uses ``t_s, roll_rad, roll_rate_rad_s, roll_accel_rad_s2`` of :meth:`plant.simulation.Plant.records`.
    Rows with non-finite roll state (a run stopped early) are dropped.
    """
    t = np.asarray(records["t_s"], dtype=float)
    phi = np.asarray(records["roll_rad"], dtype=float)
    p = np.asarray(records["roll_rate_rad_s"], dtype=float)
    acc = np.asarray(records["roll_accel_rad_s2"], dtype=float)
    finite = np.isfinite(phi) & np.isfinite(p) & np.isfinite(acc)
    sel = (t >= warmup_s) & finite
    if np.count_nonzero(sel) < 3:
        sel = finite
    if np.count_nonzero(sel) < 3:
        raise ValueError("not enough finite samples for comfort metrics")
    t, phi, p, acc = t[sel], phi[sel], p[sel], acc[sel]
    dt = float(np.median(np.diff(t)))
    h, d = spec.deck_point_height_m, spec.deck_point_offset_m
    fy, fz = deck_specific_force(phi, acc, h, d, p)
    lfe = fy / fz
    vert_dyn = fz + G  # vertical specific force minus its 1 g at rest (what a vertical accelerometer shows after removing g)
    x_person = spec.person_tipping_ratio
    x_object = interruption_threshold(spec.object_half_width_m, spec.object_cg_height_m, spec.object_friction)
    lat_rms_g = float(np.sqrt(np.mean(fy * fy)) / G)
    vert_rms_g = float(np.sqrt(np.mean(vert_dyn * vert_dyn)) / G)
    roll_rms_deg = float(np.degrees(np.sqrt(np.mean(phi * phi))))
    check = nordforsk_check(roll_rms_deg, lat_rms_g, spec.criterion)
    return {
        "lateral_accel_rms_g": lat_rms_g,
        "lateral_accel_max_g": float(np.max(np.abs(fy)) / G),
        "vertical_accel_rms_g": vert_rms_g,
        "lfe_rms": float(np.sqrt(np.mean(lfe * lfe))),
        "mii_threshold_person": x_person,
        "mii_threshold_object": x_object,
        "mii_per_min": mii_rate_time_domain(lfe, dt, x_person, spec.hysteresis),
        "mii_object_per_min": mii_rate_time_domain(lfe, dt, x_object, spec.hysteresis),
        "mii_spectral_per_min": mii_rate_spectral(lfe, dt, x_person),
        "mii_object_spectral_per_min": mii_rate_spectral(lfe, dt, x_object),
        "comfort_roll_rms_deg": roll_rms_deg,
        "nordforsk_criterion": spec.criterion,
        "nordforsk_roll_limit_deg": check["roll_limit_deg"],
        "nordforsk_lat_acc_limit_g": check["lat_acc_limit_g"],
        "nordforsk_roll_margin_deg": check["roll_margin_deg"],
        "nordforsk_lat_acc_margin_g": check["lat_acc_margin_g"],
        "nordforsk_roll_ok": check["roll_ok"],
        "nordforsk_lat_acc_ok": check["lat_acc_ok"],
        "comfort_deck_point_height_m": h,
        "comfort_deck_point_offset_m": d,
    }
