"""Comfort metrics (hil/comfort.py): deck specific force, LFE, MII counting vs Rice, NORDFORSK."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from hil.comfort import (
    NORDFORSK_CRITERIA,
    NORDFORSK_NAMES,
    PERSON_TIPPING_RATIO,
    ComfortSpec,
    comfort_metrics,
    count_exceedances,
    deck_specific_force,
    interruption_threshold,
    lateral_acceleration,
    lateral_force_estimator,
    mii_rate_spectral,
    mii_rate_time_domain,
    nordforsk_check,
    rice_exceedance_rate,
    spectral_moments,
)
from plant.constants import G

DEG = math.pi / 180.0


def test_static_heel_gives_the_gravity_component_and_lfe_tan_phi():
    # Gravity in body axes for roll φ: (0, g sin φ, g cos φ) (Fossen 2021, ch. 2); at rest the
    # accelerometer reads f = −g_b, and LFE = f_y/f_z = tan φ (a block on a slope: statics).
    phi = np.array([10.0 * DEG, -5.0 * DEG])
    fy, fz = deck_specific_force(phi, np.zeros(2), height_m=12.0, offset_m=4.0, roll_rate_rad_s=np.zeros(2))
    assert fy == pytest.approx(-G * np.sin(phi))
    assert fz == pytest.approx(-G * np.cos(phi))
    assert lateral_force_estimator(phi, np.zeros(2), 12.0) == pytest.approx(np.tan(phi))


def test_roll_acceleration_pushes_a_high_point_the_other_way():
    # Upright, φ̈ > 0 (rolling toward starboard-down): a point h above the axis accelerates to
    # starboard at φ̈h (a = ω̇ × r, Fossen 2021 ch. 2), so a person there is pushed to port:
    # LFE = −φ̈h/g. A point d to starboard moves down at φ̈d: f_z = φ̈d − g.
    fy, fz = deck_specific_force(0.0, 0.1, height_m=10.0, offset_m=5.0)
    assert fy == pytest.approx(1.0)
    assert fz == pytest.approx(0.5 - G)
    assert lateral_force_estimator(0.0, 0.1, 10.0) == pytest.approx(-1.0 / G)
    assert lateral_acceleration(0.0, 0.1, 10.0) == pytest.approx(1.0)


def test_specific_force_matches_a_finite_difference_of_the_rotating_point():
    # Independent: position R_x(φ(t))·r in NED (scipy Rotation), acceleration by central
    # differences, specific force a − (0, 0, g), rotated back into deck axes.
    a, w, c = 0.2, 0.6, 0.05
    r_body = np.array([0.0, 4.0, -11.0])  # 4 m to starboard, 11 m above the roll axis
    t0, h = 1.3, 1e-3

    def pos(t):
        return Rotation.from_euler("x", a * math.sin(w * t) + c).apply(r_body)

    acc = (pos(t0 + h) - 2 * pos(t0) + pos(t0 - h)) / h**2
    f_body = Rotation.from_euler("x", a * math.sin(w * t0) + c).inv().apply(acc - np.array([0.0, 0.0, G]))
    phi = a * math.sin(w * t0) + c
    p = a * w * math.cos(w * t0)
    pd = -a * w * w * math.sin(w * t0)
    fy, fz = deck_specific_force(phi, pd, height_m=11.0, offset_m=4.0, roll_rate_rad_s=p)
    assert fy == pytest.approx(f_body[1], abs=1e-5)
    assert fz == pytest.approx(f_body[2], abs=1e-5)


def test_interruption_threshold_is_the_lower_of_tipping_and_sliding():
    # Graham (1990): tipping at |LFE| > l/h, sliding at |LFE| > μ.
    assert interruption_threshold(0.25, 1.0) == pytest.approx(0.25)
    assert interruption_threshold(0.25, 1.0, friction=0.2) == pytest.approx(0.2)
    assert interruption_threshold(0.3, 0.5, friction=0.9) == pytest.approx(0.6)
    assert PERSON_TIPPING_RATIO == 0.25  # Graham 1990 standing person, lateral (from memory)
    with pytest.raises(ValueError, match="must be finite and > 0"):
        interruption_threshold(0.0, 1.0)


def test_exceedances_count_each_entry_into_either_side_once():
    x = [0.0, 0.3, 0.1, 0.3, -0.3, 0.0, -0.26, -0.2]
    assert count_exceedances(x, 0.25) == 3  # enters at 0.3, again at 0.3, and at −0.26
    # 0.3 → −0.3 between two samples: |x| never falls below the threshold, one episode
    assert count_exceedances([0.0, 0.3, -0.3, 0.0], 0.25) == 1
    # hysteresis 0.5: re-armed only below 0.125
    assert count_exceedances([0.0, 0.3, 0.2, 0.3, 0.1, 0.3], 0.25, hysteresis=0.5) == 2
    # a record that starts above the threshold does not count that first episode
    assert count_exceedances([0.4, 0.4, 0.0], 0.25) == 0
    assert mii_rate_time_domain(np.array([0.0, 0.3] * 60), 1.0, 0.25) == pytest.approx(60.0 / 2.0)


def test_spectral_moments_of_a_sine():
    # x = A sin ωt: m0 = A²/2, m2 = A²ω²/2 (the variance of ẋ = Aω cos ωt)
    # (75 whole periods of 8 s; central differences shrink ẋ by sin(ωΔt)/(ωΔt) ≈ 1 − 3e-4)
    w = 2 * math.pi / 8.0
    t = np.arange(12000) * 0.05
    x = 0.3 * np.sin(w * t)
    mean, m0, m2 = spectral_moments(x, 0.05)
    assert mean == pytest.approx(0.0, abs=1e-6)
    assert m0 == pytest.approx(0.045, rel=1e-3)
    assert m2 == pytest.approx(0.045 * w * w, rel=1e-3)


def test_rice_formula_hand_values():
    # Rice (1944/45): ν⁺(a) = (1/2π)√(m2/m0) exp(−a²/2m0); both sides doubles it for μ = 0.
    nu = rice_exceedance_rate(1.0, 1.0, 0.25, 0.0)
    assert nu == pytest.approx(2 * (1 / (2 * math.pi)) * 0.5 * math.exp(-0.5))
    # a mean shift μ: one side gets closer, the other farther
    assert rice_exceedance_rate(1.0, 1.0, 0.25, 0.5) == pytest.approx(
        (0.5 / (2 * math.pi)) * (math.exp(-0.125) + math.exp(-1.125)))


def narrow_band_gaussian(seed, duration_s, dt, w0=0.5, bw=0.06, n=400):
    """Random-phase sum of cosines with a Gaussian-shaped spectrum around w0 (rad/s); unit m0."""
    rng = np.random.default_rng(seed)
    om = np.linspace(w0 - 4 * bw, w0 + 4 * bw, n)
    dw = om[1] - om[0]
    om = om + rng.uniform(-0.5, 0.5, n) * dw  # jitter: no exact repeat period in the record
    s = np.exp(-0.5 * ((om - w0) / bw) ** 2)
    s /= np.sum(s * dw)
    amp = np.sqrt(2 * s * dw)
    ph = rng.uniform(0, 2 * np.pi, n)
    t = np.arange(0, duration_s, dt)
    x = np.zeros_like(t)
    for a, w, p in zip(amp, om, ph):
        x += a * np.cos(w * t + p)
    m2_exact = float(np.sum(amp**2 / 2 * om**2))
    m0_exact = float(np.sum(amp**2 / 2))
    return x, m0_exact, m2_exact


def test_time_domain_count_agrees_with_rice_on_a_narrow_band_gaussian_record():
    # Rice (1944/45); Bendat & Piersol, Random Data, ch. 5: mean up-crossing rate of a
    # stationary Gaussian process. Tolerance from the record itself: batch means over 16
    # blocks (standard error of a mean of block counts), 4 standard errors.
    dt = 0.25
    x, m0, m2 = narrow_band_gaussian(seed=7, duration_s=6 * 3600.0, dt=dt)
    thr = 1.5 * math.sqrt(m0)
    expected_per_min = 60.0 * rice_exceedance_rate(thr, m0, m2, 0.0)
    counted = mii_rate_time_domain(x, dt, thr)
    blocks = np.array_split(x, 16)
    per_block = np.array([mii_rate_time_domain(b, dt, thr) for b in blocks])
    se = per_block.std(ddof=1) / math.sqrt(per_block.size)
    assert abs(counted - expected_per_min) < 4 * se
    assert se < 0.15 * expected_per_min  # the test has power: a 4-SE band of < 60 % is informative
    # the spectral estimate from the record's own moments agrees with the exact one
    assert mii_rate_spectral(x, dt, thr) == pytest.approx(expected_per_min, rel=0.1)


def test_nordforsk_table_and_check():
    # NORDFORSK (1987) via Faltinsen (1990) ch. 1 — values from memory (see hil/comfort.py).
    assert NORDFORSK_NAMES == ("light_manual_work", "heavy_manual_work", "intellectual_work", "transit_passengers",
                               "cruise_liner", "merchant_ship", "naval_vessel", "fast_small_craft")
    lim = NORDFORSK_CRITERIA["transit_passengers"]
    assert (lim.roll_rms_deg, lim.lat_acc_rms_g) == (2.5, 0.04)
    ok = nordforsk_check(2.0, 0.03, "transit_passengers")
    assert ok["ok"] and ok["roll_ok"] and ok["lat_acc_ok"]
    assert ok["roll_margin_deg"] == pytest.approx(0.5) and ok["lat_acc_margin_g"] == pytest.approx(0.01)
    bad = nordforsk_check(2.2, 0.05, "cruise_liner", vert_acc_rms_g=0.01)
    assert bad["roll_ok"] is False and bad["lat_acc_ok"] is False and bad["vert_acc_ok"] is True
    assert bad["ok"] is False
    # the criteria tighten from heavy manual work to cruise liner
    order = ["light_manual_work", "heavy_manual_work", "intellectual_work", "transit_passengers", "cruise_liner"]
    rolls = [NORDFORSK_CRITERIA[n].roll_rms_deg for n in order]
    assert rolls == sorted(rolls, reverse=True)
    with pytest.raises(ValueError, match="allowed: light_manual_work"):
        nordforsk_check(1.0, 0.01, "passengers")


def test_comfort_metrics_of_a_steady_heel_and_of_a_roll_record():
    t = np.arange(0.0, 600.0, 0.02)
    n = t.size
    rec = {"t_s": t, "roll_rad": np.full(n, 5 * DEG), "roll_rate_rad_s": np.zeros(n), "roll_accel_rad_s2": np.zeros(n)}
    m = comfort_metrics(rec, ComfortSpec(criterion="light_manual_work"), warmup_s=60.0)
    assert m["lateral_accel_rms_g"] == pytest.approx(math.sin(5 * DEG))  # g sin φ / g
    assert m["mii_per_min"] == 0.0 and m["mii_object_per_min"] == 0.0
    assert m["nordforsk_roll_ok"] is True and m["nordforsk_lat_acc_ok"] is True
    # harmonic roll φ = A sin ωt at a point h above the axis: small-angle LFE ≈ φ(1 + ω²h/g)
    a, w, h = 8 * DEG, 2 * math.pi / 10.0, 10.0
    rec = {"t_s": t, "roll_rad": a * np.sin(w * t), "roll_rate_rad_s": a * w * np.cos(w * t),
           "roll_accel_rad_s2": -a * w * w * np.sin(w * t)}
    spec = ComfortSpec(deck_point_height_m=h, criterion="transit_passengers", person_tipping_ratio=0.15)
    m = comfort_metrics(rec, spec, warmup_s=0.0)
    amp = a * (1 + w * w * h / G)
    assert m["lateral_accel_rms_g"] == pytest.approx(amp / math.sqrt(2), rel=0.02)
    # amplitude ≈ 0.19 > 0.15: two interruptions per 10 s cycle (one each side) = 12 per minute
    assert m["mii_per_min"] == pytest.approx(12.0, rel=0.02)
    assert m["nordforsk_roll_ok"] is False  # 8/√2 = 5.7° RMS > 2.5°
    for key in ("mii_spectral_per_min", "mii_object_spectral_per_min", "nordforsk_criterion"):
        assert key in m
    with pytest.raises(ValueError, match="unknown NORDFORSK criterion"):
        ComfortSpec(criterion="nope")
