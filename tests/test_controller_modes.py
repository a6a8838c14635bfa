"""Behaviour of the step: all-zero, single feedback terms (hand-computed), modes and their legal
transitions, jump-free engage and disengage, faults with their exact latch counts, latch and reset,
and the defensive paths (garbage inputs, corrupted state).

Demo file numbers used by hand below: dt = 0.02 s; K_roll = 0.5, K_rate = 5 s, K_accel = 0.5 s² at
20 kn; slew 22°/s → 0.44° per step; fade 3 s → 150 steps; dwell 5 s → 250 steps; debounce 3 steps;
speed hold 10 s → 500 steps; tracking 5° for 1 s → 50 steps; cut-out 6 kn, re-engage 7 kn.
"""

from __future__ import annotations

import math

import pytest

from controller import (
    LEGAL_TRANSITIONS,
    Fault,
    Mode,
    ModeRequest,
    fault_names,
    initial_state,
    step,
)

from .test_controller_support import D, KN, active_state, demo_params, good, run

R = ModeRequest


# ---- all-zero and single terms ------------------------------------------------------------------


def test_all_zero_inputs_give_exactly_zero_demands_in_every_mode():
    p = demo_params()
    for s in (active_state(p), initial_state(p), initial_state(p, mode=Mode.STANDBY, speed=20 * KN)):
        s, outs = run(p, s, [good(heel_trim_on=True)] * 500)
        assert all(o.fin_port == 0.0 and o.fin_stbd == 0.0 and o.faults == 0 for o in outs)
        assert all(o.command == 0.0 and o.term_heel == 0.0 for o in outs)


@pytest.mark.parametrize(
    "inputs, term, expected",
    [
        # δ = K_roll·φ = 0.5 × 0.2° = 0.1°
        (dict(roll=0.2 * D), "term_roll", 0.1 * D),
        (dict(roll=-0.2 * D), "term_roll", -0.1 * D),
        # δ = K_rate·p = 5 s × 0.08°/s = 0.4°
        (dict(rate=0.08 * D), "term_rate", 0.4 * D),
        (dict(rate=-0.08 * D), "term_rate", -0.4 * D),
    ],
)
def test_single_feedback_term_gives_its_hand_computed_demand(inputs, term, expected):
    p = demo_params()
    _, outs = run(p, active_state(p), [good(**inputs)])
    out = outs[0]
    assert getattr(out, term) == pytest.approx(expected, rel=1e-12)
    assert out.fin_stbd == pytest.approx(expected, rel=1e-12)  # below one slew step (0.44°)
    assert out.fin_port == pytest.approx(-expected, rel=1e-12)
    others = {"term_roll", "term_rate", "term_accel", "term_heel"} - {term}
    assert all(getattr(out, t) == 0.0 for t in others)


def test_roll_acceleration_term_settles_on_gain_times_a_steady_acceleration():
    # roll rate ramping at 1°/s²: the band-limited derivative of a ramp settles on its slope
    # exactly (closed form, see test_controller_filters), so δ → K_accel × 1°/s² = 0.5°
    p = demo_params(k_roll=0.0, k_rate=0.0)
    seq = [good(rate=1 * D * 0.02 * k) for k in range(250)]  # 5 s, up to 5°/s
    _, outs = run(p, active_state(p), seq)
    # the start-up transient decays as exp(−t/0.25 s) (accel filter) → e^−20 after 5 s
    assert outs[-1].roll_accel == pytest.approx(1 * D, rel=1e-7)
    assert outs[-1].term_accel == pytest.approx(0.5 * D, rel=1e-7)
    assert outs[-1].fin_stbd == pytest.approx(0.5 * D, rel=1e-7)


def test_positive_roll_gives_positive_starboard_and_negative_port_demand():
    # sign convention (DEVELOPERS.md): φ > 0 starboard down → δ > 0 → α_stbd = +δ lifts starboard
    p = demo_params()
    _, outs = run(p, active_state(p), [good(roll=3 * D, rate=1 * D)] * 20)
    assert outs[-1].fin_stbd > 0.0 and outs[-1].fin_port < 0.0
    assert outs[-1].fin_port == -outs[-1].fin_stbd


# ---- modes ---------------------------------------------------------------------------------------


def test_power_up_is_off_with_fins_centred_and_active_from_off_is_refused():
    p = demo_params()
    s = initial_state(p)
    assert s.mode == Mode.OFF and s.delta == 0.0 and s.faults == 0
    s, out = step(p, s, good(mode_request=R.ACTIVE))
    assert out.mode == Mode.OFF and out.refused_request == R.ACTIVE
    s, out = step(p, s, good(mode_request=R.STANDBY))
    assert (out.prev_mode, out.mode) == (Mode.OFF, Mode.STANDBY) and out.refused_request == 0


def test_initial_state_checks_its_arguments():
    p = demo_params()
    assert initial_state(p, mode=Mode.ACTIVE, speed=5 * KN).mode == Mode.CUTOUT
    assert initial_state(p, mode=Mode.ACTIVE, speed=20 * KN).fade_count == p.n_fade
    with pytest.raises(ValueError):
        initial_state(p, mode=Mode.FAULT)
    with pytest.raises(ValueError):
        initial_state(p, mode=Mode.ACTIVE)
    with pytest.raises(ValueError):
        initial_state(p, speed=math.nan)


def test_engage_is_jump_free_the_demand_fades_in_from_centre():
    # steady roll 2° → law command 0.5 × 2° = 1°; the fade adds 1°/150 per step from 0
    p = demo_params(k_rate=0.0, k_accel=0.0)
    s = initial_state(p, mode=Mode.STANDBY, speed=20 * KN)
    s, outs = run(p, s, [good(roll=2 * D)] * 10)
    assert all(o.fin_stbd == 0.0 for o in outs)
    s, outs = run(p, s, [good(roll=2 * D, mode_request=R.ACTIVE)] + [good(roll=2 * D)] * 200)
    assert (outs[0].prev_mode, outs[0].mode) == (Mode.STANDBY, Mode.ACTIVE)
    for k in range(150):
        assert outs[k].fade == pytest.approx((k + 1) / 150, rel=1e-12)
        assert outs[k].fin_stbd == pytest.approx(1 * D * (k + 1) / 150, rel=1e-9)
    assert outs[-1].fin_stbd == pytest.approx(1 * D, rel=1e-12)
    assert max(abs(b.fin_stbd - a.fin_stbd) for a, b in zip(outs, outs[1:])) <= 1 * D / 150 + 1e-15


def test_cut_out_fades_the_fins_to_centre_then_holds_them_there():
    # below 8 kn the speed factor is clamped at (20/8)² = 6.25: law command 0.5 × 6.25 × 2° = 6.25°
    p = demo_params(k_rate=0.0, k_accel=0.0)
    s = active_state(p, speed=7.5 * KN)
    s, outs = run(p, s, [good(roll=2 * D, speed=7.5 * KN)] * 30)
    assert outs[-1].mode == Mode.ACTIVE and outs[-1].fin_stbd == pytest.approx(6.25 * D, rel=1e-12)
    # speed falls to 5 kn (plausible steps of 0.25 kn): filtered speed crosses 6 kn → CUTOUT
    seq = [good(roll=2 * D, speed=(7.5 - 0.25 * min(k, 10)) * KN) for k in range(900)]
    s, outs = run(p, s, seq)
    i = next(k for k, o in enumerate(outs) if o.mode == Mode.CUTOUT)
    assert outs[i].speed < 6 * KN <= outs[i - 1].speed
    # fade-out: 150 steps from full to zero, 6.25°/150 per step, never a jump
    for k in range(150):
        assert outs[i + k].fin_stbd == pytest.approx(6.25 * D * (149 - k) / 150, rel=1e-9, abs=1e-15)
    assert all(o.fin_stbd == 0.0 and o.mode == Mode.CUTOUT for o in outs[i + 149:])
    assert max(abs(b.fin_stbd - a.fin_stbd) for a, b in zip(outs, outs[1:])) <= 6.25 * D / 150 + 1e-15


def test_hysteresis_keeps_the_mode_between_cut_out_and_re_engage_speeds():
    p = demo_params()
    u = 6.5 * KN
    # ACTIVE (engaged earlier at a higher speed), now at 6.5 kn: stays ACTIVE
    s = active_state(p, speed=7.5 * KN)._replace(speed_f=u, speed_prev=u, above=0)
    s, outs = run(p, s, [good(speed=u)] * 1000)
    assert all(o.mode == Mode.ACTIVE for o in outs)
    s, outs = run(p, initial_state(p, mode=Mode.ACTIVE, speed=u), [good(speed=u)] * 1000)
    assert all(o.mode == Mode.CUTOUT for o in outs)


def test_re_engage_waits_for_the_dwell_time_above_the_re_engage_speed():
    p = demo_params()
    s = initial_state(p, mode=Mode.ACTIVE, speed=5 * KN)
    assert s.mode == Mode.CUTOUT
    seq = [good(speed=min(5 + 0.006 * k, 8) * KN) for k in range(2000)]  # 0.3 kn/s ramp
    s, outs = run(p, s, seq)
    first_above = next(k for k, o in enumerate(outs) if o.speed >= 7 * KN)
    engaged = next(k for k, o in enumerate(outs) if o.mode == Mode.ACTIVE)
    assert engaged - first_above == 250  # dwell 5 s = 250 steps after the first step above
    assert outs[engaged].prev_mode == Mode.CUTOUT


def test_standby_request_from_active_ramps_fins_to_centre_at_the_rate_limit():
    p = demo_params(k_rate=0.0, k_accel=0.0)
    s, outs = run(p, active_state(p), [good(roll=20 * D)] * 30)
    assert outs[-1].fin_stbd == pytest.approx(10 * D, rel=1e-12)
    s, outs = run(p, s, [good(roll=20 * D, mode_request=R.STANDBY)] + [good(roll=20 * D)] * 30)
    assert outs[0].mode == Mode.STANDBY
    assert outs[0].fin_stbd == pytest.approx(10 * D - 0.44 * D, rel=1e-12)
    assert outs[-1].fin_stbd == 0.0


def test_bench_mode_follows_the_test_signal_only_below_cut_out_or_on_a_rig():
    p = demo_params()
    s = initial_state(p, mode=Mode.STANDBY, speed=0.0)
    s, outs = run(p, s, [good(speed=0.0, mode_request=R.BENCH, bench_signal=1 * D)] + [good(speed=0.0, bench_signal=1 * D)] * 5)
    assert outs[0].mode == Mode.BENCH
    assert [o.fin_stbd for o in outs[:3]] == pytest.approx([0.44 * D, 0.88 * D, 1 * D], rel=1e-12)
    # a bench signal beyond the angle limit is clipped to it
    s, outs = run(p, s, [good(speed=0.0, bench_signal=90 * D)] * 100)
    assert outs[-1].fin_stbd == 25 * D
    # speed rising to cut-out ends the bench test (→ STANDBY, fins ramp to centre)
    seq = [good(speed=min(0.1 * k, 7.0) * KN, bench_signal=90 * D) for k in range(400)]
    s, outs = run(p, s, seq)
    k = next(i for i, o in enumerate(outs) if o.mode != Mode.BENCH)
    assert outs[k].mode == Mode.STANDBY and outs[k].speed >= 6 * KN > outs[k - 1].speed
    # at 20 kn bench is refused; with the rig flag it is allowed
    s = initial_state(p, mode=Mode.STANDBY, speed=20 * KN)
    s, out = step(p, s, good(mode_request=R.BENCH))
    assert out.mode == Mode.STANDBY and out.refused_request == R.BENCH
    rig = demo_params(bench_any_speed=True)
    s, out = step(rig, initial_state(rig, mode=Mode.STANDBY, speed=20 * KN), good(mode_request=R.BENCH))
    assert out.mode == Mode.BENCH


def test_illegal_requests_are_refused_and_reported():
    p = demo_params()
    s = active_state(p)
    for req in (R.OFF, R.BENCH):
        s, out = step(p, s, good(mode_request=req))
        assert out.mode == Mode.ACTIVE and out.refused_request == req
    s, out = step(p, s, good(mode_request=99))  # not a request at all: ignored
    assert out.mode == Mode.ACTIVE and out.refused_request == 0
    assert (Mode.ACTIVE, Mode.OFF) not in LEGAL_TRANSITIONS
    assert (Mode.OFF, Mode.ACTIVE) not in LEGAL_TRANSITIONS


# ---- faults --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "bad, bit",
    [
        (dict(roll=math.nan), Fault.ROLL_ANGLE),
        (dict(roll=math.inf), Fault.ROLL_ANGLE),
        (dict(roll_valid=False), Fault.ROLL_ANGLE),
        (dict(roll_age=0.2), Fault.ROLL_ANGLE),  # stale: max age 0.1 s
        (dict(roll_age=-1.0), Fault.ROLL_ANGLE),
        (dict(roll=50 * D), Fault.ROLL_ANGLE),  # beyond the 40° range
        (dict(roll_rate=math.nan), Fault.ROLL_RATE),
        (dict(roll_rate_valid=False), Fault.ROLL_RATE),
        (dict(roll_rate=40 * D), Fault.ROLL_RATE),  # beyond 30°/s
        (dict(fin_port=math.nan), Fault.FEEDBACK_PORT),
        (dict(fin_stbd_valid=False), Fault.FEEDBACK_STBD),
        (dict(fin_stbd=35 * D), Fault.FEEDBACK_STBD),  # beyond the 30° feedback range
        (dict(overrun=True), Fault.OVERRUN),
    ],
)
def test_persistent_bad_input_latches_its_fault_on_the_debounce_step(bad, bit):
    p = demo_params()
    s = active_state(p)
    s, outs = run(p, s, [good(roll=1 * D, rate=0.5 * D)] * 50)
    s, outs = run(p, s, [good(**{"roll": 1 * D, "rate": 0.5 * D, **bad})] * 5, follow=False)
    assert [o.mode for o in outs[:3]] == [Mode.ACTIVE, Mode.ACTIVE, Mode.FAULT]
    assert outs[2].faults == bit and fault_names(outs[2].faults) == (bit.name,)
    assert outs[1].fin_stbd == outs[0].fin_stbd  # the bad sample is not used: the demand holds


def test_implausible_roll_jumps_latch_a_roll_fault():
    p = demo_params()
    s = active_state(p)
    seq = [good(roll=(3 * D if k % 2 else 0.0)) for k in range(6)]  # 3° jumps, limit 2° per step
    s, outs = run(p, s, seq)
    # step 0 primes (no previous sample), steps 1, 2, 3 jump → fault on step 3
    assert [o.mode for o in outs[:4]] == [Mode.ACTIVE] * 3 + [Mode.FAULT]
    assert outs[3].faults == Fault.ROLL_ANGLE


def test_two_bad_samples_are_ridden_through_without_a_fault():
    p = demo_params()
    s = active_state(p)
    seq = [good(roll=1 * D)] * 3 + [good(roll=math.nan)] * 2 + [good(roll=1 * D)] * 10
    s, outs = run(p, s, seq)
    assert all(o.mode == Mode.ACTIVE and o.faults == 0 for o in outs)


def test_speed_log_outage_holds_the_last_speed_then_faults_after_the_hold_time():
    p = demo_params()
    s = active_state(p, speed=15 * KN)
    s, outs = run(p, s, [good(speed=math.nan, speed_valid=False)] * 505)
    assert all(o.speed == 15 * KN for o in outs)
    assert all(o.mode == Mode.ACTIVE for o in outs[:500])  # 500 steps = 10 s held
    assert outs[500].mode == Mode.FAULT and outs[500].faults == Fault.SPEED
    # a stale sample (age 4 s > 3 s) counts as missing too
    s, outs = run(p, active_state(p), [good(speed_age=4.0)] * 502)
    assert outs[499].mode == Mode.ACTIVE and outs[500].faults == Fault.SPEED


def test_actuator_tracking_error_latches_after_the_tracking_time():
    # demand held at 10° (roll 20°, K_roll 0.5); starboard feedback stuck at 0 → error 10° > 5°
    p = demo_params(k_rate=0.0, k_accel=0.0)
    s = active_state(p)._replace(delta=10 * D)
    seq = [good(roll=20 * D, fin_port=-10 * D, fin_stbd=0.0)] * 60
    s, outs = run(p, s, seq, follow=False)
    assert all(o.mode == Mode.ACTIVE for o in outs[:50])
    assert outs[50].mode == Mode.FAULT and outs[50].faults == Fault.TRACKING_STBD


def test_overruns_must_be_consecutive_to_latch():
    p = demo_params()
    seq = [good(overrun=(k % 3 != 2)) for k in range(30)]  # two overruns, then a clean step
    s, outs = run(p, active_state(p), seq)
    assert all(o.faults == 0 for o in outs)


def test_fault_stays_latched_until_reset_with_the_cause_gone():
    p = demo_params()
    s = active_state(p)
    s, outs = run(p, s, [good(roll=math.nan)] * 3)
    assert outs[-1].mode == Mode.FAULT
    # cause still there: reset refused, bit kept
    s, out = step(p, s, good(roll=math.nan, fault_reset=True))
    assert out.mode == Mode.FAULT and out.faults == Fault.ROLL_ANGLE
    # cause gone but no reset: still latched
    s, outs = run(p, s, [good()] * 100)
    assert all(o.mode == Mode.FAULT and o.faults == Fault.ROLL_ANGLE for o in outs)
    # a mode request does not clear a fault
    s, out = step(p, s, good(mode_request=R.ACTIVE))
    assert out.mode == Mode.FAULT and out.refused_request == R.ACTIVE
    # reset with the cause gone → STANDBY, no faults; ACTIVE must be requested again
    s, out = step(p, s, good(fault_reset=True))
    assert (out.prev_mode, out.mode) == (Mode.FAULT, Mode.STANDBY) and out.faults == 0
    s, outs = run(p, s, [good()] * 10)
    assert all(o.mode == Mode.STANDBY for o in outs)


def test_reset_clears_only_the_bits_whose_cause_is_gone():
    p = demo_params()
    s = active_state(p)
    s, outs = run(p, s, [good(roll=math.nan, overrun=True)] * 3)
    assert outs[-1].faults == Fault.ROLL_ANGLE | Fault.OVERRUN
    s, out = step(p, s, good(overrun=True, fault_reset=True))
    assert out.mode == Mode.FAULT and out.faults == Fault.OVERRUN
    s, out = step(p, s, good(fault_reset=True))
    assert out.mode == Mode.STANDBY and out.faults == 0


def test_off_is_reachable_from_fault_keeps_the_latch_and_latches_nothing_new():
    p = demo_params()
    s, outs = run(p, active_state(p), [good(roll=math.nan)] * 3)
    s, out = step(p, s, good(roll=math.nan, mode_request=R.OFF))
    assert out.mode == Mode.OFF and out.faults == Fault.ROLL_ANGLE
    nothing = good(roll=math.nan, roll_rate=math.nan, speed=math.nan, fin_port=math.nan, fin_stbd=math.nan,
                   roll_valid=False, speed_valid=False, overrun=True)
    s, outs = run(p, s, [nothing] * 1000, follow=False)
    assert all(o.mode == Mode.OFF and o.faults == Fault.ROLL_ANGLE for o in outs)
    # back to standby: the latched fault takes it to FAULT on the next step
    s, outs = run(p, s, [good(mode_request=R.STANDBY), good()])
    assert [o.mode for o in outs] == [Mode.STANDBY, Mode.FAULT]


def test_conditions_lasting_through_off_latch_on_standby_but_tracking_starts_afresh():
    p = demo_params()
    # speed log dead for 20 s while OFF: nothing latches, then STANDBY → SPEED on the next step
    s, outs = run(p, initial_state(p), [good(speed_valid=False)] * 1000)
    assert all(o.mode == Mode.OFF and o.faults == 0 for o in outs)
    s, outs = run(p, s, [good(speed_valid=False, mode_request=R.STANDBY), good(speed_valid=False)])
    assert [o.mode for o in outs] == [Mode.STANDBY, Mode.FAULT] and outs[1].faults == Fault.SPEED
    # fins parked at 10° while OFF (actuators unpowered): no tracking count until STANDBY, then
    # the 1 s tracking time runs from there (the fins are then driven to centre)
    s, outs = run(p, initial_state(p), [good(fin_port=-10 * D, fin_stbd=10 * D)] * 1000, follow=False)
    seq = [good(fin_port=-10 * D, fin_stbd=10 * D, mode_request=R.STANDBY)] + [good(fin_port=-10 * D, fin_stbd=10 * D)] * 60
    s, outs = run(p, s, seq, follow=False)
    assert all(o.mode == Mode.STANDBY for o in outs[:51])
    assert outs[51].faults == Fault.TRACKING_PORT | Fault.TRACKING_STBD


# ---- defensive paths -----------------------------------------------------------------------------


@pytest.mark.parametrize("junk", [None, "1.0", 1 + 2j, 10**400, [1.0], object()])
def test_garbage_input_values_count_as_invalid_and_never_raise(junk):
    p = demo_params()
    s = active_state(p)
    fields = ("roll", "roll_age", "speed", "fin_port", "gain_trim_pct", "bench_signal", "mode_request")
    for name in fields:
        s2, outs = run(p, s, [good(**{name: junk})] * 4, follow=False)
        for o in outs:
            assert math.isfinite(o.fin_stbd) and abs(o.fin_stbd) <= p.angle_limit
            assert not o.faults & Fault.INTERNAL
    s2, outs = run(p, s, [good(roll=junk)] * 3)
    assert outs[-1].faults == Fault.ROLL_ANGLE


def test_corrupted_state_latches_internal_and_ramps_fins_to_centre():
    p = demo_params()
    s = active_state(p)._replace(delta=10 * D)
    for bad in (s._replace(mode=42), s[:5], "not a state", None):
        s2, out = step(p, bad, good())
        assert out.faults & Fault.INTERNAL
        assert out.mode == Mode.FAULT
        assert math.isfinite(out.fin_stbd) and abs(out.fin_stbd) <= p.angle_limit
    s2, out = step(p, s._replace(mode=42), good())
    assert out.fin_stbd == pytest.approx(10 * D - 0.44 * D, rel=1e-12)  # one slew step towards 0


def test_non_finite_value_inside_the_law_is_replaced_and_latches_internal():
    p = demo_params()
    s = active_state(p)
    s, _ = run(p, s, [good(roll=1 * D)] * 5)
    s = s._replace(rn1=math.nan)  # a filter state gone bad
    s, outs = run(p, s, [good(roll=1 * D)] * 3)
    assert outs[0].mode == Mode.FAULT and outs[0].faults & Fault.INTERNAL
    assert all(math.isfinite(o.fin_stbd) for o in outs)
    assert outs[0].target == 0.0
