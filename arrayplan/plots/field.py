"""Field map of one channel."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..field import _AXES, PlaneGrid
from ..rig import Rig

__all__ = ["plot_field"]


def plot_field(rig: Rig, grid: PlaneGrid, pressure: np.ndarray, title: str, fig: Figure | None = None,
               range_db: float = 40.0) -> Figure:
    """|p| in dB over the plane, with speakers and microphones projected on it.

    0 dB is the 99th percentile of |p| over the plane, so that the near field
    of the speakers does not set the scale; louder points are drawn at 0 dB.
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
    names = "xyz"
    ax.set_xlabel(f"{names[i]} (m)")
    ax.set_ylabel(f"{names[j]} (m)")
    ax.set_aspect("equal")
    ax.legend(loc="upper right", fontsize=7)
    ax.set_title(title)
    return fig
