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

The closed forms and :class:`SchemeThreshold` live in :mod:`sim.theory.schemes`, the stick and carrot in
:mod:`sim.theory.stick_carrot`; this module gathers them into :func:`critical_discount_factors` and
re-exports their public names.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from sim.core.errors import InputError, SolverError
from sim.models.market import MarketSpec
from sim.theory.equilibrium import StageGame, best_deviation, deviation_actions, stage_game
from sim.theory.outcome import outcome_of
from sim.theory.schemes import (
    SCHEMES,
    SchemeThreshold,
    _check_delta,
    _check_T,
    _finite_scalar,
    _market_level,
    _none,
    _scheme,
    finite_threshold,
    grim_threshold,
    threshold_sensitivity,
)
from sim.theory.stick_carrot import StickCarrot, stick_and_carrot
from sim.theory.verdicts import not_sustainable_reason, solver_reason, tied_firms

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
    failures : dict
        The schemes (``"finite[j]"``, ``"stick_carrot"``, ``"partial[k]"``, 0-based) whose numerical method
        failed, with the reason (:func:`sim.theory.verdicts.solver_reason`); those schemes hold ``nan``.
    """

    stage: StageGame
    grim: SchemeThreshold
    finite: list
    stick_carrot: StickCarrot
    partial: list
    sensitivity: dict
    failures: dict = field(default_factory=dict)

    @property
    def best(self) -> SchemeThreshold:
        """The computed scheme with the lowest market threshold (grim trigger on ties)."""
        cands = [self.grim, *self.finite, self.stick_carrot]
        ok = [c for c in cands if c.sustainable]
        return min(ok, key=lambda c: c.market) if ok else self.grim

    def _verdicts(self, out: dict, scheme: SchemeThreshold, key: str) -> None:
        """Add ``tied_firms`` (firm numbers from 1 that bind equally, within :data:`sim.theory.verdicts.TIE_RTOL`)
        and, when not sustainable, ``not_sustainable`` (code, firms, text) to a scheme's dict."""
        out["tied_firms"] = [i + 1 for i in tied_firms(scheme.per_firm, scheme.market)]
        if not scheme.sustainable:
            st = self.stage
            out["not_sustainable"] = self.failures.get(key) or not_sustainable_reason(
                scheme.scheme, scheme.per_firm, st.collusive.firm_profits, st.deviation_profits,
                st.nash.firm_profits, scheme.T)

    def to_dict(self) -> dict:
        """The stage game, every threshold, partial collusion and sensitivity as plain data.

        Each scheme's dict carries ``tied_firms`` and, when not sustainable, ``not_sustainable`` (see
        :mod:`sim.theory.verdicts`); a partial-collusion entry whose search failed carries ``note``.

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
        th = out["thresholds"]
        self._verdicts(th["grim"], self.grim, "grim")
        for j, f in enumerate(self.finite):
            self._verdicts(th["finite"][j], f, f"finite[{j}]")
        self._verdicts(th["stick_carrot"], self.stick_carrot, "stick_carrot")
        out["partial_collusion"] = [p.to_dict() for p in self.partial]
        for k, p in enumerate(out["partial_collusion"]):
            if f"partial[{k}]" in self.failures:
                p["note"] = self.failures[f"partial[{k}]"]["text"]
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
    failures: dict = {}
    none = np.full(ms.n_firms, np.nan)
    grim = _scheme("grim", grim_threshold(c, d, n))
    finite = [_guarded(lambda T=T: _scheme("finite", finite_threshold(c, d, n, T), T), f"finite[{j}]", failures,
                       SchemeThreshold("finite", none, math.nan, 0, T)) for j, T in enumerate(Ts)]
    sc = _guarded(lambda: stick_and_carrot(ms, st), "stick_carrot", failures,
                  StickCarrot("stick_carrot", none, math.nan, 0, None, math.nan, none, none, none, ""))
    if grim.sustainable and (not sc.sustainable or sc.market > grim.market):
        sc = dataclasses.replace(sc, weaker_than_grim=True)
    asked = [(delta, scheme, T) for delta in ds
             for scheme, T in [("grim", None), *(("finite", T) for T in Ts), ("stick_carrot", None)]]
    partial = [_guarded(lambda a=a: partial_collusion(ms, a[0], a[1], T=a[2], stage=st), f"partial[{j}]", failures,
                        PartialCollusion(a[1], a[0], a[2], math.nan, np.full(ms.n_products, np.nan), none,
                                         math.nan))
               for j, a in enumerate(asked)]
    k = grim.binding
    sens = {"binding_firm": k + 1, "grim": threshold_sensitivity(c[k], d[k], n[k])}
    sens["finite"] = [{"T": T, **threshold_sensitivity(c[k], d[k], n[k], T)} for T in Ts]
    return ThresholdReport(st, grim, finite, sc, partial, sens, failures)


def _guarded(compute, key: str, failures: dict, fallback):
    """``compute()``, or ``fallback`` with the reason in ``failures[key]`` when its numerical method fails (one
    scheme's failure does not take the other schemes with it)."""
    try:
        return compute()
    except InputError:
        raise
    except (SolverError, RuntimeError, ValueError, ArithmeticError) as e:
        failures[key] = solver_reason(e)
        return fallback
