"""Thresholds of price competition with capacity constraints, read from an experiment file's ``[market]`` table.

A ``[market]`` table with ``model = "capacity"`` describes a homogeneous good sold by firms with capacities that
compete in prices (:class:`sim.models.capacity_pricing.CapacityPricing`). Its keys:

* ``capacity``: each firm's capacity (a list, two or more firms);
* ``demand``: ``"inelastic"`` (every buyer values the good at the reservation price) or ``"linear"``;
* ``reservation_price``: the highest price at which anything sells (above ``cost``);
* ``market_size``: the quantity demanded at a price of zero (at every price up to the reservation price when demand
  is inelastic);
* ``cost``: the common constant marginal cost (one number);
* ``rationing``: ``"efficient"`` (default) or ``"proportional"`` (see :mod:`sim.models._capacity_core`);
* ``names``: the firms' names (optional).

:func:`capacity_thresholds` gives the static equilibrium (pure or mixed: support, atoms, expected profits), the
collusive agreement, each firm's best deviation and minmax payoff, the critical discount factors per firm for Nash
reversion (Friedman, 1971) and for the harshest punishment, the minmax (Abreu, 1988; Lambson, 1987), with the binding
firm, and the capacity-distribution measures of Compte, Jenny and Rey (2002, "Capacity constraints, mergers and
collusion", European Economic Review 46(1)). The result, :class:`CapacityThresholds`, is plain data.

Model results are evidence under the stated assumptions, not proof of conduct; their use in a case is a matter for
the applicable law and qualified practitioners.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sim.core.errors import InputError
from sim.core.records import Record
from sim.core.text import CAUTION
from sim.models.capacity_pricing import (
    RULES,
    CapacityPricing,
    CollusionAnalysis,
    StaticEquilibrium,
    capacity_symmetry,
)

__all__ = ["CAPACITY_MODEL", "CapacityThresholds", "agreement_of", "capacity_market_from_dict", "capacity_thresholds",
           "is_capacity_market", "require_spare_capacity", "require_static_equilibrium"]

#: the value of ``market.model`` that selects price competition with capacity constraints
CAPACITY_MODEL = "capacity"


def is_capacity_market(table) -> bool:
    """Whether a ``[market]`` table describes price competition with capacity constraints.

    Parameters
    ----------
    table : object
        The ``[market]`` table of an experiment document.

    Returns
    -------
    bool
    """
    return isinstance(table, dict) and table.get("model") == CAPACITY_MODEL


def capacity_market_from_dict(table: dict, prefix: str = "market") -> CapacityPricing:
    """Build and validate the market of a ``[market]`` table with ``model = "capacity"``.

    Parameters
    ----------
    table : dict
        The table (see the module notes).
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    CapacityPricing

    Raises
    ------
    InputError
        Naming the key (``market.capacity``, ``market.reservation_price``, ``market.rationing``, ...).
    """
    if not isinstance(table, dict):
        raise InputError(prefix, f"must be a table, got {table!r}")
    if table.get("model") != CAPACITY_MODEL:
        raise InputError(f"{prefix}.model", f"must be {CAPACITY_MODEL!r} here, got {table.get('model')!r}")
    rest = {k: v for k, v in table.items() if k != "model"}
    if "cost" in rest and isinstance(rest["cost"], list):
        raise InputError(f"{prefix}.cost", f"price competition with capacities takes one marginal cost common to every "
                                           f"firm, got the list {rest['cost']!r}")
    return CapacityPricing.from_dict(rest, prefix)


def require_spare_capacity(market: CapacityPricing, prefix: str = "market") -> None:
    """Refuse a market whose capacities do not cover the demand at the joint-profit price.

    Without spare capacity every firm sells all it can at the market-clearing price in the static game already: there
    is nothing to coordinate on and no threshold to compute (Compte, Jenny and Rey, 2002, section 2, assume that the
    firms together can serve the market).

    Parameters
    ----------
    market : CapacityPricing
    prefix : str
        Key path of the market in the error.

    Raises
    ------
    InputError
        On ``<prefix>.capacity``.
    """
    s = market.spec(prefix)
    p_joint = s.reservation_price if not s.linear else 0.5 * (s.reservation_price + s.cost)
    demand = float(s.quantity(p_joint))
    if s.total_capacity <= demand * (1 + 1e-12):
        where = "at the reservation price" if not s.linear else f"at the joint-profit price {p_joint:g}"
        raise InputError(f"{prefix}.capacity", f"total capacity {s.total_capacity:g} must exceed the demand {demand:g} "
                                               f"{where}: otherwise every firm sells its capacity at the "
                                               f"market-clearing price and there is nothing to coordinate on")


def require_static_equilibrium(market: CapacityPricing) -> None:
    """Refuse, before any work, a market whose static equilibrium this model cannot compute (a mixed equilibrium
    with linear demand and proportional rationing among more than two firms); every threshold needs it.

    Parameters
    ----------
    market : CapacityPricing

    Raises
    ------
    InputError
        On ``market.rationing``.
    """
    market.static_equilibrium()


def agreement_of(collusion: dict, n_firms: int, prefix: str = "collusion") -> dict:
    """Validate the ``[collusion]`` table of a capacity market: the agreement rule, shares and price.

    Parameters
    ----------
    collusion : dict
        ``agreement`` (``"proportional"`` to capacities, default; ``"equal"``; ``"given"`` with ``shares``) and an
        optional agreed ``price``.
    n_firms : int
    prefix : str

    Returns
    -------
    dict
        ``rule``, ``shares`` (list or None) and ``price`` (float or None).
    """
    if not isinstance(collusion, dict):
        raise InputError(prefix, f"must be a table, got {collusion!r}")
    for k in collusion:
        if k not in ("agreement", "shares", "price"):
            raise InputError(f"{prefix}.{k}", "unknown key for a capacity market; allowed: agreement, price, shares")
    rule = collusion.get("agreement", "proportional")
    if rule not in RULES:
        raise InputError(f"{prefix}.agreement", f"must be one of {', '.join(map(repr, RULES))} for a capacity "
                                                f"market, got {rule!r}")
    shares = collusion.get("shares")
    if (rule == "given") != (shares is not None):
        raise InputError(f"{prefix}.shares", "give shares exactly when agreement = 'given'")
    if shares is not None and (not isinstance(shares, list) or len(shares) != n_firms):
        raise InputError(f"{prefix}.shares", f"must list one share per firm ({n_firms}), got {shares!r}")
    price = collusion.get("price")
    if price is not None and (isinstance(price, bool) or not isinstance(price, int | float)):
        raise InputError(f"{prefix}.price", f"must be a number, got {price!r}")
    return {"rule": rule, "shares": shares, "price": None if price is None else float(price)}


@dataclass(frozen=True)
class CapacityThresholds(Record):
    """Static equilibrium, agreement, deviations, minmax and critical discount factors of one capacity market.

    Parameters
    ----------
    market : dict
        The market's parameters (:meth:`CapacityPricing.to_dict`), names included.
    equilibrium : StaticEquilibrium
        The static equilibrium: kind (``market_clearing``, ``cost_pricing`` or ``mixed``), support bounds, atoms,
        expected profits, distribution functions on a price grid.
    collusion : CollusionAnalysis
        Agreement, best deviations, Nash and minmax profits, critical discount factors of shape (n_firms,) for Nash
        reversion (``grim``) and minmax punishments (``harshest``) with the binding firms.
    residual_prices, residual_profits : ndarray of shape (n_firms,)
        Each firm's residual-monopoly price and profit behind rivals that sell their capacities.
    symmetry : dict
        :func:`sim.models.capacity_pricing.capacity_symmetry` at the agreed price: ``largest_share``,
        ``equal_share``, ``rivals_cover``, ``capacity_hhi``.
    spare_capacity : float
        Total capacity over the demand at the agreed price, minus one (0.25: a quarter more than is sold).
    caution : str
    """

    market: dict
    equilibrium: StaticEquilibrium
    collusion: CollusionAnalysis
    residual_prices: np.ndarray
    residual_profits: np.ndarray
    symmetry: dict
    spare_capacity: float
    caution: str = CAUTION

    @property
    def names(self) -> list:
        """The firms' names (list of str)."""
        return list(self.collusion.names)

    @property
    def n_firms(self) -> int:
        """Number of firms (int)."""
        return len(self.collusion.names)

    @property
    def harshest_binding_name(self) -> str:
        """Name of the firm that binds under minmax punishments (str)."""
        return self.collusion.names[self.collusion.harshest_binding]


def capacity_thresholds(market: CapacityPricing, agreement: dict | None = None) -> CapacityThresholds:
    """The thresholds analysis of a capacity market (see the module notes).

    Parameters
    ----------
    market : CapacityPricing
    agreement : dict, optional
        :func:`agreement_of`'s ``rule``, ``shares`` and ``price`` (default: shares proportional to capacities at the
        default agreed price).

    Returns
    -------
    CapacityThresholds
    """
    a = agreement or {"rule": "proportional", "shares": None, "price": None}
    coll = market.critical_discount_factors(rule=a["rule"], shares=a["shares"], price=a["price"])
    eq = market.static_equilibrium()
    rp, rpi = market.residual_monopoly()
    sold = float(coll.agreement.quantities.sum())
    spare = float(coll.capacity.sum() / sold - 1.0) if sold > 0 else float("inf")
    names = dict(market.to_dict(), names=list(market.spec().names))
    return CapacityThresholds(names, eq, coll, np.asarray(rp, float), np.asarray(rpi, float),
                              capacity_symmetry(coll.capacity, sold), spare)
