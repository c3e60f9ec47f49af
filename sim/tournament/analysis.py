"""The tournament analysis: one function from a validated specification to a result that is plain data.

:func:`tournament_analysis` plays a tournament (:mod:`sim.tournament.roundrobin`), runs the evolutionary analysis
on its payoffs (:mod:`sim.tournament.evolution`) and returns a :class:`TournamentOutcome`: what ``supergame
tournament`` prints, what a ``tournament`` cell of a run stores and what the evidence bundle draws
(:mod:`sim.evidence.tournament`). It speaks in the market's terms:

* each rule's *profit gain* against rivals drawn at random from the rules, between the static Nash profit (0) and
  the collusive profit (1) of the seats it occupies, with its interval, beside its profit per period and the two
  benchmark profits of its seats;
* for each group of rules that meets in a match (a pair, with two seats): the share of the collusive profit the
  group keeps -- its *joint* profit gain ``(sum of profits - sum of Nash profits) / (sum of collusive profits - sum
  of Nash profits)`` -- and how long collusion lasts between them: the share of periods in which every firm
  colludes, the mean number of periods until collusion first breaks down and the mean length of a collusive spell
  (Kaplan-Meier restricted means over the horizon, Kaplan and Meier, 1958; a lower bound where collusion outlived
  the horizon);
* the evolutionary outcome: which rules spread under the replicator dynamics, where the population spends its time
  with rare mutations, and which rules resist invasion by every other in a large and in a finite population.

Group values average the group's seatings with equal weights, as its payoffs do; their standard errors combine the
seatings' (independent replications), and intervals are normal at the tournament's confidence level, intersected
with the range the quantity can take (a share in [0, 1], a length in [1, horizon]), which keeps their coverage.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from sim.core.records import Record, to_plain
from sim.core.stats import normal_quantile, ratio_estimate
from sim.tournament.entrants import rule_description
from sim.tournament.evolution import EvolutionResult
from sim.tournament.experiment import evolve_tournament
from sim.tournament.plan import SCORES, TournamentPlan, gain_defined, rival_weights
from sim.tournament.roundrobin import run_tournament
from sim.tournament.scoring import TournamentResult, match_dict

__all__ = ["DEFAULT_UNITS", "REPLICATOR_POINTS", "EvolutionOutcome", "GroupOutcomes", "PairContrasts",
           "TournamentOutcome", "TournamentSpec", "tournament_analysis", "tournament_outcome"]

#: the most generations of the replicator path a result keeps (evenly spaced, first and last included)
REPLICATOR_POINTS = 200
#: the neutral units of a market whose experiment names none
DEFAULT_UNITS = {"currency": "currency units", "period": "period"}


@dataclass(frozen=True)
class TournamentSpec:
    """A validated tournament question (built by the ``tournament`` kind from an experiment's tables).

    Parameters
    ----------
    plan : TournamentPlan
        Every match validated and compiled (:func:`sim.tournament.experiment.check_experiment`).
    evolution : dict
        The evolutionary settings (generations, shares, selection, fitness, population, moran_runs).
    market : dict
        The market's settings (:meth:`sim.Market.to_dict`), for readers.
    units : dict
        ``currency`` and ``period`` of the market's profits.
    """

    plan: TournamentPlan
    evolution: dict
    market: dict
    units: dict = field(default_factory=lambda: dict(DEFAULT_UNITS))


@dataclass(frozen=True)
class GroupOutcomes(Record):
    """What each group of rules that meets in a match (a pair, with two seats) achieves together.

    Parameters
    ----------
    members : list of list of int
        Entrant indices of each group (sorted), G groups in the plan's order.
    matches : list of list of int
        The matches (counted from 1) of each group: its seatings.
    learning : list of bool
        The group seats a learning firm (scored on converged play; no record of collusive periods).
    kept : ndarray of shape (G, 4)
        Share of the collusive profit the group keeps (its joint profit gain): value, standard error, low, high.
    colluding : ndarray of shape (G, 4)
        Share of the periods in which every firm colludes.
    first_breakdown : ndarray of shape (G, 4)
        Mean number of periods until collusion first breaks down.
    spell_length : ndarray of shape (G, 4)
        Mean length of a collusive spell, in periods.
    lower_bound : list of bool
        The first-breakdown value is a lower bound (collusion outlived the horizon in some replication).
    payoff, payoff_se : dict of str to ndarray of shape (G, E)
        Per score, each member's payoff in the group and its standard error (nan where absent).
    """

    members: list[list[int]]
    matches: list[list[int]]
    learning: list[bool]
    kept: np.ndarray
    colluding: np.ndarray
    first_breakdown: np.ndarray
    spell_length: np.ndarray
    lower_bound: list[bool]
    payoff: dict[str, np.ndarray]
    payoff_se: dict[str, np.ndarray]


@dataclass(frozen=True)
class PairContrasts(Record):
    """Two seats: how each pair's two rules fare against each other in their match.

    Parameters
    ----------
    difference, difference_se : dict of str to ndarray of shape (E, E)
        Per score, the row rule's payoff minus the column rule's in their match (averaged over seatings) and its
        standard error.
    verdict : dict of str to ndarray of shape (E, E)
        1 where the row rule earns more beyond the confidence margin, -1 where it earns less, 0 otherwise.
    """

    difference: dict[str, np.ndarray]
    difference_se: dict[str, np.ndarray]
    verdict: dict[str, np.ndarray]


@dataclass(frozen=True)
class EvolutionOutcome(Record):
    """Which rules spread and which resist invasion (:class:`sim.tournament.evolution.EvolutionResult` as data).

    Parameters
    ----------
    settings : dict
        generations, selection, fitness, population, runs, seed, confidence, initial_shares, seats.
    generation : list of int
        The generations kept of the replicator path (at most :data:`REPLICATOR_POINTS`).
    shares : ndarray of shape (points, E)
        Population shares at those generations.
    mean_payoff : ndarray of shape (points,)
    final : ndarray of shape (E,)
        Shares after the last generation.
    last_change : float
        Largest change of a share in the last generation.
    fixation : ndarray of shape (E, E)
        Probability that one invader (row) takes over a population of the resident (column); nan on the diagonal.
    simulated : ndarray of shape (E, E) or None
        The same, from the seeded simulation.
    runs : int
        Simulated invasions per pair.
    check : dict
        How the simulation matches the formula (``max_standard_errors``, ``within``, ``z``).
    stationary : ndarray of shape (E,)
        Share of time each rule prevails when mutations are rare.
    resists, neutral, resists_finite : list of bool
        Resists invasion by every other rule in a large population; neutral against some rule there; resists in
        the finite population.
    invaded_by, finite_invaders : list of list of str
        The rules that invade each rule in the large population, and those against which it fails in the finite
        one.
    pairs : list of dict
        Per ordered pair, the verdicts and conditions (:func:`sim.tournament.stability.stability`).
    """

    settings: dict
    generation: list[int]
    shares: np.ndarray
    mean_payoff: np.ndarray
    final: np.ndarray
    last_change: float
    fixation: np.ndarray
    simulated: np.ndarray | None
    runs: int
    check: dict
    stationary: np.ndarray
    resists: list[bool]
    neutral: list[bool]
    resists_finite: list[bool]
    invaded_by: list[list[str]]
    finite_invaders: list[list[str]]
    pairs: list[dict]

    @property
    def population(self) -> int:
        """N of the Moran process."""
        return int(self.settings["population"])


@dataclass(frozen=True)
class TournamentOutcome(Record):
    """Everything the tournament analysis found, as plain data (see the module notes).

    Parameters
    ----------
    market : dict
        The market's settings (:meth:`sim.Market.to_dict`).
    units : dict
        ``currency`` and ``period`` of the profits.
    entrants : list of dict
        ``label``, ``rule`` (registry name), ``description`` (in words), ``parameters`` and ``learns``.
    settings : dict
        ``run``, ``tournament`` (as played), ``monitoring``.
    benchmarks : dict
        ``agreement``, ``agreement_given``, and per firm ``nash_profit``, ``collusive_profit``, ``gain_defined``.
    score : str
        What the rules are placed by.
    ranks : list of int
        Place of each entrant (1 = best; ties share the better place).
    order : list of int
        Entrant indices from first to last.
    estimates : dict of str to ndarray of shape (E, 4)
        Per score (``profit_gain``, ``discounted_profit``, ``profit``), each entrant's value, standard error, low
        and high against rivals drawn at random from the entrants.
    seat_profits : ndarray of shape (E, 2)
        The static Nash and the collusive profit per period of the seats each entrant occupies (weighted as its
        score weighs them).
    stability : dict or None
        Bootstrap stability of the places (:func:`sim.tournament.bootstrap.rank_stability`), None without it.
    groups : GroupOutcomes
    versus : dict of str to ndarray of shape (E, E)
        Per score, the row entrant's payoff when every rival follows the column entrant's rule.
    pairs : PairContrasts or None
        Two seats only.
    matches : list of dict
        Per match: its seats, how to reproduce it and its estimates (:func:`sim.tournament.scoring.match_dict`),
        with the periods until collusion first breaks down and the spell length.
    evolution : EvolutionOutcome
    """

    market: dict
    units: dict
    entrants: list[dict]
    settings: dict
    benchmarks: dict
    score: str
    ranks: list[int]
    order: list[int]
    estimates: dict[str, np.ndarray]
    seat_profits: np.ndarray
    stability: dict | None
    groups: GroupOutcomes
    versus: dict[str, np.ndarray]
    pairs: PairContrasts | None
    matches: list[dict]
    evolution: EvolutionOutcome

    @property
    def labels(self) -> list[str]:
        """The entrants' labels."""
        return [e["label"] for e in self.entrants]

    @property
    def n_seats(self) -> int:
        """Seats per match (the market's firms)."""
        return int(self.settings["tournament"]["seats"])

    @property
    def confidence(self) -> float:
        """Level of the intervals."""
        return float(self.settings["tournament"]["confidence"])

    @property
    def horizon(self) -> int:
        """Periods per replication (the most a collusive spell can last)."""
        return int(self.settings["run"]["periods"])

    def group_of(self, members) -> int:
        """The row of the group with these members.

        Parameters
        ----------
        members : sequence of int
            Entrant indices, in any order.

        Returns
        -------
        int
        """
        want = sorted(int(e) for e in members)
        return next(g for g, m in enumerate(self.groups.members) if m == want)


def _vector(est) -> list:
    return [est.value, est.se, est.low, est.high]


def _combine(ests: list, z: float, lo: float, hi: float) -> list:
    """The mean of the seatings' estimates, its standard error and normal interval intersected with [lo, hi]."""
    k = len(ests)
    v = sum(e[0] for e in ests) / k
    se = math.sqrt(sum(e[1] ** 2 for e in ests)) / k
    if not math.isfinite(se):
        return [v, math.nan, math.nan, math.nan]
    return [v, se, max(lo, v - z * se), min(hi, v + z * se)]


def _joint_gain(plan: TournamentPlan, rec) -> list:
    """The share of the collusive profit the match's firms keep together: their joint profit gain."""
    jn, jc = float(plan.nash.sum()), float(plan.collusive.sum())
    if not gain_defined(jn, jc):
        return [math.nan] * 4
    e = ratio_estimate(rec.profit_sum.sum(axis=1), rec.periods, plan.settings["confidence"])
    return _vector(e.affine(-jn / (jc - jn), 1.0 / (jc - jn)))


def _groups(res: TournamentResult) -> GroupOutcomes:
    plan = res.plan
    z = normal_quantile(plan.settings["confidence"])
    P = float(plan.run["periods"])
    nan4 = [math.nan] * 4
    kept, coll, fb, spell, lower, learning = [], [], [], [], [], []
    for idx in plan.group_seatings:
        recs = [res.matches[m] for m in idx]
        learning.append(any(r.learning for r in recs))
        kept.append(_combine([_joint_gain(plan, r) for r in recs], z, -math.inf, math.inf))
        if learning[-1]:
            coll.append(nan4)
            fb.append(nan4)
            spell.append(nan4)
            lower.append(False)
            continue
        coll.append(_combine([_vector(r.collusive_share) for r in recs], z, 0.0, 1.0))
        fb.append(_combine([_vector(r.first_breakdown) for r in recs], z, 1.0, P))
        spell.append(_combine([_vector(r.spell_length) for r in recs], z, 1.0, P))
        lower.append(any(r.first_breakdown.note.startswith("at least") for r in recs))
    return GroupOutcomes([list(g) for g in plan.groups], [[m + 1 for m in idx] for idx in plan.group_seatings],
                         learning, np.array(kept), np.array(coll), np.array(fb), np.array(spell), lower,
                         {m: res.group_payoffs[m][0].copy() for m in SCORES},
                         {m: res.group_payoffs[m][1].copy() for m in SCORES})


def _seat_profits(plan: TournamentPlan) -> np.ndarray:
    """Nash and collusive profit of the seats each entrant occupies, weighted as its score weighs them."""
    W = rival_weights(plan)
    out = np.zeros((len(plan.entrants), 2))
    for m in plan.matches:
        n_seat = len(plan.group_seatings[m.group])
        for s, e in enumerate(m.lineup):
            w = W[m.group, e] / (n_seat * m.lineup.count(e))
            out[e, 0] += w * plan.nash[s]
            out[e, 1] += w * plan.collusive[s]
    return out


def _evolution(evo: EvolutionResult) -> EvolutionOutcome:
    rp = evo.replicator
    idx = rp.thinned(REPLICATOR_POINTS)
    st = evo.stability
    return EvolutionOutcome(
        to_plain(evo.settings), idx.tolist(), rp.shares[idx].copy(), rp.mean_payoff[idx].copy(), rp.final.copy(),
        rp.last_change, evo.fixation.copy(), evo.simulated_share(), int(evo.runs), to_plain(evo.agreement()),
        np.asarray(evo.stationary, dtype=float).copy(), list(st["ess"]), list(st["neutral"]), list(st["ess_n"]),
        [list(x) for x in st["invaded_by"]], [list(x) for x in st["ess_n_failures"]], to_plain(st["pairs"]))


def _match(rec, plan: TournamentPlan) -> dict:
    out = match_dict(rec, plan)
    for name in ("first_breakdown", "spell_length"):
        est = getattr(rec, name)
        if est is not None:
            out[name] = est.to_dict()
    return to_plain(out)


def tournament_outcome(result: TournamentResult, evolution: EvolutionResult, market: dict | None = None,
                       units: dict | None = None) -> TournamentOutcome:
    """A played tournament and its evolutionary analysis as plain data.

    Parameters
    ----------
    result : TournamentResult
    evolution : EvolutionResult
        Of ``result.payoffs()``.
    market : dict, optional
        The market's settings (:meth:`sim.Market.to_dict`); default: model, demand and costs of the plan's market.
    units : dict, optional
        ``currency`` and ``period`` (default: neutral units).

    Returns
    -------
    TournamentOutcome
    """
    plan = result.plan
    ms = plan.market
    if market is None:
        market = {"model": ms.model, "demand": ms.demand.kind, "cost": np.asarray(ms.cost).tolist()}
    ents = [{"label": e.label, "rule": e.name, "description": rule_description(e),
             "parameters": {k: v for k, v in e.to_dict().items() if k not in ("label", "strategy")},
             "learns": e.learns} for e in plan.entrants]
    settings = {"run": dict(plan.run), "tournament": dict(plan.settings),
                "monitoring": {k: v for k, v in plan.monitoring.items() if k != "noise_code"}}
    bench = {"agreement": plan.settings["agreement"], "agreement_given": plan.settings["agreement_given"],
             "nash_profit": plan.nash, "collusive_profit": plan.collusive, "gain_defined": plan.gain_defined}
    pairs = None
    if result.pairwise is not None:
        pw = result.pairwise
        pairs = PairContrasts({m: pw[m]["difference"].copy() for m in SCORES},
                              {m: pw[m]["difference_se"].copy() for m in SCORES},
                              {m: pw[m]["beats"].astype(float) for m in SCORES})
    return TournamentOutcome(
        to_plain(market), {**DEFAULT_UNITS, **(units or {})}, to_plain(ents), to_plain(settings), to_plain(bench),
        result.score, [int(r) for r in result.ranks], [int(e) for e in result.order],
        {m: np.array([_vector(x) for x in result.scores[m]]) for m in SCORES}, _seat_profits(plan),
        to_plain(result.stability), _groups(result), {m: result.versus[m].copy() for m in SCORES}, pairs,
        [_match(r, plan) for r in result.matches], _evolution(evolution))


def tournament_analysis(spec: TournamentSpec, key=None, threads: int | None = None,
                        progress=None) -> TournamentOutcome:
    """Play a tournament question and analyse it.

    Parameters
    ----------
    spec : TournamentSpec
    key : tuple of int, optional
        The stream key of the cell (a sweep cell's ``(index,)``); default: the plan's.
    threads : int, optional
        Threads of the kernels (results do not depend on it).
    progress : bool, optional
        Progress bar over replications.

    Returns
    -------
    TournamentOutcome
    """
    plan = spec.plan
    if key is not None:
        plan = dataclasses.replace(plan, settings={**plan.settings, "key": [int(k) for k in key]})
    res = run_tournament(plan, threads, progress)
    evo = evolve_tournament(res, spec.evolution, threads)
    return tournament_outcome(res, evo, spec.market, spec.units)
