"""Figures of the zones study: trade-off, figures of merit, field maps with zone outlines, robustness."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Polygon
from scipy.spatial import ConvexHull, QhullError

from ..channels.field import _AXES, PlaneGrid
from ..rig import Rig
from ._axes import frequency_axis

__all__ = ["plot_tradeoff", "plot_zone_metrics", "plot_zone_field", "plot_tolerance", "METHOD_LABELS"]

#: Legend text of each method.
METHOD_LABELS = {"contrast": "acoustic contrast control", "matching": "pressure matching",
                 "channel": "best plan channel"}
_COLOURS = {"contrast": "#1b7837", "matching": "#2166ac", "channel": "#762a83"}


def _ax(ax, size=(6.0, 4.0)):
    if ax is None:
        fig = Figure(figsize=size, layout="constrained")
        return fig, fig.subplots()
    return ax.figure, ax


def plot_tradeoff(study, ax=None) -> Figure:
    """Band-mean contrast (dB) against band-mean array effort (dB), one point per regularisation value.

    The chosen design of each method is ringed; each point is labelled with
    its relative regularisation.

    Parameters
    ----------
    study : ZoneStudy
        The result of :func:`arrayplan.studies.zones.study_zones`; one line
        per method in its ``results``.
    ax : matplotlib Axes, optional
        Axes to draw on; a new figure when None.

    Returns
    -------
    Figure
        The figure of `ax`.
    """
    fig, ax = _ax(ax)
    for key, res in study.results.items():
        c, e = res.contrast_db.mean(axis=1), res.effort_db.mean(axis=1)
        ax.plot(e, c, "o-" if len(c) > 1 else "s", color=_COLOURS[key], label=METHOD_LABELS[key], ms=5)
        ax.plot(e[res.chosen], c[res.chosen], "o", ms=12, mfc="none", mec=_COLOURS[key], mew=1.5)
        if key != "channel":
            for b, x, y in zip(res.regularisation, e, c):
                ax.annotate(f"{b:g}", (x, y), textcoords="offset points", xytext=(4, 4), fontsize=7,
                            color=_COLOURS[key])
    ax.set_xlabel("array effort, mean over frequency (dB re one speaker)")
    ax.set_ylabel("acoustic contrast, mean over frequency (dB)")
    ax.set_title("Contrast against effort (labels: relative regularisation; rings: chosen)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    return fig


def plot_zone_metrics(study, fig: Figure | None = None) -> Figure:
    """Contrast, effort and bright-zone matching error of each method's chosen design against frequency.

    Parameters
    ----------
    study : ZoneStudy
        As for :func:`plot_tradeoff`; its ``max_effort_db`` (dB) is drawn as
        the effort limit.
    fig : Figure, optional
        Figure to draw on (three panels are added); a new one when None.

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(6.5, 7.0), layout="constrained")
    axes = fig.subplots(3, 1, sharex=True)
    hz = study.axis.hz
    for key, res in study.results.items():
        label = METHOD_LABELS[key]
        if key != "channel":
            label += f" (reg. {res.regularisation[res.chosen]:g})"
        for ax, data in zip(axes, (res.contrast_db, res.effort_db, res.error_db)):
            ax.plot(hz, data[res.chosen], "o-", ms=3, color=_COLOURS[key], label=label)
    axes[0].set_ylabel("contrast (dB)")
    axes[1].set_ylabel("array effort\n(dB re one speaker)")
    axes[1].axhline(study.max_effort_db, color="0.4", ls="--", lw=0.8, label="effort limit")
    axes[2].set_ylabel("matching error\nin bright zone (dB)")
    axes[2].set_xlabel("frequency (Hz)")
    frequency_axis(axes[2], hz)
    for ax in axes:
        ax.grid(True, alpha=0.3)
    axes[0].legend(fontsize=7)
    axes[1].legend(fontsize=7, loc="upper right")
    axes[0].set_title("Chosen designs across the band")
    return fig


def _outline(points_2d: np.ndarray, pad: float) -> np.ndarray:
    """Closed outline (k, 2) of points in the plane: their convex hull, or a padded box when flat."""
    lo, hi = points_2d.min(axis=0), points_2d.max(axis=0)
    if np.all(hi - lo > 1e-9) and len(points_2d) >= 3:
        try:
            hull = ConvexHull(points_2d)
            pts = points_2d[hull.vertices]
            centre = pts.mean(axis=0)
            grow = pts - centre
            norm = np.linalg.norm(grow, axis=1, keepdims=True)
            return pts + grow / np.maximum(norm, 1e-12) * pad
        except QhullError:
            pass
    lo, hi = lo - pad, hi + pad
    return np.array([[lo[0], lo[1]], [hi[0], lo[1]], [hi[0], hi[1]], [lo[0], hi[1]]])


def plot_zone_field(rig: Rig, grid: PlaneGrid, pressure: np.ndarray, zones, title: str, ax=None,
                    reference: float | None = None, range_db: float = 40.0) -> Figure:
    """Sound level over a plane with the zones outlined (bright solid, dark dashed).

    Parameters
    ----------
    rig : Rig
    grid : PlaneGrid
    pressure : ndarray, complex, shape (len(grid.v), len(grid.u))
        Pa per unit input.
    zones : sequence of Zone
        Outlined by the padded convex hull of their points in the plane (a
        box when the points are flat in it).
    title : str
    ax : Axes, optional
        Axes to draw on; a new figure when None.
    reference : float, optional
        |p| drawn as 0 dB (default the 99th percentile over the plane), Pa.
    range_db : float
        Levels shown below the reference, dB (up to 6 dB above it is drawn too).

    Returns
    -------
    Figure
        The figure of `ax`.
    """
    fig, ax = _ax(ax, (6.5, 5.0))
    mag = np.abs(pressure)
    ref = reference if reference else (np.percentile(mag, 99.0) or mag.max())
    db = np.clip(20 * np.log10(np.maximum(mag / ref, 1e-12)), -range_db, 6.0)
    mesh = ax.pcolormesh(grid.u, grid.v, db, cmap="magma", vmin=-range_db, vmax=6.0, shading="auto")
    fig.colorbar(mesh, ax=ax, label="level (dB re mean bright-zone level)" if reference else "level (dB)")
    i, j, _ = _AXES[grid.plane]
    ax.scatter(rig.speakers.positions[:, i], rig.speakers.positions[:, j], marker="^", s=24, c="#4dac26",
               edgecolors="black", linewidths=0.5, label="speakers", zorder=3)
    pad = 0.02 * max(grid.u[-1] - grid.u[0], grid.v[-1] - grid.v[0])
    for z in zones:
        pts = z.positions[:, [i, j]]
        bright = z.role == "bright"
        ax.add_patch(Polygon(_outline(pts, pad), closed=True, fill=False, lw=1.6, ls="-" if bright else "--",
                             ec="white" if bright else "#92c5de", zorder=4))
        ax.annotate(f"{z.name} ({z.role})", pts.mean(axis=0), xytext=(0, -14), textcoords="offset points",
                    color="white", fontsize=7, ha="center", va="top", zorder=5)
    names = "xyz"
    ax.set_xlabel(f"{names[i]} (m)")
    ax.set_ylabel(f"{names[j]} (m)")
    ax.set_aspect("equal")
    ax.set_xlim(grid.u[0], grid.u[-1])
    ax.set_ylim(grid.v[0], grid.v[-1])
    ax.legend(loc="lower right", fontsize=7)
    ax.set_title(title, fontsize=9)
    return fig


def plot_tolerance(hz: np.ndarray, nominal_db: np.ndarray, perturbed_db: np.ndarray, sigma_m: float,
                   label: str, ax=None) -> Figure:
    """Designed contrast against frequency with the spread over perturbed rigs.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    nominal_db : ndarray, shape (n_freq,)
        Acoustic contrast of the design on the nominal rig, dB.
    perturbed_db : ndarray, shape (trials, n_freq)
        Acoustic contrast of the same design on each perturbed rig, dB.
    sigma_m : float
        Position error used, m.
    label : str
        The design's name, in the title.
    ax : matplotlib Axes, optional
        As for :func:`plot_tradeoff`.

    Returns
    -------
    Figure
        The figure of `ax` (or a new one): median and 10-90 % band of the
        perturbed rigs, and the design as planned.
    """
    fig, ax = _ax(ax)
    lo, med, hi = np.percentile(perturbed_db, [10, 50, 90], axis=0)
    ax.fill_between(hz, lo, hi, color="#67a9cf", alpha=0.35, label="10th to 90th percentile, perturbed")
    ax.plot(hz, med, "-", color="#2166ac", label="median, perturbed")
    ax.plot(hz, nominal_db, "o-", ms=3, color="black", label="as designed")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("acoustic contrast (dB)")
    frequency_axis(ax, hz)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_title(f"{label}: {perturbed_db.shape[0]} rigs with {sigma_m * 1000:g} mm position error")
    return fig
