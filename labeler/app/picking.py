"""Which map points a drag, a lasso or a click takes: pure numpy over the points' coordinates.

The page sends only the shape the annotator drew (in map units) and the server finds the points
in it, so a pick costs the page no pass over every point and sends no list of indices back.
"""

from __future__ import annotations

import numpy as np


def in_box(x: np.ndarray, y: np.ndarray, x0: float, x1: float, y0: float,
           y1: float) -> np.ndarray:
    """Rows of the points inside the box (edges included), in row order."""
    xa, xb = sorted((float(x0), float(x1)))
    ya, yb = sorted((float(y0), float(y1)))
    return np.flatnonzero((x >= xa) & (x <= xb) & (y >= ya) & (y <= yb))


def in_polygon(x: np.ndarray, y: np.ndarray, px, py) -> np.ndarray:
    """Rows of the points inside the closed polygon with vertices (px, py), by the even-odd rule:
    a point is inside when a ray from it crosses the edges an odd number of times."""
    px = np.asarray(px, dtype=np.float64)
    py = np.asarray(py, dtype=np.float64)
    ok = np.isfinite(px) & np.isfinite(py)
    px, py = px[ok], py[ok]
    if px.size < 3:
        return np.zeros(0, np.int64)
    cand = in_box(x, y, px.min(), px.max(), py.min(), py.max())
    cx = np.asarray(x, dtype=np.float64)[cand]
    cy = np.asarray(y, dtype=np.float64)[cand]
    inside = np.zeros(cand.size, bool)
    xj, yj = px[-1], py[-1]
    for xi, yi in zip(px, py):                     # one edge (j -> i) at a time, every point
        crosses = (yi > cy) != (yj > cy)
        with np.errstate(divide="ignore", invalid="ignore"):
            at = (xj - xi) * (cy - yi) / (yj - yi) + xi
        inside ^= crosses & (cx < at)
        xj, yj = xi, yi
    return cand[inside]


def nearest(x: np.ndarray, y: np.ndarray, at_x: float, at_y: float, unit_x: float,
            unit_y: float, reach: float) -> int | None:
    """Row of the point nearest (at_x, at_y), distances measured in screen pixels (``unit_x``,
    ``unit_y``: map units per pixel), or None when none is within ``reach`` pixels."""
    if x.size == 0 or not (unit_x > 0 and unit_y > 0):
        return None
    cand = in_box(x, y, at_x - reach * unit_x, at_x + reach * unit_x,
                  at_y - reach * unit_y, at_y + reach * unit_y)
    if cand.size == 0:
        return None
    d = ((x[cand] - at_x) / unit_x) ** 2 + ((y[cand] - at_y) / unit_y) ** 2
    k = int(np.argmin(d))
    return int(cand[k]) if d[k] <= reach * reach else None
