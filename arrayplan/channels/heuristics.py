"""Paraxial estimate of the number of well-coupled channels.

Between two parallel lines of length Ls and Lr a distance L apart, facing
each other, the number of well-coupled channels is about Ls Lr / (lambda L);
between two parallel areas As and Ar it is about As Ar / (lambda^2 L^2)
(D. A. B. Miller, "Communicating with waves between volumes", Applied
Optics 39(11), 2000).  Both hold in the paraxial regime: apertures small
against L and facing each other across the line joining their centres.

Notes
-----
Apertures of sampled arrays.  An element stands for one spacing d of line
(or a d x d square of area), d being the median nearest-neighbour distance.
A line of N elements at spacing d therefore has length N d, and an Nx by Ny
grid has area Nx Ny d^2: the hull of the positions grown by d / 2 on every
side (area = hull area + perimeter d / 2 + d^2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PARAXIAL_RATIO", "ApertureShape", "aperture_shape", "ParaxialEstimate", "paraxial_estimate"]

_FLAT = 0.05           # a principal extent below 5 % of the largest counts as flat
PARAXIAL_RATIO = 0.5  # (half aperture sum) / distance above this is not paraxial
_ANGLE_TOL_DEG = 15.0


@dataclass(frozen=True)
class ApertureShape:
    """Principal shape of a set of element positions.

    Attributes
    ----------
    kind : str
        ``"point"``, ``"line"``, ``"area"`` or ``"volume"``.
    centre : ndarray, shape (3,), metres
    direction : ndarray, shape (3,)
        Line direction (line) or plane normal (area); zeros otherwise.
    size : float
        Effective length in m (line) or area in m^2 (area); 0 otherwise.
    extent : float
        Largest principal extent of the positions, metres.
    """

    kind: str
    centre: np.ndarray
    direction: np.ndarray
    size: float
    extent: float


#: Up to this many points, nearest neighbours are found from the full distance matrix (no KD-tree:
#: scipy.spatial takes a fifth of a second to import, more than the search).
_BRUTE_FORCE_POINTS = 1024


def _nearest_neighbour_m(pos: np.ndarray) -> np.ndarray:
    """Distance from each point to its nearest other point, m; `pos` shape (n, 3), n >= 2."""
    if len(pos) <= _BRUTE_FORCE_POINTS:
        d = np.sqrt(np.sum((pos[:, None, :] - pos[None, :, :]) ** 2, axis=-1))
        np.fill_diagonal(d, np.inf)
        return d.min(axis=1)
    from scipy.spatial import cKDTree

    return cKDTree(pos).query(pos, k=2)[0][:, 1]


def convex_hull_2d(points: np.ndarray) -> np.ndarray:
    """Vertices of the convex hull of 2-D points, counter-clockwise (Andrew's monotone chain).

    Parameters
    ----------
    points : ndarray, shape (n, 2)

    Returns
    -------
    ndarray, shape (h, 2)
        The hull's corners without collinear points; fewer than 3 rows when
        the points are all on one line (or fewer than 3 are distinct).

    Notes
    -----
    A. M. Andrew, "Another efficient algorithm for convex hulls in two
    dimensions", Information Processing Letters 9(5), 1979.
    """
    pts = np.unique(np.asarray(points, dtype=float), axis=0)     # sorted by x, then y
    if len(pts) < 3:
        return pts
    xy = pts.tolist()

    def half(seq):
        chain: list = []
        for p in seq:
            while len(chain) >= 2 and ((chain[-1][0] - chain[-2][0]) * (p[1] - chain[-2][1])
                                       - (chain[-1][1] - chain[-2][1]) * (p[0] - chain[-2][0])) <= 0:
                chain.pop()
            chain.append(p)
        return chain

    lower, upper = half(xy), half(reversed(xy))
    return np.array(lower[:-1] + upper[:-1])


def polygon_area_perimeter(vertices: np.ndarray) -> tuple[float, float]:
    """Area (shoelace formula) and perimeter of a simple polygon.

    Parameters
    ----------
    vertices : ndarray, shape (h, 2)
        Corners in order (either sense), m.

    Returns
    -------
    (float, float)
        Area in m^2 and perimeter in m.
    """
    x, y = vertices[:, 0], vertices[:, 1]
    area = 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))
    perimeter = float(np.sum(np.hypot(np.diff(x, append=x[0]), np.diff(y, append=y[0]))))
    return area, perimeter


def aperture_shape(positions: np.ndarray) -> ApertureShape:
    """Classify `positions` (shape (n, 3), metres) as point, line, area or volume.

    Principal axes come from the SVD of the centred positions; an extent
    below 5 % of the largest counts as flat.

    Parameters
    ----------
    positions : array_like, shape (n, 3)
        Element positions (m).

    Returns
    -------
    ApertureShape
        For a line, the effective length (extent plus the median neighbour
        spacing); for an area, the convex hull's area grown by half a
        neighbour spacing all round (m^2).
    """
    pos = np.asarray(positions, dtype=float)
    centre = pos.mean(axis=0)
    if len(pos) < 2:
        return ApertureShape("point", centre, np.zeros(3), 0.0, 0.0)
    _, _, axes = np.linalg.svd(pos - centre, full_matrices=False)  # rows: principal axes (3 x 3; U is n x 3)
    proj = (pos - centre) @ axes.T
    extents = proj.max(axis=0) - proj.min(axis=0)
    d = float(np.median(_nearest_neighbour_m(pos)))
    if extents[0] == 0:
        return ApertureShape("point", centre, np.zeros(3), 0.0, 0.0)
    if extents[1] <= _FLAT * extents[0]:
        return ApertureShape("line", centre, axes[0], float(extents[0] + d), float(extents[0]))
    if extents[2] <= _FLAT * extents[0]:
        hull = convex_hull_2d(proj[:, :2])
        if len(hull) >= 3:
            area, perimeter = polygon_area_perimeter(hull)
        else:
            area, perimeter = float(extents[0] * extents[1]), float(2 * (extents[0] + extents[1]))
        return ApertureShape("area", centre, axes[2], area + perimeter * d / 2.0 + d * d, float(extents[0]))
    return ApertureShape("volume", centre, np.zeros(3), 0.0, float(extents[0]))


@dataclass(frozen=True)
class ParaxialEstimate:
    """The heuristic channel count of a rig.

    Attributes
    ----------
    kind : str or None
        ``"line"`` or ``"area"`` when the estimate applies, else None.
    counts : ndarray, shape (n_freq,)
        Estimated number of well-coupled channels (NaN where it does not apply).
    distance_m : float
        Distance between the centres of the two arrays.
    speaker_size, mic_size : float
        Effective lengths (m) or areas (m^2).
    warning : str or None
        Why the estimate is rough or does not apply.
    """

    kind: str | None
    counts: np.ndarray
    distance_m: float
    speaker_size: float
    mic_size: float
    warning: str | None


def paraxial_estimate(speaker_positions: np.ndarray, mic_positions: np.ndarray,
                      wavelengths_m: np.ndarray) -> ParaxialEstimate:
    """Ls Lr / (lambda L) for lines, As Ar / (lambda^2 L^2) for areas.

    Parameters
    ----------
    speaker_positions, mic_positions : ndarray, shape (n, 3), metres
    wavelengths_m : ndarray, shape (n_freq,), metres

    Returns
    -------
    ParaxialEstimate
    """
    lam = np.asarray(wavelengths_m, dtype=float)
    spk, mic = aperture_shape(speaker_positions), aperture_shape(mic_positions)
    axis = mic.centre - spk.centre
    dist = float(np.linalg.norm(axis))
    nan = np.full(lam.shape, np.nan)
    if spk.kind != mic.kind or spk.kind not in ("line", "area"):
        return ParaxialEstimate(None, nan, dist, spk.size, mic.size,
                                f"the heuristic needs two lines or two areas; this rig has a {spk.kind} of "
                                f"speakers and a {mic.kind} of microphones")
    if dist == 0:
        return ParaxialEstimate(None, nan, dist, spk.size, mic.size, "the two arrays share a centre")
    n = axis / dist
    warnings = []
    if (spk.extent + mic.extent) / 2.0 > PARAXIAL_RATIO * dist:
        warnings.append(f"not paraxial: apertures {spk.extent:.3g} m and {mic.extent:.3g} m at only "
                        f"{dist:.3g} m apart")
    tol = np.cos(np.deg2rad(_ANGLE_TOL_DEG))
    if abs(np.dot(spk.direction, mic.direction)) < tol:
        warnings.append(f"the two {spk.kind}s are not parallel")
    if spk.kind == "line":
        if max(abs(np.dot(spk.direction, n)), abs(np.dot(mic.direction, n))) > np.sin(np.deg2rad(_ANGLE_TOL_DEG)):
            warnings.append("the lines are not perpendicular to the line joining their centres")
        counts = spk.size * mic.size / (lam * dist)
    else:
        if min(abs(np.dot(spk.direction, n)), abs(np.dot(mic.direction, n))) < tol:
            warnings.append("the areas do not face each other across the line joining their centres")
        counts = spk.size * mic.size / (lam ** 2 * dist ** 2)
    return ParaxialEstimate(spk.kind, counts, dist, spk.size, mic.size,
                            "; ".join(warnings) + " (heuristic is rough)" if warnings else None)
