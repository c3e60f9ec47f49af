"""Estimates with their confidence intervals: the package's one convention for every simulated or learned number.

Estimators and intervals (``confidence`` level, 95 % by default; normal approximation)
--------------------------------------------------------------------------------------
The package's one convention (the learning sessions of :mod:`sim.learning.session` use these functions too):
``z`` is the standard normal quantile of the level (:func:`normal_quantile`).

* Means over replications (counts per replication, discounted profits): ``mean +- z s / sqrt(n)``.
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
           "wilson_estimate"]


def normal_quantile(confidence: float) -> float:
    """``z`` with ``P(|Z| <= z) = confidence`` for a standard normal ``Z`` (1.95996... at 0.95).

    Parameters
    ----------
    confidence : float
        In (0, 1).

    Returns
    -------
    float
    """
    return float(math.sqrt(2.0) * special.erfinv(confidence))




@dataclass(frozen=True)
class Estimate:
    """A point estimate with its standard error and confidence interval.

    Attributes
    ----------
    value, se, low, high : float
        ``nan`` when undefined (e.g. no spell ended).
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
        """The estimate as plain data.

        Returns
        -------
        dict
        """
        out = {"value": self.value, "se": self.se, "low": self.low, "high": self.high, "n": self.n,
               "method": self.method}
        if self.note:
            out["note"] = self.note
        return out

    def affine(self, a: float, b: float) -> Estimate:
        """The estimate of ``a + b x``: the same affine map of the value and of the interval.

        Parameters
        ----------
        a, b : float

        Returns
        -------
        Estimate
        """
        lo, hi = sorted((a + b * self.low, a + b * self.high))
        return Estimate(a + b * self.value, abs(b) * self.se, lo, hi, self.n, self.method, self.note)


def _interval(value: float, se: float, z: float) -> tuple[float, float]:
    if not math.isfinite(se):
        return math.nan, math.nan
    return value - z * se, value + z * se


def mean_estimate(x, confidence: float = 0.95) -> Estimate:
    """Mean over replications with the normal-approximation interval.

    Parameters
    ----------
    x : array_like of shape (n,)
        One value per replication.
    confidence : float

    Returns
    -------
    Estimate
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    m = float(x.mean()) if n else math.nan
    se = float(x.std(ddof=1) / math.sqrt(n)) if n > 1 else math.nan
    lo, hi = _interval(m, se, normal_quantile(confidence))
    return Estimate(m, se, lo, hi, n, "mean")


def wilson_estimate(k: int, n: int, confidence: float = 0.95) -> Estimate:
    """Share ``k / n`` with the Wilson score interval (Wilson, 1927); ``se`` is the binomial
    ``sqrt(p (1 - p) / n)``. The bounds are exactly 0 and 1 at ``k = 0`` and ``k = n``.

    Parameters
    ----------
    k, n : int
        Successes and trials.
    confidence : float

    Returns
    -------
    Estimate
    """
    k, n = int(k), int(n)
    if n == 0:
        return Estimate(math.nan, math.nan, math.nan, math.nan, 0, "wilson")
    z = normal_quantile(confidence)
    p = k / n
    den = 1.0 + z * z / n
    mid = (p + z * z / (2 * n)) / den
    h = z * math.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / den
    low = 0.0 if k == 0 else max(0.0, mid - h)  # the exact bounds at the ends, free of round-off
    high = 1.0 if k == n else min(1.0, mid + h)
    return Estimate(p, math.sqrt(p * (1.0 - p) / n), low, high, n, "wilson")


def ratio_estimate(x, y, confidence: float = 0.95) -> Estimate:
    """Ratio of totals ``sum(x) / sum(y)`` with the delta-method standard error across replications
    (Cochran, 1977, "Sampling Techniques", section 6.4).

    Parameters
    ----------
    x, y : array_like of shape (n,)
        Per-replication numerator and denominator.
    confidence : float

    Returns
    -------
    Estimate
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


@dataclass(frozen=True)
class Survival:
    """A Kaplan-Meier survival curve of lengths (spells, wars, time to first breakdown).

    Attributes
    ----------
    lengths : int ndarray of shape (m,)
        ``1 .. m``.
    survival : ndarray of shape (m,)
        ``S(l)``: estimated probability that the length exceeds ``l``.
    se : ndarray of shape (m,)
        Pointwise standard error of ``S(l)`` (Greenwood's formula).
    low, high : ndarray of shape (m,)
        Pointwise confidence band ``S +- z se``, clipped to [0, 1].
    at_risk, ended, censored : int ndarray of shape (m,)
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

    def to_dict(self, max_points: int = 200) -> dict:
        """The curve as plain data, thinned to at most ``max_points`` lengths.

        Parameters
        ----------
        max_points : int

        Returns
        -------
        dict
        """
        m = self.lengths.shape[0]
        idx = np.unique(np.round(np.linspace(0, m - 1, min(m, max_points))).astype(int)) if m else np.zeros(0, int)
        return {"lengths": self.lengths[idx].tolist(), "survival": self.survival[idx].tolist(),
                "low": self.low[idx].tolist(), "high": self.high[idx].tolist(), "mean": self.mean.to_dict(),
                "ended": int(self.ended.sum()), "censored": int(self.censored.sum())}


def kaplan_meier(ended, censored, confidence: float = 0.95, restrict: int | None = None) -> Survival:
    """Kaplan-Meier curve from counts of lengths that ended and that were cut off.

    Parameters
    ----------
    ended, censored : int array_like of shape (L + 1,)
        Entry ``l`` counts observations of length ``l`` (entry 0 unused).
    confidence : float
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
    lo_m, hi_m = _interval(mean, se, z)
    est = Estimate(mean, se, lo_m, hi_m, total, "kaplan-meier", note)
    return Survival(np.arange(1, m + 1), S, se_S, lo, hi, at_risk.astype(np.int64), d, c, est)
