"""Why a learner facing automata ended where it did, in plain words: the part of the learn report that reads the
record of the automata's punishments during learning (:func:`sim.learning.triggers.trigger_summary`)."""

from __future__ import annotations

import math

from sim.core.text import fmt_num

__all__ = ["automaton_lines", "explain"]


def _pct(x) -> str:
    if x is None or x != x:
        return "-"
    return f"{100 * x:.1f} %"


def _times(x) -> str:
    """A mean number of triggers per session in words."""
    if x is None or x != x:
        return "-"
    if abs(x - 1.0) < 5e-3:
        return "once"
    return f"{x:,.0f} times" if x >= 10 else f"{x:.2g} times"


def _period(x) -> str:
    return "-" if x is None or x != x else f"{x:,.0f}"


def _outcome(summary: dict, act: str) -> str:
    """Where the learners ended, read off the limit outcomes."""
    pg = summary["profit_gain"]["mean"]
    gain = f"profit gain {fmt_num(pg)}" if pg is not None and not math.isnan(pg) else "profit gain -"
    if (summary["near_nash"]["share"] or 0) >= 0.5:
        return f"to {act} at or near the static Nash level ({gain})"
    if (summary["near_collusive"]["share"] or 0) >= 0.5:
        return f"to keep to or near the joint-profit {act} ({gain})"
    return f"to {act} between the static Nash and the joint-profit levels ({gain})"


def explain(a: dict, summary: dict, act: str = "price") -> str:
    """One automaton's punishments during learning and where the learners ended, in one paragraph.

    The paragraph states what the record shows -- when the punishments came, how much the learners still explored
    then, whether the automaton was still punishing at the end -- and what the learners learned. It says "consistent
    with" only where the two point the same way (still punishing and the learners near the static Nash level; back in
    its collusive state and the learners near the joint-profit level), says so where they do not, and draws no cause
    from the timing alone.

    Parameters
    ----------
    a : dict
        The automaton's entry of :func:`sim.learning.triggers.trigger_summary` (after an event with
        ``first_after_event``, the first trigger counted from the event session by session).
    summary : dict
        The run's summary (:meth:`sim.learning.results.LearningResult.summary`): its profit gain and nearness to
        the benchmarks say where the learners ended.
    act : str
        ``"price"`` or ``"quantity"``.

    Returns
    -------
    str
    """
    words = a["strategy"].replace("_", " ")
    name = f"{words[:1].upper()}{words[1:]} (firm {a['firm']})"
    end = _outcome(summary, act)
    near_nash = (summary["near_nash"]["share"] or 0) >= 0.5
    near_collusive = (summary["near_collusive"]["share"] or 0) >= 0.5
    if not a["triggered"]["count"]:
        if (a["punishment_share"]["mean"] or 0) > 0.5:
            return (f"{name} has no collusive state to leave: it competed throughout; the learners learned {end}.")
        return (f"{name} was never triggered during learning: it played its collusive {act} throughout; the "
                f"learners learned {end}.")
    first, last = a["first_trigger"], a["last_trigger"]
    after = ""
    since = (a.get("first_after_event") or {}).get("median")
    if since is not None and since == since:
        after = f", in period {_period(since)} after the event (median over sessions, counted session by session)"
    text = (f"{name} was triggered in {_pct(a['triggered']['share'])} of sessions, first in period "
            f"{_period(first['median'])} (median over sessions){after}"
            f"{_explored(a['exploration_first']['median'], ', when the learners explored with probability {}')}; ")
    if a["triggers"]["mean"] == 1.0:
        text += "it was triggered once per session, "
    else:
        text += (f"it was triggered {_times(a['triggers']['mean'])} per session on average, the last time in period "
                 f"{_period(last['median'])}"
                 f"{_explored(a['exploration_last']['median'], ' (exploring with probability {})')}, ")
    text += f"and it punished for {_pct(a['punishment_share']['mean'])} of the session."
    stuck = a["punishing_at_end"]["share"]
    if stuck >= 0.5:
        how = "consistent with this" if near_nash else "yet not to compete"
        return (text + f" In {_pct(stuck)} of sessions it was still punishing when learning ended: the learners "
                       f"last learned against its punishment, {how}: they learned {end}.")
    how = ("consistent with learners that learned what keeping to its collusive state earns" if near_collusive else
           "yet the learners did not keep to it" if near_nash else
           "and the learners ended neither near competition nor near the joint-profit level")
    return (text + f" Its punishments ended (in {_pct(1 - stuck)} of sessions it was back in its collusive state "
                   f"when learning ended), {how}: they learned {end}.")


def _explored(share, words: str) -> str:
    """``words`` with the exploration share, or nothing when it is not defined (only bandits learn: they have no
    exploration probability)."""
    if share is None or (isinstance(share, float) and math.isnan(share)):
        return ""
    return words.format(_pct(share))


def automaton_lines(res) -> list[str]:
    """The report's lines on the automata's punishments during learning (none when only learners play).

    Parameters
    ----------
    res : sim.learning.analysis.LearnResult

    Returns
    -------
    list of str
    """
    if not res.automata:
        return []
    act = "quantity" if res.quantity_setting else "price"
    lvl = f"{100 * res.confidence:g} %"
    since = "; counted from the event" if res.event else ""
    lines = ["", f"Automata during learning ({res.summary['over']}{since}; {lvl} confidence intervals across "
                 "sessions)"]
    for a in res.automata:
        ps, tr = a["punishment_share"], a["triggers"]
        lines.append(f"  firm {a['firm']} ({a['strategy'].replace('_', ' ')}): triggered in "
                     f"{_pct(a['triggered']['share'])} of sessions, {_times(tr['mean'])} per session "
                     f"[{tr['low']:,.5g}, {tr['high']:,.5g}]; share of the session in a non-collusive (punishing or "
                     f"competing) state {_pct(ps['mean'])} "
                     f"[{_pct(ps['low'])}, {_pct(ps['high'])}]; in a non-collusive state at the end in "
                     f"{_pct(a['punishing_at_end']['share'])} of sessions")
    lines.append("Why the sessions ended where they did (periods count from the start of the session):")
    lines += [f"  {explain(a, res.summary, act)}" for a in res.automata]
    return lines
