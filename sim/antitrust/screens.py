"""Concentration screens, the change in the critical discount factor of every two-firm merger, and
the maverick.

HHI. ``10000 * sum s_i^2`` with shares as fractions; the change a merger brings, computed at
pre-merger shares, is ``2 * 10000 * sum over pairs of merging firms of s_i s_j``.

EU screens: Guidelines on the assessment of horizontal mergers, OJ C 31, 5.2.2004 (from memory; the
guidelines' title page, OJ reference and paragraph numbering were read, the thresholds below were
corroborated by a published summary of them):

* paragraph 19: a post-merger HHI below 1000 -- the Commission is unlikely to find horizontal
  competition concerns;
* paragraph 20: a post-merger HHI between 1000 and 2000 with a change below 250, or above 2000 with a
  change below 150 -- likewise unlikely, except in special circumstances the paragraph lists (among
  them a merging firm that is a maverick likely to disrupt coordination, past or ongoing
  coordination, and a merging firm with a pre-merger share of 50 % or more);
* paragraph 21: these levels are initial indicators of the absence of concerns; they create no
  presumption either way.

US screens: Merger Guidelines, U.S. Department of Justice and Federal Trade Commission, 2023,
section 2.1 (Guideline 1, "Mergers Raise a Presumption of Illegality When They Significantly
Increase Concentration in a Highly Concentrated Market"; the section's opening was read): a market
with an HHI above 1,800 is highly concentrated and a change above 100 is a significant increase; a
merger that does both, or that creates a firm with a share above 30 % with a change above 100, is
presumed to lessen competition substantially (thresholds from memory, corroborated by the agencies'
HHI page, which also calls 1,000 to 1,800 moderately concentrated).

These screens are structural indicators, not findings; the applicable law and qualified
practitioners decide what they mean in a case.

Pairs and the maverick. For every pair of firms the market is merged (capacities summed in the
capacity model; :func:`sim.merger.merge` otherwise) and the grim-trigger critical discount factor
recomputed; the table holds the change. In the capacity model a market whose total capacity does not
exceed demand at the agreed price needs no collusion (every firm sells its capacity): its threshold
counts as 0. The maverick is the firm whose presence raises the market's
threshold the most: the threshold with every firm minus the threshold without it. The reason names
what differs about it: its cost, its capacity, or its product's position (the demand's per-firm
parameters: intercepts, qualities), against the average of the others.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from sim.antitrust.merger import Merger, merge
from sim.antitrust.result import CautionedTable
from sim.core.errors import InputError
from sim.core.params import PerFirm, optional
from sim.core.text import CAUTION
from sim.theory.equilibrium import stage_game
from sim.theory.thresholds import grim_threshold

__all__ = ["ConcentrationScreen", "Maverick", "PairTable", "concentration_screen", "hhi", "hhi_change", "maverick",
           "pair_thresholds"]


def _shares(shares, key: str = "shares") -> np.ndarray:
    s = np.asarray(shares, dtype=float) if not isinstance(shares, str) else np.array([np.nan])
    if s.ndim != 1 or s.size < 1 or not np.all(np.isfinite(s)) or np.any(s < 0):
        raise InputError(key, f"must be a list of market shares (fractions in [0, 1]), got {shares!r}")
    if s.sum() > 1.0 + 1e-9:
        raise InputError(key, f"shares are fractions that add up to at most 1, got a total of {s.sum():.6g}")
    return s


def hhi(shares) -> float:
    """Herfindahl-Hirschman index ``10000 * sum s_i^2``.

    Parameters
    ----------
    shares : array_like of shape (n_firms,)
        Market shares as fractions (the firms not listed count as atomistic).

    Returns
    -------
    float
        In [0, 10000].
    """
    s = _shares(shares)
    return float(10_000.0 * (s * s).sum())


def hhi_change(shares, merging) -> float:
    """Change in the HHI when firms combine, at pre-merger shares: ``2 * 10000 * sum_{i<j} s_i s_j``
    over the merging firms.

    Parameters
    ----------
    shares : array_like of shape (n_firms,)
        Market shares as fractions.
    merging : sequence of int
        The merging firms (0-based indices).

    Returns
    -------
    float
    """
    s = _shares(shares)
    idx = _merging(merging, s.size)
    return float(10_000.0 * (s[idx].sum() ** 2 - (s[idx] ** 2).sum()))


def _merging(merging, n) -> list:
    idx = sorted(set(int(i) for i in merging))
    if len(idx) < 2 or len(idx) != len(merging) or idx[0] < 0 or idx[-1] >= n:
        raise InputError("merger.firms", f"must list two or more distinct firms (0-based indices below {n}), "
                                         f"got {merging!r}")
    return idx


@dataclass(frozen=True)
class ConcentrationScreen(CautionedTable):
    """A merger against the EU (2004) and US (2023) concentration screens.

    Parameters
    ----------
    hhi_pre, hhi_post, change : float
        HHI before, after (at pre-merger shares, combined share for the merged firm) and the change.
    merged_share : float
        The merged firm's share.
    largest_merging_share : float
        The largest pre-merger share among the merging firms.
    eu_zone : str
        ``"below 1000"`` (paragraph 19), ``"1000-2000, change below 250"`` or ``"above 2000, change
        below 150"`` (paragraph 20) or ``"above the indicators"``.
    eu_safe_harbour : bool
        The merger is within paragraphs 19-20's levels.
    eu_note : str
    us_concentration : str
        ``"highly concentrated"`` (HHI above 1,800), ``"moderately concentrated"`` (1,000 to 1,800) or
        ``"unconcentrated"``.
    us_presumption : bool
        Section 2.1's presumption applies (HHI above 1,800 and change above 100, or a share above 30 %
        and change above 100).
    us_note : str
    """

    hhi_pre: float
    hhi_post: float
    change: float
    merged_share: float
    largest_merging_share: float
    eu_zone: str
    eu_safe_harbour: bool
    eu_note: str
    us_concentration: str
    us_presumption: bool
    us_note: str


def concentration_screen(shares, merging) -> ConcentrationScreen:
    """Place a merger in the EU and US concentration screens (see the module notes).

    Parameters
    ----------
    shares : array_like of shape (n_firms,)
        Pre-merger market shares as fractions.
    merging : sequence of int
        The merging firms (0-based indices).

    Returns
    -------
    ConcentrationScreen
    """
    s = _shares(shares)
    idx = _merging(merging, s.size)
    pre = hhi(s)
    d = hhi_change(s, idx)
    post = pre + d
    ms = float(s[idx].sum())
    big = float(s[idx].max())
    if post < 1000:
        zone, safe = "below 1000", True
    elif post <= 2000 and d < 250:
        zone, safe = "1000-2000, change below 250", True
    elif post > 2000 and d < 150:
        zone, safe = "above 2000, change below 150", True
    else:
        zone, safe = "above the indicators", False
    eu_note = ("EU horizontal merger guidelines (2004), paragraphs 19-21: "
               + ("within the levels at which concerns are unlikely, unless special circumstances apply"
                  if safe else "above the levels at which concerns are unlikely; this is no presumption of harm"))
    if safe and post >= 1000 and big >= 0.5:
        eu_note += "; a merging firm has a pre-merger share of 50 % or more, one of paragraph 20's exceptions"
    conc = "highly concentrated" if post > 1800 else ("moderately concentrated" if post >= 1000 else "unconcentrated")
    presumption = d > 100 and (post > 1800 or ms > 0.30)
    reasons = []
    if d > 100 and post > 1800:
        reasons.append("HHI above 1,800 with a change above 100")
    if d > 100 and ms > 0.30:
        reasons.append("a merged share above 30 % with a change above 100")
    verdict = "structural presumption (" + "; ".join(reasons) + ")" if presumption else "no structural presumption"
    us_note = "US merger guidelines (2023), section 2.1: " + verdict
    return ConcentrationScreen(pre, post, d, ms, big, zone, safe, eu_note, conc, presumption, us_note)


# --------------------------------------------------------------------------------------------------
# Thresholds of merged and reduced markets
# --------------------------------------------------------------------------------------------------


def _grim(market, agreement: str | dict = "joint") -> tuple[float, int]:
    """Market-level grim-trigger threshold and binding firm (nan when a firm cannot be held)."""
    if hasattr(market, "critical_discount_factors"):
        try:
            # a capacity market's agreement is a dict (rule, shares, price); the default rule otherwise
            a = market.critical_discount_factors(**agreement) if isinstance(agreement, dict) else \
                market.critical_discount_factors()
        except InputError as exc:
            # capacities that do not exceed demand: every firm sells its capacity, nothing to sustain
            if exc.key == "market.capacity" and "does not exceed" in exc.message:
                return 0.0, int(np.argmax(market.spec().capacity))
            raise
        return float(a.grim_market), int(a.grim_binding)
    st = stage_game(market, agreement)
    per = grim_threshold(st.collusive.firm_profits, st.deviation_profits, st.nash.firm_profits)
    if np.any(np.isnan(per)):
        return math.nan, int(np.flatnonzero(np.isnan(per))[0])
    k = int(np.argmax(per))
    return float(per[k]), k


def _names(market, names):
    if names is not None:
        return list(names)
    if hasattr(market, "critical_discount_factors"):
        return list(market.spec().names)
    return [f"Firm {i + 1}" for i in range(market.spec().n_firms)]


def _merged(market, i: int, j: int):
    if hasattr(market, "merge"):
        return market.merge([i + 1, j + 1])
    return merge(market, Merger(firms=[i + 1, j + 1])).post


@dataclass(frozen=True)
class PairTable:
    """The grim-trigger threshold after every two-firm merger.

    Parameters
    ----------
    names : tuple of str
    before : float
        Market threshold without a merger.
    after : ndarray of shape (n_firms, n_firms)
        Threshold after firms i and j merge (symmetric, ``nan`` on the diagonal and where some firm
        cannot be held).
    change : ndarray of shape (n_firms, n_firms)
        ``after - before`` (negative: the merger makes coordination easier).
    binding_after : list of list of str
        Binding firm after each merger (``""`` on the diagonal).
    """

    names: tuple
    before: float
    after: np.ndarray
    change: np.ndarray
    binding_after: list

    def rows(self) -> list[dict]:
        """One row per pair.

        Returns
        -------
        list of dict
            ``firms``, ``after``, ``change``, ``binding_after``.
        """
        n = len(self.names)
        return [{"firms": [self.names[i], self.names[j]], "after": _num(self.after[i, j]),
                 "change": _num(self.change[i, j]), "binding_after": self.binding_after[i][j]}
                for i in range(n) for j in range(i + 1, n)]

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {"names": list(self.names), "before": _num(self.before),
                "after": [[_num(x) for x in r] for r in self.after],
                "change": [[_num(x) for x in r] for r in self.change], "binding_after": self.binding_after,
                "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> PairTable:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        PairTable
        """
        arr = lambda a: np.array([[math.nan if x is None else x for x in r] for r in a], float)  # noqa: E731
        return cls(tuple(d["names"]), math.nan if d["before"] is None else float(d["before"]), arr(d["after"]),
                   arr(d["change"]), [list(r) for r in d["binding_after"]])


def _num(x: float):
    return None if not math.isfinite(x) else float(x)


def pair_thresholds(market, names=None, agreement: str | dict = "joint") -> PairTable:
    """Change in the grim-trigger critical discount factor if each pair of firms merged.

    Parameters
    ----------
    market : Market or CapacityPricing
        At least three firms (two remain after a merger).
    names : list of str, optional
    agreement : str or dict
        The collusive agreement of a :class:`~sim.market.Market` (see
        :func:`sim.equilibrium.collusive_outcome`); for the capacity model, the keyword arguments of its
        ``critical_discount_factors`` (``rule``, ``price``; default: shares proportional to capacity).

    Returns
    -------
    PairTable
    """
    n = market.spec().n_firms
    if n < 3:
        raise InputError("market.n_firms", f"a two-firm merger leaves a monopoly in a market of {n} firms; "
                                           "the pair table needs three or more")
    nm = _names(market, names)
    before, _ = _grim(market, agreement)
    after = np.full((n, n), np.nan)
    bind = [[""] * n for _ in range(n)]
    for i in range(n):
        for j in range(i + 1, n):
            post = _merged(market, i, j)
            t, b = _grim(post, agreement)
            post_names = [nm[k] for k in range(n) if k != j]
            post_names[i] = f"{nm[i]} + {nm[j]}"
            after[i, j] = after[j, i] = t
            bind[i][j] = bind[j][i] = post_names[b]
    return PairTable(tuple(nm), before, after, after - before, bind)


# --------------------------------------------------------------------------------------------------
# The maverick
# --------------------------------------------------------------------------------------------------


def _without(market, i: int):
    """The market without firm ``i``: every per-firm parameter (found from the constraint tables)
    loses its i-th entry."""
    if hasattr(market, "move_capacity"):
        s = market.spec()
        keep = [k for k in range(s.n_firms) if k != i]
        return market.clone(capacity=s.capacity[keep].tolist(), names=[s.names[k] for k in keep])
    ms = market.spec()
    if ms.multi_product:
        raise InputError("market.owner", "the maverick analysis is computed for single-product firms")

    def drop(obj):
        changes = {}
        for name, cons in obj._constraints.items():
            inner = cons.inner if isinstance(cons, optional) else cons
            v = getattr(obj, name)
            if isinstance(inner, PerFirm) and isinstance(v, list | tuple | np.ndarray):
                changes[name] = [x for k, x in enumerate(list(v)) if k != i]
        return changes

    d_changes = drop(market.demand)
    m_changes = drop(market)
    if market.n_firms is not None:
        m_changes["n_firms"] = market.n_firms - 1
    return market.clone(demand=market.demand.clone(**d_changes), **m_changes)


def _attributes(market) -> dict:
    """Per-firm attributes that can make a firm different: cost, capacity, product position."""
    out = {}
    if hasattr(market, "move_capacity"):
        out["capacity"] = market.spec().capacity.copy()
        return out
    ms = market.spec()
    if not np.all(ms.cost == ms.cost[0]):
        out["cost"] = ms.cost.copy()
    if np.any(np.isfinite(ms.capacity)) and not np.all(ms.capacity == ms.capacity[0]):
        out["capacity"] = ms.capacity.copy()
    if not ms.demand.homogeneous and not np.all(ms.demand.vector == ms.demand.vector[0]):
        out["product position"] = ms.demand.vector.copy()
    return out


@dataclass(frozen=True)
class Maverick:
    """The firm whose presence raises the market's critical discount factor the most.

    Parameters
    ----------
    names : tuple of str
    threshold : float
        Grim-trigger threshold with every firm.
    without : ndarray of shape (n_firms,)
        Threshold without each firm.
    presence : ndarray of shape (n_firms,)
        ``threshold - without``: how much each firm's presence raises the threshold (``nan``
        thresholds counted as 1).
    firm : int
        Index of the maverick (-1 when no firm's presence raises the threshold).
    reason : str
        What differs about it.
    notes : tuple of str
    """

    names: tuple
    threshold: float
    without: np.ndarray
    presence: np.ndarray
    firm: int
    reason: str = ""
    notes: tuple = field(default_factory=tuple)

    def to_dict(self) -> dict:
        """Plain JSON-ready form (lists; ``nan`` as null where a value can be undefined).

        Returns
        -------
        dict
        """
        return {"names": list(self.names), "threshold": _num(self.threshold),
                "without": [_num(x) for x in self.without], "presence": [_num(x) for x in self.presence],
                "firm": self.firm, "reason": self.reason, "notes": list(self.notes), "caution": CAUTION}

    @classmethod
    def from_dict(cls, d: dict) -> Maverick:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict
            A table written by :meth:`to_dict` (its ``caution`` entry, if any, is ignored).

        Returns
        -------
        Maverick
        """
        arr = lambda a: np.array([math.nan if x is None else x for x in a], float)  # noqa: E731
        return cls(tuple(d["names"]), math.nan if d["threshold"] is None else float(d["threshold"]),
                   arr(d["without"]), arr(d["presence"]), int(d["firm"]), d["reason"], tuple(d["notes"]))


def maverick(market, names=None, agreement: str | dict = "joint") -> Maverick:
    """Find the maverick and say what differs about it.

    A threshold that no discount factor below one reaches counts as 1 in the comparison (the firm's
    presence makes collusion impossible rather than harder).

    Parameters
    ----------
    market : Market or CapacityPricing
        At least three firms.
    names : list of str, optional
    agreement : str or dict
        The collusive agreement of a :class:`~sim.market.Market`, or for the capacity model the keyword
        arguments of its ``critical_discount_factors``.

    Returns
    -------
    Maverick
    """
    n = market.spec().n_firms
    if n < 3:
        raise InputError("market.n_firms", f"removing a firm from {n} firms leaves a monopoly; the maverick "
                                           "analysis needs three or more")
    nm = _names(market, names)
    base, binding = _grim(market, agreement)
    without = np.array([_grim(_without(market, i), agreement)[0] for i in range(n)])
    presence = np.nan_to_num(base, nan=1.0) - np.nan_to_num(without, nan=1.0)
    if not np.any(np.isfinite(presence)) or np.nanmax(presence) <= 0:
        return Maverick(tuple(nm), base, without, presence, -1, "no firm's presence raises the threshold")
    k = int(np.nanargmax(presence))
    top = presence[k]
    ties = np.flatnonzero(np.abs(presence - top) <= 1e-9 * max(1.0, abs(top)))
    if ties.size == n:
        # identical firms (or identical roles): every presence raises the threshold alike; none is a maverick
        return Maverick(tuple(nm), base, without, presence, -1,
                        f"every firm's presence raises the threshold by the same {top:.4g}; no firm stands out")
    if ties.size > 1:
        who = ", ".join(nm[t] for t in ties[:-1]) + f" and {nm[ties[-1]]}"
        return Maverick(tuple(nm), base, without, presence, k,
                        f"{who} each raise the threshold by the same {top:.4g}; none stands out alone")
    return Maverick(tuple(nm), base, without, presence, k, _reason(market, k, nm, binding))


def _reason(market, k: int, names, binding: int) -> str:
    attrs = _attributes(market)
    parts = []
    for label, values in attrs.items():
        others = np.delete(values, k)
        ref = float(others.mean())
        rel = (values[k] - ref) / abs(ref) if ref != 0 else math.inf
        rank = "the lowest" if values[k] < others.min() else ("the highest" if values[k] > others.max() else None)
        parts.append((abs(rel), label, float(values[k]), ref, rank))
    lead = f"{names[k]}'s presence raises the threshold the most"
    if binding == k:
        lead += "; it is the firm most tempted to cheat (it binds)"
    if not parts or max(p[0] for p in parts) < 1e-9:
        return lead + "; it does not differ from the others in cost, capacity or product position"
    parts.sort(reverse=True)
    _, label, v, ref, rank = parts[0]
    what = f"its {label} {v:g}" + (f" is {rank}" if rank else "") + f" (the others average {ref:g})"
    return f"{lead}: {what}"
