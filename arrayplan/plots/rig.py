"""The rig geometry in three orthographic views."""

from __future__ import annotations

from matplotlib.figure import Figure

from ..rig import Rig
from .field import draw_walls

__all__ = ["plot_rig"]

#: The three views, named by the axes they show (no "front" or "side": which is which depends on the rig).
_VIEWS = (("x-y plane, seen from +z", 0, 1, "x (m)", "y (m)"), ("x-z plane, seen from -y", 0, 2, "x (m)", "z (m)"),
          ("y-z plane, seen from +x", 1, 2, "y (m)", "z (m)"))


def plot_rig(rig: Rig, fig: Figure | None = None, label_limit: int = 8) -> Figure:
    """Speakers (filled triangles) and microphones (open circles) in the three coordinate planes.

    Each view is named by its axes.  Microphones are drawn as open circles on
    top of filled speaker triangles, so an element hidden behind one of the
    other kind in a view still shows.  A rig in a room shows the room's walls
    as a black outline in each view.  Element names are written when there
    are at most `label_limit` of a kind.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones (positions in m) and room (if any).
    fig : Figure, optional
        Figure to draw on (three panels are added); a new one when None.
    label_limit : int
        Largest number of elements of one kind whose names are written.

    Returns
    -------
    Figure
    """
    fig = fig or Figure(figsize=(11.0, 3.9), layout="constrained")
    axes = fig.subplots(1, 3)
    for ax, (title, i, j, xl, yl) in zip(axes, _VIEWS):
        for es, marker, size, face, edge, label, z in ((rig.speakers, "^", 46, "tab:red", "black", "speakers", 3),
                                                       (rig.mics, "o", 30, "none", "tab:blue", "microphones", 4)):
            p = es.positions
            ax.scatter(p[:, i], p[:, j], marker=marker, s=size, facecolors=face, edgecolors=edge,
                       linewidths=0.5 if face != "none" else 1.2, label=f"{label} ({len(es)})", zorder=z)
            if len(es) <= label_limit:
                for name, row in zip(es.names, p):
                    ax.annotate(name, (row[i], row[j]), fontsize=7, xytext=(3, 3), textcoords="offset points")
        draw_walls(ax, rig, i, j)
        ax.set_title(title)
        ax.set_xlabel(xl)
        ax.set_ylabel(yl)
        ax.set_aspect("equal", adjustable="datalim")
        ax.grid(True, alpha=0.3)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncol=len(handles), fontsize=8, frameon=False)
    room = "" if rig.room is None else " in a {:g} x {:g} x {:g} m room".format(*rig.room.size_m)
    fig.suptitle(f"Rig '{rig.name}': {len(rig.speakers)} speakers, {len(rig.mics)} microphones{room}")
    return fig


