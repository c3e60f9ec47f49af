"""Strategy tournaments in oligopoly: every rule against every other group of rules, in the market's terms.

What a tournament plays
-----------------------
* **Entrants** (:mod:`sim.tournament.entrants`): a unique label and a strategy -- an automaton of :mod:`strategies`
  with its parameters, or a learning firm (:class:`strategies.qlearning.QLearner`) with its own.
* **Round robin** (:mod:`sim.tournament.plan`): every group of ``n`` entrants (the market's ``n`` seats), self-play
  included; every seating of a group where firms differ, one where they are symmetric.
* **Replications**: each automaton match plays ``replications`` independent replications through the engine
  (:func:`sim.simulation.engine.run_game`, numba, parallel over replications). Match ``m`` (in the order of
  :attr:`TournamentPlan.matches`) draws from the stream family ``(*key, m)``, so its numbers are exactly those of
  ``simulate(market, lineup, monitoring, ..., seed=seed, key=(*key, m))``, whatever the number of threads. Besides
  the profits, a match records how long collusion lasts: the share of collusive periods, the time until collusion
  first breaks down and the length of a collusive spell (Kaplan-Meier restricted means, as
  :func:`sim.simulation.results.summarize` estimates them; Kaplan and Meier, 1958).

How a learning entrant plays
----------------------------
A match with at least one learning entrant is a set of learning *sessions* (:func:`sim.learning.session.learn`;
``sessions`` of them, by default ``replications``): the learners of the match, seated with the match's automata,
learn until their greedy strategies have been unchanged for ``convergence`` periods (or ``max_periods``, reported as
not converged). A session is scored on its *converged play*, as in Calvano, Calzolari, Denicolo and Pastorello
(2020, AER): the learned strategies played greedily from the session's final state reach a limit cycle, and

* a seat's *profit* is its mean profit per period over the limit cycle;
* its *discounted profit* is the value of that cycle over the tournament's horizon,
  ``sum_{t < periods} (delta c)^t pi_{t mod L}`` (``c`` the continuation probability with a random horizon, 1
  otherwise), i.e. the match as if it started once learning is over (when the cycle is longer than the 64 points a
  session keeps, its mean profit is used in every period).

Automata that act at random (forgiving tit for tat, opportunists) may meet learners too: greedy play after learning
then has no exact cycle, and :func:`sim.learning.session.learn` estimates the limit outcome from the session's own
stream (a burn-in, then ``limit_periods`` periods of greedy play averaged). The seat's profit is that estimate, its
discounted profit the estimate in every period of the horizon, and the match's ``stream`` says
``limit = "estimate"``.

Session ``j`` of match ``m`` uses ``learn(..., seed=seed, cell=m)`` when ``key`` is empty (its stream is
``stream_states(seed, (m,), j, j + 1)``), and a seed derived from ``seed`` and ``key`` otherwise. The learning
kernel plays perfect monitoring without noise, so learning entrants need ``monitoring.signal = "perfect"`` and no
shock or errors; automata meeting them collude on the joint-profit outcome, and the market must have 2 to 4
single-product firms.

Scores, places and their stability: :mod:`sim.tournament.scoring` and :mod:`sim.tournament.bootstrap`; the
evolutionary analysis of the payoffs: :mod:`sim.tournament.evolution`; experiment files:
:mod:`sim.tournament.experiment`; the result a command prints and a run stores: :mod:`sim.tournament.analysis`.

Layers: :func:`tournament` (validated public entry) = :func:`sim.tournament.plan.prepare_tournament` (validate and
compile every match, nothing played) + :func:`run_tournament` (the driver: seeds, buffers, progress, scoring) -> the
engine's kernel, the learning kernel, and :func:`sim.tournament.bootstrap.bootstrap_kernel` (numba, with its
plain-Python twin).
"""

from __future__ import annotations

import math
import sys
import time

import numpy as np
from tqdm import tqdm

import sim.simulation.kernel as K
from sim.core.parallel import check_threads
from sim.core.stats import Estimate, kaplan_meier, mean_estimate, ratio_estimate, share_estimate
from sim.learning.results import CYCLE_STORE, LIMIT_PERIODS
from sim.learning.session import learn
from sim.simulation.engine import run_game
from sim.tournament.plan import Match, TournamentPlan, prepare_tournament
from sim.tournament.scoring import MatchRecord, TournamentResult, score_tournament

__all__ = ["run_tournament", "tournament"]


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


def _play_learning(plan: TournamentPlan, m: Match, threads) -> dict:
    lineup = [plan.entrants[e].strategy.clone() for e in m.lineup]
    key = tuple(plan.settings["key"])
    seed = _learning_seed(plan.run["seed"], key)
    res = learn(plan.market, lineup, sessions=plan.settings["sessions"], seed=seed,
                convergence=plan.settings["convergence"], max_periods=plan.settings["max_periods"],
                limit_periods=plan.settings["limit_periods"],
                response_periods=0, workers=threads, progress=False, cell=m.index)
    run = plan.run
    d_eff = run["delta"] * (run["continuation"] if run["horizon"] == "random" else 1.0)
    stream = {"seed": seed, "cell": m.index, "function": "sim.learning.session.learn"}
    if not res.lineup.limit_exact:
        # automata that act at random: the limit outcome is learn's seeded estimate
        stream.update(limit="estimate", limit_periods=plan.settings["limit_periods"])
    return {"profit_sum": np.ascontiguousarray(res.limit_profits, dtype=float),
            "discounted": _cycle_discounted(res, d_eff, run["periods"]),
            "periods": np.ones(res.n_sessions, dtype=np.int64), "collusive": None,
            "converged": float(res.converged.mean()), "stream": stream}


def _cut_off(hist: np.ndarray) -> np.ndarray:
    """Spells cut off by the horizon after ``l`` periods are censored at ``l - 1`` (the convention of
    :func:`sim.simulation.results.summarize`)."""
    out = np.zeros_like(hist)
    out[:-1] = hist[1:]
    return out


def _play_automata(plan: TournamentPlan, m: Match, threads) -> dict:
    run = plan.run
    mk = (*tuple(plan.settings["key"]), m.index)
    raw = run_game(m.game, run["periods"], run["replications"], run["delta"], run["seed"], mk, run["horizon"],
                   run["continuation"], 0, threads, progress=False)
    conf = plan.settings["confidence"]
    P = run["periods"]
    fb = raw.ints[:, K.R_FIRST_BREAKDOWN]
    ended = np.bincount(fb[fb > 0], minlength=P + 1)[: P + 1]
    cens = np.bincount(raw.ints[fb == 0, K.R_PERIODS], minlength=P + 1)[: P + 1]
    return {"profit_sum": raw.profit_sum, "discounted": raw.disc, "periods": raw.ints[:, K.R_PERIODS].copy(),
            "collusive": raw.ints[:, K.R_COLLUSIVE].copy(), "converged": None,
            "stream": {"seed": run["seed"], "key": list(mk), "function": "sim.simulation.engine.simulate"},
            "first_breakdown": kaplan_meier(ended, cens, conf, restrict=P).mean,
            "spell_length": kaplan_meier(raw.hist[K.H_SPELL_ENDED], _cut_off(raw.hist[K.H_SPELL_CENSORED]),
                                         conf).mean}


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
    cs = share_estimate(coll, per, z_conf) if coll is not None else None
    return profit, dprof, gain, cs


def _record(plan: TournamentPlan, m: Match, played: dict) -> MatchRecord:
    ps, disc, per, coll = played["profit_sum"], played["discounted"], played["periods"], played["collusive"]
    profit, dprof, gain, cs = _estimates(plan, ps, disc, per, coll, plan.settings["confidence"])
    return MatchRecord(m.index, m.lineup, m.group, m.learning, ps, disc, per, coll, profit, dprof, gain, cs,
                       played["converged"], played["stream"], played.get("first_breakdown"),
                       played.get("spell_length"))


def run_tournament(plan: TournamentPlan, threads: int | None = None, progress=None) -> TournamentResult:
    """Driver: play every match of a plan (seeds, buffers, progress bar), then score and place the entrants.

    Parameters
    ----------
    plan : TournamentPlan
    threads : int, optional
        Threads of the kernels (results do not depend on it).
    progress : bool, optional
        Progress bar over replications (default: when stderr is a terminal).

    Returns
    -------
    TournamentResult
    """

    threads = check_threads(threads)
    total = sum(plan.replications_of(m) for m in plan.matches)
    bar = _progress(total, progress)
    records = []
    t0 = time.perf_counter()
    try:
        for m in plan.matches:
            played = _play_learning(plan, m, threads) if m.learning else _play_automata(plan, m, threads)
            records.append(_record(plan, m, played))
            if bar is not None:
                bar.update(plan.replications_of(m))
    finally:
        if bar is not None:
            bar.close()
    t_play = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = score_tournament(plan, records, threads)
    res.timings.update({"play_seconds": t_play, "scoring_seconds": time.perf_counter() - t0})
    return res


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
    entrants : list of Entrant, of ``(label, strategy)`` pairs or of experiment-file tables, or dict
        A dict maps labels to strategies. At least two, with unique labels.
    monitoring : Monitoring or dict, optional
        Default: perfect monitoring without noise.
    seats : int, optional
        Checked against the market's number of firms.
    periods, replications : int
        As in :func:`sim.simulation.engine.simulate`, for every automaton match.
    delta : float
        The discount factor.
    seed : int
    horizon : {"fixed", "random"}
    continuation : float
        Continuation probability of a random horizon.
    agreement : str, optional
        The collusive outcome the levels and the profit gain refer to (default:
        :func:`sim.tournament.plan.default_agreement`). With ``score = "profit_gain"`` every firm must earn more
        there than at the static Nash equilibrium.
    actions : array_like, optional
        Given collusive actions (``agreement = "given"``).
    seatings : {"auto", "all", "one"}
        ``auto``: every seating where firms differ, one where they are symmetric.
    score : {"profit_gain", "discounted_profit", "profit"}
        What the places (and, through :meth:`TournamentResult.payoffs`, the evolutionary analysis) use.
    confidence : float
        Level of the intervals.
    bootstrap : int
        Resamples for the stability of the places (0: none).
    sessions : int, optional
        Learning matches: sessions per match (default ``replications``).
    convergence, max_periods : int
        Learning matches: the convergence rule.
    limit_periods : int
        Learning matches seating an automaton that acts at random: periods of greedy play averaged by the estimate
        of the limit outcome (:func:`sim.learning.session.learn`).
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
