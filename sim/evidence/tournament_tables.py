"""The words and tables of a tournament outcome, shared by its terminal report and its evidence bundle: the answer,
the setup in words, and the three tables -- each rule's profit gain, collusion within each pair, which rules spread.
"""

from __future__ import annotations

import math

import numpy as np

from sim.evidence.answers import number
from sim.evidence.thresholds import AGREEMENT_NAMES, describe_market
from sim.evidence.tournament_figures import percent
from sim.tournament.analysis import TournamentOutcome

__all__ = ["answer", "confidence_words", "fitness_words", "initial_words", "interval_text", "number", "pairs_table",
           "profit_unit", "resists_words", "rules_table", "setup_lines", "spread_table"]


def interval_text(v, digits: int = 3) -> str:
    """The interval of an estimate as ``low to high``.

    Parameters
    ----------
    v : sequence of float
        Value, standard error, low, high.
    digits : int

    Returns
    -------
    str
    """
    lo, hi = float(v[2]), float(v[3])
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return "n/a"
    return f"{lo:,.{digits}f} to {hi:,.{digits}f}"


def profit_unit(out: TournamentOutcome) -> str:
    """The unit of profits per period, ``currency per period``.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    return f"{out.units['currency']} per {out.units['period']}"


def group_name(out: TournamentOutcome, g: int) -> str:
    """A group of rules by its members' labels, ``a + b``.

    Parameters
    ----------
    out : TournamentOutcome
    g : int
        The group's row.

    Returns
    -------
    str
    """
    return " + ".join(out.labels[e] for e in out.groups.members[g])


def confidence_words(out: TournamentOutcome) -> str:
    """The intervals' confidence level, ``95 %``.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    return f"{100 * out.confidence:g} %"


def answer(out: TournamentOutcome) -> str:
    """The headline: which rule keeps the most of the collusive profit, and which rule spreads.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    labels = out.labels
    best = [e for e in out.order if out.ranks[e] == 1]
    desc = {e["label"]: e["description"] for e in out.entrants}
    names = " and ".join(f"{labels[e]} ({desc[labels[e]]})" for e in best)
    v = out.estimates[out.score][best[0]]
    if out.score == "profit_gain":
        first = (f"{names} keep{'s' if len(best) == 1 else ''} the largest share of the collusive profit against "
                 f"rivals drawn at random from the rules: profit gain {number(v[0])} ({confidence_words(out)} interval "
                 f"{interval_text(v)}).")
    else:
        what = "discounted profit" if out.score == "discounted_profit" else "profit per period"
        first = (f"{names} earn{'s' if len(best) == 1 else ''} the highest {what} against rivals drawn at random "
                 f"from the rules: {number(v[0], 2)} {out.units['currency']} ({confidence_words(out)} interval "
                 f"{interval_text(v, 2)}).")
    evo = out.evolution
    top = int(np.argmax(evo.final))
    gens = int(evo.settings["generations"])
    if evo.final[top] > 0.5:
        second = (f"{labels[top]} spreads: it holds {percent(evo.final[top])} of the population after {gens:,} "
                  "generations of the replicator dynamics")
        if evo.resists[top]:
            second += " and resists invasion by every other rule" + (
                f", also in a population of {evo.population} firms" if evo.resists_finite[top] else "")
        second += "."
    else:
        second = (f"No rule takes over under the replicator dynamics: after {gens:,} generations the largest share "
                  f"is {labels[top]}'s, {percent(evo.final[top])}.")
    return f"{first} {second}"


def setup_lines(out: TournamentOutcome) -> list[str]:
    """The setup in words: market, agreement and benchmark profits, monitoring, play and rules.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    list of str
    """
    b = out.benchmarks
    cost = ", ".join(f"{float(c):g}" for c in np.atleast_1d(out.market.get("cost", [])))
    lines = [f"Market: {describe_market(out.market, len(b['nash_profit']))}; marginal cost {cost}"]
    agreement = AGREEMENT_NAMES.get(b["agreement"], b["agreement"])
    why = "" if b["agreement_given"] else (
        " (the default where firms differ: each keeps its static-Nash share)" if b["agreement"] == "proportional"
        else " (the default)")
    per = "; ".join(f"firm {i + 1}: {number(n, 2)} and {number(c, 2)}"
                    for i, (n, c) in enumerate(zip(b["nash_profit"], b["collusive_profit"], strict=True)))
    lines.append(f"Agreement: {agreement}{why}. Profit per {out.units['period']} ({out.units['currency']}) at the "
                 f"static Nash equilibrium and under the agreement: {per}")
    undefined = [i + 1 for i, ok in enumerate(b["gain_defined"]) if not ok]
    if undefined:
        lines.append(f"  profit gain undefined (n/a) for {', '.join(f'firm {i}' for i in undefined)}: its collusive "
                     "profit is not above its static-Nash profit under this agreement")
    mon = out.settings["monitoring"]
    see = "each firm sees its rivals' actions" if mon["signal"] == "perfect" else "firms see only the market price"
    shock = ("no demand shock" if not mon["sigma"] else
             f"a {mon['noise']} demand shock with standard deviation {mon['sigma']:g}")
    lines.append(f"Monitoring: {see}; {shock}; a firm misreads a rival's conduct with probability "
                 f"{mon['perception_error']:g} and deviates by mistake with probability "
                 f"{mon['implementation_error']:g} per {out.units['period']}")
    lines += _play_lines(out)
    lines.append("Rules: " + "; ".join(f"{e['label']} = {e['description']}" for e in out.entrants))
    return lines


def _play_lines(out: TournamentOutcome) -> list[str]:
    s, run = out.settings["tournament"], out.settings["run"]
    hz = ("fixed horizon" if run["horizon"] == "fixed"
          else f"random horizon, continuation probability {run['continuation']:g}")
    seatings = "every seating: the firms differ" if s["seatings_played"] == "all" else "one seating per group"
    group = "pairs" if out.n_seats == 2 else f"groups of {out.n_seats}"
    lines = [f"Play: {len(out.entrants)} rules, {s['groups']} {group} (self-play included), {s['matches']} matches "
             f"({seatings}); {run['periods']:,} {out.units['period']}s ({hz}), {run['replications']:,} replications "
             f"per match, discount factor {run['delta']:g}, seed {run['seed']}"]
    if any(e["learns"] for e in out.entrants):
        lines.append(f"Learning firms: {s['sessions']} sessions per match, scored on their converged play (converged "
                     f"after {s['convergence']:,} periods without a change of any greedy strategy, at most "
                     f"{s['max_periods']:,})")
        est = [" vs ".join(m["seats"]) for m in out.matches if m["stream"].get("limit") == "estimate"]
        if est:
            lines.append(f"  an automaton acts at random in {len(est)} learning match{'es' if len(est) > 1 else ''} "
                         f"({'; '.join(est[:3])}{'; ...' if len(est) > 3 else ''}): their limit outcome is an "
                         f"estimate over {s['limit_periods']} periods of greedy play, not an exact cycle")
    return lines


# --------------------------------------------------------------------------------------------------
# Tables (rows shared by the terminal and the bundle)
# --------------------------------------------------------------------------------------------------


def resists_words(out: TournamentOutcome, e: int) -> str:
    """Whether rule ``e`` resists invasion by every other rule in a large population: yes, no or neutral.

    Parameters
    ----------
    out : TournamentOutcome
    e : int

    Returns
    -------
    str
    """
    evo = out.evolution
    if evo.resists[e]:
        return "yes"
    return "neutral" if evo.neutral[e] else "no"


def rules_table(out: TournamentOutcome) -> tuple[list, list, tuple]:
    """Each rule's profit gain and what the evolutionary dynamics make of it, from first to last place.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    headers : list of str
    rows : list of list
        For display (intervals as text).
    csv : tuple of (list of str, list of list)
        Headers and rows with every number in its own column.
    """
    st, evo, est = out.stability, out.evolution, out.estimates
    gens = int(evo.settings["generations"])
    lvl = confidence_words(out)
    headers = ["place", "rule", "profit", "static Nash profit of its seats", "collusive profit of its seats",
               "profit gain", f"{lvl} interval", "place held in resamples", f"population share after {gens:,} "
               "generations", "resists invasion"]
    csv_head = ["place", "rule", "description", "profit", "profit_low", "profit_high", "static_nash_profit",
                "collusive_profit", "profit_gain", "profit_gain_se", "profit_gain_low", "profit_gain_high",
                "discounted_profit", "discounted_profit_low", "discounted_profit_high", "place_held_share",
                "first_place_share", "place_low", "place_high", "population_share", "resists_invasion"]
    rows, csv_rows = [], []
    for e in out.order:
        p, g, d = est["profit"][e], est["profit_gain"][e], est["discounted_profit"][e]
        held = st["per_entrant"]["rank_share"][e] if st else None
        rows.append([int(out.ranks[e]), out.labels[e], number(p[0], 2), number(out.seat_profits[e][0], 2),
                     number(out.seat_profits[e][1], 2), number(g[0]), interval_text(g), percent(held),
                     percent(evo.final[e]), resists_words(out, e)])
        per = st["per_entrant"] if st else None
        csv_rows.append([int(out.ranks[e]), out.labels[e], out.entrants[e]["description"], p[0], p[2], p[3],
                         out.seat_profits[e][0], out.seat_profits[e][1], *g, d[0], d[2], d[3],
                         held, per["top_share"][e] if per else None, per["rank_low"][e] if per else None,
                         per["rank_high"][e] if per else None, evo.final[e], resists_words(out, e)])
    return headers, rows, (csv_head, csv_rows)


def pairs_table(out: TournamentOutcome) -> tuple[list, list, tuple]:
    """For each pair (group) of rules: the share of the collusive profit it keeps, how long collusion lasts and each
    rule's own profit gain.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    headers : list of str
    rows : list of list
    csv : tuple of (list of str, list of list)
    """
    G = out.groups
    lvl = confidence_words(out)
    period = out.units["period"]
    headers = ["rules", "share of the collusive profit kept", f"{lvl} interval", f"{period}s with collusion",
               f"{period}s until collusion first breaks down", f"{lvl} interval", "profit gain of each rule"]
    csv_head = ["rules", "kept", "kept_se", "kept_low", "kept_high", "colluding", "colluding_low", "colluding_high",
                "first_breakdown", "first_breakdown_low", "first_breakdown_high", "first_breakdown_lower_bound",
                "spell_length", "spell_length_low", "spell_length_high", "learning", "matches"]
    rows, csv_rows = [], []
    for g, members in enumerate(G.members):
        gains = ", ".join(f"{out.labels[e]} {number(G.payoff['profit_gain'][g][e])}" for e in sorted(set(members)))
        fb = G.first_breakdown[g]
        first = ("at least " if G.lower_bound[g] else "") + number(fb[0], 1)
        learning = G.learning[g]
        rows.append([group_name(out, g), number(G.kept[g][0]), interval_text(G.kept[g]),
                     "n/a" if learning else percent(G.colluding[g][0]), "n/a" if learning else first,
                     "n/a" if learning else interval_text(fb, 1), gains])
        csv_rows.append([group_name(out, g), *G.kept[g], G.colluding[g][0], G.colluding[g][2], G.colluding[g][3],
                         fb[0], fb[2], fb[3], G.lower_bound[g], G.spell_length[g][0], G.spell_length[g][2],
                         G.spell_length[g][3], learning, " ".join(str(m) for m in G.matches[g])])
    return headers, rows, (csv_head, csv_rows)


def spread_table(out: TournamentOutcome) -> tuple[list, list]:
    """Which rules spread and which resist invasion.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    headers : list of str
    rows : list of list
    """
    evo = out.evolution
    gens = int(evo.settings["generations"])
    N = evo.population
    init = evo.settings["initial_shares"]
    headers = ["rule", "initial share", f"share after {gens:,} generations", "time prevailing with rare mutations",
               "resists invasion (large population)", f"resists invasion ({N} firms)", "invaded by"]
    rows = [[lab, percent(init[e]), percent(evo.final[e]), percent(evo.stationary[e]), resists_words(out, e),
             "yes" if evo.resists_finite[e] else "no", ", ".join(evo.invaded_by[e]) or "none"]
            for e, lab in enumerate(out.labels)]
    return headers, rows


def fitness_words(out: TournamentOutcome) -> str:
    """How payoffs become fitness in the evolutionary dynamics, in words.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    s = out.evolution.settings
    fmap = "1 - w + w x profit gain" if s["fitness"] == "linear" else "exp(w x profit gain)"
    if out.score != "profit_gain":
        fmap = fmap.replace("profit gain", "discounted profit" if out.score == "discounted_profit" else "profit")
    return f"fitness {fmap}, selection intensity w = {s['selection']:g}"


def initial_words(out: TournamentOutcome) -> str:
    """Where the replicator dynamics start, in words.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    init = out.evolution.settings["initial_shares"]
    return "equal shares" if len({round(x, 12) for x in init}) == 1 else "the given shares"
