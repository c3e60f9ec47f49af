"""Closed-form critical discount factors per firm, and the thresholds of one scheme.

* grim trigger (Nash reversion forever): ``delta_i = (pi_D - pi_C) / (pi_D - pi_N)`` (Friedman, 1971,
  "A non-cooperative equilibrium for supergames");
* Nash reversion for T periods: ``delta + ... + delta^T = K`` with ``K = (pi_D - pi_C) / (pi_C - pi_N)``,
  which has a root below one only when ``K < T``;
* their comparative statics in the three profits.

:class:`SchemeThreshold` holds one scheme's thresholds (per firm, the market's, the binding firm). The
whole report of a market is built in :mod:`sim.theory.thresholds`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from sim.core.params import Integer, Real

__all__ = ["SchemeThreshold", "finite_threshold", "grim_threshold", "threshold_sensitivity"]

SCHEMES = ("grim", "finite", "stick_carrot")
_TOL = 1e-12


def _check_delta(delta, key="delta"):
    return Real(0, 1, closed="neither").check(key, delta)


def _check_T(T, key="punishment"):
    return Integer(1, 10_000_000).check(key, T)


# --------------------------------------------------------------------------------------------------
# Closed-form per-firm thresholds (vectorised)
# --------------------------------------------------------------------------------------------------


def grim_threshold(collusive, deviation, nash) -> np.ndarray:
    """Critical discount factor of grim trigger (Nash reversion forever), elementwise.

    ``(pi_D - pi_C) / (pi_D - pi_N)``. ``nan`` when the firm earns less by colluding than in the
    punishment (it would rather trigger the punishment than comply, whatever its discount factor) or
    when deviating pays and collusion pays no more than competition; 0 when neither holds and
    deviating does not pay.

    Parameters
    ----------
    collusive, deviation, nash : float or array_like
        Per-period profits ``pi_C``, ``pi_D``, ``pi_N`` (broadcast together).

    Returns
    -------
    ndarray
        The thresholds, of the broadcast shape.
    """
    c, d, n = (np.asarray(x, dtype=float) for x in (collusive, deviation, nash))
    scale = np.maximum(1.0, np.maximum(np.abs(c), np.abs(d)))
    gain = d - c
    loss = c - n
    tol = _TOL * scale
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(
            loss < -tol, np.nan, np.where(gain <= tol, 0.0, np.where(loss <= tol, np.nan, gain / (gain + loss)))
        )
    return out


def finite_threshold(collusive, deviation, nash, T: int) -> np.ndarray:
    """Critical discount factor of T-period Nash reversion, elementwise.

    Solves ``delta + delta^2 + ... + delta^T = K`` with ``K = (pi_D - pi_C) / (pi_C - pi_N)``;
    ``nan`` when ``K >= T`` (not sustainable at any discount factor below one).

    Parameters
    ----------
    collusive, deviation, nash : float or array_like
        Per-period profits ``pi_C``, ``pi_D``, ``pi_N`` (broadcast together).
    T : int
        Periods of Nash reversion (>= 1).

    Returns
    -------
    float or ndarray
        A float when every input is a number, else an array of the broadcast shape.
    """
    T = _check_T(T)
    c, d, n = (np.atleast_1d(np.asarray(x, dtype=float)) for x in (collusive, deviation, nash))
    c, d, n = np.broadcast_arrays(c, d, n)
    out = np.empty(c.shape)
    for idx in np.ndindex(c.shape):
        out[idx] = _finite_scalar(c[idx], d[idx], n[idx], T)
    return out if np.ndim(collusive) or np.ndim(deviation) or np.ndim(nash) else out[0]


def _finite_scalar(c: float, d: float, n: float, T: int) -> float:
    scale = max(1.0, abs(c), abs(d))
    gain, loss = d - c, c - n
    if loss < -_TOL * scale:  # the firm prefers the punishment to complying
        return math.nan
    if gain <= _TOL * scale:
        return 0.0
    if loss <= _TOL * scale:
        return math.nan
    K = gain / loss
    if K >= T:
        return math.nan
    if T == 1:
        return K
    # geometric partial sum, written to stay accurate near delta = 1
    def f(x):
        return x * (1.0 - x**T) / (1.0 - x) - K if x < 1 else T - K

    root = float(optimize.brentq(f, 0.0, 1.0, xtol=1e-16, rtol=1e-15, maxiter=500))
    # K a rounding error below T puts the root at one: no discount factor below one sustains it
    return root if root < 1.0 else math.nan


def threshold_sensitivity(collusive: float, deviation: float, nash: float, T: int | None = None) -> dict:
    """How a firm's threshold moves with its three profits (comparative statics).

    Returns the partial derivatives of the threshold with respect to the cheating (deviation),
    collusive and competitive (Nash) profits, and the matching elasticities. Grim trigger when ``T``
    is None, T-period reversion otherwise (by implicit differentiation of
    ``delta + ... + delta^T = K``). The trade's rule of thumb holds: the threshold rises with the
    cheating and competitive profits and falls with the collusive profit.

    Parameters
    ----------
    collusive, deviation, nash : float
        The firm's per-period profits ``pi_C``, ``pi_D``, ``pi_N``.
    T : int or None
        Periods of Nash reversion; None for grim trigger.

    Returns
    -------
    dict
        ``threshold``, ``d_deviation``, ``d_collusive``, ``d_nash`` and, where the threshold is
        positive and finite, ``elasticity_deviation``, ``elasticity_collusive``, ``elasticity_nash``
        (None where undefined).
    """
    c, d, n = float(collusive), float(deviation), float(nash)
    if T is None:
        base = float(grim_threshold(c, d, n))
        if not np.isfinite(base) or base == 0:
            return {"threshold": _none(base), "d_deviation": None, "d_collusive": None, "d_nash": None}
        den = (d - n) ** 2
        grads = {"d_deviation": (c - n) / den, "d_collusive": -1.0 / (d - n), "d_nash": (d - c) / den}
    else:
        base = _finite_scalar(c, d, n, T)
        if not np.isfinite(base) or base == 0:
            return {"threshold": _none(base), "d_deviation": None, "d_collusive": None, "d_nash": None}
        dF = sum(t * base ** (t - 1) for t in range(1, T + 1))  # derivative of the partial sum
        L = c - n
        dK = {"d_deviation": 1.0 / L, "d_collusive": -(d - n) / L**2, "d_nash": (d - c) / L**2}
        grads = {k: v / dF for k, v in dK.items()}
    out = {"threshold": base, **grads}
    out["elasticity_deviation"] = grads["d_deviation"] * d / base
    out["elasticity_collusive"] = grads["d_collusive"] * c / base
    out["elasticity_nash"] = grads["d_nash"] * n / base
    return out


def _none(x):
    return None if x is None or not np.isfinite(x) else float(x)


def _market_level(per_firm: np.ndarray) -> tuple[float, int]:
    """The market's threshold (the largest; nan if any firm cannot be held) and the binding firm."""
    if np.any(np.isnan(per_firm)):
        return math.nan, int(np.flatnonzero(np.isnan(per_firm))[0])
    k = int(np.argmax(per_firm))
    return float(per_firm[k]), k


@dataclass(frozen=True)
class SchemeThreshold:
    """Thresholds of one scheme.

    Parameters
    ----------
    scheme : str
    per_firm : ndarray of shape (n_firms,)
        ``nan`` where the firm cannot be held below one.
    market : float
        Largest per-firm threshold (``nan`` if any firm cannot be held).
    binding : int
        Index (0-based) of the binding firm.
    T : int or None
        Punishment length for finite reversion.
    """

    scheme: str
    per_firm: np.ndarray
    market: float
    binding: int
    T: int | None = None

    @property
    def sustainable(self) -> bool:
        """Whether some discount factor below one sustains the agreement."""
        return bool(np.isfinite(self.market))

    def sustains(self, delta: float) -> bool:
        """Whether the scheme sustains the agreement at ``delta``.

        Parameters
        ----------
        delta : float

        Returns
        -------
        bool
        """
        return self.sustainable and delta >= self.market

    def to_dict(self) -> dict:
        """The thresholds as plain data (None where not sustainable; firms counted from 1).

        Returns
        -------
        dict
        """
        out = {
            "market": _none(self.market),
            "per_firm": [_none(x) for x in self.per_firm],
            "binding_firm": self.binding + 1,
        }
        if self.T is not None:
            out = {"T": self.T, **out}
        return out


def _scheme(name, per_firm, T=None) -> SchemeThreshold:
    m, k = _market_level(per_firm)
    return SchemeThreshold(name, per_firm, m, k, T)


