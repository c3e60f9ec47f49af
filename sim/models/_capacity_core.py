"""Numeric core of price competition with capacity constraints (homogeneous good).

Demand
------
Consumers' reservation prices lie in ``[0, v]`` (``v`` the reservation price, the highest price at
which anything sells) and ``M`` (the market size) is the quantity demanded at a price of zero.

* ``inelastic``: every consumer values the good at ``v``, so ``D(p) = M`` for ``p <= v`` and 0 above
  (the demand of Brock and Scheinkman, 1985, and of Compte, Jenny and Rey, 2002).
* ``linear``: reservation prices spread evenly over ``[0, v]``, so ``D(p) = M (1 - p / v)`` for
  ``0 <= p <= v`` and 0 above; the inverse demand is ``P(Q) = v (1 - Q / M)`` (the linear demand of
  Kreps and Scheinkman, 1983, and Osborne and Pitchik, 1986, written with the choke price ``v`` and
  the quantity ``M`` at price zero).

Rationing (who buys from a firm priced above a rival that cannot serve everyone)
------------------------------------------------------------------------------
Firms are served in order of price. At a price level ``p`` the quantity demanded is:

* ``efficient`` (default): ``max(0, D(p) - S)``, where ``S`` is what the cheaper firms sold. The
  consumers who value the good most buy first from the cheapest firms (Levitan and Shubik, 1972,
  "Price duopoly and capacity constraints", International Economic Review 13(1); Kreps and
  Scheinkman, 1983, Bell Journal of Economics 14(2)). With efficient rationing what the cheaper firms
  sold can be replaced by their capacity: if they could not sell it all, demand at ``p`` is already
  exhausted.
* ``proportional``: every consumer is equally likely to be served by a cheaper firm, so a share
  ``S / D(p_low)`` of the consumers at every reservation price is gone: the demand left at ``p`` is
  ``D(p) * phi`` with ``phi = 1 - sum over cheaper levels of (sold at the level) / D(level price)``
  (Beckmann, 1965, "Edgeworth-Bertrand duopoly revisited"; Davidson and Deneckere, 1986, RAND
  Journal of Economics 17(3)). With inelastic demand the two rules coincide.

Firms that tie at a price share the quantity demanded at that price in proportion to their
capacities (or to given weights, such as the quotas of an agreement), no firm selling more than its
capacity: what a full firm cannot take goes to the other tied firms in the same proportions.

Marginal cost ``c`` is constant, common to all firms, and paid only on units sold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["DEMANDS", "RATIONING", "CapacitySpec", "sales"]

DEMANDS = ("inelastic", "linear")
RATIONING = ("efficient", "proportional")
#: codes shared with the plain-Python one-period play (and a numba stage core built from it)
DEMAND_CODES = {"inelastic": 0, "linear": 1}
RATIONING_CODES = {"efficient": 0, "proportional": 1}


@dataclass(frozen=True, eq=False)
class CapacitySpec:
    """Validated numeric form of a capacity-constrained price game.

    Attributes
    ----------
    capacity : ndarray of shape (n_firms,)
    cost : float
        Common constant marginal cost.
    reservation_price : float
        ``v``: nothing sells above it.
    market_size : float
        ``M``: quantity demanded at price zero (at every price up to ``v`` when demand is inelastic).
    demand : {"inelastic", "linear"}
    rationing : {"efficient", "proportional"}
    names : tuple of str
    """

    capacity: np.ndarray
    cost: float
    reservation_price: float
    market_size: float
    demand: str
    rationing: str
    names: tuple
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def n_firms(self) -> int:
        """Number of firms (int)."""
        return int(self.capacity.shape[0])

    @property
    def total_capacity(self) -> float:
        """Sum of the capacities (float)."""
        return float(self.capacity.sum())

    @property
    def largest(self) -> int:
        """Index of the largest firm, the first one on ties (int)."""
        return int(np.argmax(self.capacity))

    @property
    def linear(self) -> bool:
        """True for linear demand (bool)."""
        return self.demand == "linear"

    def quantity(self, p) -> np.ndarray:
        """Quantity demanded ``D(p)``, elementwise.

        Parameters
        ----------
        p : array_like
            Prices.

        Returns
        -------
        ndarray of the shape of ``p``
        """
        p = np.asarray(p, dtype=float)
        v, M = self.reservation_price, self.market_size
        if self.linear:
            return np.where(p <= v, M * (1.0 - p / v), 0.0)
        return np.where(p <= v, M, 0.0)

    def clearing_price(self, q: float) -> float:
        """The highest price at which a quantity sells.

        Parameters
        ----------
        q : float

        Returns
        -------
        float
            ``P(q)`` (linear; negative beyond ``M``), ``v`` if ``q <= M`` (inelastic), ``-inf`` when
            ``q`` exceeds the inelastic demand.
        """
        v, M = self.reservation_price, self.market_size
        if self.linear:
            return v * (1.0 - q / M)
        return v if q <= M else -math.inf

    @property
    def monopoly_price(self) -> float:
        """Price maximising ``(p - c) D(p)`` (float): ``(v + c) / 2`` (linear), ``v`` (inelastic)."""
        if self.linear:
            return 0.5 * (self.reservation_price + self.cost)
        return self.reservation_price

    def best_against_residual(self, k: float, scale: float, sold: float) -> tuple[float, float]:
        """Best price and profit of a firm of capacity ``k`` facing the residual demand
        ``max(0, scale * D(p) - sold)`` for ``p`` in ``[c, v]``.

        Efficient rationing behind rivals that sold ``sold`` is ``scale = 1``; proportional rationing
        that left a share ``phi`` of the consumers is ``scale = phi, sold = 0``.

        Parameters
        ----------
        k : float
            The firm's capacity.
        scale : float
            Share of the demand curve left.
        sold : float
            Quantity subtracted from it.

        Returns
        -------
        price, profit : float
        """
        c, v, M = self.cost, self.reservation_price, self.market_size
        if not self.linear:
            q = min(k, max(0.0, scale * M - sold))
            return v, (v - c) * q
        A, B = scale * M - sold, scale * M / v  # residual = A - B p
        if B <= 0 or A / B <= c:
            return c, 0.0
        p_free = 0.5 * (A / B + c)
        p_full = (A - k) / B  # below it the firm cannot serve the residual
        p = min(v, max(p_free, p_full, c))
        return p, (p - c) * min(k, max(0.0, A - B * p))


def _levels(prices: np.ndarray):
    """Sort each profile by price; returns the order, sorted prices and a flag for the first firm of
    each price level, all of shape (n_profiles, n)."""
    order = np.argsort(prices, axis=1, kind="stable")
    ps = np.take_along_axis(prices, order, axis=1)
    first = np.ones_like(ps, dtype=bool)
    first[:, 1:] = ps[:, 1:] != ps[:, :-1]
    return order, ps, first


def sales(spec: CapacitySpec, prices, weights=None) -> np.ndarray:
    """Quantity each firm sells at each price profile (rationing and ties as in the module notes).

    Parameters
    ----------
    spec : CapacitySpec
    prices : array_like of shape (..., n_firms)
    weights : array_like of shape (n_firms,), optional
        How tied firms share the quantity demanded at their price (default: capacities).

    Returns
    -------
    ndarray of shape (..., n_firms)
    """
    p = np.asarray(prices, dtype=float)
    shape = p.shape
    n = spec.n_firms
    if shape[-1] != n:
        raise ValueError(f"prices must have last dimension {n}, got shape {shape}")
    P = p.reshape(-1, n)
    cap = spec.capacity
    w = cap if weights is None else np.asarray(weights, dtype=float)
    order, ps, first = _levels(P)
    ks = cap[order]
    ws = w[order]
    level = np.cumsum(first, axis=1) - 1
    rows = np.arange(P.shape[0])[:, None]
    level_cap = np.zeros(P.shape)
    np.add.at(level_cap, (np.broadcast_to(rows, level.shape), level), ks)
    sold_at_level = np.zeros(P.shape)
    done = np.zeros(P.shape[0])  # efficient: sold so far; proportional: share of consumers gone
    D = spec.quantity(ps)
    for j in range(n):
        start = first[:, j]
        lv = level[:, j]
        if spec.rationing == "efficient":
            demand = np.maximum(0.0, D[:, j] - done)
        else:
            demand = np.maximum(0.0, 1.0 - done) * D[:, j]
        cap_j = level_cap[rows[:, 0], lv]
        q = np.minimum(cap_j, demand)
        sold_at_level[rows[:, 0], lv] = np.where(start, q, sold_at_level[rows[:, 0], lv])
        if spec.rationing == "efficient":
            done = np.where(start, done + q, done)
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                gone = np.where(D[:, j] > 0, q / D[:, j], 0.0)
            done = np.where(start, done + gone, done)
    at = (np.broadcast_to(rows, level.shape), level)
    out_sorted = _split_level(sold_at_level[at], level, ks, ws, level_cap[at])
    out = np.empty_like(out_sorted)
    np.put_along_axis(out, order, out_sorted, axis=1)
    return out.reshape(shape)


def _split_level(total, level, ks, ws, cap_here):
    """Share each level's sales among its firms in proportion to the weights, capped at capacity
    (water filling: what a full firm cannot take is shared by the others in the same proportions).
    ``total`` and ``cap_here`` hold, at each sorted position, its level's sales and capacity."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if np.array_equal(ws, ks):
            return np.where(cap_here > 0, total * ks / cap_here, 0.0)
    rows = np.arange(total.shape[0])[:, None]
    out = np.zeros_like(total)
    full = np.zeros(total.shape, dtype=bool)
    for _ in range(total.shape[1]):
        left_w = np.zeros(total.shape)
        np.add.at(left_w, (np.broadcast_to(rows, level.shape), level), np.where(full, 0.0, ws))
        given = np.zeros(total.shape)
        np.add.at(given, (np.broadcast_to(rows, level.shape), level), np.where(full, ks, 0.0))
        lw = left_w[np.broadcast_to(rows, level.shape), level]
        rest = total - given[np.broadcast_to(rows, level.shape), level]
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(full, ks, np.where(lw > 0, rest * ws / lw, 0.0))
        over = ~full & (share > ks)
        out = np.minimum(share, ks)
        if not over.any():
            return out
        full |= over
    return out


def profits(spec: CapacitySpec, prices, weights=None) -> np.ndarray:
    """Profits ``(p_i - c) q_i`` of each firm at each price profile.

    Parameters
    ----------
    spec : CapacitySpec
    prices : array_like of shape (..., n_firms)
    weights : array_like of shape (n_firms,), optional
        Tie-sharing weights (default: capacities).

    Returns
    -------
    ndarray of shape (..., n_firms)
    """
    p = np.asarray(prices, dtype=float)
    return (p - spec.cost) * sales(spec, p, weights)


def residual_demand(spec: CapacitySpec, prices, firm: int) -> np.ndarray:
    """Quantity demanded at a firm's price once its cheaper rivals have sold (before its own
    capacity limits it; rivals tied with it are not subtracted).

    Parameters
    ----------
    spec : CapacitySpec
    prices : array_like of shape (..., n_firms)
    firm : int
        Index (0-based).

    Returns
    -------
    ndarray of shape (...,)
    """
    p = np.asarray(prices, dtype=float)
    shape = p.shape[:-1]
    P = p.reshape(-1, spec.n_firms)
    own = P[:, firm]
    rivals = np.delete(P, firm, axis=1)
    sub = CapacitySpec(np.delete(spec.capacity, firm), spec.cost, spec.reservation_price, spec.market_size,
                       spec.demand, spec.rationing, tuple(n for k, n in enumerate(spec.names) if k != firm))
    # the cheaper rivals sell among themselves as if the firm were absent
    cheaper = np.where(rivals < own[:, None], rivals, np.inf)
    q = sales(sub, np.where(np.isfinite(cheaper), cheaper, spec.reservation_price * 2 + 1.0))
    q = np.where(np.isfinite(cheaper), q, 0.0)
    D = spec.quantity(own)
    if spec.rationing == "efficient":
        out = np.maximum(0.0, D - q.sum(axis=1))
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            gone = np.where(np.isfinite(cheaper), q / spec.quantity(np.where(np.isfinite(cheaper), cheaper, 0.0)), 0.0)
        gone = np.nan_to_num(gone)
        out = np.maximum(0.0, 1.0 - gone.sum(axis=1)) * D
    return out.reshape(shape)
