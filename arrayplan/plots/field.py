"""Field map of one channel."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from ..field import _AXES, PlaneGrid
from ..rig import Rig

__all__ = ["plot_field"]


def plot_field(rig: Rig, grid: PlaneGrid, pressure: np.ndarray, title: str, fig: Figure | None = None,
               range_db: float = 40.0) -> Figure:
    """|p| in dB re its maximum over the plane, with speakers and microphones projected on it."""
    fig = fig or Figure(figsize=(7.5, 5.5), layout="constrained")
    ax = fig.subplots()
    mag = np.abs(pressure)
    db = 20.0 * np.log10(np.maximum(mag / mag.max(), 10 ** (-range_db / 20.0)))
    mesh = ax.pcolormesh(grid.u, grid.v, db, cmap="viridis", vmin=-range_db, vmax=0.0, shading="auto")
    fig.colorbar(mesh, ax=ax, label="pressure magnitude (dB re maximum in plane)")
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
