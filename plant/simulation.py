"""Fixed-step, deterministic plant: vessel roll + fins + actuators + sensors, one control step at a time.

The plant takes the two fin demands of one control period and returns the measurements the
controller will see at the next control instant — the same contract a bench link offers, so the
same plant can later sit behind CAN/serial links.

Integration: classical RK4 with ``substeps`` steps per control period (h = dt/substeps). Excitation
(wave and external moments) and ship speed are computed ahead of the loop on the half-step grid
(spacing h/2), so the per-step work is plain-float arithmetic. Within a control period each fin's
angle moves linearly from its value at the start to the servo's value at the end.

Records: the true state (roll, rate, fin angles, demands) and the measurements at every control
instant; derived quantities (fin forces, drag power, roll acceleration, moments) are recomputed
vectorised after the run from the recorded state (:meth:`Plant.records`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from .actuator import ActuatorParams, servo_move
from .constants import G
from .fins import FinParams, lift_coefficient
from .sensors import (
    DROPOUT,
    FREEZE,
    INVALID,
    NAN,
    SPIKE,
    STUCK,
    Fault,
    SensorSuite,
    fault_codes,
    motion_schedule,
    speed_log_measurements,
)
from .vessel import VesselParams, gz_function


class PlantError(RuntimeError):
    """The simulated vessel left the model's validity (capsize, GZ table exceeded, non-finite state)."""


@dataclass(frozen=True)
class ExternalMoment:
    """A heeling moment applied to the vessel (N·m; positive heels to starboard).

    kind: ``steady`` (whole run), ``step`` (from ``start_s`` on), ``gust`` (1 − cos pulse of
    ``duration_s`` starting at ``start_s``, peak = ``moment_n_m``).
    """

    kind: str
    moment_n_m: float
    start_s: float = 0.0
    duration_s: float = 0.0


def external_moment_on_grid(moments: tuple[ExternalMoment, ...], t: np.ndarray) -> np.ndarray:
    """Sum of all external moments on times ``t`` (s), N·m."""
    m = np.zeros_like(t)
    for e in moments:
        if e.kind == "steady":
            m += e.moment_n_m
        elif e.kind == "step":
            m += np.where(t >= e.start_s, e.moment_n_m, 0.0)
        elif e.kind == "gust":
            x = (t - e.start_s) / e.duration_s
            inside = (x >= 0.0) & (x <= 1.0)
            m += np.where(inside, 0.5 * e.moment_n_m * (1.0 - np.cos(2.0 * np.pi * np.clip(x, 0.0, 1.0))), 0.0)
        else:  # pragma: no cover - rejected at load
            raise ValueError(f"unknown external moment kind {e.kind!r}")
    return m


@dataclass(frozen=True)
class Excitation:
    """Wave roll moment (N·m) and wave elevation at the ship (m) on the half-step grid."""

    moment_n_m: np.ndarray
    elevation_m: np.ndarray


@dataclass(frozen=True)
class PlantSetup:
    """Everything the plant needs, resolved and in SI units."""

    vessel: VesselParams
    fin_port: FinParams
    fin_stbd: FinParams
    actuator_port: ActuatorParams
    actuator_stbd: ActuatorParams
    duration_s: float
    control_dt_s: float
    substeps: int = 1
    seed: int = 0
    speed_times_s: tuple[float, ...] = (0.0,)
    speed_values_ms: tuple[float, ...] = (0.0,)
    sensors: SensorSuite = field(default_factory=SensorSuite)
    external_moments: tuple[ExternalMoment, ...] = ()
    faults: tuple[Fault, ...] = ()
    fins_when_off: str = "centred"  # or "retracted": no fin forces at all
    initial_roll_rad: float = 0.0
    initial_rate_rad_s: float = 0.0

    @property
    def n_steps(self) -> int:
        return int(round(self.duration_s / self.control_dt_s))


class Measurements(NamedTuple):
    """What the controller sees at one control instant (SI; NaN where a value is absent)."""

    t_s: float
    roll_rad: float
    roll_valid: bool
    roll_age_s: float
    roll_rate_rad_s: float
    roll_rate_valid: bool
    roll_rate_age_s: float
    speed_ms: float
    speed_valid: bool
    speed_age_s: float
    fin_port_rad: float
    fin_port_valid: bool
    fin_stbd_rad: float
    fin_stbd_valid: bool


def speed_at(setup: PlantSetup, t: np.ndarray) -> np.ndarray:
    """Prescribed speed through water (m/s) at times ``t``, piecewise linear, held at the ends."""
    return np.interp(t, setup.speed_times_s, setup.speed_values_ms)


def distance_run(setup: PlantSetup, t: np.ndarray) -> np.ndarray:
    """X(t) = ∫₀ᵗ U dt (m), exact for the piecewise-linear speed profile on a fine, sorted grid."""
    u = speed_at(setup, t)
    x = np.zeros_like(t)
    if t.size > 1:
        x[1:] = np.cumsum(0.5 * (u[1:] + u[:-1]) * np.diff(t))
    # make the profile's break points exact: the trapezoid rule is exact between grid points when
    # break points fall on the grid; otherwise the error is O(dt²·dU) and negligible.
    return x


def half_step_grid(setup: PlantSetup) -> np.ndarray:
    """Times of the RK4 half-step grid: spacing h/2, from 0 to the end of the run."""
    n_half = 2 * setup.substeps * setup.n_steps
    return np.arange(n_half + 1) * (setup.control_dt_s / (2 * setup.substeps))


class Plant:
    """The simulated ship behind the fins.

    Parameters
    ----------
    setup: the resolved plant description.
    excitation: wave moment and elevation on :func:`half_step_grid` (``None`` = calm water).
    rng_sensors: seeded generator for sensor noise and dropouts.

    Use :meth:`step` with the two fin demands (rad) of each control period; it returns the
    :class:`Measurements` at the end of the period. :attr:`k` counts completed steps.
    """

    def __init__(self, setup: PlantSetup, excitation: Excitation | None, rng_sensors: np.random.Generator):
        self.setup = setup
        n = setup.n_steps
        dt = setup.control_dt_s
        if n < 1:
            raise ValueError("the run must be at least one control step long")
        self.n_steps = n
        self.dt = dt
        self.t = np.arange(n + 1) * dt
        grid = half_step_grid(setup)
        self.t_half = grid
        if excitation is None:
            excitation = Excitation(np.zeros_like(grid), np.zeros_like(grid))
        if excitation.moment_n_m.shape != grid.shape:
            raise ValueError("excitation is not on the plant's half-step grid")
        self.excitation = excitation
        self.ext_half = external_moment_on_grid(setup.external_moments, grid)
        self.speed_half = speed_at(setup, grid)
        sens = setup.sensors
        self._motion = motion_schedule(sens.motion, self.t, dt, rng_sensors)
        self._speed = speed_log_measurements(sens.speed_log, self.t, lambda s: speed_at(setup, s), rng_sensors, list(setup.faults))
        fb = sens.fin_feedback
        self._fb_noise = rng_sensors.standard_normal((2, n + 1)) * fb.noise_rad
        self._codes = {
            ch: fault_codes(list(setup.faults), ch, self.t)
            for ch in ("roll", "roll_rate", "fin_port_feedback", "fin_stbd_feedback", "fin_port_actuator", "fin_stbd_actuator")
        }
        # records (true state at control instants)
        self.roll = [0.0] * (n + 1)
        self.rate = [0.0] * (n + 1)
        self.fin_port = [0.0] * (n + 1)
        self.fin_stbd = [0.0] * (n + 1)
        self.demand_port = [math.nan] * (n + 1)
        self.demand_stbd = [math.nan] * (n + 1)
        self.meas: list[Measurements | None] = [None] * (n + 1)
        self.k = 0
        self.roll[0] = setup.initial_roll_rad
        self.rate[0] = setup.initial_rate_rad_s
        self._held = {"roll": math.nan, "roll_rate": math.nan, "fin_port_feedback": math.nan, "fin_stbd_feedback": math.nan}
        self._prepare_measure()
        self._build_stepper()
        self.meas[0] = self._measure(0)

    # ------------------------------------------------------------------------------------------
    def _build_stepper(self) -> None:
        s = self.setup
        v = s.vessel
        n_sub = s.substeps
        h = s.control_dt_s / n_sub
        h2 = 0.5 * h
        h6 = h / 6.0
        inv_i = 1.0 / v.inertia_kg_m2
        b1 = v.b1_n_m_s
        b2 = v.b2_n_m_s2
        dg = v.displacement_kg * G
        gm = v.gm_m
        gz = gz_function(v.gz) if v.gz is not None else None
        sin = math.sin
        atan2 = math.atan2
        fp, fs = s.fin_port, s.fin_stbd
        fins_on = s.fins_when_off != "retracted"
        yp, ys = fp.y_m, fs.y_m
        qp = 0.5 * fp.water_density_kg_m3 * fp.area_m2 if fins_on else 0.0
        qs = 0.5 * fs.water_density_kg_m3 * fs.area_m2 if fins_on else 0.0
        mcoef_p = -yp * qp  # roll moment = −y · q·U²·CL
        mcoef_s = -ys * qs
        # linear-range fast path parameters
        kp_, sp_ = fp.lift_slope_per_rad, fp.stall_angle_rad
        ks_, ss_ = fs.lift_slope_per_rad, fs.stall_angle_rad
        spd = self.speed_half.tolist()
        mom = (self.excitation.moment_n_m + self.ext_half).tolist()
        ap_ = s.actuator_port
        as_ = s.actuator_stbd
        dt = s.control_dt_s
        lag_p = math.exp(-dt / ap_.time_constant_s) if ap_.time_constant_s > 0 else 0.0
        lag_s = math.exp(-dt / as_.time_constant_s) if as_.time_constant_s > 0 else 0.0
        step_p = ap_.rate_limit_rad_s * dt
        step_s = as_.rate_limit_rad_s * dt
        db_p, db_s = ap_.deadband_rad, as_.deadband_rad
        lim_p, lim_s = ap_.angle_limit_rad, as_.angle_limit_rad
        nd_p, nd_s = ap_.delay_steps(dt), as_.delay_steps(dt)
        line_p = [0.0] * nd_p
        line_s = [0.0] * nd_s
        stuck_p = self._codes["fin_port_actuator"][0].tolist()
        stuck_s = self._codes["fin_stbd_actuator"][0].tolist()
        roll, rate, finp, fins_ = self.roll, self.rate, self.fin_port, self.fin_stbd
        dem_p, dem_s = self.demand_port, self.demand_stbd
        n_total = self.n_steps

        def accel(phi: float, p: float, a_p: float, a_s: float, m: float, u: float) -> float:
            # roll acceleration from the roll equation; fin lift inlined (linear range fast path,
            # plant.fins.lift_coefficient beyond stall)
            if gz is None:
                rest = dg * gm * sin(phi)
            else:
                rest = dg * gz(phi)
            e = a_p + atan2(p * yp, u)
            cl_p = kp_ * e if -sp_ <= e <= sp_ else lift_coefficient(e, fp)
            e = a_s + atan2(p * ys, u)
            cl_s = ks_ * e if -ss_ <= e <= ss_ else lift_coefficient(e, fs)
            return (m + u * u * (mcoef_p * cl_p + mcoef_s * cl_s) - b1 * p - b2 * p * abs(p) - rest) * inv_i

        def step(demand_port: float, demand_stbd: float) -> Measurements:
            k = self.k
            if k >= n_total:
                raise IndexError("the run is complete; no more steps")
            dem_p[k] = demand_port
            dem_s[k] = demand_stbd
            # actuators (delay line, then servo); fins stuck by a fault hold their angle
            a0p = finp[k]
            a0s = fins_[k]
            if nd_p:
                line_p.append(demand_port)
                tgt_p = line_p.pop(0)
            else:
                tgt_p = demand_port
            if nd_s:
                line_s.append(demand_stbd)
                tgt_s = line_s.pop(0)
            else:
                tgt_s = demand_stbd
            a1p = a0p if stuck_p[k] else servo_move(a0p, tgt_p, step_p, lag_p, db_p, lim_p)
            a1s = a0s if stuck_s[k] else servo_move(a0s, tgt_s, step_s, lag_s, db_s, lim_s)
            # RK4 over the control period
            phi = roll[k]
            p = rate[k]
            g0 = 2 * n_sub * k
            dap = (a1p - a0p) / n_sub
            das = (a1s - a0s) / n_sub
            try:
                for i in range(n_sub):
                    gi = g0 + 2 * i
                    xp0 = a0p + dap * i
                    xs0 = a0s + das * i
                    xpm = xp0 + 0.5 * dap
                    xsm = xs0 + 0.5 * das
                    m0, mm, m1 = mom[gi], mom[gi + 1], mom[gi + 2]
                    u0, um, u1 = spd[gi], spd[gi + 1], spd[gi + 2]
                    k1v = accel(phi, p, xp0, xs0, m0, u0)
                    k1x = p
                    p2 = p + h2 * k1v
                    k2v = accel(phi + h2 * k1x, p2, xpm, xsm, mm, um)
                    p3 = p + h2 * k2v
                    k3v = accel(phi + h2 * p2, p3, xpm, xsm, mm, um)
                    p4 = p + h * k3v
                    k4v = accel(phi + h * p3, p4, xp0 + dap, xs0 + das, m1, u1)
                    phi = phi + h6 * (k1x + 2.0 * p2 + 2.0 * p3 + p4)
                    p = p + h6 * (k1v + 2.0 * k2v + 2.0 * k3v + k4v)
            except ValueError:  # the GZ table was left mid-step: the vessel is capsizing
                phi, p = math.copysign(math.inf, phi), math.nan
            if not (-1.5 < phi < 1.5) or p != p:
                last = roll[k]
                self.k = k + 1
                roll[k + 1] = phi if math.isfinite(phi) else math.nan
                rate[k + 1] = p if math.isfinite(p) else math.nan
                finp[k + 1] = a1p
                fins_[k + 1] = a1s
                self.meas[k + 1] = self._measure(k + 1)
                raise PlantError(
                    f"roll left the model's range at t = {(k + 1) * dt:.2f} s "
                    f"(roll {math.degrees(last):.1f} deg one step before; beyond ±86 deg or the GZ table's last heel): "
                    "the vessel would capsize or the model is no longer valid"
                )
            k += 1
            roll[k] = phi
            rate[k] = p
            finp[k] = a1p
            fins_[k] = a1s
            self.k = k
            m = self._measure(k)
            self.meas[k] = m
            return m

        self.step = step  # type: ignore[method-assign]

    def step(self, demand_port: float, demand_stbd: float) -> Measurements:  # pragma: no cover - replaced
        raise NotImplementedError

    # ------------------------------------------------------------------------------------------
    def _faulted(self, ch: str, k: int, value: float, valid: bool) -> tuple[float, bool, bool]:
        """Apply a sensor fault to one value; returns (value, valid, fresh)."""
        codes, values = self._code_lists[ch]
        c = codes[k]
        if c == 0:
            self._held[ch] = value
            return value, valid, True
        if c == FREEZE:
            return self._held[ch], valid, True
        if c == SPIKE:
            return value + values[k], valid, True
        if c == NAN:
            return math.nan, valid, True
        if c == STUCK:
            return values[k], valid, True
        if c == INVALID:
            return value, False, True
        if c == DROPOUT:
            return self._held[ch], valid, False
        return value, valid, True  # pragma: no cover

    def _prepare_measure(self) -> None:
        """Turn the pre-computed sensor schedules into plain lists (fast scalar access)."""
        ms = self._motion
        self._m_i0 = ms.hist_index.tolist()
        self._m_fr = ms.hist_frac.tolist()
        self._m_age = ms.age_s.tolist()
        self._m_nr = ms.noise_roll.tolist()
        self._m_nq = ms.noise_rate.tolist()
        sv, sval, sage = self._speed
        self._s_v, self._s_ok, self._s_age = sv.tolist(), sval.tolist(), sage.tolist()
        self._fb_p = self._fb_noise[0].tolist()
        self._fb_s = self._fb_noise[1].tolist()
        self._code_lists = {ch: (c.tolist(), v.tolist()) for ch, (c, v) in self._codes.items()}
        self._any_fault = {ch: bool(np.any(c)) for ch, (c, _) in self._codes.items()}

    def _measure(self, k: int) -> Measurements:
        sens = self.setup.sensors.motion
        i0 = self._m_i0[k]
        fr = self._m_fr[k]
        roll, rate = self.roll, self.rate
        if fr > 0.0 and i0 + 1 <= k:
            phi = roll[i0] + fr * (roll[i0 + 1] - roll[i0])
            p = rate[i0] + fr * (rate[i0 + 1] - rate[i0])
        else:
            phi = roll[i0]
            p = rate[i0]
        age = self._m_age[k]
        phi += self._m_nr[k]
        p += self._m_nq[k]
        q_r = sens.quantisation_roll_rad
        if q_r > 0.0 and math.isfinite(phi):
            phi = round(phi / q_r) * q_r
        roll_age = rate_age = age
        roll_valid = rate_valid = True
        anyf = self._any_fault
        if anyf["roll"]:
            phi, roll_valid, fresh = self._faulted("roll", k, phi, True)
            if not fresh:
                roll_age = self._stale_age("roll", k, age)
        if sens.provides_rate:
            q_p = sens.quantisation_rate_rad_s
            if q_p > 0.0 and math.isfinite(p):
                p = round(p / q_p) * q_p
            if anyf["roll_rate"]:
                p, rate_valid, fresh = self._faulted("roll_rate", k, p, True)
                if not fresh:
                    rate_age = self._stale_age("roll_rate", k, age)
        else:
            p, rate_valid = math.nan, False
        fpv = self.fin_port[k] + self._fb_p[k]
        fsv = self.fin_stbd[k] + self._fb_s[k]
        q_f = self.setup.sensors.fin_feedback.quantisation_rad
        if q_f > 0.0:
            fpv = round(fpv / q_f) * q_f
            fsv = round(fsv / q_f) * q_f
        fp_valid = fs_valid = True
        if anyf["fin_port_feedback"]:
            fpv, fp_valid, _ = self._faulted("fin_port_feedback", k, fpv, True)
        if anyf["fin_stbd_feedback"]:
            fsv, fs_valid, _ = self._faulted("fin_stbd_feedback", k, fsv, True)
        return Measurements(
            k * self.dt, phi, roll_valid, roll_age, p, rate_valid, rate_age,
            self._s_v[k], self._s_ok[k], self._s_age[k], fpv, fp_valid, fsv, fs_valid,
        )

    def _stale_age(self, ch: str, k: int, age_now: float) -> float:
        """Age of the last delivered value during a dropout fault: time since the dropout began."""
        codes = self._codes[ch][0]
        j = k
        while j > 0 and codes[j - 1] == DROPOUT:
            j -= 1
        return age_now + (k - j) * self.dt

    # ------------------------------------------------------------------------------------------
    def records(self) -> dict[str, np.ndarray]:
        """Recorded truth and measurements for steps 0..k (SI), with derived quantities.

        Keys: ``t_s, roll_rad, roll_rate_rad_s, roll_accel_rad_s2, fin_port_rad, fin_stbd_rad,
        demand_port_rad, demand_stbd_rad, speed_ms, wave_moment_n_m, wave_elevation_m,
        external_moment_n_m, fin_moment_n_m, fin_{port,stbd}_alpha_eff_rad,
        fin_{port,stbd}_lift_n, fin_drag_n, fin_drag_power_w`` and ``meas_*`` for every
        :class:`Measurements` field.
        """
        from .fins import lift_coefficient_array

        k = self.k
        sl = slice(0, k + 1)
        s = self.setup
        v = s.vessel
        t = self.t[sl]
        gi = (2 * s.substeps) * np.arange(k + 1)
        out: dict[str, np.ndarray] = {"t_s": t}
        phi = np.asarray(self.roll[sl])
        p = np.asarray(self.rate[sl])
        ap = np.asarray(self.fin_port[sl])
        as_ = np.asarray(self.fin_stbd[sl])
        u = self.speed_half[gi]
        mw = self.excitation.moment_n_m[gi]
        me = self.ext_half[gi]
        fins_on = s.fins_when_off != "retracted"
        mf = np.zeros_like(t)
        drag = np.zeros_like(t)
        per_fin = {}
        for name, fin, a in (("port", s.fin_port, ap), ("stbd", s.fin_stbd, as_)):
            a_eff = a + np.arctan2(p * fin.y_m, u)
            cl = lift_coefficient_array(a_eff, fin)
            q = 0.5 * fin.water_density_kg_m3 * u * u * fin.area_m2 * (1.0 if fins_on else 0.0)
            lift = q * cl
            d = q * (fin.cd0 + cl * cl / (math.pi * fin.oswald_efficiency * fin.aspect_ratio))
            mf += -fin.y_m * lift
            drag += d
            per_fin[name] = (a_eff, lift)
        if v.gz is not None:  # the same linear interpolation as GZTable.gz, mirrored for φ < 0
            a = np.abs(phi)
            lever = np.interp(a, v.gz.heel_rad, v.gz.gz_m)
            lever[~(a <= v.gz.heel_rad[-1])] = np.nan  # beyond the table (a capsize's last row)
            rest = v.displacement_kg * G * np.sign(phi) * lever
        else:
            rest = v.displacement_kg * G * v.gm_m * np.sin(phi)
        acc = (mw + me + mf - v.b1_n_m_s * p - v.b2_n_m_s2 * p * np.abs(p) - rest) / v.inertia_kg_m2
        out.update(
            roll_rad=phi,
            roll_rate_rad_s=p,
            roll_accel_rad_s2=acc,
            fin_port_rad=ap,
            fin_stbd_rad=as_,
            demand_port_rad=np.asarray(self.demand_port[sl]),
            demand_stbd_rad=np.asarray(self.demand_stbd[sl]),
            speed_ms=u,
            wave_moment_n_m=mw,
            wave_elevation_m=self.excitation.elevation_m[gi],
            external_moment_n_m=me,
            fin_moment_n_m=mf,
            fin_port_alpha_eff_rad=per_fin["port"][0],
            fin_stbd_alpha_eff_rad=per_fin["stbd"][0],
            fin_port_lift_n=per_fin["port"][1],
            fin_stbd_lift_n=per_fin["stbd"][1],
            fin_drag_n=drag,
            fin_drag_power_w=drag * u,
        )
        columns = list(zip(*self.meas[sl]))
        for name, col in zip(Measurements._fields, columns):
            if name != "t_s":
                out[f"meas_{name}"] = np.array(col, dtype=float)
        return out
