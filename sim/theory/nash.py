"""The static (one-shot) Nash equilibrium of the stage game.

The demand system supplies what it knows: an exact equilibrium (homogeneous Bertrand), or a
closed-form candidate (:meth:`~sim.models.demand_spec.DemandSpec.nash_start`). Every candidate that is
not exact by construction is certified: a Gauss-Seidel best-response iteration runs from it until no
action moves, and no firm's global best response may improve its profit by more than a relative
``1e-9`` (:func:`certify`); otherwise :class:`~sim.core.errors.SolverError` is raised.
"""

from __future__ import annotations

import numpy as np

from sim.core.errors import SolverError
from sim.models.market import MarketSpec
from sim.theory.best_response import best_response, maximize_scalar
from sim.theory.outcome import Outcome, as_spec, outcome_of

__all__ = ["certify", "static_nash"]


def static_nash(market, tol: float = 1e-13, max_iter: int = 20_000) -> Outcome:
    """The static (one-shot) Nash equilibrium of the stage game.

    Closed forms are used where the demand system has them (homogeneous Bertrand, linear and
    differentiated Cournot without binding capacities, differentiated Bertrand with every firm active,
    isoelastic Cournot without capacities). Otherwise (and to certify the closed forms' assumptions),
    a Gauss-Seidel best-response iteration runs from the closed-form or a neutral start until no action
    moves by more than ``tol`` (relative); a damped iteration is tried if it does not settle. The result
    is certified by checking that no firm's global best response improves its profit by more than a
    relative ``1e-9``; otherwise :class:`~sim.core.errors.SolverError` is raised.

    Parameters
    ----------
    market : Market or MarketSpec
    tol : float
        Relative change of the actions below which the iteration has settled.
    max_iter : int
        Largest number of sweeps over the firms.

    Returns
    -------
    Outcome
    """
    ms = as_spec(market)
    if "nash" in ms._cache:
        return ms._cache["nash"]
    exact = ms.demand.nash_equilibrium(ms)
    if exact is not None:
        out = outcome_of(ms, exact)
        ms._cache["nash"] = out
        return out
    start = ms.demand.nash_start(ms)
    if start is None:
        start = _neutral_start(ms)
    if _is_fixed_point(ms, start):
        try:
            certify(ms, start, "static Nash")
        except SolverError:
            pass
        else:
            out = outcome_of(ms, start)
            ms._cache["nash"] = out
            return out
    a = _gauss_seidel(ms, start, tol, max_iter, damping=1.0)
    if a is None:
        a = _gauss_seidel(ms, start, tol, max_iter, damping=0.5)
    if a is None:
        raise SolverError(
            f"static Nash: best-response iteration did not settle within {max_iter} sweeps "
            f"(market {ms.demand.kind} {ms.model}, {ms.n_firms} firms)"
        )
    certify(ms, a, "static Nash")
    out = outcome_of(ms, a)
    ms._cache["nash"] = out
    return out


def _neutral_start(ms: MarketSpec) -> np.ndarray:
    """Start of the iteration for a model without a closed-form candidate: each firm at a Cournot-like
    share of its quantity range, or halfway between its cost and its highest price."""
    _, hi = ms.action_bounds()
    if ms.quantity_setting:
        return hi / (ms.n_products + 1)
    return ms.cost + 0.5 * (hi - ms.cost)


def _is_fixed_point(ms: MarketSpec, a: np.ndarray, rtol: float = 1e-10) -> bool:
    scale = max(1.0, float(np.abs(a).max()))
    for i in range(ms.n_firms):
        prof, _ = best_response(ms, i, a[None, :])
        if np.abs(prof[0] - a).max() > rtol * scale:
            return False
    return True


def _gauss_seidel(ms, start, tol, max_iter, damping):
    a = np.array(start, dtype=float)
    scale = max(1.0, float(np.abs(a).max()))
    for _ in range(max_iter):
        biggest = 0.0
        for i in range(ms.n_firms):
            prof, _ = best_response(ms, i, a[None, :])
            new = (1 - damping) * a + damping * prof[0]
            biggest = max(biggest, float(np.abs(new - a).max()))
            a = new
        if biggest <= tol * scale:
            return a
    return None


def certify(ms: MarketSpec, a: np.ndarray, what: str, rtol: float = 1e-9) -> None:
    """Raise SolverError unless no firm can gain more than ``rtol`` (relative) by deviating.

    Each firm's best response is compared with, and each of its products is also searched on a fine
    grid (which guards against a closed form used outside its domain).

    Parameters
    ----------
    ms : MarketSpec
    a : ndarray of shape (n_products,)
        The candidate equilibrium.
    what : str
        Name of the solution in the error message.
    rtol : float
        Largest gain, relative to the largest absolute profit, that still counts as no gain.
    """
    pi = ms.firm_profits(a[None, :])[0]
    _, hi = ms.action_bounds()
    scale = max(1e-12, float(np.abs(pi).max()))
    for i in range(ms.n_firms):
        _, v = best_response(ms, i, a[None, :])
        best = float(v[0])
        for k in ms.products_of(i):
            def f(t, i=i, k=k):
                prof = np.repeat(a[None, :], t.size, axis=0)
                prof[:, k] = t
                return ms.firm_profits(prof)[:, i]
            best = max(best, maximize_scalar(f, 0.0, hi[k], n_grid=257)[1])
        if best - pi[i] > rtol * scale:
            raise SolverError(
                f"{what}: firm {i + 1} can gain {best - pi[i]:.3g} by deviating; the solution is not certified"
            )
