"""Generated element groups: lines, rectangular grids, arcs and circles, spheres.

Every generator returns positions in metres, shape (n, 3), and for each
element a suggested outward direction (unit vectors, shape (n, 3)) that a
group can use as the directivity axis (``axis = "outward"`` or
``"inward"`` in a rig file).
"""

from __future__ import annotations

import numpy as np

__all__ = ["line", "grid", "arc", "sphere", "orthonormal_pair"]


def _unit(v: np.ndarray | tuple) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def orthonormal_pair(normal: np.ndarray | tuple) -> tuple[np.ndarray, np.ndarray]:
    """Two unit vectors that span the plane perpendicular to `normal`.

    The first is the projection of the global x axis onto the plane (or of y
    when `normal` is along x), so that a grid facing +z has rows along x.

    Parameters
    ----------
    normal : array_like, shape (3,)
        Normal of the plane; any non-zero length.

    Returns
    -------
    u, v : ndarray, shape (3,)
        Unit vectors in the plane, with v = normal x u (right-handed).
    """
    n = _unit(normal)
    ref = np.array([1.0, 0.0, 0.0]) if abs(n[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    u = _unit(ref - np.dot(ref, n) * n)
    return u, np.cross(n, u)


def line(count: int, spacing: float, center: tuple, direction: tuple, facing: tuple | None = None
         ) -> tuple[np.ndarray, np.ndarray]:
    """`count` points `spacing` metres apart along `direction`, centred on `center`.

    The outward direction is `facing` (default: perpendicular to the line,
    from :func:`orthonormal_pair`).

    Parameters
    ----------
    count : int
        Number of points.
    spacing : float
        Distance between neighbours (m).
    center : array_like, shape (3,)
        Midpoint of the line (m).
    direction : array_like, shape (3,)
        Direction of the line; normalised here.
    facing : array_like, shape (3,), optional
        Outward direction of every element; normalised here.

    Returns
    -------
    positions : ndarray, shape (count, 3)
        Points in m, in order along `direction`.
    outward : ndarray, shape (count, 3)
        Unit outward direction of each point (all the same).
    """
    d = _unit(direction)
    offsets = (np.arange(count) - (count - 1) / 2.0) * spacing
    pos = np.asarray(center, dtype=float) + offsets[:, None] * d
    face = _unit(facing) if facing is not None else orthonormal_pair(d)[0]
    return pos, np.tile(face, (count, 1))


def grid(counts: tuple[int, int], spacing: tuple[float, float], center: tuple, normal: tuple
         ) -> tuple[np.ndarray, np.ndarray]:
    """A rectangular grid of counts[0] x counts[1] points in the plane normal to `normal`.

    Row-major order: the first index runs along the plane's first axis
    (see :func:`orthonormal_pair`).  The outward direction is `normal`.

    Parameters
    ----------
    counts : (int, int)
        Points along the plane's first and second axis.
    spacing : (float, float)
        Pitch along the first and second axis (m).
    center : array_like, shape (3,)
        Centre of the grid (m).
    normal : array_like, shape (3,)
        Normal of the grid's plane; also the outward direction.

    Returns
    -------
    positions : ndarray, shape (counts[0] * counts[1], 3)
        Points in m.
    outward : ndarray, shape (counts[0] * counts[1], 3)
        The unit normal, repeated.
    """
    u, v = orthonormal_pair(normal)
    nu, nv = counts
    a = (np.arange(nu) - (nu - 1) / 2.0) * spacing[0]
    b = (np.arange(nv) - (nv - 1) / 2.0) * spacing[1]
    aa, bb = np.meshgrid(a, b, indexing="xy")
    pos = np.asarray(center, dtype=float) + aa.reshape(-1, 1) * u + bb.reshape(-1, 1) * v
    return pos, np.tile(_unit(normal), (pos.shape[0], 1))


def arc(count: int, radius: float, center: tuple, normal: tuple, start_deg: float = 0.0,
        stop_deg: float = 360.0) -> tuple[np.ndarray, np.ndarray]:
    """`count` points on a circular arc of `radius` around `center` in the plane normal to `normal`.

    Angles are measured from the plane's first axis (:func:`orthonormal_pair`)
    towards its second.  A full circle (stop - start = 360) does not repeat
    its first point.  The outward direction is radial.

    Parameters
    ----------
    count : int
        Number of points.
    radius : float
        Radius of the arc (m).
    center : array_like, shape (3,)
        Centre of the circle (m).
    normal : array_like, shape (3,)
        Normal of the circle's plane.
    start_deg, stop_deg : float
        First and last angle (degrees).

    Returns
    -------
    positions : ndarray, shape (count, 3)
        Points in m.
    outward : ndarray, shape (count, 3)
        Unit radial directions, from `center` to each point.
    """
    u, v = orthonormal_pair(normal)
    full = abs((stop_deg - start_deg) - 360.0) < 1e-9
    ang = np.deg2rad(np.linspace(start_deg, stop_deg, count, endpoint=not full or count == 1))
    radial = np.cos(ang)[:, None] * u + np.sin(ang)[:, None] * v
    return np.asarray(center, dtype=float) + radius * radial, radial


def sphere(count: int, radius: float, center: tuple) -> tuple[np.ndarray, np.ndarray]:
    """`count` nearly uniform points on a sphere (Fibonacci lattice); outward is radial.

    Parameters
    ----------
    count : int
        Number of points.
    radius : float
        Radius of the sphere (m).
    center : array_like, shape (3,)
        Centre of the sphere (m).

    Returns
    -------
    positions : ndarray, shape (count, 3)
        Points in m, from near the +z pole to near the -z pole.
    outward : ndarray, shape (count, 3)
        Unit radial directions.
    """
    i = np.arange(count) + 0.5
    z = 1.0 - 2.0 * i / count
    phi = np.pi * (1.0 + 5 ** 0.5) * i
    rho = np.sqrt(1.0 - z ** 2)
    radial = np.column_stack([rho * np.cos(phi), rho * np.sin(phi), z])
    return np.asarray(center, dtype=float) + radius * radial, radial
