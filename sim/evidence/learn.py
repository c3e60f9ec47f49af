"""How a learn result is shown: the terminal report, the JSON document and the figures (see
:mod:`sim.evidence.render`).

The figures are the impulse response (mean prices with their confidence bands, the static-Nash and joint-profit
levels as reference lines), the histogram of profit gains across sessions, and the sessions' limit prices of firms
1 and 2 on the grid. ``supergame learn --plot`` saves them and the bundle of a ``learn`` run shows them, drawn from
the same stored result.
"""

from __future__ import annotations

import numpy as np

from sim.core.text import CAUTION, fmt_num, table
from sim.evidence.answers import learn_headline
from sim.evidence.learn_alternating import alternating_figure, alternating_lines
from sim.evidence.learn_automata import automaton_lines
from sim.evidence.learn_event import event_figure, event_lines
from sim.evidence.learn_shocks import error_play_lines, observe_lines, shock_lines
from sim.evidence.learn_signals import signal_figure, signal_lines
from sim.evidence.render import Drawn, Renderer, pyplot
from sim.evidence.thresholds import describe_market
from sim.learning.analysis import LearnResult
from sim.models.market import market_from_dict

__all__ = ["RENDERER", "as_json", "console", "figures", "sessions_are_copies"]


def _num(x) -> float:
    """A stored number (None for nan) as a float."""
    return np.nan if x is None else float(x)


def _pct(x) -> str:
    if x is None or x != x:
        return "-"
    return f"{100 * x:.1f} %"


def _ci(d: dict, digits: int = 4) -> str:
    if d.get("n", 0) < 2:
        return "-"
    return f"[{fmt_num(d['low'], digits)}, {fmt_num(d['high'], digits)}]"


def _act(res: LearnResult) -> str:
    return "quantity" if res.quantity_setting else "price"


def _same_learner(a: dict, b: dict) -> bool:
    da, db = dict(a), dict(b)
    ga, gb = np.array(da.pop("grid")), np.array(db.pop("grid"))
    return da == db and ga.shape == gb.shape and bool(np.allclose(ga, gb, rtol=1e-9, atol=0))


def _update_words(c: dict) -> str:
    """The update rule, when it is not the asynchronous default (Asker, Fershtman and Pakes, 2022)."""
    rule = c.get("update", "asynchronous")
    if rule == "synchronous":
        return "; synchronous updates (every action's value from what it would have earned)"
    if rule == "mixed":
        return (f"; mixed updates (each action not played also updated with probability "
                f"{fmt_num(c['counterfactual_share'])})")
    return ""


def _seat_lines(res: LearnResult) -> list[str]:
    """One line per seat, or one for all when every seat holds the same learner."""
    act = _act(res)
    seated = [c for c in res.learners if "strategy" not in c]
    same = len(seated) == res.n_firms and all(_same_learner(x, seated[0]) for x in seated)
    lines = []
    for i, c in enumerate(res.learners):
        if "strategy" in c:
            levels = ", ".join(fmt_num(v) for v in c["actions"])
            rnd = "; acts at random" if c["acts_at_random"] else ""
            lines.append(f"Firm {i + 1}: {c['strategy']} (automaton; {act}s {levels}{rnd})")
            continue
        if i > 0 and same:
            continue
        who = "Learners" if same else f"Firm {i + 1}"
        if c.get("family") == "fixed":
            src = c.get("source") or {}
            saved = src.get("family", "q")
            bandit = {"ucb": "an upper-confidence-bound bandit", "thompson": "a Thompson-sampling bandit"}
            memory = (f"one {act} whatever the history ({bandit[saved]} keeps no state)" if saved in bandit
                      else f"memory {c['k']}")
            lines.append(f"{who}: fixed policy (no learning, no exploration): the greedy {act}s of firm "
                         f"{src.get('firm')}'s learner in session {src.get('session')} of {src.get('policy_from')} "
                         f"(arrays SHA-256 {str(src.get('arrays_sha256'))[:12]}...), {c['m']} {act} levels from "
                         f"{fmt_num(c['grid'][0])} to {fmt_num(c['grid'][-1])}, {memory}")
            continue
        if c.get("family", "q") != "q":
            lines.append(_bandit_line(who, c, act))
            continue
        init = "given array" if c["init"] == "given" else c["init"]
        lines.append(f"{who}: Q-learning, alpha {fmt_num(c['alpha'])}, beta {c['beta']:g}, delta "
                     f"{fmt_num(c['delta'])}, {c['m']} {act} levels from {fmt_num(c['grid'][0])} to "
                     f"{fmt_num(c['grid'][-1])}, memory {c['k']}, Q initialised {init}{_update_words(c)}")
    return lines


def _bandit_line(who: str, c: dict, act: str) -> str:
    """A bandit seat in words: its rule, exploration constant, grid and observation noise (sim.learning.bandits)."""
    rule = {"ucb": "upper confidence bound (UCB1 index, exploration c", "thompson": "Thompson sampling (Gaussian, "
            "posterior scale v"}[c["family"]]
    noise = f", observation noise {fmt_num(c['noise'])}" if c.get("noise") else ""
    return (f"{who}: {rule} {fmt_num(c['exploration'])}), {c['m']} {act} levels from {fmt_num(c['grid'][0])} to "
            f"{fmt_num(c['grid'][-1])}, no memory of past {act}s, rewards = profit scaled by the largest profit on "
            f"the grid{noise}")


def _q_init_words(res: LearnResult) -> str:
    """The end of "this run's seed (...) ... not used": with the Q initialisation where a Q-learner sits."""
    q = any(d.get("family", "q") == "q" for d in res.learners if isinstance(d, dict) and "strategy" not in d)
    return " and Q initialisation are" if q else " is"


def _setup_lines(res: LearnResult) -> list[str]:
    """The market, the seats, the run and how long sessions took to converge."""
    sm, st = res.summary, res.settings
    lvl = f"{100 * res.confidence:g} %"
    market = market_from_dict(res.market)  # the settings in their own order, however the result was stored
    lines = [f"Market: {describe_market(market.to_dict(), res.n_firms)}", *_seat_lines(res)]
    cont = st.get("continued")
    origin = (f"continued from saved learners, not new: each goes on from its saved state and random stream, so "
              f"this run's seed ({st['seed']}){_q_init_words(res)} not used" if cont else f"seed {st['seed']}")
    after = " after the event" if res.event else ""
    lines.append(f"Sessions: {sm['sessions']} ({origin}), converged after {st['convergence']} periods "
                 f"without a change of any greedy strategy, cap {st['max_periods']:g} periods{after}")
    if cont:
        lines.append(_continued_line(cont))
    if st["max_periods"] < st["convergence"] and not cont:
        lines.append(f"No session can converge: the cap ({st['max_periods']:g} periods) is shorter than the "
                     f"convergence window ({st['convergence']} periods without a change); the outcomes are those of "
                     "learners stopped while still learning")
    reasons: dict = {}
    for key, why in (st.get("unused") or {}).items():
        reasons.setdefault(why, []).append(key)
    lines += [f"Not used, though given: {', '.join(keys)}: {why}" for why, keys in reasons.items()]
    lines += observe_lines(res) + shock_lines(res) + _grid_reach_lines(res) + _copies_line(res)
    lines.append("")
    c, per = sm["converged"], sm["periods"]
    lines.append(f"Converged: {c['count']} of {c['n']} sessions ({_pct(c['share'])}, {lvl} CI "
                 f"{_pct(c['low'])} to {_pct(c['high'])})")
    if per["n"]:
        ci = f"[{per['low']:,.0f}, {per['high']:,.0f}]" if per["n"] > 1 else "-"
        start = (" (counted from each session's start, up to the end of the convergence window: the last change "
                 "plus the periods without one)" if res.event or cont else "")
        lines.append(f"Periods to convergence{start}: mean {per['mean']:,.0f} {ci}, median {per['q50']:,.0f}, "
                     f"5-95 % {per['q05']:,.0f} to {per['q95']:,.0f}")
    lines.append("")
    bm = sm["benchmarks"]
    act = _act(res)
    rows = [[f"static Nash {act}", *bm["nash_actions"]], [f"joint-profit {act}", *bm["collusive_actions"]],
            ["static Nash profit", *bm["nash_profits"]], ["joint-profit profit", *bm["collusive_profits"]]]
    merger = (res.event or {}).get("merger")
    lines += ["Benchmarks (continuous actions" + ("; the market before the merger, single-product firms: the merger's "
                                                  "static effect is given after the event" if merger else "") + ")",
              table(["", *_firms(res)], rows), ""]
    return lines


def sessions_are_copies(res: LearnResult) -> bool:
    """Whether every session ran the same way (the same periods, limit prices and deviation gain in two sessions or
    more): nothing the sessions draw changed their course (UCB bandits without observation noise, with automata
    that do not act at random, draw nothing), so they are copies of one session and the intervals across them
    measure nothing.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    bool
    """
    ps = res.per_session
    return len(ps["periods"]) > 1 and all(len({repr(v) for v in ps[k]}) == 1
                                          for k in ("periods", "limit_prices", "deviation_gain"))


def _copies_line(res: LearnResult) -> list[str]:
    """The warning of :func:`sessions_are_copies`."""
    if not sessions_are_copies(res):
        return []
    n = len(res.per_session["periods"])
    return [f"Warning: all {n} sessions ran the same way (the same periods, limit prices and deviation gain): "
            "nothing they draw changed their course, so they are copies of one session, not independent "
            "observations; the intervals across them have no width and the shares count one outcome "
            f"{n} times"]


def _grid_reach_lines(res: LearnResult) -> list[str]:
    """A warning for every learner whose grid does not reach its static-Nash or joint-profit action (a saved grid
    kept after an entry or a shock, or a grid given by hand): the learner cannot play that benchmark, so its
    nearness to it and the profit gain are bounded by the grid's end."""
    act = _act(res)
    bm = res.summary["benchmarks"]
    found: dict = {}
    for i, c in enumerate(res.learners):
        grid = c.get("grid") if "strategy" not in c else None
        if not grid:
            continue
        lo, hi = float(grid[0]), float(grid[-1])
        for name, x in (("static-Nash", bm["nash_actions"][i]), ("joint-profit", bm["collusive_actions"][i])):
            x = _num(x)
            if np.isfinite(x) and not lo - 1e-9 * max(1.0, abs(x)) <= x <= hi + 1e-9 * max(1.0, abs(x)):
                side = "below the lowest" if x < lo else "above the highest"
                found.setdefault((name, fmt_num(x), side, fmt_num(lo), fmt_num(hi)), []).append(i + 1)
    out = []
    for (name, x, side, lo, hi), firms in found.items():
        who = (f"firm {firms[0]}'s" if len(firms) == 1 else
               "firms " + ", ".join(map(str, firms[:-1])) + f" and {firms[-1]}'s")
        out.append(f"Warning: the {name} {act} in this market ({x}) lies {side} {act} on {who} grid ({lo} to {hi}): "
                   f"{'it cannot' if len(firms) == 1 else 'they cannot'} play it, so nearness to the {name} outcome "
                   "and the profit gain are bounded by the grid's end")
    return out


def _shock_words(shock: dict | None) -> str:
    """The demand shock of continued sessions against the one they were saved under (nothing for a result stored
    before it was compared)."""
    if not shock:
        return ""

    def words(d):
        if d["noise"] == "none" or not d["sigma"]:
            return "no demand shock"
        return f"{d['noise']} shock, sigma {d['sigma']:g}"

    now = words(shock["now"])
    if shock.get("saved") is None:
        return f"; the file does not record the demand shock of the run that saved them (now: {now})"
    was = words(shock["saved"])
    return f"; demand: {now}, as when they were saved" if was == now else f"; demand: {was} -> {now}"


def _continued_line(cont: dict) -> str:
    """Where continued sessions came from and what changed since they were saved."""
    lo, hi = cont["periods_before"]
    before = f"{lo:,} periods" if lo == hi else f"{lo:,} to {hi:,} periods"
    head = (f"Saved learners: saved by a run with seed {cont['saved_seed']} (cell {cont['saved_cell']}) after "
            f"{before} of learning (the cap counts from the sessions' start)")
    head += _shock_words(cont.get("shock"))
    if not cont["changed"]:
        return head + "; every learner's settings as when they were saved"

    def value(v):
        return f"{v:g}" if isinstance(v, float) else str(v)

    changes = "; ".join(f"firm {c['firm']} {c['setting']} {value(c['saved'])} -> {value(c['now'])}"
                        for c in cont["changed"])
    return (head + f"; changed since the save, from here on (no [event] records it): {changes}")


def _firms(res: LearnResult) -> list[str]:
    return [f"firm {i + 1}" for i in range(res.n_firms)]


def _limit_lines(res: LearnResult) -> list[str]:
    """Limit outcomes: prices, profits and the profit gain with intervals, nearness to the benchmarks, cycles."""
    sm, n = res.summary, res.n_firms
    lvl = f"{100 * res.confidence:g} %"
    lim = sm["limit"]
    if res.limit_exact:
        lines = [f"Limit outcomes: greedy play from the final state, means over the limit cycle ({sm['over']}); "
                 f"{lvl} confidence intervals across sessions"]
    else:
        lines = [f"Limit outcomes: ESTIMATED, not an exact cycle (firm {', '.join(map(str, lim['random_firms']))} "
                 f"acts at random): means of {lim['periods']} simulated periods of greedy play per session after "
                 f"{lim['burn_in']} discarded ({sm['over']}); {lvl} confidence intervals across sessions"]
    rows = [[f"price, firm {i + 1}", d["mean"], _ci(d)] for i, d in enumerate(sm["limit_prices"])]
    rows += [[f"profit, firm {i + 1}", d["mean"], _ci(d)] for i, d in enumerate(sm["limit_profits"])]
    pg = sm["profit_gain"]
    rows.append(["profit gain", pg["mean"], _ci(pg)])
    if n > 1 and not res.symmetric:
        rows += [[f"profit gain, firm {i + 1}", d["mean"], _ci(d)] for i, d in enumerate(sm["firm_profit_gain"])]
    lines.append(table(["", "mean", f"{lvl} CI"], rows, "lrl"))
    if pg["n"]:
        lines.append(f"  profit gain across sessions: 5 % {fmt_num(pg['q05'])}, quartiles {fmt_num(pg['q25'])} / "
                     f"{fmt_num(pg['q50'])} / {fmt_num(pg['q75'])}, 95 % {fmt_num(pg['q95'])}")
    nc, nn = sm["near_collusive"], sm["near_nash"]
    lines.append(f"  at or near the joint-profit outcome (every firm within {fmt_num(res.settings['near'], 2)} of its "
                 f"Nash-to-collusive distance): {_pct(nc['share'])} ({_pct(nc['low'])} to {_pct(nc['high'])})")
    lines.append(f"  at or near static Nash: {_pct(nn['share'])} ({_pct(nn['low'])} to {_pct(nn['high'])})")
    if res.limit_exact:
        total = sum(sm["cycle_lengths"].values())
        cyc = ", ".join(f"{k}: {_pct(v / total)}"
                        for k, v in sorted(sm["cycle_lengths"].items(), key=lambda x: int(x[0])))
        lines.append(f"  length of the limit cycle: {cyc}")
    else:
        lines.append("  length of the limit cycle: not defined (play after learning is random)")
    return lines + [""]


def _no_deviation_line(res: LearnResult, dev: int, act: str) -> list[str]:
    """A note on the sessions whose forced deviation is the action the deviator already plays in the limit (a
    cycle of one profile): nothing is deviated there, so the response and the value gain are zero by construction."""
    ps = res.per_session
    if not res.limit_exact or not ps.get("cycle_length"):
        return []
    sel = [j for j, ok in enumerate(ps["converged"]) if ok] or list(range(len(ps["converged"])))
    same = [j for j in sel if ps["cycle_length"][j] == 1 and ps["deviation_action"][j] is not None
            and ps["cycle_actions"] and abs(ps["cycle_actions"][j][0][dev - 1] - ps["deviation_action"][j]) <= 1e-12]
    if not same:
        return []
    return [f"  in {len(same)} of {len(sel)} sessions the forced {act} is the one firm {dev} already plays in the "
            "limit (its static best response on the grid): nothing is deviated there, so their response and value "
            "of deviating are zero by construction and they count as returning"]


def _deviator_delta(res: LearnResult) -> str:
    """The discount factor the deviation is valued with, in words: the deviator's own, or the first learner's for an
    automaton deviator (sim.learning.results.deviator_discount); a bandit does not discount when it learns, so its
    value uses the run's delta, and the words say so."""
    seat = int(res.settings["deviator"]) - 1
    c = res.learners[seat]
    if "strategy" in c:
        c = next((x for x in res.learners if "strategy" not in x), None)
        if c is None:
            return ""
    delta = c.get("delta")
    if delta is None:
        return ""
    bandit = "; bandits learn without discounting, so the run's delta values the deviation" if c.get("family") in (
        "ucb", "thompson") else ""
    return f", discount factor {fmt_num(float(delta))}{bandit}"


def _merged_deviator(res: LearnResult) -> bool:
    """Whether the deviating product merged (its deviation is then valued with the merged firm's profit)."""
    ev = res.event if isinstance(res.event, dict) else {}
    firms = (ev.get("merger") or {}).get("firms") or []
    return int(res.settings["deviator"]) in [int(f) for f in firms]


def _deviation_lines(res: LearnResult) -> list[str]:
    """What the deviation earns under the learned strategies, and whether play returns to the cycle."""
    sm = res.summary
    lim, g, pays = sm["limit"], sm["deviation_gain"], sm["deviation_pays"]
    d = _deviator_delta(res)
    if _merged_deviator(res):
        d += "; of the merged firm: its products' summed profit, what the learner is rewarded with"
    if res.limit_exact:
        r = sm["returned"]
        if "periods_to_return" in sm:
            when = f"{fmt_num(sm['periods_to_return']['mean'], 2)} periods after the deviation on average"
        else:
            # a result stored before the count started after the deviation: it counted the deviation's period too
            when = (f"{fmt_num(sm['return_periods']['mean'], 2)} periods on average, counting the deviation's own "
                    "period (a result stored by an earlier version)")
        return [f"  discounted value of deviating minus not deviating (exact, under the learned strategies{d}): "
                f"{fmt_num(g['mean'])} {_ci(g)}; the deviation pays at {_pct(pays['mean'])} of cycle points",
                f"  play returns to the pre-deviation cycle after {_pct(r['mean'])} of deviations, {when}"]
    return [f"  discounted value of deviating minus not deviating (ESTIMATED over {lim['value_periods']} "
            f"periods, truncation error below {lim['value_truncation_bound']:.2g}{d}): {fmt_num(g['mean'])} "
            f"{_ci(g)}; the realised gain is positive in {_pct(pays['mean'])} of the simulated deviations",
            "  return to the pre-deviation cycle: not defined (play after learning is random)"]


def _impulse_lines(res: LearnResult) -> list[str]:
    """The impulse response: the table of prices and profits around the deviation, the rivals' reply."""
    sm, st, act = res.summary, res.settings, _act(res)
    dev = int(st["deviator"])  # counted from 1
    if isinstance(st["deviation"], str):
        what = "its static best response (on its grid)"
    else:
        what = f"{act} {fmt_num(float(res.per_session['deviation_action'][0]))} (nearest grid point)"
    over = ("mean over sessions and the points of each limit cycle" if res.limit_exact else
            f"ESTIMATED: mean over sessions and {sm['limit']['deviations']} simulated deviations per session")
    lines = [f"Impulse response: firm {dev} forced to {what} for one period, then everyone follows the learned "
             f"strategies ({over})"]
    ir = sm["impulse_response"]
    if not ir["prices"]["mean"]:
        return lines
    rows = []
    for tau, (pr, pi) in enumerate(zip(ir["prices"]["mean"], ir["profits"]["mean"])):
        label = "before" if tau == 0 else ("deviation" if tau == 1 else f"+{tau - 1}")
        rows.append([label, *pr, *pi])
    firms = _firms(res)
    lines.append(table(["period", *[f"{act} {f}" for f in firms], *[f"profit {f}" for f in firms]], rows))
    lines += _no_deviation_line(res, dev, act)
    rc = sm["rival_price_cut"]
    cuts = sm.get("rival_price_cuts") or []
    learners = [c for c in cuts if c["learner"]]
    if rc:
        who = ("rival's" if len(cuts) == 1 else "learning rival's" if len(learners) == 1 else
               "learning rivals' mean" if learners and len(learners) < len(cuts) else "rivals' mean")
        lines.append(_rival_change_line(rc, act, who))
    if len(cuts) > 1:
        for c in cuts:
            kind = "a learner" if c["learner"] else f"{res.seats[c['firm'] - 1].replace('_', ' ')}, an automaton"
            lines.append(_rival_change_line(c, act, f"  firm {c['firm']} ({kind}):"))
    return lines + _deviation_lines(res)


def _rival_change_line(rc: dict, act: str, who: str) -> str:
    """A rival's (or the rivals' mean) change of action in the period after the deviation, with its interval and
    what it shows."""
    change = 0.0 - _num(rc["mean"]) + 0.0  # no "-0" for a change of zero
    lo, hi = 0.0 - _num(rc["high"]) + 0.0, 0.0 - _num(rc["low"]) + 0.0
    if rc.get("n", 0) < 2 or not (np.isfinite(lo) and np.isfinite(hi)):
        ci, verdict = "-", "one session: no interval"
    else:
        ci = f"[{fmt_num(lo)}, {fmt_num(hi)}]"
        verdict = ("a cut: the whole interval lies below 0" if hi < 0 else
                   "a rise: the whole interval lies above 0" if lo > 0 else "no clear change: the interval contains 0")
    return (f"  {who} {act} in the period after the deviation minus before it: {fmt_num(change)} {ci} ({verdict})")


def console(res: LearnResult) -> str:
    """The terminal report of a learn result.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    str
    """
    moves = alternating_lines(res) or _impulse_lines(res)  # alternating moves have no impulse response
    lines = [learn_headline(res), "", *_setup_lines(res)] + _limit_lines(res) + moves
    lines += automaton_lines(res)
    lines += event_lines(res)
    lines += signal_lines(res) + error_play_lines(res)
    lines += ["", CAUTION]
    return "\n".join(lines)


def as_json(res: LearnResult) -> dict:
    """The ``--json`` document of a learn result: settings, seats, the summary, every session's outcomes, the
    market and the caution; and, when the run has them, the automata's punishments during learning (``automata``),
    the account of an event (``event``), the learned response to an adverse demand draw (``shock_response``) and
    play with error after learning from noisy prices (``error_play``).

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    dict
    """
    doc = {"settings": res.settings, "learners": res.learners, "seats": res.seats, "summary": res.summary,
           "per_session": res.per_session, "market": res.market}
    for key in ("automata", "event", "shock_response", "error_play"):
        if getattr(res, key):
            doc[key] = getattr(res, key)
    doc["caution"] = CAUTION
    return doc


def _impulse_figure(res: LearnResult):
    plt = pyplot()
    sm, act = res.summary, _act(res)
    ir = sm["impulse_response"]["prices"]
    mean = np.array(ir["mean"], dtype=float)
    lo, hi = np.array(ir["low"], dtype=float), np.array(ir["high"], dtype=float)
    tau = np.arange(mean.shape[0])
    fig, ax = plt.subplots(figsize=(7, 4.2))
    for i in range(res.n_firms):
        label = f"firm {i + 1}" + (" (deviates)" if i + 1 == int(res.settings["deviator"]) else "")
        ax.plot(tau, mean[:, i], marker="o", ms=3, label=label)
        if np.all(np.isfinite(lo[:, i])):
            ax.fill_between(tau, lo[:, i], hi[:, i], alpha=0.2)
    bm = sm["benchmarks"]
    which = "actions" if act == "quantity" else "prices"
    merger = (res.event or {}).get("merger") or {}
    before = " before the merger" if merger else ""
    ax.axhline(float(np.mean(bm[f"nash_{which}"])), color="grey", ls=":", label=f"static Nash {act}{before}")
    ax.axhline(float(np.mean(bm[f"collusive_{which}"])), color="grey", ls="--", label=f"joint-profit {act}")
    after = ""
    if merger.get("available") and act == "price":
        for i, line in enumerate(ax.get_lines()[:res.n_firms]):
            ax.axhline(float(merger["nash_prices"][i]), color=line.get_color(), ls="-.", lw=1.0,
                       label="static Nash price after the\nmerger (firm's colour)" if i == 0 else None)
        after = ("; dash-dotted, in each firm's colour: its static-Nash price after the merger (the merged firm "
                 "setting its prices jointly)")
    ax.axvline(1, color="black", lw=0.5)
    ax.set_xlabel("period (0: before the deviation, 1: deviation)")
    ax.set_ylabel(act)
    ax.set_title(f"Impulse response, mean over {sm['converged']['count'] or sm['sessions']} sessions")
    ax.legend(fontsize=8)
    fig.tight_layout()
    level = f"{100 * res.confidence:g} %"
    return Drawn("impulse_response", fig,
                 f"Impulse response: mean {act} of each firm (points) after firm {int(res.settings['deviator'])} is "
                 f"forced to deviate for one period (period 1), then everyone follows the learned strategies; "
                 f"bands: {level} confidence intervals across sessions; dotted and dashed: the static-Nash{before} "
                 f"and joint-profit {act}s (means over firms){after}.")


def _histogram_figure(res: LearnResult):
    plt = pyplot()
    sm = res.summary
    fig, ax = plt.subplots(figsize=(7, 4.2))
    h = sm["profit_gain_histogram"]
    edges = np.array(h["edges"], dtype=float)
    ax.bar(edges[:-1], h["counts"], width=np.diff(edges), align="edge", edgecolor="white")
    ax.axvline(0, color="grey", ls=":", label="static Nash")
    ax.axvline(1, color="grey", ls="--", label="joint profit")
    ax.axvline(_num(sm["profit_gain"]["mean"]), color="C3", label="mean")
    ax.set_xlabel("profit gain (profit - Nash) / (collusive - Nash)")
    ax.set_ylabel("sessions")
    ax.yaxis.get_major_locator().set_params(integer=True)  # whole sessions on the axis
    ax.set_title("Profit gain across sessions")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return Drawn("profit_gain_histogram", fig,
                 f"Profit gain of each session ({sm['over']}), in bins of 0.05 (values beyond -0.5 and 1.5 in the "
                 "outer bins): 0 is the static Nash outcome, 1 the joint-profit outcome; red: the mean.")


def _cell_edges(g: np.ndarray) -> np.ndarray:
    """Edges of the cells around the points of a grid (a one-point grid gets a cell of its own)."""
    if g.size == 1:
        w = max(0.05, 0.05 * abs(float(g[0])))
        return np.array([g[0] - w, g[0] + w])
    mid = (g[1:] + g[:-1]) / 2
    return np.concatenate([[g[0] - (mid[0] - g[0])], mid, [g[-1] + (g[-1] - mid[-1])]])


def _grid(seat: dict) -> np.ndarray:
    return np.array(seat["grid"] if "grid" in seat else seat["actions"], dtype=float)


def _heatmap_figure(res: LearnResult):
    plt = pyplot()
    act = _act(res)
    sel = res.selected
    fig, ax = plt.subplots(figsize=(5.6, 4.8))
    x, y = res.limit_actions[sel, 0], res.limit_actions[sel, 1]
    H, xe, ye = np.histogram2d(x, y, bins=[_cell_edges(_grid(res.learners[0])), _cell_edges(_grid(res.learners[1]))])
    im = ax.pcolormesh(xe, ye, H.T, cmap="viridis")
    fig.colorbar(im, ax=ax, label="sessions")
    bm = res.summary["benchmarks"]
    # white markers edged in black: seen on the dark cells and on the white margin beyond the grid alike
    ax.plot([bm["nash_actions"][0]], [bm["nash_actions"][1]], "^", mfc="white", mec="black", ms=8,
            label="static Nash", clip_on=False)
    ax.plot([bm["collusive_actions"][0]], [bm["collusive_actions"][1]], "*", mfc="white", mec="black", ms=12,
            label="joint profit", clip_on=False)
    ax.set_xlabel(f"firm 1 mean limit {act}")
    ax.set_ylabel(f"firm 2 mean limit {act}")
    ax.set_title(f"Limit {act}s across sessions")
    ax.legend(fontsize=8, loc="lower right", facecolor="0.85", framealpha=1.0)
    fig.tight_layout()
    return Drawn("limit_prices_heatmap", fig,
                 f"Sessions by the mean limit {act}s of firms 1 and 2 ({res.summary['over']}), one cell per pair of "
                 "grid points; triangle: static Nash, star: joint profit.")


def figures(res: LearnResult) -> list[Drawn]:
    """The impulse response (with bands and the benchmark levels), the histogram of profit gains and the limit
    prices of firms 1 and 2 across sessions.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    list of Drawn
        ``impulse_response`` (when a response was recorded), ``profit_gain_histogram``, ``limit_prices_heatmap``.
    """
    alt = alternating_figure(res)
    out = [_impulse_figure(res)] if res.summary["impulse_response"]["prices"]["mean"] and alt is None else []
    out += [_histogram_figure(res), _heatmap_figure(res)] + ([alt] if alt is not None else [])
    after = event_figure(res)
    out = out if after is None else [*out, after]
    war = signal_figure(res)
    return out if war is None else [*out, war]


RENDERER = Renderer(console=console, as_json=as_json, figures=figures,
                    headline=learn_headline)
