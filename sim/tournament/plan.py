"""The plan of a tournament: every setting validated and every match compiled, nothing played.

The market has ``n`` seats (firms). Every *group* -- a multiset of ``n`` entrants, self-play included -- is played.
In a symmetric market one seating per group is enough. Where firms differ (costs, capacities, demand parameters,
multi-product firms) every distinct seating of the group is played (a *match* each) and the group's payoffs average
over them with equal weights, so no entrant gains from the seat it happens to get. ``seatings = "all"`` forces every
seating, ``"one"`` the sorted one only.

The profit gain ``(profit - Nash) / (collusive - Nash)`` of a seat refers to the static Nash and the collusive
profit of its firm. The collusive profit is that of the agreement (``collusion.agreement``); without one, the
tournament takes :func:`default_agreement`. The profit gain of a firm whose collusive profit is not above its Nash
profit would fall as its profit rises, so it is undefined (nan) for that firm (:func:`gain_defined`), and a
tournament ranked by profit gain refuses such an agreement before anything is played.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from itertools import permutations

import numpy as np

from sim.core.errors import InputError
from sim.core.params import Integer, Options, Real, optional
from sim.core.text import fmt_num
from sim.learning.lineup import compile_lineup as compile_learners
from sim.learning.results import LIMIT_PERIODS
from sim.models.market import MarketSpec
from sim.models.stagecore import evaluate_py, market_arrays
from sim.simulation.engine import as_monitoring, check_run, compile_game, stage_levels
from sim.tournament.entrants import Entrant, as_entrants, check_entrants
from sim.tournament.payoffs import multisets, type_counts

__all__ = [
    "MAX_MATCHES",
    "SCORES",
    "SCORE_NAMES",
    "TOURNAMENT_CONSTRAINTS",
    "Match",
    "TournamentPlan",
    "benchmark_profits",
    "default_agreement",
    "gain_defined",
    "prepare_tournament",
    "rival_weights",
]

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


@dataclass(eq=False)
class Match:
    """One seating of one group.

    Parameters
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

    Parameters
    ----------
    market : MarketSpec
    entrants : list of Entrant
    monitoring : dict
        Validated monitoring settings.
    stage : sim.theory.equilibrium.StageGame
        The solved stage game (see :func:`sim.simulation.engine.stage_levels`).
    levels : sim.simulation.engine.StageLevels
        Its named levels.
    groups : list of tuple
        Every multiset of ``seats`` entrant indices (sorted), in lexicographic order.
    matches : list of Match
    run : dict
        periods, replications, delta, seed, horizon, continuation.
    settings : dict
        seats, seatings (as given and as played), score, confidence, bootstrap, sessions, convergence, max_periods,
        limit_periods, key, agreement, groups, matches.
    nash, collusive : ndarray of shape (n_firms,)
        Per-period profit of each firm at the static Nash and collusive profiles (the profit-gain benchmarks, as in
        :func:`sim.simulation.results.summarize`).
    group_seatings : list of list of int
        The matches of each group.
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
        """The number of seats (firms)."""
        return int(self.settings["seats"])

    @property
    def labels(self) -> list[str]:
        """The entrants' labels."""
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
        """Whether a learning firm enters."""
        return any(e.learns for e in self.entrants)

    def replications_of(self, match: Match) -> int:
        """Replications (automata) or sessions (learning) a match plays.

        Parameters
        ----------
        match : Match

        Returns
        -------
        int
        """
        return int(self.settings["sessions"]) if match.learning else int(self.run["replications"])

    def describe(self, match: Match) -> str:
        """The match as ``"label vs label ..."``, seat by seat.

        Parameters
        ----------
        match : Match

        Returns
        -------
        str
        """
        return " vs ".join(self.entrants[e].label for e in match.lineup)


def rival_weights(plan: TournamentPlan) -> np.ndarray:
    """The weight of each group in each entrant's score.

    ``W[g, e]`` is the probability that ``n - 1`` rivals drawn independently and uniformly from the entrants form
    group ``g`` minus one ``e``: the multinomial ``(n-1)! / prod c_e! / E^(n-1)`` (0 where ``e`` is not in ``g``).

    Parameters
    ----------
    plan : TournamentPlan

    Returns
    -------
    ndarray of shape (G, E)
        Each column sums to one.
    """

    E = len(plan.entrants)
    n = plan.seats
    W = np.zeros((len(plan.groups), E))
    for g, grp in enumerate(plan.groups):
        c = type_counts(grp, E)
        for e in range(E):
            if c[e] == 0:
                continue
            r = list(c)
            r[e] -= 1
            W[g, e] = math.factorial(n - 1) / math.prod(math.factorial(x) for x in r) / E ** (n - 1)
    return W


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


def _check_size(E: int, n: int, every: bool) -> None:
    n_groups = math.comb(E + n - 1, n)
    n_matches = E**n if every else n_groups
    if n_matches > MAX_MATCHES:
        what = "seatings of groups" if every else "groups"
        raise InputError("tournament.seats", f"{E} entrants over {n} seats make {n_matches:,} matches ({what}), "
                                             f"more than {MAX_MATCHES:,}; use fewer entrants or seats"
                                             + (" (or seatings = 'one')" if every else ""))


def _check_learners(ms, ents: list[Entrant], agreement, actions, mon: dict) -> bool:
    """Learning entrants play through :func:`sim.learning.session.learn`: 2 to 4 single-product firms, the
    joint-profit agreement, no noise. Returns whether one enters."""
    learners = [k for k, e in enumerate(ents) if e.learns]
    if not learners:
        return False
    lab = ents[learners[0]].label
    n = ms.n_firms
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
    for k, what in (("signal", "perfect"), ("sigma", 0.0), ("perception_error", 0.0), ("implementation_error", 0.0)):
        if mon[k] != what:
            raise InputError(f"monitoring.{k}", f"learning entrants (such as {lab!r}) play without noise and "
                                                f"see every action; must be {what!r} when one enters, got "
                                                f"{mon[k]!r}")
    return True


def _compile_matches(ms, ents: list[Entrant], stage, levels, mon_obj, every: bool) -> tuple[list, list, list]:
    """Every group, its seatings as matches, each compiled (the engine's game or the learning line-up)."""
    n = ms.n_firms
    # each automaton entrant alone, in every seat: its parameters against this market and monitoring
    for k, e in enumerate(ents):
        if e.learns:
            continue
        try:
            alone = [e.strategy.clone() for _ in range(n)]
            compile_game(stage, levels, alone, mon_obj, prefix="entrants", strict=False)
        except InputError as exc:
            raise _rekey(exc, {s_ + 1: k + 1 for s_ in range(n)}) from None
    groups = multisets(len(ents), n)
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
                # automata that act at random are played; their limit outcomes are estimated
                m.game = compile_learners(ms, lineup, workers=1, seat_prefix="entrants", random_automata="estimate")
            else:
                m.game = compile_game(stage, levels, lineup, mon_obj, prefix="entrants", strict=False)
        except InputError as exc:
            exc2 = _rekey(exc, seat_map)
            raise InputError(exc2.key, f"{exc2.message} (in the match "
                                       f"{' vs '.join(ents[e].label for e in m.lineup)})") from None
    return groups, matches, group_seatings


def prepare_tournament(market, entrants, monitoring=None, *, seats: int | None = None, periods: int = 1000,
                       replications: int = 1000, delta: float = 0.95, seed: int = 0, horizon: str = "fixed",
                       continuation: float = 0.99, agreement: str | None = None, actions=None,
                       seatings: str = "auto", score: str = "profit_gain", confidence: float = 0.95,
                       bootstrap: int = 1000, sessions: int | None = None, convergence: int = 100_000,
                       max_periods: int = 1_000_000_000, limit_periods: int = LIMIT_PERIODS,
                       key=()) -> TournamentPlan:
    """Validate everything and compile every match; nothing is played.

    Parameters
    ----------
    market, entrants, monitoring, seats, periods, replications, delta, seed, horizon, continuation : object
        As in :func:`sim.tournament.roundrobin.tournament`.
    agreement, actions, seatings, score, confidence, bootstrap, sessions, convergence : object
        As in :func:`sim.tournament.roundrobin.tournament`.
    max_periods, limit_periods : int
        As in :func:`sim.tournament.roundrobin.tournament`.
    key : tuple of int
        The cell's stream key (appended to the seed's entropy).

    Returns
    -------
    TournamentPlan
    """

    ms = market if isinstance(market, MarketSpec) else market.spec()
    ents = as_entrants(entrants)
    check_entrants(ents)
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
    _check_size(len(ents), n, every)
    learners = _check_learners(ms, ents, agreement, actions, mon)
    chosen = agreement if agreement is not None else default_agreement(ms, learners, actions)
    stage, levels = stage_levels(ms, chosen, actions)
    pi_n, pi_c = benchmark_profits(ms, stage)
    _check_gains(pi_n, pi_c, stage.agreement, agreement is None, s["score"], learners)
    groups, matches, group_seatings = _compile_matches(ms, ents, stage, levels, mon_obj, every)
    settings = {**s, "seats": n, "seatings_played": "all" if every else "one", "key": list(key),
                "agreement": stage.agreement, "agreement_given": agreement is not None, "groups": len(groups),
                "matches": len(matches)}
    return TournamentPlan(ms, ents, mon, stage, levels, groups, matches, run, settings, pi_n, pi_c, group_seatings)


def default_agreement(market, learners: bool = False, actions=None) -> str:
    """The collusive outcome a tournament refers to when ``collusion.agreement`` is not given.

    * ``"given"`` when actions are given;
    * ``"joint"`` (the joint-profit maximum) when the firms are symmetric -- it is then the symmetric outcome every
      firm prefers to the static Nash equilibrium -- and when a learning entrant enters
      (:func:`sim.learning.session.learn` resolves the automata's levels against it), and in homogeneous Bertrand
      markets (where ``"proportional"`` is not defined);
    * ``"proportional"`` otherwise: where firms differ, the joint-profit maximum typically shuts the costlier firms
      down (under Cournot with constant marginal costs the cheapest firm produces everything), leaving them below
      their Nash profit, which no tacit agreement can ask of a firm without side payments. Scaling the static-Nash
      quantities down in proportion (Schmalensee, 1987, "Competitive advantage and collusive optima", Int. J. Ind.
      Organ. 5) keeps every firm's share and, in the usual markets, raises every firm's profit above Nash. Whatever
      the agreement, a tournament ranked by profit gain checks that every firm gains.

    Parameters
    ----------
    market : Market or MarketSpec
    learners : bool
        Whether a learning entrant enters.
    actions : array_like, optional
        Given collusive actions.

    Returns
    -------
    str
    """

    ms = market if isinstance(market, MarketSpec) else market.spec()
    if actions is not None:
        return "given"
    if ms.symmetric or learners or ms.homogeneous_bertrand:
        return "joint"
    return "proportional"


def benchmark_profits(ms, stage) -> tuple[np.ndarray, np.ndarray]:
    """Per-firm profit per period at the static Nash and the collusive profiles, as the kernel evaluates them.

    Parameters
    ----------
    ms : MarketSpec
    stage : sim.theory.equilibrium.StageGame

    Returns
    -------
    nash, collusive : ndarray of shape (n_firms,)
    """

    arrays = market_arrays(ms)
    _, _, pi_n, _, _ = evaluate_py(arrays, np.asarray(stage.nash.actions, dtype=float))
    _, _, pi_c, _, _ = evaluate_py(arrays, np.asarray(stage.collusive.actions, dtype=float))
    return np.asarray(pi_n, dtype=float), np.asarray(pi_c, dtype=float)


def gain_defined(nash, collusive) -> np.ndarray:
    """Whether each firm's profit gain ``(profit - Nash) / (collusive - Nash)`` is defined: its collusive profit
    exceeds its Nash profit (beyond rounding). Where it does not, the ratio would fall as the firm's profit rises
    (or divide by zero), so the gain is reported as undefined.

    Parameters
    ----------
    nash, collusive : array_like of shape (n_firms,)

    Returns
    -------
    bool ndarray of shape (n_firms,)
    """
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
