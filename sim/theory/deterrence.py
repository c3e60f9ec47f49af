"""What enforcement does to one market: thresholds and fines together, the deterrence frontier, and
the price a cartel keeps under price-dependent detection.

* :func:`enforcement_analysis` -- per firm, the critical discount factor under enforcement beside plain
  grim trigger, the expected fines (per colluding period and discounted), the expected life of the
  cartel and, at a given ``delta``, the deterrence fine (see :mod:`sim.theory.enforcement`).
* :func:`deterrence_frontier` -- over a grid of detection rates and fines: the critical discount
  factor at each pair, whether collusion is sustainable at a given ``delta`` and the sustainability
  boundary (the deterrence fine at each detection rate).
* :func:`enforced_partial_collusion` -- the most profitable profile on the path from static Nash to
  the agreement that enforcement leaves sustainable at ``delta``. With a detection rate that rises with
  the price, lowering the price lowers the chance of detection as well as the gain from cheating
  (the mechanism of Block, Nold and Sidak, 1981, "The deterrent effect of antitrust enforcement", JPE
  89(3) -- from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..core.errors import InputError
from ..core.params import Integer
from ..core.text import CAUTION
from ..models.market import Market, MarketSpec
from .enforcement import (
    Enforcement,
    _check_delta,
    _floats,
    _none,
    deterrence_fine,
    discounted_fines,
    enforcement_terms,
    enforcement_threshold,
)
from .equilibrium import StageGame, stage_game
from .stage_profits import StageProfits, path_point, stage_profits
from .thresholds import grim_threshold

__all__ = [
    "DeterrenceFrontier",
    "EnforcedCollusion",
    "EnforcementAnalysis",
    "deterrence_frontier",
    "enforced_partial_collusion",
    "enforcement_analysis",
]


def _market_level(per_firm: np.ndarray) -> tuple[float, int]:
    if np.any(np.isnan(per_firm)):
        return math.nan, int(np.flatnonzero(np.isnan(per_firm))[0])
    k = int(np.argmax(per_firm))
    return float(per_firm[k]), k


@dataclass(frozen=True, eq=False)
class EnforcementAnalysis:
    """Collusion under one enforcement regime.

    Attributes
    ----------
    enforcement : Enforcement
    profits : StageProfits
    detection_rate, conviction_rate : float
    firms_report : bool
    per_firm : ndarray of shape (n_firms,)
        Critical discount factors under enforcement (``nan``: not sustainable below one).
    market : float
        The largest per-firm threshold (``nan`` if any firm cannot be held).
    binding : int
        Index (0-based) of the binding firm.
    grim : ndarray of shape (n_firms,)
        Grim-trigger thresholds without enforcement, for comparison.
    expected_fine : ndarray of shape (n_firms,)
        Expected fine per colluding period.
    expected_spell : float
        Expected number of colluding periods up to and including the conviction (``inf`` if never).
    collusion_share : float
        Long-run share of periods in collusion when collusion is sustained.
    delta : float or None
        The discount factor of the rows below (None when not asked).
    discounted_fines, deterrence_fine : ndarray of shape (n_firms,) or None
    market_deterrence_fine : float or None
        The smallest per-firm deterrence fine (collusion fails when any firm's constraint fails).
    """

    enforcement: Enforcement
    profits: StageProfits
    detection_rate: float
    conviction_rate: float
    firms_report: bool
    per_firm: np.ndarray
    market: float
    binding: int
    grim: np.ndarray
    expected_fine: np.ndarray
    expected_spell: float
    collusion_share: float
    delta: float | None = None
    discounted_fines: np.ndarray | None = None
    deterrence_fine: np.ndarray | None = None
    market_deterrence_fine: float | None = None

    @property
    def sustainable(self) -> bool | None:
        """Whether collusion is sustainable at ``delta`` (None without a delta)."""
        if self.delta is None:
            return None
        return bool(math.isfinite(self.market) and self.delta >= self.market)

    def to_dict(self) -> dict:
        """Plain-JSON form; ``None`` stands for ``nan`` in thresholds and for ``inf`` in fines and spells.

        Returns
        -------
        dict
        """
        opt = (lambda a: None if a is None else [_none(x) for x in a])  # noqa: E731
        return {
            "enforcement": self.enforcement.to_dict(), "profits": self.profits.to_dict(),
            "detection_rate": self.detection_rate, "conviction_rate": self.conviction_rate,
            "firms_report": self.firms_report, "per_firm": [_none(x) for x in self.per_firm],
            "market": _none(self.market), "binding_firm": self.binding + 1,
            "grim": [_none(x) for x in self.grim], "expected_fine": self.expected_fine.tolist(),
            "expected_spell": _none(self.expected_spell), "collusion_share": self.collusion_share,
            "delta": self.delta, "discounted_fines": opt(self.discounted_fines),
            "deterrence_fine": opt(self.deterrence_fine),
            "market_deterrence_fine": _none(self.market_deterrence_fine),
            "sustainable": self.sustainable, "caution": CAUTION,
        }

    @classmethod
    def from_dict(cls, d: dict) -> EnforcementAnalysis:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        EnforcementAnalysis
        """
        opt = (lambda a: None if a is None else _floats(a, math.inf))  # noqa: E731
        mdf = d["market_deterrence_fine"]
        return cls(
            Enforcement.from_dict(d["enforcement"]), StageProfits.from_dict(d["profits"]), d["detection_rate"],
            d["conviction_rate"], d["firms_report"], _floats(d["per_firm"], math.nan),
            math.nan if d["market"] is None else d["market"], d["binding_firm"] - 1, _floats(d["grim"], math.nan),
            np.asarray(d["expected_fine"], dtype=float),
            math.inf if d["expected_spell"] is None else d["expected_spell"], d["collusion_share"], d["delta"],
            opt(d["discounted_fines"]), opt(d["deterrence_fine"]),
            None if d["delta"] is None else (math.inf if mdf is None else mdf),
        )


def _spell_and_share(q: float, T: int | None) -> tuple[float, float]:
    if q <= 0.0:
        return math.inf, 1.0
    if T is None:
        return 1.0 / q, 0.0
    # renewal cycle: a collusive spell of mean 1/q periods, then T periods of competition
    return 1.0 / q, 1.0 / (1.0 + q * T)


def enforcement_analysis(source, enforcement: Enforcement, delta: float | None = None,
                         agreement: str = "joint") -> EnforcementAnalysis:
    """Thresholds, expected fines and (at ``delta``) deterrence fines of one agreement.

    Parameters
    ----------
    source : StageProfits, StageGame, Market or dict
    enforcement : Enforcement
    delta : float in (0, 1), optional
    agreement : str
        The agreement when ``source`` is a market.

    Returns
    -------
    EnforcementAnalysis
    """
    sp = stage_profits(source, agreement)
    t = enforcement_terms(sp, enforcement)
    per_firm = enforcement_threshold(sp, enforcement)
    market, binding = _market_level(per_firm)
    spell, share = _spell_and_share(t.conviction_rate, t.after_detection)
    extra = {}
    if delta is not None:
        delta = _check_delta(delta)
        dfine = deterrence_fine(sp, enforcement, delta)
        extra = {"delta": delta, "discounted_fines": discounted_fines(sp, enforcement, delta),
                 "deterrence_fine": dfine, "market_deterrence_fine": float(dfine.min())}
    return EnforcementAnalysis(
        enforcement, sp, t.detection_rate, t.conviction_rate, t.firms_report, per_firm, market, binding,
        grim_threshold(sp.collusive, sp.deviation, sp.nash), t.expected_fine, spell, share, **extra,
    )


def _grid(key: str, values, low: float, high: float) -> np.ndarray:
    try:
        x = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise InputError(key, f"must be a list of numbers, got {values!r}") from None
    if x.ndim != 1 or x.size == 0:
        raise InputError(key, f"must be a non-empty list of numbers, got {values!r}")
    bad = np.flatnonzero(~((x >= low) & (x <= high)))
    if bad.size:
        raise InputError(key, f"each value must be in [{low:g}, {high:g}], got {x[bad[0]]!r}")
    return x


@dataclass(frozen=True, eq=False)
class DeterrenceFrontier:
    """Sustainability of collusion over a grid of detection rates and fines.

    Attributes
    ----------
    enforcement : Enforcement
        The regime whose detection and fine the grid replaces (its other fields apply throughout).
    profits : StageProfits
    delta : float
    detection : ndarray of shape (n_rates,)
    fines : ndarray of shape (n_fines,)
    thresholds : ndarray of shape (n_rates, n_fines)
        The market's critical discount factor at each pair (``nan``: not sustainable below one).
    sustainable : ndarray of bool, shape (n_rates, n_fines)
        Collusion sustainable at ``delta``.
    boundary : ndarray of shape (n_rates,)
        The market's deterrence fine at each rate: collusion is sustainable at ``delta`` for fines up
        to it and not above (``inf``: no fine deters; 0: collusion fails without a fine).
    boundary_per_firm : ndarray of shape (n_rates, n_firms)
    """

    enforcement: Enforcement
    profits: StageProfits
    delta: float
    detection: np.ndarray
    fines: np.ndarray
    thresholds: np.ndarray
    sustainable: np.ndarray
    boundary: np.ndarray
    boundary_per_firm: np.ndarray

    def to_dict(self) -> dict:
        """Plain-JSON form; ``None`` is ``nan`` in thresholds and ``inf`` in the boundary.

        Returns
        -------
        dict
        """
        return {
            "enforcement": self.enforcement.to_dict(), "profits": self.profits.to_dict(), "delta": self.delta,
            "detection": self.detection.tolist(), "fines": self.fines.tolist(),
            "thresholds": [[_none(x) for x in row] for row in self.thresholds],
            "sustainable": self.sustainable.tolist(),
            "boundary": [_none(x) for x in self.boundary],
            "boundary_per_firm": [[_none(x) for x in row] for row in self.boundary_per_firm],
            "caution": CAUTION,
        }

    @classmethod
    def from_dict(cls, d: dict) -> DeterrenceFrontier:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        DeterrenceFrontier
        """
        return cls(
            Enforcement.from_dict(d["enforcement"]), StageProfits.from_dict(d["profits"]), d["delta"],
            np.asarray(d["detection"], dtype=float), np.asarray(d["fines"], dtype=float),
            np.array([_floats(r, math.nan) for r in d["thresholds"]]), np.asarray(d["sustainable"], dtype=bool),
            _floats(d["boundary"], math.inf), np.array([_floats(r, math.inf) for r in d["boundary_per_firm"]]),
        )


def deterrence_frontier(source, enforcement: Enforcement, delta: float, detection, fines,
                        agreement: str = "joint") -> DeterrenceFrontier:
    """Critical discount factors and sustainability over a grid of detection rates and fines.

    Parameters
    ----------
    source : StageProfits, StageGame, Market or dict
    enforcement : Enforcement
        Template regime: each grid cell replaces its ``detection`` (a number, even where the template
        has a price table) and ``fine``.
    delta : float in (0, 1)
    detection : array_like of shape (n_rates,)
        Detection rates in [0, 1].
    fines : array_like of shape (n_fines,)
        Fines (>= 0), in the units of the template's ``fine_basis``.
    agreement : str
        The agreement when ``source`` is a market.

    Returns
    -------
    DeterrenceFrontier
    """
    delta = _check_delta(delta)
    rates = _grid("enforcement.detection", detection, 0.0, 1.0)
    fs = _grid("enforcement.fine", fines, 0.0, 1e9)
    sp = stage_profits(source, agreement)
    thr = np.empty((rates.size, fs.size))
    per_firm = np.empty((rates.size, sp.n_firms))
    for r, rho in enumerate(rates):
        per_firm[r] = deterrence_fine(sp, replace(enforcement, detection=float(rho)), delta)
        for j, f in enumerate(fs):
            thr[r, j] = _market_level(enforcement_threshold(sp, replace(enforcement, detection=float(rho),
                                                                          fine=float(f))))[0]
    boundary = per_firm.min(axis=1)
    sustainable = np.isfinite(thr) & (thr <= delta)
    return DeterrenceFrontier(enforcement, sp, delta, rates, fs, thr, sustainable, boundary, per_firm)


@dataclass(frozen=True, eq=False)
class EnforcedCollusion:
    """The most profitable profile on the Nash-to-agreement path sustainable under enforcement.

    Attributes
    ----------
    delta : float
    weight : float
        Position on the path: 0 is static Nash, 1 the agreement.
    actions : ndarray of shape (n_products,)
    price : float
        Quantity-weighted average price of the profile.
    detection_rate : float
        The detection rate at that price.
    profits : ndarray of shape (n_firms,)
    profit_gain : float
        ``(joint profit - joint Nash) / (joint agreed - joint Nash)``.
    """

    delta: float
    weight: float
    actions: np.ndarray
    price: float
    detection_rate: float
    profits: np.ndarray
    profit_gain: float

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        return {"delta": self.delta, "weight": self.weight, "actions": self.actions.tolist(), "price": self.price,
                "detection_rate": self.detection_rate, "profits": self.profits.tolist(),
                "profit_gain": _none(self.profit_gain)}

    @classmethod
    def from_dict(cls, d: dict) -> EnforcedCollusion:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        EnforcedCollusion
        """
        return cls(d["delta"], d["weight"], np.asarray(d["actions"], dtype=float), d["price"],
                   d["detection_rate"], np.asarray(d["profits"], dtype=float),
                   math.nan if d["profit_gain"] is None else d["profit_gain"])


def enforced_partial_collusion(market, enforcement: Enforcement, delta: float, agreement: str = "joint",
                               stage: StageGame | None = None, n_grid: int = 21) -> EnforcedCollusion:
    """Most profitable profile on the path ``a_N + w (a_C - a_N)`` that enforcement leaves sustainable.

    Parameters
    ----------
    market : Market or MarketSpec
    enforcement : Enforcement
    delta : float in (0, 1)
    agreement : str
    stage : StageGame, optional
        The solved stage game (solved here when omitted).
    n_grid : int
        Points of the coarse grid over ``w`` before bisection on the sustainability boundary.

    Returns
    -------
    EnforcedCollusion

    Notes
    -----
    Like :func:`sim.theory.thresholds.partial_collusion`: the best grid point, then 50 bisection steps
    between it and the next (unsustainable) grid point.
    """
    delta = _check_delta(delta)
    n_grid = Integer(3, 10_001).check("n_grid", n_grid)
    if not isinstance(market, Market | MarketSpec):
        raise InputError("market", f"must be a market, got {type(market).__name__}")
    st = stage if stage is not None else stage_game(market, agreement)
    points = {}

    def point(w):
        if w not in points:
            points[w] = path_point(st, w)
        return points[w]

    def sustained(w):
        if w == 0.0:
            return True
        t = _market_level(enforcement_threshold(point(w).profits, enforcement))[0]
        return bool(math.isfinite(t) and t <= delta)

    ws = np.linspace(0.0, 1.0, n_grid)
    ok = np.array([sustained(float(w)) for w in ws])
    joint = np.array([point(float(w)).profits.collusive.sum() for w in ws])
    cand = np.flatnonzero(ok)
    b = int(cand[np.argmax(joint[cand])])
    w = float(ws[b])
    if b + 1 < n_grid and not ok[b + 1]:
        lo, hi = float(ws[b]), float(ws[b + 1])
        for _ in range(50):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if sustained(mid) else (lo, mid)
        w = lo
    if w <= 1e-9:  # indistinguishable from static Nash at double precision
        w = 0.0
    pt = point(w)
    joint_n, joint_c = st.nash.firm_profits.sum(), st.collusive.firm_profits.sum()
    gain = (pt.profits.collusive.sum() - joint_n) / (joint_c - joint_n) if joint_c > joint_n else math.nan
    rho = enforcement_terms(pt.profits, enforcement).detection_rate
    return EnforcedCollusion(delta, w, pt.actions, pt.profits.price, rho, pt.profits.collusive, float(gain))
