"""The set of subgame-perfect equilibrium payoffs of the repeated stage game, bracketed.

Setting: a finite stage game (:class:`~sim.theory.discretize.DiscreteGame`) repeated forever, common
discount factor ``delta``, pure strategies, perfect monitoring of actions and a public randomisation
device (so the set ``V`` is convex). ``V`` is the largest bounded fixed point of the operator of
Abreu, Pearce and Stacchetti (1990, "Toward a theory of discounted repeated games with imperfect
monitoring", Econometrica 58(5)),

    B(W) = co U_a { (1 - delta) g(a) + delta w :  w in W,  w >= IC(a) },
    IC(a) = u(W) + (1 - delta) / delta * (g*(a) - g(a)),   u_i(W) = min over W of w_i,

with ``g*(a)`` each firm's best-reply payoff against the others' actions in ``a``: a profile is
played today with a promised continuation in ``W`` when no firm gains from a one-shot deviation
answered by its worst continuation in ``W``. Two facts of that paper carry every computation here:

* monotonicity: ``W`` containing ``V`` implies ``B(W)`` contains ``V``. Applying ``B`` to the
  feasible payoffs gives a decreasing sequence whose intersection is ``V`` (their Theorem 5 for
  finite action sets, perfect monitoring as a special case). Every iterate is an *outer* set.
* self-generation: a bounded set ``W`` inside ``B(W)`` lies inside ``V`` (their Theorem 1).
  Starting from a self-generating seed (the static Nash payoffs and the profiles sustainable under
  Nash reversion) and adding payoffs of ``B`` of the current set gives an increasing sequence of
  *inner* sets.

Every result therefore brackets ``V`` (inner inside ``V`` inside outer) and reports the Hausdorff
distance between the two as its accuracy: when it is small the set is known to that precision,
whatever the iteration counts were, and convergence is a measured fact rather than an assumption.

``method="exact"`` (default for two firms): every image ``B(W)`` is computed exactly, as the hull
of the payoffs generated from every vertex of every ``W n {w >= IC(a)}``
(:mod:`sim.theory._faces`). Abreu and Sannikov (2014, "An algorithm for two-player repeated games
with perfect monitoring", Theoretical Economics 9) use the same geometry for two players -- extreme
payoffs come from continuations on the binding incentive lines -- and show that ``V`` has at most
``3|A|`` extreme points. For two firms the outer sequence converges to ``V`` and in practice the
inner one meets it to the tolerance (the reported accuracy says so in each case).

``method="directions"`` (default for three firms or more): the outer approximation of Judd,
Yeltekin and Conklin (2003, "Computing supergame equilibria", Econometrica 71(4)) keeps only the
support values of ``B(W)`` in fixed directions; the inner approximation adds the generated payoffs
that maximise each direction. Each firm's worst payoff and the joint profit are support values
(their directions are always included), so they are bracketed tightly even when the polytope's
corners, cut by few directions, keep the Hausdorff accuracy coarse.

A model result is evidence under the stated assumptions (the grid, the demand system, perfect
monitoring, pure strategies, public randomisation), not proof of conduct.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import InputError
from ..core.params import Integer, Real
from . import _faces as fc
from . import _iterate as it
from . import _polygon as pg
from . import _polytope as pt
from ._plain import array_from_plain as _arr
from ._plain import plain as _plain
from .discretize import DEFAULT_MAX_BYTES, DiscreteGame

__all__ = [
    "METHODS", "STATUSES", "PayoffSet", "continuation_support", "default_directions", "equilibrium_payoffs",
    "estimate_work", "hausdorff_distance",
]

METHODS = ("auto", "exact", "directions")
#: ``beyond static nash``: the inner set holds a payoff outside the static Nash payoffs' hull;
#: ``static nash only``: the outer set lies within the tolerance of that hull; ``no pure
#: equilibrium``: the outer set is empty; ``undetermined``: the bracket is too wide to say.
STATUSES = ("beyond static nash", "static nash only", "no pure equilibrium", "undetermined")
_KEY = "payoff_set"
_INNER_FACTOR = 4
# punishments of the first inner sequence: the outer set's worst payoffs raised by these multiples of
# the absolute tolerance (see _inner)
_SLACKS = (10.0, 1e3, 1e5)
# most resumptions of an outer sequence whose bracket is still wide
_ROUNDS = 3


@dataclass(frozen=True, eq=False)
class PayoffSet:
    """The equilibrium payoff set at one discount factor, between an inner and an outer set.

    Attributes
    ----------
    delta : float
    n_firms : int
    method : {"exact", "directions"}
    status : str
        One of :data:`STATUSES`.
    outer_vertices : ndarray of shape (k_outer, n_firms)
        Vertices of the outer set (every equilibrium payoff lies in their convex hull). With
        directions and a flat outer set, the corners of its bounding box.
    inner_vertices : ndarray of shape (k_inner, n_firms)
        Equilibrium payoffs whose convex hull is the inner set.
    inner_profiles : ndarray of int, shape (k_inner, n_firms)
        Grid indices of the profile played first in the equilibrium behind each inner vertex.
    inner_continuations : ndarray of shape (k_inner, n_firms)
        The continuation payoff promised after it (a point of the inner set).
    directions : ndarray of shape (L, n_firms)
        Directions of the outer approximation (empty with ``method="exact"``).
    outer_levels : ndarray of shape (L,)
        Outer set ``{w : directions @ w <= outer_levels}`` (empty with ``method="exact"``).
    nash_payoffs : ndarray of shape (k_nash, n_firms)
        Payoffs of the pure static Nash equilibria of the grid game.
    minmax : ndarray of shape (n_firms,)
        Pure-action minmax payoffs on the grid.
    accuracy : float
        Hausdorff distance between the inner and the outer set (``inf`` when only the inner set is
        empty, 0 when both are).
    tol : float
        Absolute tolerance that stopped the iterations.
    outer_iterations, inner_iterations : int
    outer_converged, inner_converged : bool
        Whether each sequence met its stopping rule before ``max_iter``.
    inner_certificate : {"self-generating", "fixed point to rounding", "none"}
        Why the inner set holds equilibrium payoffs only: it was built from a self-generating seed
        by the operator (exact up to a rounding allowance of ``1e-12`` of the payoff scale); or (exact
        method, games whose punishments sustain each other so that no smaller set reaches them) the
        outer sequence reached a set that its own image reproduces to ``1e-10`` of the payoff
        scale; or no inner set was found (``accuracy`` is then infinite).
    grid_shape : tuple of int
    """

    delta: float
    n_firms: int
    method: str
    status: str
    outer_vertices: np.ndarray
    inner_vertices: np.ndarray
    inner_profiles: np.ndarray
    inner_continuations: np.ndarray
    directions: np.ndarray
    outer_levels: np.ndarray
    nash_payoffs: np.ndarray
    minmax: np.ndarray
    accuracy: float
    tol: float
    outer_iterations: int
    inner_iterations: int
    outer_converged: bool
    inner_converged: bool
    inner_certificate: str = "self-generating"
    grid_shape: tuple = field(default_factory=tuple)

    @property
    def empty(self) -> bool:
        """True when the outer set is empty: no pure-strategy equilibrium at this discount factor."""
        return self.outer_vertices.shape[0] == 0

    @property
    def worst_outer(self) -> np.ndarray:
        """Lower bound of each firm's worst equilibrium payoff, shape (n_firms,)."""
        if self.empty:
            return np.full(self.n_firms, np.nan)
        return self.outer_vertices.min(axis=0)

    @property
    def worst_inner(self) -> np.ndarray:
        """Upper bound of each firm's worst equilibrium payoff (attained by an equilibrium of the
        inner set), shape (n_firms,); ``nan`` when the inner set is empty."""
        if self.inner_vertices.shape[0] == 0:
            return np.full(self.n_firms, np.nan)
        return self.inner_vertices.min(axis=0)

    def to_dict(self) -> dict:
        """Plain data (lists, floats, None for non-finite values) that :meth:`from_dict` restores.

        Returns
        -------
        dict
        """
        return {
            "delta": self.delta, "n_firms": self.n_firms, "method": self.method, "status": self.status,
            "outer_vertices": _plain(self.outer_vertices), "inner_vertices": _plain(self.inner_vertices),
            "inner_profiles": self.inner_profiles.tolist(),
            "inner_continuations": _plain(self.inner_continuations),
            "directions": _plain(self.directions), "outer_levels": _plain(self.outer_levels),
            "nash_payoffs": _plain(self.nash_payoffs), "minmax": _plain(self.minmax),
            "accuracy": self.accuracy if math.isfinite(self.accuracy) else None, "tol": self.tol,
            "outer_iterations": self.outer_iterations, "inner_iterations": self.inner_iterations,
            "outer_converged": self.outer_converged, "inner_converged": self.inner_converged,
            "inner_certificate": self.inner_certificate,
            "grid_shape": list(self.grid_shape),
        }

    @classmethod
    def from_dict(cls, data: dict) -> PayoffSet:
        """Rebuild from :meth:`to_dict` output.

        Parameters
        ----------
        data : dict

        Returns
        -------
        PayoffSet
        """
        n = int(data["n_firms"])
        acc = data["accuracy"]
        return cls(
            float(data["delta"]), n, data["method"], data["status"],
            _arr(data["outer_vertices"], width=n), _arr(data["inner_vertices"], width=n),
            _arr(data["inner_profiles"], dtype=np.int64, width=n), _arr(data["inner_continuations"], width=n),
            _arr(data["directions"], width=n), _arr(data["outer_levels"]),
            _arr(data["nash_payoffs"], width=n), _arr(data["minmax"]),
            float("inf") if acc is None else float(acc), float(data["tol"]),
            int(data["outer_iterations"]), int(data["inner_iterations"]),
            bool(data["outer_converged"]), bool(data["inner_converged"]), str(data["inner_certificate"]),
            tuple(int(k) for k in data.get("grid_shape", [])),
        )


# --------------------------------------------------------------------------------------------------
# Validation and cost
# --------------------------------------------------------------------------------------------------


def default_directions(n_firms: int) -> int:
    """Number of directions used when none is given: 32 for two firms, 64 for three, 24 per firm
    beyond.

    Parameters
    ----------
    n_firms : int

    Returns
    -------
    int
    """
    return {2: 32, 3: 64}.get(n_firms, 24 * n_firms)


def estimate_work(shape, n_firms: int, method: str, n_directions: int = 0) -> dict:
    """Memory and work of one iteration, estimated before any work.

    Parameters
    ----------
    shape : tuple of int
        Actions per firm.
    n_firms : int
    method : {"exact", "directions"}
    n_directions : int

    Returns
    -------
    dict
        ``bytes``: peak working memory beyond the game's own arrays (generated points and their
        records, about a hundred per profile, plus fixed-size batches); ``candidates``: the number
        of (profile, face) pairs examined per iteration, taking about twelve simplices per direction
        (or per vertex of a polygon).
    """
    A = math.prod(int(k) for k in shape)
    faces = 12 * max(n_directions, 16) * n_firms
    per_profile = 100 * n_firms * 8 * 4
    return {"bytes": int(A * per_profile + 64 * 4_000_000), "candidates": int(A * faces)}


def _check_directions(directions, n: int) -> np.ndarray:
    key = f"{_KEY}.directions"
    if directions is None:
        return pt.sphere_directions(n, default_directions(n))
    if np.ndim(directions) == 0:
        k = Integer(n + 1, 1_000_000).check(key, directions)
        return pt.sphere_directions(n, k)
    D = np.asarray(directions, dtype=float)
    if D.ndim != 2 or D.shape[1] != n or not np.all(np.isfinite(D)):
        raise InputError(key, f"must be a count or an array of shape (L, {n}) of finite numbers")
    if D.shape[0] < n + 1:
        raise InputError(key, f"needs at least n_firms + 1 = {n + 1} directions, got {D.shape[0]}")
    norm = np.linalg.norm(D, axis=1)
    if np.any(norm == 0):
        raise InputError(key, "directions must be non-zero")
    D = D / norm[:, None]
    low, high = pt.bounding_box(D, np.ones(D.shape[0]))
    if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high))):
        raise InputError(key, "the directions must surround the origin (every half-space sum bounded)")
    return D


def _validate(game, delta, method, tol, max_iter, directions, max_bytes):
    if not isinstance(game, DiscreteGame):
        raise InputError(f"{_KEY}.game",
                         f"must be a DiscreteGame (see sim.theory.discretize), got {type(game).__name__}")
    delta = Real(0, 1, closed="neither").check(f"{_KEY}.delta", delta)
    if method not in METHODS:
        raise InputError(f"{_KEY}.method", f"must be one of {', '.join(map(repr, METHODS))}, got {method!r}")
    n = game.n_firms
    if method == "auto":
        method = "exact" if n == 2 else "directions"
    tol = Real(0, 0.1, closed="right").check(f"{_KEY}.tol", tol)
    if max_iter is None:
        max_iter = 5000 if method == "exact" else 2000
    max_iter = Integer(1, 10_000_000).check(f"{_KEY}.max_iter", max_iter)
    D = _check_directions(directions, n) if method == "directions" else np.zeros((0, n))
    work = estimate_work(game.shape, n, method, D.shape[0])
    if work["bytes"] > max_bytes:
        raise InputError(
            f"{_KEY}.grid", f"{game.n_profiles} action profiles need about {work['bytes'] / 1e9:.3g} GB of "
            f"working memory (about {work['candidates']:.3g} candidate points per iteration), above the "
            f"allowed {max_bytes / 1e9:.3g} GB; use fewer actions per firm",
        )
    return delta, method, tol, max_iter, D


# --------------------------------------------------------------------------------------------------
# Public entry point
# --------------------------------------------------------------------------------------------------


def equilibrium_payoffs(game: DiscreteGame, delta: float, method: str = "auto", directions=None,
                        tol: float = 1e-8, max_iter: int | None = None,
                        max_bytes: float = DEFAULT_MAX_BYTES) -> PayoffSet:
    """The subgame-perfect equilibrium payoffs of the repeated game at ``delta``, bracketed.

    Parameters
    ----------
    game : DiscreteGame
        The stage game (see :func:`sim.theory.discretize.discretize`).
    delta : float in (0, 1)
        Common discount factor.
    method : {"auto", "exact", "directions"}
        ``exact``: every image of the operator computed exactly (the hull of all generated payoffs);
        the default for two firms, usable for three (slower: the sets keep hundreds of vertices).
        ``directions``: supporting hyperplanes in fixed directions (outer) and generated points
        (inner), after Judd, Yeltekin and Conklin (2003); the default for three firms or more.
    directions : int or array_like of shape (L, n_firms), optional
        Directions of ``method="directions"``: a count (at least ``n_firms + 1``; default
        :func:`default_directions`) or the directions themselves.
    tol : float in (0, 0.1]
        Tolerance relative to the largest absolute payoff: iterations stop when a step moves the
        set by less than ``tol * scale * (1 - delta)`` or when the bracket is narrower than
        ``tol * scale``.
    max_iter : int, optional
        Most iterations of each sequence (default 5000 for exact images, 2000 for directions).
    max_bytes : float
        Working memory allowed; larger problems are refused before any work.

    Returns
    -------
    PayoffSet

    Raises
    ------
    InputError
        ``payoff_set.delta`` outside (0, 1), ``payoff_set.directions`` below ``n_firms + 1``,
        ``payoff_set.grid`` too large for ``max_bytes``, and other invalid settings.
    """
    delta, method, tol, max_iter, D = _validate(game, delta, method, tol, max_iter, directions, max_bytes)
    G, gains, n = game.flat_payoffs, game.deviation_gains, game.n_firms
    scale = game.scale
    tol_abs = tol * scale
    nash_idx = np.array([game.flat_index(p) for p in game.pure_nash()], dtype=np.int64)
    if method == "exact":
        outer, levels, inner, certificate, acc, it_o, conv_o = _solve_exact(G, gains, delta, nash_idx, tol_abs,
                                                                           max_iter, scale)
    else:
        outer, levels, inner, certificate, acc, it_o, conv_o = _solve_directions(G, gains, delta, D, nash_idx,
                                                                               tol_abs, max_iter, scale)
    I, I_prof, I_cont, it_i, conv_i = inner
    nash = G[nash_idx]
    status = _status(outer, I, nash, tol_abs, n)
    profiles = np.array([game.profile(k) for k in I_prof], dtype=np.int64).reshape(-1, n)
    return PayoffSet(
        delta, n, method, status, outer, I, profiles, I_cont, D, levels, nash, game.minmax, float(acc),
        float(tol_abs), int(it_o), int(it_i), bool(conv_o), bool(conv_i), certificate, tuple(game.shape),
    )


def _solve_exact(G, gains, delta, nash_idx, tol_abs, max_iter, scale):
    """Exact outer and inner sequences. Near a discount factor where the set changes shape the outer
    sequence crawls, and a small step need not mean a small distance to the limit: while the bracket
    is wider than the tolerance, the outer sequence resumes with a stopping step a thousand times
    smaller (the bracket, not the step, is the reported accuracy)."""
    n = G.shape[1]
    stop, used, outer = tol_abs * (1.0 - delta), 0, None
    for _ in range(_ROUNDS):
        outer, k, conv_o = it.exact_outer(G, gains, delta, stop, max_iter - used, scale, start=outer)
        used += k
        if outer.shape[0] == 0:
            return outer, np.zeros(0), _NONE(n), "none", 0.0, used, True
        inner, certificate = _inner(G, gains, delta, outer, nash_idx, _grow_exact(G, gains, delta, outer, tol_abs,
                                                                                  max_iter, scale), tol_abs)
        acc = it.hausdorff(inner[0], outer)
        if acc <= 10 * tol_abs or used >= max_iter:
            break
        stop *= 1e-3
    if acc > 10 * tol_abs:
        found = it.fixed_point(G, gains, delta, outer, scale, max_iter)
        if found is not None:
            inner, certificate = (*found, inner[3], True), "fixed point to rounding"
            acc = it.hausdorff(inner[0], outer)
    return outer, np.zeros(0), inner, certificate, acc, used, conv_o


def _grow_exact(G, gains, delta, outer, tol_abs, max_iter, scale):
    def grow(start, punish):
        return it.exact_inner(G, gains, delta, start, outer, tol_abs, max_iter, scale, punish)
    return grow


def _solve_directions(G, gains, delta, D, nash_idx, tol_abs, max_iter, scale):
    """Supporting-hyperplane outer sequence and generated-point inner sequence. Unlike the exact
    method, the outer sequence is not resumed while the bracket is wide: with finitely many
    directions the gap is mostly the directions' own, which more outer steps do not close."""
    n = G.shape[1]
    inflate = max(0.5 * tol_abs, 1e-10 * scale)
    # the inner set is pushed out in more directions than the outer one is cut in: each is cheap, and
    # ties on flat faces resolve into more of its vertices
    D_in = pt.extend_directions(D, _INNER_FACTOR * D.shape[0])
    levels, used, conv_o = it.directions_outer(G, gains, delta, D, tol_abs, tol_abs * (1.0 - delta), max_iter,
                                               scale)
    if levels is None:
        return np.zeros((0, n)), np.full(D.shape[0], np.nan), _NONE(n), "none", 0.0, used, True
    outer = it.outer_corners(D, levels, scale, inflate)

    def grow(start, punish):
        return it.directions_inner(G, gains, delta, D_in, start, levels, tol_abs, max_iter, scale, punish)

    inner, certificate = _inner(G, gains, delta, outer, nash_idx, grow, tol_abs)
    return outer, levels, inner, certificate, it.hausdorff(inner[0], outer), used, conv_o


def _NONE(n):
    return np.zeros((0, n)), np.zeros(0, np.int64), np.zeros((0, n)), 0, True


def _inner(G, gains, delta, outer, nash_idx, grow, tol_abs):
    """A certified inner set, grown with the operator itself.

    Equilibria that need punishments harsher than Nash reversion cannot be reached from the static
    Nash payoffs: the operator applied to a small set only generates what that set can punish. So
    the first sequence answers deviations with fixed payoffs ``p`` just above the worst payoffs of
    the outer set (at most the worst static Nash payoffs); if the set it builds contains, for every
    firm, a payoff at or below ``p_i``, every point in it is generated by the set itself with its
    own worst payoffs as punishments -- it is self-generating and lies inside the equilibrium set.
    The operator itself then grows it. Slacks are tried from small to large; the last one is Nash
    reversion, whose set always qualifies when a pure static Nash equilibrium exists.
    """
    n = G.shape[1]
    worst_nash = G[nash_idx].min(axis=0) if nash_idx.size else np.full(n, np.inf)
    low = outer.min(axis=0)
    used = 0
    for slack in (*(f * tol_abs for f in _SLACKS), np.inf):
        punish = np.minimum(low + slack, worst_nash)
        if not np.all(np.isfinite(punish)):
            continue
        start = it.stationary(G, gains, punish, delta)
        if start[0].shape[0] == 0:
            continue
        pts, prof, cont, k, _ = grow(start, punish)
        used += k
        if pts.shape[0] and np.all(pts.min(axis=0) <= punish):
            pts, prof, cont, k, conv = grow((pts, prof, cont), None)
            return (pts, prof, cont, used + k, conv), "self-generating"
    return (np.zeros((0, n)), np.zeros(0, np.int64), np.zeros((0, n)), used, False), "none"


def _distance_to_set(points: np.ndarray, P: np.ndarray, n: int) -> np.ndarray:
    if P.shape[0] == 0:
        return np.full(points.shape[0], np.inf)
    if n == 2:
        return pg.distance_to_polygon(points, pg.hull(P))
    return np.array([pt.distance_to_hull(x, P) for x in points])


def _status(outer, inner, nash, tol_abs, n) -> str:
    if outer.shape[0] == 0:
        return "no pure equilibrium"
    # twice the tolerance: a flat outer set is reported through a polytope raised by half of it
    if nash.shape[0] and np.max(_distance_to_set(outer, nash, n)) <= 2 * tol_abs:
        return "static nash only"
    if inner.shape[0] and np.max(_distance_to_set(inner, nash, n)) > tol_abs:
        return "beyond static nash"
    return "undetermined"


def hausdorff_distance(A, B) -> float:
    """Hausdorff distance between the convex hulls of two point sets.

    Parameters
    ----------
    A, B : array_like of shape (k, n_firms)

    Returns
    -------
    float
        ``inf`` when exactly one set is empty; exact for two firms, otherwise an upper bound tight to
        the precision of a non-negative least-squares projection.
    """
    return it.hausdorff(np.asarray(A, dtype=float), np.asarray(B, dtype=float))


def continuation_support(game: DiscreteGame, delta: float, points, directions, profiles) -> np.ndarray:
    """The linear programmes of one step of the outer approximation, solved by enumeration.

    For each profile ``a`` and direction ``h``: ``max h . w`` over ``w`` in the hull of ``points``
    with ``w >= IC(a)``, the punishments being the hull's worst payoffs (see
    :mod:`sim.theory._faces` for the enumeration).

    Parameters
    ----------
    game : DiscreteGame
    delta : float in (0, 1)
    points : array_like of shape (J, n_firms)
        Continuation payoffs spanning the set.
    directions : array_like of shape (L, n_firms)
    profiles : array_like of int, shape (k,)
        Flat indices of the profiles.

    Returns
    -------
    ndarray of shape (k, L)
        ``-inf`` where no continuation satisfies the incentive constraints.
    """
    delta = Real(0, 1, closed="neither").check(f"{_KEY}.delta", delta)
    P = np.asarray(points, dtype=float)
    D = np.asarray(directions, dtype=float)
    prof = np.asarray(profiles, dtype=np.int64)
    geom = fc.geometry(P, game.scale)
    b = geom.points.min(axis=0)[None, :] + (1.0 - delta) / delta * game.deviation_gains[prof]
    rows, w = fc.candidates(geom, b, 1e-12 * game.scale)
    out = np.full((prof.size, D.shape[0]), -np.inf)
    np.maximum.at(out, rows, w @ D.T)
    return out
