"""The pressure field that one channel's drive weights produce over a plane.

p(x) = sum_s G(x, s) v_s with the rig's model kernel: the room's image
sources when the rig has a ``[room]``, else the free field (speaker
directivity included, receivers omnidirectional), for unit-energy drive
weights v.  Unit: Pa per unit source strength, the same unit as the
coupling stack.  In a room the default plane spans the room's cross-section.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..rig.directivity import OMNI
from ..errors import InputError
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig import ElementSet, Rig

__all__ = ["PlaneGrid", "channel_field", "channel_fields", "default_plane", "best_plane"]

_AXES = {"xy": (0, 1, 2), "xz": (0, 2, 1), "yz": (1, 2, 0)}


@dataclass(frozen=True)
class PlaneGrid:
    """A rectangular grid in a coordinate plane.

    Where :func:`channel_field` evaluates a field map.

    Attributes
    ----------
    plane : str
        ``"xy"``, ``"xz"`` or ``"yz"``.
    offset : float
        The third coordinate of the plane, metres.
    u, v : ndarray, shape (nu,), (nv,)
        Grid coordinates along the plane's two axes, metres.
    """

    plane: str
    offset: float
    u: np.ndarray
    v: np.ndarray

    def points(self) -> np.ndarray:
        """Grid points, row-major over (v, u).

        Returns
        -------
        ndarray, shape (nv * nu, 3)
            Point coordinates (m); `u` runs fastest.
        """
        i, j, k = _AXES[self.plane]
        uu, vv = np.meshgrid(self.u, self.v)
        pts = np.zeros((uu.size, 3))
        pts[:, i] = uu.ravel()
        pts[:, j] = vv.ravel()
        pts[:, k] = self.offset
        return pts


def default_plane(rig: Rig, plane: str = "xz", offset: float | None = None, resolution: int = 161,
                  margin: float = 0.25, extent_m: tuple[float, float, float, float] | None = None) -> PlaneGrid:
    """A grid over the rig's bounding box in `plane`, grown by `margin` of its size on each side.

    For a rig in a room the grid spans the room's cross-section (walls
    included) instead, and the plane's offset is kept inside the room.

    Parameters
    ----------
    rig : Rig
        The rig, positions in m.
    plane : str
        ``"xy"``, ``"xz"`` or ``"yz"``.
    offset : float, optional
        The plane's third coordinate (m); default the mean of the elements'
        third coordinates.  In a room it must lie inside the room.
    resolution : int
        Points along the plane's first axis; the second gets as many as
        keep the spacing about equal (at least 2).
    margin : float
        Growth of the bounding box on each side, as a fraction of its size
        (0.25 by default; larger values show spill and grating lobes beyond
        the rig).
    extent_m : (u_min, u_max, v_min, v_max), optional
        The grid's extent along the plane's two axes, m (for ``"xz"``: x then
        z); replaces the bounding box when given.

    Returns
    -------
    PlaneGrid
        The grid.

    Raises
    ------
    InputError
        An unknown plane, an offset outside the room, a bad extent or a
        negative margin.
    """
    if plane not in _AXES:
        raise InputError(f"plane must be one of {', '.join(_AXES)}, got {plane!r}", field="plane")
    i, j, k = _AXES[plane]
    pts = np.vstack([rig.speakers.positions, rig.mics.positions])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    size = np.maximum(hi - lo, 0.05 * np.max(hi - lo))
    lo, hi = lo - margin * size, hi + margin * size
    if rig.room is not None:
        lo, hi = np.zeros(3), np.asarray(rig.room.size_m, dtype=float)
        if offset is not None and not 0.0 <= offset <= hi[k]:
            raise InputError(f"the plane at {offset:g} m lies outside the room (0..{hi[k]:g} m along "
                             f"{'xyz'[k]})", field="offset")
    if extent_m is not None:
        u0, u1, v0, v1 = (float(x) for x in extent_m)
        if not (np.isfinite([u0, u1, v0, v1]).all() and u1 > u0 and v1 > v0):
            raise InputError(f"must be finite with u_min < u_max and v_min < v_max, got {list(extent_m)}",
                             field="extent_m")
        lo[[i, j]], hi[[i, j]] = (u0, v0), (u1, v1)
    if not (np.isfinite(margin) and margin >= 0):
        raise InputError(f"must be a finite number >= 0, got {margin!r}", field="margin")
    if offset is None:
        offset = float(pts[:, k].mean())
    u = np.linspace(lo[i], hi[i], resolution)
    v = np.linspace(lo[j], hi[j], max(2, int(round(resolution * (hi[j] - lo[j]) / (hi[i] - lo[i])))))
    return PlaneGrid(plane, float(offset), u, v)


def best_plane(rig: Rig) -> str:
    """The coordinate plane that holds most of the rig: the one normal to the axis of least spread.

    For two parallel line arrays facing each other this is the plane that
    contains both lines; for two facing grids, a plane through both.

    Parameters
    ----------
    rig : Rig
        The rig, positions in m.

    Returns
    -------
    str
        ``"xy"``, ``"xz"`` or ``"yz"``.
    """
    pts = np.vstack([rig.speakers.positions, rig.mics.positions])
    spread = pts.max(axis=0) - pts.min(axis=0)
    normal = int(np.argmin(spread))
    return {2: "xy", 1: "xz", 0: "yz"}[normal]


def channel_field(rig: Rig, drive_weights: np.ndarray, frequency_hz: float, grid: PlaneGrid) -> np.ndarray:
    """Complex pressure over `grid` for speaker weights `drive_weights` (shape (n_spk,)).

    Parameters
    ----------
    rig : Rig
        The rig; its room's image sources are used when it has one, else
        the free field.
    drive_weights : array_like, complex, shape (n_spk,)
        Speaker weights, e.g. one column of a channel set's drive weights.
    frequency_hz : float
        Frequency (Hz).
    grid : PlaneGrid
        Where to evaluate the field (m).

    Returns
    -------
    ndarray, complex, shape (len(grid.v), len(grid.u))
        Pressure per unit source strength; points closer than 1 mm to a
        speaker are evaluated at 1 mm.
    """
    w = np.asarray(drive_weights, dtype=complex).reshape(-1)
    return channel_fields(rig, w[:, None], frequency_hz, grid)[0]


def channel_fields(rig: Rig, drive_weights: np.ndarray, frequency_hz: float, grid: PlaneGrid) -> np.ndarray:
    """Complex pressure over `grid` for several channels' speaker weights, the kernel evaluated once.

    Parameters
    ----------
    rig : Rig
    drive_weights : ndarray, shape (n_spk, n_chan)
        One column of speaker weights per channel.
    frequency_hz : float
        Hz.
    grid : PlaneGrid

    Returns
    -------
    ndarray, complex, shape (n_chan, len(grid.v), len(grid.u))
        As :func:`channel_field` for each column.
    """
    w = np.asarray(drive_weights, dtype=complex)
    if w.ndim != 2 or w.shape[0] != len(rig.speakers):
        raise InputError(f"drive weights of shape {w.shape} for {len(rig.speakers)} speakers", field="drive_weights")
    pts = grid.points()
    out = np.empty((len(pts), w.shape[1]), dtype=complex)
    step = max(1, 200_000 // max(1, len(rig.speakers)))
    for start in range(0, len(pts), step):          # bound memory for fine grids
        chunk = pts[start:start + step]
        sub = ElementSet(tuple(f"p{start + i}" for i in range(len(chunk))), chunk, (OMNI,) * len(chunk),
                         tuple(range(1, len(chunk) + 1)))
        kernel = (RoomKernel.between(rig.speakers, sub, rig.medium, rig.room) if rig.room is not None
                  else FreeFieldKernel.between(rig.speakers, sub, rig.medium))
        g = kernel.evaluate(np.array([frequency_hz]))[0]
        out[start:start + step] = g @ w
    return out.T.reshape(w.shape[1], len(grid.v), len(grid.u))
