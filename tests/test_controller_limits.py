"""Limits on the fin demand: stall (effective angle), load, mechanical angle, slew rate, heel trim
authority and anti-windup — each against its closed form or a hand-computed number.

Closed forms used (DEVELOPERS.md conventions; thin-wing lift L = ½ρU²A·CLα·α):
- effective angle of the fin at y: α_eff = α + atan(p·y/U); stbd at y = +r_f has α = +δ, port at
  y = −r_f has α = −δ, so |α_eff| ≤ a on both fins ⇔ −a − θ ≤ δ ≤ a − θ with θ = atan(p r_f/U);
- load limit: α_load = L_rated / (½ρU²A·CLα);
- slew: |δ_k − δ_{k−1}| ≤ rate·dt.
Demo fin: A = 8 m², CLα = 1.97 /rad, r_f = 10 m, L_rated = 350 kN, ρ = 1026 kg/m³, stall 24°,
margin 2° (a_stall = 22°), angle limit 25°, rate 22°/s, dt = 0.02 s (0.44° per step).
"""

from __future__ import annotations

import math

import pytest

from controller import Limiter

from .test_controller_support import D, KN, active_state, demo_params, good, run


def _settle(p, s, inp, n):
    s, outs = run(p, s, [inp] * n)
    return s, outs


def test_load_limit_caps_the_demand_at_the_rated_lift_angle_at_24_knots():
    # hand: U = 24·1852/3600 = 12.34667 m/s, ½ρU² = 78 201.8 Pa, ×A×CLα = 1 232 460 N/rad,
    # α_load = 350 000 / 1 232 460 = 0.283985 rad (16.27°) < a_stall = 22° → the load limit governs
    p = demo_params(k_roll=5.0)
    u = 24 * KN
    s = active_state(p, speed=u)
    s, outs = _settle(p, s, good(roll=30 * D, speed=u), 60)
    out = outs[-1]
    assert out.command > 1.0  # far beyond every limit
    assert out.target == pytest.approx(0.2839847503, rel=1e-9)
    assert out.target == pytest.approx(p.load_limit_angle(u), rel=1e-12)
    assert out.fin_stbd == out.target and out.fin_port == -out.target
    assert out.limiter & Limiter.LOAD and not out.limiter & Limiter.STALL
    # lift on the fin at that angle is the rated lift (closed form ½ρU²A·CLα·α)
    assert 0.5 * 1026 * u * u * 8.0 * 1.97 * out.fin_stbd == pytest.approx(350e3, rel=1e-9)


def test_usable_angle_shrinks_with_speed_squared_above_the_speed_where_load_meets_stall():
    p = demo_params()
    # α_load ∝ 1/U²: 30 kn gives (24/30)² of the 24 kn value
    assert p.load_limit_angle(30 * KN) == pytest.approx(0.2839847503 * (24 / 30) ** 2, rel=1e-9)
    # at 20 kn α_load = 0.40895 rad (23.4°) > 22°: the stall limit governs
    pk = demo_params(k_roll=5.0)
    s, outs = _settle(pk, active_state(pk), good(roll=30 * D), 80)
    assert outs[-1].target == pytest.approx(22 * D, rel=1e-12)
    assert outs[-1].limiter & Limiter.STALL


@pytest.mark.parametrize("sign", [+1, -1])
def test_stall_limit_keeps_both_fins_at_the_effective_angle_limit_when_rolling(sign):
    # hand: U = 12 kn = 6.17333 m/s, p = 5°/s = 0.0872665 rad/s, θ = atan(p·r_f/U) = atan(0.141361)
    # = 0.1404299 rad (8.046°); a = 22° → δ_max = a − θ = 0.2435425 rad (13.954°) for p > 0
    p = demo_params(k_roll=0.0, k_accel=0.0)
    u = 12 * KN
    rate = sign * 5 * D
    s = active_state(p, speed=u)
    s, outs = _settle(p, s, good(rate=rate, speed=u), 60)
    out = outs[-1]
    assert abs(out.command) > 0.5
    assert out.target == pytest.approx(sign * 0.2435425338, rel=1e-9)
    assert out.limiter & Limiter.STALL
    # closed form on each fin: α_eff = α + atan(p·y/U) equals ±a exactly
    a = 22 * D
    a_eff_stbd = out.fin_stbd + math.atan(rate * (+10.0) / u)
    a_eff_port = out.fin_port + math.atan(rate * (-10.0) / u)
    assert a_eff_stbd == pytest.approx(sign * a, rel=1e-12)
    assert a_eff_port == pytest.approx(-sign * a, rel=1e-12)


def test_stall_limit_never_drives_a_fin_against_the_command():
    # θ = atan(25°/s·10 m / 3.6 m/s) ≈ 50° > a = 22°: the band [−a−θ, a−θ] excludes 0 and the
    # command (roll-angle term only) is positive; the limit may only reduce it, so δ goes to 0
    p = demo_params(k_rate=0.0, k_accel=0.0)
    u = 7.5 * KN
    s = active_state(p, speed=u)
    s, outs = _settle(p, s, good(roll=10 * D, rate=25 * D, speed=u), 30)
    assert outs[-1].command > 0.0
    assert outs[-1].target == 0.0 and outs[-1].fin_stbd == 0.0
    assert outs[-1].limiter & Limiter.STALL


def test_mechanical_angle_limit_caps_the_demand_exactly():
    # stall and load made irrelevant: stall 45°, no margin, rated lift huge
    p = demo_params(k_roll=5.0, stall_angle=45 * D, stall_margin=0.0, rated_lift=1e8)
    s = active_state(p)
    s, outs = _settle(p, s, good(roll=30 * D), 100)
    assert max(o.fin_stbd for o in outs) == 25 * D
    assert outs[-1].fin_stbd == 25 * D and outs[-1].fin_port == -25 * D
    assert outs[-1].limiter & Limiter.ANGLE
    # 25° at 0.44° per step: 57 steps (ceil(25/0.44) = 57) to reach the limit
    first = next(i for i, o in enumerate(outs) if o.fin_stbd == 25 * D)
    assert first == 56  # index 56 is the 57th step


def test_slew_limit_moves_the_demand_by_exactly_rate_times_dt_until_the_target():
    # target 10° (roll-angle term 0.5 × 20°); 22°/s × 0.02 s = 0.44° per step → 23 steps
    p = demo_params(k_rate=0.0, k_accel=0.0)
    s = active_state(p)
    s, outs = _settle(p, s, good(roll=20 * D), 30)
    step_size = 22 * D * 0.02
    d = [outs[0].fin_stbd] + [b.fin_stbd - a.fin_stbd for a, b in zip(outs, outs[1:])]
    for k in range(22):
        assert d[k] == pytest.approx(step_size, rel=1e-12)
        assert outs[k].limiter & Limiter.RATE
    assert 0 < d[22] < step_size
    assert outs[22].fin_stbd == pytest.approx(10 * D, rel=1e-12)
    assert all(x == 0.0 for x in d[23:])
    assert not outs[23].limiter & Limiter.RATE


def test_heel_trim_integrates_the_slow_roll_and_stops_at_its_authority():
    # heel 2°, gain 0.1 °/(°·s): the integral grows ≈ 0.2°/s once the slow filter has caught up;
    # authority 4° → reached in ≈ 20 s + filter lag; then clamped exactly
    p = demo_params(k_roll=0.0, k_rate=0.0, k_accel=0.0)
    s = active_state(p)
    s, outs = run(p, s, [good(roll=2 * D, heel_trim_on=True)] * 2000)  # 40 s
    assert outs[0].term_heel == pytest.approx(0.1 * 2 * D * 0.02, rel=1e-12)  # first step, hand
    assert outs[-1].term_heel == 4 * D
    assert outs[-1].limiter & Limiter.HEEL
    assert outs[-1].fin_stbd == pytest.approx(4 * D, rel=1e-12)


def test_heel_trim_stops_integrating_while_a_limiter_holds_the_demand_back():
    # anti-windup: the roll term alone exceeds the angle limit, so the integral must not grow
    p = demo_params(k_roll=5.0, k_rate=0.0, k_accel=0.0, stall_angle=45 * D, stall_margin=0.0, rated_lift=1e8)
    s = active_state(p)
    s, outs = run(p, s, [good(roll=10 * D, heel_trim_on=True)] * 500)
    assert outs[-1].limiter & Limiter.ANGLE
    # the slew limiter holds from the first step (command 50° > 0.44°), then the angle limit:
    # the integral never moves towards the limit
    assert all(o.term_heel == 0.0 for o in outs)
    # an integrand of the other sign (slow-filtered heel negative) moves it away at once:
    # di = 0.1 × heel_lp × 0.02 s with heel_lp = −5° + c·(10° + 5°), c = 1 − exp(−0.02/10)
    s = s._replace(heel_lp=-5 * D)
    s, outs = run(p, s, [good(roll=10 * D, heel_trim_on=True)])
    c = 1.0 - math.exp(-0.02 / 10.0)
    assert outs[0].term_heel == pytest.approx(0.1 * 0.02 * (-5 * D + c * 15 * D), rel=1e-9)


def test_heel_trim_leaks_to_zero_over_the_fade_time_when_switched_off():
    p = demo_params(k_roll=0.0, k_rate=0.0, k_accel=0.0)
    s = active_state(p)._replace(heel_i=4 * D)
    s, outs = run(p, s, [good(roll=0.0, heel_trim_on=False)] * 200)
    n_fade = round(3.0 / 0.02)  # 150 steps
    assert outs[0].term_heel == pytest.approx(4 * D * (1 - 1 / n_fade), rel=1e-9)
    assert outs[n_fade - 2].term_heel > 0.0
    assert outs[n_fade - 1].term_heel == 0.0
    # the demand followed down without exceeding the slew limit
    assert all(abs(b.fin_stbd - a.fin_stbd) <= 0.44 * D + 1e-12 for a, b in zip(outs, outs[1:]))


def test_fault_ramps_fins_to_centre_at_exactly_the_rate_limit():
    p = demo_params(k_roll=5.0, stall_angle=45 * D, stall_margin=0.0, rated_lift=1e8)
    s = active_state(p)
    s, outs = _settle(p, s, good(roll=30 * D), 80)
    assert outs[-1].fin_stbd == 25 * D
    bad = good(roll=math.nan)
    s, outs = run(p, s, [bad] * 80)
    # fault latches on the 3rd bad step; the target is 0 from then on; ramp 0.44° per step
    assert [o.mode.name for o in outs[:3]] == ["ACTIVE", "ACTIVE", "FAULT"]
    assert outs[1].fin_stbd == 25 * D  # held while the fault is being confirmed
    ramp = [outs[1 + k].fin_stbd for k in range(60)]
    # 25° = 56 × 0.44° + 0.36°: 56 full steps, then the remainder
    for k in range(1, 57):
        assert ramp[k - 1] - ramp[k] == pytest.approx(0.44 * D, rel=1e-9)
    assert ramp[57] == 0.0 and ramp[56] - ramp[57] == pytest.approx(0.36 * D, rel=1e-9)
    assert outs[-1].fin_stbd == 0.0 and outs[-1].fin_port == 0.0
