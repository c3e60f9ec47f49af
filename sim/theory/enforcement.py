"""Collusion under antitrust enforcement: detection, fines and leniency in the incentive constraint.

Convention (the default)
------------------------
In every period in which the firms collude, the authority detects the cartel with probability
``rho``, independently across periods. On detection each firm pays the fine ``F`` in that period and
the firms play the static Nash equilibrium forever after. A firm that deviates is not exposed to
detection in its deviation period; after a deviation the firms play static Nash forever (grim
trigger), so there is nothing left to detect.

With ``W`` the value of collusion in excess of static Nash forever (``c = pi_C - pi_N``,
``d = pi_D - pi_N``, per firm),

    W = c - rho F + delta (1 - rho) W,      so    W = (c - rho F) / (1 - delta (1 - rho)),

and the firm keeps the agreement when ``W >= d``, that is when

    delta >= (pi_D - pi_C + rho F) / ((1 - rho) (pi_D - pi_N)).

At ``rho = 0`` this is grim trigger (Friedman, 1971). Detection shortens the expected life of the
cartel and the fine taxes each period of it; both raise the threshold. The same accounting of an
expected fine and a per-period breakdown probability underlies the cartel-deterrence models of Motta
and Polo (2003, "Leniency programs and cartel prosecution", IJIO 21(3)) and Motta (2004, Competition
Policy, ch. 4) -- from memory.

Variants (fields of :class:`Enforcement`)
-----------------------------------------
``fine_basis``
    ``"fixed"``: ``fine`` is an amount per firm. ``"profit"``: ``fine`` is a rate applied to the firm's
    collusive profit of the period. ``"gain"``: a rate applied to its gain over static Nash
    (``pi_C - pi_N``).
``after_detection = T``
    After a detection the firms compete for ``T`` periods, then collusion resumes (and is exposed to
    detection again): ``W = c - e + delta ((1 - q) W + q delta^T W)``.
``detection`` as a :class:`PriceDetection` table
    The detection rate rises with the agreed price (read at the quantity-weighted average price of
    the agreed profile). :func:`sim.theory.deterrence.enforced_partial_collusion` then finds the
    price the cartel keeps to stay sustainable, which may lie below the agreement because a lower
    price is detected less.
``proof``
    An investigation (probability ``rho`` per colluding period) convicts with probability ``proof``
    unless a firm reports; ``proof = 1`` (the default) makes every investigation a conviction.
``leniency = s`` (after Motta and Polo, 2003)
    A firm that reports pays ``s F`` instead of ``F``. When an investigation opens, reporting is
    dominant if ``s < proof``: it costs ``s F`` against ``proof F`` when nobody reports and ``F`` when
    another firm does. The firms then all report, the cartel is convicted for sure (collusion ends with
    probability ``rho`` per period instead of ``rho proof``) and each pays ``s F`` (simultaneous reports
    all receive the reduction: our convention). When ``s >= proof`` the firms stay silent (silence and
    reporting can then both be equilibria; silence is the one the cartel prefers).
``deviator_exposed``
    The deviator is exposed to the investigation of its deviation period (as the deviating firm in
    Motta and Polo's model): it pays ``rho min(proof, s) F`` in expectation, reporting when investigated
    if that is cheaper. Leniency then lowers the cost of cheating as well as that of colluding.

In general, per firm, with ``q`` the per-period probability that collusion ends, ``e`` the expected
fine per colluding period and ``phi`` the deviator's expected fine, the constraint is
``c - e >= (d - phi) k(delta)`` with ``k(delta) = 1 - delta (1 - q + q delta^T)`` (``delta^T = 0``
when competition after detection lasts forever). It is linear in the fine, which gives the
deterrence fine (the fine above which collusion cannot be sustained) in closed form.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..core.errors import InputError
from ..core.params import Boolean, Integer, Options, Real, optional
from ..models.demand import MAX_MAGNITUDE
from .stage_profits import StageProfits, stage_profits

__all__ = [
    "FINE_BASES",
    "Enforcement",
    "EnforcementTerms",
    "PriceDetection",
    "deterrence_fine",
    "discounted_fines",
    "enforcement_terms",
    "enforcement_threshold",
]

FINE_BASES = ("fixed", "profit", "gain")
_TOL = 1e-12


def _none(x):
    return None if x is None or not math.isfinite(x) else float(x)


def _floats(values, missing: float) -> np.ndarray:
    return np.array([missing if v is None else float(v) for v in values], dtype=float)


# --------------------------------------------------------------------------------------------------
# Inputs
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PriceDetection:
    """A detection rate that depends on the agreed price: a table, linear between its points and flat
    beyond its ends.

    Parameters
    ----------
    prices : ndarray of shape (n_points,)
        Strictly increasing prices (at least two).
    rates : ndarray of shape (n_points,)
        Detection probability per colluding period at each price, each in [0, 1].
    """

    prices: np.ndarray
    rates: np.ndarray

    def __post_init__(self):
        key = "enforcement.detection"
        try:
            p = np.asarray(self.prices, dtype=float)
            r = np.asarray(self.rates, dtype=float)
        except (TypeError, ValueError):
            raise InputError(key, "prices and rates must be lists of numbers") from None
        if p.ndim != 1 or p.shape != r.shape or p.size < 2:
            raise InputError(key, f"needs at least two prices and one rate per price, got {p.size} and {r.size}")
        if not (np.all(np.isfinite(p)) and np.all(np.diff(p) > 0)):
            raise InputError(f"{key}.prices", f"must be finite and strictly increasing, got {p.tolist()}")
        bad = np.flatnonzero(~((r >= 0) & (r <= 1)))
        if bad.size:
            raise InputError(f"{key}.rates", f"each rate must be a probability in [0, 1], got {r[bad[0]]!r}")
        object.__setattr__(self, "prices", p)
        object.__setattr__(self, "rates", r)

    def __eq__(self, other) -> bool:
        return (isinstance(other, PriceDetection) and np.array_equal(self.prices, other.prices)
                and np.array_equal(self.rates, other.rates))

    __hash__ = None

    def rate(self, price):
        """Detection probability at a price.

        Parameters
        ----------
        price : float or ndarray of any shape

        Returns
        -------
        float or ndarray of the shape of ``price``
        """
        return np.interp(price, self.prices, self.rates)

    @classmethod
    def from_function(cls, func, prices) -> PriceDetection:
        """Tabulate a function of the price at the given points.

        Parameters
        ----------
        func : callable
            ``func(price) -> probability``.
        prices : array_like of shape (n_points,)

        Returns
        -------
        PriceDetection
        """
        p = np.asarray(prices, dtype=float)
        return cls(p, np.array([float(func(x)) for x in p]))

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        return {"prices": self.prices.tolist(), "rates": self.rates.tolist()}

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "enforcement.detection") -> PriceDetection:
        """Inverse of :meth:`to_dict`, naming errors under ``prefix``.

        Parameters
        ----------
        d : dict
        prefix : str

        Returns
        -------
        PriceDetection
        """
        if not isinstance(d, dict) or set(d) != {"prices", "rates"}:
            raise InputError(prefix, f"must be a number in [0, 1] or a table with prices and rates, got {d!r}")
        try:
            return cls(d["prices"], d["rates"])
        except InputError as e:
            raise InputError(prefix + e.key[len("enforcement.detection"):], e.message) from None


@dataclass(frozen=True)
class Enforcement:
    """How an authority detects and fines collusion (see the module notes for the conventions).

    Parameters
    ----------
    detection : float in [0, 1] or PriceDetection
        Probability per colluding period that an investigation opens (a conviction when ``proof = 1``).
    fine : float >= 0
        The fine per firm and conviction: an amount (``fine_basis = "fixed"``) or a rate.
    fine_basis : {"fixed", "profit", "gain"}
    after_detection : int >= 1 or None
        Periods of competition after a conviction before collusion resumes; None: forever.
    proof : float in (0, 1]
        Probability that an investigation convicts without a report.
    leniency : float in [0, 1] or None
        The reduced fine of a reporting firm as a share of the fine; None: no leniency programme.
    deviator_exposed : bool
        Whether a deviator faces the investigation of its deviation period.
    """

    detection: float | PriceDetection = 0.0
    fine: float = 0.0
    fine_basis: str = "fixed"
    after_detection: int | None = None
    proof: float = 1.0
    leniency: float | None = None
    deviator_exposed: bool = False

    def __post_init__(self):
        key = "enforcement"
        if not isinstance(self.detection, PriceDetection):
            object.__setattr__(self, "detection", Real(0, 1).check(f"{key}.detection", self.detection))
        checks = {
            "fine": Real(0, MAX_MAGNITUDE),
            "fine_basis": Options(*FINE_BASES),
            "after_detection": optional(Integer(1, 10_000_000)),
            "proof": Real(0, 1, closed="right"),
            "leniency": optional(Real(0, 1)),
            "deviator_exposed": Boolean(),
        }
        for name, constraint in checks.items():
            object.__setattr__(self, name, constraint.check(f"{key}.{name}", getattr(self, name)))

    def rate_at(self, price: float) -> float:
        """Detection probability per colluding period at the agreed price.

        Parameters
        ----------
        price : float
            Quantity-weighted average price of the agreement (read only by a price table).

        Returns
        -------
        float
        """
        if isinstance(self.detection, PriceDetection):
            if not math.isfinite(price):
                raise InputError("enforcement.detection", "a price-dependent detection rate needs the agreed price")
            return float(self.detection.rate(price))
        return float(self.detection)

    def to_dict(self) -> dict:
        """Plain-JSON form (the layout :meth:`from_dict` reads).

        Returns
        -------
        dict
        """
        out = {k: getattr(self, k) for k in ("fine", "fine_basis", "after_detection", "proof", "leniency",
                                             "deviator_exposed")}
        det = self.detection
        out["detection"] = det.to_dict() if isinstance(det, PriceDetection) else det
        return out

    @classmethod
    def from_dict(cls, d: dict, prefix: str = "enforcement") -> Enforcement:
        """Build and validate from a table, naming errors under ``prefix``.

        Parameters
        ----------
        d : dict
        prefix : str

        Returns
        -------
        Enforcement
        """
        if not isinstance(d, dict):
            raise InputError(prefix, f"must be a table, got {d!r}")
        allowed = ("detection", "fine", "fine_basis", "after_detection", "proof", "leniency", "deviator_exposed")
        for k in d:
            if k not in allowed:
                raise InputError(f"{prefix}.{k}", f"unknown key; allowed: {', '.join(allowed)}")
        kw = dict(d)
        try:
            if isinstance(kw.get("detection"), dict):
                kw["detection"] = PriceDetection.from_dict(kw["detection"])
            return cls(**kw)
        except InputError as e:
            raise InputError(prefix + e.key[len("enforcement"):], e.message) from None


# --------------------------------------------------------------------------------------------------
# The incentive constraint
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class EnforcementTerms:
    """What enforcement does to one agreement, per firm.

    Attributes
    ----------
    detection_rate : float
        Probability per colluding period that an investigation opens.
    conviction_rate : float
        ``q``: probability per colluding period that collusion ends with a conviction.
    firms_report : bool
        Whether the firms report when investigated (leniency cheaper than the risk of conviction).
    fine_amount : ndarray of shape (n_firms,)
        The fine per firm in money (the rate times its base for proportional fines).
    expected_fine : ndarray of shape (n_firms,)
        ``e``: expected fine per colluding period.
    deviator_fine : ndarray of shape (n_firms,)
        ``phi``: the deviator's expected fine in its deviation period.
    after_detection : int or None
    """

    detection_rate: float
    conviction_rate: float
    firms_report: bool
    fine_amount: np.ndarray
    expected_fine: np.ndarray
    deviator_fine: np.ndarray
    after_detection: int | None

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Returns
        -------
        dict
        """
        return {"detection_rate": self.detection_rate, "conviction_rate": self.conviction_rate,
                "firms_report": self.firms_report, "fine_amount": self.fine_amount.tolist(),
                "expected_fine": self.expected_fine.tolist(), "deviator_fine": self.deviator_fine.tolist(),
                "after_detection": self.after_detection}

    @classmethod
    def from_dict(cls, d: dict) -> EnforcementTerms:
        """Inverse of :meth:`to_dict`.

        Parameters
        ----------
        d : dict

        Returns
        -------
        EnforcementTerms
        """
        arr = {k: np.asarray(d[k], dtype=float) for k in ("fine_amount", "expected_fine", "deviator_fine")}
        return cls(d["detection_rate"], d["conviction_rate"], d["firms_report"], **arr,
                   after_detection=d["after_detection"])


def _fine_base(profits: StageProfits, basis: str) -> np.ndarray:
    if basis == "fixed":
        return np.ones(profits.n_firms)
    if basis == "profit":
        return np.maximum(profits.collusive, 0.0)
    return np.maximum(profits.collusive - profits.nash, 0.0)


def _rates(enf: Enforcement, rho: float) -> tuple[float, bool, float, float]:
    """(conviction rate, firms report, expected fine share per period, deviator's expected share)."""
    reports = enf.leniency is not None and enf.leniency < enf.proof
    share = enf.leniency if reports else enf.proof
    q = rho if reports else rho * enf.proof
    per_period = rho * share
    return q, reports, per_period, (per_period if enf.deviator_exposed else 0.0)


def enforcement_terms(profits, enforcement: Enforcement) -> EnforcementTerms:
    """Detection, conviction and expected fines of an agreement under an enforcement regime.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
    enforcement : Enforcement

    Returns
    -------
    EnforcementTerms
    """
    sp = stage_profits(profits)
    rho = enforcement.rate_at(sp.price)
    q, reports, per_period, dev = _rates(enforcement, rho)
    amount = enforcement.fine * _fine_base(sp, enforcement.fine_basis)
    return EnforcementTerms(rho, q, reports, amount, per_period * amount, dev * amount, enforcement.after_detection)


def _k(delta: float, q: float, T: int | None) -> float:
    """Weight of the deviation gain: ``1 - delta (1 - q + q delta^T)`` (``delta^T = 0`` for T = None)."""
    return 1.0 - delta * (1.0 - q + (q * delta**T if T is not None else 0.0))


def _threshold(c: float, e: float, D: float, q: float, T: int | None) -> float:
    """Smallest delta with ``c - e >= D k(delta)``; nan when none below one."""
    tol = _TOL * max(1.0, abs(c), abs(D), abs(e))
    if D <= tol:
        # cheating earns no more than competing: the constraint is weakest for impatient firms, so it
        # holds at every delta below one iff it holds in the limit delta -> 1
        limit = c - e - D * (q if T is None else 0.0)
        return 0.0 if limit >= -tol else math.nan
    if c - e - D >= -tol:
        return 0.0
    if T is None:
        if q >= 1.0:
            return math.nan
        t = (D - c + e) / (D * (1.0 - q))
    else:
        if c - e <= tol:
            return math.nan
        t = optimize.brentq(lambda x: c - e - D * _k(x, q, T), 0.0, 1.0, xtol=1e-15, rtol=1e-15)
    return float(t) if t < 1.0 - 1e-12 else math.nan


def enforcement_threshold(profits, enforcement: Enforcement) -> np.ndarray:
    """Each firm's critical discount factor under enforcement.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
    enforcement : Enforcement

    Returns
    -------
    ndarray of shape (n_firms,)
        ``nan`` where the firm cannot be held to the agreement at any discount factor below one.
    """
    sp = stage_profits(profits)
    t = enforcement_terms(sp, enforcement)
    c = sp.collusive - sp.nash
    D = sp.deviation - sp.nash - t.deviator_fine
    return np.array([_threshold(c[i], t.expected_fine[i], D[i], t.conviction_rate, t.after_detection)
                     for i in range(sp.n_firms)])


def _check_delta(delta, key: str = "delta") -> float:
    return Real(0, 1, closed="neither").check(key, delta)


def deterrence_fine(profits, enforcement: Enforcement, delta: float) -> np.ndarray:
    """Each firm's deterrence fine: the fine above which it cannot be held to the agreement at ``delta``.

    The constraint ``c - rho s F b >= (d - phi F b) k`` is linear in the fine parameter ``F`` (``b``
    the fine base, ``s`` the expected share paid when investigated), so the boundary is
    ``F* = (c - d k) / (b (rho s - phi k))``.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
    enforcement : Enforcement
        Its ``fine`` is ignored; the other fields are kept.
    delta : float in (0, 1)

    Returns
    -------
    ndarray of shape (n_firms,)
        In the units of ``enforcement.fine`` (an amount, or a rate for proportional fines); 0 where
        collusion is unsustainable without any fine, ``inf`` where no fine deters (no detection).
    """
    delta = _check_delta(delta)
    sp = stage_profits(profits)
    rho = enforcement.rate_at(sp.price)
    q, _, per_period, dev = _rates(enforcement, rho)
    base = _fine_base(sp, enforcement.fine_basis)
    k = _k(delta, q, enforcement.after_detection)
    c, d = sp.collusive - sp.nash, sp.deviation - sp.nash
    room = c - d * k
    per_unit = base * (per_period - dev * k)
    out = np.empty(sp.n_firms)
    for i in range(sp.n_firms):
        tol = _TOL * max(1.0, abs(c[i]), abs(d[i]))
        if room[i] < -tol:
            out[i] = 0.0
        elif per_unit[i] <= _TOL * max(1.0, base[i]):
            out[i] = math.inf
        else:
            out[i] = max(0.0, room[i]) / per_unit[i]
    return out


def discounted_fines(profits, enforcement: Enforcement, delta: float) -> np.ndarray:
    """Expected discounted fines each firm pays along the collusive path, from a colluding period on.

    ``e / k(delta)``: the fine recursion ``Phi = e + delta (1 - q + q delta^T) Phi``.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
    enforcement : Enforcement
    delta : float in (0, 1)

    Returns
    -------
    ndarray of shape (n_firms,)
    """
    delta = _check_delta(delta)
    t = enforcement_terms(profits, enforcement)
    return t.expected_fine / _k(delta, t.conviction_rate, t.after_detection)
