"""Speed scheduling of the gains: the (U_ref/U)² rule and the table, against hand-computed numbers.

Rule (common practice, DESIGN.md §4): fin lift ∝ U², so K(U) = K_ref·(U_ref/U)² keeps the fin
moment per unit of fed-back signal constant; U is clamped to [U_min, U_max].
Demo file: U_ref = 20 kn, U_min = 8 kn, U_max = 24 kn, K_rate = 5 s, K_roll = 0.5, K_accel = 0.5 s².
"""

from __future__ import annotations

import math

import pytest

from controller import ControllerParams, step

from .test_controller_support import D, KN, active_state, demo_params, good, run


@pytest.mark.parametrize(
    "speed_kn, factor",
    [
        (20.0, 1.0),  # (20/20)²
        (10.0, 4.0),  # (20/10)²
        (16.0, 1.5625),  # (20/16)² = 400/256
        (22.0, 400.0 / 484.0),  # (20/22)²
        (5.0, 6.25),  # clamped at 8 kn: (20/8)²
        (8.0, 6.25),
        (30.0, 400.0 / 576.0),  # clamped at 24 kn: (20/24)² = 0.69444
    ],
)
def test_speed_factor_follows_reference_speed_over_speed_squared_with_clamps(speed_kn, factor):
    p = demo_params()
    u = speed_kn * KN
    assert p.speed_factor(u) == pytest.approx(factor, rel=1e-12)
    # the step reports the same factor and the scheduled gains K·s(U) (hand: K_rate = 5 s)
    s = active_state(p, speed=max(u, 8 * KN))._replace(speed_f=u, speed_prev=u)
    _, out = step(p, s, good(speed=u))
    assert out.speed == u
    assert out.speed_factor == pytest.approx(factor, rel=1e-12)
    assert out.gain_rate == pytest.approx(5.0 * factor, rel=1e-12)
    assert out.gain_roll == pytest.approx(0.5 * factor, rel=1e-12)
    assert out.gain_accel == pytest.approx(0.5 * factor, rel=1e-12)


def test_fin_moment_per_unit_roll_rate_is_the_same_at_every_speed_inside_the_clamps():
    # K(U)·2 r_f ½ρU²A·CLα = K_ref·(U_ref/U)²·(...)U² = K_ref·2 r_f ½ρU_ref²A·CLα (closed form)
    p = demo_params()
    ref = p.k_rate * p.fin_moment_per_rad(p.u_ref)
    for kn in (8.0, 11.0, 14.5, 20.0, 24.0):
        u = kn * KN
        assert p.k_rate * p.speed_factor(u) * p.fin_moment_per_rad(u) == pytest.approx(ref, rel=1e-12)
    # hand: 5 s × 2·10·½·1026·(20·1852/3600)²·8·1.97 = 5 × 1.7117e7 = 8.559e7 N·m per rad/s
    assert ref == pytest.approx(8.559e7, rel=1e-3)


def test_gain_trim_scales_every_feedback_gain_and_is_clamped_to_its_range():
    p = demo_params()  # trim range 25..150 %
    s = active_state(p)
    cases = [(50.0, 0.5), (100.0, 1.0), (150.0, 1.5), (400.0, 1.5), (10.0, 0.25), (-50.0, 0.25)]
    for pct, frac in cases:
        s, out = step(p, s, good(gain_trim_pct=pct))
        assert out.gain_rate == pytest.approx(5.0 * frac, rel=1e-12)
        assert out.gain_roll == pytest.approx(0.5 * frac, rel=1e-12)
    # a non-finite trim is ignored: the last good trim (25 %) stays
    for bad in (math.nan, math.inf, -math.inf, 1e300):
        s, out = step(p, s, good(gain_trim_pct=bad))
        assert out.gain_rate == pytest.approx(5.0 * 0.25, rel=1e-12)


def _table_params():
    return demo_params(
        schedule_table=True,
        table_speeds=(6 * KN, 10 * KN, 20 * KN, 24 * KN),
        table_factors=(3.0, 2.5, 1.0, 0.8),
    )


@pytest.mark.parametrize(
    "speed_kn, factor",
    [
        (4.0, 3.0),  # below the table: first factor
        (6.0, 3.0),
        (8.0, 2.75),  # 3 + (2.5 − 3)·(2/4)
        (15.0, 1.75),  # 2.5 + (1 − 2.5)·(5/10)
        (20.0, 1.0),
        (23.0, 0.85),  # 1 + (0.8 − 1)·(3/4)
        (30.0, 0.8),  # above the table: last factor
    ],
)
def test_table_schedule_interpolates_linearly_and_holds_beyond_its_ends(speed_kn, factor):
    p = _table_params()
    u = speed_kn * KN
    assert p.speed_factor(u) == pytest.approx(factor, rel=1e-12)
    s = active_state(p, speed=20 * KN)._replace(speed_f=u, speed_prev=u)
    _, out = step(p, s, good(speed=u))
    assert out.speed_factor == pytest.approx(factor, rel=1e-12)
    assert out.gain_rate == pytest.approx(5.0 * factor, rel=1e-12)


def test_schedule_uses_the_filtered_speed_not_the_raw_sample():
    p = demo_params()
    s = active_state(p, speed=20 * KN)
    # one sample of 10 kn: far outside the plausible jump (2 kn) → not used at all
    s, out = step(p, s, good(speed=10 * KN))
    assert out.speed == 20 * KN and out.speed_factor == 1.0
    # back to 20 kn: again a 10 kn jump from the previous sample → a spike costs two samples
    s, out = step(p, s, good(speed=20 * KN))
    assert out.speed == 20 * KN
    # 19 kn is plausible: the filter moves by c = 1 − exp(−T/τ) of the way (T = 0.02 s, τ = 2 s)
    s, out = step(p, s, good(speed=19 * KN))
    c = 1.0 - math.exp(-0.02 / 2.0)
    u = 20 * KN - c * 1 * KN
    assert out.speed == pytest.approx(u, rel=1e-12)
    assert out.speed_factor == pytest.approx((20 * KN / u) ** 2, rel=1e-12)


def test_table_parameters_are_checked_when_built():
    with pytest.raises(ValueError, match="strictly increasing"):
        demo_params(schedule_table=True, table_speeds=(10 * KN, 8 * KN), table_factors=(1.0, 1.0))
    with pytest.raises(ValueError, match="equal length"):
        demo_params(schedule_table=True, table_speeds=(8 * KN, 10 * KN), table_factors=(1.0,))
    with pytest.raises(ValueError, match="table_factors"):
        demo_params(schedule_table=True, table_speeds=(8 * KN, 10 * KN), table_factors=(1.0, -1.0))
    assert isinstance(_table_params(), ControllerParams)


def test_single_roll_rate_term_at_half_the_reference_speed_is_four_times_larger():
    # hand: K_rate·(20/10)²·p = 5 s × 4 × 0.02 deg/s = 0.4 deg (below one slew step, 0.44 deg)
    p = demo_params(k_roll=0.0, k_accel=0.0)
    s = active_state(p, speed=10 * KN)
    _, outs = run(p, s, [good(rate=0.02 * D, speed=10 * KN)])
    assert outs[0].term_rate == pytest.approx(0.4 * D, rel=1e-12)
    assert outs[0].fin_stbd == pytest.approx(0.4 * D, rel=1e-12)
    assert outs[0].fin_port == pytest.approx(-0.4 * D, rel=1e-12)
