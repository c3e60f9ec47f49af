"""Tournaments from experiment files: the tables of a ``kind = "tournament"`` experiment, read and validated.

A tournament file has ``[market]``, ``[[entrants]]`` (label, strategy, parameters), ``[tournament]`` (seats, the
score, the bootstrap and the evolutionary settings) and optionally ``[collusion]``, ``[monitoring]``, ``[learning]``
(defaults of ``qlearning`` entrants and their sessions) and ``[run]``. :func:`tournament_from_dict` reads them,
:func:`check_experiment` validates everything that can be checked before a match is played (every match compiled,
the evolutionary settings against the payoffs the rules allow), and :func:`evolve_tournament` runs the evolutionary
analysis with the file's settings.
"""

from __future__ import annotations

import math

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real
from sim.core.tables import refuse_unknown
from sim.core.text import fmt_num
from sim.learning.tables import LEARNER_PARAMS
from sim.models.market import market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.tournament.entrants import entrants_from_tables
from sim.tournament.evolution import EVOLUTION_CONSTRAINTS, FITNESS_MAPS, EvolutionResult, evolve
from sim.tournament.floor import payoff_floor
from sim.tournament.plan import SCORE_NAMES, TournamentPlan, prepare_tournament
from sim.tournament.replicator import check_shares
from sim.tournament.scoring import TournamentResult

__all__ = ["EVOLUTION_DEFAULTS", "TOURNAMENT_DEFAULTS", "TOURNAMENT_TABLES", "check_experiment", "evolve_tournament",
           "tournament_from_dict"]

TOURNAMENT_TABLES = ("experiment", "market", "collusion", "monitoring", "entrants", "tournament", "learning", "run")
TOURNAMENT_KEYS = ("seats", "replications", "seatings", "score", "confidence", "bootstrap", "generations", "shares",
                   "selection", "fitness", "population", "moran_runs")
LEARNING_KEYS = (*LEARNER_PARAMS, "convergence", "max_periods", "limit_periods", "sessions")
RUN_KEYS = ("periods", "replications", "horizon", "continuation", "delta", "seed")
TOURNAMENT_DEFAULTS = {"seatings": "auto", "score": "profit_gain", "confidence": 0.95, "bootstrap": 1000}
EVOLUTION_DEFAULTS = {"generations": 1000, "shares": None, "selection": 0.1, "fitness": "linear",
                      "population": 100, "moran_runs": 10_000}


def _check_kind(doc: dict) -> dict:
    # the kind first: a file of another kind fails on experiment.kind, not on the tables it has
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", ("name", "kind", "description", "currency", "period"))
    if "kind" in exp and exp["kind"] != "tournament":
        raise InputError("experiment.kind", f"this command runs kind = 'tournament' experiments, got {exp['kind']!r}")
    for k in ("currency", "period"):
        v = exp.get(k)
        if v is not None and (not isinstance(v, str) or not v.strip()):
            raise InputError(f"experiment.{k}", f"must be a non-empty string, got {v!r}")
    return exp


def _market_table(doc: dict, tour: dict) -> dict:
    if "market" not in doc:
        raise InputError("market", "missing: the [market] table describes the market")
    mtab = doc["market"]
    if not isinstance(mtab, dict):
        raise InputError("market", f"must be a table, got {mtab!r}")
    if "seats" in tour:
        # checked before the market: with single-number costs the seats give the number of firms
        seats = Integer(2, 64).check("tournament.seats", tour["seats"])
        if "n_firms" not in mtab and not any(isinstance(v, list) for v in mtab.values()):
            mtab = {**mtab, "n_firms": seats}
    return mtab


def _plan_args(tour: dict, runt: dict, lt: dict, coll: dict) -> dict:
    """Keyword arguments of :func:`sim.tournament.plan.prepare_tournament` from the file's tables."""
    if "replications" in tour and "replications" in runt:
        raise InputError("tournament.replications", "given in both [tournament] and [run]; give it once")
    args = {k: runt[k] for k in RUN_KEYS if k in runt}
    if "replications" in tour:
        args["replications"] = tour["replications"]
    for k in ("seats", "seatings", "score", "confidence", "bootstrap"):
        if k in tour:
            args[k] = tour[k]
    for k in ("convergence", "max_periods", "limit_periods", "sessions"):
        if k in lt:
            args[k] = lt[k]
    # without collusion.agreement the plan chooses one (see default_agreement)
    args["agreement"] = coll.get("agreement")
    if "actions" in coll:
        args["actions"] = coll["actions"]
        args["agreement"] = coll.get("agreement", "given")
    return args


def tournament_from_dict(doc: dict, check_tables: bool = True) -> dict:
    """Read and validate the tables of a ``kind = "tournament"`` experiment.

    Unknown tables and keys raise :class:`InputError` naming them; the values are checked by
    :func:`check_experiment`.

    Parameters
    ----------
    doc : dict
        The experiment's tables.
    check_tables : bool
        Refuse tables a tournament does not read.

    Returns
    -------
    dict
        ``market`` (Market), ``entrants`` (list of Entrant), ``monitoring`` (Monitoring), ``plan_args`` (keyword
        arguments of :func:`sim.tournament.plan.prepare_tournament` besides market, entrants and monitoring),
        ``evolution`` (generations, shares, selection, fitness, population, moran_runs), ``name`` and ``units``
        (``currency`` and ``period`` where ``[experiment]`` names them).
    """

    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    exp = _check_kind(doc)
    if check_tables:
        for k in doc:
            if k not in TOURNAMENT_TABLES:
                raise InputError(k, f"unknown table for a tournament; allowed: {', '.join(TOURNAMENT_TABLES)}")
    tour = refuse_unknown(doc.get("tournament", {}), "tournament", TOURNAMENT_KEYS)
    runt = doc.get("run", {})
    if isinstance(runt, dict) and "paths" in runt:
        raise InputError("run.paths", f"unknown key (full paths are not recorded in tournaments); allowed: "
                                      f"{', '.join(RUN_KEYS)}")
    runt = refuse_unknown(runt, "run", RUN_KEYS)
    lt = refuse_unknown(doc.get("learning", {}), "learning", LEARNING_KEYS)
    coll = refuse_unknown(doc.get("collusion", {}), "collusion", ("agreement", "actions"))
    market = market_from_dict(_market_table(doc, tour))
    mon = monitoring_from_dict(doc.get("monitoring", {}))
    if "entrants" not in doc:
        raise InputError("entrants", "missing: give the entrants as [[entrants]] entries (label, strategy, ...)")
    entrants = entrants_from_tables(doc["entrants"], lt)
    args = _plan_args(tour, runt, lt, coll)
    evo = dict(EVOLUTION_DEFAULTS)
    evo.update({k: tour[k] for k in EVOLUTION_DEFAULTS if k in tour})
    units = {k: exp[k] for k in ("currency", "period") if k in exp}
    return {"market": market, "entrants": entrants, "monitoring": mon, "plan_args": args, "evolution": evo,
            "name": exp.get("name", "tournament"), "units": units}


def check_experiment(cfg: dict) -> TournamentPlan:
    """Validate a read experiment completely; nothing is played.

    Every match is compiled and the evolutionary settings are checked as far as they can be before the payoffs
    exist (linear fitness against :func:`sim.tournament.floor.payoff_floor`).

    Parameters
    ----------
    cfg : dict
        What :func:`tournament_from_dict` returned.

    Returns
    -------
    TournamentPlan
    """

    plan = prepare_tournament(cfg["market"], cfg["entrants"], cfg["monitoring"], **cfg["plan_args"])
    ev = cfg["evolution"]
    EVOLUTION_CONSTRAINTS["generations"].check("tournament.generations", ev["generations"])
    N = EVOLUTION_CONSTRAINTS["population"].check("tournament.population", ev["population"])
    if N < plan.seats:
        raise InputError("tournament.population", f"must be at least the number of seats ({plan.seats}), got {N}")
    EVOLUTION_CONSTRAINTS["runs"].check("tournament.moran_runs", ev["moran_runs"])
    mapping = Options(*FITNESS_MAPS).check("tournament.fitness", ev["fitness"])
    hi = 1 if mapping == "linear" else None
    w = Real(0, hi, closed="right" if hi else "neither").check("tournament.selection", ev["selection"])
    check_shares(ev["shares"], len(plan.entrants), plan.labels, "tournament.shares")
    if mapping == "linear":
        _check_linear_selection(plan, w)
    return plan


def _check_linear_selection(plan: TournamentPlan, w: float) -> None:
    """Linear fitness ``1 - w + w * payoff`` must stay positive for every payoff the tournament can produce:
    checked against :func:`payoff_floor` before anything is played."""

    floor, where = payoff_floor(plan)
    name = SCORE_NAMES[plan.settings["score"]]
    # a margin for the rounding of the played sums against the stage game's evaluation
    margin = 1e-9 * max(1.0, abs(floor)) if math.isfinite(floor) else 0.0
    if 1.0 - w + w * (floor - margin) > 0:
        return
    if not math.isfinite(floor):
        raise InputError("tournament.selection", f"with tournament.fitness = 'linear' the fitness 1 - w + w * payoff "
                                                 f"must stay positive, but the {name} has no lower bound here "
                                                 f"({where}); use tournament.fitness = 'exponential', got w = {w:g}")
    top = 1.0 / (1.0 - (floor - margin))
    raise InputError("tournament.selection", f"with tournament.fitness = 'linear' the fitness 1 - w + w * payoff must "
                                             f"stay positive for every payoff the entrants' actions allow; the "
                                             f"{name} can be as low as {fmt_num(floor)} ({where}), so w must be "
                                             f"below {top:.6g} (or use tournament.fitness = 'exponential'), got "
                                             f"{w:g}")


def evolve_tournament(result: TournamentResult, evolution: dict, threads: int | None = None) -> EvolutionResult:
    """The evolutionary analysis of a tournament's payoffs with the settings of a ``[tournament]`` table.

    The Moran simulation's streams continue the tournament's seed and key.

    Parameters
    ----------
    result : TournamentResult
    evolution : dict
        generations, shares, selection, fitness, population, moran_runs (see :data:`EVOLUTION_DEFAULTS`).
    threads : int, optional

    Returns
    -------
    EvolutionResult
    """

    ev = evolution
    return evolve(result.payoffs(), shares=ev["shares"], generations=ev["generations"], selection=ev["selection"],
                  fitness_map=ev["fitness"], population=ev["population"], runs=ev["moran_runs"],
                  seed=result.plan.run["seed"], key=tuple(result.plan.settings["key"]),
                  confidence=result.plan.settings["confidence"], threads=threads, prefix="tournament")
