"""Static solutions of the stage game, and the stage game itself.

* :func:`best_response` -- a firm's profit-maximising action against given rival actions
  (:mod:`sim.theory.best_response`).
* :func:`static_nash` -- the static Nash equilibrium: closed form where the demand system has one,
  otherwise a best-response iteration that certifies its own convergence (every firm's global best
  response is checked at the end) and raises :class:`~sim.core.errors.SolverError` when it cannot
  (:mod:`sim.theory.nash`).
* :func:`collusive_outcome` -- the outcome the firms agree on: the joint-profit maximum, the best
  symmetric outcome (a common quantity or price), quantities proportional to the static-Nash ones,
  or actions the user gives (:mod:`sim.theory.collusion`).
* :func:`best_deviation` -- each firm's best one-shot deviation against the others' agreed actions.
* :func:`minmax` -- each firm's minmax payoff (the least the rivals can hold it to).
* :func:`stage_game` -- all of the above in one object, the input of :mod:`sim.theory.thresholds`.

Everything a solver needs to know about the demand comes from the demand system's methods
(:class:`~sim.models.demand_spec.DemandSpec`); nothing here depends on which model it is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.models.market import MarketSpec
from sim.theory.best_response import best_response
from sim.theory.collusion import AGREEMENTS, collusive_outcome
from sim.theory.nash import static_nash
from sim.theory.outcome import Outcome, as_spec, outcome_of

__all__ = [
    "AGREEMENTS",
    "Outcome",
    "StageGame",
    "best_deviation",
    "best_response",
    "collusive_outcome",
    "deviation_actions",
    "minmax",
    "outcome_of",
    "stage_game",
    "static_nash",
]


def best_deviation(market, actions) -> tuple[np.ndarray, np.ndarray]:
    """Each firm's best one-shot deviation against the others' actions.

    Parameters
    ----------
    market : Market or MarketSpec
    actions : array_like of shape (n_products,)
        The agreed profile.

    Returns
    -------
    profiles : ndarray of shape (n_firms, n_products)
        Row i: the profile when firm i deviates and the others keep ``actions``.
    profits : ndarray of shape (n_firms,)
        The deviating firm's profit (a supremum for homogeneous Bertrand with continuous prices).
    """
    ms = as_spec(market)
    a = np.asarray(actions, dtype=float)
    rows = np.empty((ms.n_firms, ms.n_products))
    dev_p = np.empty(ms.n_firms)
    own_profit = ms.firm_profits(a[None, :])[0]
    for i in range(ms.n_firms):
        prof, v = best_response(ms, i, a[None, :])
        rows[i], dev_p[i] = prof[0], v[0]
        # never report a deviation worse than complying (rounding at a best response)
        if not ms.homogeneous_bertrand and dev_p[i] < own_profit[i]:
            rows[i], dev_p[i] = a, own_profit[i]
    return rows, dev_p


def deviation_actions(ms: MarketSpec, profiles: np.ndarray) -> np.ndarray:
    """Per product, its action when its owner deviates: ``profiles[owner[k], k]``.

    Parameters
    ----------
    ms : MarketSpec
    profiles : ndarray of shape (n_firms, n_products)
        The deviation profiles of :func:`best_deviation`.

    Returns
    -------
    ndarray of shape (n_products,)
    """
    return profiles[ms.owner, np.arange(ms.n_products)]


def minmax(market) -> tuple[np.ndarray, np.ndarray]:
    """Each firm's minmax payoff: the rivals choose actions to minimise the firm's best-response
    profit.

    For every shipped demand system a firm's best-response profit falls as rivals produce more
    (Cournot) or price lower (Bertrand), so the rivals' minimising actions are their largest
    quantities (capacity, or the demand system's flooding quantity,
    :meth:`~sim.models.demand_spec.DemandSpec.flooding_quantity`) or a zero price; a demand system
    added later is held to the same rule.

    Parameters
    ----------
    market : Market or MarketSpec

    Returns
    -------
    profiles : ndarray of shape (n_firms, n_products)
        Row i: the profile that holds firm i down (its own products at its best response).
    payoffs : ndarray of shape (n_firms,)
    """
    ms = as_spec(market)
    _, hi = ms.action_bounds()
    rows = np.empty((ms.n_firms, ms.n_products))
    vals = np.empty(ms.n_firms)
    for i in range(ms.n_firms):
        own = ms.products_of(i)
        others = np.setdiff1d(np.arange(ms.n_products), own)
        if ms.quantity_setting:
            flood = ms.demand.flooding_quantity(ms, hi)
            if not np.isfinite(flood):
                if not np.all(np.isfinite(ms.capacity[others])):
                    # unbounded rival output drives the price, and the firm's profit, to zero in the limit
                    row = np.where(np.isfinite(ms.capacity), ms.capacity, hi)
                    row[own] = 0.0
                    rows[i], vals[i] = row, 0.0
                    continue
                flood = hi.max() * 2
            row = np.where(np.isfinite(ms.capacity), ms.capacity, flood)
        else:
            row = np.zeros(ms.n_products)
        prof, v = best_response(ms, i, row[None, :])
        rows[i], vals[i] = prof[0], max(0.0, float(v[0]))
    return rows, vals



@dataclass(frozen=True)
class StageGame:
    """The stage game's key outcomes.

    Parameters
    ----------
    market : MarketSpec
    agreement : str
    nash, collusive : Outcome
    deviation_profiles : ndarray of shape (n_firms, n_products)
        Row i: firm i's best deviation against the others' collusive actions.
    deviation_actions : ndarray of shape (n_products,)
        Each product's action when its owner deviates.
    deviation_profits : ndarray of shape (n_firms,)
    minmax_profits : ndarray of shape (n_firms,)
    """

    market: MarketSpec
    agreement: str
    nash: Outcome
    collusive: Outcome
    deviation_profiles: np.ndarray
    deviation_actions: np.ndarray
    deviation_profits: np.ndarray
    minmax_profits: np.ndarray

    @property
    def n_firms(self) -> int:
        """Number of firms."""
        return self.market.n_firms

    def to_dict(self) -> dict:
        """Profits per firm; actions, prices and quantities per product.

        Returns
        -------
        dict
            ``agreement``, ``profits`` (collusive, deviation, nash, minmax), ``actions``, ``prices``,
            ``quantities`` and ``owner`` (firm numbers from 1).
        """
        return {
            "agreement": self.agreement,
            "profits": {
                "collusive": self.collusive.firm_profits.tolist(),
                "deviation": self.deviation_profits.tolist(),
                "nash": self.nash.firm_profits.tolist(),
                "minmax": self.minmax_profits.tolist(),
            },
            "actions": {
                "collusive": self.collusive.actions.tolist(),
                "deviation": self.deviation_actions.tolist(),
                "nash": self.nash.actions.tolist(),
            },
            "prices": {"collusive": self.collusive.prices.tolist(), "nash": self.nash.prices.tolist()},
            "quantities": {
                "collusive": self.collusive.quantities.tolist(),
                "nash": self.nash.quantities.tolist(),
            },
            "owner": (self.market.owner + 1).tolist(),
        }


def stage_game(market, agreement: str = "joint", actions=None) -> StageGame:
    """Solve the stage game: static Nash, the agreed collusive outcome, best deviations, minmax.

    Parameters
    ----------
    market : Market or MarketSpec
    agreement : {"joint", "symmetric", "proportional", "given"}
        The collusive outcome (see :func:`collusive_outcome`).
    actions : array_like of shape (n_products,), optional
        The agreed actions with ``agreement="given"``.

    Returns
    -------
    StageGame
    """
    ms = as_spec(market)
    nash = static_nash(ms)
    coll = collusive_outcome(ms, agreement, actions)
    dev_rows, dev_p = best_deviation(ms, coll.actions)
    _, mm = minmax(ms)
    return StageGame(ms, agreement, nash, coll, dev_rows, deviation_actions(ms, dev_rows), dev_p, mm)
