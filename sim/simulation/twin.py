"""Plain-Python reference of the simulation loop, for tests and for the speed ratio of ``supergame bench``.

It plays the same line-up with the same random draws in the same order as :mod:`sim.simulation.kernel`
(:class:`sim.core.rng.ReferenceStream` is the bit-exact twin of the kernel's generator), one replication
at a time, with the automaton logic written out again in ordinary Python from the compiled arrays.
It reads the same input groups as the kernel (:func:`sim.simulation.driver.kernel_groups`) and follows
the kernel's steps one function per step, so that a difference found by a test points to one step.
The stage game of each period is evaluated by the pure-Python original of the numba stage core
(``sim.models.stagecore.evaluate.py_func``), itself checked against the numpy definitions of
:mod:`sim.models.demand` and :mod:`sim.models.market`.

:func:`reference_run` returns a :class:`sim.simulation.driver.RawRun` laid out exactly as the driver's, so that a
test can compare every array.
"""

from __future__ import annotations

import math

import numpy as np

import sim.simulation.kernel as K
import strategies.step as S
from sim.core.rng import ReferenceStream, stream_states
from sim.models.capacity_stage import MIXED_PRICE
from sim.models.stagecore import evaluate
from sim.simulation.driver import RawRun, kernel_groups
from sim.theory.draws import draw_state_path

__all__ = ["reference_run"]


def _complies(x: float, expected: float, judge: int, quantity_setting: bool) -> bool:
    tol = S.TOL * max(1.0, abs(expected))
    more = x - expected if quantity_setting else expected - x  # excess aggressiveness
    if judge == S.JUDGE_RESTRAINT:
        return more <= tol
    return more >= -tol


class _Firm:
    """One firm's automaton, read from the compiled arrays into plain lists."""

    def __init__(self, i, lineup):
        ns = int(lineup.firms[i, S.N_STATES])
        self.states = [[int(v) for v in lineup.states[i, s]] for s in range(ns)]
        self.probs = [[float(v) for v in lineup.probs[i, s]] for s in range(ns)]
        self.initial = int(lineup.firms[i, S.INITIAL])
        self.cheat_level = int(lineup.firms[i, S.CHEAT_LEVEL])
        self.cheat_from = int(lineup.firms[i, S.CHEAT_FROM])
        self.cheat_until = int(lineup.firms[i, S.CHEAT_UNTIL])
        self.levels = [[float(v) for v in row] for row in lineup.levels[i]]


class _Game:
    """The kernel's input groups in plain Python."""

    def __init__(self, market, lineup, monitoring, run):
        self.market = market
        self.monitoring = monitoring
        self.run = run
        self.n = int(market.n_firms)
        self.n_products = int(market.owner.shape[0])
        self.owner = [int(o) for o in market.owner]
        self.firms = [_Firm(i, lineup) for i in range(self.n)]
        self.tremble = [float(x) for x in lineup.tremble]
        self.mixed = [[float(x) for x in row] for row in market.mixed]
        self.evaluate_args = (market.code, market.scalars, market.vector, market.cost, market.capacity, market.owner,
                              market.n_firms)
        self.demand = None  # a StateGame: the period's market and levels follow the demand state


def _horizon(game: _Game, rng: ReferenceStream) -> int:
    run = game.run
    if not run.random_horizon:
        return run.n_periods
    u = rng.next_double()
    if run.continuation >= 1.0:
        return run.n_periods
    return min(run.n_periods, 1 + math.floor(math.log(1.0 - u) / math.log(run.continuation)))


def _choose_levels(game: _Game, state: list, t: int, rng: ReferenceStream, counts) -> tuple[list, list]:
    lev, cheated = [], []
    for i, f in enumerate(game.firms):
        s = state[i]
        level, ch = f.states[s][S.ACTION], False
        pc = f.probs[s][S.P_CHEAT]
        if pc > 0.0 and f.cheat_from <= t < f.cheat_until and (pc >= 1.0 or rng.next_double() < pc):
            level, ch = f.cheat_level, True
        lev.append(level)
        cheated.append(ch)
        counts[K.R_CHEATS] += ch
    return lev, cheated


def _tremble(game: _Game, rng: ReferenceStream, counts) -> list:
    e_impl = game.monitoring.implementation_error
    if e_impl <= 0.0:
        return [False] * game.n
    trembled = [rng.next_double() < e_impl for _ in range(game.n)]
    counts[K.R_TREMBLES] += sum(trembled)
    return trembled


def _actions(game: _Game, lev: list, trembled: list) -> np.ndarray:
    own = game.owner
    return np.array([game.tremble[k] if trembled[own[k]] else game.firms[own[k]].levels[lev[own[k]]][k]
                     for k in range(game.n_products)])


def _draw_mixed(game: _Game, actions: np.ndarray, rng: ReferenceStream) -> np.ndarray:
    # only a market with a mixed static equilibrium draws: one uniform per product at MIXED_PRICE
    if not game.mixed or not game.mixed[0]:
        return actions
    for k in range(game.n_products):
        if actions[k] == MIXED_PRICE:
            table = game.mixed[k]
            actions[k] = table[min(int(rng.next_double() * len(table)), len(table) - 1)]
    return actions


def _demand_shock(game: _Game, rng: ReferenceStream) -> float:
    mon = game.monitoring
    if mon.noise_code == 1:
        return math.exp(mon.sigma * rng.next_normal_zig() - 0.5 * mon.sigma * mon.sigma)
    if mon.noise_code == 2:
        return max(0.0, 1.0 + mon.sigma * rng.next_normal_zig())  # floored at zero (sim.models.monitoring)
    return 1.0


def _record_path(raw: RawRun, r: int, t: int, period: dict, state: list, colluding: list, all_c: bool) -> None:
    raw.path_actions[r, t] = period["actions"]
    raw.path_prices[r, t] = period["prices"]
    raw.path_market[r, t] = (period["price"], period["theta"], period["surplus"])
    raw.path_profit[r, t] = period["profit"]
    raw.path_state[r, t] = state
    raw.path_flags[r, t] = [(K.FLAG_CHEAT if ch else 0) | (K.FLAG_TREMBLE if tr else 0) | (K.FLAG_COLLUDE if co else 0)
                            for ch, tr, co in zip(period["cheated"], period["trembled"], colluding)]
    raw.path_collude[r, t] = int(all_c)


def _bad_signal(game: _Game, i: int, s: int, period: dict, rng: ReferenceStream) -> bool:
    f = game.firms[i]
    row, pr = f.states[s], f.probs[s]
    watch = row[S.WATCH]
    if watch == S.WATCH_NOTHING:
        return False
    if watch == S.WATCH_PRICE:
        return period["price"] < pr[S.THRESHOLD]
    if watch == S.WATCH_PROFIT:
        return period["profit"][i] < pr[S.THRESHOLD]
    bad = False
    expected = f.levels[row[S.EXPECT]]
    actions = period["actions"]
    for j in range(game.n):
        ok = all(_complies(actions[k], expected[k], row[S.JUDGE], game.market.quantity_setting)
                 for k in range(game.n_products) if game.owner[k] == j)
        if j == i:
            bad = bad or (watch == S.WATCH_ALL and not ok)
            continue
        if game.monitoring.perception_error > 0.0 and rng.next_double() < game.monitoring.perception_error:
            ok = not ok
        bad = bad or not ok
    return bad


def _next_states(game: _Game, state: list, period: dict, rng: ReferenceStream) -> list:
    new_state = []
    for i, f in enumerate(game.firms):
        bad = _bad_signal(game, i, state[i], period, rng)
        row, pr = f.states[state[i]], f.probs[state[i]]
        nxt, alt, pa = ((row[S.BAD], row[S.ALT_BAD], pr[S.P_ALT_BAD]) if bad
                        else (row[S.GOOD], row[S.ALT_GOOD], pr[S.P_ALT_GOOD]))
        if pa > 0.0 and (pa >= 1.0 or rng.next_double() < pa):
            nxt = alt
        new_state.append(nxt)
    return new_state


def _count_period(raw: RawRun, counts, runs: dict, t: int, all_c: bool, punishing: bool) -> None:
    raw.by_period[1, t] += 1
    if all_c:
        raw.by_period[0, t] += 1
        counts[K.R_COLLUSIVE] += 1
    else:
        counts[K.R_WAR_PERIODS] += 1
        if counts[K.R_FIRST_BREAKDOWN] == 0:
            counts[K.R_FIRST_BREAKDOWN] = t + 1
    if t == 0:
        runs["run"] = 1
        counts[K.R_SPELLS if all_c else K.R_WARS] += 1
    elif all_c == runs["prev"]:
        runs["run"] += 1
    else:
        if runs["prev"]:
            raw.hist[K.H_SPELL_ENDED, runs["run"]] += 1
            counts[K.R_SPELLS_ENDED] += 1
            counts[K.R_SPELL_PERIODS_ENDED] += runs["run"]
            counts[K.R_WARS] += 1
        else:
            raw.hist[K.H_WAR_ENDED, runs["run"]] += 1
            counts[K.R_WARS_ENDED] += 1
            counts[K.R_WAR_PERIODS_ENDED] += runs["run"]
            counts[K.R_SPELLS] += 1
        runs["run"] = 1
    runs["prev"] = all_c
    if punishing:
        runs["punish"] += 1
    elif runs["punish"] > 0:
        raw.hist[K.H_PUNISH_ENDED, runs["punish"]] += 1
        runs["punish"] = 0
    counts[K.R_PERIODS] += 1


def _play_period(game: _Game, raw: RawRun, r: int, t: int, state: list, rng: ReferenceStream, buffers) -> tuple:
    """Steps 1-5 of a period and its path record; returns (the period's values, all collude, punishing)."""
    counts = raw.ints[r]
    lev, cheated = _choose_levels(game, state, t, rng, counts)
    trembled = _tremble(game, rng, counts)
    actions = _draw_mixed(game, _actions(game, lev, trembled), rng)
    theta = _demand_shock(game, rng)
    q, p, profit, work = buffers
    mp, cs = evaluate.py_func(*game.evaluate_args, actions, theta, q, p, profit, work, True)
    if mp != mp:
        raise RuntimeError("stage evaluation failed")
    firms = game.firms
    colluding = [f.states[state[i]][S.COLLUSIVE] == 1 and not cheated[i] and not trembled[i]
                 for i, f in enumerate(firms)]
    all_c = all(colluding)
    # a punishment period: some firm's automaton is in a non-collusive state
    punishing = any(f.states[state[i]][S.COLLUSIVE] == 0 for i, f in enumerate(firms))
    period = {"actions": actions, "prices": p, "profit": profit, "price": mp, "theta": theta, "surplus": cs,
              "cheated": cheated, "trembled": trembled}
    if r < game.run.n_paths:
        _record_path(raw, r, t, period, state, colluding, all_c)
    return period, all_c, punishing


def _enter_state(game: _Game, d: int) -> None:
    """Make demand state ``d``'s market and level profiles the period's (see sim.simulation.state_game)."""
    dm = game.demand
    market = game.market
    game.evaluate_args = (market.code, dm.scalars[d], dm.vector[d], dm.cost[d], dm.capacity[d], market.owner,
                          market.n_firms)
    game.tremble = [float(x) for x in dm.tremble[d]]
    for i, f in enumerate(game.firms):
        f.levels = [[float(v) for v in row] for row in dm.levels[d, i]]


def _play_replication(game: _Game, raw: RawRun, r: int, rng: ReferenceStream, buffers, demand_path=None) -> None:
    state = [f.initial for f in game.firms]
    disc = 1.0
    runs = {"run": 0, "prev": False, "punish": 0}
    for t in range(_horizon(game, rng)):
        if demand_path is not None:
            _enter_state(game, int(demand_path[t]))
        period, all_c, punishing = _play_period(game, raw, r, t, state, rng, buffers)
        state = _next_states(game, state, period, rng)
        raw.profit_sum[r] += period["profit"]
        raw.disc[r] += disc * period["profit"]
        disc *= game.run.delta
        if disc < K._DISC_FLOOR:
            disc = 0.0
        raw.flts[r, K.F_PRICE_SUM] += period["price"]
        raw.flts[r, K.F_CS_SUM] += period["surplus"]
        _count_period(raw, raw.ints[r], runs, t, all_c, punishing)
    if runs["run"] > 0:
        raw.hist[K.H_SPELL_CENSORED if runs["prev"] else K.H_WAR_CENSORED, runs["run"]] += 1
    if runs["punish"] > 0:
        raw.hist[K.H_PUNISH_CENSORED, runs["punish"]] += 1


def reference_run(game, periods: int, replications: int, delta: float, seed: int, key=(0,),
                  horizon: str = "fixed", continuation: float = 1.0, paths: int = 0, demand=None) -> RawRun:
    """Play ``replications`` replications in plain Python, draw for draw as the kernel.

    Parameters
    ----------
    game : Game
        The compiled game (:func:`sim.simulation.game.prepare_game`).
    periods : int
        Number of periods (the cap of a random horizon).
    replications : int
        Number of replications.
    delta : float
        Discount factor of the discounted profit sums.
    seed : int
        The user's seed.
    key : tuple of int
        Stream family of the seeds.
    horizon : {"fixed", "random"}
        ``random``: the game ends after each period with probability ``1 - continuation``.
    continuation : float
        Continuation probability of a random horizon.
    paths : int
        Number of replications (the first ones) whose full paths are recorded.
    demand : StateGame, optional
        Play every period in its demand state's market with the state's level profiles; each replication's
        states are drawn by :func:`sim.theory.draws.draw_state_path` from the stream family ``(key..., 1)``.

    Returns
    -------
    RawRun
        Laid out exactly as :func:`sim.simulation.driver.run_game` lays it out.
    """
    g = _Game(*kernel_groups(game, periods, delta, horizon, continuation, paths))
    g.demand = demand
    raw = RawRun.empty(replications, g.n, g.n_products, periods, paths)
    seeds = stream_states(seed, key, 0, replications)
    buffers = (np.empty(g.n_products), np.empty(g.n_products), np.empty(g.n), np.empty((2, g.n_products)))
    if demand is not None:
        state_seeds = stream_states(seed, (*key, 1), 0, replications)
        raw.demand_path = np.stack([draw_state_path(ReferenceStream(state_seeds[r]), demand.states, periods)
                                    for r in range(replications)])
    for r in range(replications):
        _play_replication(g, raw, r, ReferenceStream(seeds[r]), buffers,
                          None if demand is None else raw.demand_path[r])
    return raw
