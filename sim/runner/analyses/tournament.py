"""The ``tournament`` analysis: round robins of strategies with evolutionary dynamics, as an experiment kind (see
:mod:`sim.runner.kinds`).

A cell plays :func:`sim.tournament.analysis.tournament_analysis` and stores its
:class:`~sim.tournament.analysis.TournamentOutcome`; the columns of ``results.csv`` (:func:`tournament_metrics`) and
the arrays of ``arrays.json`` (:func:`tournament_arrays`) are flattened from it, under names kept from earlier
versions so that stored runs stay comparable: ``rank`` (the place), ``score`` (the score the rules are placed by),
``rank_share`` and ``top_share`` (how often the place, and the first place, hold in the bootstrap), ``share`` (the
population share after the replicator dynamics), ``rare_mutation_share``, ``ess`` and ``ess_n`` (resists invasion
in a large and in a finite population) and, with two seats, ``wins`` and ``losses`` (how many rivals the rule earns
more, or less, than in their match beyond the confidence margin).
"""

from __future__ import annotations

import math
import re

import numpy as np

from sim.core.values import value_label
from sim.runner.analyses.common import GENERAL_ASSUMPTIONS, describe_market, nan_if_none
from sim.runner.kinds import CellContext, CellResult, Kind
from sim.tournament.analysis import DEFAULT_UNITS, TournamentOutcome, TournamentSpec, tournament_analysis
from sim.tournament.experiment import check_experiment, tournament_from_dict
from sim.tournament.plan import SCORES

__all__ = ["KIND", "describe", "metric_label", "tournament_arrays", "tournament_metrics"]


def metric_label(labels) -> list[str]:
    """Entrant labels as parts of metric names.

    Characters other than letters, digits, ``_`` and ``-`` become ``_``; when that makes two names equal, ``entrant1``,
    ``entrant2``, ... are used instead.

    Parameters
    ----------
    labels : sequence of str

    Returns
    -------
    list of str
    """

    out = [re.sub(r"[^A-Za-z0-9_-]", "_", str(lab)) for lab in labels]
    if len(set(out)) != len(out):
        out = [f"entrant{k + 1}" for k in range(len(labels))]
    return out


def _prepare(doc: dict) -> dict:
    cfg = tournament_from_dict(doc, check_tables=True)
    plan = check_experiment(cfg)
    cfg["plan"] = plan
    cfg["spec"] = TournamentSpec(plan, cfg["evolution"], cfg["market"].to_dict(), {**DEFAULT_UNITS, **cfg["units"]})
    return cfg


def _names(cfg: dict) -> list[str]:
    plan = cfg["plan"]
    out = ["entrants", "seats", "matches", "ranking_holds", "moran.max_standard_errors"]
    for lab in metric_label(plan.labels):
        out += [f"rank.{lab}", f"score.{lab}", f"score.{lab}.se", f"score.{lab}.low", f"score.{lab}.high"]
        for m in SCORES:
            out += [f"{m}.{lab}", f"{m}.{lab}.low", f"{m}.{lab}.high"]
        out += [f"rank_share.{lab}", f"top_share.{lab}", f"share.{lab}", f"rare_mutation_share.{lab}",
                f"ess.{lab}", f"ess_n.{lab}"]
        if plan.seats == 2:
            out += [f"wins.{lab}", f"losses.{lab}"]
    return out


def tournament_metrics(out: TournamentOutcome) -> dict:
    """The flat metrics of a tournament outcome (the columns of ``results.csv``; see the module notes).

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    dict of str to float
    """
    st = out.stability
    evo = out.evolution
    m: dict = {"entrants": len(out.entrants), "seats": out.n_seats, "matches": len(out.matches),
               "ranking_holds": st["ranking_holds"] if st else math.nan,
               "moran.max_standard_errors": nan_if_none(evo.check["max_standard_errors"])}
    per = st["per_entrant"] if st else None
    verdict = np.asarray(out.pairs.verdict[out.score]) if out.pairs is not None else None
    for e, lab in enumerate(metric_label(out.labels)):
        m[f"rank.{lab}"] = int(out.ranks[e])
        value, se, low, high = (float(v) for v in out.estimates[out.score][e])
        m[f"score.{lab}"], m[f"score.{lab}.se"], m[f"score.{lab}.low"], m[f"score.{lab}.high"] = value, se, low, high
        for k in SCORES:
            y = out.estimates[k][e]
            m[f"{k}.{lab}"], m[f"{k}.{lab}.low"], m[f"{k}.{lab}.high"] = float(y[0]), float(y[2]), float(y[3])
        m[f"rank_share.{lab}"] = per["rank_share"][e] if per else math.nan
        m[f"top_share.{lab}"] = per["top_share"][e] if per else math.nan
        m[f"share.{lab}"] = float(evo.final[e])
        m[f"rare_mutation_share.{lab}"] = float(evo.stationary[e])
        m[f"ess.{lab}"] = float(evo.resists[e])
        m[f"ess_n.{lab}"] = float(evo.resists_finite[e])
        if verdict is not None:
            m[f"wins.{lab}"] = int((verdict[e] > 0).sum())
            m[f"losses.{lab}"] = int((verdict[e] < 0).sum())
    return m


def tournament_arrays(out: TournamentOutcome) -> dict:
    """The arrays of a tournament outcome kept in ``arrays.json``: the replicator path, the scores, the payoffs
    against one rival rule, the fixation probabilities and (two seats) the pairwise verdicts.

    Parameters
    ----------
    out : TournamentOutcome

    Returns
    -------
    dict of str to ndarray
    """
    evo = out.evolution
    arrays = {"replicator.generation": np.asarray(evo.generation, dtype=float), "replicator.shares": evo.shares,
              "scores": np.asarray(out.estimates[out.score][:, 0]), "versus": out.versus[out.score],
              "fixation": evo.fixation}
    if out.pairs is not None:
        arrays["beats"] = out.pairs.verdict[out.score]
    return arrays


def _run(cfg: dict, ctx: CellContext) -> CellResult:
    out = tournament_analysis(cfg["spec"], key=ctx.key, threads=ctx.threads, progress=ctx.progress)
    return CellResult(tournament_metrics(out), tournament_arrays(out), result=out)


_SIGNALS = {"perfect": "each firm sees its rivals' actions", "price": "firms see only the market price"}


def describe(doc: dict) -> list[str]:
    """Lines describing a tournament experiment's setup, in words (the file's settings and their defaults).

    Parameters
    ----------
    doc : dict
        The experiment's tables.

    Returns
    -------
    list of str
    """

    run = {"periods": 1000, "replications": 1000, "horizon": "fixed", "delta": 0.95, "seed": 0, **doc.get("run", {})}
    tour = doc.get("tournament", {})
    mon = {"signal": "perfect", "noise": "lognormal", "sigma": 0.0, "perception_error": 0.0,
           "implementation_error": 0.0, **doc.get("monitoring", {})}
    ents = "; ".join(f"{e.get('label')}: {value_label({k: v for k, v in e.items() if k != 'label'})}"
                     for e in doc.get("entrants", []) if isinstance(e, dict))
    reps = tour.get("replications", run["replications"])
    coll = doc.get("collusion", {})
    if "agreement" in coll or "actions" in coll:
        agreement = f"Agreement: {coll.get('agreement', 'given')} (the collusive benchmark of the profit gain)"
    else:
        agreement = ("Agreement: the default (the joint-profit maximum for symmetric firms, the Nash quantities "
                     "scaled down in proportion where firms differ), the collusive benchmark of the profit gain")
    shock = "no demand shock" if not mon["sigma"] else f"{mon['noise']} demand shock, standard deviation {mon['sigma']}"
    return [f"Market: {describe_market(doc.get('market', {}))}",
            agreement,
            f"Rules (label: rule and parameters): {ents}",
            f"Monitoring: {_SIGNALS.get(mon['signal'], mon['signal'])}; {shock}; a firm misreads a rival's conduct "
            f"with probability {mon['perception_error']} and deviates by mistake with probability "
            f"{mon['implementation_error']} per period",
            f"Every group of rules plays, self-play included; {run['periods']} periods ({run['horizon']} horizon), "
            f"{reps} replications per match, discount factor {run['delta']}, seed {run['seed']}",
            f"Rules placed by {tour.get('score', 'profit_gain').replace('_', ' ')}; evolutionary dynamics: selection "
            f"intensity {tour.get('selection', 0.1)} ({tour.get('fitness', 'linear')} fitness), population of "
            f"{tour.get('population', 100)} firms for the Moran process"]


KIND = Kind(
    name="tournament",
    tables=("market", "collusion", "monitoring", "entrants", "tournament", "learning", "run"),
    prepare=_prepare,
    run=_run,
    metric_names=_names,
    result_type=TournamentOutcome,
    headline=("ranking_holds",),
    describe=describe,
    summary="tournament of collusive rules: profit gain, collusion between each pair, which rules spread",
    assumptions=GENERAL_ASSUMPTIONS + (
        "Every group of rules (self-play included) plays the repeated game; where firms differ, every seating is "
        "played and averaged. A rule's profit gain is its expected result against rivals drawn uniformly from the "
        "rules entered: it holds only for this set of rules.",
        "Strategies are fixed automata or Q-learners scored on their converged play; learners play without noise. "
        "Confidence intervals and the bootstrap measure simulation error only.",
        "Evolutionary dynamics treat the tournament's payoffs as fitness in large (replicator) or finite (Moran) "
        "populations of firms that imitate successful rules; they describe which rules spread under that "
        "assumption, not how actual firms choose their conduct.",
    ),
)
