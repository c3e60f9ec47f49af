"""One action profile of the stage game with what it produces; the object every solver returns."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.models.market import MarketSpec

__all__ = ["Outcome", "as_spec", "outcome_of"]


@dataclass(frozen=True)
class Outcome:
    """One action profile with what it produces.

    Parameters
    ----------
    actions, quantities, prices, profits : ndarray of shape (n_products,)
        Per product (one product per firm unless the market has multi-product firms).
    firm_profits : ndarray of shape (n_firms,)
    """

    actions: np.ndarray
    quantities: np.ndarray
    prices: np.ndarray
    profits: np.ndarray
    firm_profits: np.ndarray

    @property
    def joint_profit(self) -> float:
        """Sum of the profits of every product."""
        return float(self.profits.sum())

    def to_dict(self) -> dict:
        """The arrays as lists.

        Returns
        -------
        dict
            ``actions``, ``quantities``, ``prices``, ``profits`` (per product) and ``firm_profits``.
        """
        keys = ("actions", "quantities", "prices", "profits", "firm_profits")
        return {k: getattr(self, k).tolist() for k in keys}


def as_spec(market) -> MarketSpec:
    """The numeric form of a market (validated once; a MarketSpec passes through).

    Parameters
    ----------
    market : Market or MarketSpec

    Returns
    -------
    MarketSpec
    """
    return market if isinstance(market, MarketSpec) else market.spec()


def outcome_of(ms: MarketSpec, actions) -> Outcome:
    """What one action profile produces.

    Parameters
    ----------
    ms : MarketSpec
    actions : array_like of shape (n_products,)

    Returns
    -------
    Outcome
    """
    a = np.asarray(actions, dtype=float)
    q, p, pi = ms.evaluate(a)
    return Outcome(a.copy(), q, p, pi, ms.firm_sum(pi))
