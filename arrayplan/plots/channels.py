"""Channel strength figures."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..channels.planning import Plan
from ._axes import frequency_axis

__all__ = ["plot_couplings", "plot_channel_counts", "representative_indices", "centre_index"]


def centre_index(hz: np.ndarray) -> int:
    """Index of the frequency nearest the geometric centre sqrt(f_low * f_high) of the band `hz` spans.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Ascending frequencies, Hz.

    Returns
    -------
    int
        Nearest on a log scale; on the arithmetic centre when the band starts at 0 Hz.

    Notes
    -----
    The report calls this "the centre" everywhere (field maps, couplings,
    drive effort), so that one frequency is meant throughout.
    """
    hz = np.asarray(hz, dtype=float)
    if hz[0] <= 0:
        return int(np.argmin(np.abs(hz - 0.5 * (hz[0] + hz[-1]))))
    return int(np.argmin(np.abs(np.log(hz) - 0.5 * (np.log(hz[0]) + np.log(hz[-1])))))


def representative_indices(n_freq: int, count: int = 3, hz: np.ndarray | None = None) -> list[int]:
    """Up to `count` frequency indices spread over the axis (lowest, middle, highest).

    With `hz` (Hz, ascending) and ``count == 3`` the middle index is the
    centre of :func:`centre_index` instead of the middle of the list.

    Parameters
    ----------
    n_freq : int
        Length of the frequency axis.
    count : int
        Indices wanted at most.
    hz : ndarray, shape (n_freq,), optional
        Ascending frequencies, Hz; used only to place the middle of three.

    Returns
    -------
    list of int
        0-based, ascending, no repeats; fewer than `count` when `n_freq` is
        smaller or indices coincide.
    """
    idx = sorted(set(np.linspace(0, n_freq - 1, min(count, n_freq)).round().astype(int).tolist()))
    if hz is not None and len(idx) == 3:
        idx[1] = centre_index(hz)
        idx = sorted(set(idx))
    return idx


def plot_couplings(plan: Plan, fig: Figure | None = None, max_channels: int = 40) -> Figure:
    """Each channel's power coupling as % of the sum rule (left) and in dB re the strongest (right).

    Drawn at up to three frequencies spread over the plan; the paraxial
    estimate of the channel count is marked with a dashed line of the same
    colour where it applies.  The dB panel bottoms out 10 dB below the
    plan's noise floor (its ``snr_db`` below the strongest channel), with the
    floor drawn: what lies below it is unusable, and numerical noise far
    below it is not drawn as data.  The middle frequency is the band's
    geometric centre (:func:`centre_index`).

    Parameters
    ----------
    plan : Plan
        The channel plan: its channels, paraxial estimate, ``threshold_db``
        and ``snr_db`` (dB).
    fig : Figure, optional
        Figure to draw on (two panels are added); a new one when None.
    max_channels : int
        Channels drawn at each frequency, strongest first.

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(11.0, 4.2), layout="constrained")
    ax_lin, ax_db = fig.subplots(1, 2)
    ch = plan.channels
    share = ch.share_of_sum_rule() * 100.0
    level = ch.level_db()
    n = min(ch.n_channels, max_channels)
    idx_ch = np.arange(1, n + 1)
    floor_db = -abs(plan.snr_db) - 10.0
    colours = ["#440154", "#21918c", "#e2a000"]
    for colour, f in zip(colours, representative_indices(len(ch.axis), hz=ch.axis.hz)):
        order = np.argsort(-ch.power_coupling[f])[:n]    # descending, also for tracked plans
        label = f"{ch.axis.hz[f]:.4g} Hz"
        ax_lin.plot(idx_ch, share[f, order], "o-", ms=3, color=colour, label=label)
        ax_db.plot(idx_ch, np.maximum(level[f, order], floor_db), "o-", ms=3, color=colour, label=label)
        est = plan.estimate.counts[f]
        if np.isfinite(est):
            for ax in (ax_lin, ax_db):
                ax.axvline(est + 0.5, color=colour, ls="--", lw=1)
    ax_db.axhline(-plan.threshold_db, color="grey", ls=":", lw=1, label=f"-{plan.threshold_db:g} dB (strong)")
    ax_db.axhline(-abs(plan.snr_db), color="black", ls="-.", lw=1,
                  label=f"-{abs(plan.snr_db):g} dB (noise floor at the plan's SNR)")
    ax_db.set_ylim(floor_db - 2.0, 3.0)
    ax_lin.set_xlabel("channel, strongest first (no.)")
    ax_lin.set_ylabel("power coupling (% of sum rule)")
    ax_db.set_xlabel("channel, strongest first (no.)")
    ax_db.set_ylabel("power coupling re strongest (dB)")
    for ax in (ax_lin, ax_db):
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.grid(True, alpha=0.3)
    fig.legend(*ax_db.get_legend_handles_labels(), loc="outside lower center", ncol=5, fontsize=8)
    title = "Channel strengths"
    if plan.estimate.kind:
        title += f"  (dashed: paraxial estimate, {plan.estimate.kind}s)"
    fig.suptitle(title)
    return fig


def plot_channel_counts(plan: Plan, fig: Figure | None = None) -> Figure:
    """Strong, usable and effective channel counts against frequency, with the paraxial estimate.

    Parameters
    ----------
    plan, fig : Plan, Figure or None
        As for :func:`plot_couplings` (one panel is added to `fig`).

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(7.5, 4.2), layout="constrained")
    ax = fig.subplots()
    hz = plan.channels.axis.hz
    style = "o-" if len(hz) < 40 else "-"
    ax.plot(hz, plan.strong_channels, style, ms=3, color="#440154",
            label=f"strong (within {plan.threshold_db:g} dB of the strongest)")
    ax.plot(hz, plan.usable_channels, style, ms=3, color="#21918c",
            label=f"above the noise floor (SNR {plan.snr_db:g} dB)")
    ax.plot(hz, plan.channels.effective_channels(), "--", color="#e2a000", label="effective (participation ratio)")
    if plan.estimate.kind:
        ax.plot(hz, plan.estimate.counts, ":", color="black", label=f"paraxial estimate ({plan.estimate.kind}s)")
    frequency_axis(ax, hz)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("number of channels (count)")
    ax.set_ylim(bottom=0)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_title("Channels against frequency")
    return fig
