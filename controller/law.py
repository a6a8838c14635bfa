"""The fixed-step fin stabiliser law: ``step(params, state, inputs) -> (state, outputs)``.

One call = one sample period ``params.dt``. Pure: the result depends only on the three arguments;
no clock, no randomness, no I/O, no exception leaves (a failure inside latches ``INTERNAL`` and
ramps the fins to centre). Plain floats and the ``math`` module only.

Order of work in a step
-----------------------
1. **Conditioning.** Each sensor sample is checked (validity flag, age, finiteness, range, jump
   from the previous sample). A good roll sample runs through the notch and the 2nd-order
   low-pass; the roll rate comes from the sensor (same filters) or from a band-limited derivative
   of the filtered roll; the roll acceleration is a band-limited derivative of the filtered rate.
   A bad sample is not used: the last conditioned values are held. Filters start on their first
   good sample in steady state (no start-up transient). The speed passes a first-order low-pass;
   while the log is out the last good speed is held.
2. **Faults.** Consecutive-bad counters latch fault bits (:mod:`controller.faults`); nothing
   latches in OFF.
3. **Mode.** At most one legal transition (:mod:`controller.modes`).
4. **Law.** δ_cmd = f · (s(U)·trim·(K_φ φ + K_p p + K_a p') + δ_heel), where f ∈ [0, 1] is the
   engage fade and s(U) the speed factor: (U_ref/U)² with U clamped to [U_min, U_max], or the
   interpolated table.
5. **Limits, in order.** Effective angle of attack: the fin at y sees α + atan(p·y/U); with
   α_stbd = +δ at y = +r_f and α_port = −δ at y = −r_f both fins need
   −a − θ ≤ δ ≤ a − θ, θ = atan(p r_f/U), where a = min(stall angle − margin, α_load) and
   α_load = L_rated/(½ρU²A CLα) keeps the lift under the rated lift. These two limits only ever
   shrink the command towards zero (the band is widened to contain 0). Then the mechanical angle
   limit |δ| ≤ A, then the slew limit |δ_k − δ_{k−1}| ≤ rate·dt. Outside ACTIVE/CUTOUT the target is 0
   (BENCH: the test signal, angle-limited); the slew limit always applies, so every mode change is
   free of jumps and faults ramp the fins to centre at the rate limit.
6. **Heel trim.** δ_heel integrates the slow low-passed roll (ACTIVE, heel trim on), stops while a
   limiter holds the demand back in the same direction, is clamped to its authority, leaks to zero
   over the fade time when switched off and is cleared outside ACTIVE/CUTOUT.
"""

from __future__ import annotations

from math import atan, nan

from .faults import Fault
from .modes import MODES, Mode
from .params import U_FLOOR, ControllerParams
from .records import ControllerInputs, ControllerOutputs, ControllerState, initial_state

__all__ = ["step"]

_OFF, _STANDBY, _ACTIVE, _CUTOUT, _FAULT, _BENCH = (int(m) for m in Mode)
_R_OFF, _R_STANDBY, _R_ACTIVE, _R_BENCH = 1, 2, 3, 4
_REQUESTS = (1, 2, 3, 4)

_F_ROLL = int(Fault.ROLL_ANGLE)
_F_RATE = int(Fault.ROLL_RATE)
_F_SPEED = int(Fault.SPEED)
_F_FBP = int(Fault.FEEDBACK_PORT)
_F_FBS = int(Fault.FEEDBACK_STBD)
_F_TRP = int(Fault.TRACKING_PORT)
_F_TRS = int(Fault.TRACKING_STBD)
_F_OVR = int(Fault.OVERRUN)
_F_INT = int(Fault.INTERNAL)

_L_STALL, _L_LOAD, _L_ANGLE, _L_RATE, _L_HEEL = 1, 2, 4, 8, 16

_CAP = 1 << 30  # counters saturate here
_STEP_CAP = 1 << 62
_BIG = 1e9  # any |value| at or beyond this (or NaN) is treated as non-finite


def step(
    params: ControllerParams, state: ControllerState, inputs: ControllerInputs
) -> tuple[ControllerState, ControllerOutputs]:
    """Advance the controller by one sample period.

    Parameters
    ----------
    params: the frozen parameters (SI), built once.
    state: the state returned by the previous call, or :func:`initial_state`.
    inputs: this step's sensor values, operator requests and flags (SI).

    Returns
    -------
    ``(new_state, outputs)``. The fin demands in ``outputs`` are always finite, within
    ±``params.angle_limit`` and within ``params.rate_limit · params.dt`` of the previous demand.
    Never raises.
    """
    try:
        return _step(params, state, inputs)
    except Exception:  # wrong input types, a corrupted state ... : try once with cleaned inputs
        pass
    try:
        return _step(params, state, _sanitise(inputs))
    except Exception:
        pass
    return _safe_step(params, state)


def _step(params: ControllerParams, state: ControllerState, inputs: ControllerInputs):
    (
        dt, rate_deriv, k_roll, k_rate, k_accel, trim_min, trim_max, sched_table, u_ref, u_min,
        u_max, tab_u, tab_s, c_speed, u_cut, u_re, n_dwell, n_fade, a_lim, r_step, a_stall,
        load_k, r_f, lp, nt, dd, da, roll_range, rate_range, roll_jump, max_age, speed_range,
        speed_jump, speed_max_age, n_deb, n_hold, trk_err, n_track, fb_range, heel_k, heel_auth,
        c_heel, heel_leak, bench_any,
    ) = params.packed  # fmt: skip
    (
        k, mode, faults, delta, fade_count, heel_i, trim, roll_primed, rn1, rn2, rl1, rl2, roll_f,
        roll_prev, rate_primed, pn1, pn2, pl1, pl2, pd1, rate_f, ad1, accel_f, heel_lp,
        speed_primed, speed_f, speed_prev, roll_bad, rate_bad, speed_bad, fbp_bad, fbs_bad, trk_p,
        trk_s, overrun_bad, above,
    ) = state  # fmt: skip
    (
        roll, roll_valid, roll_age, rate, rate_valid, rate_age, speed, speed_valid, speed_age, fbp,
        fbp_valid, fbs, fbs_valid, req, trim_pct, heel_on, reset, bench, overrun,
    ) = inputs  # fmt: skip
    lb0, lb1, lb2, la1, la2 = lp
    nb0, nb1, nb2, na1, na2 = nt

    # the remembered demand must itself be inside the limit (a state from outside could be anything)
    if not (-a_lim <= delta <= a_lim):
        delta = 0.0 if delta != delta else (a_lim if delta > 0.0 else -a_lim)

    # ---- 1. conditioning ------------------------------------------------------------------------
    present = 0  # fault conditions present in this very step
    roll_ok = bool(roll_valid) and 0.0 <= roll_age <= max_age and -roll_range <= roll <= roll_range
    if roll_ok:
        jump = roll - roll_prev  # NaN when there is no previous sample: no jump check
        roll_prev = roll
        if jump > roll_jump or jump < -roll_jump:
            roll_ok = False
    else:
        roll_prev = nan
    rate_new = False
    if roll_ok:
        roll_bad = 0
        if roll_primed:
            y = nb0 * roll + rn1
            rn1 = nb1 * roll - na1 * y + rn2
            rn2 = nb2 * roll - na2 * y
            f = lb0 * y + rl1
            rl1 = lb1 * y - la1 * f + rl2
            rl2 = lb2 * y - la2 * f
            roll_f = f
            if rate_deriv:
                f = dd[0] * roll_f + pd1
                pd1 = dd[1] * roll_f - dd[2] * f
                rate_f = f
                rate_new = True
        else:  # first good sample: start every roll filter in steady state (unity DC gain)
            rn1 = roll * (1.0 - nb0)
            rn2 = roll * (nb2 - na2)
            rl1 = roll * (1.0 - lb0)
            rl2 = roll * (lb2 - la2)
            roll_f = roll
            heel_lp = roll
            roll_primed = True
            if rate_deriv:
                pd1 = -dd[0] * roll
                rate_f = 0.0
                ad1 = 0.0
                accel_f = 0.0
        heel_lp += c_heel * (roll_f - heel_lp)
    else:
        present = _F_ROLL
        roll_bad = roll_bad + 1 if roll_bad < _CAP else roll_bad
        if roll_bad >= n_deb:
            roll_primed = False

    if not rate_deriv:
        if bool(rate_valid) and 0.0 <= rate_age <= max_age and -rate_range <= rate <= rate_range:
            rate_bad = 0
            if rate_primed:
                y = nb0 * rate + pn1
                pn1 = nb1 * rate - na1 * y + pn2
                pn2 = nb2 * rate - na2 * y
                f = lb0 * y + pl1
                pl1 = lb1 * y - la1 * f + pl2
                pl2 = lb2 * y - la2 * f
                rate_f = f
                rate_new = True
            else:
                pn1 = rate * (1.0 - nb0)
                pn2 = rate * (nb2 - na2)
                pl1 = rate * (1.0 - lb0)
                pl2 = rate * (lb2 - la2)
                rate_f = rate
                ad1 = -da[0] * rate
                accel_f = 0.0
                rate_primed = True
        else:
            present |= _F_RATE
            rate_bad = rate_bad + 1 if rate_bad < _CAP else rate_bad
            if rate_bad >= n_deb:
                rate_primed = False
    if rate_new:
        f = da[0] * rate_f + ad1
        ad1 = da[1] * rate_f - da[2] * f
        accel_f = f

    speed_ok = bool(speed_valid) and 0.0 <= speed_age <= speed_max_age and -speed_range <= speed <= speed_range
    if speed_ok:
        jump = speed - speed_prev
        speed_prev = speed
        if jump > speed_jump or jump < -speed_jump:
            speed_ok = False
    else:
        speed_prev = nan
    if speed_ok:
        speed_bad = 0
        if speed_primed:
            speed_f += c_speed * (speed - speed_f)
        else:
            speed_f = speed
            speed_primed = True
    else:
        present |= _F_SPEED
        speed_bad = speed_bad + 1 if speed_bad < _CAP else speed_bad
    if speed_f >= u_re:
        above = above + 1 if above <= n_dwell else above
    else:
        above = 0

    if -_BIG < trim_pct < _BIG:
        t = 0.01 * trim_pct
        trim = trim_min if t < trim_min else (trim_max if t > trim_max else t)

    # fin feedback and tracking against the previous demand (stbd = +δ, port = −δ)
    if bool(fbp_valid) and -fb_range <= fbp <= fb_range:
        fbp_bad = 0
        e = fbp + delta
        if e > trk_err or e < -trk_err:
            present |= _F_TRP
            trk_p = trk_p + 1 if trk_p < _CAP else trk_p
        else:
            trk_p = 0
    else:
        present |= _F_FBP
        fbp_bad = fbp_bad + 1 if fbp_bad < _CAP else fbp_bad
    if bool(fbs_valid) and -fb_range <= fbs <= fb_range:
        fbs_bad = 0
        e = fbs - delta
        if e > trk_err or e < -trk_err:
            present |= _F_TRS
            trk_s = trk_s + 1 if trk_s < _CAP else trk_s
        else:
            trk_s = 0
    else:
        present |= _F_FBS
        fbs_bad = fbs_bad + 1 if fbs_bad < _CAP else fbs_bad
    if overrun:
        present |= _F_OVR
        overrun_bad = overrun_bad + 1 if overrun_bad < _CAP else overrun_bad
    else:
        overrun_bad = 0

    # ---- 2. faults (nothing latches when OFF; the actuators may be unpowered, so tracking is not
    # counted there either) --------------------------------------------------------------------------
    if mode != _OFF:
        if roll_bad >= n_deb:
            faults |= _F_ROLL
        if rate_bad >= n_deb:
            faults |= _F_RATE
        if speed_bad > n_hold:
            faults |= _F_SPEED
        if fbp_bad >= n_deb:
            faults |= _F_FBP
        if fbs_bad >= n_deb:
            faults |= _F_FBS
        if trk_p > n_track:
            faults |= _F_TRP
        if trk_s > n_track:
            faults |= _F_TRS
        if overrun_bad >= n_deb:
            faults |= _F_OVR
    else:
        trk_p = trk_s = 0

    # ---- 3. mode ---------------------------------------------------------------------------------
    if req not in _REQUESTS:
        req = 0
    new_mode = mode
    refused = 0
    if mode == _OFF:
        if req == _R_STANDBY:
            new_mode = _STANDBY
        elif req and req != _R_OFF:
            refused = req
    elif mode == _FAULT:
        if req == _R_OFF:
            new_mode = _OFF
        else:
            if reset:
                faults &= present
                if not faults:
                    new_mode = _STANDBY
            if req and not (req == _R_STANDBY and new_mode == _STANDBY):
                refused = req
    elif faults:
        new_mode = _FAULT
        refused = req
    elif mode == _STANDBY:
        if req == _R_OFF:
            new_mode = _OFF
        elif req == _R_ACTIVE:
            new_mode = _ACTIVE if above > n_dwell else _CUTOUT
        elif req == _R_BENCH:
            if bench_any or (speed_primed and speed_f < u_cut):
                new_mode = _BENCH
            else:
                refused = req
    elif mode == _ACTIVE:
        if req == _R_STANDBY:
            new_mode = _STANDBY
        else:
            if speed_f < u_cut:
                new_mode = _CUTOUT
            if req == _R_OFF or req == _R_BENCH:
                refused = req
    elif mode == _CUTOUT:
        if req == _R_STANDBY:
            new_mode = _STANDBY
        else:
            if above > n_dwell:
                new_mode = _ACTIVE
            if req == _R_OFF or req == _R_BENCH:
                refused = req
    elif mode == _BENCH:
        if req == _R_STANDBY or not (bench_any or speed_f < u_cut):
            new_mode = _STANDBY
        elif req == _R_OFF or req == _R_ACTIVE:
            refused = req
    else:  # not a mode: only a corrupted state gets here
        raise ValueError("unknown mode in state")

    if new_mode == _ACTIVE:
        fade_count = fade_count + 1 if fade_count < n_fade else n_fade
    elif new_mode == _CUTOUT:
        fade_count = fade_count - 1 if fade_count > 0 else 0
    else:
        fade_count = 0
    fade = fade_count / n_fade

    # ---- 4. law (always evaluated: constant work per step, diagnostics in every mode) ------------
    u = speed_f if speed_f > 0.0 else 0.0
    if sched_table:
        if u <= tab_u[0]:
            sf = tab_s[0]
        else:
            sf = tab_s[-1]
            for i in range(1, len(tab_u)):
                if u <= tab_u[i]:
                    x0 = tab_u[i - 1]
                    s0 = tab_s[i - 1]
                    sf = s0 + (tab_s[i] - s0) * (u - x0) / (tab_u[i] - x0)
                    break
    else:
        uc = u_min if u < u_min else (u_max if u > u_max else u)
        sf = u_ref / uc
        sf = sf * sf
    g = sf * trim
    g_roll = g * k_roll
    g_rate = g * k_rate
    g_accel = g * k_accel
    t_roll = g_roll * roll_f
    t_rate = g_rate * rate_f
    t_accel = g_accel * accel_f
    cmd = fade * (t_roll + t_rate + t_accel + heel_i)

    # ---- 5. limits ---------------------------------------------------------------------------------
    lim = 0
    if new_mode == _ACTIVE or new_mode == _CUTOUT:
        ul = u if u > U_FLOOR else U_FLOOR
        theta = atan(rate_f * r_f / ul)
        a_e = load_k / (ul * ul)
        which = _L_LOAD
        if a_e >= a_stall:
            a_e = a_stall
            which = _L_STALL
        hi = a_e - theta
        lo = -a_e - theta
        tgt = cmd
        if tgt > hi:
            if hi > 0.0:
                tgt = hi
                lim = which
            elif tgt > 0.0:
                tgt = 0.0
                lim = which
        elif tgt < lo:
            if lo < 0.0:
                tgt = lo
                lim = which
            elif tgt < 0.0:
                tgt = 0.0
                lim = which
    elif new_mode == _BENCH:
        tgt = bench if -_BIG < bench < _BIG else 0.0
    else:
        tgt = 0.0
    if not (-_BIG < tgt < _BIG):  # never let a non-finite value through
        tgt = 0.0
        faults |= _F_INT
        if new_mode != _OFF:
            new_mode = _FAULT
            fade_count = 0
    if tgt > a_lim:
        tgt = a_lim
        lim |= _L_ANGLE
    elif tgt < -a_lim:
        tgt = -a_lim
        lim |= _L_ANGLE
    d = tgt - delta
    if d > r_step:
        d = r_step
        lim |= _L_RATE
    elif d < -r_step:
        d = -r_step
        lim |= _L_RATE
    new_delta = delta + d
    if new_delta > a_lim:
        new_delta = a_lim
    elif new_delta < -a_lim:
        new_delta = -a_lim

    # ---- 6. heel trim with anti-windup -------------------------------------------------------------
    if new_mode == _ACTIVE:
        if heel_on:
            di = heel_k * heel_lp
            if lim and ((di > 0.0 and cmd > new_delta) or (di < 0.0 and cmd < new_delta)):
                di = 0.0  # a limiter already holds the demand back in this direction
            heel_i += di
        elif heel_i > heel_leak:
            heel_i -= heel_leak
        elif heel_i < -heel_leak:
            heel_i += heel_leak
        else:
            heel_i = 0.0
        if heel_i >= heel_auth:
            heel_i = heel_auth
            lim |= _L_HEEL
        elif heel_i <= -heel_auth:
            heel_i = -heel_auth
            lim |= _L_HEEL
        elif not (-_BIG < heel_i < _BIG):
            heel_i = 0.0
    elif new_mode != _CUTOUT:
        heel_i = 0.0

    new_state = ControllerState(
        k + 1 if k < _STEP_CAP else k, new_mode, faults, new_delta, fade_count, heel_i, trim,
        roll_primed, rn1, rn2, rl1, rl2, roll_f, roll_prev, rate_primed, pn1, pn2, pl1, pl2, pd1,
        rate_f, ad1, accel_f, heel_lp, speed_primed, speed_f, speed_prev, roll_bad, rate_bad,
        speed_bad, fbp_bad, fbs_bad, trk_p, trk_s, overrun_bad, above,
    )  # fmt: skip
    out = ControllerOutputs(
        -new_delta, new_delta, MODES[new_mode], MODES[mode], faults, refused, roll_f, rate_f,
        accel_f, speed_f, sf, g_roll, g_rate, g_accel, t_roll, t_rate, t_accel, heel_i, cmd, tgt,
        fade, lim,
    )  # fmt: skip
    return new_state, out


# ---- defensive paths (never taken with well-formed inputs) ------------------------------------------


def _num(x) -> float:
    try:
        return float(x)
    except Exception:
        return nan


def _flag(x, default: bool) -> bool:
    try:
        return bool(x)
    except Exception:
        return default


def _request(x) -> int:
    try:
        v = int(x)
    except Exception:
        return 0
    return v if v in _REQUESTS else 0


def _sanitise(inputs) -> ControllerInputs:
    """Coerce every field to its type; anything that does not convert becomes 'invalid'."""
    f = list(inputs)
    if len(f) != len(ControllerInputs._fields):
        raise ValueError("inputs have the wrong number of fields")
    return ControllerInputs(
        _num(f[0]), _flag(f[1], False), _num(f[2]), _num(f[3]), _flag(f[4], False), _num(f[5]),
        _num(f[6]), _flag(f[7], False), _num(f[8]), _num(f[9]), _flag(f[10], False), _num(f[11]),
        _flag(f[12], False), _request(f[13]), _num(f[14]), _flag(f[15], False), _flag(f[16], False),
        _num(f[17]), _flag(f[18], True),
    )  # fmt: skip


_LAST_STATE = ControllerState(
    0, _FAULT, _F_INT, 0.0, 0, 0.0, 1.0,
    False, 0.0, 0.0, 0.0, 0.0, 0.0, nan,
    False, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
    False, 0.0, nan,
    0, 0, 0, 0, 0, 0, 0, 0, 0,
)  # fmt: skip
_LAST_OUT = ControllerOutputs(
    0.0, 0.0, Mode.FAULT, Mode.FAULT, _F_INT, 0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
    0.0, 0.0, 0.0, 0.0, 0.0, 0,
)  # fmt: skip


def _safe_step(params: ControllerParams, state) -> tuple[ControllerState, ControllerOutputs]:
    """Latch INTERNAL and ramp the demand to centre at the rate limit, from whatever is readable."""
    try:
        a_lim = float(params.angle_limit)
        r_step = float(params.rate_limit) * float(params.dt)
        try:
            prev = float(state[3])
        except Exception:
            prev = 0.0
        if not (-a_lim <= prev <= a_lim):
            prev = 0.0 if prev != prev else (a_lim if prev > 0.0 else -a_lim)
        d = -prev
        d = r_step if d > r_step else (-r_step if d < -r_step else d)
        new_delta = prev + d
        try:
            old_mode = int(state[1])
            faults = int(state[2]) | _F_INT
            k = int(state[0])
        except Exception:
            old_mode, faults, k = _FAULT, _F_INT, 0
        if not 0 <= old_mode <= _BENCH:
            old_mode = _FAULT
        new_mode = _OFF if old_mode == _OFF else _FAULT
        new_state = initial_state(params)._replace(
            step=k + 1 if 0 <= k < _STEP_CAP else 0, mode=new_mode, faults=faults, delta=new_delta
        )
        out = _LAST_OUT._replace(
            fin_port=-new_delta, fin_stbd=new_delta, mode=MODES[new_mode], prev_mode=MODES[old_mode],
            faults=faults, target=0.0,
        )
        return new_state, out
    except Exception:
        return _LAST_STATE, _LAST_OUT
