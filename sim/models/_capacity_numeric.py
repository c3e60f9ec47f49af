"""Numeric mixed equilibrium of capacity-constrained price competition on a price grid.

The game restricted to a grid of prices is a finite game. Its equilibrium is found by following the
logit quantal-response path (McKelvey and Palfrey, 1995, "Quantal response equilibria for normal form
games", Games and Economic Behavior 10(1)) from uniform play at precision 0 to high precision: at each
precision ``lam`` the log-probabilities ``x`` solve ``x_i(g) = lam u_i(g) - log sum_h exp(lam u_i(h))``
with ``u_i(g)`` firm i's expected payoff at grid price g (payoffs scaled by the largest one). Newton's
method with the exact Jacobian follows the path with adaptive steps (the path-following approach of
Turocy, 2005, "A dynamic homotopy interpretation of the logistic quantal response equilibrium
correspondence", Games and Economic Behavior 51(2)). As the precision grows the quantal-response
equilibria approach a Nash equilibrium of the grid game.

With efficient rationing a firm's sales at price g depend on its rivals only through which of them
are below, at, or above g (the capacity below g is what matters, see ``_capacity_core``), so the
expected payoff sums over the ``3^(n-1)`` rival configurations, each weighted by a product of
probabilities; the derivative with respect to rival j's probability at price h is the same sum with
j's state fixed. With proportional rationing (linear demand) sales depend on the exact rival prices:
two firms only (a bimatrix).
"""

from __future__ import annotations

import itertools

import numpy as np

from sim.core.errors import InputError, SolverError
from sim.models._capacity_core import CapacitySpec, sales
from sim.models._capacity_mixed import MAX_NUMERIC_FIRMS, StaticEquilibrium, certificate
from sim.models._linsolve import lu_factor, lu_solve

__all__ = ["numeric_equilibrium", "price_bounds", "solve_grid_game"]

_LAMBDA_MAX = 1.0e4


def _config_tables(spec: CapacitySpec, grid: np.ndarray) -> list[np.ndarray]:
    """Per firm i, its profit at each grid price for each rival configuration, shape
    ``(3,) * (n-1) + (G,)`` (state 0: rival below, 1: tied, 2: above)."""
    n = spec.n_firms
    cap = spec.capacity
    D = spec.quantity(grid)
    tables = []
    for i in range(n):
        rivals = [j for j in range(n) if j != i]
        arr = np.zeros((3,) * (n - 1) + (grid.size,))
        for cfg in itertools.product((0, 1, 2), repeat=n - 1):
            S = sum(cap[j] for j, s in zip(rivals, cfg) if s == 0)
            T = cap[i] + sum(cap[j] for j, s in zip(rivals, cfg) if s == 1)
            arr[cfg] = (grid - spec.cost) * np.minimum(T, np.maximum(0.0, D - S)) * cap[i] / T
        tables.append(arr)
    return tables


class _ConfigGame:
    """Payoffs and their derivatives for efficient rationing (any number of firms)."""

    def __init__(self, spec, grid):
        self.n, self.G = spec.n_firms, grid.size
        self.tables = _config_tables(spec, grid)
        self.scale = max(float(t.max()) for t in self.tables)
        self.tables = [t / self.scale for t in self.tables]
        g = np.arange(self.G)
        self.state = np.where(g[None, :] < g[:, None], 0, np.where(g[None, :] == g[:, None], 1, 2))  # [g, h]

    def evaluate(self, sig):
        """Payoffs on the grid and their derivatives.

        The rival probabilities are contracted one rival at a time (prefix and suffix products), so
        the cost grows like ``n * 3**(n-1) * G``; plain numpy reductions keep it off threaded BLAS.

        Parameters
        ----------
        sig : ndarray of shape (n, G)
            Probabilities (not necessarily normalised during Newton steps).

        Returns
        -------
        u : ndarray of shape (n, G)
            Each firm's expected payoff at each grid price (scaled).
        dU : ndarray of shape (n, G, n, G)
            ``dU[i, g, j, h] = d u_i(g) / d sig_j(h)``.
        """
        n, G = self.n, self.G
        cs = np.cumsum(sig, axis=1)
        probs = np.stack([cs - sig, sig, cs[:, -1:] - cs], axis=1)  # (n, 3, G)
        u = np.zeros((n, G))
        dU = np.zeros((n, G, n, G))
        cols = np.arange(G)[:, None]
        for i in range(n):
            rivals = [j for j in range(n) if j != i]
            m = n - 1
            left = self.tables[i]  # rivals 0..k-1 contracted: shape (3,)*(m-k) + (G,)
            for k, j in enumerate(rivals):
                right = left  # keep rival k's axis (0), contract the later rivals (always axis 1)
                for l_ in range(k + 1, m):
                    pl = probs[rivals[l_]].reshape((1, 3) + (1,) * (m - l_ - 1) + (G,))
                    right = (right * pl).sum(axis=1)
                dU[i, :, j, :] = right[self.state, cols]
                pk = probs[j].reshape((3,) + (1,) * (m - k - 1) + (G,))
                left = (left * pk).sum(axis=0)
            u[i] = left
        return u, dU


class _MatrixGame:
    """Payoffs of a two-firm grid game given by full payoff matrices (any rationing)."""

    def __init__(self, spec, grid):
        self.n, self.G = 2, grid.size
        prof = np.stack(np.meshgrid(grid, grid, indexing="ij"), axis=-1)  # [g0, g1, 2]
        pi = (prof - spec.cost) * sales(spec, prof)
        self.A = [pi[:, :, 0], pi[:, :, 1].T]  # A[i][g_i, g_j]
        self.scale = max(float(self.A[0].max()), float(self.A[1].max()))
        self.A = [a / self.scale for a in self.A]

    def evaluate(self, sig):
        """Payoffs ``u`` of shape (2, G) and derivatives ``dU`` of shape (2, G, 2, G) (see
        :meth:`_ConfigGame.evaluate`).

        Parameters
        ----------
        sig : ndarray of shape (2, G)

        Returns
        -------
        u, dU : ndarray
        """
        G = self.G
        u = np.stack([(self.A[0] * sig[1][None, :]).sum(axis=1), (self.A[1] * sig[0][None, :]).sum(axis=1)])
        dU = np.zeros((2, G, 2, G))
        dU[0, :, 1, :] = self.A[0]
        dU[1, :, 0, :] = self.A[1]
        return u, dU


def _residual(game, xt, target):
    """The path equations at log-probabilities ``xt``, with what the Newton matrix needs."""
    with np.errstate(over="ignore", invalid="ignore"):
        sig = np.exp(xt)
        u, dU = game.evaluate(sig)
        z = target * u
        top = z.max(axis=1, keepdims=True)
        br = np.exp(z - top)
        Z = br.sum(axis=1, keepdims=True)
        br /= Z
        f = xt - z + top + np.log(Z)
    return f, sig, u, br, dU


def _jacobian(target, sig, br, dU):
    """``df/dx`` of the path equations at precision ``target``, shape (n G, n G)."""
    n, G = sig.shape
    Ju = dU * sig[None, None, :, :]
    avg = (br[:, :, None, None] * Ju).sum(axis=1)
    J = (-target * (Ju - avg[:, None, :, :])).reshape(n * G, n * G)
    J[np.diag_indices(n * G)] += 1.0
    return J


class _Bordered:
    """The Newton matrix of the continuation, ``[[J, f_lam], [a, b]]``, factorised on the prices in
    use. Columns of prices a firm (almost) never charges carry a factor of their probability and are
    unit vectors to rounding: the system is solved on the prices in use, and the others follow from
    their own rows."""

    def __init__(self, J, f_lam, a, b, act):
        self.J, self.f_lam, self.act = J, f_lam, act
        ia = np.flatnonzero(act)
        m = ia.size
        M = np.empty((m + 1, m + 1))
        M[:m, :m] = J[np.ix_(ia, ia)]
        M[:m, m] = f_lam[ia]
        M[m, :m] = a[ia]
        M[m, m] = b
        self.ia, self.ii = ia, np.flatnonzero(~act)
        self.piv, self.singular = lu_factor(M)
        self.M = M

    def solve(self, r, r_last):
        """Solve the bordered system.

        Parameters
        ----------
        r : ndarray of shape (n G,)
            Right-hand side of the path equations.
        r_last : float
            Right-hand side of the last (arc-length) row.

        Returns
        -------
        dx : ndarray of shape (n G,)
        dlam : float
        """
        m = self.ia.size
        rhs = np.empty(m + 1)
        rhs[:m] = r[self.ia]
        rhs[m] = r_last
        s = lu_solve(self.M, self.piv, rhs)
        dx = np.empty(r.size)
        dx[self.ia] = s[:m]
        if self.ii.size:
            self._rest(dx, r, s, m)
        return dx, float(s[m])

    def _rest(self, dx, r, s, m):
        with np.errstate(over="ignore", invalid="ignore"):
            dx[self.ii] = r[self.ii] - (self.J[np.ix_(self.ii, self.ia)] * s[:m][None, :]).sum(axis=1) \
                - self.f_lam[self.ii] * s[m]


def _weights(sig, lam, active_tol):
    """Arc-length weights: prices in use count, the others (whose log-probabilities fall linearly in
    the precision without consequence) do not; the precision counts relative to its size."""
    act = (sig > active_tol).ravel()
    return act.astype(float), act, 1.0 / max(1.0, lam)


def solve_grid_game(game, lam_max: float = _LAMBDA_MAX, max_steps: int = 5_000, tol: float = 1e-10,
                    active_tol: float = 1e-13, stats: dict | None = None) -> np.ndarray:
    """Follow the logit quantal-response path of a grid game to precision ``lam_max``.

    Pseudo-arclength continuation in the log-probabilities and the precision (Keller, 1977; the
    path can turn back in the precision, which a continuation in the precision alone cannot pass):
    predict along the tangent, correct with Newton's method on the path equations plus the
    arc-length condition, adapt the step to the number of Newton iterations. Past ``lam_max`` the
    point on the path at ``lam_max`` itself is found by Newton's method at fixed precision.

    Parameters
    ----------
    game : object with ``n``, ``G`` and ``evaluate(sig) -> (u, dU)``
    lam_max : float
        Final precision (payoffs are scaled so that the largest is 1).
    max_steps : int
    tol : float
        Newton stops when no equation is off by more than this (a thousand times more before the end).
    active_tol : float
        Probabilities below it count as prices not in use (see :class:`_Bordered`).
    stats : dict, optional
        Filled with the numbers of accepted steps, rejected steps and Newton iterations.

    Returns
    -------
    sigma : ndarray of shape (n_firms, G)
    """
    n, G = game.n, game.G
    N = n * G
    x, lam = np.full(N, -np.log(G)), 0.0
    t_x, t_lam = np.zeros(N), 1.0  # at precision 0 the path leaves uniform play upward in lam
    h = 1.0
    count = {"steps": 0, "rejected": 0, "newton": 0}
    for _ in range(max_steps):
        w, act, w_lam = _weights(np.exp(x), lam, active_tol)
        xt, lt = x + h * t_x, lam + h * t_lam
        ok, it = False, 0
        for it in range(10):  # noqa: B007 - the count sets the next step
            f, sig, u, br, dU = _residual(game, xt.reshape(n, G), lt)
            arc = float((w * t_x) @ (xt - x)) + w_lam * t_lam * (lt - lam) - h * (float((w * t_x) @ t_x)
                                                                               + w_lam * t_lam * t_lam)
            if not (np.all(np.isfinite(f)) and np.isfinite(arc)):
                break
            count["newton"] += 1
            f_lam = -(u - (br * u).sum(axis=1, keepdims=True)).ravel()
            B = _Bordered(_jacobian(lt, sig, br, dU), f_lam, w * t_x, w_lam * t_lam, act)
            if B.singular:
                break
            if max(float(np.abs(f).max()), abs(arc)) < 1e3 * tol:
                ok = True
                break
            dx, dl = B.solve(-f.ravel(), -arc)
            xt, lt = xt + dx, lt + dl
        if not ok:
            count["rejected"] += 1
            h *= 0.3
            if h < 1e-12:
                break
            continue
        # new tangent: [J f_lam; old tangent] t = [0; 1], oriented along the old one
        tx, tl = B.solve(np.zeros(N), 1.0)
        norm = np.sqrt(float((w * tx) @ tx) + w_lam * tl * tl)
        tx, tl = tx / norm, tl / norm
        if lt >= lam_max:
            return _finish(game, x, lam, xt, lt, lam_max, tol, count, stats)
        x, lam, t_x, t_lam = xt, lt, tx, tl
        count["steps"] += 1
        h *= 2.0 if it <= 3 else (1.3 if it <= 5 else 0.7)
    raise SolverError(f"mixed equilibrium: the quantal-response path stalled at precision {lam:.3g}")


def _finish(game, x0, lam0, x1, lam1, lam_max, tol, count, stats):
    """Newton's method at precision ``lam_max`` from the interpolated path point."""
    n, G = game.n, game.G
    s = (lam_max - lam0) / (lam1 - lam0) if lam1 != lam0 else 1.0
    xt = (x0 + s * (x1 - x0)).reshape(n, G)
    for _ in range(30):
        f, sig, _, br, dU = _residual(game, xt, lam_max)
        count["newton"] += 1
        if float(np.abs(f).max()) < tol:
            if stats is not None:
                stats.update(count)
            return sig / sig.sum(axis=1, keepdims=True)
        act = (sig > 1e-13).ravel()
        B = _Bordered(_jacobian(lam_max, sig, br, dU), np.zeros(n * G), np.zeros(n * G), 1.0, act)
        dx, _ = B.solve(-f.ravel(), 0.0)
        xt = xt + dx.reshape(n, G)
    raise SolverError(f"mixed equilibrium: Newton's method at precision {lam_max:.3g} did not settle")


def _game(spec, grid):
    if spec.rationing == "efficient" or not spec.linear:
        return _ConfigGame(spec, grid)
    if spec.n_firms != 2:
        raise InputError("market.rationing", "with proportional rationing and linear demand the mixed "
                                             "equilibrium is computed for two firms only")
    return _MatrixGame(spec, grid)


def price_bounds(spec: CapacitySpec) -> tuple[float, float]:
    """Prices outside which no firm prices in equilibrium.

    Whatever its rivals do, firm i can earn ``s_i``, its residual-monopoly profit behind rivals that
    sell their whole capacity first (with proportional rationing, rivals priced just below it take as
    much), so it never charges a price at which even its whole capacity earns less,
    ``b_i = c + s_i / k_i``. With efficient rationing no firm prices below ``max_i b_i`` either: the
    firm F with the highest bound never does, and below ``b_F`` the quantity demanded exceeds the
    capacity of F's rivals (F's residual demand is positive up to its residual-monopoly price), so a
    firm priced there sells its whole capacity whatever the others do and gains by raising its price
    towards ``b_F``. With proportional rationing the bound is ``min_i b_i``. Above: with efficient
    rationing, the highest residual-monopoly price (the largest firm's is the top of the support);
    with proportional rationing, a firm's profit ``(p - c) min(k_i, phi D(p))`` falls in p beyond
    ``max((v + c) / 2, P(k_i))`` whatever share ``phi`` of consumers its cheaper rivals left. The
    certificate checks deviations on the whole of ``[c, v]``, outside these bounds too.

    Parameters
    ----------
    spec : CapacitySpec

    Returns
    -------
    low, high : float
    """
    c = spec.cost
    lows, highs = [], []
    efficient = spec.rationing == "efficient" or not spec.linear
    for i in range(spec.n_firms):
        k = float(spec.capacity[i])
        p, s = spec.best_against_residual(k, 1.0, spec.total_capacity - k)
        lows.append(c + s / k)
        highs.append(p if efficient else max(spec.monopoly_price, spec.clearing_price(k)))
    lo = max(lows) if efficient else min(lows)
    hi = min(spec.reservation_price, max(highs))
    return lo, max(hi, lo + 1e-9 * max(1.0, spec.reservation_price))


def numeric_equilibrium(spec: CapacitySpec, n_grid: int = 81, mass_tol: float = 1e-6) -> StaticEquilibrium:
    """Mixed equilibrium on a grid of ``n_grid`` prices between :func:`price_bounds`, certified by
    :func:`~sim.models._capacity_mixed.certificate`.

    Parameters
    ----------
    spec : CapacitySpec
    n_grid : int
        Grid prices.
    mass_tol : float
        Probabilities below it do not count towards a firm's support.

    Returns
    -------
    StaticEquilibrium
        ``method = "numeric"``; ``prices`` is the grid, ``cdf`` the cumulative probabilities.
    """
    if spec.n_firms > MAX_NUMERIC_FIRMS:
        raise InputError("market.capacity", f"the numeric mixed equilibrium handles up to {MAX_NUMERIC_FIRMS} "
                                            f"firms, the market has {spec.n_firms}")
    lo, hi = price_bounds(spec)
    grid = np.linspace(lo, hi, n_grid)
    game = _game(spec, grid)
    sig = solve_grid_game(game)
    u, _ = game.evaluate(sig)
    payoffs = (u * sig).sum(axis=1) * game.scale
    gain = certificate(spec, grid, sig, payoffs)
    live = sig > mass_tol
    low = np.array([grid[np.flatnonzero(r)[0]] for r in live])
    high = np.array([grid[np.flatnonzero(r)[-1]] for r in live])
    atoms = np.array([sig[i, np.flatnonzero(live[i])[-1]] for i in range(spec.n_firms)])
    cdf = np.minimum(1.0, np.cumsum(sig, axis=1))
    notes = (f"grid of {n_grid} prices on [{lo:.6g}, {hi:.6g}]; the atom of a firm is the probability of the "
             "highest grid price in its support (a discretised continuous distribution puts mass there too)",)
    return StaticEquilibrium("mixed", "numeric", payoffs, low, high, atoms, grid, cdf, gain, notes)
