"""Discrete filter design in closed form (pure Python, designed once when parameters are built).

Every filter here is written in the transposed direct form II used by ``scipy.signal.lfilter``::

    y[n]    = b0·x[n] + z1
    z1'     = b1·x[n] − a1·y[n] + z2
    z2'     = b2·x[n] − a2·y[n]

with ``a0 = 1``. The step function of :mod:`controller.law` inlines these recursions on plain
floats; :func:`biquad_step` here is the same recursion as a function, for reference and tests.

Designs
-------
- :func:`butter2_lowpass` — 2nd-order Butterworth low-pass by the bilinear transform with the
  cut-off pre-warped, K = tan(π f_c / f_s) (Oppenheim & Schafer, *Discrete-Time Signal
  Processing*, 3rd ed., §7.1.2). Same design as ``scipy.signal.butter(2, f_c, fs=f_s)``.
- :func:`notch` — 2nd-order notch with −3 dB bandwidth f0/Q (Orfanidis, *Introduction to Signal
  Processing*, 1996, §11.3). Same design as ``scipy.signal.iirnotch(f0, Q, fs)``.
- :func:`dirty_derivative` — s/(τs + 1) by the bilinear transform (no pre-warp):
  b = [2, −2]/(2τ + T), a1 = (T − 2τ)/(T + 2τ). Same as ``scipy.signal.bilinear([1, 0], [τ, 1], 1/T)``.
- :func:`first_order_hold_gain` — 1/(τs + 1) discretised with a zero-order hold, taken one sample
  early so the current input acts at once: y[n] = y[n−1] + c·(x[n] − y[n−1]), c = 1 − exp(−T/τ)
  (the ZOH recursion of ``scipy.signal.cont2discrete`` uses x[n−1]). Its response to a unit step
  applied at n = 0 is exactly 1 − exp(−(n+1)T/τ), a geometric approach with ratio exp(−T/τ).

All functions check their arguments and raise ``ValueError``; they are called at load, never in
the step.
"""

from __future__ import annotations

import math

__all__ = [
    "Biquad",
    "IDENTITY",
    "butter2_lowpass",
    "notch",
    "dirty_derivative",
    "first_order_hold_gain",
    "biquad_step",
    "biquad_steady_state",
    "biquad_response",
]

# (b0, b1, b2, a1, a2), a0 = 1
Biquad = tuple[float, float, float, float, float]

IDENTITY: Biquad = (1.0, 0.0, 0.0, 0.0, 0.0)
"""A pass-through section (used when a notch is switched off)."""


def _finite_positive(name: str, value: float) -> float:
    v = float(value)
    if not (math.isfinite(v) and v > 0.0):
        raise ValueError(f"{name} must be a finite positive number, got {value!r}")
    return v


def butter2_lowpass(cutoff_hz: float, sample_rate_hz: float) -> Biquad:
    """2nd-order Butterworth low-pass section (bilinear transform, pre-warped cut-off).

    Parameters
    ----------
    cutoff_hz: −3 dB frequency f_c (Hz), 0 < f_c < f_s/2.
    sample_rate_hz: sample rate f_s (Hz).

    Returns ``(b0, b1, b2, a1, a2)``: with K = tan(π f_c/f_s) and n = 1 + √2·K + K²,
    b0 = b2 = K²/n, b1 = 2K²/n, a1 = 2(K² − 1)/n, a2 = (1 − √2·K + K²)/n. DC gain is exactly 1
    up to rounding.
    """
    fc = _finite_positive("cutoff_hz", cutoff_hz)
    fs = _finite_positive("sample_rate_hz", sample_rate_hz)
    if not fc < 0.5 * fs:
        raise ValueError(f"cutoff_hz {fc} must be below half the sample rate ({0.5 * fs} Hz)")
    k = math.tan(math.pi * fc / fs)
    k2 = k * k
    r2 = math.sqrt(2.0)
    n = 1.0 + r2 * k + k2
    b0 = k2 / n
    return (b0, 2.0 * b0, b0, 2.0 * (k2 - 1.0) / n, (1.0 - r2 * k + k2) / n)


def notch(centre_hz: float, quality: float, sample_rate_hz: float) -> Biquad:
    """2nd-order notch at ``centre_hz`` with quality factor Q (−3 dB bandwidth f0/Q).

    With w0 = 2π f0/f_s, bandwidth bw = w0/Q, β = tan(bw/2) and g = 1/(1 + β):
    b = g·[1, −2 cos w0, 1], a = [1, −2 g cos w0, 2g − 1]. Unity gain at DC and at f_s/2, zero
    gain at f0.
    """
    f0 = _finite_positive("centre_hz", centre_hz)
    q = _finite_positive("quality", quality)
    fs = _finite_positive("sample_rate_hz", sample_rate_hz)
    if not f0 < 0.5 * fs:
        raise ValueError(f"centre_hz {f0} must be below half the sample rate ({0.5 * fs} Hz)")
    w0 = 2.0 * math.pi * f0 / fs
    bw = w0 / q
    beta = math.tan(0.5 * bw)
    g = 1.0 / (1.0 + beta)
    c = math.cos(w0)
    return (g, -2.0 * g * c, g, -2.0 * g * c, 2.0 * g - 1.0)


def dirty_derivative(tau_s: float, dt_s: float) -> tuple[float, float, float]:
    """Band-limited derivative s/(τs + 1), bilinear transform.

    Returns ``(b0, b1, a1)`` of y[n] = b0·x[n] + b1·x[n−1] − a1·y[n−1]:
    b0 = 2/(2τ + T), b1 = −b0, a1 = (T − 2τ)/(T + 2τ). Zero gain at DC, gain 1/τ at f_s/2 (as the analogue
    filter at infinite frequency).
    """
    tau = _finite_positive("tau_s", tau_s)
    t = _finite_positive("dt_s", dt_s)
    b0 = 2.0 / (2.0 * tau + t)
    return (b0, -b0, (t - 2.0 * tau) / (t + 2.0 * tau))


def first_order_hold_gain(tau_s: float, dt_s: float) -> float:
    """Blend factor c = 1 − exp(−T/τ) of the exactly discretised first-order low-pass."""
    tau = _finite_positive("tau_s", tau_s)
    t = _finite_positive("dt_s", dt_s)
    return -math.expm1(-t / tau)


def biquad_step(c: Biquad, z: tuple[float, float], x: float) -> tuple[tuple[float, float], float]:
    """One sample of a section in transposed direct form II: returns ``((z1', z2'), y)``."""
    b0, b1, b2, a1, a2 = c
    z1, z2 = z
    y = b0 * x + z1
    return (b1 * x - a1 * y + z2, b2 * x - a2 * y), y


def biquad_steady_state(c: Biquad, x: float) -> tuple[tuple[float, float], float]:
    """Section state for a constant input ``x`` held forever: returns ``((z1, z2), y)``.

    y = x·(b0 + b1 + b2)/(1 + a1 + a2), z1 = y − b0·x, z2 = b2·x − a2·y (set x[n] = x, y[n] = y in
    the recursion and solve). Used to start a filter on its first valid sample without a transient.
    """
    b0, b1, b2, a1, a2 = c
    den = 1.0 + a1 + a2
    y = x * (b0 + b1 + b2) / den if den != 0.0 else 0.0
    return (y - b0 * x, b2 * x - a2 * y), y


def biquad_response(c: Biquad, xs, z: tuple[float, float] = (0.0, 0.0)) -> list[float]:
    """Run a section over a sequence (reference helper for tests and tools, not for the step)."""
    out = []
    for x in xs:
        z, y = biquad_step(c, z, x)
        out.append(y)
    return out
