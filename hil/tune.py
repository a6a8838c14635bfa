"""Speed-scheduled gain design from the linearised roll loop (``finloop tune``).

The loop at one ship speed U, broken at the fin demand::

    M_wave ──▶(+)──▶ G(s) = 1/(I s² + B s + C) ──▶ φ ──▶ sensor ──▶ C(s) ──▶ δ_cmd ──▶ A(s) ──┐
               ▲ −K_f δ_fin                                                               │
               └──────────────────────────────────────────────────────────────────────────┘

- **Plant** :func:`plant.linear.linear_roll`: I φ̈ + (B_e + B_f) φ̇ + C φ = M_wave − K_f δ_fin. The hull
  damping B_e is linearised at ``roll_amplitude_rad`` for the design (default 0: the linear part B1
  only — with the stabiliser working the roll is small, so the fins must make up for the least hull
  damping). For RMS predictions in a sea the quadratic damping is replaced by its statistical
  linearisation B1 + √(8/π) σ_p B2 (Roberts & Spanos, *Random Vibration and Statistical
  Linearization*, 1990, ch. 5), iterated to a fixed point for the off and the on case separately.
- **Controller** C(s): the law's linear part δ_cmd = g·(K_φ φ_f + K_p p_f + K_a p'_f) (+ the heel-trim
  integral when ``heel_trim``), g = s(U)·trim. The filters are the controller's *own* discrete
  coefficients (:mod:`controller.filters`) mapped back to continuous time by the inverse bilinear
  (Tustin) substitution z = (2 + sT)/(2 − sT). That substitution is exact at every frequency up to the
  Tustin warping ω_d = (2/T)·atan(ω T/2) — at roll frequencies (≤ 2 rad/s, T = 0.02 s) a relative
  frequency shift below 1e-4 — so the continuous model keeps the notch, the Butterworth low-pass
  and the band-limited derivatives exactly as designed; the derivative s/(τs + 1) comes back
  exactly. Continuous time is used (rather than c2d of the plant) so that damping ratios, margins
  and Bode's sensitivity integral keep their textbook meaning.
- **Sampling and delays**: the zero-order hold of the demand (T/2), the actuator's transport delay
  (whole control periods, as :class:`plant.actuator.Actuator` realises it), and, when a scenario gives
  one, the motion sensor's latency plus half its sample period are lumped into one loop delay T_d,
  represented by a Padé approximant of order ``pade_order`` (default 3) in every result — poles,
  margins, sensitivity and RMS predictions alike. For the demo (T_d = 0.03–0.04 s) its phase error
  is below 1e-6 deg under 10 rad/s.
- **Actuator** A(s) = e^{−s T_d}/(τ s + 1): the servo's first-order lag; rate and angle limits are not
  in the linear loop — they are design constraints on the predicted RMS fin angle and rate.

Design per speed (:func:`design`): keep the gain shape K_φ : K_p : K_a of the base controller and
find the scalar factor f (gains = f·K_base) that puts the dominant closed-loop roll pole pair at the
target damping ratio (root finding on the pole damping). The factor is then capped by the
constraints (peak_factor·RMS fin angle ≤ usable angle, peak_factor·RMS fin rate ≤ rate limit, gain
and phase margins, peak sensitivity, crossover below the actuator bandwidth); when a cap acts, the
speed is reported as limited (never clamped silently). The factors become a ``rule = "table"``
schedule normalised to 1 at the reference speed, and the gains at the reference speed are rescaled,
so the file loads with :func:`hil.controller_config.load_controller` unchanged.

Sea state: the wave roll moment spectrum the plant uses — S_M(ω) = |X(ω, β)|² S_ζ(ω) with X from
the vessel's roll-moment model (effective slope or RAO table) — integrated in *wave* frequency with
the response evaluated at the encounter frequency |ω_e(ω)|, ω_e = ω − ω²U cos β/g. Integrating in ω
avoids the Jacobian dω/dω_e, which is singular in following seas where several wave frequencies map
to one encounter frequency. σ² = ∫ |H(j|ω_e(ω)|)|² S_M(ω) dω over the band the plant synthesises
(:func:`plant.spectra.frequency_band`, tails < 0.1 % of m0), trapezoidal rule on 6000 points.

``import control`` takes about a second: it is imported inside the functions that need it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from controller import KNOT, ControllerParams
from plant.linear import LinearRoll, linear_roll

__all__ = [
    "DesignOptions",
    "SeaState",
    "LoopAtSpeed",
    "SpeedReport",
    "SpeedDesign",
    "TuneResult",
    "loop_delay_s",
    "inverse_tustin",
    "build_loop",
    "dominant_pair",
    "analyse",
    "response_rms",
    "wave_grid",
    "usable_angle_rad",
    "analyse_controller",
    "design_speed",
    "design",
    "tuned_params",
    "tuned_document",
    "toml_text",
]

_DEG = math.pi / 180.0
_SQRT_8_PI = math.sqrt(8.0 / math.pi)


# ----------------------------------------------------------------------------------------------
# options and sea
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class DesignOptions:
    """What the design aims at and what it must respect (SI except where the name says).

    target_damping: closed-loop damping ratio ζ of the dominant roll pole pair.
    peak_factor: RMS × this must stay within the usable fin angle and the rate limit (3 ≈ the level
        a Gaussian signal exceeds 0.3 % of the time; Rayleigh amplitude exceeded by 1 % of peaks ≈ 3σ).
    min_gain_margin_db, min_phase_margin_deg, max_sensitivity: robustness floors (common practice;
        Åström & Murray, Feedback Systems, 2008, §12.5 quote Ms 1.2–2 and PM 30–60 deg — from memory).
    bandwidth_fraction: the gain crossover must stay below this fraction of 1/(τ + T_d) (common practice).
    roll_amplitude_rad: roll amplitude at which the hull's quadratic damping is linearised for the design.
    heel_trim: include the heel-trim integral in the loop (the operator switch; off by default).
    trim: operator gain trim (1.0 = 100 %).
    pade_order: order of the Padé approximant of the loop delay.
    sensor_delay_s: motion sensor latency + half its sample period (0 when unknown).
    max_factor: largest factor on the base gains the search tries (the schedule table's own bound).
    """

    target_damping: float = 0.3
    peak_factor: float = 3.0
    min_gain_margin_db: float = 6.0
    min_phase_margin_deg: float = 30.0
    max_sensitivity: float = 2.0
    bandwidth_fraction: float = 1.0 / 3.0
    roll_amplitude_rad: float = 0.0
    heel_trim: bool = False
    trim: float = 1.0
    pade_order: int = 3
    sensor_delay_s: float = 0.0
    max_factor: float = 100.0


@dataclass(frozen=True)
class SeaState:
    """A named irregular sea: a spectrum S_ζ(ω) (m²·s/rad, callable, with ``peak_frequency``) and the
    wave heading β (rad; 0 following, π/2 beam from starboard, π head)."""

    spectrum: object
    heading_rad: float
    label: str

    @staticmethod
    def jonswap(hs_m: float, tp_s: float, heading_deg: float, gamma: float | None = None) -> "SeaState":
        """JONSWAP sea (γ from the DNV-RP-C205 §3.5.5.5 rule when ``gamma`` is None)."""
        from plant.spectra import Jonswap

        spec = Jonswap(hs_m, tp_s, gamma)
        label = f"JONSWAP Hs {hs_m:g} m, Tp {tp_s:g} s, gamma {spec.gamma:.2f}, heading {heading_deg:g} deg"
        return SeaState(spec, math.radians(heading_deg), label)


# ----------------------------------------------------------------------------------------------
# transfer-function pieces (descending polynomial coefficients, numpy)
# ----------------------------------------------------------------------------------------------


def inverse_tustin(b: tuple[float, ...], a: tuple[float, ...], dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Continuous equivalent of a discrete section by z = (2 + sT)/(2 − sT).

    Parameters
    ----------
    b, a: numerator and denominator in powers of z⁻¹ (``a[0]`` = 1), equal length n + 1.
    dt: sample period T, s.

    Returns
    -------
    (num, den) in descending powers of s. H_c(jω_a) = H_d(e^{jω_d T}) with ω_a = (2/T)·tan(ω_d T/2)
    (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., §7.2: the bilinear map).
    """
    P = np.polynomial.polynomial
    n = len(b) - 1
    plus = np.array([2.0, dt])  # 2 + sT, ascending powers
    minus = np.array([2.0, -dt])
    num = np.zeros(1)
    den = np.zeros(1)
    for k in range(n + 1):  # z^{n−k}·(…) → (2+sT)^{n−k} (2−sT)^{k}
        term = P.polymul(P.polypow(plus, n - k), P.polypow(minus, k))
        num = P.polyadd(num, b[k] * term)
        den = P.polyadd(den, a[k] * term)
    num, den = num[::-1], den[::-1]
    num = np.trim_zeros(num, "f") if np.any(num) else np.zeros(1)
    lead = den[0]
    return num / lead, den / lead


def _mul(*tfs):
    num, den = np.ones(1), np.ones(1)
    for n, d in tfs:
        num = np.polymul(num, n)
        den = np.polymul(den, d)
    return num, den


def _add(t1, t2):
    (n1, d1), (n2, d2) = t1, t2
    return np.polyadd(np.polymul(n1, d2), np.polymul(n2, d1)), np.polymul(d1, d2)


def _freq(tf, w: np.ndarray) -> np.ndarray:
    n, d = tf
    s = 1j * np.asarray(w, dtype=float)
    return np.polyval(n, s) / np.polyval(d, s)


def loop_delay_s(params: ControllerParams, actuator, sensor_delay_s: float = 0.0) -> float:
    """Lumped loop delay T_d = T/2 (zero-order hold) + actuator transport delay (whole control
    periods, as the plant realises it) + sensor delay, s."""
    dt = params.dt
    return 0.5 * dt + actuator.delay_steps(dt) * dt + float(sensor_delay_s)


def _controller_tfs(params: ControllerParams, heel_trim: bool):
    """(C_g, C_h): gain part at factor 1 (raw gains K) and heel-trim part, φ → δ_cmd."""
    dt = params.dt
    lb0, lb1, lb2, la1, la2 = params.lowpass
    lp = inverse_tustin((lb0, lb1, lb2), (1.0, la1, la2), dt)
    nb0, nb1, nb2, na1, na2 = params.notch_coef
    nt = inverse_tustin((nb0, nb1, nb2), (1.0, na1, na2), dt) if params.notch_hz > 0 else (np.ones(1), np.ones(1))
    d_a = inverse_tustin((params.accel_coef[0], params.accel_coef[1]), (1.0, params.accel_coef[2]), dt)
    cond = _mul(nt, lp)
    k_r, k_p, k_a = params.k_roll, params.k_rate, params.k_accel
    s_tf = (np.array([1.0, 0.0]), np.ones(1))
    if params.rate_source == "derivative":
        d_d = inverse_tustin((params.deriv_coef[0], params.deriv_coef[1]), (1.0, params.deriv_coef[2]), dt)
        rate = d_d  # p_f = D_d · φ_f
    else:
        rate = s_tf  # the sensor measures p = s φ, through the same notch and low-pass
    inner = _add((np.array([k_r]), np.ones(1)), _mul((np.array([k_p]), np.ones(1)), rate))
    inner = _add(inner, _mul((np.array([k_a]), np.ones(1)), rate, d_a))
    c_g = _mul(cond, inner)
    c_h = None
    if heel_trim and params.heel_gain != 0.0:
        # heel_i += heel_gain·dt·heel_lp per step, heel_lp a first-order low-pass (τ_h) of φ_f
        c_h = _mul(cond, (np.array([params.heel_gain]), np.array([params.heel_tau, 1.0, 0.0])))
    return c_g, c_h


def _tf_to_ss(tf):
    import control

    n, d = tf
    return control.ss(control.tf(n, d))


@dataclass
class LoopAtSpeed:
    """The linear loop at one speed, with the controller gains scaled by ``factor`` later.

    Attributes (SI): ``lin`` the plant coefficients; ``plant`` = K_f/(I s² + B s + C);
    ``gm`` = 1/(I s² + B s + C) (φ per N·m of wave moment); ``actuator`` = Padé(T_d)/(τ s + 1);
    ``c_gain`` the controller at factor 1 (raw base gains); ``c_heel`` the heel-trim part (or None,
    not scaled by the factor, as in the law). All as (num, den) descending-power pairs.
    """

    lin: LinearRoll
    params: ControllerParams
    delay_s: float
    tau_s: float
    plant: tuple
    actuator: tuple
    c_gain: tuple
    c_heel: tuple | None
    _ss: dict = field(default_factory=dict, repr=False)

    def controller(self, factor: float):
        """C(s) = factor·C_g + C_h as (num, den)."""
        c = (factor * self.c_gain[0], self.c_gain[1])
        return c if self.c_heel is None else _add(c, self.c_heel)

    def loop(self, factor: float):
        """L(s) = C(s)·A(s)·K_f G(s) (positive = restoring: negative feedback)."""
        return _mul(self.controller(factor), self.actuator, self.plant)

    def loop_ss(self, factor: float):
        """L as a python-control state-space system (series of the small blocks)."""
        import control

        if "pa" not in self._ss:
            self._ss["pa"] = _tf_to_ss(self.plant) * _tf_to_ss(self.actuator)
            self._ss["cg"] = _tf_to_ss(self.c_gain)
            self._ss["ch"] = _tf_to_ss(self.c_heel) if self.c_heel is not None else None
        c = factor * self._ss["cg"]
        if self._ss["ch"] is not None:
            c = control.parallel(c, self._ss["ch"])
        return control.series(c, self._ss["pa"])

    def closed_loop_poles(self, factor: float) -> np.ndarray:
        """Poles of 1/(1 + L) (rad/s), from the state-space loop with unit negative feedback."""
        ls = self.loop_ss(factor)
        a, b, c, d = (np.asarray(x, dtype=float) for x in (ls.A, ls.B, ls.C, ls.D))
        dd = float(d[0, 0])
        acl = a - b @ c / (1.0 + dd)
        return np.linalg.eigvals(acl)

    def with_damping(self, damping_n_m_s: float) -> "LoopAtSpeed":
        """The same loop with another hull damping B_e (N·m·s/rad)."""
        lin = replace(self.lin, damping_n_m_s=float(damping_n_m_s))
        i = lin.inertia_kg_m2
        plant = (np.array([lin.fin_moment_per_rad / i]), np.array([1.0, lin.total_damping_n_m_s / i, lin.restoring_n_m_per_rad / i]))
        return LoopAtSpeed(lin, self.params, self.delay_s, self.tau_s, plant, self.actuator, self.c_gain, self.c_heel)


def build_loop(vessel, params: ControllerParams, speed_ms: float, options: DesignOptions = DesignOptions()) -> LoopAtSpeed:
    """The linear loop of ``vessel`` (a :class:`hil.config.Vessel`) with ``params`` at ``speed_ms``.

    The controller part uses the raw gains of ``params`` (its schedule is *not* applied: pass the
    factor to the methods of :class:`LoopAtSpeed`).
    """
    import control

    lin = linear_roll(vessel.params, (vessel.fin_port, vessel.fin_stbd), speed_ms, options.roll_amplitude_rad)
    i = lin.inertia_kg_m2
    plant = (np.array([lin.fin_moment_per_rad / i]), np.array([1.0, lin.total_damping_n_m_s / i, lin.restoring_n_m_per_rad / i]))
    act = vessel.actuator_stbd
    td = loop_delay_s(params, act, options.sensor_delay_s)
    tau = act.time_constant_s
    lag = (np.ones(1), np.array([tau, 1.0])) if tau > 0 else (np.ones(1), np.ones(1))
    if td > 0 and options.pade_order > 0:
        pn, pd = control.pade(td, options.pade_order)
        delay = (np.asarray(pn, float) / pd[0], np.asarray(pd, float) / pd[0])
    else:
        delay = (np.ones(1), np.ones(1))
    c_g, c_h = _controller_tfs(params, options.heel_trim)
    return LoopAtSpeed(lin, params, td, tau, plant, _mul(lag, delay), c_g, c_h)


# ----------------------------------------------------------------------------------------------
# analysis at one speed
# ----------------------------------------------------------------------------------------------


def dominant_pair(loop: LoopAtSpeed, factor: float) -> tuple[float, float]:
    """(ζ, ω_n) of the closed-loop roll pole pair at ``factor``.

    The roll pair is the complex pole nearest to the one predicted by the unfiltered law:
    (I + f K_a K_f) s² + (B + f K_p K_f) s + (C + f K_φ K_f) = 0. The filter, actuator and delay
    poles lie a decade or more above the roll frequency, so the choice is unambiguous; when no
    complex pole lies within |p_pred| of the prediction the pair has split into real poles: ζ = 1.
    """
    lin, p = loop.lin, loop.params
    kf = lin.fin_moment_per_rad
    i = lin.inertia_kg_m2 + factor * p.k_accel * kf
    b = lin.total_damping_n_m_s + factor * p.k_rate * kf
    c = lin.restoring_n_m_per_rad + factor * p.k_roll * kf
    pred = np.roots([i, b, c])
    pred = pred[np.argmax(pred.imag)]
    poles = loop.closed_loop_poles(factor)
    cands = poles[poles.imag > 1e-9]
    if cands.size:
        k = int(np.argmin(np.abs(cands - pred)))
        pole = cands[k]
        if abs(pole - pred) < abs(pred):
            wn = abs(pole)
            return float(-pole.real / wn), float(wn)
    return 1.0, float(abs(pred))


def wave_grid(sea: SeaState, vessel, speed_ms: float, n: int = 6000):
    """(ω_e magnitudes, moment spectrum weights S_M(ω) dω) on the plant's synthesis band."""
    from plant.excitation import roll_moment_model
    from plant.spectra import encounter_frequency, frequency_band

    lo, hi = frequency_band(sea.spectrum, 1e-3)
    w = np.linspace(lo, hi, n)
    x = roll_moment_model(vessel.wave_moment, vessel.params).transfer(w, sea.heading_rad)
    sm = np.abs(x) ** 2 * np.asarray(sea.spectrum(w), dtype=float)
    dw = np.full(n, (hi - lo) / (n - 1))
    dw[0] *= 0.5
    dw[-1] *= 0.5
    we = np.abs(encounter_frequency(w, speed_ms, sea.heading_rad))
    return we, sm * dw


def response_rms(loop: LoopAtSpeed, factor: float | None, we: np.ndarray, weights: np.ndarray):
    """RMS (σ_φ, σ_p, σ_δ, σ_δ̇) in rad, rad/s for a wave-moment spectrum given as samples.

    ``we``: |encounter frequency| of each sample, rad/s; ``weights``: S_M·Δω of each sample, (N·m)²;
    σ_x² = Σ |H_x(j ω_e)|² · weight. ``factor`` None = fins centred (open loop), else gains =
    factor·K_base. Uses the loop's hull damping as it stands (no statistical linearisation).
    """
    g = _freq((np.ones(1) / loop.lin.inertia_kg_m2, loop.plant[1]), we)  # φ/M
    if factor is None:
        phi = g
        fin = np.zeros_like(g)
    else:
        lo = _freq(loop.loop(factor), we)
        phi = g / (1.0 + lo)
        fin = _freq(_mul(loop.controller(factor), loop.actuator), we) * phi
    v = lambda h: float(math.sqrt(max(0.0, np.sum(np.abs(h) ** 2 * weights))))  # noqa: E731
    return v(phi), v(phi * we), v(fin), v(fin * we)


def _stochastic_rms(loop: LoopAtSpeed, vessel, factor, we, weights):
    """RMS with the quadratic damping statistically linearised: B = B1 + √(8/π) σ_p B2 (fixed point)."""
    b1, b2 = vessel.params.b1_n_m_s, vessel.params.b2_n_m_s2
    lp = loop.with_damping(b1)
    out = response_rms(lp, factor, we, weights)
    for _ in range(60):
        lp = loop.with_damping(b1 + _SQRT_8_PI * out[1] * b2)
        new = response_rms(lp, factor, we, weights)
        done = abs(new[0] - out[0]) <= 1e-6 * max(new[0], 1e-12)
        out = new
        if done:
            break
    return out


@dataclass(frozen=True)
class SpeedReport:
    """Linear-loop results at one speed (trade units at this edge; names carry them).

    factor: total multiplier on the base gains (s(U)·trim); zeta, omega_n_rad_s: dominant pair;
    gain_margin_db (inf when the phase never crosses −180°), phase_margin_deg and their crossover
    frequencies; max_sensitivity |S|max and its frequency; roll RMS off/on, RR = 1 − σ_on/σ_off; fin
    angle and rate RMS; the usable limits they were checked against.
    """

    speed_kn: float
    factor: float
    passive_zeta: float
    zeta: float
    omega_n_rad_s: float
    gain_margin_db: float
    phase_crossover_rad_s: float
    phase_margin_deg: float
    gain_crossover_rad_s: float
    max_sensitivity: float
    max_sensitivity_rad_s: float
    roll_rms_off_deg: float
    roll_rms_on_deg: float
    roll_reduction: float
    fin_rms_deg: float
    fin_rate_rms_deg_s: float
    angle_usable_deg: float
    rate_limit_deg_s: float
    bandwidth_limit_rad_s: float
    stable: bool

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


def usable_angle_rad(params: ControllerParams, actuator, speed_ms: float) -> float:
    """Fin angle the law can use at ``speed_ms``: min(mechanical limits, stall − margin, load limit)."""
    return min(params.angle_limit, actuator.angle_limit_rad, params.stall_angle - params.stall_margin,
               params.load_limit_angle(speed_ms))


def _margins(loop: LoopAtSpeed, factor: float):
    import control

    if factor == 0.0 and loop.c_heel is None:  # no feedback at all: nothing to cross
        return math.inf, math.nan, math.inf, math.nan
    gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(loop.loop_ss(factor))
    gm_db = 20.0 * math.log10(gm) if gm is not None and np.isfinite(gm) and gm > 0 else math.inf
    return gm_db, float(wpc), float(pm), float(wgc)


def _max_sensitivity(loop: LoopAtSpeed, factor: float) -> tuple[float, float]:
    """|S|max = max |1/(1 + L(jω))| on a log grid 1e-3 … 1e3 rad/s, refined by golden section."""
    from scipy.optimize import minimize_scalar

    lo = loop.loop(factor)
    w = np.geomspace(1e-3, 1e3, 4000)
    s = np.abs(1.0 / (1.0 + _freq(lo, w)))
    k = int(np.argmax(s))
    a, b = w[max(k - 1, 0)], w[min(k + 1, w.size - 1)]
    if b > a:
        res = minimize_scalar(lambda x: -abs(1.0 / (1.0 + _freq(lo, np.array([x]))[0])), bounds=(a, b), method="bounded",
                              options={"xatol": 1e-9 * b})
        if -res.fun > s[k]:
            return float(-res.fun), float(res.x)
    return float(s[k]), float(w[k])


def analyse(loop: LoopAtSpeed, vessel, factor: float, sea: SeaState, options: DesignOptions = DesignOptions()) -> SpeedReport:
    """Every result at one speed for gains = ``factor``·K_base."""
    u = loop.lin.speed_ms
    zeta0, _ = dominant_pair(loop, 0.0)
    zeta, wn = dominant_pair(loop, factor)
    poles = loop.closed_loop_poles(factor)
    stable = bool(np.all(poles.real < 0.0))
    gm_db, wpc, pm, wgc = _margins(loop, factor)
    ms, wms = _max_sensitivity(loop, factor)
    we, weights = wave_grid(sea, vessel, u)
    off = _stochastic_rms(loop, vessel, None, we, weights)
    on = _stochastic_rms(loop, vessel, factor, we, weights)
    p = loop.params
    act = vessel.actuator_stbd
    rr = 1.0 - on[0] / off[0] if off[0] > 0 else math.nan
    return SpeedReport(
        speed_kn=u / KNOT, factor=factor, passive_zeta=zeta0, zeta=zeta, omega_n_rad_s=wn,
        gain_margin_db=gm_db, phase_crossover_rad_s=wpc, phase_margin_deg=pm, gain_crossover_rad_s=wgc,
        max_sensitivity=ms, max_sensitivity_rad_s=wms,
        roll_rms_off_deg=math.degrees(off[0]), roll_rms_on_deg=math.degrees(on[0]), roll_reduction=rr,
        fin_rms_deg=math.degrees(on[2]), fin_rate_rms_deg_s=math.degrees(on[3]),
        angle_usable_deg=math.degrees(usable_angle_rad(p, act, u)),
        rate_limit_deg_s=math.degrees(min(p.rate_limit, act.rate_limit_rad_s)),
        bandwidth_limit_rad_s=options.bandwidth_fraction / (loop.tau_s + loop.delay_s),
        stable=stable,
    )  # fmt: skip


def analyse_controller(vessel, params: ControllerParams, speeds_ms, sea: SeaState,
                       options: DesignOptions = DesignOptions()) -> list[SpeedReport]:
    """Analyse a controller as written (its own schedule s(U) and ``options.trim``) at each speed."""
    out = []
    for u in speeds_ms:
        loop = build_loop(vessel, params, u, options)
        out.append(analyse(loop, vessel, params.speed_factor(u) * options.trim, sea, options))
    return out


# ----------------------------------------------------------------------------------------------
# design
# ----------------------------------------------------------------------------------------------

LIMITS = ("fin angle", "fin rate", "gain margin", "phase margin", "sensitivity", "bandwidth", "stability")


@dataclass(frozen=True)
class SpeedDesign:
    """The factor chosen at one speed and why.

    target_factor: factor that gives the target damping (nan when no factor ≤ max_factor does).
    factor: the factor used (= target_factor unless a constraint caps it).
    limited_by: names of the constraints that cap it (empty when the target is met).
    note: one line for a person.
    """

    speed_kn: float
    target_factor: float
    factor: float
    limited_by: tuple[str, ...]
    note: str


def _violations(loop: LoopAtSpeed, vessel, f: float, opts: DesignOptions, we, weights) -> tuple[str, ...]:
    bad = []
    poles = loop.closed_loop_poles(f)
    if not np.all(poles.real < 0.0):
        return ("stability",)
    u = loop.lin.speed_ms
    p = loop.params
    act = vessel.actuator_stbd
    rms = _stochastic_rms(loop, vessel, f, we, weights)
    if opts.peak_factor * rms[2] > usable_angle_rad(p, act, u):
        bad.append("fin angle")
    if opts.peak_factor * rms[3] > min(p.rate_limit, act.rate_limit_rad_s):
        bad.append("fin rate")
    if f > 0.0:
        gm_db, _wpc, pm, wgc = _margins(loop, f)
        if gm_db < opts.min_gain_margin_db:
            bad.append("gain margin")
        if np.isfinite(pm) and pm < opts.min_phase_margin_deg:
            bad.append("phase margin")
        if np.isfinite(wgc) and wgc > opts.bandwidth_fraction / (loop.tau_s + loop.delay_s):
            bad.append("bandwidth")
        ms, _ = _max_sensitivity(loop, f)
        if ms > opts.max_sensitivity:
            bad.append("sensitivity")
    return tuple(bad)


def design_speed(vessel, base: ControllerParams, speed_ms: float, sea: SeaState,
                 options: DesignOptions = DesignOptions()) -> SpeedDesign:
    """Factor on the base gains at one speed (see the module notes)."""
    from scipy.optimize import brentq

    loop = build_loop(vessel, base, speed_ms, options)
    kn_ = speed_ms / KNOT
    target = options.target_damping
    z = lambda f: dominant_pair(loop, f)[0] - target  # noqa: E731
    if z(0.0) >= 0.0:
        return SpeedDesign(kn_, 0.0, 0.0, (), f"passive damping {dominant_pair(loop, 0.0)[0]:.3f} already meets the target")
    grid = np.concatenate(([0.0], np.geomspace(1e-3, options.max_factor, 61)))
    f_target = math.nan
    prev = 0.0
    for f in grid[1:]:
        if z(f) >= 0.0:
            f_target = float(brentq(z, prev, f, xtol=1e-10, rtol=1e-10))
            break
        prev = f
    we, weights = wave_grid(sea, vessel, speed_ms)
    f_try = f_target if math.isfinite(f_target) else options.max_factor
    bad = _violations(loop, vessel, f_try, options, we, weights)
    if not bad and math.isfinite(f_target):
        return SpeedDesign(kn_, f_target, f_target, (), "target met")
    # largest factor below f_try with no violation: scan upward on a geometric grid (guards against a
    # non-monotone margin), then bisect between the last good and the first bad point (0.1 %)
    # the constraints reported are those violated just above the factor chosen (the binding ones)
    limited = set(bad)
    lo, hi = 0.0, f_try
    for f in np.geomspace(1e-3 * f_try, f_try, 25)[:-1]:
        v = _violations(loop, vessel, f, options, we, weights)
        if v:
            limited = set(v)
            hi = f
            break
        lo = f
    while hi - lo > 1e-3 * hi:
        mid = 0.5 * (lo + hi)
        v = _violations(loop, vessel, mid, options, we, weights)
        if v:
            hi = mid
            limited = set(v)
        else:
            lo = mid
    zeta, _ = dominant_pair(loop, lo)
    why = ", ".join(x for x in LIMITS if x in limited)
    if math.isfinite(f_target):
        note = f"target damping {target:g} not reached: limited by {why} (damping {zeta:.3f})"
    else:
        note = f"target damping {target:g} not reached with factor <= {options.max_factor:g}"
        if why:
            note += f"; limited by {why}"
        note += f" (damping {zeta:.3f})"
    return SpeedDesign(kn_, f_target, float(lo), tuple(x for x in LIMITS if x in limited), note)


@dataclass(frozen=True)
class TuneResult:
    """A complete design: per-speed designs, the tuned parameters and their analysis."""

    designs: tuple[SpeedDesign, ...]
    params: ControllerParams
    gains: tuple[float, float, float]  # K_φ (rad/rad), K_p (s), K_a (s²) at the reference speed
    speeds_kn: tuple[float, ...]
    factors: tuple[float, ...]
    reports: tuple[SpeedReport, ...]
    sea: SeaState
    options: DesignOptions
    delay_s: float  # lumped loop delay T_d, s


def _sig(x: float, digits: int = 4) -> float:
    if x == 0.0 or not math.isfinite(x):
        return x
    return float(f"{x:.{digits}g}")


def tuned_params(base: ControllerParams, speeds_kn, factors) -> tuple[ControllerParams, tuple, tuple, tuple]:
    """Base parameters with a factor table: gains rescaled so the table reads 1 at the reference speed.

    Returns ``(params, gains, speeds_kn, factors)`` with gains and factors rounded to 4 significant
    digits (what the file holds).
    """
    speeds_kn = tuple(float(s) for s in speeds_kn)
    fs = [float(f) for f in factors]
    scale = ControllerParams.speed_factor_table(tuple(s * KNOT for s in speeds_kn), tuple(fs), base.u_ref)
    if not scale > 0.0:
        scale = max(fs) if max(fs) > 0.0 else 1.0
    gains = tuple(_sig(g * scale) for g in (base.k_roll, base.k_rate, base.k_accel))
    table = tuple(_sig(f / scale) for f in fs)
    params = replace(
        base, k_roll=gains[0], k_rate=gains[1], k_accel=gains[2], schedule_table=True,
        table_speeds=tuple(s * KNOT for s in speeds_kn), table_factors=table,
    )  # fmt: skip
    return params, gains, speeds_kn, table


def design(vessel, base: ControllerParams, speeds_kn, sea: SeaState, options: DesignOptions = DesignOptions()) -> TuneResult:
    """Design every speed, build the factor table and analyse the result as it will be written."""
    designs = tuple(design_speed(vessel, base, s * KNOT, sea, options) for s in speeds_kn)
    params, gains, speeds, table = tuned_params(base, speeds_kn, [d.factor for d in designs])
    reports = tuple(analyse_controller(vessel, params, [s * KNOT for s in speeds], sea, options))
    delay = loop_delay_s(base, vessel.actuator_stbd, options.sensor_delay_s)
    return TuneResult(designs, params, gains, speeds, table, reports, sea, options, delay)


# ----------------------------------------------------------------------------------------------
# writing the controller file
# ----------------------------------------------------------------------------------------------


def tuned_document(base_doc: dict, result: TuneResult) -> dict:
    """The base controller document with the gains and the schedule replaced (trade units)."""
    import copy

    doc = copy.deepcopy(base_doc)
    ctl = doc["controller"]
    g = ctl["gains"]
    g["roll"], g["roll_rate_s"], g["roll_accel_s2"] = result.gains  # deg/deg = rad/rad, s, s²
    old = ctl["schedule"]
    ctl["schedule"] = {
        "rule": "table",
        "reference_speed_kn": old["reference_speed_kn"],
        "speeds_kn": list(result.speeds_kn),
        "factors": list(result.factors),
        "speed_filter_s": old["speed_filter_s"],
    }
    if "name" in ctl:
        ctl["name"] = f"{ctl['name']} (tuned)"
    return doc


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError(f"cannot write {v!r} to TOML")
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def toml_text(doc: dict, header: str = "") -> str:
    """A TOML document of nested tables of scalars and arrays; checked by re-reading with tomllib."""
    import tomllib

    lines: list[str] = [header.rstrip("\n")] if header else []

    def walk(prefix: str, table: dict) -> None:
        scalars = [(k, v) for k, v in table.items() if not isinstance(v, dict)]
        subs = [(k, v) for k, v in table.items() if isinstance(v, dict)]
        if prefix:
            lines.append("")
            lines.append(f"[{prefix}]")
        for k, v in scalars:
            lines.append(f"{k} = {_toml_value(v)}")
        for k, v in subs:
            walk(f"{prefix}.{k}" if prefix else k, v)

    walk("", doc)
    text = "\n".join(lines).lstrip("\n") + "\n"
    if tomllib.loads(text) != doc:  # pragma: no cover - a bug in the writer
        raise ValueError("TOML writer did not round-trip")
    return text
