"""Exact image of a polytope under the equilibrium operator, vectorised over action profiles.

For a convex polytope ``W`` of continuation payoffs and a profile ``a`` the enforceable
continuations form ``Q(a) = W n {w >= IC(a)}`` (see :mod:`sim.theory._polygon` for ``IC``). Every
vertex of ``Q(a)`` is a point where ``n`` independent constraints are active: ``k`` of the planes
``w_i = IC_i(a)`` (a set ``S`` of firms, ``|S| = k``) and facets of ``W``, so it lies on a
``k``-dimensional face of ``W``. In a triangulation of ``W``'s boundary (or of ``W`` itself when
it is flat) the vertex lies in a ``k``-simplex ``tau`` and solves

    sum_j lambda_j p_j[S] = IC_S(a),   sum_j lambda_j = 1,   lambda >= 0,

with ``p_j`` the corners of ``tau`` -- a (k+1) x (k+1) system whose matrix does not depend on
``a``. :func:`candidates` inverts every such matrix once and solves the system for all profiles at
once; with the vertices of ``W`` (k = 0) and the corner ``IC(a)`` itself when it lies inside ``W``
(k = n) this lists a superset of the vertices of every ``Q(a)``, made of points of ``Q(a)`` only.
Hence

* ``B(W)`` is exactly the convex hull of ``(1 - delta) g(a) + delta w`` over the listed pairs, and
* the support value of ``B(W)`` in a direction ``h`` is exactly the largest ``h`` value among them,

so one step of the outer approximation of Judd, Yeltekin and Conklin (2003, "Computing supergame
equilibria", Econometrica 71(4)) needs no linear programme per (profile, direction): the linear
programmes ``max h.w over Q(a)`` are solved by enumerating the candidate vertices.
A simplex whose system is singular (a face parallel to the planes) is skipped: the vertices of
``Q(a)`` on it are found on its lower-dimensional faces.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
from scipy.spatial import ConvexHull, Delaunay, QhullError

__all__ = ["Geometry", "candidates", "geometry", "support_step"]


@dataclass(frozen=True, eq=False)
class Geometry:
    """The combinatorial description of a polytope that :func:`candidates` needs.

    Attributes
    ----------
    points : ndarray of shape (J, n)
        Its vertices (all of them; possibly a few more points of it).
    faces : tuple of (int, ndarray) pairs
        ``(k, idx)`` with ``idx`` of shape (m_k, k + 1): the k-simplices, as rows of indices into
        ``points``, for ``k = 1, ..., dim``.
    H : ndarray of shape (F, n) or None
        Facet normals when the polytope is full-dimensional (``H w <= c`` inside).
    c : ndarray of shape (F,) or None
    dim : int
        Dimension of the polytope (``n`` when full-dimensional).
    lost : float
        Bound on the distance from any given point to the hull of ``points``: twice the largest distance of a given
        point from the affine hull the polytope was flattened into (0 when it is full-dimensional).
    """

    points: np.ndarray
    faces: tuple
    H: np.ndarray | None
    c: np.ndarray | None
    dim: int
    lost: float = 0.0


def _subfaces(simplices: np.ndarray, top: int) -> tuple:
    out = []
    for k in range(1, top + 1):
        subs = set()
        for row in simplices:
            for comb in combinations(sorted(int(x) for x in row), k + 1):
                subs.add(comb)
        if subs:
            out.append((k, np.array(sorted(subs), dtype=np.int64)))
    return tuple(out)


def geometry(P: np.ndarray, scale: float) -> Geometry:
    """Vertices, faces and (when full-dimensional) facet inequalities of the hull of ``P``.

    Parameters
    ----------
    P : ndarray of shape (k, n)
        Points (k >= 1).
    scale : float
        Payoff unit; directions along which the points spread less than ``1e-10 * scale`` count as
        flat.

    Returns
    -------
    Geometry
    """
    P = np.unique(np.asarray(P, dtype=float), axis=0)
    n = P.shape[1]
    if P.shape[0] == 1:
        return Geometry(P, (), None, None, 0)
    center = P.mean(axis=0)
    _, s, vt = np.linalg.svd(P - center, full_matrices=False)
    d = int(np.sum(s > 1e-10 * scale * np.sqrt(P.shape[0])))
    if d == n:
        try:
            h = ConvexHull(P)
        except QhullError:
            d = n - 1
        else:
            keep = np.unique(h.simplices)
            remap = -np.ones(P.shape[0], np.int64)
            remap[keep] = np.arange(keep.size)
            faces = _subfaces(remap[h.simplices], n - 1)
            return Geometry(P[keep], faces, h.equations[:, :n], -h.equations[:, n], n)
    # a thin set is flattened into its d-dimensional affine hull: a given point lies within its distance from that
    # hull of its projection, which lies in the hull of the kept points' projections, each within the same distance
    # of its point. Qhull also refuses sets a few 1e-8 thick that pass the rank test above ("wide merge"), and
    # those are flattened too, so an outer sequence must allow for the thickness dropped (see sim.theory._iterate).
    off = (P - center) @ vt[d:].T if d < vt.shape[0] else np.zeros((P.shape[0], 0))
    lost = 2.0 * float(np.linalg.norm(off, axis=1).max()) if off.shape[1] else 0.0
    if d == 0:
        return Geometry(P[:1], (), None, None, 0, lost)
    Y = (P - center) @ vt[:d].T
    if d == 1:
        ends = [int(np.argmin(Y[:, 0])), int(np.argmax(Y[:, 0]))]
        return Geometry(P[ends], ((1, np.array([[0, 1]])),), None, None, 1, lost)
    try:
        keep = ConvexHull(Y).vertices
        tri = Delaunay(Y[keep])
    except QhullError:  # pragma: no cover - the rank test above makes the flat hull well posed
        keep = np.arange(P.shape[0])
        tri = Delaunay(Y, qhull_options="QJ")
    return Geometry(P[keep], _subfaces(tri.simplices, d), None, None, d, lost)


def candidates(geom: Geometry, b: np.ndarray, eps: float, block: int = 3_000_000):
    """Points of ``Q(a) = W n {w >= b_a}`` that include all its vertices, for every row ``b_a``.

    Parameters
    ----------
    geom : Geometry
        The polytope ``W``.
    b : ndarray of shape (n_profiles, n)
        Incentive thresholds ``IC(a)``.
    eps : float
        Rounding allowance on the constraints (weights above ``-1e-12``, thresholds met to within
        ``eps``).
    block : int
        Largest number of numbers held per batch (bounds memory).

    Returns
    -------
    rows : ndarray of int, shape (K,)
        Row of ``b`` each point belongs to.
    w : ndarray of shape (K, n)
    """
    P = geom.points
    A, n = b.shape
    if A == 0:
        return np.zeros(0, np.int64), np.zeros((0, n))
    rows, pts = [], []
    step = max(1, block // max(1, P.shape[0] * n))
    for s in range(0, A, step):
        ok = np.all(P[None, :, :] >= b[s:s + step, None, :] - eps, axis=2)
        r, j = np.nonzero(ok)
        rows.append(r + s)
        pts.append(P[j])
    for k, idx in geom.faces:
        for S in combinations(range(n), k):
            r, w = _on_faces(P, idx, list(S), b, eps, block)
            rows.append(r)
            pts.append(w)
    if geom.H is not None:
        inside = np.all(b @ geom.H.T <= geom.c[None, :] + eps, axis=1)
        r = np.flatnonzero(inside)
        rows.append(r)
        pts.append(b[r].copy())
    if not rows:
        return np.zeros(0, np.int64), np.zeros((0, n))
    return np.concatenate(rows).astype(np.int64), np.concatenate(pts)


def _on_faces(P, idx, S, b, eps, block):
    """Points of the k-simplices ``idx`` where ``w_S = b_S``, for every row of ``b``.

    The weights are solved relative to the first corner, ``w = p_0 + sum_{j >= 1} mu_j (p_j - p_0)``,
    with ``lambda_0 = 1 - sum mu``: the condition ``sum lambda = 1`` then holds by construction. Solving
    the bordered system with the row of ones instead loses that row on nearly singular faces (an edge
    almost parallel to the plane ``w_S = b_S``, condition numbers near ``1e12``, which occur on the
    thin sets of the inner sequence): the weights summed to ``1 + 4e-6``, which moved the point off
    the face, out of ``W``, by a few ``1e-6``, and the inner set grew past the outer one. Now rounding
    can only move a point along its face, and the weights' signs keep it inside the simplex.
    """
    k = len(S)
    corners = P[idx]  # (m, k + 1, n)
    base = corners[:, 0, :]  # (m, n)
    E = corners[:, 1:, :] - base[:, None, :]  # (m, k, n): edges from the first corner
    ES = E[:, :, S]  # (m, k, k); det(ES) equals the bordered system's determinant up to sign
    det = np.linalg.det(ES)
    size = np.abs(corners[:, :, S]).max(axis=(1, 2)) + 1.0
    good = np.abs(det) > 1e-12 * size**k
    if not np.any(good):
        return np.zeros(0, np.int64), np.zeros((0, P.shape[1]))
    inv = np.linalg.inv(ES[good])  # mu = (b_S - base_S) @ inv
    corners, base = corners[good], base[good]
    m = inv.shape[0]
    A = b.shape[0]
    rows, pts = [], []
    step = max(1, block // max(1, m * (k + 1 + P.shape[1])))
    for s in range(0, A, step):
        mu = (b[s:s + step][:, S][None, :, :] - base[:, S][:, None, :]) @ inv  # (m, a, k)
        lam = np.concatenate([1.0 - mu.sum(axis=2, keepdims=True), mu], axis=2)  # (m, a, k + 1)
        # most (face, profile) pairs miss the face: test the weights before forming the points
        f, r = np.nonzero(np.all(lam >= -1e-12, axis=2))
        w = np.einsum("qi,qin->qn", lam[f, r], corners[f])
        ok = np.all(w >= b[s + r] - eps, axis=1)
        rows.append(r[ok] + s)
        pts.append(w[ok])
    return np.concatenate(rows), np.concatenate(pts)


def _extreme(V: np.ndarray) -> np.ndarray:
    """Indices of points of ``V`` that include every vertex of its hull (all of them when the hull is
    flat or too small for Qhull)."""
    if V.shape[0] > V.shape[1] + 1:
        try:
            return ConvexHull(V).vertices
        except QhullError:
            pass
    return np.arange(V.shape[0])


def support_step(G, gains, delta, u, geom: Geometry, D, eps, block: int = 3_000_000):
    """Support values of ``B(W)`` in directions ``D``, exactly, with a maximiser of each.

    Parameters
    ----------
    G : ndarray of shape (n_profiles, n)
        Stage payoffs.
    gains : ndarray of shape (n_profiles, n)
        Best-reply payoff minus payoff.
    delta : float
    u : ndarray of shape (n,)
        Each firm's worst continuation payoff in ``W``.
    geom : Geometry
        The polytope ``W``.
    D : ndarray of shape (L, n)
        Directions.
    eps : float
        Rounding allowance (see :func:`candidates`).
    block : int
        Largest number of numbers held per batch while listing candidates.

    Returns
    -------
    values : ndarray of shape (L,)
        ``-inf`` for every direction when no profile is enforceable.
    profiles : ndarray of int, shape (L,)
        Flat index of a maximising profile (-1 if none).
    continuations : ndarray of shape (L, n)
    points : ndarray of shape (K, n)
        Every generated payoff ``(1 - delta) g(a) + delta w`` (their hull is ``B(W)``).
    point_profiles : ndarray of int, shape (K,)
    point_continuations : ndarray of shape (K, n)
    """
    b = u[None, :] + (1.0 - delta) / delta * gains
    live = np.flatnonzero(np.all(b <= geom.points.max(axis=0)[None, :] + eps, axis=1))
    r, w = candidates(geom, b[live], eps, block)
    a = live[r]
    V = (1.0 - delta) * G[a] + delta * w
    L, n = D.shape
    values = np.full(L, -np.inf)
    profiles = np.full(L, -1, dtype=np.int64)
    conts = np.full((L, n), np.nan)
    if L == 0 or V.shape[0] == 0:
        return values, profiles, conts, V, a, w
    # a linear function is largest at a vertex of the hull: search those only
    top = _extreme(V)
    T = D @ V[top].T  # (L, k), rows contiguous for the search
    k = top[np.argmax(T, axis=1)]
    values[:] = T[np.arange(L), np.argmax(T, axis=1)]
    profiles[:] = a[k]
    conts[:] = w[k]
    return values, profiles, conts, V, a, w
