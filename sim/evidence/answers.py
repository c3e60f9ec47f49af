"""The headline answer of each analysis, in one or two plain sentences.

Each renderer's ``headline(result)`` (``Renderer.headline``) is the first line of its terminal report and the first
sentence of the answer on the first page of a single-cell bundle: one wording in both places. The numbers are
written as in the tournament's answer and the bundle: discount factors and profit gains with three decimals, shares
as percentages (:func:`~sim.evidence.tournament_figures.percent`), intervals as "95 % interval low to high".
"""

from __future__ import annotations

import math

from sim.antitrust.compare import CATEGORY_TEXT
from sim.evidence.tournament_figures import percent
from sim.theory.verdicts import firm_list

__all__ = [
    "assessment_headline",
    "capacity_headline",
    "interval",
    "learn_headline",
    "number",
    "percent",
    "simulate_headline",
    "thresholds_headline",
]

_SCHEMES = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}


def number(x, digits: int = 3) -> str:
    """A number with ``digits`` decimals and thousands separators (``n/a`` for None or nan).

    Parameters
    ----------
    x : float or None
    digits : int

    Returns
    -------
    str
    """
    return "n/a" if x is None or not math.isfinite(float(x)) else f"{float(x):,.{digits}f}"


def interval(low, high, level: float = 0.95, fmt=number) -> str:
    """``95 % interval low to high`` (empty when a bound is missing).

    Parameters
    ----------
    low, high : float or None
    level : float
        The confidence level.
    fmt : callable
        How each bound is written.

    Returns
    -------
    str
    """
    if low is None or high is None or not (math.isfinite(low) and math.isfinite(high)):
        return ""
    return f"{100 * level:g} % interval {fmt(low)} to {fmt(high)}"


def _scheme(key: str, T=None) -> str:
    return _SCHEMES.get(key, f"Nash reversion for {T} period{'s' if T != 1 else ''}")


def thresholds_headline(res) -> str:
    """Whether grim trigger sustains the agreement, from which discount factor and which firms bind; the lowest
    threshold of any scheme when it is another; the reason when grim trigger sustains nothing.

    Parameters
    ----------
    res : ThresholdsResult

    Returns
    -------
    str
    """
    rows = res.scheme_rows()
    grim = rows[0]
    best = res.report["thresholds"]["best"]
    if grim["market"] is not None:
        tied = grim.get("tied_firms") or [grim["binding_firm"]]
        who = f"{firm_list(tied)} bind equally" if len(tied) > 1 else f"{firm_list(tied)} binds"
        out = f"Collusion is sustainable for delta >= {number(grim['market'])} under grim trigger; {who}."
    else:
        why = (grim.get("not_sustainable") or {}).get("text", "no discount factor below one deters a deviation")
        out = f"Collusion is not sustainable under grim trigger at any discount factor below one: {why}."
    if best["market"] is not None and best["scheme"] != "grim":
        if grim["market"] is None:
            out += (f" Under {_scheme(best['scheme'], best['T'])} it is sustainable for delta >= "
                    f"{number(best['market'])}, the lowest threshold of the schemes.")
        else:
            out += f" The lowest threshold is {number(best['market'])}, under {_scheme(best['scheme'], best['T'])}."
    elif best["market"] is None:
        out += " No scheme computed sustains the agreement below one."
    return out


def simulate_headline(result) -> str:
    """The share of collusive periods with its interval, and whether the strategies kept collusion.

    Parameters
    ----------
    result : SimulateResult

    Returns
    -------
    str
    """
    res = result.simulation
    level = res.settings["confidence"]
    e, bd = res.metrics["collusive_share"], res.metrics["broken_down"]
    ci = interval(e.low, e.high, level, percent)
    out = f"Every firm colluded in {percent(e.value)} of the periods" + (f" ({ci})." if ci else ".")
    if bd.value == 0:
        out += " The strategies kept collusion: it never broke down in any replication"
    elif bd.value == 1:
        fb = res.metrics["first_breakdown"]
        out += (f" The strategies did not keep collusion: it broke down in every replication, first after "
                f"{number(fb.value, 1)} periods on average")
    else:
        out += (f" The strategies did not always keep collusion: it broke down in {percent(bd.value)} of the "
                "replications")
    dev = result.deviation
    if dev is not None and dev.pays:
        out += f"; a one-shot deviation by firm {dev.firm} pays, so the line-up is not an equilibrium"
    return out + "."


def learn_headline(res) -> str:
    """The learners' mean profit gain with its interval, and the share of sessions that converged.

    Parameters
    ----------
    res : LearnResult

    Returns
    -------
    str
    """
    sm = res.summary
    pg, c = sm["profit_gain"], sm["converged"]
    ci = interval(pg.get("low"), pg.get("high"), res.confidence) if pg.get("n", 0) >= 2 else ""
    seats = getattr(res, "learners", None) or []
    if seats and all("strategy" in s or s.get("family") == "fixed" for s in seats):
        # nothing can change: "converged" says nothing about learning
        why = ("The sessions count as converged only because no policy can change." if c["count"] else
               f"No session reached the convergence window before the cap ({c['n']} stopped there); with no policy "
               "able to change, that says nothing about learning.")
        return ("No firm learns in this run (every seat plays a fixed policy read from a saved run, or an "
                f"automaton): their play gives a mean profit gain of {number(pg['mean'])}" + (f" ({ci})" if ci else "")
                + f" (0: static Nash, 1: joint profit). {why}" + _event_sentence(res))
    if c["count"] == 0:
        return (f"No session converged ({c['n']} stopped at the cap): greedy play at the cap, while the learners were "
                f"still learning, gives a mean profit gain of {number(pg['mean'])}" + (f" ({ci})" if ci else "")
                + " (0: static Nash, 1: joint profit), not a converged outcome.")
    merger = (res.event or {}).get("merger") or {}
    after = merger.get("profit_gain_after")
    zero = "static Nash before the merger" if merger else "static Nash"
    out = (f"The learned prices give a mean profit gain of {number(pg['mean'])}" + (f" ({ci})" if ci else "")
           + f" (0: {zero}, 1: joint profit). ")
    if after:
        ci_after = interval(after.get("low"), after.get("high"), res.confidence) if after.get("n", 0) >= 2 else ""
        out += ("Against the static Nash after the merger (the merged firm setting its products' prices jointly) "
                f"it is {number(after['mean'])}" + (f" ({ci_after})" if ci_after else "") + ". ")
    out += _learners_own_gain(res)
    return out + f"{c['count']} of {c['n']} sessions converged ({percent(c['share'])})." + _event_sentence(res)


def _event_sentence(res) -> str:
    """After an event: how the limit prices moved from the limits at the event, and how long the learners took to
    settle again (the event section's numbers)."""
    ev = res.event if isinstance(res.event, dict) else {}
    if not ev or not ev.get("change"):
        return ""
    st, sp = ev.get("settled") or {}, ev.get("settle_periods") or {}
    moves = []
    for i, ch in enumerate(ev["change"]):
        m = ch.get("mean")
        if m is None or not math.isfinite(m):
            continue
        ci = interval(ch.get("low"), ch.get("high"), res.confidence) if ch.get("n", 0) >= 2 else ""
        moves.append(f"firm {i + 1} {'+' if m > 0 else ''}{number(m)}" + (f" ({ci})" if ci else ""))
    since = ("the limit at the event" if ev.get("before_method") == "limit at the event" else
             "the last period before it")
    out = (f" After the event ({ev.get('what', 'the event')}), {st.get('count', 0)} of {st.get('n', 0)} sessions "
           "settled again")
    q50 = sp.get("q50")
    if st.get("count") and q50 is not None and math.isfinite(q50):
        out += f", a median of {q50:,.0f} periods after it"
    if moves:
        out += f"; limit price minus {since}: " + "; ".join(moves)
    out += "."
    if "no setting differs" not in str(ev.get("what", "")):
        # learners that were still learning move without the event too
        out += (" Learners still learning change their prices without an event too: read these changes against a "
                "control run that continues the same saved sessions with nothing changed.")
    return out


def _learners_own_gain(res) -> str:
    """With automata in the line-up, the learners' own profit gains: the headline's mean is over every firm, the
    automata's profits included."""
    automata = {int(a["firm"]) for a in (getattr(res, "automata", None) or [])}
    per_firm = res.summary.get("firm_profit_gain") or []
    if not automata or not per_firm:
        return ""
    parts = []
    for i, g in enumerate(per_firm):
        if i + 1 in automata or g.get("mean") is None:
            continue
        ci = interval(g.get("low"), g.get("high"), res.confidence) if g.get("n", 0) >= 2 else ""
        parts.append(f"firm {i + 1} {number(g['mean'])}" + (f" ({ci})" if ci else ""))
    if not parts:
        return ""
    return ("That mean is over every firm, the automata's profits included; the learners' own profit gains: "
            + "; ".join(parts) + ". ")


def _threshold_words(x) -> str:
    return "not sustainable below one" if x is None or not math.isfinite(x) else number(x)


def assessment_headline(d: dict) -> str:
    """Whether the merger makes coordination easier, with the headline threshold before and after.

    Parameters
    ----------
    d : dict
        The assessment's data (:meth:`~sim.antitrust.result.Assessment.to_dict`).

    Returns
    -------
    str
    """
    c = d["conclusion"]
    before, after = _threshold_words(c["threshold_before"]), _threshold_words(c["threshold_after"])
    verdict = {"easier": "makes coordination easier", "harder": "makes coordination harder",
               "unchanged": "does not change how easily the firms coordinate"}[c["direction"]]
    first = (f"The merger {verdict}: the critical discount factor under {c['scheme']} is {before} before "
             f"({c['binding_before']} binds) and {after} after ({c['binding_after']} binds).")
    return f"{first} At delta {c['delta']:.4g} collusion is {CATEGORY_TEXT[c['category']]}."


def capacity_headline(res) -> str:
    """The market's critical discount factors with capacities; with a merger, whether it makes coordination
    easier under minmax punishments.

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    str
    """
    c = res.thresholds.collusion
    mg = res.merger

    def binds(ties, b, names) -> str:
        return (f"{', '.join(names[k] for k in ties[:-1])} and {names[ties[-1]]} bind equally" if len(ties) > 1
                else f"{names[b]} binds")

    if mg is None:
        return (f"Collusion is sustainable for delta >= {_threshold_words(c.grim_market)} under Nash reversion "
                f"({binds(c.grim_ties, c.grim_binding, c.names)}) and for delta >= "
                f"{_threshold_words(c.harshest_market)} under minmax punishments "
                f"({binds(c.harshest_ties, c.harshest_binding, c.names)}).")
    b, a = mg.before.collusion.harshest_market, mg.after.collusion.harshest_market
    ch = mg.harshest_change
    verdict = ("does not change how easily the firms coordinate" if ch is None or not math.isfinite(ch) or ch == 0
               else "makes coordination easier" if ch < 0 else "makes coordination harder")
    return (f"The merger {verdict}: the critical discount factor under minmax punishments is "
            f"{_threshold_words(b)} before ({mg.harshest_binding_before} binds) and {_threshold_words(a)} after "
            f"({mg.harshest_binding_after} binds).")
