"""Figures of the layout study and of layout comparisons."""

from __future__ import annotations

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from ..channels.field import _AXES, best_plane
from ..rig import Rig
from ._axes import frequency_axis

__all__ = ["plot_layout_rig", "plot_layout_criterion", "plot_comparison"]


def _least_spread_plane(positions: np.ndarray) -> str:
    spread = positions.max(axis=0) - positions.min(axis=0)
    return {2: "xy", 1: "xz", 0: "yz"}[int(np.argmin(spread))]


def plot_layout_rig(rig: Rig, choice, fig: Figure | None = None) -> Figure:
    """The candidates (hollow), the chosen ones (filled, coloured by the relaxation's weight) and the fixed side.

    Two views: the coordinate plane that holds most of the rig, and the plane
    of the candidates themselves (when it differs).

    Parameters
    ----------
    rig : Rig
        The rig the choice was made for; its other side is drawn as fixed.
    choice : LayoutChoice
        The result of :func:`arrayplan.studies.layout.choose_layout`: its
        problem's candidates (positions in m), the 0-based chosen indices and
        the relaxation's weights (if any).
    fig : Figure, optional
        Figure to draw on (one panel per view); a new one when None.

    Returns
    -------
    Figure
    """
    p = choice.problem
    fixed = rig.mics if p.side == "speakers" else rig.speakers
    both = Rig(p.candidates, fixed) if p.side == "speakers" else Rig(fixed, p.candidates)
    planes = [best_plane(both)]
    own = _least_spread_plane(p.candidates.positions)
    if own != planes[0]:
        planes.append(own)
    fig = fig or Figure(figsize=(7.0, 3.6 * len(planes)), layout="constrained")
    axes = np.atleast_1d(fig.subplots(len(planes), 1))
    c = p.candidates.positions
    idx = np.array(sorted(choice.chosen))
    other = "microphones" if p.side == "speakers" else "speakers"
    names = "xyz"
    for ax, plane in zip(axes, planes):
        i, j, _ = _AXES[plane]
        ax.scatter(c[:, i], c[:, j], s=40, facecolors="none", edgecolors="0.5", label=f"candidate {p.side}")
        if choice.relaxed is not None:
            sc = ax.scatter(c[idx, i], c[idx, j], s=40, c=choice.relaxed[idx], cmap="viridis", vmin=0, vmax=1,
                            edgecolors="black", label=f"chosen {p.side}")
            fig.colorbar(sc, ax=ax, label="relaxation weight z (0 to 1)")
        else:
            ax.scatter(c[idx, i], c[idx, j], s=40, c="#21908d", edgecolors="black", label=f"chosen {p.side}")
        f = fixed.positions
        ax.scatter(f[:, i], f[:, j], marker="s", s=22, c="#d62728", edgecolors="black", label=f"fixed {other}")
        ax.set_xlabel(f"{names[i]} (m)")
        ax.set_ylabel(f"{names[j]} (m)")
        ax.set_aspect("equal", adjustable="datalim")
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize=7, loc="best")
        ax.set_title(f"{plane} view", fontsize=9)
    fig.suptitle(f"{p.count} of {len(p.candidates)} candidate {p.side}, chosen by {choice.criterion}")
    return fig


def plot_layout_criterion(choice, ax=None) -> Figure:
    """The criterion after each greedy step (k chosen), the value after swaps and the relaxation's bound.

    Parameters
    ----------
    choice : LayoutChoice
        As for :func:`plot_layout_rig`; its ``greedy_values``, ``value`` and
        ``bound`` are drawn in the criterion's unit (bit/s/Hz or channels,
        summed over frequencies).
    ax : matplotlib Axes, optional
        Axes to draw on; None: a new 6 x 4 in figure.

    Returns
    -------
    Figure
        The figure of `ax`, or the new one.
    """
    if ax is None:
        fig = Figure(figsize=(6.0, 4.0), layout="constrained")
        ax = fig.subplots()
    fig = ax.figure
    k = np.arange(1, len(choice.greedy_values) + 1)
    ax.plot(k, choice.greedy_values, "o-", ms=4, color="#3b528b", label="greedy, k chosen")
    ax.plot([k[-1]], [choice.value], "D", ms=8, color="#5ec962", label="after swaps")
    if choice.bound is not None:
        ax.plot([k[-1]], [choice.bound], "v", ms=8, color="#440154",
                label=f"upper bound (relaxation); gap {choice.gap_percent:.1f} %")
        ax.axhline(choice.bound * (1 - 1 / np.e), color="0.5", ls=":", lw=0.8,
                   label="(1 - 1/e) of the bound")
    unit = {"capacity": "capacity (bit/s/Hz, summed over frequencies)",
            "strong": "strong channels (summed over frequencies)",
            "usable": "usable channels (summed over frequencies)"}[choice.criterion]
    ax.set_xlabel("elements chosen (count)")
    ax.set_ylabel(unit)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_title("Criterion against the number chosen")
    return fig


def plot_comparison(hz: np.ndarray, names: list[str], series: dict[str, np.ndarray], fig: Figure | None = None
                    ) -> Figure:
    """Overlaid counts (and capacity) of several layouts against frequency.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    names : list of str
        One per layout.
    series : dict of str to ndarray, shape (n_layouts, n_freq)
        Panel title -> values; keys ending in "(bit/s/Hz)" are capacities, others counts.
    fig : Figure, optional
        Figure to draw on (one panel per entry of `series`); a new one when None.

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(6.5, 2.4 * len(series) + 0.6), layout="constrained")
    axes = np.atleast_1d(fig.subplots(len(series), 1, sharex=True))
    colours = colormaps["viridis"](np.linspace(0.0, 0.85, len(names)))
    styles = ["o-", "s--", "^-.", "D:", "v-", "P--"]
    for ax, (title, data) in zip(axes, series.items()):
        for n, (name, row) in enumerate(zip(names, data)):
            ax.plot(hz, row, styles[n % len(styles)], ms=3, color=colours[n], label=name)
        ax.set_ylabel(title)
        ax.grid(True, alpha=0.3)
        if "(bit/s/Hz)" not in title:
            ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    axes[0].legend(fontsize=8)
    axes[-1].set_xlabel("frequency (Hz)")
    frequency_axis(axes[-1], hz)
    axes[0].set_title("Layouts compared on the same frequencies")
    return fig
