"""PNG plots of a run (matplotlib, Agg backend: no screen needed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np


_COLOURS = {"off": "tab:gray", "on": "tab:blue"}


def _tidy(ax) -> None:
    """Legend top right and a light grid (every time-series panel)."""
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)


def _save(fig, path: Path) -> Path:
    """Lay out, write the PNG and free the figure; returns the path."""
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    _pyplot().close(fig)
    return path


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_passive(folder: Path, rec: dict[str, np.ndarray], scenario) -> list[Path]:
    """roll.png: roll angle, wave roll moment and speed against time; roll_spectrum.png (Welch)."""
    plt = _pyplot()
    t = rec["t_s"]
    out = []
    fig, ax = plt.subplots(3, 1, figsize=(10, 7), sharex=True)
    ax[0].plot(t, np.degrees(rec["roll_rad"]), lw=0.7, label="roll (true)")
    ax[0].axvspan(0, scenario.warmup_s, color="0.9", label="warm-up (not in statistics)")
    ax[0].set_ylabel("roll, deg")
    _tidy(ax[0])
    ax[1].plot(t, rec["wave_moment_n_m"] / 1e3, lw=0.6, label="wave")
    if np.any(rec["external_moment_n_m"]):
        ax[1].plot(t, rec["external_moment_n_m"] / 1e3, lw=0.9, label="external")
    ax[1].set_ylabel("roll moment, kN·m")
    _tidy(ax[1])
    ax[2].plot(t, rec["speed_ms"] / (1852 / 3600), lw=0.9)
    ax[2].set_ylabel("speed, kn")
    ax[2].set_xlabel("time, s")
    ax[2].grid(alpha=0.3)
    fig.suptitle(f"{scenario.name} — stabiliser off")
    out.append(_save(fig, folder / "roll.png"))

    p = _roll_spectra(folder, {"off": rec}, scenario, f"{scenario.name} — roll spectrum (Welch)")
    if p is not None:
        out.append(p)
    return out


def _roll_spectra(folder: Path, runs: dict[str, dict[str, np.ndarray]], scenario, title: str) -> Path | None:
    """roll_spectrum.png: Welch estimates after the warm-up, one line per run (None if too short)."""
    from scipy.signal import welch

    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(8, 4.5))
    drawn = False
    for mode, rec in runs.items():
        t = rec["t_s"]
        sel = (t >= scenario.warmup_s) & np.isfinite(rec["roll_rad"])
        if np.count_nonzero(sel) <= 256:
            continue
        fs = 1.0 / (t[1] - t[0])
        # segments of a quarter of the record (7 averages with 50 % overlap): ~0.02 rad/s resolution
        f, s = welch(np.degrees(rec["roll_rad"][sel]), fs=fs, nperseg=np.count_nonzero(sel) // 4)
        ax.plot(2 * np.pi * f, s / (2 * np.pi), lw=1.0, color=_COLOURS[mode], label=f"stabiliser {mode}")
        drawn = True
    p = None
    if drawn:
        w0 = 2 * np.pi / scenario.vessel.params.natural_period_s
        ax.axvline(w0, color="r", ls="--", lw=0.8, label=f"natural roll frequency {w0:.3f} rad/s")
        ax.set_xlim(0, 2.0)
        ax.set_xlabel("encounter frequency, rad/s")
        ax.set_ylabel("roll spectrum, deg²·s/rad")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
        ax.set_title(title)
        fig.tight_layout()
        p = folder / "roll_spectrum.png"
        fig.savefig(p, dpi=110)
    plt.close(fig)
    return p



def plot_closed_loop(folder: Path, runs: dict[str, dict[str, np.ndarray]], scenario, params) -> list[Path]:
    """roll.png (roll on vs off), roll_spectrum.png (Welch, on vs off), fins.png (fin angles with limits)."""
    plt = _pyplot()
    out = []
    name = scenario.name
    fig, ax = plt.subplots(2, 1, figsize=(10, 6), sharex=True)
    for mode, rec in runs.items():
        ax[0].plot(rec["t_s"], np.degrees(rec["roll_rad"]), lw=0.7, color=_COLOURS[mode], label=f"stabiliser {mode}")
    ax[0].axvspan(0, scenario.warmup_s, color="0.92", label="warm-up (not in statistics)")
    ax[0].set_ylabel("roll, deg")
    _tidy(ax[0])
    rec = next(iter(runs.values()))
    ax[1].plot(rec["t_s"], rec["wave_moment_n_m"] / 1e3, lw=0.6, color="tab:green", label="wave")
    if "on" in runs:
        ax[1].plot(runs["on"]["t_s"], runs["on"]["fin_moment_n_m"] / 1e3, lw=0.6, color="tab:blue", label="fins (on)")
    ax[1].set_ylabel("roll moment, kN·m")
    ax[1].set_xlabel("time, s")
    _tidy(ax[1])
    fig.suptitle(f"{name} — roll")
    out.append(_save(fig, folder / "roll.png"))

    p = _roll_spectra(folder, runs, scenario, f"{name} — roll spectra (Welch)")
    if p is not None:
        out.append(p)

    if "on" in runs:
        rec = runs["on"]
        t = rec["t_s"]
        fig, ax = plt.subplots(2, 1, figsize=(10, 6), sharex=True)
        ax[0].plot(t, np.degrees(rec["fin_port_rad"]), lw=0.6, label="port fin")
        ax[0].plot(t, np.degrees(rec["fin_stbd_rad"]), lw=0.6, label="starboard fin")
        a = np.degrees(params.angle_limit)
        ax[0].axhline(a, color="r", lw=0.8, ls="--", label=f"angle limit ±{a:.0f} deg")
        ax[0].axhline(-a, color="r", lw=0.8, ls="--")
        ax[0].set_ylabel("fin angle, deg")
        _tidy(ax[0])
        ae = np.degrees(rec["fin_stbd_alpha_eff_rad"])
        ax[1].plot(t, ae, lw=0.6, color="tab:orange", label="starboard effective angle of attack")
        st = np.degrees(scenario.vessel.fin_stbd.stall_angle_rad)
        ax[1].axhline(st, color="r", lw=0.8, ls="--", label=f"stall ±{st:.0f} deg")
        ax[1].axhline(-st, color="r", lw=0.8, ls="--")
        ax[1].set_ylabel("angle, deg")
        ax[1].set_xlabel("time, s")
        _tidy(ax[1])
        fig.suptitle(f"{name} — fins (stabiliser on)")
        out.append(_save(fig, folder / "fins.png"))
    return out
