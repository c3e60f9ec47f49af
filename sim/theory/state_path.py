"""The best state-contingent collusive path when full collusion is out of reach.

See :mod:`sim.theory.demand_states` for the model. :func:`best_state_path` finds, at a discount factor
``delta``, the largest weights ``w_s`` on each state's path from static Nash to the agreement that keep
every firm's grim-trigger constraint in every state, and reports the prices they imply and whether
those prices move with demand (pro-cyclical) or against it (counter-cyclical, the price wars during
booms of Rotemberg and Saloner, 1986).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..core.errors import SolverError
from ..core.params import Integer
from ..core.text import CAUTION
from .demand_states import DemandStates, _beta, _continuation, _long_run, _stages
from .stage_profits import average_price, path_point

__all__ = ["CYCLICALITY", "StatePath", "best_state_path", "cyclicality"]

CYCLICALITY = ("procyclical", "countercyclical", "acyclical")


def cyclicality(level, values, weights) -> str:
    """Whether ``values`` rise or fall with ``level`` across states (the sign of their covariance).

    Parameters
    ----------
    level : array_like of shape (n_states,)
        How high demand is in each state.
    values : array_like of shape (n_states,)
        Prices (or collusion weights) in each state.
    weights : array_like of shape (n_states,)
        Long-run frequency of each state.

    Returns
    -------
    {"procyclical", "countercyclical", "acyclical"}
        ``acyclical`` when either varies by less than a relative 1e-9 across the states that occur.
    """
    x, y, w = (np.asarray(a, dtype=float) for a in (level, values, weights))
    mx, my = (w * x).sum(), (w * y).sum()
    sx = math.sqrt(max(0.0, (w * (x - mx) ** 2).sum()))
    sy = math.sqrt(max(0.0, (w * (y - my) ** 2).sum()))
    if sx <= 1e-9 * max(1.0, abs(mx)) or sy <= 1e-9 * max(1.0, abs(my)):
        return "acyclical"
    return "procyclical" if (w * (x - mx) * (y - my)).sum() > 0 else "countercyclical"


@dataclass(frozen=True, eq=False)
class StatePath:
    """The most collusive state-contingent path sustainable at ``delta``.

    Attributes
    ----------
    delta, growth : float
    labels : tuple of str
    weights : ndarray of shape (n_states,)
        Position on each state's path: 0 static Nash, 1 the agreement.
    actions : ndarray of shape (n_states, n_products)
    prices, agreed_prices, nash_prices : ndarray of shape (n_states,)
        Quantity-weighted average prices on the path, under the agreement and at static Nash.
    profits, deviation_profits : ndarray of shape (n_states, n_firms)
    values : ndarray of shape (n_states, n_firms)
        Discounted value of the path from each state.
    slack : ndarray of shape (n_states, n_firms)
        Expected discounted loss from cheating minus the gain (>= 0 where the constraint holds).
    demand_level : ndarray of shape (n_states,)
        Joint profit of the agreement in each state: how good the state is for the firms.
    frequencies : ndarray of shape (n_states,)
        Long-run frequency of each state.
    full_collusion : bool
    price_cyclicality, collusion_cyclicality : str
        How prices and weights move with ``demand_level`` (see :func:`cyclicality`).
    path_monotone : bool
        Every firm's profit rises along every state's path (on the grid), the condition under which the
        path found is the most profitable in every state.
    iterations : int
    """

    delta: float
    growth: float
    labels: tuple
    weights: np.ndarray
    actions: np.ndarray
    prices: np.ndarray
    agreed_prices: np.ndarray
    nash_prices: np.ndarray
    profits: np.ndarray
    deviation_profits: np.ndarray
    values: np.ndarray
    slack: np.ndarray
    demand_level: np.ndarray
    frequencies: np.ndarray
    full_collusion: bool
    price_cyclicality: str
    collusion_cyclicality: str
    path_monotone: bool
    iterations: int

    _ARRAYS = ("weights", "actions", "prices", "agreed_prices", "nash_prices", "profits", "deviation_profits",
               "values", "slack", "demand_level", "frequencies")

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        out = {"delta": self.delta, "growth": self.growth, "labels": list(self.labels)}
        out.update({k: getattr(self, k).tolist() for k in self._ARRAYS})
        out.update(full_collusion=self.full_collusion, price_cyclicality=self.price_cyclicality,
                   collusion_cyclicality=self.collusion_cyclicality, path_monotone=self.path_monotone,
                   iterations=self.iterations, caution=CAUTION)
        return out

    @classmethod
    def from_dict(cls, d: dict) -> StatePath:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        StatePath
        """
        arrays = {k: np.asarray(d[k], dtype=float) for k in cls._ARRAYS}
        return cls(d["delta"], d["growth"], tuple(d["labels"]), **arrays, full_collusion=d["full_collusion"],
                   price_cyclicality=d["price_cyclicality"], collusion_cyclicality=d["collusion_cyclicality"],
                   path_monotone=d["path_monotone"], iterations=d["iterations"])


class _Paths:
    """Cached path points of every state's stage game."""

    def __init__(self, stages):
        self.stages = stages
        self.cache = [{} for _ in stages]

    def point(self, s: int, w: float):
        c = self.cache[s]
        if w not in c:
            c[w] = path_point(self.stages[s], w)
        return c[w]

    def profit(self, s, w):
        return self.point(s, w).profits.collusive

    def deviation(self, s, w):
        return self.point(s, w).profits.deviation


def _largest_weight(paths: _Paths, s: int, M: np.ndarray, others: np.ndarray, grid: np.ndarray, cap: float) -> float:
    """Largest ``w <= cap`` keeping state ``s``'s constraint for every firm, given the other states'
    contribution ``others`` (shape (n_firms,)) to the expected loss."""
    nash = paths.stages[s].nash.firm_profits

    def excess(w):  # deviation gain minus expected loss; <= 0 where the constraint holds
        pi = paths.profit(s, w)
        return float(np.max(paths.deviation(s, w) - pi - M[s, s] * (pi - nash) - others))

    scale = max(1.0, float(np.abs(paths.profit(s, 1.0)).max()))
    tol = 1e-11 * scale
    pts = grid[grid <= cap]
    if pts[-1] < cap:
        pts = np.append(pts, cap)
    vals = np.array([excess(float(w)) for w in pts])
    if vals[-1] <= tol:
        return float(cap)
    ok = np.flatnonzero(vals <= tol)
    if ok.size == 0:  # not even static Nash (rounding at w = 0)
        return 0.0
    k = int(ok[-1])
    lo, hi = float(pts[k]), float(pts[k + 1])
    if excess(lo) > 0.0:
        return lo
    root = optimize.brentq(excess, lo, hi, xtol=1e-14, rtol=1e-14)
    # step back inside the constraint if the root lands a rounding error outside it
    return float(root) if excess(root) <= tol else lo


def best_state_path(states: DemandStates, markets, delta: float, agreement: str = "joint", n_grid: int = 41,
                    tol: float = 1e-12, max_iter: int = 500) -> StatePath:
    """Most collusive state-contingent path on the Nash-to-agreement paths sustainable at ``delta``.

    Parameters
    ----------
    states : DemandStates
    markets : sequence of Market, MarketSpec or StageGame, one per state
    delta : float in (0, 1)
        With growth, ``delta (1 + growth)`` must stay below one.
    agreement : str
        The agreement in each state when markets are given.
    n_grid : int
        Grid points per state's path used to bracket each weight before Brent's method.
    tol : float
        Convergence tolerance on the weights between sweeps.
    max_iter : int
        Most Gauss-Seidel sweeps.

    Returns
    -------
    StatePath

    Raises
    ------
    SolverError
        When the sweeps have not settled after ``max_iter``.
    """
    beta = _beta(states, delta)
    n_grid = Integer(3, 10_001).check("n_grid", n_grid)
    max_iter = Integer(1, 100_000).check("max_iter", max_iter)
    stages = _stages(states, markets, agreement, need_games=True)
    paths = _Paths(stages)
    S = states.n_states
    M = _continuation(states.transition, beta)
    grid = np.linspace(0.0, 1.0, n_grid)
    nash = np.array([st.nash.firm_profits for st in stages])
    w = np.ones(S)
    sweeps = 0
    while True:
        sweeps += 1
        old = w.copy()
        for s in range(S):
            gains = np.array([paths.profit(t, w[t]) for t in range(S)]) - nash
            others = M[s] @ gains - M[s, s] * gains[s]
            w[s] = _largest_weight(paths, s, M, others, grid, cap=w[s])
        if np.max(np.abs(w - old)) <= tol:
            break
        if sweeps >= max_iter:
            raise SolverError(f"the state-contingent path did not settle in {max_iter} sweeps")
    return _summarise(states, stages, paths, w, delta, beta, M, grid, sweeps)


def _summarise(states, stages, paths, w, delta, beta, M, grid, iterations) -> StatePath:
    S = states.n_states
    pts = [paths.point(s, float(w[s])) for s in range(S)]
    pi = np.array([p.profits.collusive for p in pts])
    dev = np.array([p.profits.deviation for p in pts])
    nash = np.array([st.nash.firm_profits for st in stages])
    values = np.linalg.solve(np.eye(S) - beta * states.transition, pi)
    slack = M @ (pi - nash) - (dev - pi)
    level = np.array([st.collusive.firm_profits.sum() for st in stages])
    freq = _long_run(states.transition, states.initial)
    prices = np.array([p.profits.price for p in pts])
    monotone = all(
        np.all(np.diff(np.array([paths.profit(s, float(x)) for x in grid]), axis=0) >= -1e-9 * max(1.0, level[s]))
        for s in range(S)
    )
    return StatePath(
        float(delta), states.growth, states.labels, w.copy(), np.array([p.actions for p in pts]), prices,
        np.array([average_price(st.market, st.collusive.actions) for st in stages]),
        np.array([average_price(st.market, st.nash.actions) for st in stages]), pi, dev, values, slack, level, freq,
        bool(np.all(w >= 1.0)), cyclicality(level, prices, freq), cyclicality(level, w, freq), bool(monotone),
        iterations,
    )
