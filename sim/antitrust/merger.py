"""Mergers: the post-merger market and its static equilibrium.

:func:`merge` builds the market after some firms merge and solves both static equilibria.

* Differentiated products (differentiated linear or logit demand): the merged firm owns every
  product of its owners and sets their actions (prices or quantities) jointly (an ``owner`` map, see
  :mod:`sim.models.market`); each product keeps its own marginal cost, less a stated proportional
  ``efficiency``, or takes the
  stated post-merger ``cost``. This is the merger simulation of Werden and Froeb (1994, "The effects
  of mergers in differentiated products industries: logit demand and merger policy").
* A homogeneous good (linear or isoelastic demand): the merged firm is one firm. With constant
  marginal costs it produces at the lower of its owners' costs (less the efficiency), or at the
  stated ``cost``; capacities add up; under price competition its tie-sharing weight is the sum of
  its owners' weights (it keeps both owners' customers at a common price). When the merged firm's
  output exceeds the capacity of its cheaper plant, one constant cost understates its cost for the
  excess; :attr:`MergerResult.notes` says so.

Firm numbers: the merged firm takes the place of the lowest-numbered merging firm; the other firms
keep their order.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Constraint, Parametrized, PerFirm, Real, optional
from sim.core.tables import refuse_unknown
from sim.models.market import Market
from sim.theory.equilibrium import static_nash

__all__ = ["Merger", "MergerResult", "difference", "hhi", "merge", "merger_from_dict"]

#: Relative size (against the larger of one and the two magnitudes) at or below which the difference of
#: two computed numbers is rounding residue and is reported as 0: a few thousand units in the last place,
#: far below the solvers' tolerances, so no difference that means anything is hidden.
RESIDUE = 1e-12


class _FirmList(Constraint):
    """Two or more distinct firms, by number (1, 2, ...) or by name."""

    def describe(self) -> str:
        return "a list of two or more firm numbers (1, 2, ...) or firm names"

    def check(self, key: str, value: Any):
        if not isinstance(value, Sequence) or isinstance(value, str) or len(value) < 2:
            raise InputError(key, f"must be {self.describe()}, got {value!r}")
        for k, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, numbers.Integral | str):
                raise InputError(key, f"entry {k + 1} must be a firm number or name, got {v!r}")
        return list(value)

    def example_bad(self) -> Any:
        return [1]


class _Names(Constraint):
    def describe(self) -> str:
        return "a list of distinct firm names, one per firm"

    def check(self, key: str, value: Any):
        if not isinstance(value, Sequence) or isinstance(value, str):
            raise InputError(key, f"must be {self.describe()}, got {value!r}")
        for k, v in enumerate(value):
            if not isinstance(v, str) or not v.strip():
                raise InputError(key, f"entry {k + 1} must be a non-empty name, got {v!r}")
        if len(set(value)) != len(value):
            raise InputError(key, f"names must be distinct, got {list(value)!r}")
        return [str(v) for v in value]

    def example_bad(self) -> Any:
        return ["A", "A"]


class Merger(Parametrized):
    """A merger: which firms combine, and what happens to their costs.

    Parameters
    ----------
    firms : list of int or str
        The merging firms, by number (1, 2, ... in the pre-merger market) or by name (``names``).
    efficiency : float in [0, 1)
        Proportional saving in the merged firm's marginal cost(s): costs are multiplied by
        ``1 - efficiency``.
    cost : float or list of float, optional
        Stated post-merger marginal cost of the merged firm (one number; with differentiated
        products a number for all its products or one per product, in product order). Replaces
        ``efficiency``.
    names : list of str, optional
        Names of the pre-merger firms (default ``Firm 1``, ``Firm 2``, ...).
    """

    _constraints = {
        "firms": _FirmList(),
        "efficiency": Real(0, 1, closed="left"),
        "cost": optional(PerFirm(Real(0, None))),
        "names": optional(_Names()),
    }

    def __init__(self, firms=(1, 2), efficiency=0.0, cost=None, names=None):
        self.firms = firms
        self.efficiency = efficiency
        self.cost = cost
        self.names = names

    def validated(self, n_firms: int, prefix: str = "merger") -> dict:
        """The checked merger.

        Parameters
        ----------
        n_firms : int
            The number of firms of the pre-merger market.
        prefix : str
            Key path of the merger's table in error messages.

        Returns
        -------
        dict
            ``firms`` (the merging firms as sorted indices counted from 0), ``efficiency``, ``cost`` and ``names``
            (one per firm).

        Raises
        ------
        InputError
            Naming the key path of the setting that is wrong.
        """
        firms = self._constraints["firms"].check(f"{prefix}.firms", self.firms)
        eff = self._constraints["efficiency"].check(f"{prefix}.efficiency", self.efficiency)
        names = self._constraints["names"].check(f"{prefix}.names", self.names)
        if names is not None and len(names) != n_firms:
            raise InputError(f"{prefix}.names", f"must name every firm ({n_firms}), got {len(names)} names")
        if names is None:
            names = [f"Firm {i + 1}" for i in range(n_firms)]
        idx = []
        for v in firms:
            if isinstance(v, str):
                if v not in names:
                    raise InputError(f"{prefix}.firms", f"no firm is named {v!r}; firms: {', '.join(names)}")
                idx.append(names.index(v))
            else:
                if not 1 <= int(v) <= n_firms:
                    raise InputError(f"{prefix}.firms", f"firm {int(v)} does not exist; the market has {n_firms} "
                                                        f"firms (1 to {n_firms})")
                idx.append(int(v) - 1)
        if len(set(idx)) != len(idx):
            raise InputError(f"{prefix}.firms", f"a firm is listed twice, got {list(firms)!r}")
        if len(idx) >= n_firms:
            raise InputError(f"{prefix}.firms", "merging every firm leaves a monopoly; the collusion analysis needs "
                                                "at least two firms after the merger")
        if self.cost is not None and eff != 0.0:
            raise InputError(f"{prefix}.cost", "give either a stated post-merger cost or an efficiency, not both")
        return {"firms": sorted(idx), "efficiency": eff, "cost": self.cost, "names": names}


def merger_from_dict(table: dict, prefix: str = "merger") -> Merger:
    """Build a :class:`Merger` from an experiment file's ``[merger]`` table (unknown keys refused).

    Parameters
    ----------
    table : dict
    prefix : str
        Key path of the table in error messages.

    Returns
    -------
    Merger
    """
    refuse_unknown(table, prefix, Merger._param_names())
    if "firms" not in table:
        raise InputError(f"{prefix}.firms", "missing: the merging firms (numbers or names)")
    return Merger(**table)


def difference(new: float, old: float) -> float:
    """``new - old``, reported as exactly 0 when it is rounding residue (``|new - old| <= RESIDUE *
    max(1, |new|, |old|)``), e.g. ``1.0 - 0.9999999999999984``; nan when either is nan.

    Parameters
    ----------
    new, old : float

    Returns
    -------
    float
    """
    new, old = float(new), float(old)
    d = new - old
    if math.isfinite(d) and abs(d) <= RESIDUE * max(1.0, abs(new), abs(old)):
        return 0.0
    return d


def hhi(shares) -> float:
    """Herfindahl-Hirschman index ``10000 * sum s_i^2`` of firm shares (fractions summing to one).

    Parameters
    ----------
    shares : array_like of shape (n_firms,)

    Returns
    -------
    float
        Between 10000 / n_firms and 10000.
    """
    s = np.asarray(shares, dtype=float)
    return float(10_000.0 * (s * s).sum())


@dataclass(frozen=True)
class MergerResult:
    """The market before and after a merger, with both static equilibria.

    Parameters
    ----------
    pre, post : Market
    names_pre, names_post : list of str
        Firm names before and after (the merged firm is named after its owners joined by ``+``).
    firm_map : int ndarray of shape (n_firms_pre,)
        Post-merger index (0-based) of each pre-merger firm.
    merged : int
        Post-merger index of the merged firm.
    merging : list of int
        Pre-merger indices of the merging firms.
    efficiency : float
    pre_nash, post_nash : Outcome
        Static Nash equilibria (per product).
    shares_pre, shares_post : ndarray of shape (n_firms,)
        Firm shares of total quantity sold (inside goods) at each static equilibrium.
    hhi_pre, hhi_post : float
        Herfindahl-Hirschman index at each equilibrium (0-10000).
    naive_delta_hhi : float
        ``2 * 10000 * sum_{i<j} s_i s_j`` over the merging firms at pre-merger shares.
    consumer_surplus_pre, consumer_surplus_post : float
    notes : list of str
        Caveats of the merger model in this market.
    """

    pre: Any
    post: Any
    names_pre: list
    names_post: list
    firm_map: np.ndarray
    merged: int
    merging: list
    efficiency: float
    pre_nash: Any
    post_nash: Any
    shares_pre: np.ndarray
    shares_post: np.ndarray
    hhi_pre: float
    hhi_post: float
    naive_delta_hhi: float
    consumer_surplus_pre: float
    consumer_surplus_post: float
    notes: list = field(default_factory=list)

    @property
    def delta_hhi(self) -> float:
        """The change of the HHI at the static equilibria (0 when it is rounding residue)."""
        return difference(self.hhi_post, self.hhi_pre)

    def price_changes(self) -> list[dict]:
        """The static Nash prices before and after the merger.

        Returns
        -------
        list of dict
            One row per product of the post-merger market (``product`` counted from 1, ``owner`` after the
            merger, ``pre``, ``post`` and the relative ``change``); for a homogeneous good one row, ``product =
            "market"``, for the market price.
        """
        ps = self.post.spec()
        pre_ms = self.pre.spec()
        out = []
        if pre_ms.homogeneous_good:
            p0 = _market_price(pre_ms, self.pre_nash)
            p1 = _market_price(ps, self.post_nash)
            return [{"product": "market", "owner": None, "pre": p0, "post": p1, "change": difference(p1, p0) / p0}]
        for k in range(ps.n_products):
            p0, p1 = float(self.pre_nash.prices[k]), float(self.post_nash.prices[k])
            out.append({"product": k + 1, "owner": self.names_post[int(ps.owner[k])], "pre": p0, "post": p1,
                        "change": difference(p1, p0) / p0})
        return out

    def to_dict(self) -> dict:
        """The merger as plain JSON data.

        Returns
        -------
        dict
        """
        return {
            "merging": [self.names_pre[i] for i in self.merging], "merged_firm": self.names_post[self.merged],
            "efficiency": self.efficiency, "names_pre": self.names_pre, "names_post": self.names_post,
            "firm_map": (self.firm_map + 1).tolist(), "pre_market": self.pre.to_dict(),
            "post_market": self.post.to_dict(), "pre_nash": self.pre_nash.to_dict(),
            "post_nash": self.post_nash.to_dict(), "price_changes": self.price_changes(),
            "shares_pre": self.shares_pre.tolist(), "shares_post": self.shares_post.tolist(),
            "hhi_pre": self.hhi_pre, "hhi_post": self.hhi_post, "delta_hhi": self.delta_hhi,
            "naive_delta_hhi": self.naive_delta_hhi, "consumer_surplus_pre": self.consumer_surplus_pre,
            "consumer_surplus_post": self.consumer_surplus_post, "notes": list(self.notes),
        }


def _market_price(ms, outcome) -> float:
    """The market price of a homogeneous good: the lowest price at which something is sold."""
    q, p = np.asarray(outcome.quantities, float), np.asarray(outcome.prices, float)
    sold = q > 0
    return float(p[sold].min()) if sold.any() else float(p.min())


def firm_shares(ms, outcome) -> np.ndarray:
    """Each firm's share of the total quantity sold (inside goods).

    Parameters
    ----------
    ms : MarketSpec
    outcome : Outcome

    Returns
    -------
    ndarray of shape (n_firms,)
        nan when nothing is sold.
    """
    q = ms.firm_sum(np.asarray(outcome.quantities, float))
    tot = q.sum()
    return q / tot if tot > 0 else np.full(ms.n_firms, np.nan)


def merge(market, merger: Merger, prefix: str = "merger") -> MergerResult:
    """Build the post-merger market and solve the static equilibria before and after.

    Parameters
    ----------
    market : Market
        The pre-merger market.
    merger : Merger
    prefix : str
        Key path of the merger in error messages.

    Returns
    -------
    MergerResult
    """

    if not isinstance(merger, Merger):
        raise InputError(prefix, f"must be a Merger, got {type(merger).__name__}")
    ms = market.spec()
    F = ms.n_firms
    mv = merger.validated(F, prefix)
    idx = mv["firms"]
    firm_map, merged, F_post, names_post = _renumbered(F, idx, mv["names"])
    names = mv["names"]
    eff = mv["efficiency"]
    notes = []
    cost = np.asarray(ms.cost, dtype=float).copy()
    d = market.demand

    if ms.homogeneous_good:
        if mv["cost"] is not None:
            c = mv["cost"]
            if isinstance(c, Sequence) and not isinstance(c, str):
                if len(c) != 1:
                    raise InputError(f"{prefix}.cost", f"the merged firm of a homogeneous good has one marginal cost, "
                                                       f"got {len(c)} values")
                c = c[0]
            c_new = Real(0, None).check(f"{prefix}.cost", c)
        else:
            c_new = float(cost[idx].min()) * (1.0 - eff)
        post_cost = np.empty(F_post)
        for i in range(F):
            if i not in idx:
                post_cost[firm_map[i]] = cost[i]
        post_cost[merged] = c_new
        cap = np.asarray(ms.capacity, dtype=float)
        capacity = None
        if market.capacity is not None:
            capacity = np.empty(F_post)
            for i in range(F):
                if i not in idx:
                    capacity[firm_map[i]] = cap[i]
            capacity[merged] = float(cap[idx].sum())
        new_d = d.merge_firms(ms, idx, firm_map, F_post)
        post = Market(new_d, cost=post_cost.tolist(), model=ms.model, n_firms=None,
                      capacity=None if capacity is None else [float(x) for x in capacity], tick=ms.tick)
        cheap = idx[int(np.argmin(cost[idx]))]
        notes.append(f"the merged firm {names_post[merged]} produces at the marginal cost of its lower-cost plant "
                     f"({names[cheap]}, {cost[cheap]:g})" + (f" less an efficiency of {eff:g}" if eff else "")
                     + (f"; stated post-merger cost {c_new:g}" if mv["cost"] is not None else ""))
    else:
        own = np.flatnonzero(np.isin(ms.owner, idx))
        if mv["cost"] is not None:
            c_new = PerFirm(Real(0, None)).check(f"{prefix}.cost", mv["cost"], own.size)
            cost[own] = c_new
        else:
            cost[own] *= 1.0 - eff
        owner_post = firm_map[ms.owner]
        post = Market(d.clone(), cost=cost.tolist(), model=ms.model,
                      capacity=None if market.capacity is None else list(np.asarray(ms.capacity, float)),
                      tick=ms.tick, owner=(owner_post + 1).tolist())
        actions = "prices" if ms.model == "bertrand" else "quantities"
        notes.append(f"the merged firm {names_post[merged]} sets the {actions} of its {own.size} products jointly; "
                     "each product keeps its marginal cost" + (f" less an efficiency of {eff:g}" if eff else "")
                     + ("; stated post-merger costs" if mv["cost"] is not None else ""))
    return _solved(market, post, mv, firm_map, merged, names_post, notes, prefix)


def _renumbered(F: int, idx: list, names: list) -> tuple:
    """The post-merger number of each firm (the merged firm takes the place of the lowest-numbered merging firm),
    the merged firm's number, the number of firms after the merger and their names."""
    keep = idx[0]
    firm_map = np.empty(F, dtype=np.int64)
    nxt = 0
    for i in range(F):
        if i in idx and i != keep:
            continue
        firm_map[i] = nxt
        nxt += 1
    for i in idx:
        firm_map[i] = firm_map[keep]
    merged = int(firm_map[keep])
    names_post = [""] * nxt
    for i in range(F):
        if i not in idx:
            names_post[firm_map[i]] = names[i]
    names_post[merged] = " + ".join(names[i] for i in idx)
    return firm_map, merged, nxt, names_post


def _solved(market, post, mv: dict, firm_map, merged: int, names_post: list, notes: list, prefix: str):
    """Both static equilibria, the shares, HHI and consumer surplus at them, and the merger's result."""
    try:
        post.spec(prefix)
    except InputError as exc:
        raise InputError(f"{prefix}.cost", f"the post-merger market is invalid ({exc})") from None
    ms = market.spec()
    idx, names, cost = mv["firms"], mv["names"], np.asarray(ms.cost, dtype=float)
    pre_nash = static_nash(ms)
    post_ms = post.spec()
    post_nash = static_nash(post_ms)
    sh_pre = firm_shares(ms, pre_nash)
    sh_post = firm_shares(post_ms, post_nash)
    naive = 0.0
    for a in range(len(idx)):
        for b in range(a + 1, len(idx)):
            naive += 2.0 * 10_000.0 * sh_pre[idx[a]] * sh_pre[idx[b]]
    if ms.homogeneous_good and market.capacity is not None:
        cheap = idx[int(np.argmin(cost[idx]))]
        out = float(post_ms.firm_sum(post_nash.quantities)[merged])
        if out > ms.capacity[cheap] * (1 + 1e-12):
            notes.append(f"after the merger {names_post[merged]} produces {out:.6g}, above the capacity "
                         f"{ms.capacity[cheap]:g} of its lower-cost plant: one constant marginal cost understates its "
                         "cost for the excess output")
    cs_pre = float(ms.consumer_surplus(np.asarray(pre_nash.actions)[None, :])[0])
    cs_post = float(post_ms.consumer_surplus(np.asarray(post_nash.actions)[None, :])[0])
    return MergerResult(
        pre=market, post=post, names_pre=list(names), names_post=names_post, firm_map=firm_map, merged=merged,
        merging=list(idx), efficiency=mv["efficiency"], pre_nash=pre_nash, post_nash=post_nash, shares_pre=sh_pre,
        shares_post=sh_post, hhi_pre=hhi(sh_pre), hhi_post=hhi(sh_post), naive_delta_hhi=float(naive),
        consumer_surplus_pre=cs_pre, consumer_surplus_post=cs_post, notes=notes,
    )
