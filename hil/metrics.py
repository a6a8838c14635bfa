"""Run metrics: roll statistics and fin figures from a run's records (trade units out).

Statistics are taken after the warm-up (the start-up transient of a run that starts at rest), over
the finite rows (a run that stopped early ends with one row of NaN state).

- RMS roll √(mean φ²) includes any steady heel; σ is the standard deviation about the mean.
- Significant roll amplitude = 2σ: for a narrow-banded Gaussian process the mean of the highest
  third of amplitudes is 2σ (Rayleigh distribution; Lloyd, Seakeeping, 1989, ch. 9 / Price & Bishop
  1974).
- Fin drag power = drag × speed (propulsive power lost), mean over the record.
"""

from __future__ import annotations

import math

import numpy as np


def roll_metrics(records: dict[str, np.ndarray], warmup_s: float) -> dict[str, float]:
    """Roll and fin statistics of the part of a run after ``warmup_s``."""
    t = records["t_s"]
    finite = np.isfinite(records["roll_rad"]) & np.isfinite(records["roll_rate_rad_s"])  # a capsized last row
    sel = (t >= warmup_s) & finite
    if not np.any(sel):  # a run shorter than its warm-up: use what there is
        sel = finite
    phi = np.degrees(records["roll_rad"][sel])
    p = np.degrees(records["roll_rate_rad_s"][sel])
    out = {
        "roll_rms_deg": float(np.sqrt(np.mean(phi * phi))),
        "roll_mean_deg": float(np.mean(phi)),
        "roll_std_deg": float(np.std(phi)),
        "roll_sig_amp_deg": float(2.0 * np.std(phi)),
        "roll_max_deg": float(np.max(np.abs(phi))),
        "roll_rate_rms_deg_s": float(np.sqrt(np.mean(p * p))),
        "fin_drag_power_kw": float(np.mean(records["fin_drag_power_w"][sel]) / 1000.0),
        "stats_from_s": float(t[sel][0]),
        "stats_duration_s": float(t[sel][-1] - t[sel][0]),
    }
    return {k: (v if math.isfinite(v) else float("nan")) for k, v in out.items()}


def fin_metrics(records: dict[str, np.ndarray], warmup_s: float) -> dict[str, float]:
    """Fin angle, fin rate and time-at-limit figures after ``warmup_s`` (trade units out).

    Fin rate is the backward difference of the true fin angle over one control period. The
    time-at-limit shares come from the controller's limiter bits (what the law held back in that
    step), so they are 0 for a passive run (no ``ctl_limiter`` record).
    """
    t = records["t_s"]
    finite = np.isfinite(records["fin_port_rad"]) & np.isfinite(records["fin_stbd_rad"])
    sel = (t >= warmup_s) & finite
    if not np.any(sel):
        sel = finite
    fins = np.degrees(np.concatenate([records["fin_port_rad"][sel], records["fin_stbd_rad"][sel]]))
    dt = float(t[1] - t[0]) if len(t) > 1 else float("nan")
    rates = []
    for key in ("fin_port_rad", "fin_stbd_rad"):
        d = np.diff(records[key]) / dt
        ok = sel[1:] & sel[:-1]
        rates.append(np.degrees(d[ok]))
    rate = np.concatenate(rates) if rates else np.zeros(0)
    out = {
        "fin_rms_deg": float(np.sqrt(np.mean(fins * fins))) if fins.size else float("nan"),
        "fin_max_deg": float(np.max(np.abs(fins))) if fins.size else float("nan"),
        "fin_rate_rms_deg_s": float(np.sqrt(np.mean(rate * rate))) if rate.size else float("nan"),
        "fin_rate_max_deg_s": float(np.max(np.abs(rate))) if rate.size else float("nan"),
    }
    lim = records.get("ctl_limiter")
    if lim is None:
        shares = (0.0, 0.0, 0.0)
    else:
        from controller import Limiter

        # controller rows: the last row holds no step; take the selected rows that had a step
        lsel = sel.copy()
        lsel[-1] = False
        lv = lim[lsel]
        n = max(lv.size, 1)
        shares = (
            100.0 * np.count_nonzero(lv & int(Limiter.ANGLE)) / n,
            100.0 * np.count_nonzero(lv & int(Limiter.RATE)) / n,
            100.0 * np.count_nonzero(lv & (int(Limiter.STALL) | int(Limiter.LOAD))) / n,
        )
    out["time_at_angle_limit_pct"], out["time_at_rate_limit_pct"], out["time_at_stall_or_load_limit_pct"] = (
        float(s) for s in shares
    )
    return out


MIN_ROLL_FOR_RR_DEG = 0.01
"""Below this passive roll σ (deg) a roll reduction is not reported (our threshold: a ratio of
two numbers at sensor-noise level means nothing)."""


def roll_reduction_pct(off: dict[str, float], on: dict[str, float]) -> float:
    """RR = 100·(1 − σ_on/σ_off), σ the roll standard deviation (about the mean) after warm-up.

    The usual definition (DESIGN §4; e.g. Lloyd, Seakeeping, 1989, ch. on roll stabilisation):
    a steady heel is not roll and does not count.
    """
    s_off = off["roll_std_deg"]
    if not (s_off >= MIN_ROLL_FOR_RR_DEG):
        return float("nan")  # no roll to reduce (e.g. head or following seas): RR is undefined
    return 100.0 * (1.0 - on["roll_std_deg"] / s_off)
