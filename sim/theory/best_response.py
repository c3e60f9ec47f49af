"""Best responses: a firm's profit-maximising action against given rival actions.

The demand system gives the best response where it has a closed form or a method of its own
(:meth:`~sim.models.demand_spec.DemandSpec.best_response`); otherwise a product's best response is
found by the generic search of :func:`maximize_scalar` over its action interval
(:meth:`~sim.models.market.MarketSpec.action_bounds`), then pinned by the first-order condition built
from the slope of the model's demand (:meth:`~sim.models.demand_spec.DemandSpec.own_slope`). A firm
selling several products sets them jointly with the model's method, and a model without one is
refused by name.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from sim.models.market import MarketSpec
from sim.theory.outcome import as_spec

__all__ = ["best_response", "maximize_scalar"]


def maximize_scalar(f, lo: float, hi: float, n_grid: int = 65, xtol: float = 1e-13) -> tuple[float, float]:
    """Global maximum of a scalar function on ``[lo, hi]``: a grid, then Brent's bounded search
    between the neighbours of the best grid point.

    Parameters
    ----------
    f : callable
        Takes an array of points and returns an array of values of the same shape.
    lo, hi : float
        The interval.
    n_grid : int
        Points of the grid.
    xtol : float
        Tolerance of Brent's search, relative to ``max(1, |hi|)``.

    Returns
    -------
    x, value : float
        The maximiser found and the value there.
    """
    if hi <= lo:
        return lo, float(f(np.array([lo]))[0])
    x = np.linspace(lo, hi, n_grid)
    y = f(x)
    k = int(np.argmax(y))
    a, b = x[max(k - 1, 0)], x[min(k + 1, n_grid - 1)]
    res = optimize.minimize_scalar(
        lambda t: -f(np.array([t]))[0], bounds=(a, b), method="bounded",
        options={"xatol": xtol * max(1.0, abs(hi)), "maxiter": 500},
    )
    if -res.fun >= y[k]:
        return float(res.x), float(-res.fun)
    return float(x[k]), float(y[k])


def best_response(market, i: int, actions) -> tuple[np.ndarray, np.ndarray]:
    """Firm ``i``'s best response to its rivals' actions in each profile.

    Parameters
    ----------
    market : Market or MarketSpec
    i : int
        Index (0-based) of the responding firm.
    actions : array_like of shape (..., n_products)
        Profiles; the entries of firm ``i``'s products are ignored.

    Returns
    -------
    profiles : ndarray of shape (..., n_products)
        The profiles with firm ``i``'s products set to its best response.
    profits : ndarray of shape (...,)
        Firm ``i``'s profit. For homogeneous Bertrand with continuous prices this is the supremum
        reached by undercutting by an arbitrarily small amount (see :mod:`sim.models.market`).
    """
    ms = as_spec(market)
    a = np.array(actions, dtype=float)
    shape = a.shape[:-1]
    A = a.reshape(-1, ms.n_products)
    own = ms.products_of(i)
    out = A.copy()
    if own.size == 1:
        x, v = _br_single(ms, int(own[0]), A)
        out[:, own[0]] = x
    else:
        v = np.empty(A.shape[0])
        for r, row in enumerate(A):
            out[r], v[r] = _br_multi(ms, i, own, row)
    return out.reshape(a.shape), v.reshape(shape)


def _br_single(ms: MarketSpec, i: int, A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Best response of single product ``i`` (its owner sells nothing else) in each row of ``A``."""
    found = ms.demand.best_response(ms, i, A)
    if found is not None:
        return found
    if ms.homogeneous_bertrand:
        # profits jump where prices tie: a grid search would miss the undercutting supremum
        raise ms.demand.missing("homogeneous-good price competition", "the best response (its undercutting rule)")
    return _searched_response(ms, i, A)


def _searched_response(ms: MarketSpec, i: int, A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The generic best response: :func:`maximize_scalar` over product ``i``'s action interval finds the
    global maximum's neighbourhood; the first-order condition, from the model's
    :meth:`~sim.models.demand_spec.DemandSpec.own_slope`, pins it to machine precision (corners where
    the marginal profit keeps its sign)."""
    if not ms.demand.provides("own_slope"):
        raise ms.demand.missing("the equilibrium solver", "a best response, or the slope of demand in a product's "
                                "own action")
    _, hi = ms.action_bounds()
    lo_i, hi_i, n_grid = 0.0, float(hi[i]), 257
    x = np.empty(A.shape[0])
    v = np.empty(A.shape[0])
    for r, row in enumerate(A):
        def profiles(t, row=row):
            prof = np.repeat(row[None, :], np.size(t), axis=0)
            prof[:, i] = t
            return prof

        def f(t):
            return ms.profits(profiles(t))[:, i]

        def marginal(t):
            P = profiles(np.atleast_1d(t))
            q, p, _ = ms.evaluate(P)
            s = ms.demand.own_slope(ms, P, q, p)[:, i]
            if ms.quantity_setting:
                return float((p[:, i] + q[:, i] * s - ms.cost[i])[0])
            return float((q[:, i] + (p[:, i] - ms.cost[i]) * s)[0])

        x0, v0 = maximize_scalar(f, lo_i, hi_i, n_grid=n_grid)
        x[r], v[r] = _first_order_point(f, marginal, x0, v0, lo_i, hi_i, (hi_i - lo_i) / (n_grid - 1))
    return x, v


def _first_order_point(f, marginal, x0: float, v0: float, lo: float, hi: float, step: float) -> tuple[float, float]:
    """Where the marginal profit vanishes next to the searched maximiser ``x0`` (or the corner it points
    to); ``x0`` itself when no sign change brackets it or the root earns less."""
    if hi <= lo:
        return x0, v0
    if x0 >= hi - step and marginal(hi) >= 0:
        cand = hi
    elif x0 <= lo + step and marginal(lo) <= 0:
        cand = lo
    else:
        a, b = max(lo, x0 - step), min(hi, x0 + step)
        if not (marginal(a) > 0 > marginal(b)):
            return x0, v0
        cand = float(optimize.brentq(marginal, a, b, xtol=1e-15 * max(1.0, abs(x0)), rtol=1e-15, maxiter=500))
    val = float(f(np.array([cand]))[0])
    return (cand, val) if val >= v0 - 1e-12 * max(1.0, abs(v0)) else (x0, v0)


def _br_multi(ms: MarketSpec, i: int, own: np.ndarray, row: np.ndarray) -> tuple[np.ndarray, float]:
    """Best response of multi-product firm ``i`` (products ``own``) setting its actions jointly."""
    prof = ms.demand.best_response_multi(ms, i, own, row)
    return prof, float(ms.firm_profits(prof[None, :])[0, i])
