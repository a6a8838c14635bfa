"""Sea description → wave roll moment and elevation at the ship on the plant's half-step grid.

This module only glues the scenario's sea description to :mod:`plant.sea`; the physics lives there.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

SEA_KINDS = ("calm", "regular", "pierson_moskowitz", "ittc", "jonswap", "time_series")
MOMENT_METHODS = ("effective_slope", "rao_table")


@dataclass(frozen=True)
class SeaSpec:
    """The sea of a scenario (SI units).

    kind: one of :data:`SEA_KINDS`.
    hs_m, tp_s, t1_s, tz_s: spectrum parameters (only those the kind needs are set).
    gamma: JONSWAP peak enhancement; ``None`` = from the DNV-RP-C205 Tp/√Hs rule.
    n_components: number of harmonic components of the synthesised sea.
    wave_height_m, period_s: regular wave.
    file: CSV time series (``time_s,wave_elevation_m`` or ``time_s,roll_moment_kN_m``).
    """

    kind: str
    hs_m: float | None = None
    tp_s: float | None = None
    t1_s: float | None = None
    tz_s: float | None = None
    gamma: float | None = None
    n_components: int = 300
    wave_height_m: float | None = None
    period_s: float | None = None
    file: Path | None = None


@dataclass(frozen=True)
class WaveMomentSpec:
    """How waves make a roll moment on this hull.

    method: ``effective_slope`` (Froude–Krylov with coefficient r_eff) or ``rao_table`` (CSV).
    slope_beam_m: effective slope only: average the wave slope over this waterplane beam (m) —
    the short-wave reduction (0 = slope at the centreline, no reduction).
    """

    method: str
    effective_slope_coefficient: float = 0.7
    rao_file: Path | None = None
    slope_beam_m: float = 0.0


def spectrum_of(sea: SeaSpec):
    """The spectrum object for an irregular sea (``None`` for other kinds)."""
    from .spectra import Ittc, Jonswap, PiersonMoskowitz

    if sea.kind == "pierson_moskowitz":
        return PiersonMoskowitz(sea.hs_m, sea.tp_s)
    if sea.kind == "jonswap":
        return Jonswap(sea.hs_m, sea.tp_s, sea.gamma)
    if sea.kind == "ittc":
        if sea.t1_s is not None:
            return Ittc(sea.hs_m, sea.t1_s)
        if sea.tp_s is not None:
            return Ittc.from_tp(sea.hs_m, sea.tp_s)
        return Ittc.from_tz(sea.hs_m, sea.tz_s)
    return None


def roll_moment_model(wave_moment: WaveMomentSpec, vessel):
    """The roll-moment model (effective slope or RAO table) of a vessel."""
    from .waves import EffectiveSlope, read_rao_csv

    if wave_moment.method == "rao_table":
        return read_rao_csv(wave_moment.rao_file)
    return EffectiveSlope(vessel.displacement_kg, vessel.gm_m, wave_moment.effective_slope_coefficient,
                          wave_moment.slope_beam_m)


def sea_components(sea: SeaSpec, rng: np.random.Generator):
    """Wave components of the sea (``None`` for calm water or a roll-moment time series)."""
    from .waves import ElevationRecord, read_time_series_csv, regular_wave, synthesise

    if sea.kind == "calm":
        return None
    if sea.kind == "regular":
        return regular_wave(sea.period_s, height=sea.wave_height_m)
    if sea.kind == "time_series":
        rec = read_time_series_csv(sea.file)
        return rec.components() if isinstance(rec, ElevationRecord) else None
    return synthesise(spectrum_of(sea), sea.n_components, rng)


def build_excitation(
    sea: SeaSpec,
    wave_moment: WaveMomentSpec,
    vessel,
    heading_rad: float,
    t: np.ndarray,
    x: np.ndarray,
    rng: np.random.Generator,
):
    """Wave roll moment and elevation on the grid ``t`` (s) with distance run ``x`` (m).

    Returns ``(Excitation, notes)``; notes are warning lines (e.g. components outside an RAO table).
    A roll-moment time series is interpolated directly (its elevation is unknown: NaN).
    """
    from .simulation import Excitation
    from .waves import MomentRecord, read_time_series_csv, wave_loads

    if sea.kind == "time_series":
        rec = read_time_series_csv(sea.file)
        if isinstance(rec, MomentRecord):
            return Excitation(rec.moment(t), np.full_like(t, np.nan)), ()
    comps = sea_components(sea, rng)
    if comps is None:
        return Excitation(np.zeros_like(t), np.zeros_like(t)), ()
    loads = wave_loads(comps, t, heading_rad, x, roll_moment_model(wave_moment, vessel))
    return Excitation(loads.moment, loads.elevation), tuple(loads.warnings)
