"""Drive effort per channel: how much more drive a weaker channel needs for the same output."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..channels.planning import Plan
from ._axes import frequency_axis

__all__ = ["plot_drive_effort", "drive_effort_db", "loudest_speaker_db"]


def drive_effort_db(singular_values: np.ndarray) -> np.ndarray:
    """Extra drive each channel needs to give the strongest channel's output, dB.

    With unit-norm drive weights a channel's output is s_j times its drive
    amplitude, so the same output as the strongest channel takes
    20 log10(s_max / s_j) dB more drive: a channel 20 dB down needs 20 dB more.

    Parameters
    ----------
    singular_values : ndarray, shape (n_freq, n_chan)
        Amplitude couplings s_j (any unit; only ratios count).

    Returns
    -------
    ndarray, shape (n_freq, n_chan)
        dB, 0 for the strongest channel at each frequency, +inf for a channel with s_j = 0.
    """
    s = np.asarray(singular_values, dtype=float)
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(s.max(axis=1, keepdims=True) / s)


def loudest_speaker_db(drive: np.ndarray) -> np.ndarray:
    """Share of a channel's drive on its loudest speaker, 20 log10 max_s |v_sj|, dB.

    Parameters
    ----------
    drive : ndarray, complex, shape (..., n_spk, n_chan)
        Unit-norm drive weights.

    Returns
    -------
    ndarray, shape (..., n_chan)
        0 dB when one speaker carries the whole drive, -10 log10(n_spk) dB when all carry equal shares.
    """
    return 20.0 * np.log10(np.max(np.abs(drive), axis=-2))


def plot_drive_effort(plan: Plan, ax: Axes | None = None, max_channels: int = 8) -> Figure:
    """Extra drive each channel needs for the strongest channel's output, against frequency.

    One line per channel, strongest first at each frequency (by channel
    number for a tracked plan); the plan's strong threshold and its noise
    floor (``snr_db``) are drawn: a channel above the noise-floor line cannot
    reach the strongest channel's output above the noise at the plan's SNR.

    Parameters
    ----------
    plan : Plan
    ax : Axes, optional
        Axes to draw in (default: a new figure).
    max_channels : int
        Channels drawn.

    Returns
    -------
    Figure
    """
    if ax is None:
        ax = Figure(figsize=(7.2, 3.8), layout="constrained").subplots()
    fig = ax.figure
    ch = plan.channels
    hz = ch.axis.hz
    effort = drive_effort_db(ch.singular_values)
    if not ch.tracked:
        effort = np.sort(effort, axis=1)
    n = min(ch.n_channels, max_channels)
    ceiling = abs(plan.snr_db) + 10.0
    colours = [f"C{k % 10}" for k in range(n)]
    style = "o-" if len(hz) < 40 else "-"
    for j in range(n):
        ax.plot(hz, np.minimum(effort[:, j], ceiling), style, ms=3, color=colours[j], lw=1.3,
                label=f"{j + 1}")
    ax.axhline(plan.threshold_db, color="grey", ls=":", lw=1, label=f"{plan.threshold_db:g} dB (strong)")
    ax.axhline(abs(plan.snr_db), color="black", ls="-.", lw=1, label=f"{abs(plan.snr_db):g} dB (noise floor)")
    frequency_axis(ax, hz)
    ax.set_ylim(-2.0, ceiling + 2.0)
    ax.yaxis.set_major_locator(MaxNLocator(nbins=6))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("extra drive for equal output (dB)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(title="channel" if ch.tracked else "channel, strongest first", fontsize=7, title_fontsize=7,
              ncol=2, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    ax.set_title("Drive effort: extra drive each channel needs for the strongest channel's output")
    return fig
