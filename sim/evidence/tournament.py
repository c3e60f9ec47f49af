"""How a tournament outcome is shown, in the market's terms: the terminal report, the JSON document, the figures and
its account in an evidence bundle (see :mod:`sim.evidence.render`).

Every view reads the same :class:`~sim.tournament.analysis.TournamentOutcome` -- the one ``supergame tournament``
computes, or the one a run folder stores for its cell -- so the command and the bundle show the same numbers and the
same figures. What a reader sees:

* the answer first: which rule keeps the most of the collusive profit and which rule spreads;
* each rule's profit gain between the static Nash profit and the collusive profit of its seats, with its interval,
  beside its profit per period and what the evolutionary dynamics make of it;
* for each pair (or group) of rules: the share of the collusive profit they keep together and how long collusion
  lasts between them;
* which rules spread under the replicator dynamics and which resist invasion, in a large and a finite population.
"""

from __future__ import annotations

import numpy as np

from sim.core.text import CAUTION, fmt_num, table
from sim.evidence import tournament_figures as F
from sim.evidence.front import describe_experiment
from sim.evidence.render import Drawn, Renderer
from sim.evidence.tournament_figures import percent
from sim.evidence.tournament_sweep import sweep_account
from sim.evidence.tournament_tables import (
    answer,
    confidence_words,
    fitness_words,
    initial_words,
    pairs_table,
    profit_unit,
    rules_table,
    setup_lines,
    spread_table,
)
from sim.runner.analyses.tournament import describe as describe_setup
from sim.runner.experiment import leading_comment
from sim.tournament.analysis import TournamentOutcome

__all__ = ["RENDERER", "as_json", "bundle", "console", "figures"]


# --------------------------------------------------------------------------------------------------
# The terminal report
# --------------------------------------------------------------------------------------------------


def _rules_lines(out: TournamentOutcome) -> list[str]:
    h, rows, _ = rules_table(out)
    st = out.stability
    lines = [f"Profit gain of each rule against rivals drawn at random from the rules (profits in "
             f"{profit_unit(out)}; profit gain: 0 at the static Nash profit, 1 at the collusive profit of the "
             "rule's seats)", table(h, rows, "rlrrrrlrrl")]
    if st:
        lines.append(f"  place held: share of {st['resamples']:,} bootstrap resamples of the replications in which "
                     f"the rule keeps its place; the whole order holds in {percent(st['ranking_holds'])} of them")
    lines.append(f"  population share: replicator dynamics from {initial_words(out)}, {fitness_words(out)}")
    return lines


def _pairs_lines(out: TournamentOutcome) -> list[str]:
    h, rows, _ = pairs_table(out)
    what = "pair of rules" if out.n_seats == 2 else f"group of {out.n_seats} rules"
    period = out.units["period"]
    return [f"Collusion within each {what} (every seating averaged)", table(h, rows, "lrlrrll"),
            "  share kept: (joint profit - joint static Nash profit) / (joint collusive profit - joint static Nash "
            f"profit); {period}s until collusion first breaks down: Kaplan-Meier mean over the horizon of "
            f"{out.horizon:,} {period}s ('at least' where collusion outlived the horizon)"]


def _spread_lines(out: TournamentOutcome) -> list[str]:
    h, rows = spread_table(out)
    evo = out.evolution
    N = evo.population
    lines = [f"Which rules spread ({fitness_words(out)})", table(h, rows, "lrrrlll"),
             f"  largest change of a share in the last generation {fmt_num(evo.last_change)}; time prevailing: share "
             "of time the rule is followed by the whole population when new rules appear rarely (Fudenberg and Imhof, "
             "2006); resists invasion: earns more than any small share of another rule (ties within the "
             f"{confidence_words(out)} margin count as neutral); with {N} firms: a single invader is less fit and "
             f"takes over with probability below 1/{N} (Nowak et al., 2004)", "",
             f"Invasion among {N} firms (Moran process): {N} × the probability that one firm following the row rule "
             "takes over a population following the column rule (1: neutral drift; above 1: selection favours the "
             "invader)"]
    R = np.asarray(evo.fixation, dtype=float) * N
    E = len(out.labels)
    lines.append(table(["invader \\ population", *out.labels],
                       [[out.labels[i], *("." if i == j else fmt_num(R[i, j], 3) for j in range(E))]
                        for i in range(E)], "l" + "r" * E))
    ck = evo.check
    if evo.simulated is not None and ck.get("max_standard_errors") is not None:
        lines.append(f"  simulated with {evo.runs:,} invasions per pair: largest gap to the formula "
                     f"{fmt_num(ck['max_standard_errors'], 3)} binomial standard errors "
                     f"({'within' if ck['within'] else 'NOT within'} the family-wise 1 % bound {ck['z']:.2f})")
    return lines


def console(out: TournamentOutcome) -> str:
    """The terminal report of a tournament outcome, the answer first.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    str
    """
    lines = [answer(out), "", *setup_lines(out), ""]
    lines += _rules_lines(out) + [""] + _pairs_lines(out) + [""] + _spread_lines(out)
    lines += ["", CAUTION]
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------------
# JSON
# --------------------------------------------------------------------------------------------------


def _estimate(v) -> dict:
    return {"value": float(v[0]), "standard_error": float(v[1]), "low": float(v[2]), "high": float(v[3])}


def _rule_json(out: TournamentOutcome, e: int) -> dict:
    st, evo = out.stability, out.evolution
    doc = {"label": out.labels[e], "rule": out.entrants[e]["rule"], "description": out.entrants[e]["description"],
           "parameters": out.entrants[e]["parameters"], "place": int(out.ranks[e]),
           "profit_per_period": _estimate(out.estimates["profit"][e]),
           "discounted_profit": _estimate(out.estimates["discounted_profit"][e]),
           "profit_gain": _estimate(out.estimates["profit_gain"][e]),
           "static_nash_profit_of_seats": float(out.seat_profits[e][0]),
           "collusive_profit_of_seats": float(out.seat_profits[e][1]),
           "population_share_after_replicator": float(evo.final[e]),
           "time_prevailing_with_rare_mutations": float(evo.stationary[e]),
           "resists_invasion": bool(evo.resists[e]), "neutral_against_some_rule": bool(evo.neutral[e]),
           "resists_invasion_in_finite_population": bool(evo.resists_finite[e]),
           "invaded_by": list(evo.invaded_by[e]), "not_resisted_in_finite_population": list(evo.finite_invaders[e])}
    if st:
        per = st["per_entrant"]
        doc["resampled"] = {"place_held_share": per["rank_share"][e], "first_place_share": per["top_share"][e],
                            "place_range": [per["rank_low"][e], per["rank_high"][e]],
                            "score_range": [per["score_low"][e], per["score_high"][e]]}
    return doc


def _group_json(out: TournamentOutcome, g: int) -> dict:
    G = out.groups
    members = sorted(set(G.members[g]))
    doc = {"rules": [out.labels[e] for e in G.members[g]], "matches": list(G.matches[g]),
           "learning": bool(G.learning[g]), "share_of_collusive_profit_kept": _estimate(G.kept[g]),
           "periods_with_collusion": _estimate(G.colluding[g]),
           "periods_until_collusion_first_breaks_down": {**_estimate(G.first_breakdown[g]),
                                                         "lower_bound": bool(G.lower_bound[g])},
           "collusive_spell_length": _estimate(G.spell_length[g]),
           "each_rule": {out.labels[e]: {k: {"value": float(G.payoff[k][g][e]), "standard_error":
                                             float(G.payoff_se[k][g][e])} for k in G.payoff} for e in members}}
    if out.pairs is not None and len(members) == 2:
        i, j = members
        pc = out.pairs
        doc["difference_first_minus_second"] = {
            k: {"value": float(pc.difference[k][i][j]), "standard_error": float(pc.difference_se[k][i][j]),
                "beyond_margin": int(pc.verdict[k][i][j])} for k in pc.difference}
    return doc


def as_json(out: TournamentOutcome) -> dict:
    """The ``--json`` document of a tournament outcome, in the project's words.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    dict
    """
    evo = out.evolution
    st = out.stability
    return {
        "answer": answer(out), "rules_in_file_order": out.labels, "market": out.market, "units": out.units,
        "agreement": out.benchmarks,
        "settings": out.settings, "placed_by": out.score,
        "rules": [_rule_json(out, e) for e in out.order],
        "order_stability": None if not st else {"resamples": st["resamples"], "whole_order_holds": st["ranking_holds"],
                                                "placed_above_share": st["above"]},
        "groups": [_group_json(out, g) for g in range(len(out.groups.members))],
        "against_one_rule": {k: np.asarray(v).tolist() for k, v in out.versus.items()},
        "matches": out.matches,
        "evolution": {
            "settings": evo.settings,
            "replicator": {"generation": evo.generation, "shares": evo.shares.tolist(),
                           "mean_payoff": evo.mean_payoff.tolist(), "final": evo.final.tolist(),
                           "last_change": evo.last_change},
            "invasion": {"population": evo.population, "takeover_probability": evo.fixation.tolist(),
                         "simulated": None if evo.simulated is None else evo.simulated.tolist(), "runs": evo.runs,
                         "simulation_check": evo.check},
            "time_prevailing_with_rare_mutations": evo.stationary.tolist(), "pairs": evo.pairs},
        "caution": CAUTION,
    }


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------


def _score_words(out: TournamentOutcome) -> str:
    if out.score == "profit_gain":
        return "profit gain (0 at the static Nash profit, 1 at the collusive profit of its seats)"
    what = "discounted profit" if out.score == "discounted_profit" else f"profit per {out.units['period']}"
    return f"{what} ({out.units['currency']})"


def _learners(out: TournamentOutcome) -> bool:
    """Whether a learning firm was entered (the captions speak of it only then)."""
    return any(e["learns"] for e in out.entrants)


def figures(out: TournamentOutcome) -> list[Drawn]:
    """The figures of a tournament outcome (see :mod:`sim.evidence.tournament_figures`).

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    list of Drawn
    """
    gens = int(out.evolution.settings["generations"])
    N = out.evolution.population
    what = "pair" if out.n_seats == 2 else "group (one firm's rule against rivals who all follow another)"
    period = out.units["period"]
    return [
        Drawn("rules", F.rules_figure(out),
              f"Left: each rule's {_score_words(out)} against rivals drawn at random from the rules, with its "
              f"{confidence_words(out)} interval (simulation error only). Right: its share of the population after "
              f"{gens:,} generations of the replicator dynamics. A rule can do well on average and still lose "
              "ground to a rule that does better against it."),
        Drawn("pairs", F.pairs_figure(out),
              f"Share of the collusive profit each {what} keeps together, (joint profit - joint static Nash "
              "profit) / (joint collusive profit - joint static Nash profit): 1 is the agreement, 0 the static Nash "
              "profit, below 0 the firms earn less than at Nash (punishments below the Nash profit)."),
        Drawn("collusion-duration", F.duration_figure(out),
              f"How long collusion lasts within each {what}: the mean number of {period}s until collusion first "
              f"breaks down (Kaplan-Meier, over the horizon of {out.horizon:,} {period}s)"
              + ("; n/a where a learning firm plays (scored on its converged play)." if _learners(out) else ".")),
        Drawn("replicator", F.replicator_figure(out),
              f"Share of the population following each rule over generations of the replicator dynamics "
              f"({fitness_words(out)}): the rules whose share grows spread among firms that imitate successful "
              "rules."),
        Drawn("invasion", F.invasion_figure(out),
              f"Invasion among {N} firms (Moran process): {N} × the probability that one firm following the row rule "
              "takes over a population following the column rule. Above 1 (orange) selection favours the invader, "
              "below 1 (purple) the population resists it."),
    ]


# --------------------------------------------------------------------------------------------------
# The evidence bundle of a run folder
# --------------------------------------------------------------------------------------------------


def bundle(run, b) -> list | None:
    """The tournament's account of a finished run folder in its evidence bundle, read from the stored cells: the
    answer, the setup, the tables and figures of the outcome (the figures of ``supergame tournament --plot``); a
    sweep gets every cell's outcome and, over one numeric parameter, each rule's profit gain along it.

    Parameters
    ----------
    run : sim.runner.runs.RunFolder
    b : sim.evidence.bundle.Bundle

    Returns
    -------
    None
        Nothing is added to "Reproducing these numbers".
    """
    exp = run.experiment
    ok = [r for r in run.rows() if r.status == "ok"]
    desc = exp.description or leading_comment(exp.text or "")
    if desc:
        b.heading("What the experiment asks")
        describe_experiment(b, desc)
    if exp.parameters:
        sweep_account(run, b, ok)
        return None
    if not ok:
        b.heading("Setup")
        b.bullets(describe_setup(exp.doc))
        b.heading("Results")
        b.paragraph("The cell failed: no results to report (see the failed cells below).", note=True)
        return None
    _cell_account(b, run.result(ok[0].cell))
    return None


def _cell_account(b, out: TournamentOutcome) -> None:
    b.heading("Answer")
    b.paragraph(answer(out))
    b.heading("Setup")
    b.bullets(setup_lines(out))
    drawn = {d.name: d for d in figures(out)}
    b.heading("Profit gain of each rule")
    h, rows, csv = rules_table(out)
    note = (f"profits in {profit_unit(out)}; profit gain: 0 at the static Nash profit, 1 at the collusive profit of "
            "the rule's seats; intervals measure simulation error only")
    if out.stability:
        note += (f"; place held: share of {out.stability['resamples']:,} bootstrap resamples in which the rule keeps "
                 f"its place (the whole order holds in {percent(out.stability['ranking_holds'])})")
    b.table("rules", h, rows, caption="Profit gain of each rule against rivals drawn at random from the rules",
            note=note, csv_rows=csv)
    _figure(b, drawn["rules"])
    b.heading("Collusion within each pair of rules" if out.n_seats == 2 else "Collusion within each group of rules")
    h, rows, csv = pairs_table(out)
    b.table("pairs", h, rows, caption="Share of the collusive profit kept and how long collusion lasts",
            note="every seating averaged; Kaplan-Meier means over the horizon, 'at least' where collusion outlived it",
            csv_rows=csv, max_rows=60)
    _figure(b, drawn["pairs"])
    _figure(b, drawn["collusion-duration"])
    b.heading("Which rules spread")
    h, rows = spread_table(out)
    b.table("spread", h, rows, caption=f"Evolutionary dynamics on the tournament's payoffs ({fitness_words(out)})",
            note="time prevailing: Fudenberg and Imhof (2006); resists invasion: Maynard Smith and Price (1973) in a "
                 "large population, Nowak et al. (2004) among a finite number of firms")
    _figure(b, drawn["replicator"])
    _figure(b, drawn["invasion"])
    ck = out.evolution.check
    if ck.get("max_standard_errors") is not None:
        b.paragraph(f"The simulated invasions ({out.evolution.runs:,} per pair) lie within "
                    f"{fmt_num(ck['max_standard_errors'], 3)} binomial standard errors of the formula at the worst "
                    "pair.", note=True)
    _data_tables(b, out)


def _figure(b, d: Drawn) -> None:
    b.figure(d.name, d.figure, d.caption)


def _data_tables(b, out: TournamentOutcome) -> None:
    """Tables kept as files only: every match and seat, the replicator path, invasion, the resampled order."""
    rows = []
    for m in out.matches:
        st = m["stream"]
        stream = " ".join(map(str, st["key"])) if "key" in st else f"cell {st['cell']}"
        for s, lab in enumerate(m["seats"]):
            rows.append([m["match"], m["group"], m["kind"], s + 1, lab, m["replications"],
                         *(m[k][s]["value"] for k in ("profit", "discounted_profit", "profit_gain")),
                         (m.get("collusive_share") or {}).get("value"), (m.get("first_breakdown") or {}).get("value"),
                         m.get("converged"), st["seed"], stream])
    b.table("matches", ["match", "group", "played as", "seat", "rule", "replications", "profit", "discounted profit",
                        "profit gain", "share of periods with collusion", "periods until collusion first breaks down",
                        "converged sessions", "seed", "stream"], rows, show=False)
    evo = out.evolution
    b.table("replicator-path", ["generation", *out.labels],
            [[g, *np.asarray(evo.shares)[k].tolist()] for k, g in enumerate(evo.generation)], show=False)
    N = evo.population
    E = len(out.labels)
    sim = evo.simulated
    b.table("invasion", ["invading rule", "population rule", "takeover probability", f"{N} x takeover probability",
                         "simulated takeover share"],
            [[out.labels[i], out.labels[j], evo.fixation[i][j], evo.fixation[i][j] * N,
              None if sim is None else sim[i][j]] for i in range(E) for j in range(E) if i != j], show=False)
    if out.stability:
        A = out.stability["above"]
        b.table("placed-above", ["rule", *out.labels], [[out.labels[i], *A[i]] for i in range(E)], show=False)


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, bundle=bundle, headline=answer)
