"""Field map of one channel."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..channels.field import _AXES, PlaneGrid
from ..rig import Rig

__all__ = ["plot_field", "plot_field_panels", "draw_walls", "SILENT_RATIO"]

#: A panel whose level is below this share of the loudest panel's (-200 dB) is silent in the plane.
SILENT_RATIO = 1e-10


def draw_walls(ax, rig: Rig, i: int, j: int) -> None:
    """Draw the walls of the rig's room (if any) projected on the axes `i`, `j` (0, 1, 2 for x, y, z).

    Parameters
    ----------
    ax : matplotlib Axes
        Axes to draw on; nothing is drawn for a rig without a room.
    rig : Rig
        The rig; its ``room.size_m`` (m) gives the box from the origin.
    i, j : int
        0-based coordinates (0 = x, 1 = y, 2 = z) drawn across and up.
    """
    if rig.room is None:
        return
    li, lj = rig.room.size_m[i], rig.room.size_m[j]
    ax.plot([0, li, li, 0, 0], [0, 0, lj, lj, 0], color="black", linewidth=2.0, label="walls")


def plot_field(rig: Rig, grid: PlaneGrid, pressure: np.ndarray, title: str, fig: Figure | None = None,
               range_db: float = 40.0) -> Figure:
    """|p| in dB over the plane, with speakers, microphones and the room's walls (if any) projected on it.

    0 dB is the 99th percentile of |p| over the plane, so that the near field
    of the speakers does not set the scale; louder points are drawn at 0 dB.

    Parameters
    ----------
    rig : Rig
        Its speakers, microphones and room (if any) are drawn in the plane.
    grid : PlaneGrid
        The plane and its coordinates ``u``, ``v`` (m).
    pressure : ndarray, shape (len(grid.v), len(grid.u))
        Complex or magnitude pressure over the grid (Pa, or per unit source
        strength as :func:`arrayplan.channels.field.channel_field` gives it).
    title : str
        Axes title.
    fig : Figure, optional
        Figure to draw on; a new one sized to the plane's aspect when None.
    range_db : float
        Colour range below the reference, dB.

    Returns
    -------
    Figure
    """
    aspect = (grid.v[-1] - grid.v[0]) / max(grid.u[-1] - grid.u[0], 1e-12)
    if aspect <= 1:
        size = (7.5, float(np.clip(6.0 * aspect, 3.5, 8.0)) + 1.0)
    else:
        size = (float(np.clip(6.0 / aspect, 2.5, 7.5)) + 2.5, 7.5)
    fig = fig or Figure(figsize=size, layout="constrained")
    ax = fig.subplots()
    mag = np.abs(pressure)
    ref = np.percentile(mag, 99.0) or mag.max()
    db = np.clip(20.0 * np.log10(np.maximum(mag / ref, 1e-12)), -range_db, 0.0)
    mesh = ax.pcolormesh(grid.u, grid.v, db, cmap="viridis", vmin=-range_db, vmax=0.0, shading="auto")
    fig.colorbar(mesh, ax=ax, label="|p| (dB re 99th percentile in plane)")
    i, j, _ = _AXES[grid.plane]
    for es, marker, colour, label in ((rig.speakers, "^", "tab:red", "speakers"),
                                      (rig.mics, "o", "white", "microphones")):
        ax.scatter(es.positions[:, i], es.positions[:, j], marker=marker, s=22, c=colour, edgecolors="black",
                   linewidths=0.5, label=label)
    draw_walls(ax, rig, i, j)
    names = "xyz"
    ax.set_xlabel(f"{names[i]} (m)")
    ax.set_ylabel(f"{names[j]} (m)")
    ax.set_aspect("equal")
    ax.legend(loc="upper right", fontsize=7)
    ax.set_title(title)
    return fig


def plot_field_panels(rig: Rig, grid: PlaneGrid, pressures: list[np.ndarray], titles: list[str],
                      fig: Figure | None = None, range_db: float = 40.0) -> Figure:
    """Small multiples of |p| in dB, one panel per channel.

    Each panel's 0 dB is the 99th percentile of its own |p| over the plane
    (as in :func:`plot_field`), except for a channel that is silent in the
    plane (99th percentile below :data:`SILENT_RATIO` of the loudest panel's,
    as on a symmetry plane of an antisymmetric channel): it is drawn on the
    loudest panel's scale and titled so.  Speakers are red triangles,
    microphones white circles.  The plane's longer side is drawn across, so long rigs
    give wide strips stacked down the page.

    Parameters
    ----------
    rig, grid : Rig, PlaneGrid
        As for :func:`plot_field`.
    pressures : list of ndarray, each shape (len(grid.v), len(grid.u))
        Complex or magnitude pressure per panel.
    titles : list of str
    fig : Figure, optional
    range_db : float
        Colour range below each panel's reference, dB.

    Returns
    -------
    Figure
    """
    n = len(pressures)
    i, j, _ = _AXES[grid.plane]
    names = "xyz"
    swap = (grid.v[-1] - grid.v[0]) > (grid.u[-1] - grid.u[0])
    across, down = (grid.v, grid.u) if swap else (grid.u, grid.v)
    ia, id_ = (j, i) if swap else (i, j)
    aspect = (down[-1] - down[0]) / max(across[-1] - across[0], 1e-12)
    cols = 1 if aspect < 0.6 or n == 1 else 2
    rows = int(np.ceil(n / cols))
    width = 7.0
    panel_h = float(np.clip((width - 1.0) / cols * aspect + 0.6, 1.4, 4.0))
    fig = fig or Figure(figsize=(width, panel_h * rows + 0.6), layout="constrained")
    axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False)).ravel()
    mesh = None
    mags = [np.abs(p) for p in pressures]
    refs = [float(np.percentile(m, 99.0) or m.max()) for m in mags]
    loudest = max(refs) if refs else 0.0
    for ax, mag, ref, title in zip(axes, mags, refs, titles):
        if ref <= SILENT_RATIO * loudest:
            # the plane is a nodal plane of this channel: what is left is rounding error, so show it
            # on the loudest panel's scale (all at the floor) instead of blowing the noise up to 0 dB
            ref = loudest
            title = f"{title} (silent in this plane)"
        db = np.clip(20.0 * np.log10(np.maximum(mag / max(ref, 1e-300), 1e-12)), -range_db, 0.0)
        mesh = ax.pcolormesh(across, down, db.T if swap else db, cmap="viridis", vmin=-range_db, vmax=0.0,
                             shading="auto")
        for es, marker, colour in ((rig.speakers, "^", "tab:red"), (rig.mics, "o", "white")):
            ax.scatter(es.positions[:, ia], es.positions[:, id_], marker=marker, s=12, c=colour,
                       edgecolors="black", linewidths=0.4)
        draw_walls(ax, rig, ia, id_)
        ax.set_xlabel(f"{names[ia]} (m)")
        ax.set_ylabel(f"{names[id_]} (m)")
        ax.set_aspect("equal")
        ax.set_title(title, fontsize=9)
    for ax in axes[n:]:
        ax.set_visible(False)
    fig.colorbar(mesh, ax=list(axes[:n]), label="|p| (dB re 99th percentile)", shrink=0.9)
    return fig
