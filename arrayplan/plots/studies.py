"""Figures of the design studies: capacity against SNR, tolerance to errors.

Every function takes ``ax=None`` (or ``fig=None``), draws at A4 text width
and returns the figure.  Colours come from the perceptually uniform viridis
map.
"""

from __future__ import annotations

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ._axes import frequency_axis

__all__ = ["plot_capacity", "plot_active_channels", "plot_water_levels", "plot_gain_spread", "plot_survival",
           "shown_channels"]

_WIDTH_IN = 7.0          # A4 text width (210 mm less 15 mm margins), inches


def _axes(ax, height_in: float = 3.4):
    if ax is None:
        fig = Figure(figsize=(_WIDTH_IN, height_in), layout="constrained")
        return fig, fig.subplots()
    return ax.figure, ax


def _colours(n: int) -> list:
    cmap = colormaps["viridis"]
    return [cmap(x) for x in (np.linspace(0.0, 0.85, n) if n > 1 else [0.35])]


def plot_capacity(study, ax=None) -> Figure:
    """Capacity against frequency for each SNR (solid: water-filling; dashed: equal power on the strong channels).

    Parameters
    ----------
    study : CapacityStudy
    ax : matplotlib Axes, optional

    Returns
    -------
    Figure
    """
    fig, ax = _axes(ax)
    hz = study.hz
    style = "o-" if len(hz) < 30 else "-"
    for colour, k in zip(_colours(len(study.snr_db)), range(len(study.snr_db))):
        ax.plot(hz, study.capacity[k], style, ms=3, color=colour, label=f"SNR {study.snr_db[k]:g} dB")
        ax.plot(hz, study.equal_capacity[k], "--", color=colour, lw=1)
    ax.plot([], [], "--", color="grey", lw=1, label="equal power on the strong channels")
    frequency_axis(ax, hz)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("capacity (bit/s/Hz)")
    ax.set_ylim(bottom=0)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7, ncol=2)
    ax.set_title("Capacity with water-filling (SNR: strongest channel, all power on it)")
    return fig


def plot_active_channels(study, ax=None, max_lines: int = 4) -> Figure:
    """Number of channels that get power against SNR, at up to `max_lines` frequencies.

    Parameters
    ----------
    study : CapacityStudy
    ax : matplotlib Axes, optional
    max_lines : int

    Returns
    -------
    Figure
    """
    fig, ax = _axes(ax)
    picks = np.unique(np.linspace(0, len(study.hz) - 1, min(max_lines, len(study.hz))).round().astype(int))
    for colour, f in zip(_colours(len(picks)), picks):
        ax.plot(study.snr_db, study.active[:, f], "o-", ms=4, color=colour, label=f"{study.hz[f]:.4g} Hz")
    ax.set_xlabel("SNR of the strongest channel (dB)")
    ax.set_ylabel("channels given power (count)")
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_ylim(bottom=0)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7)
    ax.set_title("Channels the water-filling uses")
    return fig


def plot_water_levels(study, freq_index: int | None = None, snr_index: int = -1, ax=None,
                      max_channels: int = 24) -> Figure:
    """Water-filling at one frequency and SNR: each channel's floor ``1/gamma_j`` and the power poured on it.

    Parameters
    ----------
    study : CapacityStudy
    freq_index : int, optional
        0-based frequency (default: the middle one).
    snr_index : int
        0-based SNR (default: the largest).
    ax : matplotlib Axes, optional
    max_channels : int
        Channels drawn, strongest first.

    Returns
    -------
    Figure
    """
    fig, ax = _axes(ax)
    f = len(study.hz) // 2 if freq_index is None else int(freq_index)
    floor = study.noise_floor[snr_index, f]
    order = np.argsort(floor)[:max_channels]
    floor, power = floor[order], study.power[snr_index, f, order]
    level = float(study.water_level[snr_index, f])
    top = 1.6 * level
    x = np.arange(1, len(order) + 1)
    cmap = colormaps["viridis"]
    ax.bar(x, np.minimum(floor, top), color=cmap(0.15), label="noise floor 1/γ (fraction of total power)")
    ax.bar(x, power, bottom=floor, color=cmap(0.7), label="power given (fraction of total)")
    ax.axhline(level, color="black", ls="--", lw=1, label=f"water level {level:.3g}")
    ax.set_ylim(0, top)
    ax.set_xlabel("channel, strongest first (no.)")
    ax.set_ylabel("power (fraction of total, 1)")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(fontsize=7, loc="upper left")
    ax.set_title(f"Water-filling at {study.hz[f]:.4g} Hz, SNR {study.snr_db[snr_index]:g} dB: "
                 f"{int(study.active[snr_index, f])} channels get power")
    return fig


def shown_channels(judged: np.ndarray, max_channels: int = 6) -> np.ndarray:
    """The first `max_channels` channels judged somewhere (0-based), shape (n,).

    Parameters
    ----------
    judged : ndarray of bool, shape (n_freq, n_chan)
        Where each channel is judged (in use).
    max_channels : int
        Channels returned at most.

    Returns
    -------
    ndarray of int, shape (n,)
        0-based channel indices, ascending, ``n <= max_channels``.
    """
    return np.flatnonzero(np.asarray(judged).any(axis=0))[:max_channels]


def plot_gain_spread(study, fig=None, max_channels: int = 6) -> Figure:
    """Realised gain of each channel in use against frequency: median and 5-95 % band, first order dashed.

    Parameters
    ----------
    study : ToleranceStudy
    fig : matplotlib Figure, optional
    max_channels : int
        Panels, one per channel in use, strongest first.

    Returns
    -------
    Figure
    """
    chans = shown_channels(study.judged, max_channels)
    n = max(len(chans), 1)
    cols = min(n, 3)
    rows = int(np.ceil(n / cols))
    fig = fig or Figure(figsize=(_WIDTH_IN, 1.1 + 2.0 * rows), layout="constrained")
    axes = np.atleast_1d(fig.subplots(rows, cols, sharex=True, squeeze=False)).ravel()
    hz = study.hz
    cmap = colormaps["viridis"]
    lo, mid, hi = (np.where(study.judged, study.gain_pct_db[i], np.nan) for i in range(3))
    sd = np.where(study.judged, study.predicted_gain_sd_db, np.nan) * 1.6448536269514722
    for ax, j in zip(axes, chans):
        ax.fill_between(hz, lo[:, j], hi[:, j], color=cmap(0.55), alpha=0.45, lw=0, label="5-95 % of trials")
        ax.plot(hz, mid[:, j], "-", color=cmap(0.15), lw=1.2, label="median")
        ax.plot(hz, sd[:, j], "--", color="black", lw=0.9, label="first order, ±1.645 σ")
        ax.plot(hz, -sd[:, j], "--", color="black", lw=0.9)
        frequency_axis(ax, hz)
        ax.set_title(f"channel {j + 1}", fontsize=8)
        ax.grid(True, which="both", alpha=0.3)
        ax.set_ylabel("gain re plan (dB)")
        ax.set_xlabel("frequency (Hz)")
    for ax in axes[len(chans):]:
        ax.set_visible(False)
    axes[0].legend(fontsize=6.5)
    s = study.settings
    fig.suptitle(f"Realised gain with the planned weights: {s['n_trials']} trials, position σ "
                 f"{1000 * s['position_sd_m']:g} mm, gain σ {s['gain_sd_db']:g} dB, phase σ {s['phase_sd_deg']:g}°",
                 fontsize=9)
    return fig


def plot_survival(study, ax=None, max_channels: int = 8) -> Figure:
    """Share of trials in which each channel in use keeps the isolation limit, against frequency.

    Parameters
    ----------
    study : ToleranceStudy
    ax : matplotlib Axes, optional
    max_channels : int

    Returns
    -------
    Figure
    """
    fig, ax = _axes(ax)
    hz = study.hz
    chans = shown_channels(study.judged, max_channels)
    style = "o-" if len(hz) < 30 else "-"
    for colour, j in zip(_colours(len(chans)), chans):
        ax.plot(hz, 100.0 * study.survival[:, j], style, ms=3, color=colour, label=f"channel {j + 1}")
    ax.axhline(95.0, color="grey", ls=":", lw=1, label="95 %")
    frequency_axis(ax, hz)
    ax.set_ylim(-3, 103)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("trials keeping the isolation (%)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7, ncol=2)
    ax.set_title(f"Channels keeping {study.settings['isolation_db']:g} dB isolation (gaps: not in use there)")
    return fig
