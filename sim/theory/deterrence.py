"""The deterrence frontier, the price a cartel keeps under price-dependent detection, and the
plain-Python reference of detection draws.

* :func:`deterrence_frontier` -- over a grid of detection rates and fines: the critical discount
  factor at each pair, whether collusion is sustainable at a given ``delta`` and the sustainability
  boundary (the deterrence fine at each detection rate).
* :func:`enforced_partial_collusion` -- the most profitable profile on the path from static Nash to
  the agreement that enforcement leaves sustainable at ``delta``. With a detection rate that rises with
  the price, lowering the price lowers the chance of detection as well as the gain from cheating
  (the mechanism of Block, Nold and Sidak, 1981, "The deterrent effect of antitrust enforcement", JPE
  89(3) -- from memory).
* :func:`draw_detection`, :func:`simulate_detections` -- the order in which the simulation draws
  detection events (one uniform per colluding period), for a compiled kernel to reproduce.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .._params import Integer, Real
from .._text import CAUTION
from ..equilibrium import StageGame, stage_game
from ..errors import InputError
from ..market import Market, MarketSpec
from .enforcement import (
    Enforcement,
    _check_delta,
    _floats,
    _market_level,
    _none,
    deterrence_fine,
    enforcement_terms,
    enforcement_threshold,
)
from .stage_profits import StageProfits, path_point, stage_profits

__all__ = [
    "DeterrenceFrontier",
    "EnforcedCollusion",
    "deterrence_frontier",
    "draw_detection",
    "enforced_partial_collusion",
    "simulate_detections",
]


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


@dataclass(frozen=True)
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
        """Plain-JSON form; ``None`` is ``nan`` in thresholds and ``inf`` in the boundary."""
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


@dataclass(frozen=True)
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
        """Plain-JSON form."""
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
    Like :func:`sim.thresholds.partial_collusion`: the best grid point, then 50 bisection steps
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


# --------------------------------------------------------------------------------------------------
# Reference draws (plain Python; the simulation kernel reproduces this order)
# --------------------------------------------------------------------------------------------------


def _uniform(rng) -> float:
    """One uniform draw on [0, 1): ``rng.random()`` of a numpy Generator, or ``next_double()`` of the
    package's own stream twin, so a kernel on either source follows the same order."""
    return float(rng.random()) if hasattr(rng, "random") else float(rng.next_double())


def draw_detection(rng, rho: float) -> bool:
    """Whether a colluding period is detected: one uniform ``u``, detected when ``u < rho``.

    Parameters
    ----------
    rng : numpy.random.Generator or an object with ``next_double()``
    rho : float in [0, 1]

    Returns
    -------
    bool
    """
    return _uniform(rng) < rho


def simulate_detections(rng, n_periods: int, rho: float, after_detection: int | None = None,
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Collusion under the default detection convention, period by period.

    Order of draws: periods in order; in each colluding period exactly one uniform (detection when it
    is below ``rho``); no draw in a period of competition. After a detection the firms compete for
    ``after_detection`` periods (forever when None), then collude again.

    Parameters
    ----------
    rng : numpy.random.Generator or an object with ``next_double()``
    n_periods : int >= 1
    rho : float in [0, 1]
    after_detection : int >= 1 or None

    Returns
    -------
    colluding : ndarray of bool, shape (n_periods,)
    detected : ndarray of bool, shape (n_periods,)
    """
    n_periods = Integer(1, 10**9).check("n_periods", n_periods)
    rho = Real(0, 1).check("enforcement.detection", rho)
    if after_detection is not None:
        after_detection = Integer(1, 10_000_000).check("enforcement.after_detection", after_detection)
    colluding = np.zeros(n_periods, dtype=bool)
    detected = np.zeros(n_periods, dtype=bool)
    wait = 0  # periods of competition left; -1: competition forever
    for t in range(n_periods):
        if wait != 0:
            wait = wait - 1 if wait > 0 else wait
            continue
        colluding[t] = True
        if draw_detection(rng, rho):
            detected[t] = True
            wait = -1 if after_detection is None else after_detection
    return colluding, detected
