"""The analytic prediction that goes beside a simulation summary, where one exists.

* Critical discount factors (closed forms of :mod:`sim.theory.thresholds`) of the schemes the line-up plays --
  grim trigger (Friedman, 1971), T-period Nash reversion, stick and carrot (Abreu, 1986) -- computed
  from the levels the seats play: the collusive profile of the line-up's path (checked to be steady
  when nobody deviates), each firm's best one-shot deviation from it, the punishment profile of the
  scheme's seats and the best deviations from that (see :func:`_thresholds`). Whether the effective
  discount factor clears them is the infinite-horizon benchmark; with a random horizon the effective
  discount factor is ``delta * continuation`` (the game goes on with probability ``continuation``
  after each period).
* The trigger-price model (Green and Porter, 1984) when every firm plays the same trigger-price
  strategy in a symmetric homogeneous-good Cournot market with a demand shock: the war probability
  ``beta = F(trigger / P(nq))``, the expected collusive spell ``1 / beta``, the long-run war share
  ``beta T / (1 + beta T)`` (:func:`sim.theory.trigger_price.price_war_statistics`), and -- exactly, from the
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

import strategies.step as S
from sim.models.stagecore import evaluate_py
from sim.theory.equilibrium import best_deviation
from sim.theory.thresholds import finite_threshold, grim_threshold
from sim.theory.trigger_price import trigger_price_scheme
from strategies.automata import FinitePunishment, GrimTrigger, Opportunist, StickAndCarrot, TriggerPrice
from strategies.step import firm_complies

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
    periods (``None``: forever).

    Parameters
    ----------
    beta : float in [0, 1]
        Probability that a normal period is followed by a war.
    T : int or None
        War length (None: a war never ends).
    periods : int
        Number of periods.

    Returns
    -------
    ndarray of shape (periods,)
    """
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
    unrestricted mean ``E[tau]`` of the first breakdown (formulas in the module notes).

    Parameters
    ----------
    q_impl : float in [0, 1]
        Probability that some firm trembles in a period.
    q_perc : float in [0, 1]
        Probability that some firm misreads a rival and leaves collusion in a period.
    periods : int
        Number of periods.

    Returns
    -------
    dict
        ``survival`` (ndarray of shape (periods,)), ``restricted_mean``, ``mean`` (inf when nothing
        ever breaks collusion) and ``rate`` (``1 - r``).
    """
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
    if not ms.demand.provides("price_signal", "price_signal_slope"):  # no price distribution, no prediction
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


#: a profile is a static Nash equilibrium when no firm's best deviation gains more than this (relative);
#: far above rounding and above the effective Bertrand tick of sim.models.stagecore (about 1e-9), far below
#: any economically meaningful gain
_GAIN_RTOL = 1e-7


def scheme_of(strategy) -> tuple | None:
    """The punishment scheme a strategy plays, as far as the closed-form thresholds know it.

    Parameters
    ----------
    strategy : Automaton
        A strategy of the line-up.

    Returns
    -------
    tuple or None
        ``("grim", None)``, ``("finite", T)``, ``("stick_carrot", None)``, or None for other strategies.
    """
    if isinstance(strategy, GrimTrigger) or (isinstance(strategy, Opportunist) and strategy.after == "nash"):
        return "grim", None
    if isinstance(strategy, FinitePunishment):
        return "finite", int(strategy.length)
    if isinstance(strategy, StickAndCarrot):
        return "stick_carrot", None
    return None


def _noiseless_signal(game, i: int, s: int, actions: np.ndarray) -> bool:
    """Whether firm ``i`` in state ``s`` gets a bad signal when ``actions`` are played without noise."""

    lu = game.lineup
    mk = game.arrays
    _, _, profit, mp, _ = evaluate_py(mk, actions, 1.0, False)
    dummy = np.zeros(4, dtype=np.uint64)  # never drawn from: no perception error
    return bool(S.bad_signal(i, s, mk.n_firms, np.ascontiguousarray(actions, dtype=np.float64), mk.owner, mp,
                             profit[i], 0.0, lu.states, lu.probs, lu.levels, mk.quantity_setting, dummy))


def _on_path_profile(game) -> tuple:
    """The profile played in every period when nobody deviates and there is no noise: each firm in its
    initial state, which must be collusive and kept after the signal that profile gives. Returns
    ``(profile, None)`` or ``(None, reason)``."""
    lu = game.lineup
    mk = game.arrays
    s0 = [int(lu.firms[i, S.INITIAL]) for i in range(mk.n_firms)]
    for i in range(mk.n_firms):
        if lu.states[i, s0[i], S.COLLUSIVE] != 1:
            return None, (f"firm {i + 1} ({lu.names[i]}) does not start in a collusive state, so the line-up has "
                          "no collusive path to sustain")
    a = np.array([lu.levels[o, lu.states[o, s0[o], S.ACTION], k] for k, o in enumerate(mk.owner)])
    for i in range(mk.n_firms):
        bad = _noiseless_signal(game, i, s0[i], a)
        nxt, alt, p_alt = ((lu.states[i, s0[i], S.BAD], lu.states[i, s0[i], S.ALT_BAD], lu.probs[i, s0[i], S.P_ALT_BAD])
                           if bad else
                           (lu.states[i, s0[i], S.GOOD], lu.states[i, s0[i], S.ALT_GOOD],
                            lu.probs[i, s0[i], S.P_ALT_GOOD]))
        if nxt != s0[i] or (p_alt > 0 and alt != s0[i]):
            return None, (f"the seats' collusive levels disagree: firm {i + 1} ({lu.names[i]}) leaves collusion "
                          "after the first period even though nobody deviates, so no threshold applies")
    return a, None


def _payoffs(game, profile: np.ndarray) -> tuple:
    """Each firm's profit at ``profile``, its best one-shot deviation profit, and the profiles of those
    deviations as played (row i: firm i deviates), cached on the stage levels."""

    lv = game.levels
    key = ("payoffs", profile.tobytes())
    if key not in lv.cache:
        ms = game.market
        own = getattr(ms, "deviation_payoffs", None)  # a market that computes its own (capacity pricing)
        if own is not None:
            pi, dev, rows = own(profile)
            lv.cache[key] = (pi, dev, rows)
            return lv.cache[key]
        rows, dev = best_deviation(ms, profile)
        lv.cache[key] = (np.asarray(ms.firm_profits(profile), dtype=float), np.asarray(dev, dtype=float), rows)
    return lv.cache[key]


def _unpunished_gains(game, j0: int, s: int, profile: np.ndarray, name: str, phase: str, notes: list) -> np.ndarray:
    """Firms whose best deviation from ``profile`` pays but is not seen as a deviation by a firm playing
    seat ``j0``'s scheme in state ``s``: such a deviation goes unpunished, so the scheme is not an
    equilibrium at any discount factor. Returns a boolean mask of shape (n_firms,)."""

    lu = game.lineup
    mk = game.arrays
    pi, dev, rows = _payoffs(game, profile)
    watching = lu.states[j0, s, S.WATCH] in (S.WATCH_ALL, S.WATCH_RIVALS)
    out = np.zeros(mk.n_firms, dtype=bool)
    for i in range(mk.n_firms):
        gain = dev[i] - pi[i]
        if gain <= _GAIN_RTOL * max(1.0, abs(pi[i]), abs(dev[i])):
            continue
        seen = watching and not firm_complies(j0, s, i, np.ascontiguousarray(rows[i]), mk.owner, lu.states,
                                              lu.levels, mk.quantity_setting)
        if not seen:
            out[i] = True
    if out.any():
        who = ", ".join(f"firm {i + 1}" for i in np.flatnonzero(out))
        notes.append(f"{name}: a deviation from the {phase} pays for {who} and goes unpunished (the scheme does not "
                     "watch for it), so the scheme is not an equilibrium at any discount factor")
    return out


def _two_phase(c, d, pi_p, d_p) -> np.ndarray:
    """Stick and carrot with punishment profits ``pi_p`` and best deviations ``d_p`` from the punishment:
    ``max((d - c) / (c - pi_p), (d_p - pi_p) / (c - pi_p))`` per firm (Abreu, 1986; see
    :mod:`sim.theory.thresholds`), ``nan`` where it is not below one or the punishment is not harsher than
    collusion."""
    room = c - pi_p
    scale = max(1.0, float(np.abs(c).max()))
    with np.errstate(divide="ignore", invalid="ignore"):
        d1 = np.where(room > 1e-12 * scale, (d - c) / room, np.inf)
        d2 = np.where(room > 1e-12 * scale, (d_p - pi_p) / room, np.inf)
    per = np.maximum(np.maximum(d1, 0.0), np.maximum(d2, 0.0))
    return np.where(per >= 1.0, np.nan, per)


def _thresholds(game, run: dict, notes: list) -> list:
    """Critical discount factors of the punishment schemes in the line-up, from the levels the seats
    actually play.

    Each row is the threshold of one scheme (grim trigger, T-period reversion, stick and carrot) with
    the collusive profile the line-up plays on its path and the punishment profile of the seats that
    play it, as if every firm punished with it (the closed forms assume a common scheme). Deviations
    are each firm's best one-shot deviation from the profile played. A scheme whose punishment is not
    a static Nash equilibrium and does not police deviations from it (grim trigger and T-period
    reversion to another level), or whose expectations let a profitable deviation pass unseen, is not
    an equilibrium at any discount factor (``nan``, with a note). A line-up without a steady collusive
    path has no rows (a note says why)."""

    lu = game.lineup
    d_eff = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    groups: dict = {}
    for i, s in enumerate(lu.strategies):
        sch = scheme_of(s)
        if sch is None:
            continue
        s0 = int(lu.firms[i, S.INITIAL])
        sp = int(lu.states[i, s0, S.BAD])
        e = int(lu.states[i, s0, S.EXPECT])
        expect = lu.levels[i, e if e >= 0 else lu.states[i, s0, S.ACTION]]
        punish = lu.levels[i, lu.states[i, sp, S.ACTION]]
        key = (*sch, expect.tobytes(), punish.tobytes())
        groups.setdefault(key, []).append(i)
    if not groups:
        return []
    a_c, why = _on_path_profile(game)
    if a_c is None:
        notes.append(f"no critical discount factor: {why}")
        return []
    c, d, _ = _payoffs(game, a_c)
    in_rows = sorted(i for seats in groups.values() for i in seats)
    if len(groups) > 1 or len(in_rows) < game.n_firms:
        others = [f"firm {i + 1} ({lu.names[i]})" for i in range(game.n_firms) if i not in in_rows]
        what = (f"{', '.join(others)} {'does' if len(others) == 1 else 'do'} not punish with any of these schemes"
                if others else "the seats punish with different schemes")
        notes.append(f"{what}: each threshold is the one that would hold if every firm punished with that row's "
                     "scheme")
    out = []
    for key, seats in sorted(groups.items(), key=lambda kv: (kv[0][0], kv[0][1] or 0, kv[1][0])):
        kind, T = key[0], key[1]
        j0 = seats[0]
        s0 = int(lu.firms[j0, S.INITIAL])
        sp = int(lu.states[j0, s0, S.BAD])
        p = np.array(lu.levels[j0, lu.states[j0, sp, S.ACTION]], dtype=float)
        pi_p, d_p, _ = _payoffs(game, p)
        if kind == "grim":
            name, src = "grim trigger", "Friedman (1971)"
            per = grim_threshold(c, d, pi_p)
        elif kind == "finite":
            name, src = f"Nash reversion, T={T}", "T-period Nash reversion"
            per = finite_threshold(c, d, pi_p, T)
        else:
            name, src = "stick and carrot", "Abreu (1986)"
            per = _two_phase(c, d, pi_p, d_p)
        per = np.array(np.atleast_1d(per), dtype=float)
        loose = _unpunished_gains(game, j0, s0, a_c, name, "collusive profile", notes)
        loose |= _unpunished_gains(game, j0, sp, p, name, "punishment", notes)
        per[loose] = np.nan
        market = float(np.nan) if np.any(np.isnan(per)) else float(per.max())
        out.append({"scheme": name, "source": src, "seats": [i + 1 for i in seats], "per_firm": per.tolist(),
                    "market": market, "effective_delta": d_eff, "benchmark": "infinite horizon",
                    "collusive_profile": a_c.tolist(), "punishment_profile": p.tolist(),
                    "clears": bool(np.isfinite(market) and d_eff >= market)})
    if run["horizon"] == "fixed":
        notes.append(f"the thresholds are the infinite-horizon benchmark: with a fixed horizon of {run['periods']} "
                     "periods and a unique static Nash equilibrium, backward induction leaves Nash play in every "
                     "period as the only subgame-perfect outcome, whatever the discount factor")
    return out


def _punishment_length(game, tp: dict | None) -> dict | None:
    """Length of every punishment phase where the line-up fixes it: T for T-period Nash reversion played
    by every firm with conduct seen exactly, and for the trigger-price model with wars of T periods."""
    if tp is not None:
        if tp["war_length"] is None:
            return None
        return {"value": float(tp["war_length"]), "source": "Green and Porter (1984): wars of T periods"}
    strats = game.lineup.strategies
    if not strats or not all(isinstance(s, FinitePunishment) for s in strats):
        return None
    lengths = {int(s.length) for s in strats}
    if len(lengths) != 1 or game.monitoring["perception_error"] > 0:
        return None
    T = lengths.pop()
    return {"value": float(T), "source": f"T-period Nash reversion: T = {T}"}


def analytic_baseline(game, run: dict) -> dict:
    """The analytic predictions matching a simulation (see the module notes).

    Parameters
    ----------
    game : Game
        The compiled game (:func:`sim.simulation.game.prepare_game`).
    run : dict
        The validated run settings (:func:`sim.simulation.engine.check_run`).

    Returns
    -------
    dict with keys ``thresholds`` (list), ``trigger_price`` (dict or None), ``first_breakdown`` (dict or
    None), ``punishment_length`` (dict or None), ``collusive_share`` (float or None, expected share of
    collusive periods over the horizon), ``collusive_by_period`` (ndarray of shape (periods,) or None,
    for the figure) and ``notes`` (list of str: why a threshold is missing or what it means here).
    """
    notes: list = []
    out = {"thresholds": _thresholds(game, run, notes)}
    tp = _trigger_price(game, run)
    fb = _first_breakdown(game, run)
    out["punishment_length"] = _punishment_length(game, tp)
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
    out["notes"] = notes
    return out
