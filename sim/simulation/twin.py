"""Plain-Python reference of the simulation loop, for tests and for the speed ratio of ``supergame bench``.

It plays the same line-up with the same random draws in the same order as :mod:`sim.simulation.kernel`
(:class:`sim.core.rng.ReferenceStream` is the bit-exact twin of the kernel's generator), one replication
at a time, with the automaton logic written out again in ordinary Python from the compiled arrays.
The stage game of each period is evaluated by the pure-Python original of the numba stage core
(``sim.models.stagecore.evaluate.py_func``), itself checked against the numpy definitions of
:mod:`sim.models.demand` and :mod:`sim.models.market`.

:func:`reference_run` returns a :class:`sim.simulation.engine.RawRun` laid out exactly as the driver's, so that a
test can compare every array.
"""

from __future__ import annotations

import math

import numpy as np

import sim.simulation.kernel as K
import strategies.step as S
from sim.core.rng import ReferenceStream, stream_states
from sim.models.stagecore import evaluate
from sim.simulation.engine import RawRun

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


def reference_run(game, periods: int, replications: int, delta: float, seed: int, key=(0,),
                  horizon: str = "fixed", continuation: float = 1.0, paths: int = 0):
    """Play ``replications`` replications in plain Python; arguments as :func:`sim.simulation.engine.run_game`."""

    mk = game.arrays
    lu = game.lineup
    mon = game.monitoring
    n, P = mk.n_firms, mk.n_products
    owner = [int(o) for o in mk.owner]
    firms = [_Firm(i, lu) for i in range(n)]
    tremble = [float(x) for x in game.tremble]
    sigma = mon["sigma"]
    noise = mon["noise_code"]
    e_perc = mon["perception_error"]
    e_impl = mon["implementation_error"]
    qset = mk.quantity_setting
    raw = RawRun.empty(replications, n, P, periods, paths)
    seeds = stream_states(seed, key, 0, replications)
    q = np.empty(P)
    p = np.empty(P)
    profit = np.empty(n)
    work = np.empty((2, P))
    args = mk.args()
    for r in range(replications):
        rng = ReferenceStream(seeds[r])
        H = periods
        if horizon == "random":
            u = rng.next_double()
            if continuation < 1.0:
                H = min(periods, 1 + math.floor(math.log(1.0 - u) / math.log(continuation)))
        state = [f.initial for f in firms]
        disc = 1.0
        prev = False
        run = 0
        prun = 0
        counts = raw.ints[r]
        for t in range(H):
            # 1. levels, with cheating
            lev, cheated = [], []
            for i, f in enumerate(firms):
                s = state[i]
                level, ch = f.states[s][S.ACTION], False
                pc = f.probs[s][S.P_CHEAT]
                if pc > 0.0 and f.cheat_from <= t < f.cheat_until and (pc >= 1.0 or rng.next_double() < pc):
                    level, ch = f.cheat_level, True
                lev.append(level)
                cheated.append(ch)
                counts[K.R_CHEATS] += ch
            # 2. implementation errors
            trembled = [False] * n
            if e_impl > 0.0:
                trembled = [rng.next_double() < e_impl for _ in range(n)]
                counts[K.R_TREMBLES] += sum(trembled)
            actions = np.array([tremble[k] if trembled[owner[k]] else firms[owner[k]].levels[lev[owner[k]]][k]
                                for k in range(P)])
            # 3. demand shock
            theta = 1.0
            if noise == 1:
                theta = math.exp(sigma * rng.next_normal_zig() - 0.5 * sigma * sigma)
            elif noise == 2:
                theta = max(0.0, 1.0 + sigma * rng.next_normal_zig())  # floored at zero (sim.models.monitoring)
            # 4. the stage game
            mp, cs = evaluate.py_func(*args, actions, theta, q, p, profit, work, True)
            if mp != mp:
                raise RuntimeError("stage evaluation failed")
            # 5. who colludes
            colluding = [f.states[state[i]][S.COLLUSIVE] == 1 and not cheated[i] and not trembled[i]
                         for i, f in enumerate(firms)]
            all_c = all(colluding)
            # a punishment period: some firm's automaton is in a non-collusive state
            punishing = any(f.states[state[i]][S.COLLUSIVE] == 0 for i, f in enumerate(firms))
            if r < paths:
                raw.path_actions[r, t] = actions
                raw.path_prices[r, t] = p
                raw.path_market[r, t] = (mp, theta, cs)
                raw.path_profit[r, t] = profit
                raw.path_state[r, t] = state
                raw.path_flags[r, t] = [(K.FLAG_CHEAT if cheated[i] else 0) | (K.FLAG_TREMBLE if trembled[i] else 0)
                                        | (K.FLAG_COLLUDE if colluding[i] else 0) for i in range(n)]
                raw.path_collude[r, t] = int(all_c)
            # 6. signals and transitions
            new_state = []
            for i, f in enumerate(firms):
                row, pr = f.states[state[i]], f.probs[state[i]]
                watch = row[S.WATCH]
                if watch == S.WATCH_NOTHING:
                    bad = False
                elif watch == S.WATCH_PRICE:
                    bad = mp < pr[S.THRESHOLD]
                elif watch == S.WATCH_PROFIT:
                    bad = profit[i] < pr[S.THRESHOLD]
                else:
                    bad = False
                    expected = f.levels[row[S.EXPECT]]
                    for j in range(n):
                        ok = all(_complies(actions[k], expected[k], row[S.JUDGE], qset) for k in range(P)
                                 if owner[k] == j)
                        if j == i:
                            bad = bad or (watch == S.WATCH_ALL and not ok)
                            continue
                        if e_perc > 0.0 and rng.next_double() < e_perc:
                            ok = not ok
                        bad = bad or not ok
                nxt, alt, pa = ((row[S.BAD], row[S.ALT_BAD], pr[S.P_ALT_BAD]) if bad
                                else (row[S.GOOD], row[S.ALT_GOOD], pr[S.P_ALT_GOOD]))
                if pa > 0.0 and (pa >= 1.0 or rng.next_double() < pa):
                    nxt = alt
                new_state.append(nxt)
            state = new_state
            # 7. metrics
            raw.profit_sum[r] += profit
            raw.disc[r] += disc * profit
            disc *= delta
            if disc < K._DISC_FLOOR:
                disc = 0.0
            raw.flts[r, K.F_PRICE_SUM] += mp
            raw.flts[r, K.F_CS_SUM] += cs
            raw.by_period[1, t] += 1
            if all_c:
                raw.by_period[0, t] += 1
                counts[K.R_COLLUSIVE] += 1
            else:
                counts[K.R_WAR_PERIODS] += 1
                if counts[K.R_FIRST_BREAKDOWN] == 0:
                    counts[K.R_FIRST_BREAKDOWN] = t + 1
            if t == 0:
                run = 1
                counts[K.R_SPELLS if all_c else K.R_WARS] += 1
            elif all_c == prev:
                run += 1
            else:
                if prev:
                    raw.hist[K.H_SPELL_ENDED, run] += 1
                    counts[K.R_SPELLS_ENDED] += 1
                    counts[K.R_SPELL_PERIODS_ENDED] += run
                    counts[K.R_WARS] += 1
                else:
                    raw.hist[K.H_WAR_ENDED, run] += 1
                    counts[K.R_WARS_ENDED] += 1
                    counts[K.R_WAR_PERIODS_ENDED] += run
                    counts[K.R_SPELLS] += 1
                run = 1
            prev = all_c
            if punishing:
                prun += 1
            elif prun > 0:
                raw.hist[K.H_PUNISH_ENDED, prun] += 1
                prun = 0
            counts[K.R_PERIODS] += 1
        if run > 0:
            raw.hist[K.H_SPELL_CENSORED if prev else K.H_WAR_CENSORED, run] += 1
        if prun > 0:
            raw.hist[K.H_PUNISH_CENSORED, prun] += 1
    return raw
