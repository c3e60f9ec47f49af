"""The ``tournament`` analysis: round robins of strategies with evolutionary dynamics, as an experiment kind
(see :mod:`sim.runner.kinds`)."""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np

from sim.core.values import value_label
from sim.runner.analyses.common import GENERAL_ASSUMPTIONS, describe_market, nan_if_none
from sim.runner.kinds import CellResult, Kind
from sim.tournament.roundrobin import SCORES, check_experiment, evolve_tournament, run_tournament, tournament_from_dict

# Experiment kind (``supergame run`` and sweeps; see :mod:`sim.runner.kinds`)
# --------------------------------------------------------------------------------------------------


def metric_label(labels) -> list[str]:
    """Entrant labels as parts of metric names: characters other than letters, digits, ``_`` and ``-``
    become ``_``; when that makes two names equal, ``entrant1``, ``entrant2``, ... are used instead."""

    out = [re.sub(r"[^A-Za-z0-9_-]", "_", str(lab)) for lab in labels]
    if len(set(out)) != len(out):
        out = [f"entrant{k + 1}" for k in range(len(labels))]
    return out


def _kind_prepare(doc: dict) -> dict:
    cfg = tournament_from_dict(doc, check_tables=True)
    cfg["plan"] = check_experiment(cfg)
    return cfg


def _kind_names(cfg: dict) -> list[str]:
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


def _kind_run(cfg: dict, ctx) -> object:


    plan = cfg["plan"]
    plan = dataclasses.replace(plan, settings={**plan.settings, "key": list(ctx.key)})
    res = run_tournament(plan, ctx.threads, ctx.progress)
    evo = evolve_tournament(res, cfg["evolution"], ctx.threads)
    score = res.score
    m: dict = {"entrants": len(plan.entrants), "seats": plan.seats, "matches": len(plan.matches),
               "ranking_holds": res.stability["ranking_holds"] if res.stability else math.nan,
               "moran.max_standard_errors": nan_if_none(evo.agreement()["max_standard_errors"])}
    st = res.stability["per_entrant"] if res.stability else None
    for e, lab in enumerate(metric_label(plan.labels)):
        m[f"rank.{lab}"] = int(res.ranks[e])
        x = res.scores[score][e]
        m[f"score.{lab}"], m[f"score.{lab}.se"], m[f"score.{lab}.low"], m[f"score.{lab}.high"] = \
            x.value, x.se, x.low, x.high
        for k in SCORES:
            y = res.scores[k][e]
            m[f"{k}.{lab}"], m[f"{k}.{lab}.low"], m[f"{k}.{lab}.high"] = y.value, y.low, y.high
        m[f"rank_share.{lab}"] = st["rank_share"][e] if st else math.nan
        m[f"top_share.{lab}"] = st["top_share"][e] if st else math.nan
        m[f"share.{lab}"] = float(evo.replicator.final[e])
        m[f"rare_mutation_share.{lab}"] = float(evo.stationary[e])
        m[f"ess.{lab}"] = float(evo.stability["ess"][e])
        m[f"ess_n.{lab}"] = float(evo.stability["ess_n"][e])
        if plan.seats == 2:
            m[f"wins.{lab}"] = int(res.pairwise[score]["wins"][e])
            m[f"losses.{lab}"] = int(res.pairwise[score]["losses"][e])
    rp = evo.replicator
    idx = np.unique(np.round(np.linspace(0, rp.shares.shape[0] - 1, min(rp.shares.shape[0], 200))).astype(int))
    arrays = {"replicator.generation": idx.astype(float), "replicator.shares": rp.shares[idx],
              "scores": np.array([res.scores[score][e].value for e in range(len(plan.entrants))]),
              "versus": res.versus[score], "fixation": evo.fixation}
    if plan.seats == 2:
        arrays["beats"] = res.pairwise[score]["beats"]
    return CellResult(m, arrays)




def describe(doc: dict) -> list[str]:

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
    return [f"Market: {describe_market(doc.get('market', {}))}",
            agreement,
            f"Entrants: {ents}",
            f"Monitoring: signal {mon['signal']}, {mon['noise']} demand shock sigma {mon['sigma']}, perception error "
            f"{mon['perception_error']}, implementation error {mon['implementation_error']}",
            f"Round robin over every group of entrants, self-play included; {run['periods']} periods "
            f"({run['horizon']} horizon), {reps} replications per match, delta {run['delta']}, seed {run['seed']}",
            f"Ranking by {tour.get('score', 'profit_gain')}; evolutionary dynamics: selection "
            f"{tour.get('selection', 0.1)} ({tour.get('fitness', 'linear')} fitness), Moran population "
            f"{tour.get('population', 100)}"]



def _kind() -> object:

    return Kind(
        name="tournament",
        tables=("market", "collusion", "monitoring", "entrants", "tournament", "learning", "run"),
        prepare=_kind_prepare,
        run=_kind_run,
        metric_names=_kind_names,
        headline=("ranking_holds",),
        describe=describe,
        summary="round-robin tournament of strategies: scores, ranking stability, evolutionary dynamics",
        assumptions=GENERAL_ASSUMPTIONS + (
            "Every group of entrants (self-play included) plays the repeated game; where firms differ, every "
            "seating is played and averaged. Scores are expected payoffs against rivals drawn uniformly from the "
            "entrants: a ranking holds only for this set of entrants.",
            "Strategies are fixed automata or Q-learners scored on their converged play; learners play without "
            "noise. Confidence intervals and the bootstrap measure simulation error only.",
            "Evolutionary dynamics treat the tournament's payoffs as fitness in large (replicator) or finite "
            "(Moran) populations of firms that imitate successful rules; they describe which rules spread under "
            "that assumption, not how actual firms choose their conduct.",
        ),
    )


KIND = _kind()


# --------------------------------------------------------------------------------------------------
# Benchmark (``supergame bench``, section ``tournament``)
