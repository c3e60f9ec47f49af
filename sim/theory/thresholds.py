"""Critical discount factors: the analytic collusion baseline.

For each firm, a punishment scheme sustains the agreed collusive outcome when the firm's discount
factor ``delta`` is at least a threshold. The market's threshold is the largest firm threshold; that
firm binds (it is the one most tempted to cheat). ``nan`` in arrays (``None`` in JSON) means
"not sustainable at any discount factor below one".

Schemes
-------
grim trigger (Nash reversion forever)
    ``delta_i = (pi_D - pi_C) / (pi_D - pi_N)`` (Friedman, 1971, "A non-cooperative equilibrium for
    supergames").
Nash reversion for T periods
    Deviation is deterred when ``pi_D - pi_C <= (pi_C - pi_N) (delta + ... + delta^T)``. With
    ``K = (pi_D - pi_C) / (pi_C - pi_N)`` the threshold solves ``delta + ... + delta^T = K``, which
    has a root below one only when ``K < T``.
best symmetric two-phase punishment (stick and carrot)
    Abreu (1986, "Extremal equilibria of oligopolistic supergames", JET): one period in which every
    firm plays the common punishment level ``x`` (the stick), then back to collusion (the carrot); a
    firm that shirks the punishment restarts it. Abreu shows this structure is optimal among
    symmetric punishments when the stick can be made harsh enough; with capacities or a price floor
    one period may not be harsh enough, and the best one-period stick can then be weaker than Nash
    reversion forever. :attr:`StickCarrot.weaker_than_grim` flags that case, and
    :attr:`ThresholdReport.best` names the scheme with the lowest threshold. Two constraints per
    firm, with ``pi_P`` the profit at the punishment profile and ``pi_DP`` the best deviation
    against it:
    ``pi_D - pi_C <= delta (pi_C - pi_P)`` and ``pi_DP - pi_P <= delta (pi_C - pi_P)``.
    The punishment level is chosen to minimise the market threshold, within the action bounds
    (quantities in ``[0, capacity]``, prices at or above zero).

Partial collusion
    Below the threshold the firms can still sustain a less profitable outcome. Along the path of
    profiles ``a(lambda) = a_N + lambda (a_C - a_N)`` we find the most profitable one each scheme
    sustains at the given ``delta``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from sim.core.errors import InputError
from sim.core.params import Integer, Real
from sim.models.market import MarketSpec
from sim.theory.collusion import common_level
from sim.theory.equilibrium import StageGame, best_deviation, best_response, deviation_actions, stage_game
from sim.theory.outcome import outcome_of

__all__ = [
    "PartialCollusion",
    "SchemeThreshold",
    "StickCarrot",
    "ThresholdReport",
    "critical_discount_factors",
    "finite_threshold",
    "grim_threshold",
    "partial_collusion",
    "stick_and_carrot",
    "threshold_sensitivity",
]

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

    return float(optimize.brentq(f, 0.0, 1.0, xtol=1e-16, rtol=1e-15, maxiter=500))


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


# --------------------------------------------------------------------------------------------------
# Stick and carrot
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StickCarrot(SchemeThreshold):
    """Optimal symmetric two-phase punishment.

    Parameters
    ----------
    scheme, per_firm, market, binding, T
        As in :class:`SchemeThreshold` (``T`` is None).
    punishment_level : float
        The common punishment quantity or price ``x``.
    punishment_actions : ndarray of shape (n_products,)
        The punishment profile (``x`` for every product, capped at capacity).
    punishment_profits, punishment_deviation_profits : ndarray of shape (n_firms,)
        Profits at the punishment and of the best deviation from it.
    binding_constraint : str
        ``"collusion"`` or ``"punishment"`` (which incentive constraint binds the binding firm).
    weaker_than_grim : bool
        The best one-period stick needs a higher discount factor than grim trigger (set by
        :func:`critical_discount_factors`, which knows both).
    """

    punishment_level: float = math.nan
    punishment_actions: np.ndarray = field(default_factory=lambda: np.zeros(0))
    punishment_profits: np.ndarray = field(default_factory=lambda: np.zeros(0))
    punishment_deviation_profits: np.ndarray = field(default_factory=lambda: np.zeros(0))
    binding_constraint: str = ""
    weaker_than_grim: bool = False

    def to_dict(self) -> dict:
        """The thresholds and the punishment as plain data.

        Returns
        -------
        dict
        """
        out = super().to_dict()
        out.update(
            weaker_than_grim=self.weaker_than_grim,
            punishment_action=float(self.punishment_level),
            punishment_profile=self.punishment_actions.tolist(),
            punishment_profits=self.punishment_profits.tolist(),
            punishment_deviation_profits=self.punishment_deviation_profits.tolist(),
            binding_constraint=self.binding_constraint,
        )
        return out


def _sc_parts(ms: MarketSpec, xs: np.ndarray, pi_c: np.ndarray, pi_d: np.ndarray):
    """Per-firm (collusion, punishment) constraint thresholds at each punishment level in ``xs``.

    Returns arrays of shape (len(xs), n_firms); ``inf`` where the punishment is not harsher than
    collusion."""
    P = common_level(ms, xs)
    pi_p = ms.firm_profits(P)
    if ms.symmetric:
        _, v = best_response(ms, 0, P)
        pi_dp = np.repeat(v[:, None], ms.n_firms, axis=1)
    else:
        pi_dp = np.stack([best_response(ms, i, P)[1] for i in range(ms.n_firms)], axis=1)
    room = pi_c[None, :] - pi_p
    scale = max(1.0, float(np.abs(pi_c).max()))
    with np.errstate(divide="ignore", invalid="ignore"):
        d1 = np.where(room > _TOL * scale, (pi_d - pi_c)[None, :] / room, np.inf)
        d2 = np.where(room > _TOL * scale, (pi_dp - pi_p) / room, np.inf)
    d1 = np.maximum(d1, 0.0)
    d2 = np.maximum(d2, 0.0)
    return d1, d2, P, pi_p, pi_dp


def stick_and_carrot(market, stage: StageGame | None = None, n_grid: int | None = None) -> StickCarrot:
    """The optimal symmetric two-phase punishment and its critical discount factor.

    Parameters
    ----------
    market : Market or MarketSpec
    stage : StageGame, optional
        The stage game (solved with the joint-profit agreement if omitted).
    n_grid : int, optional
        Points of the coarse search over punishment levels before local refinement (default 161 for
        symmetric markets, where one best response serves every firm, and 65 otherwise).

    Notes
    -----
    The market threshold at level ``x`` is ``max_i max(c1_i(x), c2_i(x))`` where ``c1`` and ``c2``
    are the collusion and punishment constraints solved for delta. It is minimised over ``x`` by a
    grid search, Brent's method around the best grid point and, where the two constraints cross at
    the optimum (the usual case), a root-find of their difference, so that the threshold is exact
    to about machine precision.

    Returns
    -------
    StickCarrot
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    st = stage if stage is not None else stage_game(ms)
    pi_c, pi_d = st.collusive.firm_profits, st.deviation_profits
    if n_grid is None:
        n_grid = 161 if ms.symmetric else 65
    _lo, hi = ms.action_bounds()
    x_lo = 0.0
    x_hi = float(hi.max())
    if ms.quantity_setting and ms.demand.price_reaches_zero and np.all(ms.cost > 0):
        # beyond the choke quantity the price stays at zero and the punishment profit is -c x: harsher
        # punishments remain available up to where one period of losses outweighs the cheating gain
        # (a hundred times the choke quantity bounds the search when costs are tiny)
        x_hi = min(max(x_hi, 2.0 * float(np.max(pi_d - pi_c)) / float(ms.cost.min())), 100.0 * x_hi)
        x_hi = min(x_hi, float(ms.capacity.max()))

    def F(xs):
        d1, d2, *_ = _sc_parts(ms, np.atleast_1d(xs), pi_c, pi_d)
        return d1.max(axis=1), d2.max(axis=1)

    xs = np.linspace(x_lo, x_hi, n_grid)
    f1, f2 = F(xs)
    total = np.maximum(f1, f2)
    k = int(np.argmin(total))
    if not np.isfinite(total[k]):
        n = ms.n_firms
        return StickCarrot("stick_carrot", np.full(n, np.nan), math.nan, 0, None, math.nan,
                           np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan), "")
    a, b = xs[max(k - 1, 0)], xs[min(k + 1, n_grid - 1)]
    res = optimize.minimize_scalar(
        lambda t: min(1e300, float(np.maximum(*F(t))[0])), bounds=(a, b), method="bounded",
        options={"xatol": 1e-14 * max(1.0, x_hi), "maxiter": 1000},
    )
    x_best, v_best = (float(res.x), float(res.fun)) if res.fun <= total[k] else (float(xs[k]), float(total[k]))
    # exact crossing of the two constraints, when the optimum sits on it
    g = lambda t: float(F(t)[0][0] - F(t)[1][0])  # noqa: E731
    h = 1e-6 * max(1.0, x_hi)
    try:
        ga, gb = g(max(x_lo, x_best - h)), g(min(x_hi, x_best + h))
        if np.isfinite(ga) and np.isfinite(gb) and ga * gb < 0:
            xr = optimize.brentq(g, max(x_lo, x_best - h), min(x_hi, x_best + h), xtol=1e-16, rtol=1e-15)
            vr = float(np.maximum(*F(xr))[0])
            if vr <= v_best + 1e-12:
                x_best, v_best = float(xr), vr
    except ValueError:
        pass
    d1, d2, P, pi_p, pi_dp = _sc_parts(ms, np.array([x_best]), pi_c, pi_d)
    per_firm = np.maximum(d1[0], d2[0])
    per_firm = np.where(per_firm >= 1.0, np.nan, per_firm)
    m, kf = _market_level(per_firm)
    which = "collusion" if d1[0][kf] >= d2[0][kf] else "punishment"
    return StickCarrot(
        "stick_carrot", per_firm, m, kf, None, float(x_best), P[0], pi_p[0], pi_dp[0], which,
    )


# --------------------------------------------------------------------------------------------------
# Partial collusion
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PartialCollusion:
    """The most profitable outcome on the Nash-to-collusion path that a scheme sustains at ``delta``.

    Parameters
    ----------
    scheme : str
    delta : float
    T : int or None
    weight : float
        Position on the path: 0 is static Nash, 1 the agreed collusive outcome.
    actions : ndarray of shape (n_products,)
    profits : ndarray of shape (n_firms,)
    profit_gain : float
        ``(joint profit - joint Nash) / (joint collusive - joint Nash)``.
    """

    scheme: str
    delta: float
    T: int | None
    weight: float
    actions: np.ndarray
    profits: np.ndarray
    profit_gain: float

    def to_dict(self) -> dict:
        """The outcome as plain data.

        Returns
        -------
        dict
        """
        out = {"scheme": self.scheme, "delta": self.delta, "weight": self.weight,
               "actions": self.actions.tolist(), "profits": self.profits.tolist(), "profit_gain": self.profit_gain}
        if self.T is not None:
            out["T"] = self.T
        return out


def _path_threshold(ms: MarketSpec, st: StageGame, lam: float, scheme: str, T: int | None) -> float:
    a = st.nash.actions + lam * (st.collusive.actions - st.nash.actions)
    if ms.quantity_setting:
        a = np.minimum(a, ms.capacity)
    pi = ms.firm_profits(a[None, :])[0]
    dev_rows, dev = best_deviation(ms, a)
    if scheme == "grim":
        return _market_level(grim_threshold(pi, dev, st.nash.firm_profits))[0]
    if scheme == "finite":
        return _market_level(np.array([_finite_scalar(pi[i], dev[i], st.nash.firm_profits[i], T)
                                       for i in range(ms.n_firms)]))[0]
    sub = StageGame(ms, st.agreement, st.nash, outcome_of(ms, a), dev_rows, deviation_actions(ms, dev_rows), dev,
                    st.minmax_profits)
    return stick_and_carrot(ms, sub, n_grid=81).market


def partial_collusion(market, delta: float, scheme: str = "grim", T: int | None = None,
                      stage: StageGame | None = None, n_grid: int = 21) -> PartialCollusion:
    """Most profitable sustainable outcome on the Nash-to-collusion path at discount factor ``delta``.

    Parameters
    ----------
    market : Market or MarketSpec
    delta : float in (0, 1)
    scheme : {"grim", "finite", "stick_carrot"}
    T : int, required with ``scheme="finite"``
    stage : StageGame, optional
    n_grid : int
        Coarse grid over the path position before bisection on the sustainability boundary.

    Returns
    -------
    PartialCollusion
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    delta = _check_delta(delta)
    if scheme not in SCHEMES:
        raise InputError("scheme", f"must be one of {', '.join(map(repr, SCHEMES))}, got {scheme!r}")
    if scheme == "finite":
        if T is None:
            raise InputError("punishment", "a punishment length T is needed for finite reversion")
        T = _check_T(T)
    st = stage if stage is not None else stage_game(ms)
    joint_n = st.nash.profits.sum()
    joint_c = st.collusive.profits.sum()

    def sustained(lam):
        if lam == 0:
            return True
        t = _path_threshold(ms, st, lam, scheme, T)
        return bool(np.isfinite(t) and t <= delta)

    lams = np.linspace(0.0, 1.0, n_grid)
    ok = np.array([sustained(x) for x in lams])
    profiles = st.nash.actions[None, :] + lams[:, None] * (st.collusive.actions - st.nash.actions)[None, :]
    joint = ms.profits(profiles).sum(axis=1)
    cand = np.flatnonzero(ok)
    b = int(cand[np.argmax(joint[cand])])
    lam = lams[b]
    if b + 1 < n_grid and not ok[b + 1]:
        lo_, hi_ = lams[b], lams[b + 1]
        for _ in range(50):
            mid = 0.5 * (lo_ + hi_)
            if sustained(mid):
                lo_ = mid
            else:
                hi_ = mid
        lam = lo_
    if lam <= 1e-9:  # indistinguishable from static Nash at double precision
        lam = 0.0
    a = st.nash.actions + lam * (st.collusive.actions - st.nash.actions)
    pi = ms.firm_profits(a[None, :])[0]
    gain = (pi.sum() - joint_n) / (joint_c - joint_n) if joint_c > joint_n else math.nan
    return PartialCollusion(scheme, delta, T, float(lam), a, pi, float(gain))


# --------------------------------------------------------------------------------------------------
# Report
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ThresholdReport:
    """Every threshold of one market, with the stage game it comes from.

    Parameters
    ----------
    stage : StageGame
    grim : SchemeThreshold
    finite : list of SchemeThreshold
        One entry per punishment length T.
    stick_carrot : StickCarrot
    partial : list of PartialCollusion
        One per (delta, scheme) asked for.
    sensitivity : dict
        Comparative statics of the binding firm's grim threshold and finite-reversion thresholds.
    """

    stage: StageGame
    grim: SchemeThreshold
    finite: list
    stick_carrot: StickCarrot
    partial: list
    sensitivity: dict

    @property
    def best(self) -> SchemeThreshold:
        """The computed scheme with the lowest market threshold (grim trigger on ties)."""
        cands = [self.grim, *self.finite, self.stick_carrot]
        ok = [c for c in cands if c.sustainable]
        return min(ok, key=lambda c: c.market) if ok else self.grim

    def to_dict(self) -> dict:
        """The stage game, every threshold, partial collusion and sensitivity as plain data.

        Returns
        -------
        dict
        """
        out = self.stage.to_dict()
        out["n_firms"] = self.stage.n_firms
        out["thresholds"] = {
            "grim": self.grim.to_dict(),
            "finite": [f.to_dict() for f in self.finite],
            "stick_carrot": self.stick_carrot.to_dict(),
            "best": {"scheme": self.best.scheme, "T": self.best.T, "market": _none(self.best.market)},
        }
        out["partial_collusion"] = [p.to_dict() for p in self.partial]
        out["sensitivity"] = self.sensitivity
        return out


def critical_discount_factors(market, punishments=(1, 2, 3, 5, 10), deltas=(), agreement: str = "joint",
                              actions=None, stage: StageGame | None = None) -> ThresholdReport:
    """Compute every threshold of a market.

    Parameters
    ----------
    market : Market or MarketSpec
    punishments : sequence of int
        Lengths T of finite Nash reversion to report.
    deltas : sequence of float
        Discount factors at which to report partial collusion (every scheme, every T).
    agreement : {"joint", "symmetric", "proportional", "given"}
        The collusive outcome (see :func:`sim.theory.equilibrium.collusive_outcome`).
    actions : array_like of shape (n_products,), optional
        The agreed actions with ``agreement="given"``.
    stage : StageGame, optional
        The stage game, when already solved (``agreement`` and ``actions`` are then not used).

    Returns
    -------
    ThresholdReport
    """
    ms = market if isinstance(market, MarketSpec) else market.spec()
    Ts = [_check_T(T, "punishment") for T in punishments]
    ds = [_check_delta(d, "delta") for d in deltas]
    st = stage if stage is not None else stage_game(ms, agreement, actions)
    c, d, n = st.collusive.firm_profits, st.deviation_profits, st.nash.firm_profits
    grim = _scheme("grim", grim_threshold(c, d, n))
    finite = [_scheme("finite", finite_threshold(c, d, n, T), T) for T in Ts]
    sc = stick_and_carrot(ms, st)
    if grim.sustainable and (not sc.sustainable or sc.market > grim.market):
        sc = dataclasses.replace(sc, weaker_than_grim=True)
    partial = []
    for delta in ds:
        partial.append(partial_collusion(ms, delta, "grim", stage=st))
        for T in Ts:
            partial.append(partial_collusion(ms, delta, "finite", T=T, stage=st))
        partial.append(partial_collusion(ms, delta, "stick_carrot", stage=st))
    k = grim.binding
    sens = {"binding_firm": k + 1, "grim": threshold_sensitivity(c[k], d[k], n[k])}
    sens["finite"] = [{"T": T, **threshold_sensitivity(c[k], d[k], n[k], T)} for T in Ts]
    return ThresholdReport(st, grim, finite, sc, partial, sens)
