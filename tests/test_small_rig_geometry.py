"""Hull, nearest neighbours and coincident pairs for small rigs, computed without scipy.spatial."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import ConvexHull, cKDTree

from arrayplan.channels import heuristics
from arrayplan.channels.heuristics import aperture_shape, convex_hull_2d, polygon_area_perimeter
from arrayplan.rig import model
from arrayplan.rig.model import coincident_pairs


@pytest.mark.parametrize("seed", range(5))
def test_hull_area_and_perimeter_match_qhull(seed):
    """Reference: scipy.spatial.ConvexHull (Qhull): in 2-D, .volume is the area and .area the perimeter."""
    rng = np.random.default_rng(seed)
    pts = rng.normal(size=(200, 2))
    pts = np.vstack([pts, pts[:20]])                    # repeated points
    hull = ConvexHull(pts)
    area, perimeter = polygon_area_perimeter(convex_hull_2d(pts))
    assert area == pytest.approx(hull.volume, rel=1e-12)
    assert perimeter == pytest.approx(hull.area, rel=1e-12)
    assert len(convex_hull_2d(pts)) == len(hull.vertices)


def test_hull_of_a_grid_keeps_only_corners():
    """A 4 x 3 grid's hull is its bounding rectangle (common practice, no source)."""
    x, y = np.meshgrid(np.arange(4) * 0.05, np.arange(3) * 0.05)
    hull = convex_hull_2d(np.column_stack([x.ravel(), y.ravel()]))
    assert len(hull) == 4
    area, perimeter = polygon_area_perimeter(hull)
    assert area == pytest.approx(0.15 * 0.10) and perimeter == pytest.approx(2 * (0.15 + 0.10))


def test_hull_of_collinear_points_is_degenerate():
    pts = np.column_stack([np.arange(5.0), 2 * np.arange(5.0)])
    assert len(convex_hull_2d(pts)) < 3


def test_nearest_neighbour_matches_kdtree():
    """Reference: scipy.spatial.cKDTree.query(k=2)."""
    pos = np.random.default_rng(3).uniform(size=(300, 3))
    ref = cKDTree(pos).query(pos, k=2)[0][:, 1]
    np.testing.assert_allclose(heuristics._nearest_neighbour_m(pos), ref, rtol=1e-12)


def test_aperture_area_of_a_grid_independent_of_the_path(monkeypatch):
    x, y = np.meshgrid(np.arange(8) * 0.04, np.arange(8) * 0.04)
    pos = np.column_stack([x.ravel(), y.ravel(), np.zeros(64)])
    small = aperture_shape(pos)
    monkeypatch.setattr(heuristics, "_BRUTE_FORCE_POINTS", 0)
    large = aperture_shape(pos)
    assert small.kind == large.kind == "area"
    assert small.size == pytest.approx(large.size, rel=1e-12)
    # effective area: hull + half the perimeter times the spacing + one spacing squared
    side = 7 * 0.04
    assert small.size == pytest.approx(side * side + 4 * side * 0.04 / 2 + 0.04 ** 2, rel=1e-9)


@pytest.mark.parametrize("same", [True, False])
def test_coincident_pairs_same_by_either_path(monkeypatch, same):
    rng = np.random.default_rng(11)
    a = rng.uniform(size=(60, 3))
    a[[5, 17, 40]] = a[[3, 9, 9]] + 2e-7                 # three near-coincident pairs
    a[22] = np.nan
    b = None if same else np.vstack([a[:10] + 3e-7, rng.uniform(size=(5, 3))])
    brute = coincident_pairs(a, b, radius_m=1e-6)
    monkeypatch.setattr(model, "_BRUTE_FORCE_PAIRS", 0)
    tree = coincident_pairs(a, b, radius_m=1e-6)
    assert brute == tree and len(brute) >= 3
