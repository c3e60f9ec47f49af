"""Strategy tournaments in oligopoly: every strategy against every other, scores, ranking and its stability.

What a tournament plays
-----------------------
* **Entrants** (:class:`Entrant`): a unique label and a strategy -- an automaton of :mod:`strategies`
  (grim trigger, finite punishment, tit for tat, ...) with its parameters, or a learning firm
  (:class:`strategies.qlearning.QLearner`) with its own.
* **Round robin**: the market has ``n`` seats (firms). Every *group* -- a multiset of ``n`` entrants,
  self-play included -- is played. In a symmetric market one seating per group is enough. Where firms
  differ (costs, capacities, demand parameters, multi-product firms) every distinct seating of the
  group is played (a *match* each) and the group's payoffs average over them with equal weights, so
  no entrant gains from the seat it happens to get. ``seatings = "all"`` forces every seating,
  ``"one"`` the sorted one only.
* **Replications**: each automaton match plays ``replications`` independent replications through
  the engine (:func:`sim.simulation.engine.run_game`, numba, parallel over replications). Match ``m`` (in the
  order of :attr:`TournamentPlan.matches`) draws from the stream family ``(*key, m)``, so its numbers
  are exactly those of ``simulate(market, lineup, monitoring, ..., seed=seed, key=(*key, m))``,
  whatever the number of threads.

How a learning entrant plays
----------------------------
A match with at least one learning entrant is a set of learning *sessions*
(:func:`sim.learning.session.learn`; ``sessions`` of them, by default ``replications``): the learners of the
match, seated with the match's automata, learn until their greedy strategies have been unchanged for
``convergence`` periods (or ``max_periods``, reported as not converged). A session is scored on its
*converged play*, as in Calvano, Calzolari, Denicolo and Pastorello (2020, AER): the learned
strategies played greedily from the session's final state reach a limit cycle, and

* a seat's *profit* is its mean profit per period over the limit cycle;
* its *discounted profit* is the value of that cycle over the tournament's horizon,
  ``sum_{t < periods} (delta c)^t pi_{t mod L}`` (``c`` the continuation probability with a random
  horizon, 1 otherwise), i.e. the match as if it started once learning is over (when the cycle is
  longer than the 64 points a session keeps, its mean profit is used in every period).

Automata that act at random (forgiving tit for tat, opportunists) may meet learners too: greedy play
after learning then has no exact cycle, and :func:`sim.learning.session.learn` estimates the limit outcome
from the session's own stream (a burn-in, then ``limit_periods`` periods of greedy play averaged). The
seat's profit is that estimate, its discounted profit the estimate in every period of the horizon,
and the match's ``stream`` says ``limit = "estimate"``.

Session ``j`` of match ``m`` uses ``learn(..., seed=seed, cell=m)`` when ``key`` is empty (its stream
is ``stream_states(seed, (m,), j, j + 1)``), and a seed derived from ``seed`` and ``key`` otherwise.
The learning kernel plays perfect monitoring without noise, so learning entrants need
``monitoring.signal = "perfect"`` and no shock or errors; automata meeting them collude on the
joint-profit outcome (``agreement = "joint"``, what :func:`sim.learning.session.learn`
resolves their levels against), and the market must have 2 to 4 single-product firms.

Scores
------
For every match and seat, the engine's estimators (:mod:`sim.simulation.results`) give the mean profit per
period (ratio of totals), the mean discounted profit and the profit gain
``(profit - Nash) / (collusive - Nash)`` of the seat's firm. The collusive profit is that of the
agreement (``collusion.agreement``); without one, the tournament takes the joint-profit maximum where
firms are symmetric and the static-Nash quantities scaled down in proportion where they differ
(:func:`default_agreement`: the joint maximum would shut costlier firms down below their Nash profit).
The profit gain of a firm whose collusive profit is not above its Nash profit would fall as its profit
rises, so it is undefined (nan) for that firm, and a tournament ranked by profit gain refuses such an
agreement before anything is played. A group's payoff to a member is the
average over its seatings and over the member's seats. An entrant's *score* is its expected payoff
when its ``n - 1`` rivals are drawn independently and uniformly from the entrants: the groups are
weighted by the multinomial probability of the rivals, ``(n-1)! / prod c_e! / E^(n-1)`` (with two seats:
the plain average over opponents, self-play included). This is the payoff against an equal-share
population of :mod:`sim.tournament.evolution`. Standard errors combine those of the matches (independent
replications); intervals are normal at the ``confidence`` level.

Ranking and its stability: entrants are ranked by ``score`` (``"profit_gain"`` by default; ties
share the better rank). The bootstrap resamples the replications of every match with replacement,
``bootstrap`` times, recomputes every score and ranking, and reports for each entrant the share of
resamples in which it keeps its rank, its rank interval, the share in which it comes first, and
``P(i ranked above j)``; also the share in which the whole ranking holds. Resample ``b`` draws from
stream ``b`` of the family ``(*key, BOOTSTRAP_KEY)``, so it is deterministic given the seed and
independent of threads.

With two seats, the *pairwise* matrix holds ``i``'s payoff against ``j``; ``i`` *beats* ``j`` when its payoff
in their match exceeds ``j``'s by more than ``z`` standard errors of the paired difference.

Layers: :func:`tournament` (validated public entry) = :func:`prepare_tournament` (validate and
compile every match, nothing played) + :func:`run_tournament` (the driver: seeds, buffers, progress,
scoring) -> the engine's kernel, the learning kernel, and :func:`bootstrap_kernel` (numba, with the
plain-Python twin :func:`_bootstrap_reference`).
"""

from __future__ import annotations

import math
import sys
import time
from dataclasses import dataclass, field
from itertools import permutations

import numpy as np
from numba import njit, prange
from tqdm import tqdm

import sim.simulation.kernel as K
import strategies.step as SS
from sim.core.errors import InputError
from sim.core.parallel import NumbaThreads, check_threads
from sim.core.params import Integer, Options, Real, optional
from sim.core.rng import ReferenceStream, next_u64, stream_states
from sim.core.stats import Estimate, mean_estimate, normal_quantile, ratio_estimate
from sim.core.tables import refuse_unknown
from sim.core.text import CAUTION, fmt_num
from sim.learning.lineup import compile_lineup as compile_learners
from sim.learning.results import CYCLE_STORE, LIMIT_PERIODS
from sim.learning.session import learn
from sim.learning.tables import LEARNER_PARAMS, learner_from_entry
from sim.models.market import MarketSpec, market_from_dict
from sim.models.monitoring import monitoring_from_dict
from sim.models.stagecore import evaluate_py, market_arrays, market_owner
from sim.simulation.engine import (
    as_monitoring,
    check_run,
    compile_game,
    run_game,
    stage_levels,
)
from sim.tournament.evolution import (
    EVOLUTION_CONSTRAINTS,
    FITNESS_MAPS,
    PayoffTable,
    _check_shares,
    _counts,
    evolve,
    multisets,
)
from strategies import Automaton, strategy_from_dict
from strategies.qlearning import QLearner

__all__ = [
    "BOOTSTRAP_KEY",
    "Entrant",
    "MatchRecord",
    "TournamentPlan",
    "TournamentResult",
    "entrants_from_tables",
    "prepare_tournament",
    "run_tournament",
    "tournament",
    "tournament_from_dict",
]

#: stream family (appended to the caller's key) of the bootstrap resamples
BOOTSTRAP_KEY = 2**32
#: the largest number of matches (seatings) a tournament may play
MAX_MATCHES = 100_000
SCORES = ("profit_gain", "discounted_profit", "profit")
SCORE_NAMES = {"profit_gain": "profit gain", "discounted_profit": "discounted profit", "profit": "mean profit"}
SEATINGS = ("auto", "all", "one")

TOURNAMENT_CONSTRAINTS = {
    "seatings": Options(*SEATINGS),
    "score": Options(*SCORES),
    "confidence": Real(0, 1, closed="neither"),
    "bootstrap": Integer(0, 1_000_000),
    "sessions": optional(Integer(1, 10_000_000)),
    "convergence": Integer(1, 10**12),
    "max_periods": Integer(1, 10**15),
    "limit_periods": Integer(1, 100_000_000),
}


# --------------------------------------------------------------------------------------------------
# Entrants
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Entrant:
    """A labelled strategy: an automaton (:class:`strategies.Automaton`) or a learner
    (:class:`strategies.qlearning.QLearner`)."""

    label: str
    strategy: object

    @property
    def learns(self) -> bool:

        return isinstance(self.strategy, QLearner)

    @property
    def name(self) -> str:
        return "qlearning" if self.learns else getattr(self.strategy, "name", type(self.strategy).__name__)

    def to_dict(self) -> dict:
        if self.learns:
            params = {k: (v.tolist() if isinstance(v, np.ndarray) else v)
                      for k, v in self.strategy.get_params().items() if v is not None}
            return {"label": self.label, "strategy": "qlearning", **params}
        return {"label": self.label, **self.strategy.to_dict()}


def entrants_from_tables(tables, learning: dict | None = None, prefix: str = "entrants") -> list[Entrant]:
    """Entrants from an experiment file's ``[[entrants]]`` entries (``label``, ``strategy`` and its
    parameters). ``strategy = "qlearning"`` entries take the learner parameters of ``learning`` (the
    ``[learning]`` table), overridden by their own (:func:`sim.learning.tables.learner_from_entry`, the reader
    of learning line-ups); any other name is looked up in the strategy registry."""

    if not isinstance(tables, list) or isinstance(tables, str):
        raise InputError(prefix, "must be an array of tables ([[entrants]] entries)")
    base = {k: v for k, v in (learning or {}).items() if k in LEARNER_PARAMS}
    out = []
    for k, t in enumerate(tables):
        key = f"{prefix}[{k + 1}]"
        if not isinstance(t, dict):
            raise InputError(key, f"must be a table with 'label' and 'strategy', got {t!r}")
        if "label" not in t:
            raise InputError(f"{key}.label", "missing (a unique name for the entrant)")
        if "seats" in t:
            raise InputError(f"{key}.seats", "not used in tournaments: every entrant meets every group of entrants")
        body = {kk: v for kk, v in t.items() if kk != "label"}
        if body.get("strategy") == QLearner.name:
            strat = learner_from_entry(body, base, key, skip=("strategy",), validate=False)
        else:
            strat = strategy_from_dict(body, key)
        out.append(Entrant(t["label"], strat))
    return out


def _as_entrants(entrants) -> list[Entrant]:
    if isinstance(entrants, dict):
        entrants = [Entrant(k, v) for k, v in entrants.items()]
    if not isinstance(entrants, list | tuple):
        raise InputError("entrants", f"must be a list of entrants, got {entrants!r}")
    if entrants and all(isinstance(e, dict) for e in entrants):
        return entrants_from_tables(list(entrants))
    out = []
    for k, e in enumerate(entrants):
        if isinstance(e, Entrant):
            out.append(e)
        elif isinstance(e, tuple) and len(e) == 2:
            out.append(Entrant(*e))
        else:
            raise InputError(f"entrants[{k + 1}]", f"must be an Entrant, a (label, strategy) pair or a table, "
                                                   f"got {e!r}")
    return out


def _check_entrants(entrants: list[Entrant]) -> None:

    if len(entrants) < 2:
        raise InputError("entrants", f"a tournament needs at least 2 entrants, got {len(entrants)}")
    seen: dict = {}
    for k, e in enumerate(entrants):
        key = f"entrants[{k + 1}]"
        if not isinstance(e.label, str) or not e.label.strip():
            raise InputError(f"{key}.label", f"must be a non-empty string, got {e.label!r}")
        if e.label in seen:
            raise InputError(f"{key}.label", f"duplicate label {e.label!r} (also entrants[{seen[e.label] + 1}]); "
                                             "every entrant needs its own label")
        seen[e.label] = k
        if isinstance(e.strategy, QLearner):
            e.strategy.spec(prefix=key)
        elif isinstance(e.strategy, Automaton):
            e.strategy._check_params(key)
        else:
            raise InputError(f"{key}.strategy", f"must be an automaton strategy or a QLearner, got {e.strategy!r}")


# --------------------------------------------------------------------------------------------------
# The plan: every match validated and compiled, nothing played
# --------------------------------------------------------------------------------------------------


@dataclass(eq=False)
class Match:
    """One seating of one group.

    Attributes
    ----------
    index : int
        Position in the plan (its stream family is ``(*key, index)``).
    lineup : tuple of int
        Entrant index of each seat.
    group : int
        Index of the group (multiset) in :attr:`TournamentPlan.groups`.
    learning : bool
        Played as learning sessions (it seats a learner).
    game : sim.simulation.engine.Game or sim.learning.session.Lineup
        The compiled match: the engine's game (automata) or the learning line-up.
    """

    index: int
    lineup: tuple
    group: int
    learning: bool
    game: object = None


@dataclass(eq=False)
class TournamentPlan:
    """A validated tournament: the market, the entrants, every match compiled, the settings.

    Attributes
    ----------
    market : MarketSpec
    entrants : list of Entrant
    monitoring : dict
        Validated monitoring settings.
    stage, levels : the solved stage game (see :func:`sim.simulation.engine.stage_levels`)
    groups : list of tuple
        Every multiset of ``seats`` entrant indices (sorted), in lexicographic order.
    matches : list of Match
    run : dict
        periods, replications, delta, seed, horizon, continuation.
    settings : dict
        seats, seatings (as given and as played), score, confidence, bootstrap, sessions,
        convergence, max_periods, key.
    nash, collusive : ndarray of shape (n_firms,)
        Per-period profit of each firm at the static Nash and collusive profiles (the profit-gain
        benchmarks, as in :func:`sim.simulation.results.summarize`).
    """

    market: object
    entrants: list
    monitoring: dict
    stage: object
    levels: object
    groups: list
    matches: list
    run: dict
    settings: dict
    nash: np.ndarray
    collusive: np.ndarray
    group_seatings: list = field(default_factory=list)

    @property
    def seats(self) -> int:
        return int(self.settings["seats"])

    @property
    def labels(self) -> list[str]:
        return [e.label for e in self.entrants]

    @property
    def mon_tremble(self) -> bool:
        """Whether implementation errors substitute the deviation action."""
        return float(self.monitoring["implementation_error"]) > 0

    @property
    def gain_defined(self) -> np.ndarray:
        """Per firm: its collusive profit exceeds its Nash profit, so its profit gain is defined (see
        :func:`gain_defined`); bool ndarray of shape (n_firms,)."""
        return gain_defined(self.nash, self.collusive)

    @property
    def has_learners(self) -> bool:
        return any(e.learns for e in self.entrants)

    def replications_of(self, match: Match) -> int:
        return int(self.settings["sessions"]) if match.learning else int(self.run["replications"])

    def describe(self, match: Match) -> str:
        return " vs ".join(self.entrants[e].label for e in match.lineup)


def _seatings(group: tuple, every: bool) -> list[tuple]:
    if not every:
        return [tuple(group)]
    return sorted(set(permutations(group)))


def _rekey(exc: InputError, seat_to_entrant: dict, prefix: str = "entrants") -> InputError:
    """``entrants[s]...`` (seat s of a compiled line-up) -> ``entrants[k]...`` (the entrant's own index)."""
    key = exc.key
    if key.startswith(prefix + "["):
        close = key.index("]")
        seat = int(key[len(prefix) + 1:close])
        k = seat_to_entrant.get(seat)
        if k is not None:
            return InputError(f"{prefix}[{k}]{key[close + 1:]}", exc.message)
    return exc


def prepare_tournament(market, entrants, monitoring=None, *, seats: int | None = None, periods: int = 1000,
                       replications: int = 1000, delta: float = 0.95, seed: int = 0, horizon: str = "fixed",
                       continuation: float = 0.99, agreement: str | None = None, actions=None,
                       seatings: str = "auto", score: str = "profit_gain", confidence: float = 0.95,
                       bootstrap: int = 1000, sessions: int | None = None, convergence: int = 100_000,
                       max_periods: int = 1_000_000_000, limit_periods: int = LIMIT_PERIODS,
                       key=()) -> TournamentPlan:
    """Validate everything and compile every match; nothing is played (see :func:`tournament`)."""

    ms = market if isinstance(market, MarketSpec) else market.spec()
    ents = _as_entrants(entrants)
    _check_entrants(ents)
    mon_obj = as_monitoring(monitoring)
    mon = mon_obj.validated()
    n = ms.n_firms
    if seats is None:
        seats = n
    seats = Integer(2, 64).check("tournament.seats", seats)
    if seats != n:
        raise InputError("tournament.seats", f"must equal the market's number of firms ({n}), got {seats}")
    run = check_run(periods, replications, delta, seed, horizon, continuation, 0, ms.n_products)
    run.pop("paths")
    s = {name: TOURNAMENT_CONSTRAINTS[name].check(f"tournament.{name}", v) for name, v in (
        ("seatings", seatings), ("score", score), ("confidence", confidence), ("bootstrap", bootstrap),
        ("sessions", sessions), ("convergence", convergence), ("max_periods", max_periods),
        ("limit_periods", limit_periods))}
    key = tuple(Integer(0, None).check("key", k) for k in key)
    s["sessions"] = run["replications"] if s["sessions"] is None else s["sessions"]
    every = s["seatings"] == "all" or (s["seatings"] == "auto" and not ms.symmetric)
    E = len(ents)

    n_groups = math.comb(E + n - 1, n)
    n_matches = E**n if every else n_groups
    if n_matches > MAX_MATCHES:
        what = "seatings of groups" if every else "groups"
        raise InputError("tournament.seats", f"{E} entrants over {n} seats make {n_matches:,} matches ({what}), "
                                             f"more than {MAX_MATCHES:,}; use fewer entrants or seats"
                                             + (" (or seatings = 'one')" if every else ""))
    learners = [k for k, e in enumerate(ents) if e.learns]
    if learners:
        lab = ents[learners[0]].label
        if not 2 <= n <= 4:
            raise InputError("tournament.seats", f"learning entrants (such as {lab!r}) need 2 to 4 seats, got {n}")
        if ms.multi_product:
            raise InputError("market.owner", f"learning entrants (such as {lab!r}) set one action per firm: "
                                             "multi-product firms are not supported")
        if (agreement is not None and agreement != "joint") or actions is not None:
            raise InputError("collusion.agreement", f"learning entrants (such as {lab!r}) play through "
                                                    "sim.learning.learn, whose automata collude on the joint-profit "
                                                    f"outcome; use agreement = 'joint' when a learner enters, got "
                                                    f"{'given actions' if actions is not None else repr(agreement)}")
        for k, what in (("signal", "perfect"), ("sigma", 0.0), ("perception_error", 0.0),
                        ("implementation_error", 0.0)):
            if mon[k] != what:
                raise InputError(f"monitoring.{k}", f"learning entrants (such as {lab!r}) play without noise and "
                                                    f"see every action; must be {what!r} when one enters, got "
                                                    f"{mon[k]!r}")

    chosen = agreement if agreement is not None else default_agreement(ms, bool(learners), actions)
    stage, levels = stage_levels(ms, chosen, actions)
    pi_n, pi_c = _benchmark_profits(ms, stage)
    _check_gains(pi_n, pi_c, stage.agreement, agreement is None, s["score"], bool(learners))
    # each automaton entrant alone, in every seat: its parameters against this market and monitoring
    for k, e in enumerate(ents):
        if e.learns:
            continue
        try:
            alone = [e.strategy.clone() for _ in range(n)]
            compile_game(stage, levels, alone, mon_obj, prefix="entrants", strict=False)
        except InputError as exc:
            raise _rekey(exc, {s_ + 1: k + 1 for s_ in range(n)}) from None

    groups = multisets(E, n)
    matches: list[Match] = []
    group_seatings: list = []
    for g, grp in enumerate(groups):
        idx = []
        for lineup in _seatings(grp, every):
            learning = any(ents[e].learns for e in lineup)
            matches.append(Match(len(matches), tuple(lineup), g, learning))
            idx.append(len(matches) - 1)
        group_seatings.append(idx)
    for m in matches:
        seat_map = {i + 1: e + 1 for i, e in enumerate(m.lineup)}
        lineup = [ents[e].strategy.clone() for e in m.lineup]
        try:
            if m.learning:
                # automata that act at random are played; their limit outcomes are estimated (see the notes)
                m.game = compile_learners(ms, lineup, workers=1, seat_prefix="entrants", random_automata="estimate")
            else:
                m.game = compile_game(stage, levels, lineup, mon_obj, prefix="entrants", strict=False)
        except InputError as exc:
            exc2 = _rekey(exc, seat_map)
            raise InputError(exc2.key, f"{exc2.message} (in the match "
                                       f"{' vs '.join(ents[e].label for e in m.lineup)})") from None

    settings = {**s, "seats": n, "seatings_played": "all" if every else "one", "key": list(key),
                "agreement": stage.agreement, "agreement_given": agreement is not None, "groups": len(groups),
                "matches": len(matches)}
    return TournamentPlan(ms, ents, mon, stage, levels, groups, matches, run, settings, pi_n, pi_c, group_seatings)


def default_agreement(market, learners: bool = False, actions=None) -> str:
    """The collusive outcome a tournament refers to when ``collusion.agreement`` is not given.

    * ``"given"`` when actions are given;
    * ``"joint"`` (the joint-profit maximum) when the firms are symmetric -- it is then the symmetric
      outcome every firm prefers to the static Nash equilibrium -- and when a learning entrant enters
      (:func:`sim.learning.session.learn` resolves the automata's levels against it), and in homogeneous
      Bertrand markets (where ``"proportional"`` is not defined);
    * ``"proportional"`` otherwise: where firms differ, the joint-profit maximum typically shuts the
      costlier firms down (under Cournot with constant marginal costs the cheapest firm produces
      everything), leaving them below their Nash profit, which no tacit agreement can ask of a firm
      without side payments. Scaling the static-Nash quantities down in proportion (Schmalensee, 1987,
      "Competitive advantage and collusive optima", Int. J. Ind. Organ. 5) keeps every firm's share and,
      in the usual markets, raises every firm's profit above Nash. Whatever the agreement, a tournament
      ranked by profit gain checks that every firm gains (see :func:`prepare_tournament`).
    """

    ms = market if isinstance(market, MarketSpec) else market.spec()
    if actions is not None:
        return "given"
    if ms.symmetric or learners or ms.homogeneous_bertrand:
        return "joint"
    return "proportional"


def _benchmark_profits(ms, stage) -> tuple[np.ndarray, np.ndarray]:
    """Per-firm profit per period at the static Nash and the collusive profiles (as the kernel evaluates them)."""

    arrays = market_arrays(ms)
    _, _, pi_n, _, _ = evaluate_py(arrays, np.asarray(stage.nash.actions, dtype=float))
    _, _, pi_c, _, _ = evaluate_py(arrays, np.asarray(stage.collusive.actions, dtype=float))
    return np.asarray(pi_n, dtype=float), np.asarray(pi_c, dtype=float)


def gain_defined(nash, collusive) -> np.ndarray:
    """Whether each firm's profit gain ``(profit - Nash) / (collusive - Nash)`` is defined: its collusive
    profit exceeds its Nash profit (beyond rounding). Where it does not, the ratio would fall as the firm's
    profit rises (or divide by zero), so the gain is reported as undefined."""
    nash = np.asarray(nash, dtype=float)
    collusive = np.asarray(collusive, dtype=float)
    tol = 1e-12 * np.maximum(1.0, np.maximum(np.abs(nash), np.abs(collusive)))
    return (collusive - nash) > tol


def _check_gains(pi_n, pi_c, agreement: str, defaulted: bool, score: str, learners: bool) -> None:
    """Refuse, for the profit-gain score, an agreement under which some firm earns no more than at Nash."""

    ok = gain_defined(pi_n, pi_c)
    if score != "profit_gain" or ok.all():
        return
    i = int(np.flatnonzero(~ok)[0])
    how = f"the default agreement {agreement!r}" if defaulted else f"agreement = {agreement!r}"
    if learners:
        fix = ("learning entrants need agreement = 'joint': rank by tournament.score = 'discounted_profit' or "
               "'profit' instead")
    else:
        fix = ("choose an agreement under which every firm gains (for example 'proportional', or given actions) "
               "or rank by tournament.score = 'discounted_profit' or 'profit'")
    raise InputError("collusion.agreement",
                     f"under {how} firm {i + 1} earns {fmt_num(float(pi_c[i]))} per period, no more than its static-"
                     f"Nash profit {fmt_num(float(pi_n[i]))}, so its profit gain (profit - Nash) / (collusive - Nash) "
                     f"would score a lower profit higher; {fix}")


# --------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------


@dataclass(eq=False)
class MatchRecord:
    """What one match produced.

    Attributes
    ----------
    index : int
    lineup : tuple of int
        Entrant index per seat.
    group : int
    learning : bool
    profit_sum, discounted : ndarray of shape (R, n_seats)
        Per replication (session): the sum of each seat's per-period profits (a learning session: its
        mean profit over the limit cycle) and its discounted profit.
    periods : int64 ndarray of shape (R,)
        Periods played (1 for a learning session, whose ``profit_sum`` is already a per-period mean).
    collusive : int64 ndarray of shape (R,) or None
        Periods in which every firm colluded (automaton matches).
    profit, discounted_profit, profit_gain : list of Estimate, one per seat
    collusive_share : Estimate or None
    converged : float or None
        Share of converged sessions (learning matches).
    stream : dict
        How to reproduce the match: ``{"seed", "key"}`` for :func:`sim.simulation.engine.simulate`, ``{"seed", "cell"}``
        for :func:`sim.learning.session.learn`.
    """

    index: int
    lineup: tuple
    group: int
    learning: bool
    profit_sum: np.ndarray
    discounted: np.ndarray
    periods: np.ndarray
    collusive: np.ndarray | None
    profit: list
    discounted_profit: list
    profit_gain: list
    collusive_share: object
    converged: float | None
    stream: dict

    @property
    def n_reps(self) -> int:
        return int(self.periods.shape[0])

    def metric(self, name: str) -> list:
        return {"profit": self.profit, "discounted_profit": self.discounted_profit,
                "profit_gain": self.profit_gain}[name]


@dataclass(eq=False)
class TournamentResult:
    """Everything a tournament produced.

    Attributes
    ----------
    plan : TournamentPlan
    matches : list of MatchRecord
    group_payoffs : dict metric -> (value, se), each an ndarray of shape (G, E)
        Payoff of a member of each entrant in each group (nan where absent).
    scores : dict metric -> list of Estimate (one per entrant)
    ranks : int ndarray of shape (E,)
        Rank of each entrant by ``settings["score"]`` (1 = best; ties share the better rank).
    order : list of int
        Entrant indices from first to last.
    stability : dict or None
        Bootstrap rank stability (see the module notes); None without bootstrap.
    pairwise : dict or None
        Two seats only: per metric ``value``/``se`` matrices ``[i, j]`` (i's payoff against j), the paired
        ``difference``/``difference_se`` ``P_i - P_j`` and ``beats`` (1: i beats j, -1: j beats i, 0: neither).
    versus : dict
        Per metric, ``[i, j]``: i's payoff when every rival is j (the pairwise matrix with two seats).
    timings : dict
        Seconds spent validating, playing and scoring.
    """

    plan: TournamentPlan
    matches: list
    group_payoffs: dict
    scores: dict
    ranks: np.ndarray
    order: list
    stability: dict | None
    pairwise: dict | None
    versus: dict
    timings: dict

    @property
    def labels(self) -> list[str]:
        return self.plan.labels

    @property
    def score(self) -> str:
        return self.plan.settings["score"]

    def payoffs(self, metric: str | None = None):
        """The tournament's payoffs as a :class:`sim.tournament.evolution.PayoffTable` (default: the ranking score)."""

        metric = metric or self.score
        if metric not in SCORES:
            raise InputError("metric", f"must be one of {', '.join(SCORES)}, got {metric!r}")
        E = len(self.labels)
        groups = np.array([_counts(g, E) for g in self.plan.groups], dtype=np.int64).reshape(-1, E)
        v, s = self.group_payoffs[metric]
        return PayoffTable(tuple(self.labels), self.plan.seats, groups, v.copy(), s.copy(), metric)

    def settings(self) -> dict:
        p = self.plan
        return {"market": _market_dict(p.market), "monitoring": {k: v for k, v in p.monitoring.items()
                                                                 if k != "noise_code"},
                "run": dict(p.run), "tournament": dict(p.settings),
                "entrants": [e.to_dict() for e in p.entrants]}

    def to_dict(self, replications: bool = False) -> dict:
        """Plain data (JSON-ready through :func:`sim.core.jsonutil.dumps`)."""

        labels = self.labels
        p = self.plan
        out = {
            "settings": self.settings(),
            "benchmarks": {"agreement": p.settings["agreement"], "agreement_given": p.settings["agreement_given"],
                           "nash_profit": p.nash.tolist(), "collusive_profit": p.collusive.tolist(),
                           "profit_gain_defined": p.gain_defined.tolist()},
            "score": self.score,
            "ranking": [{"rank": int(self.ranks[e]), "label": labels[e], "strategy": p.entrants[e].name,
                         **{m: self.scores[m][e].to_dict() for m in SCORES},
                         **({"stability": {k: v[e] for k, v in self.stability["per_entrant"].items()}}
                            if self.stability else {})}
                        for e in self.order],
            "rank_stability": ({k: v for k, v in self.stability.items() if k != "per_entrant"}
                               if self.stability else None),
            "groups": [{"group": gi + 1, "members": [labels[e] for e in g],
                        "payoffs": {labels[e]: {m: {"value": float(self.group_payoffs[m][0][gi, e]),
                                                    "se": float(self.group_payoffs[m][1][gi, e])}
                                                for m in SCORES}
                                    for e in sorted(set(g))}}
                       for gi, g in enumerate(p.groups)],
            "matches": [_match_dict(r, p, replications) for r in self.matches],
            "versus": {m: self.versus[m].tolist() for m in SCORES},
            "timings": self.timings,
            "caution": CAUTION,
        }
        if self.pairwise is not None:
            out["pairwise"] = {m: {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in d.items()}
                               for m, d in self.pairwise.items()}
        return out


def _market_dict(ms) -> dict:
    return {"model": ms.model, "demand": ms.demand.kind, "n_firms": ms.n_firms, "n_products": ms.n_products,
            "cost": np.asarray(ms.cost).tolist(), "symmetric": bool(ms.symmetric)}


def _match_dict(r: MatchRecord, plan: TournamentPlan, replications: bool) -> dict:
    # matches and groups are numbered from 1, like seats, firms and entrants (the stream key keeps the
    # match's position from 0, as sim.simulation.engine.simulate takes it)
    out = {"match": r.index + 1, "seats": [plan.entrants[e].label for e in r.lineup], "group": r.group + 1,
           "kind": "learning sessions" if r.learning else "automata", "replications": r.n_reps,
           "stream": r.stream,
           "profit": [e.to_dict() for e in r.profit],
           "discounted_profit": [e.to_dict() for e in r.discounted_profit],
           "profit_gain": [e.to_dict() for e in r.profit_gain]}
    if r.collusive_share is not None:
        out["collusive_share"] = r.collusive_share.to_dict()
    if r.converged is not None:
        out["converged"] = r.converged
    if replications:
        out["per_replication"] = {"profit_sum": r.profit_sum.tolist(), "discounted": r.discounted.tolist(),
                                  "periods": r.periods.tolist()}
    return out


# --------------------------------------------------------------------------------------------------
# The driver
# --------------------------------------------------------------------------------------------------


def _progress(total: int, enabled):
    if enabled is None:
        enabled = sys.stderr.isatty()
    if not enabled:
        return None

    return tqdm(total=total, desc="tournament", unit="rep", leave=False, file=sys.stderr)


def _learning_seed(seed: int, key: tuple) -> int:
    if not key:
        return int(seed)
    w = np.random.SeedSequence(int(seed), spawn_key=tuple(key)).generate_state(1, np.uint64)[0]
    return int(w >> np.uint64(1))


def _cycle_discounted(res, delta_eff: float, periods: int) -> np.ndarray:
    """Discounted value over ``periods`` of each session's limit cycle, shape (sessions, n)."""

    lu = res.lineup
    n = lu.n_seats
    S = res.n_sessions
    w = delta_eff ** np.arange(periods, dtype=float)
    out = np.empty((S, n))
    for j in range(S):
        lam = int(res.cycle_length[j])
        cyc = res.cycles[j]
        if 1 <= lam <= CYCLE_STORE and cyc.shape[0] == lam:
            prof = (cyc * lu.place[None, :]).sum(axis=1)
            pi = lu.payoff[prof]  # (lam, n)
            out[j] = w @ pi[np.arange(periods) % lam]
        else:
            out[j] = w.sum() * res.limit_profits[j]
    return out


def _play_learning(plan: TournamentPlan, m: Match, threads) -> tuple:

    lineup = [plan.entrants[e].strategy.clone() for e in m.lineup]
    key = tuple(plan.settings["key"])
    seed = _learning_seed(plan.run["seed"], key)
    res = learn(plan.market, lineup, sessions=plan.settings["sessions"], seed=seed,
                convergence=plan.settings["convergence"], max_periods=plan.settings["max_periods"],
                limit_periods=plan.settings["limit_periods"],
                response_periods=0, workers=threads, progress=False, cell=m.index)
    run = plan.run
    d_eff = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    disc = _cycle_discounted(res, d_eff, run["periods"])
    ps = np.ascontiguousarray(res.limit_profits, dtype=float)
    per = np.ones(res.n_sessions, dtype=np.int64)
    stream = {"seed": seed, "cell": m.index, "function": "sim.learning.session.learn"}
    if not res.lineup.limit_exact:
        # automata that act at random: the limit outcome is learn's seeded estimate
        stream.update(limit="estimate", limit_periods=plan.settings["limit_periods"])
    return ps, disc, per, None, float(res.converged.mean()), stream


def _estimates(plan: TournamentPlan, ps, disc, per, coll, z_conf: float):
    """The engine's estimators, seat by seat (the same calls as :func:`sim.simulation.results.summarize`)."""

    n = ps.shape[1]
    ok = plan.gain_defined
    profit, dprof, gain = [], [], []
    for s in range(n):
        e = ratio_estimate(ps[:, s], per, z_conf)
        profit.append(e)
        dprof.append(mean_estimate(disc[:, s], z_conf))
        if ok[s]:
            gap = float(plan.collusive[s] - plan.nash[s])
            gain.append(e.affine(-float(plan.nash[s]) / gap, 1.0 / gap))
        else:

            gain.append(Estimate(math.nan, math.nan, math.nan, math.nan, 0, "ratio", "undefined"))
    cs = ratio_estimate(coll, per, z_conf) if coll is not None else None
    return profit, dprof, gain, cs


def run_tournament(plan: TournamentPlan, threads: int | None = None, progress=None) -> TournamentResult:
    """Driver: play every match of a plan (seeds, buffers, progress bar), then score and rank."""

    threads = check_threads(threads)
    run = plan.run
    conf = plan.settings["confidence"]
    total = sum(plan.replications_of(m) for m in plan.matches)
    bar = _progress(total, progress)
    records = []
    t0 = time.perf_counter()
    key = tuple(plan.settings["key"])
    try:
        for m in plan.matches:
            if m.learning:
                ps, disc, per, coll, conv, stream = _play_learning(plan, m, threads)
            else:
                mk = (*key, m.index)
                raw = run_game(m.game, run["periods"], run["replications"], run["delta"], run["seed"], mk,
                               run["horizon"], run["continuation"], 0, threads, progress=False)
                ps, disc = raw.profit_sum, raw.disc
                per = raw.ints[:, K.R_PERIODS].copy()
                coll = raw.ints[:, K.R_COLLUSIVE].copy()
                conv = None
                stream = {"seed": run["seed"], "key": list(mk), "function": "sim.simulation.engine.simulate"}
            profit, dprof, gain, cs = _estimates(plan, ps, disc, per, coll, conf)
            records.append(MatchRecord(m.index, m.lineup, m.group, m.learning, ps, disc, per, coll, profit, dprof,
                                       gain, cs, conv, stream))
            if bar is not None:
                bar.update(plan.replications_of(m))
    finally:
        if bar is not None:
            bar.close()
    t_play = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = _score(plan, records, threads)
    res.timings.update({"play_seconds": t_play, "scoring_seconds": time.perf_counter() - t0})
    return res


# --------------------------------------------------------------------------------------------------
# Scoring
# --------------------------------------------------------------------------------------------------


def _rival_weights(plan: TournamentPlan) -> np.ndarray:
    """``W[g, e]``: probability that ``n - 1`` rivals drawn uniformly from the entrants form group ``g``
    minus one ``e`` (0 where ``e`` is not in ``g``)."""

    E = len(plan.entrants)
    n = plan.seats
    W = np.zeros((len(plan.groups), E))
    for g, grp in enumerate(plan.groups):
        c = _counts(grp, E)
        for e in range(E):
            if c[e] == 0:
                continue
            r = list(c)
            r[e] -= 1
            W[g, e] = math.factorial(n - 1) / math.prod(math.factorial(x) for x in r) / E ** (n - 1)
    return W


def _member_series(plan: TournamentPlan, rec: MatchRecord, e: int, metric: str):
    """Per-replication numerator and denominator of entrant ``e``'s payoff in a match (its seats averaged):
    the standard error of the match payoff comes from these."""
    seats = [s for s, x in enumerate(rec.lineup) if x == e]
    per = rec.periods.astype(float)
    if metric == "discounted_profit":
        return rec.discounted[:, seats].mean(axis=1), None
    if metric == "profit":
        return rec.profit_sum[:, seats].mean(axis=1), per
    gaps = np.where(plan.gain_defined[seats], plan.collusive[seats] - plan.nash[seats], np.nan)
    u = ((rec.profit_sum[:, seats] - plan.nash[seats][None, :] * per[:, None]) / gaps[None, :]).mean(axis=1)
    return u, per


def _series_se(x, y) -> float:

    return float(mean_estimate(x).se if y is None else ratio_estimate(x, y).se)


def _score(plan: TournamentPlan, records: list, threads) -> TournamentResult:

    E = len(plan.entrants)
    G = len(plan.groups)
    n = plan.seats
    conf = plan.settings["confidence"]
    z = normal_quantile(conf)
    gp = {}
    for metric in SCORES:
        val = np.full((G, E), np.nan)
        se = np.full((G, E), np.nan)
        for g, idx in enumerate(plan.group_seatings):
            members = sorted(set(plan.groups[g]))
            k = len(idx)
            for e in members:
                vs, ss = [], []
                for mi in idx:
                    rec = records[mi]
                    seats = [s for s, x in enumerate(rec.lineup) if x == e]
                    est = rec.metric(metric)
                    vs.append(sum(est[s].value for s in seats) / len(seats))
                    if len(seats) == 1:
                        ss.append(est[seats[0]].se)
                    else:
                        ss.append(_series_se(*_member_series(plan, rec, e, metric)))
                val[g, e] = sum(vs) / k
                se[g, e] = math.sqrt(sum(x * x for x in ss)) / k
        gp[metric] = (val, se)
    W = _rival_weights(plan)
    scores = {}
    for metric in SCORES:
        val, se = gp[metric]
        lst = []
        for e in range(E):
            w = W[:, e]
            on = w > 0
            v = float(np.sum(w[on] * val[on, e]))
            s = float(math.sqrt(np.sum((w[on] * se[on, e]) ** 2)))
            lo, hi = (v - z * s, v + z * s) if math.isfinite(s) else (math.nan, math.nan)
            lst.append(Estimate(v, s, lo, hi, int(on.sum()), "weighted mean of match payoffs"))
        scores[metric] = lst
    main = np.array([x.value for x in scores[plan.settings["score"]]])
    ranks = _ranks(main[None, :])[0]
    order = sorted(range(E), key=lambda e: (ranks[e], e))
    stability = None
    if plan.settings["bootstrap"] > 0:
        stability = _rank_stability(plan, records, ranks, threads)
    where = {g: k for k, g in enumerate(plan.groups)}
    versus = {}
    for metric in SCORES:
        val, _ = gp[metric]
        V = np.empty((E, E))
        for i in range(E):
            for j in range(E):
                V[i, j] = val[where[tuple(sorted([i] + [j] * (n - 1)))], i]
        versus[metric] = V
    pairwise = _pairwise(plan, records, gp, z) if n == 2 else None
    return TournamentResult(plan, records, gp, scores, ranks, order, stability, pairwise, versus, {})


def _ranks(S: np.ndarray) -> np.ndarray:
    """Competition ranks (1 = highest, ties share the better rank) of each row of ``S``, shape (B, E)."""
    # rank = 1 + number of entrants with a strictly higher score
    return 1 + (S[:, None, :] > S[:, :, None]).sum(axis=2)


def _pairwise(plan: TournamentPlan, records: list, gp: dict, z: float) -> dict:

    E = len(plan.entrants)
    where = {g: k for k, g in enumerate(plan.groups)}
    out = {}
    for metric in SCORES:
        val, se = gp[metric]
        V = np.empty((E, E))
        S = np.empty((E, E))
        D = np.zeros((E, E))
        DS = np.zeros((E, E))
        B = np.zeros((E, E), dtype=np.int64)
        for i in range(E):
            for j in range(E):
                g = where[(i, j) if i <= j else (j, i)]
                V[i, j] = val[g, i]
                S[i, j] = se[g, i]
        for i in range(E):
            for j in range(i + 1, E):
                g = where[(i, j)]
                ds, ss = [], []
                for mi in plan.group_seatings[g]:
                    rec = records[mi]
                    si, sj = rec.lineup.index(i), rec.lineup.index(j)
                    est = rec.metric(metric)
                    ds.append(est[si].value - est[sj].value)
                    xi, y = _member_series(plan, rec, i, metric)
                    xj, _ = _member_series(plan, rec, j, metric)
                    ss.append(float(mean_estimate(xi - xj).se if y is None else ratio_estimate(xi - xj, y).se))
                k = len(ds)
                D[i, j] = sum(ds) / k
                D[j, i] = -D[i, j]
                DS[i, j] = DS[j, i] = math.sqrt(sum(x * x for x in ss)) / k
                scale = max(1.0, abs(V[i, j]), abs(V[j, i]))
                tie = abs(D[i, j]) <= 1e-12 * scale or (DS[i, j] > 0 and abs(D[i, j]) <= z * DS[i, j])
                B[i, j] = 0 if tie else (1 if D[i, j] > 0 else -1)
                B[j, i] = -B[i, j]
        out[metric] = {"value": V, "se": S, "difference": D, "difference_se": DS, "beats": B,
                       "wins": (B > 0).sum(axis=1), "losses": (B < 0).sum(axis=1)}
    return out


# --------------------------------------------------------------------------------------------------
# Bootstrap rank stability
# --------------------------------------------------------------------------------------------------


def _bootstrap_arrays(plan: TournamentPlan, records: list, W: np.ndarray, metric: str) -> tuple:
    """Flatten the matches for the bootstrap kernel: the per-replication values the score ``metric``
    needs (profit sums for profit and profit gain, discounted profits otherwise) and their weights."""
    n = plan.seats
    M = len(records)
    offsets = np.zeros(M + 1, dtype=np.int64)
    for k, r in enumerate(records):
        offsets[k + 1] = offsets[k] + r.n_reps
    src = "discounted" if metric == "discounted_profit" else "profit_sum"
    x = np.ascontiguousarray(np.concatenate([getattr(r, src) for r in records]).T, dtype=np.float64)
    per = np.ascontiguousarray(np.concatenate([r.periods for r in records]), dtype=np.float64)
    # matches whose replications all have the same length (a fixed horizon, learning sessions): the
    # resampled total of periods is R times that length, exactly (sums of integers below 2**53)
    const = np.array([bool(np.all(r.periods == r.periods[0])) for r in records], dtype=np.bool_)
    ent = np.zeros((M, n), dtype=np.int64)
    wgt = np.zeros((M, n))
    for k, r in enumerate(records):
        n_seat = len(plan.group_seatings[r.group])
        for s, e in enumerate(r.lineup):
            ent[k, s] = e
            wgt[k, s] = W[r.group, e] / (n_seat * r.lineup.count(e))
    if metric == "profit_gain":
        shift = np.ascontiguousarray(plan.nash, dtype=np.float64)
        # an undefined gain (see gain_defined) stays undefined in every resample
        scale = np.ascontiguousarray(np.where(plan.gain_defined, plan.collusive - plan.nash, np.nan), dtype=np.float64)
    else:
        shift, scale = np.zeros(n), np.ones(n)
    mode = {"profit_gain": 0, "profit": 0, "discounted_profit": 1}[metric]
    return offsets, x, per, const, ent, wgt, shift, scale, mode


@njit(cache=True, inline="always")
def _sum_drawn(v, idx, R):
    """``sum(v[idx[:R]])`` with four running sums (elements ``r mod 4``) added as ``(s0 + s1) + (s2 + s3)``:
    independent additions keep the processor busy where one running sum waits on each addition."""
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    s3 = 0.0
    r = 0
    while r + 4 <= R:
        s0 += v[idx[r]]
        s1 += v[idx[r + 1]]
        s2 += v[idx[r + 2]]
        s3 += v[idx[r + 3]]
        r += 4
    if r < R:
        s0 += v[idx[r]]
    if r + 1 < R:
        s1 += v[idx[r + 1]]
    if r + 2 < R:
        s2 += v[idx[r + 2]]
    return (s0 + s1) + (s2 + s3)


def _sum_drawn_py(v, draws) -> float:
    """Plain-Python twin of :func:`_sum_drawn` (``draws``: the indices)."""
    s = [0.0, 0.0, 0.0, 0.0]
    for r, i in enumerate(draws):
        s[r % 4] += float(v[i])
    return (s[0] + s[1]) + (s[2] + s[3])


@njit(cache=True, parallel=True)
def bootstrap_kernel(offsets, x, per, const, ent, wgt, shift, scale, mode, rng_states, out):
    """Scores of every bootstrap resample (``prange`` over resamples); returns 0 (status OK).

    Resample ``b`` (stream ``rng_states[b]``, advanced in place) draws, match by match in match order,
    ``R_m`` replication indices uniformly with replacement, two per 64-bit draw (the high and then the
    low 32 bits, each mapped to ``0 .. R_m - 1`` by ``(bits * R_m) >> 32``, Lemire, 2019, "Fast random
    integer generation in an interval", ACM TOMACS 29; the bias is below ``R_m / 2**32``). Seat ``s``
    of match ``m`` then adds ``wgt[m, s] * (v - shift[s]) / scale[s]`` to its entrant's score
    ``out[b, ent[m, s]]`` (zeros on entry), where ``v`` is the seat's resampled mean per period
    (``mode`` 0: the sum of the drawn ``x`` over the sum of the drawn ``per``) or per replication
    (``mode`` 1). Sums run over the draws in order, in four running sums (:func:`_sum_drawn`).

    Parameters
    ----------
    offsets : int64 ndarray of shape (M + 1,)
        Replications of match ``m`` are columns ``offsets[m] .. offsets[m+1]-1``.
    x : ndarray of shape (n_seats, total)
    per : ndarray of shape (total,)
    const : bool ndarray of shape (M,)
        The match's replications all have the same length.
    ent : int64 ndarray of shape (M, n_seats)
    wgt : ndarray of shape (M, n_seats)
    shift, scale : ndarray of shape (n_seats,)
    mode : int
    rng_states : uint64 ndarray of shape (B, 4)
    out : ndarray of shape (B, n_entrants)
    """
    B = rng_states.shape[0]
    M = offsets.shape[0] - 1
    n = x.shape[0]
    r_max = 1
    for m in range(M):
        r_max = max(r_max, offsets[m + 1] - offsets[m])
    mask = np.uint64(0xFFFFFFFF)
    sh = np.uint64(32)
    for b in prange(B):
        rng = rng_states[b]
        idx = np.empty(r_max, dtype=np.int64)
        for m in range(M):
            lo = offsets[m]
            R = offsets[m + 1] - lo
            uR = np.uint64(R)
            r = 0
            while r < R:
                u = next_u64(rng)
                idx[r] = lo + np.int64(((u >> sh) * uR) >> sh)
                r += 1
                if r < R:
                    idx[r] = lo + np.int64(((u & mask) * uR) >> sh)
                    r += 1
            if mode == 1:
                den = np.float64(R)
            elif const[m]:
                den = np.float64(R) * per[lo]
            else:
                den = _sum_drawn(per, idx, R)
            for s in range(n):
                a = _sum_drawn(x[s], idx, R)
                v = a / den if den > 0.0 else np.nan
                g = (v - shift[s]) / scale[s] if scale[s] != 0.0 else np.nan
                out[b, ent[m, s]] += wgt[m, s] * g
    return 0


def _bootstrap_reference(offsets, x, per, const, ent, wgt, shift, scale, mode, rng_states, n_entrants) -> np.ndarray:
    """Plain-Python twin of :func:`bootstrap_kernel`: the same draws in the same order, shape (B, E)."""
    B = rng_states.shape[0]
    M = offsets.shape[0] - 1
    n = x.shape[0]
    out = np.zeros((B, n_entrants))
    for b in range(B):
        rng = ReferenceStream(rng_states[b])
        for m in range(M):
            lo = int(offsets[m])
            R = int(offsets[m + 1]) - lo
            draws = []
            while len(draws) < R:
                u = rng.next_u64()
                draws.append(lo + ((u >> 32) * R >> 32))
                if len(draws) < R:
                    draws.append(lo + ((u & 0xFFFFFFFF) * R >> 32))
            if mode == 1:
                den = float(R)
            elif const[m]:
                den = R * float(per[lo])
            else:
                den = _sum_drawn_py(per, draws)
            for s in range(n):
                a = _sum_drawn_py(x[s], draws)
                v = a / den if den > 0.0 else math.nan
                g = (v - float(shift[s])) / float(scale[s]) if float(scale[s]) != 0.0 else math.nan
                out[b, int(ent[m, s])] += float(wgt[m, s]) * g
    return out


def bootstrap_scores(plan: TournamentPlan, records: list, threads: int | None = None, metric: str | None = None,
                     reference: bool = False) -> np.ndarray:
    """Entrant scores (by ``metric``, default the ranking score) of every bootstrap resample, shape (B, E)
    (see :func:`bootstrap_kernel`; ``reference=True`` runs the plain-Python twin)."""

    metric = metric or plan.settings["score"]
    B = int(plan.settings["bootstrap"])
    E = len(plan.entrants)
    args = _bootstrap_arrays(plan, records, _rival_weights(plan), metric)
    states = stream_states(plan.run["seed"], (*tuple(plan.settings["key"]), BOOTSTRAP_KEY), 0, B)
    if reference:
        return _bootstrap_reference(*args, states, E)
    out = np.zeros((B, E))
    with NumbaThreads(threads):
        bootstrap_kernel(*args, states, out)
    return out


def _rank_stability(plan: TournamentPlan, records: list, ranks: np.ndarray, threads) -> dict:
    S = bootstrap_scores(plan, records, threads)
    R = _ranks(S)
    B = S.shape[0]
    alpha = 1.0 - plan.settings["confidence"]
    above = (S[:, :, None] > S[:, None, :]).mean(axis=0)
    per = {
        "rank_share": (R == ranks[None, :]).mean(axis=0).tolist(),
        "rank_low": np.quantile(R, alpha / 2, axis=0, method="lower").astype(int).tolist(),
        "rank_high": np.quantile(R, 1 - alpha / 2, axis=0, method="higher").astype(int).tolist(),
        "top_share": (R == 1).mean(axis=0).tolist(),
        "score_low": np.quantile(S, alpha / 2, axis=0).tolist(),
        "score_high": np.quantile(S, 1 - alpha / 2, axis=0).tolist(),
    }
    return {"resamples": B, "ranking_holds": float(np.all(R == ranks[None, :], axis=1).mean()),
            "above": above.tolist(), "per_entrant": per, "metric": plan.settings["score"]}


# --------------------------------------------------------------------------------------------------
# Public entry
# --------------------------------------------------------------------------------------------------


def tournament(market, entrants, monitoring=None, *, seats: int | None = None, periods: int = 1000,
               replications: int = 1000, delta: float = 0.95, seed: int = 0, horizon: str = "fixed",
               continuation: float = 0.99, agreement: str | None = None, actions=None, seatings: str = "auto",
               score: str = "profit_gain", confidence: float = 0.95, bootstrap: int = 1000,
               sessions: int | None = None, convergence: int = 100_000, max_periods: int = 1_000_000_000,
               limit_periods: int = LIMIT_PERIODS, threads: int | None = None, progress=None,
               key=()) -> TournamentResult:
    """Play a round-robin tournament of strategies in a market (see the module notes).

    Parameters
    ----------
    market : Market or MarketSpec
        Its number of firms is the number of seats.
    entrants : list of Entrant, of ``(label, strategy)`` pairs or of experiment-file tables, or a dict
        label -> strategy. At least two, with unique labels.
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    seats : int, optional
        Checked against the market's number of firms.
    periods, replications, delta, seed, horizon, continuation :
        As in :func:`sim.simulation.engine.simulate`, for every automaton match.
    agreement, actions :
        The collusive outcome the levels and the profit gain refer to (default: :func:`default_agreement`).
        With ``score = "profit_gain"`` every firm must earn more there than at the static Nash equilibrium.
    seatings : {"auto", "all", "one"}
        ``auto``: every seating where firms differ, one where they are symmetric.
    score : {"profit_gain", "discounted_profit", "profit"}
        What the ranking (and, through :meth:`TournamentResult.payoffs`, the evolutionary analysis) uses.
    confidence : float
        Level of the intervals.
    bootstrap : int
        Resamples for the rank stability (0: none).
    sessions, convergence, max_periods :
        Learning matches: sessions per match (default ``replications``) and the convergence rule.
    limit_periods : int
        Learning matches seating an automaton that acts at random: periods of greedy play averaged by the
        estimate of the limit outcome (:func:`sim.learning.session.learn`).
    threads : int, optional
        Threads of the kernels (results do not depend on it).
    progress : bool, optional
        Progress bar over replications (default: when stderr is a terminal).
    key : tuple of int
        Prefix of every stream family (a sweep cell's index, for example).

    Returns
    -------
    TournamentResult
    """
    t0 = time.perf_counter()
    plan = prepare_tournament(market, entrants, monitoring, seats=seats, periods=periods, replications=replications,
                              delta=delta, seed=seed, horizon=horizon, continuation=continuation,
                              agreement=agreement, actions=actions, seatings=seatings, score=score,
                              confidence=confidence, bootstrap=bootstrap, sessions=sessions,
                              convergence=convergence, max_periods=max_periods, limit_periods=limit_periods,
                              key=key)
    t_prep = time.perf_counter() - t0
    res = run_tournament(plan, threads, progress)
    res.timings["prepare_seconds"] = t_prep
    return res


# --------------------------------------------------------------------------------------------------
# Experiment files
# --------------------------------------------------------------------------------------------------

TOURNAMENT_TABLES = ("experiment", "market", "collusion", "monitoring", "entrants", "tournament", "learning", "run")
TOURNAMENT_KEYS = ("seats", "replications", "seatings", "score", "confidence", "bootstrap", "generations", "shares",
                   "selection", "fitness", "population", "moran_runs")
LEARNING_KEYS = (*LEARNER_PARAMS, "convergence", "max_periods", "limit_periods", "sessions")
RUN_KEYS = ("periods", "replications", "horizon", "continuation", "delta", "seed")
TOURNAMENT_DEFAULTS = {"seatings": "auto", "score": "profit_gain", "confidence": 0.95, "bootstrap": 1000}
EVOLUTION_DEFAULTS = {"generations": 1000, "shares": None, "selection": 0.1, "fitness": "linear",
                      "population": 100, "moran_runs": 10_000}


def tournament_from_dict(doc: dict, check_tables: bool = True) -> dict:
    """Read and validate the tables of a ``kind = "tournament"`` experiment.

    Returns a dict with ``plan_args`` (keyword arguments of :func:`prepare_tournament` besides market,
    entrants and monitoring), ``market`` (Market), ``entrants`` (list of Entrant), ``monitoring``
    (Monitoring) and ``evolution`` (the evolutionary settings: generations, shares, selection,
    fitness, population, moran_runs). Unknown tables and keys raise :class:`InputError` naming them;
    the values are checked by :func:`check_experiment`.
    """

    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    # the kind first: a file of another kind fails on experiment.kind, not on the tables it has
    exp = refuse_unknown(doc.get("experiment", {}), "experiment", ("name", "kind", "description"))
    if "kind" in exp and exp["kind"] != "tournament":
        raise InputError("experiment.kind", f"this command runs kind = 'tournament' experiments, got {exp['kind']!r}")
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
    market = market_from_dict(mtab)
    mon = monitoring_from_dict(doc.get("monitoring", {}))
    if "entrants" not in doc:
        raise InputError("entrants", "missing: give the entrants as [[entrants]] entries (label, strategy, ...)")
    entrants = entrants_from_tables(doc["entrants"], lt)
    if "replications" in tour and "replications" in runt:
        raise InputError("tournament.replications", "given in both [tournament] and [run]; give it once")
    args = {}
    for k in ("periods", "replications", "horizon", "continuation", "delta", "seed"):
        if k in runt:
            args[k] = runt[k]
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
    evo = dict(EVOLUTION_DEFAULTS)
    evo.update({k: tour[k] for k in EVOLUTION_DEFAULTS if k in tour})
    return {"market": market, "entrants": entrants, "monitoring": mon, "plan_args": args, "evolution": evo,
            "name": exp.get("name", "tournament")}


def check_experiment(cfg: dict) -> TournamentPlan:
    """Validate a read experiment completely (every match compiled, the evolutionary settings checked as
    far as they can be before the payoffs exist); returns the plan. Nothing is played."""

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
    _check_shares(ev["shares"], len(plan.entrants), plan.labels, "tournament.shares")
    if mapping == "linear":
        _check_linear_selection(plan, w)
    return plan


#: the most action profiles :func:`payoff_floor` evaluates
MAX_PROFILES = 500_000


def _seat_actions(plan: TournamentPlan) -> list[list[np.ndarray]]:
    """Every action (vector over the firm's products) each seat can play in some match: the levels its
    automaton's states play (whether or not the state is reached), its cheating level where it cheats, the
    action an implementation error substitutes, and a learning match's action grids."""

    ms = plan.market
    owner = market_owner(ms)
    prods = [np.flatnonzero(owner == i) for i in range(ms.n_firms)]
    seen: list[dict] = [{} for _ in range(ms.n_firms)]
    tremble = plan.mon_tremble
    for m in plan.matches:
        if m.learning:
            for i in range(ms.n_firms):
                for a in np.asarray(m.game.grids[i], dtype=float):
                    seen[i].setdefault((float(a),), np.array([a], dtype=float))
            continue
        cl = m.game.lineup
        for i in range(ms.n_firms):
            ns = int(cl.firms[i, SS.N_STATES])
            used = set(cl.states[i, :ns, SS.ACTION].tolist())
            if (np.any(cl.probs[i, :ns, SS.P_CHEAT] > 0)
                    and cl.firms[i, SS.CHEAT_FROM] < cl.firms[i, SS.CHEAT_UNTIL]):
                used.add(int(cl.firms[i, SS.CHEAT_LEVEL]))
            for lev in sorted(used):
                row = cl.levels[i, lev, prods[i]]
                seen[i].setdefault(tuple(row.tolist()), row.astype(float))
            if tremble:
                row = np.asarray(m.game.tremble, dtype=float)[prods[i]]
                seen[i].setdefault(tuple(row.tolist()), row)
    return [list(d.values()) for d in seen]


def payoff_floor(plan: TournamentPlan, metric: str | None = None) -> tuple[float, str]:
    """A lower bound, known before any match is played, of every payoff the tournament can give an entrant
    under ``metric`` (default: the ranking score), and where it is reached.

    Every seat's profit in every period is at least its profit at the worst action profile the seats can
    play (:func:`_seat_actions`, every combination, evaluated as the stage game does). With a demand
    shock ``theta`` (mean one, any value in ``[0, inf)``) a firm's profit is affine in ``theta`` (the
    shock scales the price under Cournot, the quantity under Bertrand), so its floor is its profit at
    ``theta = 0`` where the profit rises with ``theta``, and there is none where it falls. A mean profit
    per period is at least the floor ``lo``; a discounted profit at least ``min(lo, 0)`` times the sum of
    the discount weights of the horizon; a profit gain at least ``(lo - Nash) / (collusive - Nash)``. An
    entrant's payoffs average its seats' values, so the smallest seat floor bounds them all.

    Returns
    -------
    floor : float
        ``-inf`` when the payoff has no lower bound (or the profiles are too many to evaluate).
    where : str
        What gives the floor, for messages.

    Each seat's actions combine with every action of every other seat, whether or not the two ever meet in
    one period, so the floor can lie below the payoffs the tournament actually produces; it never lies above
    one.
    """

    metric = metric or plan.settings["score"]
    ms = plan.market
    sets = _seat_actions(plan)
    count = math.prod(len(x) for x in sets)
    if count > MAX_PROFILES:
        return -math.inf, f"the seats' actions make {count:,} profiles, more than the {MAX_PROFILES:,} checked"

    owner = market_owner(ms)
    idx = np.stack(np.meshgrid(*[np.arange(len(x)) for x in sets], indexing="ij"), -1).reshape(-1, len(sets))
    A = np.empty((idx.shape[0], ms.n_products))
    for i, opts in enumerate(sets):
        A[:, owner == i] = np.stack(opts)[idx[:, i]]
    pi1 = np.asarray(ms.firm_profits(A), dtype=float)
    if plan.monitoring["sigma"] > 0:
        pi0 = np.asarray(ms.firm_profits(A, 0.0), dtype=float)
        slope = pi1 - pi0
        tol = 1e-12 * np.maximum(1.0, np.abs(pi1))
        low = np.where(slope >= -tol, np.minimum(pi0, pi1), -np.inf)
    else:
        low = pi1
    if metric == "profit_gain":
        ok = plan.gain_defined
        val = np.where(ok[None, :], (low - plan.nash[None, :]) / np.where(ok, plan.collusive - plan.nash, 1.0),
                       np.inf)
    else:
        val = low
    k, i = np.unravel_index(int(np.argmin(val)), val.shape)
    floor = float(val[k, i])
    run = plan.run
    if metric == "discounted_profit":
        d = run["delta"]
        weights = float(run["periods"]) if d == 1.0 else (1.0 - d ** run["periods"]) / (1.0 - d)
        floor = min(floor, 0.0) * weights
    acts = ", ".join(fmt_num(float(x)) for x in A[k])
    shock = " and a demand shock near zero" if plan.monitoring["sigma"] > 0 else ""
    if floor == -math.inf:
        return floor, (f"firm {i + 1} prices below cost at actions ({acts}), where a large demand shock makes its "
                       "loss as large as the shock")
    return floor, f"firm {i + 1} at actions ({acts}){shock}"


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


def evolve_tournament(result: TournamentResult, evolution: dict, threads: int | None = None):
    """The evolutionary analysis of a tournament's payoffs (:func:`sim.tournament.evolution.evolve`) with the
    settings of an experiment file's ``[tournament]`` table; the Moran simulation's streams continue the
    tournament's seed and key."""

    ev = evolution
    return evolve(result.payoffs(), shares=ev["shares"], generations=ev["generations"], selection=ev["selection"],
                  fitness_map=ev["fitness"], population=ev["population"], runs=ev["moran_runs"],
                  seed=result.plan.run["seed"], key=tuple(result.plan.settings["key"]),
                  confidence=result.plan.settings["confidence"], threads=threads, prefix="tournament")


# --------------------------------------------------------------------------------------------------
# --------------------------------------------------------------------------------------------------
