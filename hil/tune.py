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
    "GainEval",
    "GainLoop",
    "optimise_gains",
    "design_speed_rr",
    "design_rr",
    "noise_rms",
    "OBJECTIVES",
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
    objective: ``"damping"`` (keep the base gain shape, reach ``target_damping``) or
        ``"roll-reduction"`` (choose K_φ, K_p, K_a ≥ 0 to maximise the predicted roll reduction in the
        design sea under the same constraints; see :func:`design_speed_rr`).
    roll_noise_rad, rate_noise_rad_s: motion-sensor noise, 1σ of each sample the controller receives
        (quantisation folded in as q²/12). The controller passes it to the fin demand; the predicted
        fin angle and rate (and the constraints on them) include that part. 0 = noise-free sensor.
    max_added: bounds of the roll-reduction search in physical terms at each speed — the added
        stiffness K_φ K_f / C, the added damping ratio K_p K_f / (2√(C I)) and the added inertia
        K_a K_f / I (K_f the fin moment per rad, C, I the hull restoring and inertia).
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
    objective: str = "damping"
    roll_noise_rad: float = 0.0
    rate_noise_rad_s: float = 0.0
    max_added: tuple[float, float, float] = (1.0, 2.0, 2.0)


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
    return _stochastic_rms_loop(loop, vessel, factor, we, weights)[0]


def _stochastic_rms_loop(loop: LoopAtSpeed, vessel, factor, we, weights):
    """(:func:`response_rms` at the fixed point, the loop with the converged damping)."""
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
    return out, lp


_N_NOISE = 2000


def _noise_theta(dt: float):
    """Midpoint grid of θ = ωT in (0, π) and the analogue frequencies ω_a = (2/T)·tan(θ/2) at which the
    continuous equivalents of the controller's bilinear filters equal the discrete ones."""
    th = (np.arange(_N_NOISE) + 0.5) * (math.pi / _N_NOISE)
    return th, 2.0 / dt * np.tan(0.5 * th)


def _noise_paths(params: ControllerParams, heel_trim: bool):
    """(H_φ, H_p) at unit gains per basis: the controller paths from roll-sensor noise and from
    rate-sensor noise to the demand, as lists of (num, den) matching (K_φ, K_p, K_a, heel)."""
    cr, cp, ca, ch = _controller_basis(params, heel_trim)
    if params.rate_source == "derivative":  # the rate is derived from the noisy roll signal
        return [cr, cp, ca, ch], [None, None, None, None]
    # the sensor's rate goes through the same conditioning; the accel path differentiates it
    inv_s = (np.ones(1), np.array([1.0, 0.0]))
    return [cr, None, None, ch], [None, _mul(cp, inv_s), _mul(ca, inv_s), None]


def noise_rms(loop: LoopAtSpeed, gains, options: DesignOptions) -> tuple[float, float, float, float]:
    """RMS (demand, demand rate, fin, fin rate) from motion-sensor noise, rad and rad/s.

    The controller receives white noise (one independent sample per control period, σ from
    ``options``) on roll and, with ``rate_source = "sensor"``, on roll rate. Its filters are bilinear
    designs, so at θ = ωT the discrete response equals the continuous equivalent at ω_a = (2/T)·tan(θ/2)
    (Oppenheim & Schafer, 3rd ed., §7.2). σ² = σ_n²·(1/π)∫₀^π |H(θ)|² dθ for white discrete noise;
    the demand rate per control period multiplies by |1 − e^{−jθ}|/T; the loop closes through
    S = 1/(1 + L(jω_a)); the fin follows through the servo lag 1/(1 + jωτ) at ω = θ/T. The roll motion
    the noise causes is neglected (the ship hardly responds above 2 rad/s). ``gains`` = (K_φ, K_p, K_a)
    in SI (the heel-trim part, when in the loop, enters with weight 1).
    """
    sr, sp = float(options.roll_noise_rad), float(options.rate_noise_rad_s)
    if sr == 0.0 and sp == 0.0:
        return 0.0, 0.0, 0.0, 0.0
    p = loop.params
    th, wa = _noise_theta(p.dt)
    hf, hp = _noise_paths(p, options.heel_trim)
    k = (gains[0], gains[1], gains[2], 1.0)
    c_all = sum(ki * _freq(b, wa) for ki, b in zip(k, _controller_basis(p, options.heel_trim)) if b is not None)
    sens = 1.0 / (1.0 + c_all * _freq(loop.actuator, wa) * _freq(loop.plant, wa))
    var = np.zeros(th.size)
    for paths, sig in ((hf, sr), (hp, sp)):
        if sig == 0.0 or all(b is None for b in paths):
            continue
        h = sum(ki * _freq(b, wa) for ki, b in zip(k, paths) if b is not None)
        var = var + sig * sig * np.abs(h * sens) ** 2
    diff2 = (2.0 * np.sin(0.5 * th) / p.dt) ** 2
    lag2 = 1.0 / (1.0 + (loop.tau_s * th / p.dt) ** 2)
    m = lambda x: float(math.sqrt(max(0.0, float(np.mean(x)))))  # noqa: E731  (1/π)∫₀^π on midpoints
    return m(var), m(var * diff2), m(var * lag2), m(var * lag2 * diff2)


def _controller_basis(params: ControllerParams, heel_trim: bool):
    """(C_φ, C_p, C_a, C_h): the controller φ → δ_cmd per unit K_φ, K_p, K_a, and the heel-trim part
    (None when not in the loop), each (num, den) in descending powers of s."""
    dt = params.dt
    lb0, lb1, lb2, la1, la2 = params.lowpass
    lp = inverse_tustin((lb0, lb1, lb2), (1.0, la1, la2), dt)
    nb0, nb1, nb2, na1, na2 = params.notch_coef
    nt = inverse_tustin((nb0, nb1, nb2), (1.0, na1, na2), dt) if params.notch_hz > 0 else (np.ones(1), np.ones(1))
    d_a = inverse_tustin((params.accel_coef[0], params.accel_coef[1]), (1.0, params.accel_coef[2]), dt)
    cond = _mul(nt, lp)
    if params.rate_source == "derivative":
        rate = inverse_tustin((params.deriv_coef[0], params.deriv_coef[1]), (1.0, params.deriv_coef[2]), dt)
    else:
        rate = (np.array([1.0, 0.0]), np.ones(1))
    c_h = None
    if heel_trim and params.heel_gain != 0.0:
        c_h = _mul(cond, (np.array([params.heel_gain]), np.array([params.heel_tau, 1.0, 0.0])))
    return cond, _mul(cond, rate), _mul(cond, rate, d_a), c_h


@dataclass(frozen=True)
class SpeedReport:
    """Linear-loop results at one speed (trade units at this edge; names carry them).

    factor: total multiplier on the base gains (s(U)·trim); zeta, omega_n_rad_s: dominant pair;
    gain_margin_db (inf when the phase never crosses −180°), phase_margin_deg (distance of L from −1
    at the gain crossover, see :func:`_margins`) and their crossover frequencies; max_sensitivity
    |S|max and its frequency; roll RMS off/on, RR = 1 − σ_on/σ_off; fin angle and rate RMS (the fin
    as the servo moves it); command (demand) angle and rate RMS, which the constraints check; the
    part of the demand rate due to sensor noise; the usable limits; the gains K_φ (rad/rad),
    K_p (s), K_a (s²) in force at that speed.
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
    command_rms_deg: float = math.nan
    command_rate_rms_deg_s: float = math.nan
    noise_command_rate_rms_deg_s: float = 0.0
    k_roll: float = math.nan
    k_rate_s: float = math.nan
    k_accel_s2: float = math.nan

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


def usable_angle_rad(params: ControllerParams, actuator, speed_ms: float) -> float:
    """Fin angle the law can use at ``speed_ms``: min(mechanical limits, stall − margin, load limit)."""
    return min(params.angle_limit, actuator.angle_limit_rad, params.stall_angle - params.stall_margin,
               params.load_limit_angle(speed_ms))


def _margins(loop: LoopAtSpeed, factor: float):
    """(gain margin dB, its frequency, phase margin deg, its frequency) over *every* crossing.

    Gain margin: the smallest 20·log10(gm) over the phase crossovers python-control finds (negative
    when |L| > 1 there). Phase margin: the smallest angular distance of L(jω_gc) from the −1 point,
    |wrap(180° + ∠L)| — python-control reports 180° + ∠L with ∠L taken in (−360°, 0°], which gives
    about −94° for a crossing at ∠L = +86° (a loop whose gain crossing lies on the rising,
    positive-phase side, as with roll-acceleration feedback); the distance from −1 is then 94°.
    A loop that is unstable is reported by its poles, not by these numbers.
    """
    import control

    if factor == 0.0 and loop.c_heel is None:  # no feedback at all: nothing to cross
        return math.inf, math.nan, math.inf, math.nan
    gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(loop.loop_ss(factor), returnall=True)
    gm, pm, wpc, wgc = (np.atleast_1d(np.asarray(x, dtype=float)) for x in (gm, pm, wpc, wgc))
    ok = np.isfinite(gm) & (gm > 0)
    if np.any(ok):
        db = 20.0 * np.log10(gm[ok])
        k = int(np.argmin(db))
        gm_db, w_pc = float(db[k]), float(wpc[ok][k])
    else:
        gm_db, w_pc = math.inf, math.nan
    if pm.size:
        dist = np.abs(np.mod(pm + 180.0, 360.0) - 180.0)
        k = int(np.argmin(dist))
        pm_deg, w_gc = float(dist[k]), float(wgc[k])
    else:
        pm_deg, w_gc = math.inf, math.nan
    return gm_db, w_pc, pm_deg, w_gc


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
    on, cmd, noise = _fin_rms(loop, vessel, factor, we, weights, options)
    p = loop.params
    act = vessel.actuator_stbd
    rr = 1.0 - on[0] / off[0] if off[0] > 0 else math.nan
    gains = _effective_gains(loop, factor)
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
        command_rms_deg=math.degrees(cmd[0]), command_rate_rms_deg_s=math.degrees(cmd[1]),
        noise_command_rate_rms_deg_s=math.degrees(noise[1]),
        k_roll=gains[0], k_rate_s=gains[1], k_accel_s2=gains[2],
    )  # fmt: skip


def _effective_gains(loop: LoopAtSpeed, factor: float) -> tuple[float, float, float]:
    p = loop.params
    return factor * p.k_roll, factor * p.k_rate, factor * p.k_accel


def _fin_rms(loop: LoopAtSpeed, vessel, factor: float, we, weights, options: DesignOptions):
    """(on, command, noise): ``on`` = (σ_φ, σ_p, σ_fin, σ_fin-rate) with the sensor-noise part of the
    fin added in quadrature; ``command`` = (σ_δcmd, σ_δcmd-rate), waves + noise; ``noise`` the noise
    parts alone (:func:`noise_rms`). rad, rad/s."""
    on, lp = _stochastic_rms_loop(loop, vessel, factor, we, weights)
    phi = _freq((np.ones(1) / lp.lin.inertia_kg_m2, lp.plant[1]), we) / (1.0 + _freq(lp.loop(factor), we))
    c = _freq(lp.controller(factor), we) * phi
    wave_cmd = (float(np.sqrt(np.sum(np.abs(c) ** 2 * weights))), float(np.sqrt(np.sum(np.abs(c * we) ** 2 * weights))))
    noise = noise_rms(loop, _effective_gains(loop, factor), options)
    q = lambda a, b: math.hypot(a, b)  # noqa: E731  independent parts add in power
    on = (on[0], on[1], q(on[2], noise[2]), q(on[3], noise[3]))
    return on, (q(wave_cmd[0], noise[0]), q(wave_cmd[1], noise[1])), noise


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

    target_factor: factor that gives the target damping (nan when no factor ≤ max_factor does; nan
        for the roll-reduction objective).
    factor: the factor used (= target_factor unless a constraint caps it); for the roll-reduction
        objective the factor on the common gain shape.
    limited_by: names of the constraints that cap it (empty when the target is met); for the
        roll-reduction objective the constraints within 2 % of their limit at the optimum.
    note: one line for a person.
    gains: roll-reduction objective: (K_φ rad/rad, K_p s, K_a s²) at this speed with the common shape;
        roll_reduction: their predicted RR (design model). free_gains / free_roll_reduction: the best
        gains with a shape of this speed's own, and their RR (what a per-gain schedule could give).
    """

    speed_kn: float
    target_factor: float
    factor: float
    limited_by: tuple[str, ...]
    note: str
    gains: tuple[float, ...] = ()
    roll_reduction: float = math.nan
    free_gains: tuple[float, ...] = ()
    free_roll_reduction: float = math.nan


def _violations(loop: LoopAtSpeed, vessel, f: float, opts: DesignOptions, we, weights) -> tuple[str, ...]:
    bad = []
    poles = loop.closed_loop_poles(f)
    if not np.all(poles.real < 0.0):
        return ("stability",)
    u = loop.lin.speed_ms
    p = loop.params
    act = vessel.actuator_stbd
    _on, cmd, _noise = _fin_rms(loop, vessel, f, we, weights, opts)
    if opts.peak_factor * cmd[0] > usable_angle_rad(p, act, u):
        bad.append("fin angle")
    if opts.peak_factor * cmd[1] > min(p.rate_limit, act.rate_limit_rad_s):
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


# ----------------------------------------------------------------------------------------------
# roll-reduction design: the gain shape is chosen too
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GainEval:
    """One candidate (K_φ, K_p, K_a) at one speed, from :class:`GainLoop` (SI; RMS in rad, rad/s).

    ``ratio`` = σ_φ,on/σ_φ,off (1 − RR); ``slack``: one entry per constraint, ≥ 0 when it is met
    (relative distance to its limit), in the order of ``GainLoop.CONSTRAINTS``.
    """

    gains: tuple[float, float, float]
    ratio: float
    roll_on: float
    command: tuple[float, float]
    slack: tuple[float, ...]

    @property
    def feasible(self) -> bool:
        return all(x >= 0.0 for x in self.slack)

    @property
    def roll_reduction(self) -> float:
        return 1.0 - self.ratio


class GainLoop:
    """The linear loop at one speed with K_φ, K_p, K_a free — a fast evaluator for the optimiser.

    Everything is precomputed once per speed: the frequency responses of the controller's basis
    paths (:func:`_controller_basis`), the servo and delay on the wave grid, on a log grid for the
    margins and on the noise grid, and a state-space form whose closed-loop A matrix is affine in the
    gains (A_cl = A_0 + Σ K_i M_i), so the poles of a candidate are one 20×20 eigenvalue problem.
    The RMS figures are the same computation as :func:`analyse` (statistical linearisation, noise);
    the margins are read from a 4000-point log grid (0.01–300 rad/s) instead of python-control's
    exact crossings — the design found is re-checked with :func:`_violations` afterwards.

    ``scale`` (SI per unit): K_φ = x₀·C/K_f, K_p = x₁·2√(CI)/K_f, K_a = x₂·I/K_f — added stiffness
    fraction, added damping ratio, added inertia fraction.
    """

    CONSTRAINTS = ("stability", "gain margin", "phase margin", "sensitivity", "bandwidth", "fin angle", "fin rate")

    def __init__(self, vessel, params: ControllerParams, speed_ms: float, sea: SeaState,
                 options: DesignOptions = DesignOptions()):
        import control

        self.vessel, self.options = vessel, options
        base = replace(params, k_roll=1.0, k_rate=0.0, k_accel=0.0)
        self.loop = loop = build_loop(vessel, base, speed_ms, options)
        self.params = params
        lin = loop.lin
        self.kf, self.inertia, self.c = lin.fin_moment_per_rad, lin.inertia_kg_m2, lin.restoring_n_m_per_rad
        self.b_fin = lin.total_damping_n_m_s - lin.damping_n_m_s
        self.scale = np.array([self.c / self.kf, 2.0 * math.sqrt(self.c * self.inertia) / self.kf, self.inertia / self.kf])
        basis = _controller_basis(params, options.heel_trim)
        self.has_heel = basis[3] is not None
        # wave grid
        self.we, self.weights = wave_grid(sea, vessel, speed_ms)
        self.cw = [_freq(b, self.we) if b is not None else 0.0 for b in basis]
        self.aw = _freq(loop.actuator, self.we)
        off = _stochastic_rms(loop, vessel, None, self.we, self.weights)
        self.roll_off = off[0]
        # margin grid
        self.wm = np.geomspace(1e-2, 3e2, 4000)
        pa = _freq(loop.actuator, self.wm) * _freq(loop.plant, self.wm)
        self.lm = [(_freq(b, self.wm) * pa if b is not None else 0.0) for b in basis]
        # noise grid
        th, wa = _noise_theta(params.dt)
        self.th = th
        self.pa_n = _freq(loop.actuator, wa) * _freq(loop.plant, wa)
        self.cn = [_freq(b, wa) if b is not None else 0.0 for b in basis]
        hf, hp = _noise_paths(params, options.heel_trim)
        self.hf = [_freq(b, wa) if b is not None else 0.0 for b in hf]
        self.hp = [_freq(b, wa) if b is not None else 0.0 for b in hp]
        self.diff2 = (2.0 * np.sin(0.5 * th) / params.dt) ** 2
        self.lag2 = 1.0 / (1.0 + (loop.tau_s * th / params.dt) ** 2)
        # closed-loop A, affine in the gains: L = Σ K_i C_i · PA, unit negative feedback
        pa_ss = _tf_to_ss(loop.plant) * _tf_to_ss(loop.actuator)
        blocks = [control.ss(control.tf(*b)) for b in basis if b is not None]
        a_c = _blkdiag([np.asarray(b.A, float) for b in blocks])
        b_c = np.vstack([np.asarray(b.B, float) for b in blocks])
        c_blocks = [np.asarray(b.C, float) for b in blocks]
        d_blocks = [float(np.asarray(b.D, float)[0, 0]) for b in blocks]
        a_p, b_p, c_p = (np.asarray(x, float) for x in (pa_ss.A, pa_ss.B, pa_ss.C))
        if abs(float(np.asarray(pa_ss.D)[0, 0])) > 0.0:  # pragma: no cover - the plant is strictly proper
            raise ValueError("plant and actuator must be strictly proper")
        nc, npa = a_c.shape[0], a_p.shape[0]
        a0 = np.zeros((nc + npa, nc + npa))
        a0[:nc, :nc] = a_c
        a0[:nc, nc:] = -b_c @ c_p
        a0[nc:, nc:] = a_p
        self._mats = []
        col = 0
        for cb, db in zip(c_blocks, d_blocks):
            m = np.zeros_like(a0)
            m[nc:, col:col + cb.shape[1]] = b_p @ cb
            m[nc:, nc:] -= db * (b_p @ c_p)
            self._mats.append(m)
            col += cb.shape[1]
        if self.has_heel:  # the heel part has weight 1: fold it into A_0
            a0 = a0 + self._mats.pop()
        self.a0 = a0
        p = params
        act = vessel.actuator_stbd
        self.usable = usable_angle_rad(p, act, speed_ms)
        self.rate_limit = min(p.rate_limit, act.rate_limit_rad_s)
        self.bw_limit = options.bandwidth_fraction / (loop.tau_s + loop.delay_s)
        self.wn0 = math.sqrt(self.c / self.inertia)

    def gains_of(self, x) -> tuple[float, float, float]:
        """SI gains of normalised coordinates ``x``."""
        k = np.asarray(x, float) * self.scale
        return float(k[0]), float(k[1]), float(k[2])

    def poles(self, gains) -> np.ndarray:
        a = self.a0 + sum(k * m for k, m in zip(gains, self._mats))
        return np.linalg.eigvals(a)

    def evaluate(self, gains) -> GainEval:
        """Every figure the optimiser needs for gains (K_φ, K_p, K_a) (SI)."""
        o = self.options
        k = (float(gains[0]), float(gains[1]), float(gains[2]), 1.0)
        comb = lambda arrs: sum(ki * a for ki, a in zip(k, arrs))  # noqa: E731
        # stability
        maxre = float(np.max(self.poles(k[:3]).real))
        s_stab = -maxre / self.wn0
        # margins on the log grid
        lm = comb(self.lm)
        mag = np.abs(lm)
        ms = float(np.max(1.0 / np.abs(1.0 + lm)))
        up = np.nonzero(np.diff(np.sign(mag - 1.0)) != 0)[0]
        if up.size:
            near = [i if abs(mag[i] - 1) < abs(mag[i + 1] - 1) else i + 1 for i in up]
            dist = [abs(math.degrees(np.angle(-lm[i]))) for i in near]
            j = int(np.argmin(dist))
            pm, wgc = dist[j], float(self.wm[near[j]])  # the crossing _margins reports
        else:
            pm, wgc = 180.0, 0.0
        im = lm.imag
        cross = np.nonzero((np.diff(np.sign(im)) != 0) & (lm.real[:-1] < 0))[0]
        if cross.size:
            re = [lm.real[i] - im[i] * (lm.real[i + 1] - lm.real[i]) / (im[i + 1] - im[i]) for i in cross]
            gm_db = min(-20.0 * math.log10(-r) if r < 0 else math.inf for r in re)
        else:
            gm_db = math.inf
        # RMS: statistical linearisation as in _stochastic_rms
        cw = comb(self.cw)
        caw = cw * self.aw
        we, wts = self.we, self.weights
        b1, b2 = self.vessel.params.b1_n_m_s, self.vessel.params.b2_n_m_s2
        i_, c_ = self.inertia, self.c

        def rms(b_hull):
            g = 1.0 / (-i_ * we * we + 1j * (b_hull + self.b_fin) * we + c_)
            phi = g / (1.0 + self.kf * g * caw)
            return (float(np.sqrt(np.sum(np.abs(phi) ** 2 * wts))), float(np.sqrt(np.sum(np.abs(phi * we) ** 2 * wts))), phi)

        out = rms(b1)
        for _ in range(60):
            new = rms(b1 + _SQRT_8_PI * out[1] * b2)
            done = abs(new[0] - out[0]) <= 1e-6 * max(new[0], 1e-12)
            out = new
            if done:
                break
        cmd = cw * out[2]
        cmd_a = float(np.sqrt(np.sum(np.abs(cmd) ** 2 * wts)))
        cmd_r = float(np.sqrt(np.sum(np.abs(cmd * we) ** 2 * wts)))
        if o.roll_noise_rad or o.rate_noise_rad_s:
            sens = 1.0 / (1.0 + comb(self.cn) * self.pa_n)
            var = o.roll_noise_rad ** 2 * np.abs(comb(self.hf) * sens) ** 2 + o.rate_noise_rad_s ** 2 * np.abs(comb(self.hp) * sens) ** 2
            cmd_a = math.hypot(cmd_a, math.sqrt(float(np.mean(var))))
            cmd_r = math.hypot(cmd_r, math.sqrt(float(np.mean(var * self.diff2))))
        cap = lambda v: min(v, 180.0)  # noqa: E731  (inf → a finite slack for the optimiser)
        slack = (
            s_stab,
            (cap(gm_db) - o.min_gain_margin_db) / max(o.min_gain_margin_db, 1.0),
            (cap(pm) - o.min_phase_margin_deg) / max(o.min_phase_margin_deg, 1.0),
            1.0 - ms / o.max_sensitivity,
            1.0 - wgc / self.bw_limit,
            1.0 - o.peak_factor * cmd_a / self.usable,
            1.0 - o.peak_factor * cmd_r / self.rate_limit,
        )
        return GainEval(tuple(k[:3]), out[0] / self.roll_off, out[0], (cmd_a, cmd_r), slack)


def _blkdiag(mats):
    n = sum(m.shape[0] for m in mats)
    out = np.zeros((n, n))
    i = 0
    for m in mats:
        out[i:i + m.shape[0], i:i + m.shape[0]] = m
        i += m.shape[0]
    return out


def optimise_gains(gl: GainLoop, shape=None, grid: int = 8) -> GainEval | None:
    """The feasible gains with the least predicted roll RMS at one speed (None if only zero is).

    ``shape`` None: K_φ, K_p, K_a all free within ``options.max_added`` (normalised coordinates of
    :class:`GainLoop`). ``shape`` = (K_φ, K_p, K_a): gains = f·shape, only f ≥ 0 free.

    Method: a coarse grid (K_φ on 3 levels, K_p and K_a on ``grid`` levels each, or ``4·grid`` factor
    levels), then scipy.optimize.minimize with COBYLA (Powell 1994; derivative-free, inequality
    constraints = the slacks of :class:`GainEval`, bounds = the box) from the best feasible grid point.
    Every evaluated point is kept; the answer is the best *feasible* one seen, so an optimiser step
    that ends slightly outside a constraint is never returned.
    """
    from scipy.optimize import Bounds, NonlinearConstraint, minimize

    hi = np.asarray(gl.options.max_added, float)
    cache: dict = {}
    best: list = [None]

    if shape is None:
        def to_gains(u):
            return gl.gains_of(np.clip(u, 0.0, 1.0) * hi)
        starts = [np.array([a, b, c]) for a in (0.0, 0.05, 0.2) for b in np.linspace(0, 1, grid) for c in np.linspace(0, 1, grid)]
        n = 3
    else:
        sh = np.asarray(shape, float)
        if not np.any(sh > 0):
            raise ValueError("shape must have a positive gain")
        fmax = float(np.min([h * sc / g for h, sc, g in zip(hi, gl.scale, sh) if g > 0]))

        def to_gains(u):
            f = float(np.clip(u[0], 0.0, 1.0)) * fmax
            return tuple(float(f * g) for g in sh)
        starts = [np.array([u]) for u in np.linspace(0.0, 1.0, 4 * grid + 1)]
        n = 1

    def ev(u) -> GainEval:
        key = tuple(np.round(np.clip(u, 0.0, 1.0), 12))
        e = cache.get(key)
        if e is None:
            e = cache[key] = gl.evaluate(to_gains(np.asarray(key)))
            if e.feasible and (best[0] is None or e.ratio < best[0].ratio):
                best[0] = e
        return e

    for u in starts:
        ev(u)
    if best[0] is None:  # pragma: no cover - zero gains are always feasible for a stable ship
        return None
    # start from the best feasible grid point
    u0 = next(np.asarray(k) for k, e in cache.items() if e is best[0])
    minimize(lambda u: ev(u).ratio, u0, method="COBYLA", bounds=Bounds(np.zeros(n), np.ones(n)),
             constraints=[NonlinearConstraint(lambda u: np.asarray(ev(u).slack), 0.0, np.inf)],
             options={"maxiter": 400, "rhobeg": 0.5 / grid, "tol": 1e-5})
    return best[0]


def _binding(e: GainEval, tol: float = 0.02) -> tuple[str, ...]:
    return tuple(n for n, s in zip(GainLoop.CONSTRAINTS, e.slack) if s < tol)


def _exact_check(vessel, base: ControllerParams, speed_ms: float, gains, sea: SeaState, opts: DesignOptions):
    """Shrink ``gains`` (scalar, bisection to 0.1 %) until :func:`_violations` (python-control margins,
    |S|max refined, poles) finds nothing; returns (gains, shrink factor)."""
    p = replace(base, k_roll=gains[0], k_rate=gains[1], k_accel=gains[2])
    loop = build_loop(vessel, p, speed_ms, opts)
    we, weights = wave_grid(sea, vessel, speed_ms)
    if not _violations(loop, vessel, 1.0, opts, we, weights):
        return tuple(gains), 1.0
    lo, hi = 0.0, 1.0
    while hi - lo > 1e-3:
        mid = 0.5 * (lo + hi)
        if _violations(loop, vessel, mid, opts, we, weights):
            hi = mid
        else:
            lo = mid
    return tuple(lo * g for g in gains), lo


def design_speed_rr(vessel, base: ControllerParams, speed_ms: float, sea: SeaState,
                    options: DesignOptions = DesignOptions(), shape=None) -> tuple[SpeedDesign, GainEval]:
    """Gains with the largest predicted roll reduction at one speed (see :func:`optimise_gains`).

    ``shape`` None: free shape; else only a factor on ``shape``. The result is re-checked with the
    exact constraint code (:func:`_violations`) and shrunk if a grid-read margin was optimistic.
    The returned :class:`SpeedDesign` carries the gains; ``factor`` is the factor on ``shape`` (1 for
    a free shape).
    """
    gl = GainLoop(vessel, base, speed_ms, sea, options)
    e = optimise_gains(gl, shape)
    gains, shrink = _exact_check(vessel, base, speed_ms, e.gains, sea, options)
    if shrink < 1.0:
        e = gl.evaluate(gains)
    kn_ = speed_ms / KNOT
    if shape is None:
        factor = 1.0
    else:
        nz = [(g, s) for g, s in zip(gains, shape) if s > 0]
        factor = nz[0][0] / nz[0][1]
    bind = _binding(e)
    note = f"roll reduction {100 * e.roll_reduction:.1f} % (linear prediction); binding: {', '.join(bind) or 'none (search bounds)'}"
    return SpeedDesign(kn_, math.nan, float(factor), bind, note, tuple(float(g) for g in gains), e.roll_reduction), e


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


OBJECTIVES = ("damping", "roll-reduction")

#: factors of the roll-reduction design are backed off by this fraction before they are written, so
#: that rounding to 4 significant digits can never carry an active constraint past its limit
RR_BACKOFF = 2e-3


def design_rr(vessel, base: ControllerParams, speeds_kn, sea: SeaState, options: DesignOptions = DesignOptions()):
    """Roll-reduction design: one gain shape for all speeds plus a factor per speed.

    1. At the reference speed U_ref of ``base`` the three gains are chosen freely (the shape).
    2. At every design speed the factor on that shape with the largest predicted RR is chosen.
    3. For comparison, every speed is also optimised with a shape of its own (``free_*`` fields):
       the difference is what a per-gain schedule could add.

    Returns ``(designs, reference gains)``.
    """
    u_ref = base.u_ref
    ref, _ = design_speed_rr(vessel, base, u_ref, sea, options)
    shape = ref.gains
    if not any(g > 0 for g in shape):  # pragma: no cover - only if no feedback at all is feasible
        raise ValueError("no positive gains satisfy the constraints at the reference speed")
    designs = []
    for s in speeds_kn:
        u = s * KNOT
        free, _ = design_speed_rr(vessel, base, u, sea, options)
        d, _ = design_speed_rr(vessel, base, u, sea, options, shape=shape)
        designs.append(replace(d, free_gains=free.gains, free_roll_reduction=free.roll_reduction))
    return tuple(designs), shape


def design(vessel, base: ControllerParams, speeds_kn, sea: SeaState, options: DesignOptions = DesignOptions()) -> TuneResult:
    """Design every speed, build the factor table and analyse the result as it will be written.

    ``options.objective`` "damping": the base gain shape, a factor per speed for the target damping
    (:func:`design_speed`); "roll-reduction": the shape chosen at the reference speed and a factor
    per speed, both for the largest predicted roll reduction (:func:`design_rr`).
    """
    if options.objective not in OBJECTIVES:
        raise ValueError(f"objective = {options.objective!r}: expected one of {', '.join(OBJECTIVES)}")
    if options.objective == "roll-reduction":
        designs, shape = design_rr(vessel, base, speeds_kn, sea, options)
        base = replace(base, k_roll=shape[0], k_rate=shape[1], k_accel=shape[2])
        factors = [d.factor * (1.0 - RR_BACKOFF) for d in designs]
    else:
        designs = tuple(design_speed(vessel, base, s * KNOT, sea, options) for s in speeds_kn)
        factors = [d.factor for d in designs]
    params, gains, speeds, table = tuned_params(base, speeds_kn, factors)
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
