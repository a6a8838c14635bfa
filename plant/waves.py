"""Wave components, irregular-sea synthesis, wave records, elevation at the ship and wave roll moment.

A sea is a frozen set of long-crested deep-water components (`Components`)::

    ζ(x, y, t) = Σ a_i cos ψ_i,   ψ_i = ω_i t − k_i (x cos β − y sin β) + ε_i,   k_i = ω_i²/g

with the wave heading β of DEVELOPERS.md (0 following seas, π/2 beam seas from starboard, π head
seas; in the body frame the waves travel along (cos β, −sin β)). At the ship origin, which has
travelled X(t) = ∫U dt along its course, ψ_i(t) = ω_i t − k_i cos β X(t) + ε_i; the frequency
of ψ_i is the encounter frequency ω_i − ω_i² U cos β / g.

Synthesis (`synthesise`)
    N components on the band [ω_lo, ω_hi] cut into N equal bins of width Δω. On the default
    *jittered* grid each ω_i is drawn uniformly inside its bin, so the frequencies are not
    commensurate and the record does not repeat; a uniform grid (bin centres) repeats every
    2π/Δω seconds — about 10 min for N = 400 over a typical band — which a one-hour run would
    show as a periodic artefact. Amplitudes a_i = √(2 S(ω_i) Δω); phases ε_i uniform on [0, 2π).
    The band is chosen by `plant.spectra.frequency_band` so the truncated tails hold < 0.1 % of m0.
    Draw order from the generator: the N jitters (jittered grid only), then the N phases.

Wave roll moment (`wave_loads`)
    M(t) = Re Σ X(ω_i, β) a_i e^{iψ_i(t)} = Σ |X_i| a_i cos(ψ_i + θ_i), X = |X| e^{iθ} in N·m per
    m of wave amplitude, given by a roll-moment model:

    * `EffectiveSlope`: the Froude–Krylov effective-slope moment of DEVELOPERS.md,
      M = −Δ g GM r_eff ∂ζ/∂y = Δ g GM r_eff Σ a_i k_i sin β sin ψ_i, i.e.
      X = Δ g GM r_eff k sin β e^{−iπ/2} (|X| = Δ g GM r_eff k |sin β|, θ = −90° for
      0 < β < π and +90° for π < β < 2π).
    * `RaoTable`: a user table of |X| and θ against heading and wave frequency (read by
      `read_rao_csv`), interpolated linearly, zero outside its frequency range (with warnings).

    The sums run in chunks of time with bounded memory (about 50 MB whatever the record length).
    When t and X(t) are evenly spaced (fixed step, constant speed), each chunk is one complex
    matrix–vector product with a table of e^{i m Δψ_i}; otherwise the phases are evaluated
    directly.

Records from CSV files
    ``time_s,wave_elevation_m`` (elevation at a fixed point, decomposed by FFT into components),
    ``time_s,roll_moment_kN_m`` (a moment used directly, linearly interpolated) and the RAO table
    ``heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg``. Malformed files raise
    `SeaInputError` naming the file, row and column. Extra columns are ignored; lines starting
    with ``#`` and blank lines are skipped.
"""

from __future__ import annotations

import csv
import io
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol, runtime_checkable

import numpy as np

from plant.constants import DEG, G
from plant.spectra import Spectrum, frequency_band

__all__ = [
    "ELEVATION_COLUMNS",
    "MOMENT_COLUMNS",
    "RAO_COLUMNS",
    "Components",
    "EffectiveSlope",
    "ElevationRecord",
    "MomentRecord",
    "RaoTable",
    "RollMomentModel",
    "SeaInputError",
    "WaveLoads",
    "components_from_elevation",
    "read_elevation_csv",
    "read_moment_csv",
    "read_rao_csv",
    "read_time_series_csv",
    "regular_wave",
    "synthesise",
    "wave_elevation",
    "wave_loads",
    "wave_roll_moment",
    "write_elevation_csv",
    "write_moment_csv",
    "write_rao_csv",
]

ELEVATION_COLUMNS = ("time_s", "wave_elevation_m")
MOMENT_COLUMNS = ("time_s", "roll_moment_kN_m")
RAO_COLUMNS = ("heading_deg", "wave_frequency_rad_s", "moment_kN_m_per_m", "phase_deg")

_KN = 1000.0  # N per kN
_TWO_PI = 2.0 * math.pi
# Largest number of (time sample × component) elements held at once: 1.5 M elements is 24 MB of
# complex128 (fast path) or 36 MB for the three float64 arrays of the direct path.
_CHUNK_ELEMENTS = 1_500_000
# Largest phase error (rad) accepted from treating t and X(t) as evenly spaced.
_AFFINE_PHASE_TOL = 1e-9
# Relative spread of time steps accepted as a fixed sample interval for an FFT decomposition.
_UNIFORM_STEP_RTOL = 1e-4


class SeaInputError(ValueError):
    """A wave input file that cannot be used, with the place and the reason.

    Attributes
    ----------
    path : str
        The file.
    row : int or None
        1-based line number in the file.
    column : str or None
        Column name.
    reason : str
        What is wrong.
    """

    def __init__(self, path: str | os.PathLike[str], reason: str, *, row: int | None = None,
                 column: str | None = None) -> None:
        self.path = str(path)
        self.row = row
        self.column = column
        self.reason = reason
        where = []
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        prefix = f"{self.path}: " + (", ".join(where) + ": " if where else "")
        super().__init__(prefix + reason)


# ----------------------------------------------------------------------------------------------
# components
# ----------------------------------------------------------------------------------------------


def _frozen_array(name: str, value: np.ndarray | list[float], dtype: type = float) -> np.ndarray:
    arr = np.array(value, dtype=dtype, copy=True)
    if arr.ndim != 1:
        raise ValueError(f"{name}: expected a 1-D array, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: contains NaN or infinite values")
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True, eq=False)
class Components:
    """A frozen set of long-crested deep-water wave components.

    Parameters
    ----------
    omega : array_like
        Wave frequencies ω_i, rad/s (> 0).
    wave_number : array_like
        Wave numbers k_i, rad/m (≥ 0); deep water k = ω²/g.
    amplitude : array_like
        Elevation amplitudes a_i, m (≥ 0).
    phase : array_like
        Phases ε_i, rad.

    The arrays are copied and made read-only.
    """

    omega: np.ndarray
    wave_number: np.ndarray
    amplitude: np.ndarray
    phase: np.ndarray

    def __post_init__(self) -> None:
        names = ("omega", "wave_number", "amplitude", "phase")
        arrays = {n: _frozen_array(n, getattr(self, n)) for n in names}
        sizes = {a.size for a in arrays.values()}
        if len(sizes) != 1 or 0 in sizes:
            raise ValueError(
                "omega, wave_number, amplitude and phase must be non-empty and of one length, got "
                + ", ".join(f"{n}: {a.size}" for n, a in arrays.items())
            )
        if np.any(arrays["omega"] <= 0.0):
            raise ValueError("omega: wave frequencies must be > 0 rad/s")
        if np.any(arrays["wave_number"] < 0.0):
            raise ValueError("wave_number: must be ≥ 0 rad/m")
        if np.any(arrays["amplitude"] < 0.0):
            raise ValueError("amplitude: must be ≥ 0 m")
        for n, a in arrays.items():
            object.__setattr__(self, n, a)

    @classmethod
    def deep_water(cls, omega: np.ndarray, amplitude: np.ndarray, phase: np.ndarray) -> Components:
        """Components with the deep-water wave numbers k = ω²/g."""
        w = np.asarray(omega, dtype=float)
        return cls(w, w * w / G, amplitude, phase)

    def __len__(self) -> int:
        return int(self.omega.size)

    @property
    def variance(self) -> float:
        """Elevation variance Σ a_i²/2, m²."""
        return float(0.5 * np.sum(self.amplitude**2))


def synthesise(
    spectrum: Spectrum,
    n_components: int,
    rng: np.random.Generator,
    *,
    band: tuple[float, float] | None = None,
    tail_fraction: float = 1e-3,
    grid: str = "jittered",
) -> Components:
    """Draw a random-phase irregular sea from a spectrum.

    Parameters
    ----------
    spectrum : Spectrum
        S(ω) in m²·s/rad with a ``peak_frequency``.
    n_components : int
        Number of components N.
    rng : numpy.random.Generator
        Seeded generator; the same seed gives the same components.
    band : (float, float), optional
        [ω_lo, ω_hi], rad/s. Default: `plant.spectra.frequency_band` with ``tail_fraction``, so
        the truncated tails hold less than ``tail_fraction`` of m0 (0.1 % by default).
    tail_fraction : float
        Share of m0 allowed outside the automatic band.
    grid : {"jittered", "uniform"}
        "jittered" (default): one random frequency inside each of the N equal bins — the record
        never repeats. "uniform": bin centres — the record repeats every 2π/Δω s.

    Returns
    -------
    Components
        ω_i, k_i = ω_i²/g, a_i = √(2 S(ω_i) Δω), ε_i ~ U[0, 2π).
    """
    if not isinstance(rng, np.random.Generator):
        raise TypeError("rng must be a numpy.random.Generator (seeded from the scenario seed)")
    n = int(n_components)
    if n < 1 or n != n_components:
        raise ValueError(f"n_components = {n_components!r}: must be a whole number ≥ 1")
    lo, hi = frequency_band(spectrum, tail_fraction) if band is None else map(float, band)
    if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 < lo < hi):
        raise ValueError(f"band = ({lo!r}, {hi!r}) rad/s: need 0 < ω_lo < ω_hi")
    d_omega = (hi - lo) / n
    left = lo + d_omega * np.arange(n)
    if grid == "jittered":
        omega = left + d_omega * rng.random(n)
    elif grid == "uniform":
        omega = left + 0.5 * d_omega
    else:
        raise ValueError(f"grid = {grid!r}: must be 'jittered' or 'uniform'")
    s = np.asarray(spectrum(omega), dtype=float)
    amplitude = np.sqrt(2.0 * s * d_omega)
    phase = rng.uniform(0.0, _TWO_PI, n)
    return Components.deep_water(omega, amplitude, phase)


def regular_wave(
    period: float, *, height: float | None = None, amplitude: float | None = None,
    phase: float = 0.0,
) -> Components:
    """A regular deep-water wave as a single component.

    Parameters
    ----------
    period : float
        Wave period T, s (ω = 2π/T).
    height, amplitude : float
        Give exactly one: crest-to-trough height H (m) or amplitude a = H/2 (m).
    phase : float
        ε, rad: ζ = a cos(ω t − k cos β X + ε) at the ship.
    """
    if (height is None) == (amplitude is None):
        raise ValueError("give exactly one of height (m) or amplitude (m)")
    a = 0.5 * float(height) if height is not None else float(amplitude)  # type: ignore[arg-type]
    if not (math.isfinite(a) and a >= 0.0):
        raise ValueError(f"wave amplitude = {a!r} m: must be finite and ≥ 0")
    if not (math.isfinite(period) and period > 0.0):
        raise ValueError(f"period = {period!r} s: must be finite and > 0")
    return Components.deep_water([_TWO_PI / period], [a], [float(phase)])


def _uniform_step(time: np.ndarray) -> tuple[float, int | None]:
    """Mean step of ``time`` and the index of the first sample whose step is off the median step."""
    steps = np.diff(time)
    dt = float((time[-1] - time[0]) / (time.size - 1))
    ref = float(np.median(steps))
    bad = np.nonzero(np.abs(steps - ref) > _UNIFORM_STEP_RTOL * abs(ref))[0]
    return dt, (int(bad[0]) + 1 if bad.size else None)


def components_from_elevation(
    time: np.ndarray, elevation: np.ndarray, *, omega_max: float | None = None
) -> Components:
    """Decompose an evenly sampled elevation record at a fixed point into components by FFT.

    With N samples at step Δt from t0 and X_j = Σ_n (ζ_n − ζ̄) e^{−2πi jn/N}, component j has
    ω_j = 2π j/(N Δt), a_j = 2|X_j|/N (|X_j|/N for the Nyquist bin of even N) and
    ε_j = arg X_j − ω_j t0, so that Σ a_j cos(ω_j t_n + ε_j) reproduces ζ_n − ζ̄ at every sample.
    The mean ζ̄ is dropped (it carries no slope). Beyond its length the sum repeats the record
    with period N Δt. Components are deep-water (k = ω²/g) and travel along the heading given
    when the sea is used.

    Parameters
    ----------
    time : array_like
        Sample times, s, evenly spaced (relative spread of steps ≤ 1e-4).
    elevation : array_like
        Elevation ζ, m.
    omega_max : float, optional
        Drop components above this frequency, rad/s (e.g. measurement noise).
    """
    t = np.asarray(time, dtype=float)
    z = np.asarray(elevation, dtype=float)
    if t.ndim != 1 or z.shape != t.shape or t.size < 4:
        raise ValueError("time and elevation must be 1-D arrays of one length with ≥ 4 samples")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(z))):
        raise ValueError("time and elevation must be finite")
    dt, bad = _uniform_step(t)
    if not dt > 0.0 or bad is not None:
        raise ValueError("time must increase by a fixed step for an FFT decomposition")
    n = t.size
    spec = np.fft.rfft(z - z.mean())
    j = np.arange(1, spec.size)
    omega = _TWO_PI * j / (n * dt)
    amp = 2.0 * np.abs(spec[1:]) / n
    if n % 2 == 0:
        amp[-1] *= 0.5
    phase = np.angle(spec[1:]) - omega * t[0]
    if omega_max is not None:
        keep = omega <= float(omega_max)
        if not np.any(keep):
            raise ValueError(f"omega_max = {omega_max!r} rad/s leaves no component")
        omega, amp, phase = omega[keep], amp[keep], phase[keep]
    return Components.deep_water(omega, amp, np.mod(phase, _TWO_PI))


# ----------------------------------------------------------------------------------------------
# CSV files
# ----------------------------------------------------------------------------------------------


def _read_columns(
    path: str | os.PathLike[str], required: tuple[str, ...]
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Numeric columns ``required`` of a CSV file and the 1-based file line of every data row."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise SeaInputError(p, f"cannot read the file ({exc})") from exc
    reader = csv.reader(io.StringIO(text))
    header: list[str] | None = None
    index: dict[str, int] = {}
    values: dict[str, list[float]] = {name: [] for name in required}
    lines: list[int] = []
    for row in reader:
        line = reader.line_num
        if not row or all(not cell.strip() for cell in row) or row[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = [cell.strip() for cell in row]
            seen: set[str] = set()
            for name in header:
                if name in seen:
                    raise SeaInputError(p, "column name appears twice", row=line, column=name)
                seen.add(name)
            for name in required:
                if name not in header:
                    raise SeaInputError(
                        p,
                        f"missing column (expected columns {', '.join(required)}; "
                        f"found {', '.join(header) or 'none'})",
                        row=line,
                        column=name,
                    )
                index[name] = header.index(name)
            continue
        if len(row) != len(header):
            raise SeaInputError(p, f"expected {len(header)} fields, found {len(row)}", row=line)
        for name in required:
            cell = row[index[name]].strip()
            try:
                v = float(cell)
            except ValueError:
                raise SeaInputError(p, f"not a number: {cell!r}", row=line, column=name) from None
            if not math.isfinite(v):
                raise SeaInputError(p, f"not a finite number: {cell!r}", row=line, column=name)
            values[name].append(v)
        lines.append(line)
    if header is None:
        raise SeaInputError(p, f"empty file: expected a header {','.join(required)}")
    if len(lines) < 2:
        raise SeaInputError(p, f"needs at least 2 data rows, found {len(lines)}")
    return {k: np.asarray(v) for k, v in values.items()}, np.asarray(lines)


def _check_increasing(path: Path | str, time: np.ndarray, lines: np.ndarray) -> None:
    bad = np.nonzero(np.diff(time) <= 0.0)[0]
    if bad.size:
        i = int(bad[0]) + 1
        raise SeaInputError(
            path,
            f"time must increase: {float(time[i])!r} s follows {float(time[i - 1])!r} s",
            row=int(lines[i]),
            column="time_s",
        )


def _check_series(label: str, time: np.ndarray, values: np.ndarray, name: str) -> None:
    for n, a in (("time", time), (name, values)):
        arr = np.asarray(a)
        if arr.ndim != 1 or arr.size < 2 or not np.all(np.isfinite(arr)):
            raise ValueError(f"{label}: {n} must be a finite 1-D array with ≥ 2 samples")
    if np.shape(time) != np.shape(values):
        raise ValueError(f"{label}: time and {name} differ in length")
    if np.any(np.diff(time) <= 0.0):
        raise ValueError(f"{label}: time must increase")


def _fmt(v: float) -> str:
    return repr(float(v))


@dataclass(frozen=True, eq=False)
class ElevationRecord:
    """Wave elevation at a fixed point from a ``time_s,wave_elevation_m`` file (SI inside)."""

    time: np.ndarray
    """Sample times, s (evenly spaced, increasing)."""
    elevation: np.ndarray
    """Elevation ζ, m."""
    source: str = ""

    def __post_init__(self) -> None:
        _check_series(self.source or "elevation record", self.time, self.elevation, "elevation")

    def components(self, *, omega_max: float | None = None) -> Components:
        """The record as components (`components_from_elevation`)."""
        return components_from_elevation(self.time, self.elevation, omega_max=omega_max)


@dataclass(frozen=True, eq=False)
class MomentRecord:
    """A roll moment time series from a ``time_s,roll_moment_kN_m`` file (SI inside)."""

    time: np.ndarray
    """Sample times, s (increasing)."""
    moment_n_m: np.ndarray
    """Roll moment, N·m (the file's kN·m × 1000), same sign convention as the wave moment."""
    source: str = ""

    def __post_init__(self) -> None:
        _check_series(self.source or "moment record", self.time, self.moment_n_m, "moment_n_m")

    def moment(self, t: np.ndarray | float) -> np.ndarray:
        """Roll moment at times ``t`` (s), N·m, by linear interpolation.

        Raises
        ------
        ValueError
            If ``t`` reaches outside the record (the record is never extrapolated).
        """
        tt = np.asarray(t, dtype=float)
        slack = 1e-9 * max(1.0, abs(self.time[-1]))
        if tt.size and (tt.min() < self.time[0] - slack or tt.max() > self.time[-1] + slack):
            raise ValueError(
                f"{self.source or 'moment record'}: times {tt.min():g}–{tt.max():g} s reach outside "
                f"the record ({self.time[0]:g}–{self.time[-1]:g} s)"
            )
        return np.interp(tt, self.time, self.moment_n_m)


def read_elevation_csv(path: str | os.PathLike[str]) -> ElevationRecord:
    """Read ``time_s,wave_elevation_m``: evenly spaced, increasing times; elevation in m.

    Raises
    ------
    SeaInputError
        Unreadable file, missing column, wrong field count, non-numeric or non-finite cell,
        fewer than 4 rows, time not increasing, or time step not fixed (the FFT needs one).
    """
    cols, lines = _read_columns(path, ELEVATION_COLUMNS)
    t, z = cols["time_s"], cols["wave_elevation_m"]
    _check_increasing(path, t, lines)
    if t.size < 4:
        raise SeaInputError(path, f"needs at least 4 data rows for an FFT, found {t.size}")
    dt, bad = _uniform_step(t)
    if bad is not None:
        raise SeaInputError(
            path,
            f"time step {float(t[bad] - t[bad - 1])!r} s differs from the usual step "
            f"{float(np.median(np.diff(t)))!r} s "
            "(an elevation record must be evenly sampled)",
            row=int(lines[bad]),
            column="time_s",
        )
    t.flags.writeable = False
    z.flags.writeable = False
    return ElevationRecord(t, z, str(path))


def read_moment_csv(path: str | os.PathLike[str]) -> MomentRecord:
    """Read ``time_s,roll_moment_kN_m``: increasing times; moment in kN·m (stored in N·m).

    Raises
    ------
    SeaInputError
        Unreadable file, missing column, wrong field count, non-numeric or non-finite cell,
        fewer than 2 rows, or time not increasing.
    """
    cols, lines = _read_columns(path, MOMENT_COLUMNS)
    t = cols["time_s"]
    _check_increasing(path, t, lines)
    m = cols["roll_moment_kN_m"] * _KN
    t.flags.writeable = False
    m.flags.writeable = False
    return MomentRecord(t, m, str(path))


def read_time_series_csv(path: str | os.PathLike[str]) -> ElevationRecord | MomentRecord:
    """Read a user time series, choosing the reader from its header.

    ``time_s,wave_elevation_m`` gives an `ElevationRecord` (decompose it with ``.components()``);
    ``time_s,roll_moment_kN_m`` gives a `MomentRecord` (use ``.moment(t)`` directly).

    Raises
    ------
    SeaInputError
        If the header has neither column, has both, or the file is malformed.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise SeaInputError(p, f"cannot read the file ({exc})") from exc
    reader = csv.reader(io.StringIO(text))
    for row in reader:
        if not row or all(not c.strip() for c in row) or row[0].lstrip().startswith("#"):
            continue
        names = {c.strip() for c in row}
        has_z, has_m = ELEVATION_COLUMNS[1] in names, MOMENT_COLUMNS[1] in names
        if has_z and not has_m:
            return read_elevation_csv(p)
        if has_m and not has_z:
            return read_moment_csv(p)
        raise SeaInputError(
            p,
            "header must name exactly one of 'wave_elevation_m' or 'roll_moment_kN_m' beside "
            f"'time_s' (found {', '.join(sorted(names))})",
            row=reader.line_num,
        )
    raise SeaInputError(p, "empty file: expected a header time_s,wave_elevation_m or time_s,roll_moment_kN_m")


def write_elevation_csv(path: str | os.PathLike[str], time: np.ndarray, elevation: np.ndarray) -> None:
    """Write ``time_s,wave_elevation_m`` (round-trips exactly through `read_elevation_csv`)."""
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(ELEVATION_COLUMNS) + "\n")
        for ti, zi in zip(np.asarray(time, float), np.asarray(elevation, float), strict=True):
            fh.write(f"{_fmt(ti)},{_fmt(zi)}\n")


def write_moment_csv(path: str | os.PathLike[str], time: np.ndarray, moment_n_m: np.ndarray) -> None:
    """Write ``time_s,roll_moment_kN_m`` from a moment in N·m."""
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(MOMENT_COLUMNS) + "\n")
        for ti, mi in zip(np.asarray(time, float), np.asarray(moment_n_m, float) / _KN, strict=True):
            fh.write(f"{_fmt(ti)},{_fmt(mi)}\n")


# ----------------------------------------------------------------------------------------------
# roll-moment models
# ----------------------------------------------------------------------------------------------


@runtime_checkable
class RollMomentModel(Protocol):
    """Linear wave roll moment per metre of wave amplitude, X(ω, β) = |X| e^{iθ} (N·m/m).

    M(t) = Σ |X(ω_i, β)| a_i cos(ψ_i(t) + θ(ω_i, β)).
    """

    def transfer(self, omega: np.ndarray, heading: float) -> np.ndarray:
        """Complex X at wave frequencies ``omega`` (rad/s) and heading β (rad), N·m/m."""
        ...

    def warnings(self, components: Components, heading: float) -> tuple[str, ...]:
        """Warnings about using the model for these components at this heading."""
        ...


@dataclass(frozen=True)
class EffectiveSlope:
    """Froude–Krylov effective-slope roll moment (DEVELOPERS.md sign convention).

    M = −Δ g GM r_eff ∂ζ/∂y; for ζ = a cos ψ this is Δ g GM r_eff a k sin β sin ψ, so
    X(ω, β) = −i Δ g GM r_eff (ω²/g) sin β.

    With ``beam_m`` = B > 0 the slope is averaged across the waterplane, y ∈ [−B/2, B/2], instead
    of taken at the centreline: the mean of ∂ζ/∂y over the beam is [ζ(B/2) − ζ(−B/2)]/B, which for
    a component with transverse wavenumber k_y = k sin β multiplies the slope by
    sinc(k_y B/2) = sin(k_y B/2)/(k_y B/2). Waves much longer than the beam keep their full slope;
    waves about as short as the beam lose most of it (and reverse beyond k_y B = 2π). This is the
    short-wave reduction the plain effective-slope model lacks (derivation; the idea of a
    frequency-dependent effective slope is standard, e.g. Lloyd, Seakeeping 1989 — from memory).

    Parameters
    ----------
    displacement : float
        Displacement mass Δ, kg.
    gm : float
        Metacentric height GM, m (> 0).
    r_eff : float
        Effective wave slope coefficient, − (≥ 0; 1 = the full surface slope).
    beam_m : float
        Waterplane beam B over which the slope is averaged, m (0 = slope at the centreline).
    """

    displacement: float
    gm: float
    r_eff: float = 1.0
    beam_m: float = 0.0

    def __post_init__(self) -> None:
        for name, unit, low_ok in (("displacement", "kg", False), ("gm", "m", False), ("r_eff", "-", True),
                                   ("beam_m", "m", True)):
            v = float(getattr(self, name))
            if not math.isfinite(v) or v < 0.0 or (v == 0.0 and not low_ok):
                raise ValueError(f"{name} = {v!r} {unit}: must be finite and " + (">= 0" if low_ok else "> 0"))
            object.__setattr__(self, name, v)

    def transfer(self, omega: np.ndarray, heading: float) -> np.ndarray:
        """X = −i Δ g GM r_eff (ω²/g) sin β · sinc(k B sin β / 2), N·m per m of wave amplitude."""
        w = np.asarray(omega, dtype=float)
        s_b = math.sin(float(heading))
        slope = w * w / G * s_b
        if self.beam_m > 0.0:
            half = 0.5 * (w * w / G) * s_b * self.beam_m  # k_y B / 2
            slope = slope * np.sinc(half / np.pi)  # numpy's sinc is sin(πx)/(πx)
        return -1j * (self.displacement * G * self.gm * self.r_eff) * slope

    def warnings(self, components: Components, heading: float) -> tuple[str, ...]:
        """None: the effective-slope model covers every frequency and heading."""
        return ()


@dataclass(frozen=True, eq=False)
class RaoTable:
    """Roll-moment RAO table X(β, ω) = |X| e^{iθ} (N·m per m of wave amplitude).

    Parameters
    ----------
    headings : array_like
        Distinct headings β, rad, in [0, 2π), increasing.
    omega : array_like
        Distinct wave frequencies (not encounter frequencies), rad/s, > 0, increasing.
    magnitude : array_like, shape (n_headings, n_omega)
        |X|, N·m/m, ≥ 0.
    phase : array_like, shape (n_headings, n_omega)
        θ, rad: M = |X| a cos(ψ + θ) for ζ = a cos ψ at the ship origin.
    source : str
        Where the table came from (for messages).

    Notes
    -----
    Interpolation is linear in heading then linear in frequency, on the complex value
    X = |X| e^{iθ} (real and imaginary parts). The complex form is chosen because a roll RAO is
    zero in head and following seas, where its phase is undefined; interpolating phase there
    would swing θ by 90° between neighbouring headings. Outside the frequency range X = 0 and
    `warnings` reports the components (and their share of the elevation variance) lost.

    Heading symmetry: if every heading is ≤ 180° the table is taken as one side of a ship that
    is symmetric about its centreline. Waves at 360° − β are the mirror image (y → −y) of waves
    at β and have the same elevation history at the ship origin (ψ depends on cos β only), and
    mirroring reverses the roll moment, so X(ω, 360° − β) = −X(ω, β): same |X|, θ + 180°. The
    effective-slope RAO obeys this (sin(360° − β) = −sin β). Headings outside the table's range
    (after mirroring) are refused. If any heading exceeds 180° the table is taken as covering the
    full circle and is interpolated periodically (between the last heading and the first + 360°).
    """

    headings: np.ndarray
    omega: np.ndarray
    magnitude: np.ndarray
    phase: np.ndarray
    source: str = ""
    values: np.ndarray = field(init=False, repr=False)
    half: bool = field(init=False)

    def __post_init__(self) -> None:
        h = np.array(self.headings, dtype=float)
        w = np.array(self.omega, dtype=float)
        mag = np.array(self.magnitude, dtype=float)
        ph = np.array(self.phase, dtype=float)
        label = self.source or "RAO table"
        if h.ndim != 1 or w.ndim != 1 or h.size < 1 or w.size < 2:
            raise ValueError(f"{label}: need ≥ 1 heading and ≥ 2 frequencies")
        if mag.shape != (h.size, w.size) or ph.shape != mag.shape:
            raise ValueError(f"{label}: magnitude and phase must have shape {(h.size, w.size)}")
        for name, a in (("headings", h), ("omega", w), ("magnitude", mag), ("phase", ph)):
            if not np.all(np.isfinite(a)):
                raise ValueError(f"{label}: {name} contains NaN or infinite values")
        if np.any(h < 0.0) or np.any(h >= _TWO_PI) or np.any(np.diff(h) <= 0.0):
            raise ValueError(f"{label}: headings must be distinct, increasing, in [0, 2π)")
        if np.any(w <= 0.0) or np.any(np.diff(w) <= 0.0):
            raise ValueError(f"{label}: frequencies must be distinct, increasing, > 0")
        if np.any(mag < 0.0):
            raise ValueError(f"{label}: magnitudes must be ≥ 0 (the phase carries the sign)")
        for name, a in (("headings", h), ("omega", w), ("magnitude", mag), ("phase", ph)):
            a.flags.writeable = False
            object.__setattr__(self, name, a)
        values = mag * np.exp(1j * ph)
        values.flags.writeable = False
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "half", bool(h[-1] <= math.pi + 1e-12))

    @classmethod
    def from_model(
        cls, model: RollMomentModel, headings: np.ndarray, omega: np.ndarray, source: str = ""
    ) -> RaoTable:
        """Tabulate another model (e.g. `EffectiveSlope`) at the given headings (rad) and ω (rad/s)."""
        h = np.asarray(headings, dtype=float)
        w = np.asarray(omega, dtype=float)
        x = np.array([model.transfer(w, float(b)) for b in h])
        return cls(h, w, np.abs(x), np.angle(x), source)

    def _row(self, heading: float) -> np.ndarray:
        """Complex X over the table frequencies at heading β, interpolated linearly in β."""
        b = float(heading)
        if not math.isfinite(b):
            raise ValueError(f"heading = {heading!r} rad: must be finite")
        b = b % _TWO_PI
        h, v, sign = self.headings, self.values, 1.0
        tol = 1e-9
        if self.half:
            if b > math.pi:
                b, sign = _TWO_PI - b, -1.0
            if b < h[0] - tol or b > h[-1] + tol:
                raise ValueError(
                    f"{self.source or 'RAO table'}: heading {math.degrees(heading):g}° "
                    f"(≡ {math.degrees(b):g}° by centreline symmetry) is outside the table's "
                    f"{math.degrees(h[0]):g}°–{math.degrees(h[-1]):g}°"
                )
        else:
            h = np.concatenate(([h[-1] - _TWO_PI], h, [h[0] + _TWO_PI]))
            v = np.concatenate((v[-1:], v, v[:1]))
        if h.size == 1:
            return sign * v[0]
        i = int(np.clip(np.searchsorted(h, b, side="right") - 1, 0, h.size - 2))
        frac = min(max((b - h[i]) / (h[i + 1] - h[i]), 0.0), 1.0)
        return sign * ((1.0 - frac) * v[i] + frac * v[i + 1])

    def transfer(self, omega: np.ndarray, heading: float) -> np.ndarray:
        """Complex X at wave frequencies ``omega`` (rad/s) and heading β (rad), N·m/m; 0 outside the frequency range."""
        row = self._row(heading)
        w = np.asarray(omega, dtype=float)
        re = np.interp(w, self.omega, row.real, left=0.0, right=0.0)
        im = np.interp(w, self.omega, row.imag, left=0.0, right=0.0)
        return re + 1j * im

    def warnings(self, components: Components, heading: float) -> tuple[str, ...]:
        """One line per side of the frequency range that drops components."""
        out = []
        w, a2 = components.omega, components.amplitude**2
        total = float(a2.sum()) or 1.0
        for side, mask, edge in (
            ("below", w < self.omega[0], self.omega[0]),
            ("above", w > self.omega[-1], self.omega[-1]),
        ):
            if np.any(mask):
                out.append(
                    f"warning: {self.source or 'RAO table'}: {int(mask.sum())} of {w.size} wave "
                    f"components ({w[mask].min():.3g}–{w[mask].max():.3g} rad/s, "
                    f"{100.0 * float(a2[mask].sum()) / total:.2g} % of the elevation variance) lie "
                    f"{side} the table's {edge:.3g} rad/s and get no roll moment"
                )
        return tuple(out)


def read_rao_csv(path: str | os.PathLike[str]) -> RaoTable:
    """Read ``heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg`` into a `RaoTable`.

    Rows may come in any order but must form a full grid: every heading at every frequency.
    Headings in [0°, 360°] (360° is read as 0°); frequencies > 0; magnitudes ≥ 0 (kN·m per m of
    wave amplitude, stored in N·m/m); phases in degrees (stored in rad).

    Raises
    ------
    SeaInputError
        Unreadable file, missing column, bad cell, value out of range, duplicate row, or a
        missing (heading, frequency) pair.
    """
    cols, lines = _read_columns(path, RAO_COLUMNS)
    hd, w = cols["heading_deg"], cols["wave_frequency_rad_s"]
    mag, ph = cols["moment_kN_m_per_m"], cols["phase_deg"]
    grid: dict[tuple[float, float], tuple[float, float]] = {}
    for i, line in enumerate(lines):
        row = int(line)
        if not 0.0 <= hd[i] <= 360.0:
            raise SeaInputError(path, f"{float(hd[i])!r}° out of range (0 to 360)", row=row, column="heading_deg")
        if not w[i] > 0.0:
            raise SeaInputError(path, f"{float(w[i])!r} rad/s must be > 0", row=row, column="wave_frequency_rad_s")
        if mag[i] < 0.0:
            raise SeaInputError(
                path, f"{float(mag[i])!r} kN·m/m must be ≥ 0 (give the sign through phase_deg)",
                row=row, column="moment_kN_m_per_m",
            )
        key = (0.0 if hd[i] == 360.0 else float(hd[i]), float(w[i]))
        if key in grid:
            raise SeaInputError(
                path, f"second row for heading {key[0]:g}° (360° is 0°), frequency {key[1]:g} rad/s",
                row=row,
            )
        grid[key] = (float(mag[i]), float(ph[i]))
    headings = sorted({k[0] for k in grid})
    freqs = sorted({k[1] for k in grid})
    if len(freqs) < 2:
        raise SeaInputError(path, "needs at least 2 distinct frequencies", column="wave_frequency_rad_s")
    m = np.empty((len(headings), len(freqs)))
    p = np.empty_like(m)
    for i, hh in enumerate(headings):
        for j, ww in enumerate(freqs):
            if (hh, ww) not in grid:
                raise SeaInputError(
                    path, f"no row for heading {hh:g}° at frequency {ww:g} rad/s "
                    "(every heading needs every frequency)",
                )
            m[i, j], p[i, j] = grid[(hh, ww)]
    return RaoTable(np.asarray(headings) * DEG, np.asarray(freqs), m * _KN, p * DEG, str(path))


def write_rao_csv(path: str | os.PathLike[str], table: RaoTable) -> None:
    """Write a `RaoTable` as ``heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg``."""
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(RAO_COLUMNS) + "\n")
        for i, h in enumerate(table.headings):
            for j, w in enumerate(table.omega):
                fh.write(
                    f"{_fmt(h / DEG)},{_fmt(w)},{_fmt(table.magnitude[i, j] / _KN)},"
                    f"{_fmt(table.phase[i, j] / DEG)}\n"
                )


# ----------------------------------------------------------------------------------------------
# time series at the ship
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class WaveLoads:
    """Wave roll moment and elevation at the ship on one time grid."""

    moment: np.ndarray
    """Wave roll moment M(t), N·m (DEVELOPERS.md sign: > 0 rolls starboard side down)."""
    elevation: np.ndarray
    """Wave elevation at the ship origin ζ(t), m (z down in the body frame, but ζ > 0 is a crest)."""
    warnings: tuple[str, ...] = ()
    """``warning: ...`` lines from the roll-moment model (e.g. components outside an RAO table)."""


def _time_grid(t: np.ndarray | float, x: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    tt = np.atleast_1d(np.asarray(t, dtype=float))
    xx = np.atleast_1d(np.asarray(x, dtype=float))
    if tt.ndim != 1 or tt.size == 0:
        raise ValueError("t must be a non-empty 1-D array of times, s")
    if xx.shape != tt.shape:
        raise ValueError(f"x (distance along course, m) must match t: shapes {xx.shape} and {tt.shape}")
    if not (np.all(np.isfinite(tt)) and np.all(np.isfinite(xx))):
        raise ValueError("t and x must be finite")
    return tt, xx


def _even_steps(t: np.ndarray, x: np.ndarray, w_max: float, kc_max: float) -> tuple[float, float] | None:
    """(Δt, ΔX) if t and X are evenly spaced to within a phase error of 1e-9 rad, else None."""
    n = t.size
    if n < 2:
        return None
    j = np.arange(n)
    dt = (t[-1] - t[0]) / (n - 1)
    dx = (x[-1] - x[0]) / (n - 1)
    dev_t = float(np.max(np.abs(t - (t[0] + j * dt))))
    dev_x = float(np.max(np.abs(x - (x[0] + j * dx))))
    if w_max * dev_t + kc_max * dev_x <= _AFFINE_PHASE_TOL:
        return float(dt), float(dx)
    return None


def _phasor_sum(
    comp: Components, t: np.ndarray, heading: float, x: np.ndarray, coeffs: np.ndarray,
    chunk: int,
) -> np.ndarray:
    """Re Σ_i c_ij e^{iψ_i(t)} for each column j of ``coeffs`` (shape (N, m)); result (len(t), m)."""
    omega = comp.omega
    kc = comp.wave_number * math.cos(heading)
    eps = comp.phase
    nt, nc = t.size, omega.size
    out = np.empty((nt, coeffs.shape[1]))
    rows = max(16, min(int(chunk), _CHUNK_ELEMENTS // nc))
    steps = _even_steps(t, x, float(omega.max()), float(np.abs(kc).max()))
    if steps is not None:
        # ψ_i(t_s + m Δt) = ψ_i(t_s) + m Δψ_i: one table of e^{i m Δψ_i}, then per chunk
        # Σ_i c_ij e^{iψ_i(t_s)} e^{i m Δψ_i} is a complex matrix product.
        dt, dx = steps
        rows = min(rows, nt)
        d_psi = omega * dt - kc * dx
        table = np.exp(1j * np.outer(np.arange(rows), d_psi))
        for s in range(0, nt, rows):
            e = min(s + rows, nt)
            base = np.exp(1j * (omega * t[s] - kc * x[s] + eps))
            out[s:e] = (table[: e - s] @ (coeffs * base[:, None])).real
    else:
        c_re = np.ascontiguousarray(coeffs.real)
        c_im = np.ascontiguousarray(coeffs.imag)
        for s in range(0, nt, rows):
            e = min(s + rows, nt)
            psi = np.outer(t[s:e], omega)
            psi -= np.outer(x[s:e], kc)
            psi += eps
            out[s:e] = np.cos(psi) @ c_re - np.sin(psi) @ c_im
    return out


def wave_loads(
    components: Components,
    t: np.ndarray,
    heading: float,
    x: np.ndarray,
    roll_model: RollMomentModel,
    *,
    chunk: int = 4096,
) -> WaveLoads:
    """Wave roll moment and elevation at the ship on a time grid.

    Parameters
    ----------
    components : Components
        The sea.
    t : array_like
        Times, s (1-D; e.g. the RK4 half-step grid).
    heading : float
        Wave heading β, rad (0 following, π/2 beam from starboard, π head).
    x : array_like
        Distance X(t) the ship has travelled along its course at each t, m (U t at constant speed).
    roll_model : RollMomentModel
        `EffectiveSlope` or `RaoTable`.
    chunk : int
        Largest number of time samples per block (memory is also capped at about 1.5 M
        samples × components per block).

    Returns
    -------
    WaveLoads
        moment M(t) = Re Σ X(ω_i, β) a_i e^{iψ_i(t)} (N·m), elevation ζ(t) = Σ a_i cos ψ_i(t) (m),
        and the model's warnings; ψ_i(t) = ω_i t − k_i cos β X(t) + ε_i.
    """
    tt, xx = _time_grid(t, x)
    beta = float(heading)
    if not math.isfinite(beta):
        raise ValueError(f"heading = {heading!r} rad: must be finite")
    transfer = np.asarray(roll_model.transfer(components.omega, beta), dtype=complex)
    coeffs = np.stack([components.amplitude.astype(complex), transfer * components.amplitude], axis=1)
    sums = _phasor_sum(components, tt, beta, xx, coeffs, chunk)
    return WaveLoads(
        moment=sums[:, 1].copy(),
        elevation=sums[:, 0].copy(),
        warnings=tuple(roll_model.warnings(components, beta)),
    )


def wave_roll_moment(
    components: Components, t: np.ndarray, heading: float, x: np.ndarray,
    roll_model: RollMomentModel,
) -> np.ndarray:
    """Wave roll moment M(t), N·m — `wave_loads` without the elevation and warnings."""
    return wave_loads(components, t, heading, x, roll_model).moment


def wave_elevation(
    components: Components, t: np.ndarray, heading: float, x: np.ndarray, y: float = 0.0
) -> np.ndarray:
    """Wave elevation ζ (m) at the point (X(t), y) of the ship's track, y to starboard (m).

    ζ = Σ a_i cos(ω_i t − k_i (X cos β − y sin β) + ε_i).
    """
    tt, xx = _time_grid(t, x)
    beta = float(heading)
    if not math.isfinite(beta):
        raise ValueError(f"heading = {heading!r} rad: must be finite")
    coeffs = (components.amplitude * np.exp(1j * components.wave_number * float(y) * math.sin(beta)))[:, None]
    return _phasor_sum(components, tt, beta, xx, coeffs, 4096)[:, 0].copy()
