"""Run folders: a per-step CSV with units in the header, meta.json, metrics.json and plots.

A run never overwrites an earlier one: the default folder name carries the UTC start time and a
counter, and an explicitly named folder must be new or empty.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import platform
import sys
from importlib import metadata
from pathlib import Path

import numpy as np

from plant.constants import KNOT

# record key → (CSV column name with unit, scale factor from SI)
_DEG = 180.0 / math.pi
CSV_COLUMNS: tuple[tuple[str, str, float], ...] = (
    ("t_s", "time_s", 1.0),
    ("roll_rad", "roll_deg", _DEG),
    ("roll_rate_rad_s", "roll_rate_deg_s", _DEG),
    ("roll_accel_rad_s2", "roll_accel_deg_s2", _DEG),
    ("speed_ms", "speed_kn", 1.0 / KNOT),
    ("wave_elevation_m", "wave_elevation_m", 1.0),
    ("wave_moment_n_m", "wave_moment_kN_m", 1e-3),
    ("external_moment_n_m", "external_moment_kN_m", 1e-3),
    ("fin_moment_n_m", "fin_moment_kN_m", 1e-3),
    ("demand_port_rad", "demand_port_deg", _DEG),
    ("demand_stbd_rad", "demand_stbd_deg", _DEG),
    ("fin_port_rad", "fin_port_deg", _DEG),
    ("fin_stbd_rad", "fin_stbd_deg", _DEG),
    ("fin_port_alpha_eff_rad", "fin_port_alpha_eff_deg", _DEG),
    ("fin_stbd_alpha_eff_rad", "fin_stbd_alpha_eff_deg", _DEG),
    ("fin_port_lift_n", "fin_port_lift_kN", 1e-3),
    ("fin_stbd_lift_n", "fin_stbd_lift_kN", 1e-3),
    ("fin_drag_n", "fin_drag_kN", 1e-3),
    ("fin_drag_power_w", "fin_drag_power_kW", 1e-3),
    ("meas_roll_rad", "meas_roll_deg", _DEG),
    ("meas_roll_valid", "meas_roll_valid", 1.0),
    ("meas_roll_age_s", "meas_roll_age_s", 1.0),
    ("meas_roll_rate_rad_s", "meas_roll_rate_deg_s", _DEG),
    ("meas_roll_rate_valid", "meas_roll_rate_valid", 1.0),
    ("meas_speed_ms", "meas_speed_kn", 1.0 / KNOT),
    ("meas_speed_valid", "meas_speed_valid", 1.0),
    ("meas_speed_age_s", "meas_speed_age_s", 1.0),
    ("meas_fin_port_rad", "meas_fin_port_deg", _DEG),
    ("meas_fin_port_valid", "meas_fin_port_valid", 1.0),
    ("meas_fin_stbd_rad", "meas_fin_stbd_deg", _DEG),
    ("meas_fin_stbd_valid", "meas_fin_stbd_valid", 1.0),
    ("ctl_mode", "ctl_mode", 1.0),
    ("ctl_faults", "ctl_faults", 1.0),
    ("ctl_limiter", "ctl_limiter", 1.0),
    ("ctl_roll_rad", "ctl_roll_deg", _DEG),
    ("ctl_roll_rate_rad_s", "ctl_roll_rate_deg_s", _DEG),
    ("ctl_roll_accel_rad_s2", "ctl_roll_accel_deg_s2", _DEG),
    ("ctl_speed_ms", "ctl_speed_kn", 1.0 / KNOT),
    ("ctl_speed_factor", "ctl_speed_factor", 1.0),
    ("ctl_term_roll_rad", "ctl_term_roll_deg", _DEG),
    ("ctl_term_rate_rad", "ctl_term_rate_deg", _DEG),
    ("ctl_term_accel_rad", "ctl_term_accel_deg", _DEG),
    ("ctl_term_heel_rad", "ctl_term_heel_deg", _DEG),
    ("ctl_command_rad", "ctl_command_deg", _DEG),
    ("ctl_target_rad", "ctl_target_deg", _DEG),
    ("ctl_fade", "ctl_fade", 1.0),
)


def package_version() -> str:
    try:
        return metadata.version("finloop")
    except metadata.PackageNotFoundError:  # running from a plain checkout
        return "0+unknown"


def utc_now() -> _dt.datetime:
    return _dt.datetime.now(_dt.timezone.utc)


def new_run_folder(base: Path, stem: str, explicit: Path | None, start: _dt.datetime) -> Path:
    """Create and return a fresh run folder; never reuses a non-empty one.

    Raises ``FileExistsError`` when ``explicit`` exists and is not an empty folder.
    """
    if explicit is not None:
        if explicit.exists() and (not explicit.is_dir() or any(explicit.iterdir())):
            raise FileExistsError(f"{explicit}: already exists and is not an empty folder; choose a new --out")
        explicit.mkdir(parents=True, exist_ok=True)
        return explicit
    stamp = start.strftime("%Y%m%dT%H%M%SZ")
    for n in range(1000):
        name = f"{stem}-{stamp}" + (f"-{n}" if n else "")
        p = base / name
        try:
            p.mkdir(parents=True, exist_ok=False)
            return p
        except FileExistsError:
            continue
    raise FileExistsError(f"{base}: could not find a free run folder name for {stem}")


def write_steps_csv(path: Path, records: dict[str, np.ndarray]) -> list[str]:
    """Write the per-step CSV (SI records → trade units, named with their units). Returns the header."""
    from .recorder import StepRecorder  # the same writer (and reader) as live runs

    cols = [(key, name, scale) for key, name, scale in CSV_COLUMNS if key in records]
    header = [name for _, name, _ in cols]
    data = np.column_stack([np.asarray(records[key], dtype=float) * scale for key, _, scale in cols])
    with StepRecorder(path, header, flush_interval_s=1.0, fmt="%.7g") as rec:
        for row in data.tolist():
            rec.write(row)
    return header


def write_json(path: Path, obj) -> None:
    path.write_text(json.dumps(obj, indent=2, sort_keys=False, default=_json_default) + "\n", encoding="utf-8")


def _json_default(o):
    if isinstance(o, (np.floating, np.integer)):
        return o.item()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def base_meta(start: _dt.datetime) -> dict:
    return {
        "finloop_version": package_version(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "start_time_utc": start.isoformat(timespec="seconds"),
        "command": " ".join(sys.argv),
    }
