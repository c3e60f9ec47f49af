"""Plain-Python twin of :func:`sim.simulation.multimarket.simulate_markets`, for tests: the same draws in the same
order (:class:`sim.core.rng.ReferenceStream`), one replication at a time, the automata written out again from the
stacked arrays and each market evaluated by the pure-Python original of the stage core.
"""

from __future__ import annotations

import numpy as np

import strategies.step as S
from sim.core.rng import ReferenceStream, stream_states
from sim.models.stagecore import evaluate
from sim.simulation.multimarket import MarketsInputs, MarketsRun, markets_inputs

__all__ = ["reference_markets"]


def _complies(x: float, expected: float, judge: int, quantity_setting: bool) -> bool:
    tol = S.TOL * max(1.0, abs(expected))
    more = x - expected if quantity_setting else expected - x
    return more <= tol if judge == S.JUDGE_RESTRAINT else more >= -tol


def _choose(inp: MarketsInputs, m: int, i: int, s: int, t: int, rng: ReferenceStream) -> tuple[int, bool]:
    row, pr, fi = inp.states[m, i, s], inp.probs[m, i, s], inp.firms[m, i]
    pc = pr[S.P_CHEAT]
    if pc > 0.0 and fi[S.CHEAT_FROM] <= t < fi[S.CHEAT_UNTIL] and (pc >= 1.0 or rng.next_double() < pc):
        return int(fi[S.CHEAT_LEVEL]), True
    return int(row[S.ACTION]), False


def _bad(inp: MarketsInputs, m: int, i: int, s: int, actions, price: float, profit: float, rng) -> bool:
    row, pr = inp.states[m, i, s], inp.probs[m, i, s]
    watch = row[S.WATCH]
    if watch == S.WATCH_NOTHING:
        return False
    if watch == S.WATCH_PRICE:
        return price < pr[S.THRESHOLD]
    if watch == S.WATCH_PROFIT:
        return profit < pr[S.THRESHOLD]
    n = int(inp.n_firms[m])
    bad = False
    for j in range(n):
        ok = True
        if row[S.EXPECT] >= 0:
            expected = inp.levels[m, i, row[S.EXPECT]]
            ok = all(_complies(actions[k], expected[k], row[S.JUDGE], bool(inp.quantity_setting[m]))
                     for k in range(n) if inp.owner[m, k] == j)
        if j == i:
            bad = bad or (watch == S.WATCH_ALL and not ok)
            continue
        if inp.perception_error > 0.0 and rng.next_double() < inp.perception_error:
            ok = not ok
        bad = bad or not ok
    return bad


def _next(inp: MarketsInputs, m: int, i: int, s: int, bad: bool, rng: ReferenceStream) -> int:
    row, pr = inp.states[m, i, s], inp.probs[m, i, s]
    nxt, alt, pa = ((row[S.BAD], row[S.ALT_BAD], pr[S.P_ALT_BAD]) if bad
                    else (row[S.GOOD], row[S.ALT_GOOD], pr[S.P_ALT_GOOD]))
    if pa > 0.0 and (pa >= 1.0 or rng.next_double() < pa):
        nxt = alt
    return int(nxt)


def _replication(inp: MarketsInputs, out: MarketsRun, r: int, rng: ReferenceStream, periods: int, delta: float,
                 pooled: bool, paths: int) -> None:
    M = inp.owner.shape[0]
    N = [int(x) for x in inp.n_firms]
    ids = [[int(inp.firm_ids[m, i]) for i in range(N[m])] for m in range(M)]
    state = [[int(inp.firms[m, i, S.INITIAL]) for i in range(N[m])] for m in range(M)]
    disc = 1.0
    for t in range(periods):
        chosen = [[_choose(inp, m, i, state[m][i], t, rng) for i in range(N[m])] for m in range(M)]
        e = inp.implementation_error
        trembled = [[e > 0.0 and rng.next_double() < e for _ in range(N[m])] for m in range(M)]
        acts, prices, profits = [], [], []
        for m in range(M):
            n = N[m]
            own = inp.owner[m, :n]
            a = np.array([inp.tremble[m, k] if trembled[m][own[k]] else inp.levels[m, own[k], chosen[m][own[k]][0], k]
                          for k in range(n)])
            q, p, pi, work = np.empty(n), np.empty(n), np.empty(n), np.empty((2, n))
            mp, _ = evaluate.py_func(inp.codes[m], inp.scalars[m], inp.vector[m, :n], inp.cost[m, :n],
                                     inp.capacity[m, :n], own, n, a, 1.0, q, p, pi, work, False)
            acts.append(a)
            prices.append(mp)
            profits.append(pi.copy())
            out.profit[r, m, :n] += pi
            out.disc[r, m, :n] += disc * pi
            all_c = all(inp.states[m, i, state[m][i], S.COLLUSIVE] == 1 and not chosen[m][i][1] and not trembled[m][i]
                        for i in range(n))
            out.collusive[r, m] += all_c
            if r < paths:
                out.path_actions[r, t, m, :n] = a
                out.path_state[r, t, m, :n] = state[m]
                out.path_collude[r, t, m] = int(all_c)
        bad = [[_bad(inp, m, i, state[m][i], acts[m], prices[m], profits[m][i], rng) for i in range(N[m])]
               for m in range(M)]
        if pooled:
            seen = {g for m in range(M) for i in range(N[m]) if bad[m][i] for g in (ids[m][i],)}
            bad = [[ids[m][i] in seen for i in range(N[m])] for m in range(M)]
        state = [[_next(inp, m, i, state[m][i], bad[m][i], rng) for i in range(N[m])] for m in range(M)]
        disc *= delta


def reference_markets(games, periods: int, replications: int, delta: float, seed: int, key=(0,), pooled: bool = True,
                      paths: int = 0, firm_ids=None) -> MarketsRun:
    """Play the markets in plain Python, draw for draw as :func:`sim.simulation.multimarket.simulate_markets`.

    Parameters
    ----------
    games : list of Game
    periods, replications : int
    delta : float
    seed : int
    key : tuple of int
    pooled : bool
    paths : int
    firm_ids : list of array_like of int, optional

    Returns
    -------
    MarketsRun
    """
    inp = markets_inputs(games, firm_ids)
    M, n = inp.owner.shape
    out = MarketsRun.empty(replications, M, n, periods, paths)
    seeds = stream_states(seed, key, 0, replications)
    for r in range(replications):
        _replication(inp, out, r, ReferenceStream(seeds[r]), periods, delta, pooled, paths)
    return out
