"""Which points lie inside a polygon drawn by the user (even-odd rule)."""

from __future__ import annotations

import numpy as np

from rigside.core.errors import RigsideError

MAX_VERTICES = 10_000


def check_polygon(vertices) -> np.ndarray:
    """Vertices as a float64 (n, 2) array: 3 to 10000 finite points, else :class:`RigsideError`."""
    try:
        v = np.asarray(vertices, dtype=np.float64)
    except (TypeError, ValueError):
        raise RigsideError(f"polygon must be a list of (x, y) pairs, got {str(vertices)[:60]!r}") from None
    if v.ndim != 2 or v.shape[1] != 2 or not 3 <= len(v) <= MAX_VERTICES:
        raise RigsideError(f"polygon must be 3 to {MAX_VERTICES} (x, y) pairs, got shape {v.shape}")
    if not np.isfinite(v).all():
        raise RigsideError("polygon vertices must be finite numbers, got NaN or Inf")
    return v


def points_in_polygon(x: np.ndarray, y: np.ndarray, vertices) -> np.ndarray:
    """Boolean mask of the points inside a closed polygon.

    Even-odd rule by ray casting (common practice, no source): a horizontal ray from the
    point crosses the polygon's edges an odd number of times when the point is inside. The
    polygon closes itself (last vertex joins the first); self-intersecting outlines are
    allowed and follow the even-odd rule. Points exactly on an edge fall on a fixed,
    deterministic side.

    Parameters
    ----------
    x, y
        Point coordinates (same length).
    vertices
        (n, 2) polygon vertices, n >= 3.
    """
    v = check_polygon(vertices)
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    inside = np.zeros(x.shape, dtype=bool)
    lo, hi = v.min(axis=0), v.max(axis=0)
    box = np.flatnonzero((x >= lo[0]) & (x <= hi[0]) & (y >= lo[1]) & (y <= hi[1]))
    px, py = x[box], y[box]
    hit = np.zeros(len(box), dtype=bool)
    xj, yj = v[-1]
    for xi, yi in v:
        spans = np.flatnonzero((yi > py) != (yj > py))
        if len(spans):
            # x of the edge at the point's height; yi != yj wherever the edge spans the height
            cross = xi + (py[spans] - yi) * (xj - xi) / (yj - yi)
            hit[spans[px[spans] < cross]] ^= True
        xj, yj = xi, yi
    inside[box] = hit
    return inside
