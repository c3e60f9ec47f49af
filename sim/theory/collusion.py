"""Collusive outcomes: the profile the firms agree to sustain.

* ``joint`` -- the joint-profit maximum, from the demand system's own method
  (:meth:`~sim.models.demand_spec.DemandSpec.joint_maximum`; a homogeneous good under quantity
  competition uses the merit order from the model's marginal revenue).
* ``symmetric`` -- the best common quantity or price, found by a bracketing search and polished by
  solving the first-order condition on the model's joint-profit gradient where it has one.
* ``proportional`` -- quantities proportional to the static-Nash ones (Schmalensee, 1987,
  "Competitive advantage and collusive optima"), the scale chosen the same way.
* ``given`` -- the actions the user gives.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from sim.core.errors import InputError
from sim.models.market import MarketSpec
from sim.theory.best_response import maximize_scalar
from sim.theory.nash import static_nash
from sim.theory.outcome import Outcome, as_spec, outcome_of

__all__ = ["AGREEMENTS", "collusive_outcome", "common_level"]

AGREEMENTS = ("joint", "symmetric", "proportional", "given")


def collusive_outcome(market, agreement: str = "joint", actions=None) -> Outcome:
    """The outcome the firms agree to sustain.

    Parameters
    ----------
    market : Market or MarketSpec
    agreement : {"joint", "symmetric", "proportional", "given"}
        ``joint``: maximise the sum of profits. ``symmetric``: maximise the sum of profits over a
        common quantity (Cournot) or a common price (Bertrand), each firm's quantity capped at its
        capacity. ``proportional``: quantities proportional to the static-Nash quantities (a common
        scale factor, prices from inverse demand under Bertrand; Schmalensee, 1987, "Competitive
        advantage and collusive optima"), scale chosen to maximise the sum of profits. ``given``: the
        action vector ``actions``.
    actions : array_like of shape (n_products,), optional
        Required with ``agreement="given"``.

    Returns
    -------
    Outcome
    """
    ms = as_spec(market)
    if agreement not in AGREEMENTS:
        raise InputError("collusion.agreement", f"must be one of {', '.join(map(repr, AGREEMENTS))}, got {agreement!r}")
    if agreement == "given":
        return outcome_of(ms, _given_actions(ms, actions))
    if actions is not None:
        raise InputError("collusion.actions", f"only used with agreement = 'given', not {agreement!r}")
    key = f"collusive:{agreement}"
    if key in ms._cache:
        return ms._cache[key]
    if agreement == "joint":
        a = _joint_maximum(ms)
    elif agreement == "symmetric":
        a = _symmetric_maximum(ms)
    else:
        a = _proportional_maximum(ms)
    out = outcome_of(ms, a)
    ms._cache[key] = out
    return out


def _given_actions(ms: MarketSpec, actions) -> np.ndarray:
    if actions is None:
        raise InputError("collusion.actions", "an action per firm is needed with agreement = 'given'")
    a = np.asarray(actions, dtype=float)
    if a.shape != (ms.n_products,) or not np.all(np.isfinite(a)):
        raise InputError(
            "collusion.actions", f"must have one finite value per product ({ms.n_products}), got {actions!r}"
        )
    if np.any(a < 0):
        raise InputError("collusion.actions", f"actions must be >= 0, got {a.tolist()}")
    if ms.quantity_setting and np.any(a > ms.capacity):
        raise InputError("collusion.actions", "a quantity exceeds its firm's capacity")
    return a


def _joint(ms, A):
    return ms.profits(A).sum(axis=-1)


def _joint_maximum(ms: MarketSpec) -> np.ndarray:
    a = ms.demand.joint_maximum(ms)
    if a is None:
        raise ms.demand.missing("the agreement 'joint'", "a method for the joint-profit maximum",
                                "agreement = 'symmetric', 'proportional' or 'given' needs none")
    return a


def common_level(ms: MarketSpec, x: np.ndarray) -> np.ndarray:
    """Profiles in which every product plays a common level (quantities capped at capacity).

    Parameters
    ----------
    ms : MarketSpec
    x : ndarray of shape (n_levels,)

    Returns
    -------
    ndarray of shape (n_levels, n_products)
    """
    A = np.repeat(np.asarray(x, float)[:, None], ms.n_products, axis=1)
    if ms.quantity_setting:
        A = np.minimum(A, ms.capacity)
    return A


def _symmetric_maximum(ms: MarketSpec) -> np.ndarray:
    exact = ms.demand.symmetric_maximum(ms)
    if exact is not None:
        return exact
    _lo, hi = ms.action_bounds()
    if ms.quantity_setting:
        lo_, hi_ = 0.0, float(hi.max())
    else:
        lo_, hi_ = float(ms.cost.min()), float(hi.max())

    def slope(x):
        g = _joint_gradient(ms, common_level(ms, np.array([x]))[0])
        if ms.quantity_setting:
            g = np.where(x < ms.capacity, g, 0.0)
        return float(g.sum())

    f = lambda t: _joint(ms, common_level(ms, t))  # noqa: E731
    x, _ = maximize_scalar(f, lo_, hi_, n_grid=401)
    if _joint_gradient(ms, common_level(ms, np.array([x]))[0]) is not None:
        x = _polish_maximum(f, slope, x, lo_, hi_)
    return common_level(ms, np.array([x]))[0]


def _proportional_maximum(ms: MarketSpec) -> np.ndarray:
    if ms.homogeneous_bertrand:
        raise InputError(
            "collusion.agreement",
            "'proportional' needs per-product demand; with homogeneous Bertrand write the agreed "
            "shares as the demand's split weights and use 'joint' or 'symmetric'",
        )
    nash = static_nash(ms)
    qn = nash.quantities
    d = ms.demand
    if ms.quantity_setting:
        with np.errstate(divide="ignore"):
            room = np.where(qn > 0, ms.capacity / np.where(qn > 0, qn, 1.0), np.inf)
        lam_hi = min(1.0, float(room.min()))
    else:
        lam_hi = min(1.0, d.proportional_limit(qn))

    def profile(lam: np.ndarray) -> np.ndarray:
        if ms.quantity_setting:
            return lam[:, None] * qn[None, :]
        return d.proportional_prices(nash.prices, qn, lam)

    def path_slope(lam):
        return qn if ms.quantity_setting else d.proportional_slope(qn, lam)

    def slope(lam):
        g = _joint_gradient(ms, profile(np.array([lam]))[0])
        return float(g @ path_slope(lam))

    f = lambda t: _joint(ms, profile(t))  # noqa: E731
    lam, _ = maximize_scalar(f, 1e-9, lam_hi, n_grid=401)
    if _joint_gradient(ms, profile(np.array([lam]))[0]) is not None and path_slope(lam) is not None:
        lam = _polish_maximum(f, slope, lam, 1e-9, lam_hi)
    return profile(np.array([lam]))[0]


def _polish_maximum(f, slope, x0: float, lo: float, hi: float) -> float:
    """Refine a maximiser found by bracketing search by solving the first-order condition
    ``slope(x) = 0`` with Brent's root finder on the analytic derivative: the bracketing search alone
    locates a smooth maximum only to about the square root of machine precision."""
    s0 = slope(x0)
    if s0 == 0:
        return x0
    step = 1e-7 * max(1.0, abs(x0))
    direction = 1.0 if s0 > 0 else -1.0
    a, b = x0, x0
    for _ in range(60):
        b = min(hi, max(lo, x0 + direction * step))
        if slope(b) * s0 <= 0 or b in (lo, hi):
            break
        step *= 2
    if slope(b) * s0 > 0:
        return x0
    lo_, hi_ = (a, b) if a < b else (b, a)
    try:
        x = optimize.brentq(slope, lo_, hi_, xtol=1e-15 * max(1.0, abs(x0)), rtol=1e-15, maxiter=500)
    except ValueError:
        return x0
    return float(x) if f(np.array([x]))[0] >= f(np.array([x0]))[0] - 1e-14 * max(1.0, abs(f(np.array([x0]))[0])) else x0




def _joint_gradient(ms: MarketSpec, a: np.ndarray):
    """Gradient of total (joint) profit with respect to the actions at profile ``a``, shape
    (n_products,): quantities under Cournot (zero beyond capacity), prices under Bertrand. None when
    the demand system gives no gradient."""
    q, p, _ = ms.evaluate(a[None, :])
    g = ms.demand.joint_gradient(ms, a, q[0], p[0])
    if g is None or not ms.quantity_setting:
        return g
    return np.where(a < ms.capacity, g, 0.0)
