"""Sensor models: motion sensor (roll, roll rate), speed log, fin position feedback, faults.

Everything random or scheduled is drawn ahead of the run (vectorised, seeded); the per-step work in
the simulation core is a few array look-ups.

Motion sensor
    Samples the true roll angle and rate at its own rate ``f_s``; a sample taken at ``s_j = j/f_s``
    reaches the controller ``latency`` later. Each sample gets bias + white Gaussian noise, then
    quantisation. The age reported with a value is (now − sample time), so it includes the latency.
Speed log
    Speed through water at its own (slow) rate with noise; random dropouts (Poisson arrivals, fixed
    length) during which no new sample arrives (the age grows; the last value stays).
Fin feedback
    Actuator position at every control step with noise and quantisation.
Faults (injected at given times, on one channel each)
    ``freeze`` (the last good value repeats, still fresh and valid), ``spike`` (``value`` added),
    ``nan`` (NaN reported as valid), ``dropout`` (no new samples: age grows), ``stuck`` (a fixed
    ``value`` reported as fresh and valid), ``invalid`` (the sensor's own validity flag drops).
    Actuator faults: ``stuck`` on ``fin_port_actuator`` / ``fin_stbd_actuator`` freezes that fin
    where it is (one-fin failure).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

FAULT_KINDS = ("freeze", "spike", "nan", "dropout", "stuck", "invalid")
"""Sensor fault kinds (codes 1..6 in that order)."""

SENSOR_CHANNELS = ("roll", "roll_rate", "speed", "fin_port_feedback", "fin_stbd_feedback")
ACTUATOR_CHANNELS = ("fin_port_actuator", "fin_stbd_actuator")
ACTUATOR_FAULT_KINDS = ("stuck",)

FREEZE, SPIKE, NAN, DROPOUT, STUCK, INVALID = range(1, 7)


@dataclass(frozen=True)
class MotionSensorParams:
    """Roll/roll-rate sensor (SI)."""

    sample_rate_hz: float = 100.0
    latency_s: float = 0.005
    noise_roll_rad: float = 0.0
    noise_rate_rad_s: float = 0.0
    bias_roll_rad: float = 0.0
    bias_rate_rad_s: float = 0.0
    quantisation_roll_rad: float = 0.0
    quantisation_rate_rad_s: float = 0.0
    provides_rate: bool = True


@dataclass(frozen=True)
class SpeedLogParams:
    """Speed-through-water log (SI)."""

    sample_rate_hz: float = 1.0
    latency_s: float = 0.0
    noise_ms: float = 0.0
    bias_ms: float = 0.0
    dropouts_per_hour: float = 0.0
    dropout_duration_s: float = 5.0


@dataclass(frozen=True)
class FinFeedbackParams:
    """Fin position transducers (SI)."""

    noise_rad: float = 0.0
    quantisation_rad: float = 0.0


@dataclass(frozen=True)
class Fault:
    """One injected fault: ``kind`` on ``channel`` from ``start_s`` for ``duration_s`` (inf = to the end)."""

    channel: str
    kind: str
    start_s: float
    duration_s: float = math.inf
    value: float = 0.0  # spike size or stuck value, SI units of the channel


@dataclass(frozen=True)
class SensorSuite:
    motion: MotionSensorParams = field(default_factory=MotionSensorParams)
    speed_log: SpeedLogParams = field(default_factory=SpeedLogParams)
    fin_feedback: FinFeedbackParams = field(default_factory=FinFeedbackParams)


def quantise(x, q: float):
    """Round to the nearest multiple of ``q`` (no-op for q = 0). Works on floats and arrays."""
    if q <= 0.0:
        return x
    return np.round(np.asarray(x) / q) * q if isinstance(x, np.ndarray) else round(x / q) * q


def fault_codes(faults: list[Fault], channel: str, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-step fault code (0 = none) and fault value for one channel on control-step times ``t``.

    Later faults in the list override earlier ones where they overlap.
    """
    codes = np.zeros(t.shape, dtype=np.int8)
    values = np.zeros(t.shape)
    for f in faults:
        if f.channel != channel:
            continue
        on = (t >= f.start_s - 1e-9) & (t < f.start_s + f.duration_s - 1e-9)
        codes[on] = FAULT_KINDS.index(f.kind) + 1
        values[on] = f.value
    return codes, values


@dataclass
class MotionSchedule:
    """Pre-computed sampling schedule of the motion sensor on the control-step grid."""

    hist_index: np.ndarray  # int: history index i0 with s_j in [t_i0, t_i0+1]
    hist_frac: np.ndarray  # float: interpolation fraction
    age_s: np.ndarray  # now − sample time
    noise_roll: np.ndarray  # per control step (noise of the delivered sample), rad
    noise_rate: np.ndarray


def motion_schedule(p: MotionSensorParams, t: np.ndarray, dt: float, rng: np.random.Generator) -> MotionSchedule:
    """Which sample the controller sees at each control step, its age, and its noise."""
    j = np.floor((t - p.latency_s) * p.sample_rate_hz + 1e-9).astype(np.int64)
    j = np.maximum(j, 0)
    s = j / p.sample_rate_hz
    pos = s / dt
    i0 = np.floor(pos + 1e-9).astype(np.int64)
    frac = pos - i0
    frac[frac < 1e-9] = 0.0
    n_samples = int(j[-1]) + 1 if j.size else 1
    nr = rng.standard_normal(n_samples) * p.noise_roll_rad
    nq = rng.standard_normal(n_samples) * p.noise_rate_rad_s
    return MotionSchedule(i0, frac, t - s, nr[j] + p.bias_roll_rad, nq[j] + p.bias_rate_rad_s)


def speed_log_measurements(
    p: SpeedLogParams,
    t: np.ndarray,
    true_speed_at,  # callable: times (s) -> speed (m/s)
    rng: np.random.Generator,
    faults: list[Fault],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Speed value (m/s), validity and age (s) at every control step, faults included."""
    duration = float(t[-1]) if t.size else 0.0
    n_samples = int(math.floor(duration * p.sample_rate_hz + 1e-9)) + 1
    s = np.arange(n_samples) / p.sample_rate_hz
    values = true_speed_at(s) + p.bias_ms + rng.standard_normal(n_samples) * p.noise_ms
    delivered = np.ones(n_samples, dtype=bool)
    if p.dropouts_per_hour > 0.0 and duration > 0.0:
        n_events = rng.poisson(p.dropouts_per_hour * duration / 3600.0)
        starts = rng.uniform(0.0, duration, size=n_events)
        for st in starts:
            delivered[(s >= st) & (s < st + p.dropout_duration_s)] = False
    delivered[0] = True  # the log has a reading when the run starts
    codes, fvalues = fault_codes(faults, "speed", s)
    delivered &= codes != DROPOUT
    # freeze: repeat the last good sample value
    valid = np.ones(n_samples, dtype=bool)
    for i in range(n_samples):
        c = codes[i]
        if c == FREEZE and i > 0:
            values[i] = values[i - 1]
        elif c == SPIKE:
            values[i] += fvalues[i]
        elif c == NAN:
            values[i] = math.nan
        elif c == STUCK:
            values[i] = fvalues[i]
        elif c == INVALID:
            valid[i] = False
    # index of the latest delivered sample at each control step
    arrival = s + p.latency_s
    k_latest = np.searchsorted(arrival, t + 1e-9, side="right") - 1
    k_latest = np.maximum(k_latest, 0)
    delivered_idx = np.where(delivered, np.arange(n_samples), -1)
    last_delivered = np.maximum.accumulate(delivered_idx)
    idx = np.maximum(last_delivered[k_latest], 0)
    return values[idx], valid[idx], t - s[idx]
