"""Frequency x channel heat map of each channel's level."""

from __future__ import annotations

import numpy as np
from matplotlib.colors import BoundaryNorm
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..channels.planning import Plan
from ._axes import frequency_axis

__all__ = ["plot_level_map"]


def _edges(hz: np.ndarray) -> np.ndarray:
    """Cell edges around each frequency: geometric midpoints on a log axis, arithmetic otherwise."""
    if len(hz) == 1:
        return np.array([hz[0] / 1.1, hz[0] * 1.1])
    log = hz[0] > 0 and hz[-1] / hz[0] > 4
    x = np.log(hz) if log else hz
    mid = (x[1:] + x[:-1]) / 2.0
    edges = np.concatenate([[x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]])
    return np.exp(edges) if log else edges


def plot_level_map(plan: Plan, fig: Figure | None = None, floor_db: float = -60.0,
                   max_channels: int = 40) -> Figure:
    """Each channel's power coupling in dB re the strongest, over frequency (x) and channel (y).

    The strong count (channels within the plan's threshold) is drawn as a
    white step line and the paraxial estimate, where it applies, as a dashed
    line, so the map shows where the estimate and the SVD agree.

    Parameters
    ----------
    plan : Plan
    fig : Figure, optional
    floor_db : float
        Lower end of the colour scale, dB (weaker channels are drawn at it).
    max_channels : int
        Channels shown (strongest first at each frequency).

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(7.2, 4.0), layout="constrained")
    ax = fig.subplots()
    ch = plan.channels
    hz = ch.axis.hz
    n = min(ch.n_channels, max_channels)
    level = np.sort(ch.level_db(), axis=1)[:, ::-1][:, :n]       # strongest first at every frequency
    data = np.maximum(level, floor_db).T                           # (n_chan, n_freq)
    step = 6.0 if floor_db <= -36 else 3.0
    levels = np.arange(floor_db, 0.0 + step / 2, step)
    norm = BoundaryNorm(levels, ncolors=256)
    mesh = ax.pcolormesh(_edges(hz), np.arange(0.5, n + 1.0), data, cmap="viridis", norm=norm,
                         shading="flat")
    fig.colorbar(mesh, ax=ax, label=f"level re strongest channel (dB, floor {floor_db:g})")
    strong = np.minimum(plan.strong_channels, n)
    ax.step(hz, strong + 0.5, where="mid", color="white", lw=1.6,
            label=f"strong count (within {plan.threshold_db:g} dB)")
    if plan.estimate.kind:
        ax.plot(hz, np.minimum(plan.estimate.counts, n) + 0.5, "--", color="#e2a000", lw=1.6,
                label=f"paraxial estimate ({plan.estimate.kind}s)")
    frequency_axis(ax, hz)
    ax.set_xlim(_edges(hz)[0], _edges(hz)[-1])
    ax.set_ylim(0.5, n + 0.5)
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("channel, strongest first (no.)")
    ax.legend(loc="upper left", fontsize=8, facecolor="#555555", labelcolor="white", framealpha=0.8)
    ax.set_title("Channel levels over frequency")
    return fig
