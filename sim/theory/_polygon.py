"""Convex polygons: hulls, distances and the Hausdorff distance.

A polygon is an array of its vertices in counter-clockwise order, shape (m, 2): ``m = 0`` is the
empty set, ``m = 1`` a point, ``m = 2`` a segment.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import ConvexHull, QhullError

__all__ = ["distance_to_polygon", "hausdorff", "hull", "hull_indices"]


def hull_indices(points: np.ndarray, rtol: float = 1e-13) -> np.ndarray:
    """Indices of the vertices of the convex hull of ``points`` in counter-clockwise order.

    Degenerate inputs give one index (a point) or two (a segment).

    Parameters
    ----------
    points : ndarray of shape (k, 2)
    rtol : float
        Relative width under which the points count as collinear.

    Returns
    -------
    ndarray of int, shape (m,)
    """
    P = np.asarray(points, dtype=float).reshape(-1, 2)
    if P.shape[0] == 0:
        return np.zeros(0, np.int64)
    scale = max(1.0, float(np.abs(P).max()))
    center = P.mean(axis=0)
    # the width across the principal axis decides flatness before Qhull sees rounding-thin hulls
    _, s, vt = np.linalg.svd(P - center, full_matrices=False)
    t = (P - center) @ vt[0]
    ends = np.array([int(np.argmin(t)), int(np.argmax(t))])
    if s.size < 2 or s[1] <= rtol * scale * np.sqrt(P.shape[0]):
        if np.allclose(P[ends[0]], P[ends[1]], rtol=0, atol=rtol * scale):
            return ends[:1]
        return ends
    across = np.abs((P - center) @ vt[1])
    if across.max() <= 1e-12 * scale:
        return ends
    try:
        return ConvexHull(P).vertices
    except QhullError:  # pragma: no cover - guarded by the width tests above
        return ends


def hull(points: np.ndarray, rtol: float = 1e-13) -> np.ndarray:
    """Vertices of the convex hull of ``points`` in counter-clockwise order, shape (m, 2).

    Parameters
    ----------
    points : ndarray of shape (k, 2)
    rtol : float
        Relative width under which the points count as collinear.

    Returns
    -------
    ndarray of shape (m, 2)
        ``m = 0`` (empty input), 1 (a point), 2 (a segment) or more.
    """
    P = np.asarray(points, dtype=float).reshape(-1, 2)
    return P[hull_indices(P, rtol)]


def _edges(V: np.ndarray):
    return V, np.roll(V, -1, axis=0)


def distance_to_polygon(points: np.ndarray, V: np.ndarray) -> np.ndarray:
    """Euclidean distance from each point to the convex polygon ``V`` (0 inside).

    Parameters
    ----------
    points : ndarray of shape (k, 2)
    V : ndarray of shape (m, 2)
        m >= 1; counter-clockwise.

    Returns
    -------
    ndarray of shape (k,)
    """
    X = np.asarray(points, dtype=float).reshape(-1, 2)
    P, Q = _edges(V)
    d = Q - P
    L2 = (d * d).sum(axis=1)
    rel = X[:, None, :] - P[None, :, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.clip(np.where(L2 > 0, (rel * d[None]).sum(axis=2) / np.where(L2 > 0, L2, 1.0), 0.0), 0.0, 1.0)
    near = P[None] + t[..., None] * d[None]
    dist = np.sqrt(((X[:, None, :] - near) ** 2).sum(axis=2)).min(axis=1)
    if V.shape[0] >= 3:
        cross = d[None, :, 0] * rel[:, :, 1] - d[None, :, 1] * rel[:, :, 0]
        inside = np.all(cross >= 0, axis=1)
        dist[inside] = 0.0
    return dist


def hausdorff(A: np.ndarray, B: np.ndarray) -> float:
    """Hausdorff distance between two convex polygons (``inf`` if exactly one is empty).

    For convex sets the largest distance from one set to the other is reached at a vertex, so the
    vertices suffice.

    Parameters
    ----------
    A, B : ndarray of shape (m, 2)

    Returns
    -------
    float
    """
    if A.shape[0] == 0 or B.shape[0] == 0:
        return 0.0 if A.shape[0] == B.shape[0] else float("inf")
    return float(max(distance_to_polygon(A, B).max(), distance_to_polygon(B, A).max()))
