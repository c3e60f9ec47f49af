"""The analytic prediction that goes beside a simulation summary, where one exists.

* Critical discount factors (:func:`sim.thresholds.thresholds`) of the schemes the line-up plays --
  grim trigger (Friedman, 1971), T-period Nash reversion, stick and carrot (Abreu, 1986) -- and whether
  the effective discount factor clears them. With a random horizon the effective discount factor is
  ``delta * continuation`` (the game goes on with probability ``continuation`` after each period).
* The trigger-price model (Green and Porter, 1984) when every firm plays the same trigger-price
  strategy in a symmetric homogeneous-good Cournot market with a demand shock: the war probability
  ``beta = F(trigger / P(nq))``, the expected collusive spell ``1 / beta``, the long-run war share
  ``beta T / (1 + beta T)`` (:func:`sim.trigger_price.price_war_statistics`), and -- exactly, from the
  two-phase Markov chain (normal, war 1..T) started in a normal period -- the expected share of
  collusive periods over the simulated horizon, its per-period curve and the expected discounted
  profit over the horizon.
* The time to first breakdown under implementation and perception errors, when every firm starts in a
  collusive state that it keeps after a good signal and leaves after any observed deviation: with
  ``q_i = 1 - (1 - e_impl)^n`` (some firm trembles in a period) and ``q_p = 1 - prod_i (1 - P_i)``
  (some firm misreads a rival and leaves collusion, ``P_i = (1 - (1 - e_perc)^(n-1)) (1 - g_i)`` with
  forgiveness ``g_i``), the first non-collusive period ``tau`` has ``P(tau = 1) = q_i`` and
  ``P(tau = t) = (1 - q_i) r^(t-2) (1 - r)`` for ``t >= 2``, ``r = (1 - q_i)(1 - q_p)``: a tremble shows at
  once, a misreading one period later. Without perception errors ``tau`` is geometric with rate ``q_i``
  (mean ``1 / q_i``). When collusion never resumes after a breakdown (grim-type line-ups),
  ``P(all collude in period t) = P(tau > t)``.
"""

from __future__ import annotations

import math

import numpy as np

from strategies import _step as S
from strategies.automata import FinitePunishment, GrimTrigger, Opportunist, StickAndCarrot, TriggerPrice

__all__ = ["analytic_baseline", "first_breakdown_distribution", "trigger_price_chain"]


def _weights(run: dict) -> np.ndarray:
    """``P(the game is still running in period t)``, t = 1..periods."""
    H = run["periods"]
    if run["horizon"] == "random":
        return run["continuation"] ** np.arange(H, dtype=float)
    return np.ones(H)


def trigger_price_chain(beta: float, T, periods: int) -> np.ndarray:
    """``P(normal period at t)``, t = 1..periods, for the trigger-price two-phase chain started in a
    normal period: a normal period is followed by a war with probability ``beta``; a war lasts ``T``
    periods (``None``: forever)."""
    out = np.empty(periods)
    if T is None:
        out[:] = (1.0 - beta) ** np.arange(periods)
        return out
    # state 0 normal, k = 1..T: k-th period of a war
    x = np.zeros(T + 1)
    x[0] = 1.0
    for t in range(periods):
        out[t] = x[0]
        y = np.zeros_like(x)
        y[0] = x[0] * (1.0 - beta) + x[T]
        y[1] = x[0] * beta
        y[2:] = x[1:T]
        x = y
    return out


def first_breakdown_distribution(q_impl: float, q_perc: float, periods: int) -> dict:
    """``P(tau > t)`` for t = 1..periods, the restricted mean ``E[min(tau, periods)]`` and the
    unrestricted mean ``E[tau]`` (formulas in the module notes)."""
    r = (1.0 - q_impl) * (1.0 - q_perc)
    t = np.arange(1, periods + 1, dtype=float)
    surv = (1.0 - q_impl) * r ** (t - 1.0)
    restricted = 1.0 + float(surv[:-1].sum()) if periods > 1 else 1.0
    mean = q_impl + (1.0 - q_impl) * (1.0 + 1.0 / (1.0 - r)) if r < 1.0 else math.inf
    return {"survival": surv, "restricted_mean": restricted, "mean": mean, "rate": 1.0 - r}


def _reachable(states: np.ndarray, s0: int, ns: int) -> set:
    seen, todo = set(), [s0]
    while todo:
        s = todo.pop()
        if s in seen:
            continue
        seen.add(s)
        for f in (S.GOOD, S.BAD, S.ALT_GOOD, S.ALT_BAD):
            todo.append(int(states[s, f]))
    return {s for s in seen if s < ns}


def _first_breakdown(game, run: dict) -> dict | None:
    lu = game.lineup
    mon = game.monitoring
    n = game.n_firms
    e_i, e_p = mon["implementation_error"], mon["perception_error"]
    if e_i <= 0 and e_p <= 0:
        return None
    leave = []
    absorbing = True
    for i in range(n):
        st = lu.states[i]
        pr = lu.probs[i]
        s0 = int(lu.firms[i, S.INITIAL])
        ns = int(lu.firms[i, S.N_STATES])
        if st[s0, S.COLLUSIVE] != 1 or pr[s0, S.P_CHEAT] > 0 or pr[s0, S.P_ALT_GOOD] > 0 or st[s0, S.GOOD] != s0:
            return None
        w = int(st[s0, S.WATCH])
        if w in (S.WATCH_ALL, S.WATCH_RIVALS):
            # the expectation must be the firm's own collusive conduct, so that only deviations are bad
            if st[s0, S.EXPECT] != st[s0, S.ACTION]:
                return None
            bad = int(st[s0, S.BAD])
            if st[bad, S.COLLUSIVE] == 1:
                return None
            g = float(pr[s0, S.P_ALT_BAD])
            if g > 0 and int(st[s0, S.ALT_BAD]) != s0:
                return None
            leave.append((1.0 - (1.0 - e_p) ** (n - 1)) * (1.0 - g))
            if w != S.WATCH_ALL or g > 0 or any(st[s, S.COLLUSIVE] == 1 for s in _reachable(st, bad, ns)):
                absorbing = False
        elif w == S.WATCH_NOTHING:
            if st[s0, S.BAD] != s0:
                return None
            leave.append(0.0)
            absorbing = False
        else:
            # price and profit signals react to the trembles' effect on prices and profits, which this
            # formula does not cover
            return None
    q_i = 1.0 - (1.0 - e_i) ** n
    q_p = 1.0 - float(np.prod([1.0 - x for x in leave]))
    if q_i <= 0 and q_p <= 0:
        return None
    d = first_breakdown_distribution(q_i, q_p, run["periods"])
    out = {"source": "geometric first breakdown (independent errors each period)",
           "tremble_rate": q_i, "misreading_rate": q_p, "expected": d["mean"],
           "expected_within_horizon": d["restricted_mean"] if run["horizon"] == "fixed" else None,
           "geometric": q_p == 0.0}
    if absorbing:
        w = _weights(run)
        surv = d["survival"]
        out["collusive_share"] = float((surv * w).sum() / w.sum())
        out["_curve"] = surv
    return out


def _trigger_price(game, run: dict) -> dict | None:
    from .trigger_price import trigger_price_scheme

    lu = game.lineup
    strats = lu.strategies
    if not all(isinstance(s, TriggerPrice) for s in strats):
        return None
    params = [s._check_params("strategy") for s in strats]
    if any(p != params[0] for p in params[1:]):
        return None
    p = params[0]
    mon = game.monitoring
    ms = game.market
    if mon["sigma"] <= 0 or mon["implementation_error"] > 0 or mon["perception_error"] > 0:
        return None
    if not (ms.quantity_setting and ms.homogeneous_good and ms.symmetric) or p["punish"] != "nash":
        return None
    q = lu.levels[0, int(lu.states[0, 0, S.ACTION])]
    if not np.allclose(q, q[0], rtol=0, atol=0):
        return None
    T = None if p["length"] == "forever" else int(p["length"])
    d_eff = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    if not d_eff < 1.0:
        return None
    sch = trigger_price_scheme(ms, float(q[0]), p["trigger"], T, d_eff, mon["noise"], mon["sigma"])
    beta = sch.war_probability
    w = _weights(run)
    normal = trigger_price_chain(beta, T, run["periods"])
    share = float((normal * w).sum() / w.sum())
    disc = run["delta"] ** np.arange(run["periods"], dtype=float) * w
    value_h = float((disc * (normal * sch.collusive_profit + (1.0 - normal) * sch.nash_profit)).sum())
    return {
        "source": "Green and Porter (1984)",
        "war_probability": beta, "expected_collusive_spell": sch.expected_collusive_spell,
        "war_length": T, "war_share_long_run": sch.war_share, "collusive_share": share,
        "war_share": 1.0 - share, "value": sch.value, "discounted_profit": value_h,
        "collusive_profit": sch.collusive_profit, "nash_profit": sch.nash_profit,
        "equilibrium": sch.equilibrium, "max_deviation_gain": sch.max_deviation_gain,
        "expected_first_breakdown": 1.0 + sch.expected_collusive_spell,
        "_curve": normal,
    }


def _thresholds(game, run: dict) -> list:
    from .thresholds import finite_threshold, grim_threshold, stick_and_carrot

    st = game.stage
    lv = game.levels
    c = lv.firm_profits["collusive"]
    d = lv.firm_profits["deviation"]
    nsh = lv.firm_profits["nash"]
    d_eff = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    kinds: dict = {}
    for i, s in enumerate(game.lineup.strategies):
        if isinstance(s, GrimTrigger | Opportunist):
            kinds.setdefault(("grim", None), []).append(i + 1)
        elif isinstance(s, FinitePunishment):
            kinds.setdefault(("finite", int(s.length)), []).append(i + 1)
        elif isinstance(s, StickAndCarrot):
            kinds.setdefault(("stick_carrot", None), []).append(i + 1)
    out = []
    for (kind, T), seats in sorted(kinds.items(), key=lambda kv: (kv[0][0], kv[0][1] or 0)):
        if kind == "grim":
            per = grim_threshold(c, d, nsh)
            name, src = "grim trigger", "Friedman (1971)"
        elif kind == "finite":
            per = finite_threshold(c, d, nsh, T)
            name, src = f"Nash reversion, T={T}", "T-period Nash reversion"
        else:
            sc = lv.cache.get("stick_carrot")
            if sc is None:
                sc = lv.cache["stick_carrot"] = stick_and_carrot(game.market, st)
            per = np.asarray(sc.per_firm, dtype=float)
            name, src = "stick and carrot", "Abreu (1986)"
        per = np.atleast_1d(np.asarray(per, dtype=float))
        market = float(np.nan) if np.any(np.isnan(per)) else float(per.max())
        out.append({"scheme": name, "source": src, "seats": seats, "per_firm": per.tolist(), "market": market,
                    "effective_delta": d_eff, "clears": bool(np.isfinite(market) and d_eff >= market)})
    return out


def analytic_baseline(game, run: dict) -> dict:
    """The analytic predictions matching a simulation (see the module notes).

    Returns
    -------
    dict with keys ``thresholds`` (list), ``trigger_price`` (dict or None), ``first_breakdown`` (dict or
    None), ``collusive_share`` (float or None, expected share of collusive periods over the horizon)
    and ``collusive_by_period`` (ndarray of shape (periods,) or None, for the figure).
    """
    out = {"thresholds": _thresholds(game, run)}
    tp = _trigger_price(game, run)
    fb = _first_breakdown(game, run)
    curve = None
    share = None
    if tp is not None:
        curve = tp.pop("_curve")
        share = tp["collusive_share"]
    if fb is not None and "_curve" in fb:
        curve = fb.pop("_curve") if curve is None else curve
        share = fb["collusive_share"] if share is None else share
    out["trigger_price"] = tp
    out["first_breakdown"] = fb
    out["collusive_share"] = share
    out["collusive_by_period"] = curve
    return out
