"""Partial cartels and a competitive fringe.

A cartel is a subset of two or more firms that coordinates; the others (the fringe) compete.

* Markets of :mod:`sim.market` (quantity or price competition): the cartel acts as one player that
  maximises its members' joint profit and the fringe firms best-respond: a static Nash equilibrium
  between the cartel and the fringe (the partial-cartel equilibrium of Salant, Switzer and Reynolds,
  1983, Quarterly Journal of Economics 98(2), for Cournot; with differentiated products the cartel
  sets its members' prices or quantities jointly, as a multi-product firm). With a homogeneous good
  (linear Cournot) the cartel produces with its cheapest members.
* Capacity-constrained price competition (:class:`sim.models.capacity_pricing.CapacityPricing`): the
  cartel charges a price above a fringe that sells its capacity just below it (Bos and Harrington,
  2010), computed by the model itself.

Members' profits. ``sharing="own"``: each member keeps what its own products earn at the cartel's
actions (capacity model: members sell in proportion to capacity). ``sharing="proportional"``: the
cartel's joint profit is split in proportion to the members' static Nash profits (side payments).

Critical discount factor of a member under grim trigger: ``(pi_D - pi_C) / (pi_D - pi_N)``, where
``pi_D`` is its best one-shot deviation against the cartel outcome and ``pi_N`` its profit in the
static Nash equilibrium without any cartel (the punishment). The cartel's threshold is the largest
member threshold.

Stability at a discount factor ``delta`` (d'Aspremont, Jacquemin, Gabszewicz and Weymark, 1983, "On
the stability of collusive price leadership", Canadian Journal of Economics 16(1), adapted to
collusion sustained by grim trigger as in Bos and Harrington, 2010): a cartel is *sustainable* when
``delta`` is at least every member's threshold; *internally stable* when no member gains by leaving
(it would then earn its fringe profit against the smaller cartel if that one is sustainable, else its
Nash profit); *externally stable* when no outsider gains by joining a larger cartel that would be
sustainable. Stable: all three.

Results are evidence under the stated assumptions, not proof of conduct.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from sim.core.errors import InputError
from sim.core.text import CAUTION
from sim.models.market import Market, MarketSpec
from sim.theory.equilibrium import best_response, collusive_outcome, static_nash
from sim.theory.thresholds import grim_threshold

__all__ = ["SHARING", "CartelTable", "CartelWorry", "cartel_table", "merger_cartel_worry"]

SHARING = ("own", "proportional")
_TOL = 1e-9


@dataclass(frozen=True)
class CartelTable:
    """Outcomes of partial cartels.

    Attributes
    ----------
    names : tuple of str
    members : ndarray of bool, shape (n_cartels, n_firms)
    profits : ndarray of shape (n_cartels, n_firms)
        Every firm's profit with the cartel in place.
    deviation : ndarray of shape (n_cartels, n_firms)
        Members' best one-shot deviation profits (``nan`` for outsiders).
    nash : ndarray of shape (n_firms,)
        Static Nash profits without a cartel (the punishment).
    thresholds : ndarray of shape (n_cartels, n_firms)
        Members' grim-trigger critical discount factors (``nan`` for outsiders and for members that
        no discount factor below one holds).
    requested : ndarray of bool, shape (n_cartels,)
        The cartels asked for (the others are their neighbours, needed for stability).
    sharing : str
    notes : tuple of str
    """

    names: tuple
    members: np.ndarray
    profits: np.ndarray
    deviation: np.ndarray
    nash: np.ndarray
    thresholds: np.ndarray
    requested: np.ndarray
    sharing: str
    notes: tuple = field(default_factory=tuple)

    @property
    def gains(self) -> np.ndarray:
        """Profit with the cartel minus the no-cartel Nash profit, shape (n_cartels, n_firms)."""
        return self.profits - self.nash[None, :]

    @property
    def market_threshold(self) -> np.ndarray:
        """Largest member threshold of each cartel (``nan`` if a member cannot be held), shape (n_cartels,)."""
        t = np.where(self.members, self.thresholds, -np.inf)
        bad = (self.members & np.isnan(self.thresholds)).any(axis=1)
        return np.where(bad, np.nan, t.max(axis=1))

    @property
    def binding(self) -> np.ndarray:
        """Index of the binding member of each cartel, shape (n_cartels,)."""
        t = np.where(self.members, np.nan_to_num(self.thresholds, nan=np.inf), -np.inf)
        return t.argmax(axis=1)

    def row(self, firms) -> int:
        """Row of a cartel in the table.

        Parameters
        ----------
        firms : iterable of int
            Its members (0-based indices).

        Returns
        -------
        int
        """
        key = np.zeros(self.members.shape[1], bool)
        key[list(firms)] = True
        hit = np.flatnonzero((self.members == key).all(axis=1))
        if hit.size == 0:
            raise InputError("cartels", f"the table has no cartel {sorted(firms)}")
        return int(hit[0])

    def sustainable(self, delta: float) -> np.ndarray:
        """Cartels whose every member is held at a discount factor.

        Parameters
        ----------
        delta : float

        Returns
        -------
        ndarray of bool, shape (n_cartels,)
        """
        mt = self.market_threshold
        return np.isfinite(mt) & (mt <= delta + _TOL) & (self.members.sum(axis=1) >= 2)

    def stability(self, delta: float) -> dict:
        """Internal and external stability of every requested cartel at a discount factor.

        Parameters
        ----------
        delta : float

        Returns
        -------
        dict of ndarray of bool, shape (n_requested,)
            ``sustainable``, ``internal``, ``external``, ``stable``; and ``rows`` (their rows).
        """
        ok = self.sustainable(delta)
        index = {tuple(np.flatnonzero(m)): r for r, m in enumerate(self.members)}
        rows = np.flatnonzero(self.requested)
        internal = np.ones(rows.size, bool)
        external = np.ones(rows.size, bool)
        for k, r in enumerate(rows):
            S = set(np.flatnonzero(self.members[r]).tolist())
            for i in S:
                smaller = tuple(sorted(S - {i}))
                out = self.nash[i]
                if len(smaller) >= 2 and ok[index[smaller]]:
                    out = self.profits[index[smaller], i]
                if self.profits[r, i] < out - _TOL * max(1.0, abs(out)):
                    internal[k] = False
            for j in set(range(self.members.shape[1])) - S:
                larger = tuple(sorted(S | {j}))
                if ok[index[larger]] and self.profits[index[larger], j] > self.profits[r, j] + _TOL * max(
                        1.0, abs(self.profits[r, j])):
                    external[k] = False
        sus = ok[rows]
        return {"rows": rows, "sustainable": sus, "internal": internal, "external": external,
                "stable": sus & internal & external}

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        none = lambda a: [[None if not math.isfinite(x) else float(x) for x in r] for r in a]  # noqa: E731
        return {"names": list(self.names), "members": self.members.tolist(), "profits": self.profits.tolist(),
                "deviation": none(self.deviation), "nash": self.nash.tolist(), "thresholds": none(self.thresholds),
                "requested": self.requested.tolist(), "sharing": self.sharing, "notes": list(self.notes),
                "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> CartelTable:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        CartelTable
        """
        nan = lambda a: np.array([[math.nan if x is None else x for x in r] for r in a], float)  # noqa: E731
        return cls(tuple(d["names"]), np.asarray(d["members"], bool), np.asarray(d["profits"], float),
                   nan(d["deviation"]), np.asarray(d["nash"], float), nan(d["thresholds"]),
                   np.asarray(d["requested"], bool), d["sharing"], tuple(d["notes"]))


# --------------------------------------------------------------------------------------------------
# Which cartels
# --------------------------------------------------------------------------------------------------


def _subsets(n: int, max_size: int | None, cartels) -> tuple[np.ndarray, np.ndarray]:
    """Requested cartels and their neighbours (one member more or fewer) as boolean rows."""
    if cartels is None:
        top = n if max_size is None else int(max_size)
        if not 2 <= top <= n:
            raise InputError("cartels.max_size", f"must be an integer in [2, {n}], got {max_size!r}")
        req = [c for size in range(2, top + 1) for c in itertools.combinations(range(n), size)]
    else:
        req = []
        for k, c in enumerate(cartels):
            idx = sorted(set(int(i) for i in c)) if not isinstance(c, str) else []
            if len(idx) < 2 or len(idx) != len(c) or idx[0] < 0 or idx[-1] >= n:
                raise InputError(f"cartels[{k + 1}]", f"must list two or more distinct firms (0-based indices below "
                                                      f"{n}), got {c!r}")
            req.append(tuple(idx))
    need = set(req)
    for c in req:
        s = set(c)
        need |= {tuple(sorted(s - {i})) for i in s if len(s) > 2}
        need |= {tuple(sorted(s | {j})) for j in range(n) if j not in s}
    order = sorted(need, key=lambda c: (len(c), c))
    members = np.zeros((len(order), n), bool)
    for r, c in enumerate(order):
        members[r, list(c)] = True
    requested = np.array([c in set(req) for c in order])
    return members, requested


# --------------------------------------------------------------------------------------------------
# Outcomes by model
# --------------------------------------------------------------------------------------------------


def _linear_cournot(ms: MarketSpec, members: np.ndarray, sharing: str) -> dict:
    """Closed form for linear homogeneous Cournot, vectorised over cartels: players are the fringe
    firms and the cartel at its cheapest member's cost; ``q_j = (a - (k+1) c_j + sum c) / ((k+1) b)``
    on the set of active players, players with ``q <= 0`` leaving until none does."""
    a, b = float(ms.demand.scalars[0]), float(ms.demand.scalars[1])
    c = ms.cost
    m, n = members.shape
    cm = np.where(members, c[None, :], np.inf)
    cS = cm.min(axis=1)
    cheapest = members & (c[None, :] == cS[:, None])
    lead = np.argmax(cheapest, axis=1)
    player = ~members
    player[np.arange(m), lead] |= members.any(axis=1)
    active = player.copy()
    for _ in range(n + 1):
        k = active.sum(axis=1)
        csum = np.where(active, c, 0.0).sum(axis=1)
        q = np.where(active, (a - (k + 1)[:, None] * c[None, :] + csum[:, None]) / ((k + 1)[:, None] * b), 0.0)
        drop = active & (q <= 0)
        if not drop.any():
            break
        active &= ~drop
    q = np.maximum(q, 0.0)
    QS = np.where(members.any(axis=1), q[np.arange(m), lead], 0.0)
    n_cheap = cheapest.sum(axis=1)
    prod = np.where(members, 0.0, q) + np.where(cheapest, (QS / np.maximum(n_cheap, 1))[:, None], 0.0)
    Q = prod.sum(axis=1)
    P = np.maximum(0.0, a - b * Q)
    own = (P[:, None] - c[None, :]) * prod
    rest = Q[:, None] - prod
    q_br = np.maximum(0.0, (a - c[None, :] - b * rest) / (2 * b))
    dev = np.maximum(0.0, a - b * (rest + q_br)) * q_br - c[None, :] * q_br
    return {"own": own, "quantities": prod, "deviation": np.where(members, dev, np.nan)}


def _generic(market, ms: MarketSpec, members: np.ndarray) -> dict:
    """Differentiated products: the cartel is one firm owning its members' products (an owner map)
    and the static Nash equilibrium of that market is solved; deviations are best responses of a
    member's own product in the original market."""
    m, n = members.shape
    own = np.empty((m, n))
    dev = np.full((m, n), np.nan)
    for r in range(m):
        owner = np.empty(n, dtype=int)
        nxt = 1
        first = None
        for i in range(n):
            if members[r, i]:
                if first is None:
                    first = nxt
                    nxt += 1
                owner[i] = first
            else:
                owner[i] = nxt
                nxt += 1
        if members[r].all():  # the grand coalition: the joint-profit maximum
            acts = collusive_outcome(ms, "joint").actions
        else:
            post = Market(market.demand.clone(), cost=ms.cost.tolist(), model=ms.model, owner=owner.tolist())
            acts = static_nash(post.spec()).actions
        own[r] = ms.profits(acts[None, :])[0]
        for i in np.flatnonzero(members[r]):
            dev[r, i] = max(float(best_response(ms, int(i), acts[None, :])[1][0]), own[r, i])
    return {"own": own, "deviation": dev}


def _share(own: np.ndarray, members: np.ndarray, nash: np.ndarray, sharing: str) -> np.ndarray:
    if sharing == "own":
        return own
    joint = np.where(members, own, 0.0).sum(axis=1)
    w = np.where(members, nash[None, :], 0.0)
    tot = w.sum(axis=1)
    w = np.where(tot[:, None] > 0, w, members.astype(float))
    share = w / w.sum(axis=1, keepdims=True)
    return np.where(members, share * joint[:, None], own)


def cartel_table(market, max_size: int | None = None, cartels=None, sharing: str = "own",
                 names=None) -> CartelTable:
    """Outcomes and critical discount factors of partial cartels.

    Parameters
    ----------
    market : Market, MarketSpec or a model with a ``partial_cartels`` method
        Linear homogeneous Cournot (without capacities), differentiated or logit demand, or
        capacity-constrained price competition.
    max_size : int, optional
        Every cartel of 2 to ``max_size`` firms (default: all sizes). Ignored when ``cartels`` is given.
    cartels : list of list of int, optional
        The cartels to study (0-based firm indices).
    sharing : {"own", "proportional"}
    names : list of str, optional

    Returns
    -------
    CartelTable
        Also holds every cartel one member larger or smaller than a requested one (for stability).
    """
    if sharing not in SHARING:
        raise InputError("cartels.sharing", f"must be one of {', '.join(map(repr, SHARING))}, got {sharing!r}")
    notes = []
    if hasattr(market, "partial_cartels"):
        n = market.spec().n_firms
        members, requested = _subsets(n, max_size, cartels)
        out = market.partial_cartels(members, sharing)
        profits, dev, nash = out["profits"], out["deviation"], out["nash"]
        names = names or list(market.spec().names)
        notes.append("capacity-constrained price competition: the cartel prices above a fringe selling its capacity")
    else:
        ms = market if isinstance(market, MarketSpec) else market.spec()
        n = ms.n_firms
        if ms.multi_product:
            raise InputError("market.owner", "partial cartels are computed for single-product firms")
        members, requested = _subsets(n, max_size, cartels)
        nash = ms.firm_profits(static_nash(ms).actions[None, :])[0]
        if ms.demand.linear_homogeneous and ms.quantity_setting:
            if np.any(np.isfinite(ms.capacity)):
                raise InputError("market.capacity", "partial cartels in Cournot competition are computed without "
                                                    "capacities; use the capacity-constrained price model")
            out = _linear_cournot(ms, members, sharing)
            notes.append("linear Cournot: the cartel produces with its cheapest members")
        elif not ms.demand.homogeneous:
            if isinstance(market, MarketSpec):
                raise InputError("market", "give the Market (not its spec) for differentiated products")
            out = _generic(market, ms, members)
        else:
            raise InputError("market.demand", f"partial cartels are available for linear Cournot, differentiated "
                                              f"products and capacity-constrained price competition; not "
                                              f"{ms.demand.kind} {ms.model}")
        profits = _share(out["own"], members, nash, sharing)
        dev = np.where(members, np.maximum(out["deviation"], profits), np.nan)
        names = names or [f"Firm {i + 1}" for i in range(n)]
    thr = np.where(members, grim_threshold(profits, np.nan_to_num(dev, nan=0.0), nash[None, :]), np.nan)
    return CartelTable(tuple(names), members, profits, dev, nash, thr, requested, sharing, tuple(notes))


# --------------------------------------------------------------------------------------------------
# Mergers
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CartelWorry:
    """Which post-merger cartel is the worry.

    Attributes
    ----------
    delta : float
    rows : list of dict
        One per post-merger cartel: ``members`` (names), ``counterpart`` (the same firms before the
        merger, the merged firm's owners in its place), ``threshold_before``, ``threshold_after``,
        ``sustainable_before``, ``sustainable_after``, ``stable_after``, ``joint_gain_after``.
    worry : dict or None
        The row of the post-merger cartel that the merger makes easiest to sustain: a stable cartel
        that was not sustainable before, else the largest fall in threshold; None when no cartel is
        sustainable after the merger.
    explanation : str
    """

    delta: float
    rows: list
    worry: dict | None
    explanation: str

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {"delta": self.delta, "rows": self.rows, "worry": self.worry, "explanation": self.explanation,
                "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> CartelWorry:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        CartelWorry
        """
        return cls(float(d["delta"]), list(d["rows"]), d["worry"], d["explanation"])


def _num(x: float):
    return None if not math.isfinite(x) else float(x)


def merger_cartel_worry(pre, post, firm_map, delta: float, max_size: int | None = None, sharing: str = "own",
                        names_pre=None, names_post=None) -> CartelWorry:
    """Compare partial cartels before and after a merger.

    Parameters
    ----------
    pre, post : market
        Before and after the merger (see :func:`cartel_table`).
    firm_map : array_like of int, shape (n_firms_pre,)
        Post-merger index (0-based) of each pre-merger firm.
    delta : float in (0, 1)
    max_size : int, optional
        Largest post-merger cartel studied.
    sharing : {"own", "proportional"}
    names_pre, names_post : list of str, optional

    Returns
    -------
    CartelWorry
    """
    if isinstance(delta, bool) or not isinstance(delta, int | float) or not 0 < delta < 1:
        raise InputError("run.delta", f"must be a number in (0, 1), got {delta!r}")
    fmap = np.asarray(firm_map, dtype=int)
    post_t = cartel_table(post, max_size=max_size, sharing=sharing, names=names_post)
    rows_post = np.flatnonzero(post_t.requested)
    counterparts = [sorted(np.flatnonzero(np.isin(fmap, np.flatnonzero(post_t.members[r]))).tolist())
                    for r in rows_post]
    pre_t = cartel_table(pre, cartels=counterparts, sharing=sharing, names=names_pre)
    st_post = post_t.stability(delta)
    stable_after = dict(zip(st_post["rows"].tolist(), st_post["stable"].tolist()))
    mt_pre, mt_post = pre_t.market_threshold, post_t.market_threshold
    rows = []
    for r, cp in zip(rows_post, counterparts):
        rp = pre_t.row(cp)
        t0, t1 = float(mt_pre[rp]), float(mt_post[r])
        rows.append({
            "members": [post_t.names[i] for i in np.flatnonzero(post_t.members[r])],
            "counterpart": [pre_t.names[i] for i in cp], "threshold_before": _num(t0), "threshold_after": _num(t1),
            "sustainable_before": bool(math.isfinite(t0) and t0 <= delta),
            "sustainable_after": bool(math.isfinite(t1) and t1 <= delta), "stable_after": bool(stable_after[r]),
            "joint_gain_after": float(np.where(post_t.members[r], post_t.gains[r], 0.0).sum()),
        })
    new = [x for x in rows if x["stable_after"] and not x["sustainable_before"]]
    if new:
        worry = max(new, key=lambda x: (x["joint_gain_after"], -x["threshold_after"]))
        why = (f"the cartel {' + '.join(worry['members'])} is stable at delta = {delta:g} after the merger but its "
               f"counterpart was not sustainable before")
    else:
        fell = [x for x in rows if x["sustainable_after"] and x["threshold_before"] is not None]
        if not fell:
            return CartelWorry(float(delta), rows, None, f"no cartel is sustainable at delta = {delta:g} after the "
                                                         "merger")
        worry = min(fell, key=lambda x: (x["threshold_after"] - x["threshold_before"], -x["joint_gain_after"]))
        why = (f"the cartel {' + '.join(worry['members'])} has the largest fall in its critical discount factor "
               f"({worry['threshold_before']:.4g} -> {worry['threshold_after']:.4g})")
    return CartelWorry(float(delta), rows, worry, why)
