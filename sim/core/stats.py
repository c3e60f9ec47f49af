"""Estimates with their confidence intervals: the package's one convention for every simulated or learned number.

Estimators and intervals (``confidence`` level, 95 % by default)
----------------------------------------------------------------
The package's one convention (the learning sessions of :mod:`sim.learning.session` use these functions too):
``z`` is the standard normal quantile of the level (:func:`normal_quantile`), ``t`` the quantile of
Student's t distribution with ``n - 1`` degrees of freedom (:func:`student_quantile`).

* Means over replications or sessions (counts per replication, discounted profits, a learning session's
  profit gain): ``mean +- t s / sqrt(n)``, Student's interval (Student, 1908, "The probable error of a
  mean", Biometrika 6), exact for normal values and wider than the normal approximation ``mean +- z s /
  sqrt(n)`` when there are few of them (by 15 % at ten values, 1 % at a hundred); the two agree as ``n``
  grows, and for values that are not normal both rest on the central limit theorem.
* Shares of replications (or sessions) with a property: the Wilson score interval (Wilson, 1927,
  "Probable inference, the law of succession, and statistical inference", JASA 22), which keeps its
  width at shares of 0 and 1 where ``p +- z sqrt(p (1 - p) / n)`` collapses to a point.
* Shares and per-period averages (share of collusive periods, war frequency, mean profit, price,
  consumer surplus): the ratio ``sum_r x_r / sum_r y_r`` of totals over replications (the mean of
  per-replication averages when every replication has the same length), with the linearised
  (delta-method) standard error across replications, ``sqrt(sum_r (x_r - R y_r)^2 / (n (n - 1))) / mean(y)``
  (Cochran, 1977, "Sampling Techniques", section 6.4).
* Lengths of spells and wars, and the time to first breakdown, are cut off by the horizon, so they
  are estimated as survival data (a spell still running after ``l`` periods at the horizon is known
  to outlive ``l - 1`` periods and is censored there; a replication without breakdown in ``H``
  periods is censored at ``H``): Kaplan-Meier survival curves (Kaplan and Meier, 1958) with
  Greenwood's pointwise variance, and the mean as the area under the curve (restricted to the longest
  observation; a lower bound when the longest observation is cut off) with its Greenwood-type
  standard error (Klein and Moeschberger, 2003, "Survival Analysis", section 4.5). For the time to
  first breakdown each replication gives one independent observation. When no observation ended
  (every one was cut off), the mean is only known to be at least the restricted area and no
  interval is given. Spells and wars are pooled
  across replications and treated as independent; this holds exactly when the line-up's play
  regenerates at the start of each spell, as with every shipped strategy under i.i.d. noise.
* Profit gain ``(profit - Nash) / (collusive - Nash)`` and overcharge ``price / Nash price - 1`` are
  affine in a ratio estimate; their intervals are the same affine map of its interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["Estimate", "Survival", "kaplan_meier", "mean_estimate", "normal_quantile", "ratio_estimate",
           "share_estimate", "student_quantile", "wilson_band", "wilson_estimate"]


def normal_quantile(confidence: float) -> float:
    """``z`` with ``P(|Z| <= z) = confidence`` for a standard normal ``Z`` (1.95996... at 0.95).

    Parameters
    ----------
    confidence : float in (0, 1)
        Level of a two-sided interval.

    Returns
    -------
    float
    """
    return float(math.sqrt(2.0) * special.erfinv(confidence))


def student_quantile(confidence: float, n: int) -> float:
    """``t`` with ``P(|T| <= t) = confidence`` for Student's ``T`` with ``n - 1`` degrees of freedom (2.262... at
    0.95 and ``n = 10``): the multiplier of ``s / sqrt(n)`` in the interval of a mean of ``n`` values.

    Parameters
    ----------
    confidence : float in (0, 1)
        Level of a two-sided interval.
    n : int
        Number of values (at least 2).

    Returns
    -------
    float
    """
    return float(special.stdtrit(n - 1, 0.5 + confidence / 2.0))




@dataclass(frozen=True)
class Estimate:
    """A point estimate with its standard error and confidence interval.

    Parameters
    ----------
    value : float
        The point estimate; ``nan`` when undefined (e.g. no spell ended).
    se : float
        Its standard error (``nan`` when undefined).
    low : float
        Lower end of the confidence interval (``nan`` when undefined).
    high : float
        Upper end of the confidence interval (``nan`` when undefined).
    n : int
        Number of independent observations behind it (replications, or spells).
    method : str
        ``"mean"``, ``"ratio"``, ``"wilson"``, ``"kaplan-meier"`` or ``"exact"``.
    note : str
        A remark for the reader (e.g. ``"at least"`` for a restricted mean cut off by the horizon).
    """

    value: float
    se: float
    low: float
    high: float
    n: int
    method: str
    note: str = ""

    def to_dict(self) -> dict:
        """Plain data for JSON: nan is stored as None (:meth:`from_dict` restores it).

        Returns
        -------
        dict
            ``value``, ``se``, ``low``, ``high`` (float or None), ``n``, ``method`` and, when there is
            one, ``note``.
        """
        out = {"value": _plain(self.value), "se": _plain(self.se), "low": _plain(self.low), "high": _plain(self.high),
               "n": int(self.n), "method": self.method}
        if self.note:
            out["note"] = self.note
        return out

    @classmethod
    def from_dict(cls, doc: dict) -> Estimate:
        """The estimate stored by :meth:`to_dict` (None read back as nan).

        Parameters
        ----------
        doc : dict
            Output of :meth:`to_dict`, possibly through JSON.

        Returns
        -------
        Estimate
        """
        return cls(_number(doc["value"]), _number(doc["se"]), _number(doc["low"]), _number(doc["high"]), int(doc["n"]),
                   str(doc["method"]), str(doc.get("note", "")))

    def affine(self, a: float, b: float) -> Estimate:
        """The estimate of ``a + b x``.

        Parameters
        ----------
        a : float
            Intercept.
        b : float
            Slope (a negative slope swaps the interval's ends).

        Returns
        -------
        Estimate
            Same ``n``, method and note; standard error ``|b| se``.
        """
        lo, hi = sorted((a + b * self.low, a + b * self.high))
        return Estimate(a + b * self.value, abs(b) * self.se, lo, hi, self.n, self.method, self.note)


def _plain(x: float) -> float | None:
    """A float for JSON: None for nan (and for the infinities, which JSON cannot hold either)."""
    x = float(x)
    return x if math.isfinite(x) else None


def _number(x) -> float:
    return math.nan if x is None else float(x)


def _interval(value: float, se: float, z: float) -> tuple[float, float]:
    if not math.isfinite(se):
        return math.nan, math.nan
    return value - z * se, value + z * se


def _length_interval(mean: float, se: float, z: float, longest: int) -> tuple[float, float]:
    # a mean length lies in [1, longest]: the interval is built on the log scale (the delta method,
    # se(log m) = se / m; the log transformation of Kaplan-Meier quantities as in Klein and Moeschberger,
    # 2003, "Survival Analysis", chapter 4 -- from memory) and clipped to that range, so it stays positive
    # and asymmetric, as the sampling distribution of a mean length is
    if not math.isfinite(se) or mean <= 0:
        return math.nan, math.nan
    w = z * se / mean
    return max(1.0, mean * math.exp(-w)), min(float(longest), mean * math.exp(w))


def mean_estimate(x, confidence: float = 0.95) -> Estimate:
    """Mean over replications with Student's interval ``mean +- t s / sqrt(n)``, ``t`` with ``n - 1`` degrees of
    freedom (:func:`student_quantile`).

    Parameters
    ----------
    x : array_like of shape (n,)
        One value per replication.
    confidence : float in (0, 1)
        Level of the interval.

    Returns
    -------
    Estimate
        Method ``"mean"``; standard error ``s / sqrt(n)`` (nan for fewer than two values).
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    m = float(x.mean()) if n else math.nan
    se = float(x.std(ddof=1) / math.sqrt(n)) if n > 1 else math.nan
    lo, hi = _interval(m, se, student_quantile(confidence, n) if n > 1 else math.nan)
    return Estimate(m, se, lo, hi, n, "mean")


def wilson_estimate(k: int, n: int, confidence: float = 0.95) -> Estimate:
    """Share ``k / n`` with the Wilson score interval (Wilson, 1927); ``se`` is the binomial
    ``sqrt(p (1 - p) / n)``. The bounds are exactly 0 and 1 at ``k = 0`` and ``k = n``.

    Parameters
    ----------
    k : int
        Number of replications with the property.
    n : int
        Number of replications.
    confidence : float in (0, 1)
        Level of the interval.

    Returns
    -------
    Estimate
        Method ``"wilson"``.
    """
    k, n = int(k), int(n)
    if n == 0:
        return Estimate(math.nan, math.nan, math.nan, math.nan, 0, "wilson")
    z = normal_quantile(confidence)
    p = k / n
    low, high = _wilson_bounds(p, float(n), z, k == 0, k == n)
    return Estimate(p, math.sqrt(p * (1.0 - p) / n), low, high, n, "wilson")


def wilson_band(share, n: int, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise Wilson score intervals (Wilson, 1927) of shares that each count ``n`` trials -- for example the
    share of replications in which every firm colludes, period by period: a band that stays in [0, 1] and is exactly
    0 or 1 where no or every replication has the property. Each point is its own interval (the band does not cover
    the whole curve at once).

    Parameters
    ----------
    share : array_like of shape (n_points,)
        Shares ``k / n`` (nan: no interval).
    n : int
        Trials behind each share.
    confidence : float in (0, 1)
        Level of each interval.

    Returns
    -------
    low, high : ndarray of shape (n_points,)
    """
    p = np.clip(np.asarray(share, dtype=float), 0.0, 1.0)
    if n <= 0:
        nan = np.full(p.shape, np.nan)
        return nan, nan.copy()
    z = normal_quantile(confidence)
    k = np.rint(p * n)
    den = 1.0 + z * z / n
    mid = (p + z * z / (2 * n)) / den
    h = z * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / den
    low = np.where(k == 0, 0.0, np.maximum(0.0, mid - h))
    high = np.where(k == n, 1.0, np.minimum(1.0, mid + h))
    return low, high


def _wilson_bounds(p: float, n: float, z: float, at_zero: bool, at_one: bool) -> tuple[float, float]:
    # Wilson (1927), "Probable inference, the law of succession, and statistical inference", JASA 22(158);
    # ``n`` may be an effective sample size (not a whole number)
    den = 1.0 + z * z / n
    mid = (p + z * z / (2 * n)) / den
    h = z * math.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / den
    low = 0.0 if at_zero else max(0.0, mid - h)  # the exact bounds at the ends, free of round-off
    high = 1.0 if at_one else min(1.0, mid + h)
    return low, high


def share_estimate(x, y, confidence: float = 0.95) -> Estimate:
    """A share ``sum(x) / sum(y)`` in [0, 1] with an interval that stays in [0, 1].

    The point estimate and standard error are those of :func:`ratio_estimate` (the delta method across
    replications, which accounts for the correlation of periods within a replication). The interval is
    Wilson's score interval at the ratio's effective sample size ``n* = p (1 - p) / se^2``, capped at the
    number of periods observed (Korn and Graubard, 1998, "Confidence intervals for proportions with small
    expected number of positive counts estimated from survey data", Survey Methodology 24(2)), so it never
    leaves [0, 1] and stays asymmetric near the ends where the normal interval would cross them. When every
    replication gives the same share (``se = 0``, or a share of exactly 0 or 1), the replications themselves
    are the independent units: ``n* = n``.

    Parameters
    ----------
    x : array_like of shape (n,)
        Numerator per replication (e.g. collusive periods), between 0 and ``y``.
    y : array_like of shape (n,)
        Denominator per replication (e.g. periods played).
    confidence : float in (0, 1)
        Level of the interval.

    Returns
    -------
    Estimate
        Method ``"share"`` (nan when ``sum(y)`` is zero).
    """
    e = ratio_estimate(x, y, confidence)
    if not math.isfinite(e.value):
        return Estimate(e.value, e.se, e.low, e.high, e.n, "share")
    p, n = e.value, e.n
    total = float(np.sum(np.asarray(y, dtype=float)))
    if math.isfinite(e.se) and e.se > 0 and 0.0 < p < 1.0:
        n_eff = min(p * (1.0 - p) / (e.se * e.se), total)
    else:
        n_eff = float(n)
    low, high = _wilson_bounds(p, n_eff, normal_quantile(confidence), p == 0.0, p == 1.0)
    return Estimate(p, e.se, low, high, n, "share")


def ratio_estimate(x, y, confidence: float = 0.95) -> Estimate:
    """Ratio of totals ``sum(x) / sum(y)`` with the delta-method standard error across replications
    (Cochran, 1977, "Sampling Techniques", section 6.4).

    Parameters
    ----------
    x : array_like of shape (n,)
        Numerator per replication (e.g. collusive periods).
    y : array_like of shape (n,)
        Denominator per replication (e.g. periods played).
    confidence : float in (0, 1)
        Level of the interval.

    Returns
    -------
    Estimate
        Method ``"ratio"`` (nan when ``sum(y)`` is zero).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.shape[0]
    sy = float(y.sum())
    if n == 0 or sy == 0:
        return Estimate(math.nan, math.nan, math.nan, math.nan, n, "ratio")
    R = float(x.sum()) / sy
    if n > 1:
        resid = x - R * y
        se = math.sqrt(float(resid @ resid) / (n * (n - 1))) / (sy / n)
    else:
        se = math.nan
    lo, hi = _interval(R, se, normal_quantile(confidence))
    return Estimate(R, se, lo, hi, n, "ratio")


_COUNT_FIELDS = ("lengths", "at_risk", "ended", "censored")


@dataclass(frozen=True)
class Survival:
    """A Kaplan-Meier survival curve of lengths (spells, wars, time to first breakdown).

    Parameters
    ----------
    lengths : int ndarray of shape (m,)
        The lengths at which the curve is given: ``1 .. m``, or some of them after :meth:`thinned`.
    survival : ndarray of shape (m,)
        ``S(l)``: estimated probability that the length exceeds ``l``.
    se : ndarray of shape (m,)
        Pointwise standard error of ``S(l)`` (Greenwood's formula).
    low : ndarray of shape (m,)
        Lower end of the pointwise confidence band ``S - z se``, clipped to [0, 1].
    high : ndarray of shape (m,)
        Upper end of the band ``S + z se``, clipped to [0, 1].
    at_risk : int ndarray of shape (m,)
        Observations of length at least ``l``.
    ended : int ndarray of shape (m,)
        Observations that ended at length ``l`` (after :meth:`thinned`: since the previous length kept).
    censored : int ndarray of shape (m,)
        Observations cut off at length ``l`` (grouped likewise).
    mean : Estimate
        Area under the curve (restricted mean).
    """

    lengths: np.ndarray
    survival: np.ndarray
    se: np.ndarray
    low: np.ndarray
    high: np.ndarray
    at_risk: np.ndarray
    ended: np.ndarray
    censored: np.ndarray
    mean: Estimate

    def to_dict(self) -> dict:
        """Every field as plain data (nan stored as None); :meth:`from_dict` restores the curve exactly.

        Returns
        -------
        dict
            ``lengths``, ``survival``, ``se``, ``low``, ``high``, ``at_risk``, ``ended``, ``censored``
            (lists, one entry per length) and ``mean`` (:meth:`Estimate.to_dict`).
        """
        out = {}
        for k in ("lengths", "survival", "se", "low", "high", "at_risk", "ended", "censored"):
            v = getattr(self, k).tolist()
            out[k] = [int(x) for x in v] if k in _COUNT_FIELDS else [_plain(x) for x in v]
        out["mean"] = self.mean.to_dict()
        return out

    @classmethod
    def from_dict(cls, doc: dict) -> Survival:
        """The curve stored by :meth:`to_dict`.

        Parameters
        ----------
        doc : dict
            Output of :meth:`to_dict`, possibly through JSON.

        Returns
        -------
        Survival
        """
        def ints(k):
            return np.asarray(doc[k], dtype=np.int64).reshape(-1)

        def floats(k):
            return np.array([_number(v) for v in doc[k]], dtype=float)

        return cls(ints("lengths"), floats("survival"), floats("se"), floats("low"), floats("high"), ints("at_risk"),
                   ints("ended"), ints("censored"), Estimate.from_dict(doc["mean"]))

    def thinned(self, max_points: int = 200) -> Survival:
        """The curve at no more than ``max_points`` lengths, evenly spread, the first and last included.

        The curve, its standard error, band and number at risk are those at the kept lengths; the
        counts of ended and cut-off observations are grouped, each kept length holding those since the
        previous kept length, so their totals are unchanged. A curve with at most ``max_points``
        lengths is returned as it is.

        Parameters
        ----------
        max_points : int
            Largest number of lengths kept.

        Returns
        -------
        Survival
        """
        m = self.lengths.shape[0]
        if m <= max_points:
            return self
        idx = np.unique(np.round(np.linspace(0, m - 1, max_points)).astype(int))
        group = np.searchsorted(idx, np.arange(m))  # kept length that each length's counts go to

        def grouped(x):
            return np.bincount(group, weights=x, minlength=idx.shape[0]).astype(np.int64)

        return Survival(self.lengths[idx], self.survival[idx], self.se[idx], self.low[idx], self.high[idx],
                        self.at_risk[idx], grouped(self.ended), grouped(self.censored), self.mean)


def kaplan_meier(ended, censored, confidence: float = 0.95, restrict: int | None = None) -> Survival:
    """Kaplan-Meier curve from counts of lengths that ended and that were cut off.

    Parameters
    ----------
    ended : int array_like of shape (L + 1,)
        Entry ``l`` counts observations that ended at length ``l`` (entry 0 unused).
    censored : int array_like of shape (L + 1,)
        Entry ``l`` counts observations cut off at length ``l`` (entry 0 unused).
    confidence : float in (0, 1)
        Level of the pointwise band and of the mean's interval.
    restrict : int, optional
        Upper limit of the restricted mean (default: the longest observation).

    Returns
    -------
    Survival
    """
    d = np.asarray(ended, dtype=np.int64)
    c = np.asarray(censored, dtype=np.int64)
    tot = d + c
    nz = np.flatnonzero(tot[1:])
    z = normal_quantile(confidence)
    if nz.size == 0:
        nan = Estimate(math.nan, math.nan, math.nan, math.nan, 0, "kaplan-meier", "no observation")
        e = np.zeros(0, dtype=np.int64)
        return Survival(e, np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0), e, e, e, nan)
    m = int(nz[-1]) + 1 if restrict is None else int(restrict)
    d = d[1:m + 1]
    c = c[1:m + 1]
    if d.shape[0] < m:
        d = np.concatenate([d, np.zeros(m - d.shape[0], np.int64)])
        c = np.concatenate([c, np.zeros(m - c.shape[0], np.int64)])
    total = int(tot[1:].sum())
    # at risk at length l: observations of length >= l
    at_risk = total - np.concatenate([[0], np.cumsum(d + c)[:-1]])
    with np.errstate(divide="ignore", invalid="ignore"):
        hazard = np.where(at_risk > 0, d / np.maximum(at_risk, 1), 0.0)
        S = np.cumprod(1.0 - hazard)
        gw_terms = np.where((at_risk > d) & (d > 0), d / (at_risk * (at_risk - d).astype(float)), 0.0)
    gw = np.cumsum(gw_terms)
    se_S = S * np.sqrt(gw)
    lo = np.clip(S - z * se_S, 0.0, 1.0)
    hi = np.clip(S + z * se_S, 0.0, 1.0)
    # restricted mean: sum over l = 0 .. m-1 of S(l), with S(0) = 1
    S_prev = np.concatenate([[1.0], S[:-1]])
    mean = float(S_prev.sum())
    # Greenwood-type variance: sum_l A_l^2 d_l / (n_l (n_l - d_l)), A_l = area under S from l on
    A = np.cumsum(S[::-1])[::-1] - S[-1] if m > 0 else np.zeros(0)  # sum_{j=l}^{m-1} S(j)
    var = float(np.sum(A * A * gw_terms))
    if int(d.sum()) == 0:
        # nothing ended: the area is a lower bound with no sampling variation to speak of, and a
        # zero-width interval would read as certainty
        se = math.nan
        note = "at least (no observation ended within the horizon)"
    else:
        se = math.sqrt(var)
        note = "at least (the longest observation was cut off by the horizon)" if S[-1] > 0 else ""
    lo_m, hi_m = _length_interval(mean, se, z, m)
    est = Estimate(mean, se, lo_m, hi_m, total, "kaplan-meier", note)
    return Survival(np.arange(1, m + 1), S, se_S, lo, hi, at_risk.astype(np.int64), d, c, est)
