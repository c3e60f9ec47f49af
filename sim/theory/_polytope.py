"""Polytopes in payoff space: directions, half-space and vertex forms, distances.

The outer approximation of Judd, Yeltekin and Conklin (2003, "Computing supergame equilibria",
Econometrica 71(4)) describes a convex set by its support values ``c_l`` in fixed directions
``h_l``: ``W = {w : h_l . w <= c_l for every l}``. This module chooses the directions, turns the
half-space form into vertices (through Qhull's half-space intersection, with an interior point from
a linear programme solved by HiGHS) and measures distances between sets.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import linprog, nnls
from scipy.spatial import ConvexHull, HalfspaceIntersection, QhullError
from scipy.special import ndtri
from scipy.stats import qmc

__all__ = [
    "bounding_box",
    "distance_to_hull",
    "extend_directions",
    "polytope_vertices",
    "reduce_points",
    "sphere_directions",
]

_HIGHS = {"primal_feasibility_tolerance": 1e-10, "dual_feasibility_tolerance": 1e-10}


def sphere_directions(n: int, count: int) -> np.ndarray:
    """``count`` unit directions in ``R^n`` that positively span it.

    The first ``n + 1`` are ``-e_1, ..., -e_n`` and ``(1, ..., 1)/sqrt(n)`` (a bounded simplex: each
    firm's worst payoff and the joint profit are support values), then ``+e_i`` and
    ``-(1, ..., 1)/sqrt(n)``, then a deterministic spread of the sphere: the Fibonacci lattice for
    ``n = 3`` (Gonzalez, 2010, "Measurement of areas on a sphere using Fibonacci and
    latitude-longitude lattices", Mathematical Geosciences 42), an even spread of angles for
    ``n = 2``, and a Halton sequence mapped to the sphere otherwise.

    Parameters
    ----------
    n : int
    count : int
        At least ``n + 1``.

    Returns
    -------
    ndarray of shape (count, n)
    """
    eye = np.eye(n)
    one = np.full(n, 1.0 / np.sqrt(n))
    key = np.array([*(-eye), one, *eye, -one])
    D = key[:count]
    return extend_directions(D, count) if count > D.shape[0] else D


def extend_directions(D: np.ndarray, count: int) -> np.ndarray:
    """``D`` followed by further directions of the same spread, ``count`` rows in all.

    Parameters
    ----------
    D : ndarray of shape (L, n)
    count : int

    Returns
    -------
    ndarray of shape (max(L, count), n)
    """
    L, n = D.shape
    need = count - L
    if need <= 0:
        return D.copy()
    # the spread is even only when all of its points are used: grow it until enough of them are
    # distinct from the given directions
    for k in range(need, 2 * need + 2 * L + 8):
        cand = _spread(n, k)
        keep = cand[np.max(cand @ D.T, axis=1) < 1 - 1e-9]
        if keep.shape[0] >= need:
            return np.vstack([D, keep[:need]])
    return np.vstack([D, keep])  # pragma: no cover - the loop always finds enough


def _spread(n: int, k: int) -> np.ndarray:
    if n == 2:
        ang = (np.arange(k) + 0.5) * 2 * np.pi / k
        return np.stack([np.cos(ang), np.sin(ang)], axis=1)
    if n == 3:
        i = np.arange(k) + 0.5
        z = 1 - 2 * i / k
        r = np.sqrt(1 - z * z)
        phi = np.pi * (1 + 5**0.5) * i
        return np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)
    u = qmc.Halton(d=n, scramble=False).random(k + 1)[1:]
    x = ndtri(np.clip(u, 1e-12, 1 - 1e-12))
    return x / np.linalg.norm(x, axis=1, keepdims=True)


def chebyshev_center(H: np.ndarray, c: np.ndarray):
    """Centre and radius of the largest ball inside ``{w : H w <= c}`` (rows of ``H`` unit vectors).

    Parameters
    ----------
    H : ndarray of shape (L, n)
    c : ndarray of shape (L,)

    Returns
    -------
    center : ndarray of shape (n,) or None
        None when the polytope is empty.
    radius : float
    """
    L, n = H.shape
    A = np.hstack([H, np.ones((L, 1))])
    obj = np.zeros(n + 1)
    obj[-1] = -1.0
    res = linprog(obj, A_ub=A, b_ub=c, bounds=[(None, None)] * n + [(0, None)], method="highs",
                  options=_HIGHS)
    if res.status != 0:
        return None, -np.inf
    return res.x[:n], float(res.x[-1])


def polytope_vertices(H: np.ndarray, c: np.ndarray, scale: float):
    """Vertices of ``{w : H w <= c}`` or None when it has (almost) no interior.

    Parameters
    ----------
    H : ndarray of shape (L, n)
    c : ndarray of shape (L,)
    scale : float
        Payoff unit; an inscribed ball of radius below ``1e-11 * scale`` counts as no interior.

    Returns
    -------
    ndarray of shape (J, n) or None
    """
    center, r = chebyshev_center(H, c)
    if center is None or r <= 1e-11 * scale:
        return None
    try:
        hs = HalfspaceIntersection(np.hstack([H, -c[:, None]]), center)
    except QhullError:
        return None
    V = hs.intersections
    V = V[np.all(np.isfinite(V), axis=1)]
    return np.unique(V, axis=0) if V.size else None


def bounding_box(H: np.ndarray, c: np.ndarray):
    """Smallest box containing ``{w : H w <= c}``: ``2 n`` linear programmes.

    Returns
    -------
    low, high : ndarray of shape (n,)
        ``nan`` if the polytope is empty.
    """
    n = H.shape[1]
    low, high = np.full(n, np.nan), np.full(n, np.nan)
    for i in range(n):
        for sign in (1.0, -1.0):
            obj = np.zeros(n)
            obj[i] = sign
            res = linprog(obj, A_ub=H, b_ub=c, bounds=[(None, None)] * n, method="highs", options=_HIGHS)
            if res.status != 0:
                return np.full(n, np.nan), np.full(n, np.nan)
            if sign > 0:
                low[i] = res.x[i]
            else:
                high[i] = res.x[i]
    return low, high


def reduce_points(P: np.ndarray) -> np.ndarray:
    """The vertices of the convex hull of ``P`` (all distinct points when the hull is flat).

    Parameters
    ----------
    P : ndarray of shape (k, n)

    Returns
    -------
    ndarray of shape (j, n)
    """
    P = np.unique(P, axis=0)
    if P.shape[0] <= P.shape[1] + 1:
        return P
    try:
        return P[ConvexHull(P).vertices]
    except QhullError:
        return P


def distance_to_hull(x: np.ndarray, P: np.ndarray) -> float:
    """An upper bound, tight to rounding, on the distance from ``x`` to the convex hull of ``P``.

    Non-negative least squares with the weights' sum held at one by a heavily weighted row (the
    weights are then renormalised, so the returned distance is to an actual point of the hull).

    Parameters
    ----------
    x : ndarray of shape (n,)
    P : ndarray of shape (k, n)

    Returns
    -------
    float
    """
    scale = max(1.0, float(np.abs(P).max()), float(np.abs(x).max()))
    big = 1e4
    A = np.vstack([P.T / scale, np.full((1, P.shape[0]), big)])
    b = np.concatenate([x / scale, [big]])
    mu, _ = nnls(A, b, maxiter=50 * P.shape[0])
    s = mu.sum()
    if s <= 0:
        return float(np.min(np.linalg.norm(P - x, axis=1)))
    point = (mu / s) @ P
    return float(min(np.linalg.norm(point - x), np.min(np.linalg.norm(P - x, axis=1))))


