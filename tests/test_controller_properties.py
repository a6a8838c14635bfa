"""Property-based checks of the step over arbitrary input sequences (hypothesis).

Inputs: smooth ship motion with arbitrary corruptions (NaN, ±inf, huge values, wrong types, flags
dropped, stale ages), random mode requests, resets, overruns and gain trims; parameters drawn over
their legal range (angle limit 1–45°, slew 1–200°/s, dt 5–100 ms, both roll-rate sources, rule or
table schedule, debounce 1–5 steps ...).

Invariants and the bounds stated for them:
- every demand finite, |demand| ≤ angle limit, port = −stbd;
- |Δdemand| ≤ rate·dt + 1e-12 rad (float tolerance: the slew step is formed as δ + d with |d| ≤
  rate·dt, so only rounding of one addition, ~1e-16 rad, can exceed it);
- every float output finite;
- only transitions in controller.LEGAL_TRANSITIONS;
- identical sequences → bit-identical outputs and states (compared by repr, which round-trips
  floats exactly);
- a persistent bad input latches its fault bit and FAULT holds from step n_deb of the bad run on
  (n_deb + 1 if the controller was OFF and had to be put in STANDBY first; speed: n_hold + 1;
  tracking: n_track + 1), and the demand is then exactly 0 within ceil(A/(rate·dt)) more steps;
- with the speed log steady below cut-out, the demand is exactly 0 within
  k1 + n_fade + ceil(A/(rate·dt)) + 1 steps, k1 = steps for the first-order speed filter to fall
  below cut-out (closed form u_k = u_in + (u_0 − u_in)·exp(−kT/τ), +1 for a rejected jump);
- clean motion inside the plausibility limits never raises a fault.
"""

from __future__ import annotations

import dataclasses
import math

from hypothesis import event, given
from hypothesis import strategies as st

from controller import LEGAL_TRANSITIONS, ControllerInputs, Fault, Mode, initial_state, step

from .test_controller_support import D, KN, demo_params

FIELDS = ControllerInputs._fields
SLEW_TOL = 1e-12  # rad
WILD = st.one_of(
    st.sampled_from([math.nan, math.inf, -math.inf, 1e300, -1e300, 1e9, -1e9, 5e-324, 0.0, -0.0, 3.0, -3.0]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.integers(-10, 10),
    st.sampled_from([None, "x", 10**400]),
)


@st.composite
def params_st(draw):
    dt = draw(st.sampled_from([0.005, 0.01, 0.02, 0.05, 0.1]))
    angle = draw(st.floats(1.0, 45.0)) * D
    table = draw(st.booleans())
    return dataclasses.replace(
        demo_params(),
        dt=dt,
        angle_limit=angle,
        rate_limit=draw(st.floats(1.0, 200.0)) * D,
        feedback_range=max(30 * D, angle),
        heel_authority=min(4 * D, angle),
        rate_source=draw(st.sampled_from(["sensor", "derivative"])),
        schedule_table=table,
        table_speeds=(6 * KN, 12 * KN, 20 * KN, 26 * KN) if table else (),
        table_factors=(4.0, 2.8, 1.0, 0.6) if table else (),
        notch_hz=8.0 if 8.0 < 0.5 / dt else 0.0,
        lowpass_hz=min(2.0, 0.2 / dt),
        fade=draw(st.floats(dt, 3.0)),
        dwell=draw(st.floats(0.0, 2.0)),
        debounce_steps=draw(st.integers(1, 5)),
        speed_hold=draw(st.floats(0.0, 1.0)),
        tracking_time=draw(st.floats(0.0, 1.0)),
        bench_any_speed=draw(st.booleans()),
        k_rate=draw(st.floats(0.0, 20.0)),
    )


@st.composite
def scenario_st(draw, dt, n_max=200, wild=True):
    """(start state kind, start speed, follow feedback?, [inputs]) — inputs fully materialised."""
    n = draw(st.integers(min(30, n_max), n_max))
    amp = draw(st.floats(0.0, 0.5))
    period = draw(st.floats(1.0, 30.0))
    w = 2 * math.pi / period
    u0 = draw(st.one_of(st.floats(7.5, 30.0), st.floats(0.0, 30.0))) * KN
    u1 = draw(st.one_of(st.just(u0 / KN), st.floats(0.0, 30.0))) * KN
    trim = draw(st.floats(-50.0, 300.0))
    heel = draw(st.booleans())
    bench = draw(st.floats(-1.0, 1.0))
    base = []
    for k in range(n):
        t = k * dt
        u = u0 + (u1 - u0) * k / n
        base.append(
            dict(
                roll=amp * math.sin(w * t), roll_valid=True, roll_age=0.01, roll_rate=amp * w * math.cos(w * t),
                roll_rate_valid=True, roll_rate_age=0.01, speed=u, speed_valid=True, speed_age=0.5,
                fin_port=0.0, fin_port_valid=True, fin_stbd=0.0, fin_stbd_valid=True, mode_request=0,
                gain_trim_pct=trim, heel_trim_on=heel, fault_reset=False, bench_signal=bench, overrun=False,
            )  # fmt: skip
        )
    if wild:
        for k, name, value in draw(st.lists(st.tuples(st.integers(0, n - 1), st.sampled_from(FIELDS), WILD), max_size=40)):
            base[k][name] = value
    for k, req in draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(-1, 6)), max_size=12)):
        base[k]["mode_request"] = req
    for k in draw(st.lists(st.integers(0, n - 1), max_size=6)):
        base[k]["fault_reset"] = True
    start = draw(st.sampled_from(["active", "active", "active", "standby", "off"]))
    follow = draw(st.booleans())
    return start, u0, follow, [ControllerInputs(**b) for b in base]


def start_state(p, kind, u0):
    if kind == "off":
        return initial_state(p)
    return initial_state(p, mode=Mode.STANDBY if kind == "standby" else Mode.ACTIVE, speed=u0)


def simulate(p, state, inputs, follow):
    """Run; with ``follow`` true the (valid-looking) feedback equals the previous demand unless the
    scenario corrupted a feedback field; with ``follow == "off10"`` the starboard feedback is 10°
    away from the previous demand (inside every feedback range): a persistent tracking error."""
    outs, states = [], []
    prev = state.delta
    for inp in inputs:
        if follow == "off10":
            inp = inp._replace(fin_port=-prev, fin_stbd=prev + (10 * D if prev < 0.0 else -10 * D))
        elif follow and inp.fin_port == 0.0 and inp.fin_stbd == 0.0:
            inp = inp._replace(fin_port=-prev, fin_stbd=prev)
        state, out = step(p, state, inp)
        prev = out.fin_stbd
        outs.append(out)
        states.append(state)
    return state, outs, states


def _run(data, p, n_max=200, wild=True):
    kind, u0, follow, inputs = data.draw(scenario_st(p.dt, n_max=n_max, wild=wild))
    s0 = start_state(p, kind, u0)
    return s0, inputs, follow, simulate(p, s0, inputs, follow)


@given(st.data())
def test_demands_are_finite_antisymmetric_and_inside_the_angle_limit(data):
    p = data.draw(params_st())
    _, _, _, (_, outs, _) = _run(data, p)
    # coverage of the generated runs (shown by pytest --hypothesis-show-statistics)
    event("visited ACTIVE" if any(o.mode == Mode.ACTIVE for o in outs) else "never ACTIVE")
    event("some limiter active" if any(o.limiter for o in outs) else "no limiter")
    event("a fault latched" if any(o.faults for o in outs) else "no fault")
    for o in outs:
        assert math.isfinite(o.fin_stbd) and math.isfinite(o.fin_port)
        assert abs(o.fin_stbd) <= p.angle_limit and abs(o.fin_port) <= p.angle_limit
        assert o.fin_port == -o.fin_stbd


@given(st.data())
def test_demand_never_moves_faster_than_the_slew_limit(data):
    p = data.draw(params_st())
    s0, _, _, (_, outs, _) = _run(data, p)
    prev = s0.delta
    for o in outs:
        assert abs(o.fin_stbd - prev) <= p.rate_limit * p.dt + SLEW_TOL
        prev = o.fin_stbd


@given(st.data())
def test_every_float_output_is_finite_and_every_code_an_int(data):
    p = data.draw(params_st())
    _, _, _, (_, outs, _) = _run(data, p)
    for o in outs:
        for name, v in o._asdict().items():
            if isinstance(v, float):
                assert math.isfinite(v), name
            else:
                assert isinstance(v, int), name
        assert 0 <= o.faults < 512 and 0 <= o.limiter < 32


@given(st.data())
def test_only_legal_mode_transitions_happen(data):
    p = data.draw(params_st())
    s0, _, _, (_, outs, _) = _run(data, p)
    prev = Mode(s0.mode)
    for o in outs:
        assert o.prev_mode == prev
        assert o.mode == prev or (prev, o.mode) in LEGAL_TRANSITIONS, (prev, o.mode)
        prev = o.mode


@given(st.data())
def test_identical_input_sequences_give_bit_identical_outputs(data):
    p = data.draw(params_st())
    s0, inputs, follow, (s1, outs1, states1) = _run(data, p)
    s2, outs2, states2 = simulate(p, s0, inputs, follow)
    assert repr(outs1) == repr(outs2)
    assert repr(states1) == repr(states2)
    # and a params object rebuilt from the same values behaves identically
    p2 = dataclasses.replace(p)
    _, outs3, _ = simulate(p2, s0, inputs, follow)
    assert repr(outs1) == repr(outs3)


BAD_KINDS = {
    "roll_nan": dict(roll=math.nan),
    "roll_inf": dict(roll=-math.inf),
    "roll_invalid": dict(roll_valid=False),
    "roll_stale": dict(roll_age=1.0),
    "roll_huge": dict(roll=1e300),
    "rate_nan": dict(roll_rate=math.nan),
    "rate_invalid": dict(roll_rate_valid=False),
    "port_nan": dict(fin_port=math.nan),
    "stbd_invalid": dict(fin_stbd_valid=False),
    "overrun": dict(overrun=True),
    "speed_invalid": dict(speed_valid=False),
    "speed_nan": dict(speed=math.nan),
    "stbd_tracking": dict(),  # feedback 10° away from the demand (see simulate)
}


BAD_BITS = {
    **{k: Fault.ROLL_ANGLE for k in BAD_KINDS if k.startswith("roll")},
    **{k: Fault.ROLL_RATE for k in BAD_KINDS if k.startswith("rate")},
    **{k: Fault.SPEED for k in BAD_KINDS if k.startswith("speed")},
    "port_nan": Fault.FEEDBACK_PORT,
    "stbd_invalid": Fault.FEEDBACK_STBD,
    "overrun": Fault.OVERRUN,
    "stbd_tracking": Fault.TRACKING_STBD,
}


@given(st.data())
def test_fault_mode_is_reached_within_the_stated_steps_after_a_persistent_bad_input(data):
    p = data.draw(params_st())
    kind = data.draw(st.sampled_from(sorted(BAD_KINDS)))
    if kind.startswith("rate") and p.rate_source == "derivative":
        kind = "roll_nan"  # the rate sensor is not read in that configuration
    s0, _, _, (s, outs, _) = _run(data, p, n_max=80)
    n_deb = p.debounce_steps
    bound = {"speed_invalid": p.n_hold + 1, "speed_nan": p.n_hold + 1, "stbd_tracking": p.n_track + 1}.get(kind, n_deb)
    was_off = s.mode == Mode.OFF
    # the bad run: requests and resets still arrive at random, but never OFF
    _, _, follow, more = data.draw(scenario_st(p.dt, n_max=1, wild=False))
    ramp = math.ceil(p.angle_limit / (p.rate_limit * p.dt) - 1e-9)
    limit = bound + (1 if was_off else 0)
    n = limit + ramp + 20
    reqs = data.draw(st.lists(st.tuples(st.integers(0, n - 1), st.sampled_from([2, 3, 4])), max_size=10))
    resets = data.draw(st.lists(st.integers(0, n - 1), max_size=5))
    seq = [more[0]._replace(mode_request=0, fault_reset=False, **BAD_KINDS[kind])] * n
    for k, r in reqs:
        seq[k] = seq[k]._replace(mode_request=r)
    for k in resets:
        seq[k] = seq[k]._replace(fault_reset=True)
    if was_off:
        seq[0] = seq[0]._replace(mode_request=2)
    _, outs, _ = simulate(p, s, seq, follow="off10" if kind == "stbd_tracking" else True)
    # FAULT on step `limit` of the bad run at the latest, and from then on for good (an earlier
    # FAULT from another, vanished cause may be reset before this one has latched)
    assert all(o.mode == Mode.FAULT for o in outs[limit - 1 :]), (kind, limit)
    assert outs[limit - 1].faults & BAD_BITS[kind]
    assert all(o.fin_stbd == 0.0 for o in outs[limit - 1 + ramp :])


@given(st.data())
def test_below_cut_out_the_demands_reach_zero_within_the_stated_steps(data):
    p = data.draw(params_st())
    s0, _, follow, (s, outs, _) = _run(data, p, n_max=80)
    u_in = data.draw(st.floats(0.0, 0.98)) * p.u_cutout
    u0 = s.speed_f
    if s.speed_primed and u0 >= p.u_cutout:
        k1 = 1 + math.ceil(math.log((p.u_cutout - u_in) / (u0 - u_in)) / math.log(1.0 - p.c_speed))
    else:
        k1 = 1
    bound = k1 + p.n_fade + math.ceil(p.angle_limit / (p.rate_limit * p.dt) - 1e-9) + 1
    n = bound + 50
    _, _, _, motion = data.draw(scenario_st(p.dt, n_max=1, wild=False))
    reqs = data.draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, 4)), max_size=10))
    seq = [motion[0]._replace(speed=u_in, speed_valid=True, speed_age=0.5, bench_signal=0.0, mode_request=0)] * n
    for k, r in reqs:
        seq[k] = seq[k]._replace(mode_request=r)
    _, outs2, _ = simulate(p, s, seq, follow)
    assert all(o.fin_stbd == 0.0 and o.fin_port == 0.0 for o in outs2[bound:]), bound
    assert all(o.mode != Mode.ACTIVE for o in outs2[k1:])


@given(st.data())
def test_clean_motion_inside_the_plausibility_limits_never_raises_a_fault(data):
    p = demo_params(rate_source=data.draw(st.sampled_from(["sensor", "derivative"])))
    amp = data.draw(st.floats(0.0, 20.0)) * D
    period = data.draw(st.floats(4.0, 30.0))
    w = 2 * math.pi / period
    amp = min(amp, 0.9 * p.rate_range / w, 0.9 * p.roll_jump / (w * p.dt))
    u = data.draw(st.floats(7.5, 30.0)) * KN
    heel = data.draw(st.booleans())
    seq = [
        ControllerInputs(amp * math.sin(w * k * p.dt), True, 0.01, amp * w * math.cos(w * k * p.dt), True, 0.01,
                         u, True, 0.5, 0.0, True, 0.0, True, 0, 100.0, heel)
        for k in range(1500)
    ]  # fmt: skip
    _, outs, _ = simulate(p, initial_state(p, mode=Mode.ACTIVE, speed=u), seq, follow=True)
    assert all(o.faults == 0 and o.mode == Mode.ACTIVE for o in outs)
