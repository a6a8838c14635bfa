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
