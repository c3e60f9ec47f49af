"""Where to collude when constraints are pooled, and what a merger does to multimarket contact.

* :func:`best_allocation` -- at a discount factor below the common threshold, the firms can still
  collude partly: on each market's path from static Nash to the agreement (weight ``w_m``), the
  weights that maximise the firms' total discounted collusive value subject to every firm's pooled
  constraint (Bernheim and Whinston, 1990). Solved with sequential least squares programming (SLSQP;
  Kraft, 1988, "A software package for sequential quadratic programming", DFVLR-FB 88-28, as
  implemented in :func:`scipy.optimize.minimize`), numerical gradients, from several starting points
  (each market's best standalone weights, which are feasible, and full collusion); the best feasible
  result is kept.
* :func:`merger_contact` -- a merger joins the merging firms' constraints: markets where only one of
  them sold become linked through the merged firm. Given the markets before and the mapping of firm
  names after, it reports the contact between firms before and after and the thresholds before and
  after.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..core.errors import InputError
from ..core.params import Integer
from ..core.text import CAUTION
from ..models.market import Market
from .multimarket import (
    ContactGame,
    ContactMarket,
    PooledThresholds,
    _check_delta,
    _Terms,
    pooled_thresholds,
)

__all__ = ["Allocation", "ContactChange", "best_allocation", "merger_contact"]

_FEAS = 1e-9


@dataclass(frozen=True, eq=False)
class Allocation:
    """The best allocation of collusion across markets at ``delta``.

    Attributes
    ----------
    delta : float
    labels : tuple of str
    weights : ndarray of shape (n_markets,)
        Position on each market's path: 0 static Nash, 1 the agreement.
    standalone_weights : ndarray of shape (n_markets,)
        Each market's largest sustainable weight on its own.
    profits, standalone_profits : ndarray of shape (n_markets,)
        Joint profit per period in each market, pooled and on its own.
    value, standalone_value : float
        The firms' total discounted collusive value net of expected fines (the objective).
    pooled_slack : ndarray of shape (n_firms,)
        Each firm's pooled slack at the solution (>= 0 up to a relative 1e-9).
    success : bool
        Whether the optimiser reported success and its result is feasible.
    method : str
    """

    delta: float
    labels: tuple
    weights: np.ndarray
    standalone_weights: np.ndarray
    profits: np.ndarray
    standalone_profits: np.ndarray
    value: float
    standalone_value: float
    pooled_slack: np.ndarray
    success: bool
    method: str = "SLSQP"

    _ARRAYS = ("weights", "standalone_weights", "profits", "standalone_profits", "pooled_slack")

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        out = {"delta": self.delta, "labels": list(self.labels), "value": self.value,
               "standalone_value": self.standalone_value, "success": self.success, "method": self.method}
        out.update({k: getattr(self, k).tolist() for k in self._ARRAYS})
        out["caution"] = CAUTION
        return out

    @classmethod
    def from_dict(cls, d: dict) -> Allocation:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        Allocation
        """
        a = {k: np.asarray(d[k], dtype=float) for k in cls._ARRAYS}
        return cls(d["delta"], tuple(d["labels"]), a["weights"], a["standalone_weights"], a["profits"],
                   a["standalone_profits"], d["value"], d["standalone_value"], a["pooled_slack"], d["success"],
                   d["method"])


def _standalone_weight(terms: _Terms, m: int, delta: float, n_grid: int) -> float:
    """Largest weight on market ``m``'s path that the market sustains on its own."""
    game = terms.game
    rows = game.presence[:, m]

    def ok(w):
        weights = np.ones(game.n_markets)
        weights[m] = w
        s = terms.slack(delta, weights, pooled=False)[rows, m]
        return bool(np.all(s >= -1e-12 * max(1.0, float(np.abs(terms.at(m, w)[4]).max()))))

    ws = np.linspace(0.0, 1.0, n_grid)
    good = [k for k, w in enumerate(ws) if ok(float(w))]
    if not good:
        return 0.0
    k = good[-1]
    if k == n_grid - 1:
        return 1.0
    lo, hi = float(ws[k]), float(ws[k + 1])
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if ok(mid) else (lo, mid)
    return lo


def best_allocation(game: ContactGame, delta: float, n_grid: int = 21) -> Allocation:
    """Maximise the firms' total discounted collusive value subject to every firm's pooled constraint.

    Parameters
    ----------
    game : ContactGame
    delta : float in (0, 1)
    n_grid : int
        Grid points per market path for the standalone weights (then 50 bisection steps).

    Returns
    -------
    Allocation
    """
    delta = _check_delta(game, delta)
    n_grid = Integer(3, 10_001).check("n_grid", n_grid)
    terms = _Terms(game)
    M = game.n_markets
    beta = np.array([delta * (1.0 + cm.growth) for cm in game.markets])
    scale = max(1.0, max(float(np.abs(terms.at(m, 1.0)[4]).sum()) for m in range(M)))

    def value(w) -> float:
        q = terms.joint_q(w)
        return float(sum(float((terms.at(m, w[m])[4] - terms.at(m, w[m])[1]).sum()) / (1.0 - beta[m] * (1.0 - q))
                         for m in range(M)))

    def pooled(w) -> np.ndarray:
        return terms.slack(delta, np.clip(w, 0.0, 1.0)).sum(axis=1)

    alone = np.array([_standalone_weight(terms, m, delta, n_grid) for m in range(M)])
    best_w, best_v, success = alone.copy(), value(alone), False
    for start in (alone, np.ones(M), 0.5 * (alone + 1.0)):
        res = optimize.minimize(
            lambda w: -value(np.clip(w, 0.0, 1.0)) / scale, start, method="SLSQP", bounds=[(0.0, 1.0)] * M,
            constraints=[{"type": "ineq", "fun": lambda w: pooled(w) / scale}],
            options={"maxiter": 200, "ftol": 1e-12},
        )
        w = np.clip(res.x, 0.0, 1.0)
        # the optimiser stops a tolerance short of a bound the value keeps rising towards
        snapped = np.where(w > 1.0 - 1e-6, 1.0, np.where(w < 1e-9, 0.0, w))
        for cand in (snapped, w):
            if np.all(pooled(cand) >= -_FEAS * scale) and value(cand) > best_v + 1e-12 * scale:
                best_w, best_v, success = cand, value(cand), bool(res.success)
                break
        else:
            if np.allclose(w, best_w, atol=1e-9) and res.success:
                success = True
    joint = lambda w: np.array([float(terms.at(m, w[m])[4].sum()) for m in range(M)])  # noqa: E731
    return Allocation(delta, tuple(cm.label for cm in game.markets), best_w, alone, joint(best_w), joint(alone),
                      best_v, value(alone), pooled(best_w), success)


# --------------------------------------------------------------------------------------------------
# Mergers
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ContactChange:
    """Multimarket contact and thresholds before and after a merger.

    Attributes
    ----------
    mapping : dict
        Firm name before -> firm name after (firms not listed keep their names).
    firms_before, firms_after : tuple of str
    contact_before : ndarray of int, shape (n_before, n_before)
    contact_after : ndarray of int, shape (n_after, n_after)
        Markets shared by each pair of firms.
    added_contact : list of (str, str, int, int)
        Pairs of firms after the merger that meet in more markets than any of their predecessors did:
        ``(firm, rival, most markets shared before, markets shared after)``.
    linked_before, linked_after : ndarray of bool, shape (n_markets, n_markets)
        Markets that share at least one firm.
    before, after : PooledThresholds
    """

    mapping: dict
    firms_before: tuple
    firms_after: tuple
    contact_before: np.ndarray
    contact_after: np.ndarray
    added_contact: list
    linked_before: np.ndarray
    linked_after: np.ndarray
    before: PooledThresholds
    after: PooledThresholds

    @property
    def change(self) -> float:
        """Change of the common threshold (after minus before; negative: collusion easier)."""
        return self.after.common - self.before.common

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        ch = self.change
        return {"mapping": dict(self.mapping), "firms_before": list(self.firms_before),
                "firms_after": list(self.firms_after), "contact_before": self.contact_before.tolist(),
                "contact_after": self.contact_after.tolist(), "added_contact": [list(x) for x in self.added_contact],
                "linked_before": self.linked_before.tolist(), "linked_after": self.linked_after.tolist(),
                "before": self.before.to_dict(), "after": self.after.to_dict(),
                "change": ch if math.isfinite(ch) else None, "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> ContactChange:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        ContactChange
        """
        return cls(dict(d["mapping"]), tuple(d["firms_before"]), tuple(d["firms_after"]),
                   np.asarray(d["contact_before"], dtype=np.int64), np.asarray(d["contact_after"], dtype=np.int64),
                   [tuple(x) for x in d["added_contact"]], np.asarray(d["linked_before"], dtype=bool),
                   np.asarray(d["linked_after"], dtype=bool), PooledThresholds.from_dict(d["before"]),
                   PooledThresholds.from_dict(d["after"]))


def _check_mapping(game: ContactGame, mapping) -> dict:
    key = "merger.mapping"
    if not isinstance(mapping, Mapping) or not mapping:
        raise InputError(key, f"must map firm names before the merger to names after, got {mapping!r}")
    for old, new in mapping.items():
        if old not in game.firms:
            raise InputError(key, f"names {old!r}, which is not among the declared firms ({', '.join(game.firms)})")
        if not isinstance(new, str) or not new.strip():
            raise InputError(key, f"maps {old!r} to {new!r}; give a non-empty firm name")
    full = {f: mapping.get(f, f) for f in game.firms}
    after = list(full.values())
    if len(set(after)) == len(after):
        raise InputError(key, "merges no firms: at least two firms must map to the same name")
    return full


def _after_market(k: int, cm: ContactMarket, full: dict, replacements: Mapping) -> ContactMarket:
    names = [full[f] for f in cm.firms]
    unique = list(dict.fromkeys(names))
    if len(unique) == len(names):
        return ContactMarket(cm.market, tuple(names), cm.growth, cm.enforcement, cm.label)
    merging = [f for f in cm.firms if names.count(full[f]) > 1]
    new = replacements.get(k)
    if not isinstance(new, Market):
        raise InputError(f"merger.markets[{k}]", f"{' and '.join(merging)} both sell in {cm.label}: give the "
                                                 f"post-merger market ({len(unique)} firms: {', '.join(unique)})")
    return ContactMarket(new, tuple(unique), cm.growth, cm.enforcement, cm.label)


def merger_contact(game: ContactGame, mapping: Mapping, replacements: Mapping | None = None) -> ContactChange:
    """Contact and pooled thresholds before and after a merger.

    Parameters
    ----------
    game : ContactGame
        The markets before the merger.
    mapping : mapping of str to str
        Firm name before -> name after; the merging firms map to the same name.
    replacements : mapping of int to Market, optional
        For each market (0-based index) where two merging firms both sell, the market after the merger
        (its firms in order of their first appearance in the market's list, the merged firm in the
        place of the first merging firm, as :func:`sim.antitrust.merger.merge` numbers them).

    Returns
    -------
    ContactChange
    """
    full = _check_mapping(game, mapping)
    replacements = {} if replacements is None else replacements
    if not isinstance(replacements, Mapping):
        raise InputError("merger.markets", f"must map market indices to post-merger markets, got {replacements!r}")
    markets = tuple(_after_market(k, cm, full, replacements) for k, cm in enumerate(game.markets))
    after = ContactGame(tuple(dict.fromkeys(full.values())), markets, game.agreement)
    cb, ca = game.contact(), after.contact()
    added = []
    for a, fa in enumerate(after.firms):
        for b in range(a + 1, after.n_firms):
            fb = after.firms[b]
            olds_a = [game.firms.index(f) for f in game.firms if full[f] == fa]
            olds_b = [game.firms.index(f) for f in game.firms if full[f] == fb]
            before_most = int(max(cb[i, j] for i in olds_a for j in olds_b))
            if ca[a, b] > before_most:
                added.append((fa, fb, before_most, int(ca[a, b])))
    link = lambda g: (g.presence.T.astype(np.int64) @ g.presence.astype(np.int64)) > 0  # noqa: E731
    return ContactChange(dict(full), game.firms, after.firms, cb, ca, added, link(game), link(after),
                         pooled_thresholds(game), pooled_thresholds(after))
