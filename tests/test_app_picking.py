"""Which map points a box, a lasso or a click takes, checked against scipy's geometry."""

from __future__ import annotations

import numpy as np
from scipy.spatial import ConvexHull, Delaunay, cKDTree

from labeler.app import picking


def _points(n=5000, seed=0):
    rng = np.random.default_rng(seed)
    return rng.normal(0, 3, n).astype(np.float32), rng.normal(0, 2, n).astype(np.float32)


def test_a_convex_lasso_takes_what_a_triangulation_of_it_holds():
    # Reference: scipy.spatial.Delaunay (Qhull: Barber, Dobkin & Huhdanpaa, "The Quickhull
    # algorithm for convex hulls", 1996); a point is inside a convex polygon exactly when it falls
    # in a simplex of the polygon's triangulation.
    x, y = _points()
    rng = np.random.default_rng(1)
    corners = rng.normal(0, 3, (12, 2))
    hull = corners[ConvexHull(corners).vertices]          # the polygon, in drawing order
    got = picking.in_polygon(x, y, hull[:, 0], hull[:, 1])
    want = np.flatnonzero(Delaunay(hull).find_simplex(np.c_[x, y]) >= 0)
    assert got.size > 100
    assert np.array_equal(got, want)


def test_a_lasso_around_a_corner_leaves_the_notch_out():
    # An L-shaped lasso (not convex): inside exactly when inside one of its two rectangles
    # (plain comparisons; the even-odd rule, common practice, no source).
    x, y = _points(seed=2)
    px = [-4, 4, 4, 0, 0, -4]
    py = [-3, -3, 0, 0, 3, 3]
    got = picking.in_polygon(x, y, px, py)
    a = (x > -4) & (x < 4) & (y > -3) & (y < 0)
    b = (x > -4) & (x < 0) & (y >= 0) & (y < 3)
    on_edge = np.isclose(y, 0) | np.isclose(x, 0)
    want = np.flatnonzero((a | b) & ~on_edge)
    assert np.array_equal(np.setdiff1d(got, np.flatnonzero(on_edge)), want)
    assert not ((x[got] > 0) & (y[got] > 0)).any()        # nothing of the notch
    assert picking.in_polygon(x, y, [0, 1], [0, 1]).size == 0   # fewer than 3 corners


def test_a_box_takes_the_points_within_its_edges_drawn_either_way():
    x, y = _points(seed=3)
    got = picking.in_box(x, y, 2.0, -1.0, 1.5, -0.5)
    want = np.flatnonzero((x >= -1) & (x <= 2) & (y >= -0.5) & (y <= 1.5))
    assert np.array_equal(got, want)


def test_a_click_takes_the_nearest_point_in_screen_pixels_within_reach():
    # Reference: scipy.spatial.cKDTree on the points in pixels (x and y scaled apart, as a map
    # is drawn wider than high).
    x, y = _points(2000, seed=4)
    ux, uy = 0.02, 0.05                                    # map units per pixel
    tree = cKDTree(np.c_[x / ux, y / uy])
    rng = np.random.default_rng(5)
    hits = 0
    for at_x, at_y in rng.normal(0, 3, (200, 2)):
        d, k = tree.query([at_x / ux, at_y / uy])
        got = picking.nearest(x, y, at_x, at_y, ux, uy, reach=8)
        if d <= 8:
            assert got == k
            hits += 1
        else:
            assert got is None
    assert 20 < hits < 200
    assert picking.nearest(x, y, 0.0, 0.0, float("nan"), uy, reach=8) is None
