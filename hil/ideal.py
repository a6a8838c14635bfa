"""The ideal bound: the best roll reduction any controller could reach with the same fins and limits.

A yardstick for a tuned controller: with perfect knowledge of the whole coming sea (non-causal,
so no real controller can reach it), choose the fin roll command δ_k at every step to minimise
the roll over the statistics window, subject to the same angle limit, rate limit and
effective-angle (stall / load) limit the controller obeys. On the linearised plant this is a
convex quadratic programme (QP), solved with OSQP (Stellato et al., "OSQP: an operator splitting
solver for quadratic programs", Math. Prog. Comp. 12, 2020).

Model
-----
:func:`plant.linear.linear_roll`: I φ̈ + (B_e + B_f) φ̇ + C φ = M − K_f δ, states x = [φ, p],
inputs [δ, M]. Discretised exactly for piecewise-constant inputs (zero-order hold,
``scipy.signal.cont2discrete``; Franklin, Powell & Workman, Digital Control of Dynamic Systems,
3rd ed., ch. 4) at the QP rate (default 10 Hz):

    x_{k+1} = A_d x_k + b_δ δ_k + b_M M_k,    k = 0 … N−1.

M_k is the disturbance (wave + external moment) averaged over [t_k, t_{k+1}) — for a ZOH input the
interval average is the piecewise-constant signal with the same impulse on every interval.

The quadratic damping B2 φ̇|φ̇| is linearised at the passive roll: B_e = B1 + (8/3π) ω0 φa B2
(:meth:`plant.vessel.VesselParams.equivalent_damping_ratio`) with φa chosen so that this equals
the statistical (Gaussian) linearisation B1 + √(8/π) σ_p B2 of the passive record
(E[p|p|·p]/E[p²] = E|p|³/σ_p² = √(8/π) σ_p for Gaussian p, a standard Gaussian moment;
e.g. Roberts & Spanos, Random Vibration and Statistical Linearization, 1990, ch. 5):
φa = (3π/8) √(8/π) σ_p / ω0. The same model gives both σ_off (δ ≡ 0) and σ_opt, so the bound is a
ratio inside one linear model.

QP (sparse, dynamics as equality rows)
--------------------------------------
Variables z = [x̃_1 … x̃_N, δ̃_0 … δ̃_{N−1}, m̃] with the states scaled by the passive σ of φ and p
and δ by the angle limit (so every number is O(1) for the solver), m̃ a free mean (objective
"std"). Objective: (1/n_w) Σ_{k∈W} (φ_k − m)² + ε (1/N) Σ δ̃_k², W = samples after the warm-up.
"std" minimises the roll standard deviation (a steady heel is not roll; hil.metrics'
roll-reduction definition); "rms" fixes m = 0. Constraints: |δ_k| ≤ δ_max; |δ_k − δ_{k−1}| ≤
ṙ·Δt with δ_{−1} = 0 (fins start centred); optionally |δ_k + p_j r_f/U| ≤ a_eff for j = k and
k+1 (the effective angle of both fins, small-angle form of atan(p r_f/U), at both ends of the
hold interval), a_eff = min(stall − margin, rated-lift angle) as in the controller. A condensed
formulation (δ only) would be dense N×N (N = 12 000 for 20 min at 10 Hz: 1.4e8 entries), the
sparse one has ~10 non-zeros per step — that is why the dynamics stay as equality rows.

ε (default 1e-4 relative to the scaled roll variance) makes the problem strictly convex in δ; the
benchmark prints the bound for ε and ε/10 to show it does not matter.

Any solver status other than "solved" raises :class:`IdealBoundError` — never a silent number.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.sparse as sp
from scipy.signal import cont2discrete

from plant.linear import LinearRoll, linear_roll

__all__ = [
    "IdealBound",
    "IdealBoundError",
    "discretise",
    "simulate_discrete",
    "interval_average",
    "linearisation_amplitude",
    "ideal_bound_from_moment",
    "ideal_bound",
    "efficiency",
]


class IdealBoundError(RuntimeError):
    """The ideal-bound QP could not be solved (solver status named in the message)."""


@dataclass(frozen=True)
class IdealBound:
    """Result of the ideal-bound QP (SI; ``_pct`` and ``_deg`` only in :meth:`summary`)."""

    ideal_roll_reduction_pct: float
    sigma_off_rad: float  # linear model, δ ≡ 0, after the warm-up (std or rms per ``objective``)
    sigma_opt_rad: float  # linear model with the optimal δ
    status: str
    iterations: int
    solve_time_s: float
    setup_time_s: float
    t_s: np.ndarray  # QP grid, N + 1 instants
    delta_rad: np.ndarray  # optimal roll command, N values (held over each interval)
    roll_opt_rad: np.ndarray  # N + 1
    roll_off_rad: np.ndarray  # N + 1
    rate_opt_rad_s: np.ndarray  # N + 1
    dt_s: float
    epsilon: float
    objective: str
    angle_limit_rad: float
    rate_limit_rad_s: float
    effective_angle_limit_rad: float | None
    lever_arms_m: tuple[float, ...]
    speed_ms: float
    max_violation_rad: dict[str, float]
    model: LinearRoll
    roll_amplitude_rad: float = math.nan  # φa of the damping linearisation
    passive_sim_sigma_rad: float = math.nan  # σ of the nonlinear passive record (for comparison)
    notes: tuple[str, ...] = field(default=())

    def summary(self) -> dict:
        """JSON-friendly figures (trade units with suffixes)."""
        return {
            "ideal_roll_reduction_pct": self.ideal_roll_reduction_pct,
            "objective": self.objective,
            "roll_sigma_off_linear_deg": math.degrees(self.sigma_off_rad),
            "roll_sigma_opt_deg": math.degrees(self.sigma_opt_rad),
            "roll_sigma_off_plant_deg": math.degrees(self.passive_sim_sigma_rad),
            "roll_amplitude_for_damping_deg": math.degrees(self.roll_amplitude_rad),
            "solver": "osqp",
            "status": self.status,
            "iterations": self.iterations,
            "solve_time_s": self.solve_time_s,
            "setup_time_s": self.setup_time_s,
            "rate_hz": 1.0 / self.dt_s,
            "steps": int(self.delta_rad.size),
            "epsilon": self.epsilon,
            "angle_limit_deg": math.degrees(self.angle_limit_rad),
            "rate_limit_deg_s": math.degrees(self.rate_limit_rad_s),
            "effective_angle_limit_deg": (None if self.effective_angle_limit_rad is None
                                          else math.degrees(self.effective_angle_limit_rad)),
            "speed_kn": self.speed_ms * 3600.0 / 1852.0,
            "max_violation_deg": {k: math.degrees(v) for k, v in self.max_violation_rad.items()},
            "notes": list(self.notes),
        }


# ------------------------------------------------------------------------------------------------
def discretise(model: LinearRoll, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
    """(A_d, B_d) of the ZOH discretisation, B_d columns = [δ, M]."""
    a, b, c, d = model.state_space()
    ad, bd, _, _, _ = cont2discrete((a, b, c, d), dt_s, method="zoh")
    return np.asarray(ad), np.asarray(bd)


def simulate_discrete(ad: np.ndarray, bd: np.ndarray, delta, moment, x0=(0.0, 0.0)) -> np.ndarray:
    """States x_0 … x_N (shape (N+1, 2)) of x_{k+1} = A_d x_k + B_d [δ_k, M_k]."""
    delta = np.asarray(delta, dtype=float)
    moment = np.asarray(moment, dtype=float)
    n = moment.size
    if delta.size != n:
        raise ValueError("delta and moment must have the same length")
    drive = bd[:, 0][None, :] * delta[:, None] + bd[:, 1][None, :] * moment[:, None]  # (N, 2)
    x = np.empty((n + 1, 2))
    x[0] = x0
    a00, a01, a10, a11 = float(ad[0, 0]), float(ad[0, 1]), float(ad[1, 0]), float(ad[1, 1])
    phi, p = float(x0[0]), float(x0[1])
    d0 = drive[:, 0].tolist()
    d1 = drive[:, 1].tolist()
    out0 = [phi] * (n + 1)
    out1 = [p] * (n + 1)
    for k in range(n):
        phi, p = a00 * phi + a01 * p + d0[k], a10 * phi + a11 * p + d1[k]
        out0[k + 1] = phi
        out1[k + 1] = p
    x[:, 0] = out0
    x[:, 1] = out1
    return x


def interval_average(t_s, y, dt_s: float) -> np.ndarray:
    """Average of y(t) (linear between samples) over [jΔ, (j+1)Δ), j = 0 … N−1, N = ⌊T/Δ⌋."""
    t = np.asarray(t_s, dtype=float)
    y = np.asarray(y, dtype=float)
    span = t[-1] - t[0]
    n = int(math.floor(span / dt_s + 1e-9))
    if n < 1:
        raise ValueError(f"record ({span:g} s) shorter than one QP step ({dt_s:g} s)")
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))))
    edges = t[0] + dt_s * np.arange(n + 1)
    return np.diff(np.interp(edges, t, cum)) / dt_s


def linearisation_amplitude(roll_rate_rad_s, omega0_rad_s: float) -> float:
    """φa such that (8/3π) ω0 φa = √(8/π) σ_p (Gaussian linearisation of B2 p|p|); rad."""
    p = np.asarray(roll_rate_rad_s, dtype=float)
    p = p[np.isfinite(p)]
    sigma_p = float(np.sqrt(np.mean((p - p.mean()) ** 2))) if p.size else 0.0
    return (3.0 * math.pi / 8.0) * math.sqrt(8.0 / math.pi) * sigma_p / omega0_rad_s


def _sigma(x: np.ndarray, objective: str) -> float:
    if objective == "std":
        return float(np.std(x))
    return float(np.sqrt(np.mean(x * x)))


# ------------------------------------------------------------------------------------------------
def ideal_bound_from_moment(
    model: LinearRoll,
    moment_n_m,
    dt_s: float,
    angle_limit_rad: float,
    rate_limit_rad_s: float,
    effective_angle_limit_rad: float | None = None,
    lever_arms_m: tuple[float, ...] = (),
    warmup_s: float = 0.0,
    x0=(0.0, 0.0),
    epsilon: float = 1e-4,
    objective: str = "std",
    passive_model: LinearRoll | None = None,
    osqp_settings: dict | None = None,
) -> IdealBound:
    """Solve the ideal-bound QP for a disturbance record already on the QP grid.

    Parameters
    ----------
    model: linear roll model (fins deployed).
    moment_n_m: disturbance roll moment M_k (N·m), one value per QP interval (N values).
    dt_s: QP step Δt (s).
    angle_limit_rad, rate_limit_rad_s: |δ| and |δ̇| limits (> 0).
    effective_angle_limit_rad: limit on |δ + p r_f/U| (None = no effective-angle rows).
    lever_arms_m: fin lever arms r_f (m) for the effective-angle rows (distinct values only).
    warmup_s: statistics (and objective) start at t ≥ warmup_s.
    x0: initial [φ, p] (rad, rad/s).
    epsilon: fin-effort weight relative to the scaled roll variance (> 0).
    objective: "std" (roll about its mean) or "rms" (about zero).
    passive_model: model for σ_off (default ``model``; e.g. fins retracted when off).
    osqp_settings: extra OSQP settings (override the defaults here).
    """
    import osqp

    if objective not in ("std", "rms"):
        raise ValueError(f"objective must be 'std' or 'rms', got {objective!r}")
    if not (angle_limit_rad > 0.0 and rate_limit_rad_s > 0.0 and dt_s > 0.0 and epsilon > 0.0):
        raise ValueError("angle limit, rate limit, dt and epsilon must be > 0")
    if effective_angle_limit_rad is not None and not (effective_angle_limit_rad > 0.0):
        raise ValueError("effective_angle_limit_rad must be > 0")
    w = np.asarray(moment_n_m, dtype=float)
    if not np.all(np.isfinite(w)):
        raise ValueError("the disturbance moment record has non-finite values")
    n = w.size
    t = dt_s * np.arange(n + 1)
    win = t >= warmup_s - 1e-9
    idx_w = np.flatnonzero(win[1:])  # state indices 1..N in the window, as 0-based rows of x_1..x_N
    if idx_w.size < 2:
        raise ValueError("the statistics window (after the warm-up) holds fewer than 2 QP samples")
    x0 = np.asarray(x0, dtype=float)
    notes: list[str] = []

    ad, bd = discretise(model, dt_s)
    pm = model if passive_model is None else passive_model
    ad_off, bd_off = discretise(pm, dt_s)
    x_off = simulate_discrete(ad_off, bd_off, np.zeros(n), w, x0)
    sel = np.concatenate(([False], win[1:]))
    sigma_off = _sigma(x_off[sel, 0], objective)
    if not (sigma_off > 0.0):
        raise IdealBoundError("the passive roll is zero: no roll to reduce")
    # scales: passive σ of φ and p (RMS over the window), angle limit for δ
    s_phi = float(np.sqrt(np.mean(x_off[sel, 0] ** 2))) or 1.0
    s_p = float(np.sqrt(np.mean(x_off[sel, 1] ** 2))) or 1.0
    s = np.array([s_phi, s_p])
    dmax = float(angle_limit_rad)
    a_s = ad * (s[None, :] / s[:, None])  # S⁻¹ A S
    b_s = bd[:, 0] * dmax / s  # S⁻¹ b_δ δmax
    rhs = (bd[:, 1][None, :] * w[:, None]) / s[None, :]  # S⁻¹ b_M M_k, (N, 2)
    rhs[0] += (ad @ x0) / s

    n_x = 2 * n
    i_d = n_x  # first δ column
    use_m = objective == "std"
    n_z = n_x + n + (1 if use_m else 0)
    i_m = n_x + n

    # ---- objective
    n_w = idx_w.size
    phi_cols = 2 * idx_w  # φ̃ of x_{k+1} sits at column 2k
    rows, cols, vals = [], [], []
    rows.append(phi_cols); cols.append(phi_cols); vals.append(np.full(n_w, 2.0 / n_w))
    d_cols = i_d + np.arange(n)
    rows.append(d_cols); cols.append(d_cols); vals.append(np.full(n, 2.0 * epsilon / n))
    if use_m:
        # (φ̃ − m̃)² with m̃ in the same scale as φ̃: cross terms −2/n_w, m̃ diagonal 2
        rows.append(phi_cols); cols.append(np.full(n_w, i_m)); vals.append(np.full(n_w, -2.0 / n_w))
        rows.append(np.array([i_m])); cols.append(np.array([i_m])); vals.append(np.array([2.0]))
    p_mat = sp.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n_z, n_z))
    q = np.zeros(n_z)

    # ---- constraints
    a_rows, a_cols, a_vals, lo, hi = [], [], [], [], []
    r0 = 0
    # dynamics: x̃_{k+1} − Ã x̃_k − b̃ δ̃_k = rhs_k (two rows per step)
    k = np.arange(n)
    for comp in (0, 1):
        row = r0 + 2 * k + comp
        a_rows.append(row); a_cols.append(2 * k + comp); a_vals.append(np.ones(n))
        for j in (0, 1):
            kk = k[1:]
            a_rows.append(row[1:]); a_cols.append(2 * (kk - 1) + j); a_vals.append(np.full(n - 1, -a_s[comp, j]))
        a_rows.append(row); a_cols.append(i_d + k); a_vals.append(np.full(n, -b_s[comp]))
    eq = rhs.reshape(-1)
    lo.append(eq); hi.append(eq)
    r0 += 2 * n
    # angle: −1 ≤ δ̃_k ≤ 1
    a_rows.append(r0 + k); a_cols.append(i_d + k); a_vals.append(np.ones(n))
    lo.append(-np.ones(n)); hi.append(np.ones(n))
    r0 += n
    # rate: |δ̃_k − δ̃_{k−1}| ≤ ṙΔt/δmax, δ_{−1} = 0
    rstep = rate_limit_rad_s * dt_s / dmax
    a_rows.append(r0 + k); a_cols.append(i_d + k); a_vals.append(np.ones(n))
    a_rows.append(r0 + k[1:]); a_cols.append(i_d + k[1:] - 1); a_vals.append(-np.ones(n - 1))
    lo.append(np.full(n, -rstep)); hi.append(np.full(n, rstep))
    r0 += n
    # effective angle: |δ_k + p_j r/U| ≤ a_eff, j = k, k+1
    arms = tuple(sorted(set(float(r) for r in lever_arms_m)))
    if effective_angle_limit_rad is not None:
        if not arms:
            raise ValueError("lever_arms_m is needed for the effective-angle rows")
        if not (model.speed_ms > 0.0):
            raise ValueError("the effective-angle limit needs a speed > 0")
        lim = effective_angle_limit_rad / dmax
        for r in arms:
            c = r * s_p / (model.speed_ms * dmax)  # coefficient of p̃ in units of δ̃
            # j = k + 1: p̃ of x_{k+1} is column 2k + 1
            a_rows.append(r0 + k); a_cols.append(i_d + k); a_vals.append(np.ones(n))
            a_rows.append(r0 + k); a_cols.append(2 * k + 1); a_vals.append(np.full(n, c))
            lo.append(np.full(n, -lim)); hi.append(np.full(n, lim))
            r0 += n
            # j = k: p_0 is known (shifts the bound of δ̃_0); p̃ of x_k is column 2(k−1) + 1
            a_rows.append(r0 + k); a_cols.append(i_d + k); a_vals.append(np.ones(n))
            a_rows.append(r0 + k[1:]); a_cols.append(2 * (k[1:] - 1) + 1); a_vals.append(np.full(n - 1, c))
            shift = np.zeros(n)
            shift[0] = x0[1] * r / (model.speed_ms * dmax)
            lo.append(-lim - shift); hi.append(lim - shift)
            r0 += n
        if abs(x0[1]) * max(arms) / model.speed_ms > effective_angle_limit_rad:
            raise IdealBoundError("infeasible: the initial roll rate alone exceeds the effective-angle limit")
    a_mat = sp.csc_matrix((np.concatenate(a_vals), (np.concatenate(a_rows), np.concatenate(a_cols))), shape=(r0, n_z))
    l_vec = np.concatenate(lo)
    u_vec = np.concatenate(hi)

    # eps 1e-5 on O(1)-scaled variables: the bound moves by < 1e-3 % between 1e-4 and 1e-6 on the
    # demo record (benchmarks/bench_ideal.py); rho = 1 halves the iterations there. Polishing is
    # OFF: with OSQP 1.1.3 the polish step returned a worse point than the ADMM iterate on the
    # "std" objective (its free-mean column is dense) while reporting success —
    # tests/test_ideal.py compares with an independent least-squares solution and caught it.
    settings = dict(verbose=False, eps_abs=1e-5, eps_rel=1e-5, rho=1.0, max_iter=40000, polishing=False)
    if osqp_settings:
        settings.update(osqp_settings)
    t0 = time.perf_counter()
    solver = osqp.OSQP()
    solver.setup(sp.triu(p_mat, format="csc"), q, a_mat, l_vec, u_vec, **settings)
    t1 = time.perf_counter()
    res = solver.solve(raise_error=False)
    t2 = time.perf_counter()
    status = str(res.info.status)
    if status != "solved" or res.x is None or not np.all(np.isfinite(res.x)):
        raise IdealBoundError(
            f"OSQP did not solve the ideal-bound QP: status '{status}' after {res.info.iter} iterations "
            f"({n} steps at {1.0 / dt_s:g} Hz); no bound is reported"
        )
    z = np.asarray(res.x)
    delta = z[i_d:i_d + n] * dmax
    # re-simulate the exact discrete model with the returned δ (removes the solver's equality residual)
    x_opt = simulate_discrete(ad, bd, delta, w, x0)
    sigma_opt = _sigma(x_opt[sel, 0], objective)
    viol = {
        "angle": float(max(0.0, np.max(np.abs(delta)) - angle_limit_rad)),
        "rate": float(max(0.0, np.max(np.abs(np.diff(np.concatenate(([0.0], delta))))) - rate_limit_rad_s * dt_s)),
    }
    if effective_angle_limit_rad is not None:
        worst = 0.0
        for r in arms:
            for p_j in (x_opt[1:, 1], x_opt[:-1, 1]):
                worst = max(worst, float(np.max(np.abs(delta + p_j * r / model.speed_ms))) - effective_angle_limit_rad)
        viol["effective_angle"] = max(0.0, worst)
    rr = 100.0 * (1.0 - sigma_opt / sigma_off)
    return IdealBound(
        ideal_roll_reduction_pct=rr,
        sigma_off_rad=sigma_off,
        sigma_opt_rad=sigma_opt,
        status=status,
        iterations=int(res.info.iter),
        solve_time_s=t2 - t1,
        setup_time_s=t1 - t0,
        t_s=t,
        delta_rad=delta,
        roll_opt_rad=x_opt[:, 0],
        roll_off_rad=x_off[:, 0],
        rate_opt_rad_s=x_opt[:, 1],
        dt_s=dt_s,
        epsilon=epsilon,
        objective=objective,
        angle_limit_rad=float(angle_limit_rad),
        rate_limit_rad_s=float(rate_limit_rad_s),
        effective_angle_limit_rad=effective_angle_limit_rad,
        lever_arms_m=arms,
        speed_ms=model.speed_ms,
        max_violation_rad=viol,
        model=model,
        notes=tuple(notes),
    )


# ------------------------------------------------------------------------------------------------
def ideal_bound(
    scenario,
    seed: int | None = None,
    rate_hz: float = 10.0,
    include_stall: bool = True,
    records: dict[str, np.ndarray] | None = None,
    epsilon: float = 1e-4,
    objective: str = "std",
    osqp_settings: dict | None = None,
) -> IdealBound:
    """The ideal bound of a scenario (its sea, fins, limits and speed).

    ``records``: the passive run's records (``hil.simulate.run_passive(...).records``), to avoid
    re-simulating; otherwise the passive run is made here with ``seed``. The disturbance is
    ``wave_moment_n_m + external_moment_n_m`` averaged over each QP interval. Limits: the smaller
    of the two actuators' and the scenario controller's angle and rate limits; effective-angle
    limit (``include_stall``) min(stall − margin, rated-lift angle at U) from the controller, or
    the fins' stall angle without one. Speed: the mean over the statistics window (a note is
    added if it varies by more than 2 %).
    """
    if not (rate_hz > 0.0 and math.isfinite(rate_hz)):
        raise ValueError(f"rate_hz must be > 0, got {rate_hz!r}")
    if records is None:
        from .simulate import run_passive

        res = run_passive(scenario, seed)
        if res.error:
            raise IdealBoundError(f"the passive run stopped early: {res.error}")
        records = res.records
    setup = scenario.setup
    warmup = float(scenario.warmup_s)
    t = np.asarray(records["t_s"], dtype=float)
    finite = np.isfinite(records["roll_rad"]) & np.isfinite(records["roll_rate_rad_s"])
    if not np.all(finite):
        raise IdealBoundError("the passive record holds non-finite roll (the run stopped early)")
    sel = t >= warmup
    if np.count_nonzero(sel) < 3:
        raise ValueError(f"the record ({t[-1]:g} s) is not longer than the warm-up ({warmup:g} s)")
    notes: list[str] = []
    u_rec = np.asarray(records["speed_ms"], dtype=float)[sel]
    speed = float(np.mean(u_rec))
    if speed > 0.0 and (np.max(u_rec) - np.min(u_rec)) > 0.02 * speed:
        notes.append(f"speed varies from {np.min(u_rec):.2f} to {np.max(u_rec):.2f} m/s; the bound uses the mean {speed:.2f} m/s")
    if not (speed > 0.5):
        raise ValueError(f"the ideal bound needs way on the ship (mean speed {speed:.2f} m/s)")
    vessel = setup.vessel
    fins = (setup.fin_port, setup.fin_stbd)
    phi_a = linearisation_amplitude(np.asarray(records["roll_rate_rad_s"])[sel], vessel.natural_frequency_rad_s)
    model = linear_roll(vessel, fins, speed, phi_a)
    passive = model
    if setup.fins_when_off == "retracted":
        passive = replace(model, fin_damping_n_m_s=0.0)
        notes.append("fins retracted when off: σ_off from the model without the fins' passive damping")
    ctrl = scenario.controller
    angle = min(setup.actuator_port.angle_limit_rad, setup.actuator_stbd.angle_limit_rad)
    rate = min(setup.actuator_port.rate_limit_rad_s, setup.actuator_stbd.rate_limit_rad_s)
    eff = None
    if ctrl is not None:
        angle = min(angle, ctrl.angle_limit)
        rate = min(rate, ctrl.rate_limit)
    if include_stall:
        if ctrl is not None:
            load = ctrl.rated_lift / (0.5 * ctrl.rho * speed * speed * ctrl.fin_area * ctrl.lift_slope)
            eff = min(ctrl.stall_angle - ctrl.stall_margin, load)
        else:
            eff = min(f.stall_angle_rad for f in fins)
    moment = np.asarray(records["wave_moment_n_m"], dtype=float) + np.asarray(records["external_moment_n_m"], dtype=float)
    dt = 1.0 / rate_hz
    m_qp = interval_average(t, moment, dt)
    x0 = (float(records["roll_rad"][0]), float(records["roll_rate_rad_s"][0]))
    bound = ideal_bound_from_moment(
        model, m_qp, dt, angle, rate, eff, tuple(f.lever_arm_m for f in fins), warmup, x0, epsilon, objective,
        passive, osqp_settings,
    )
    phi_rec = np.asarray(records["roll_rad"], dtype=float)[sel]
    return replace(bound, roll_amplitude_rad=phi_a, passive_sim_sigma_rad=_sigma(phi_rec, objective),
                   notes=bound.notes + tuple(notes))


def efficiency(rr_pct: float, ideal: IdealBound | float) -> float:
    """Roll reduction achieved / ideal roll reduction (1 = as good as perfect foresight)."""
    ideal_pct = ideal.ideal_roll_reduction_pct if isinstance(ideal, IdealBound) else float(ideal)
    if not (ideal_pct > 0.0 and math.isfinite(ideal_pct)):
        raise ValueError(f"the ideal roll reduction must be > 0 %, got {ideal_pct!r}")
    return float(rr_pct) / ideal_pct
