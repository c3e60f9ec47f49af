"""Plain-Python twin of the learning kernels: slow, readable, and the check on them.

It follows the definitions rather than the kernels' tricks: a state is the tuple of the last ``k``
action profiles (most recent first), Q-values live in a dictionary keyed by that tuple, the greedy
action is recomputed with ``max`` on every use, and the limit cycle is found by remembering every
state visited. It draws from :class:`sim.core.rng.ReferenceStream` in exactly the kernel's order (see
:mod:`sim.learning.kernel`, "Random draws"), so the tests can require the same Q-matrix, bit for bit,
after any number of periods.

Automaton seats are played from the engine's compiled arrays by the rules of
:mod:`strategies.step`, written out again here in ordinary Python (as :mod:`sim.simulation.twin` does for
the simulation engine): the action of the state, or the cheating level with the state's cheat
probability inside the cheat window; the signal of the state's watch mode (conduct judged against
the expected level, the market price or the own profit against the threshold; no perception errors
next to learners); the next state, or the alternative one with the forgiveness or lapse
probability. A draw is made only when its probability is strictly between 0 and 1.

:func:`reference_session` is the twin of :func:`sim.learning.kernel.run_session`;
:func:`reference_analysis` of :func:`sim.learning.limits.analyse_limit` (deterministic line-ups) and
:func:`reference_estimate` of :func:`sim.learning.limits.estimate_limit` (automata that act at random).
"""

from __future__ import annotations

import itertools
import math

import numpy as np

import strategies.step as S
from sim.core.rng import ReferenceStream
from sim.learning.bandits import twin_choice, twin_update
from sim.learning.shocks import twin_shock
from sim.learning.twin_start import twin_state

__all__ = ["jumped", "reference_analysis", "reference_estimate", "reference_session"]

#: xoshiro256** jump by 2**128 draws (Blackman and Vigna, 2021, ACM TOMS 47(4), their reference ``jump``)
_JUMP = (0x180EC6D33CFD0ABA, 0xD5A61266F0C9392C, 0xA9582618E03FC9AA, 0x39ABDC4529B1661C)


def _argmax(row):
    """First index of the largest value (ties go to the lowest action)."""
    return row.index(max(row))


def jumped(stream):
    """A generator 2**128 draws ahead of ``stream``: the XOR of the states after the draws whose bit is set in
    the jump polynomial.

    Parameters
    ----------
    stream : sim.core.rng.ReferenceStream
        Left unchanged.

    Returns
    -------
    sim.core.rng.ReferenceStream
    """
    work = ReferenceStream(np.array(stream.s, dtype=np.uint64))
    acc = [0, 0, 0, 0]
    for word in _JUMP:
        for b in range(64):
            if (word >> b) & 1:
                acc = [a ^ x for a, x in zip(acc, work.s)]
            work.next_u64()
    out = ReferenceStream(np.zeros(4, dtype=np.uint64))
    out.s = acc
    return out


class _NoDraws:
    """The generator of the exact analysis: deterministic line-ups never draw."""

    def next_double(self):
        raise RuntimeError("the exact analysis drew a random number: the line-up is not deterministic")


class _Automaton:
    """One automaton seat, read from the engine's compiled arrays into plain lists."""

    def __init__(self, lineup, i):
        au = lineup.automata
        self.i = i
        ns = int(au.firms[i, S.N_STATES])
        self.rows = [[int(v) for v in au.states[i, s]] for s in range(ns)]
        self.probs = [[float(v) for v in au.probs[i, s]] for s in range(ns)]
        self.cheat_level = int(au.firms[i, S.CHEAT_LEVEL])
        self.cheat_from = int(au.firms[i, S.CHEAT_FROM])
        self.cheat_until = int(au.firms[i, S.CHEAT_UNTIL])
        self.levels = [[float(v) for v in row] for row in au.levels[i]]
        self.act_of_level = [int(v) for v in au.act_of_level[i]]

    def action(self, z, t, rng):
        """Action index played in state ``z`` at period ``t`` (the cheating level with probability
        ``cheat`` inside the cheat window)."""
        level = self.rows[z][S.ACTION]
        pc = self.probs[z][S.P_CHEAT]
        if pc > 0.0 and self.cheat_from <= t < self.cheat_until and (pc >= 1.0 or rng.next_double() < pc):
            level = self.cheat_level
        return self.act_of_level[level]

    @staticmethod
    def complies(x, expected, judge, quantity_setting):
        tol = S.TOL * max(1.0, abs(expected))
        more = x - expected if quantity_setting else expected - x  # how much more aggressive than expected
        if judge == S.JUDGE_RESTRAINT:
            return more <= tol
        return more >= -tol

    def bad(self, row, pr, values, market_price, own_profit, quantity_setting):
        """Whether the signal of the period is bad, by the state's watch mode."""
        watch = row[S.WATCH]
        if watch == S.WATCH_PRICE:
            return market_price < pr[S.THRESHOLD]
        if watch == S.WATCH_PROFIT:
            return own_profit < pr[S.THRESHOLD]
        if watch == S.WATCH_NOTHING or row[S.EXPECT] < 0:
            return False
        bad = False
        expected = self.levels[row[S.EXPECT]]
        for j, x in enumerate(values):
            ok = self.complies(x, expected[j], row[S.JUDGE], quantity_setting)
            if j == self.i and watch == S.WATCH_RIVALS:
                continue
            bad = bad or not ok
        return bad

    def next(self, z, values, market_price, own_profit, quantity_setting, rng):
        """State after a period in which the seats played action values ``values``."""
        row, pr = self.rows[z], self.probs[z]
        bad = self.bad(row, pr, values, market_price, own_profit, quantity_setting)
        nxt, alt, pa = ((row[S.BAD], row[S.ALT_BAD], pr[S.P_ALT_BAD]) if bad
                        else (row[S.GOOD], row[S.ALT_GOOD], pr[S.P_ALT_GOOD]))
        if pa > 0.0 and (pa >= 1.0 or rng.next_double() < pa):
            nxt = alt
        return nxt


class _Setup:
    """The line-up in plain Python containers."""

    def __init__(self, lineup):
        seats, stage = lineup.seats, lineup.stage
        self.lu = lineup
        self.n = lineup.n_seats
        self.m = [int(r) for r in seats.radix]
        self.learner = [c is not None for c in lineup.learners]
        self.k = [c.k if c is not None else 0 for c in lineup.learners]
        self.K = int(stage.K)  # at least 1: the kernel keeps the last profile even when every learner is a bandit
        self.family = [c.family if c is not None else None for c in lineup.learners]
        self.bandit = [f is not None and f not in ("q", "fixed") for f in self.family]
        self.fixed = [f == "fixed" for f in self.family]
        self.explore = [float(x) for x in seats.explore]
        self.noise = [float(x) for x in seats.noise]
        self.reward_lo = [float(x) for x in seats.reward_lo]
        self.reward_span = [float(x) for x in seats.reward_span]
        self.alpha = [float(x) for x in seats.alpha]
        self.beta = [float(x) for x in seats.beta]
        self.delta = [float(x) for x in seats.delta]
        self.share = [float(x) for x in seats.share]
        self.place = [int(p) for p in seats.place]
        self.M = int(stage.M)
        self.profit_table = stage.payoff.tolist()
        self.prices_table = stage.prices.tolist()
        self.mprice = stage.mprice.tolist()
        self.values = stage.values.tolist()
        self.quantity_setting = bool(stage.quantity_setting)
        self.automata = {i: _Automaton(lineup, i) for i in range(self.n) if not self.learner[i]}

    def index(self, profile):
        return sum(a * p for a, p in zip(profile, self.place))

    def profits(self, profile):
        return self.profit_table[self.index(profile)]

    def state_index(self, history, k):
        """Position of the state ``history[:k]`` in the kernel's layout (lag 1 in the lowest digit)."""
        return sum(self.index(history[lag]) * self.M**lag for lag in range(k))

    def initial_q(self, i):
        """Learner i's Q-values as {state tuple: list of floats}, from the kernel-layout template."""
        q = {}
        li = int(self.lu.seats.lidx[i])
        profiles = [tuple(reversed(p)) for p in itertools.product(*[range(m) for m in reversed(self.m)])]
        for hist in itertools.product(profiles, repeat=self.k[i]):
            s = self.state_index(hist, self.k[i])
            q[hist] = [float(v) for v in self.lu.q0[li, s, : self.m[i]]]
        return q

    def automaton_action(self, i, z, t, rng):
        return self.automata[i].action(z, t, rng)

    def automaton_next(self, i, z, profile, rng):
        vals = [self.values[j][profile[j]] for j in range(self.n)]
        j = self.index(profile)
        return self.automata[i].next(z, vals, self.mprice[j], self.profit_table[j][i], self.quantity_setting, rng)

    def move_automata(self, z, profile, rng):
        """Automaton states after ``profile``, seats in order (learner entries unchanged)."""
        return [z[i] if self.learner[i] else self.automaton_next(i, z[i], profile, rng) for i in range(self.n)]


# ------------------------------------------------------------------------------------------------
# Learning
# ------------------------------------------------------------------------------------------------


def _choose(st, Q, history, z, t, rng, arms):
    """Every seat's action in period ``t``: a Q-learner explores with probability exp(-beta t), else plays its
    greedy action; a bandit chooses by its rule from its statistics ``arms[i] = (counts, sums)``; an automaton
    plays its state's action."""
    profile = []
    for i in range(st.n):
        if st.fixed[i]:
            profile.append(_argmax(Q[i][tuple(history[: st.k[i]])]))
        elif st.bandit[i]:
            profile.append(twin_choice(st.family[i], st.explore[i], *arms[i], rng))
        elif st.learner[i]:
            epsilon = math.exp(-st.beta[i] * t)
            if rng.next_double() < epsilon:
                profile.append(rng.next_below(st.m[i]))
            else:
                profile.append(_argmax(Q[i][tuple(history[: st.k[i]])]))
        else:
            profile.append(st.automaton_action(i, z[i], t, rng))
    return tuple(profile)


def _update(st, Q, states, history, profile, rng, arms, theta=1.0):
    """Every learner updates the value of the action it played in the state it was in, with the best value of
    the state it moved to (and, by its update rule, the values of other actions: :func:`_counterfactual`); a
    bandit its statistics and estimates; every profit is the payoff times the period's demand shock ``theta``;
    returns whether a greedy action changed."""
    profits = [theta * x for x in st.profits(profile)]
    changed = False
    for i in Q:
        if st.fixed[i]:
            continue
        row = Q[i][states[i]]
        before = _argmax(row)
        if st.bandit[i]:
            row[:] = twin_update(st.family[i], profile[i], profits[i], st.reward_lo[i], st.reward_span[i],
                                 st.noise[i], *arms[i], rng)
        elif st.share[i] > 0.0:
            _counterfactual(st, Q[i], i, states[i], profile, rng, theta)
        else:
            continuation = max(Q[i][tuple(history[: st.k[i]])])
            a = profile[i]
            row[a] = (1.0 - st.alpha[i]) * row[a] + st.alpha[i] * (profits[i] + st.delta[i] * continuation)
        if _argmax(row) != before:
            changed = True
    return changed


def _counterfactual(st, Qi, i, state, profile, rng, theta=1.0):
    """The synchronous or mixed update of learner ``i`` in ``state`` (Asker, Fershtman and Pakes, 2022): every
    action ``b`` chosen for an update -- the one played, and each other one with probability ``share`` (a draw
    per action, in increasing order, only when the share is strictly between 0 and 1) -- gets the profit of the
    profile in which ``i`` plays ``b`` and the rivals what they played, and the best value of the state that
    profile would have led to; all continuations are read before the row changes."""
    share, targets = st.share[i], {}
    for b in range(st.m[i]):
        if b == profile[i] or share >= 1.0 or rng.next_double() < share:
            cf = tuple(b if j == i else x for j, x in enumerate(profile))
            reached = (cf, *state[: st.k[i] - 1])  # the state seen after cf, had it been played
            targets[b] = theta * st.profits(cf)[i] + st.delta[i] * max(Qi[reached])
    row = Qi[state]
    for b, target in targets.items():
        row[b] = (1.0 - st.alpha[i]) * row[b] + st.alpha[i] * target


def _kernel_layout(st, lineup, Q):
    """Q-values and greedy actions as the kernel lays them out."""
    q_arr = lineup.q0.copy()
    greedy = np.zeros(q_arr.shape[:2], dtype=np.int64)
    for i in Q:
        li = int(lineup.seats.lidx[i])
        for hist, row in Q[i].items():
            s = st.state_index(hist, st.k[i])
            q_arr[li, s, : st.m[i]] = row
            greedy[li, s] = _argmax(row)
    return q_arr, greedy


def reference_session(lineup, rng_state, convergence, max_periods, shock=0, sigma=0.0, start=None):
    """One session, period by period.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    rng_state : array_like of uint64, shape (4,)
        The session's generator state.
    convergence : int
        Stop once no learner's greedy action has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.
    shock : int
        The demand shock's code (:func:`sim.learning.shocks.shock_code`; 0: none).
    sigma : float
        Its standard deviation.
    start : dict, optional
        A saved session to continue (:func:`sim.learning.twin_start.session_row`; ``rng_state`` is then not used):
        its history, Q-values, statistics, automaton states, record, stream and counters, as the kernel continues
        one (``max_periods`` counts from the saved session's start).

    Returns
    -------
    dict
        ``status`` (0 converged, 1 cap), ``periods``, ``history`` (tuple of the last K profiles, most recent
        first), ``state`` (its index in the kernel's layout), ``z`` (tuple of automaton states), ``Q`` (ndarray
        in the kernel's layout), ``greedy`` (ndarray of shape (n_learners, S_l)), ``rng`` (the generator
        state after the last period, uint64 array of shape (4,)) and ``triggers`` (the record of the automata's
        punishments, int64 array of shape (n, 4), as :func:`sim.learning.kernel.run_session` keeps it), ``counts``
        and ``sums`` (the bandits' statistics, int64 and float64 arrays of shape (n_learners, max(radix))).
    """
    st = _Setup(lineup)
    # the learners' rewards: their own profits, or after a merger of their products the merged firm's profit
    st.profit_table = lineup.learning_stage.payoff.tolist()
    rng = ReferenceStream(rng_state if start is None else start["rng"])
    history = []
    for _lag in range(st.K):
        history.append(tuple(rng.next_below(st.m[i]) for i in range(st.n)))
    Q = {i: st.initial_q(i) for i in range(st.n) if st.learner[i]}
    arms = {i: ([0] * st.m[i], [0.0] * st.m[i]) for i in range(st.n) if st.bandit[i]}
    z = [int(v) for v in lineup.z0]
    record = {i: {"count": 0, "first": -1, "last": -1, "punishing": 0} for i in st.automata}
    t = 0
    stable = 0
    status = 1
    if start is not None:
        # a saved session: everything above replaced by what it had reached (sim.learning.twin_start)
        c = twin_state(st, lineup, start)
        rng, history, Q, arms, z, record, t, stable = (c[x] for x in ("rng", "history", "Q", "arms", "z", "record",
                                                                       "t", "stable"))
        if stable >= convergence:
            # it had converged under this rule: no period is played, as in the kernel
            status, max_periods = 0, t
    while t < max_periods:
        states = {i: tuple(history[: st.k[i]]) for i in Q}
        profile = _choose(st, Q, history, z, t, rng, arms)
        history = [profile, *history[: st.K - 1]]
        # the demand shock, drawn once the seats have chosen (nothing drawn without one)
        theta = twin_shock(shock, sigma, rng)
        changed = _update(st, Q, states, history, profile, rng, arms, theta)
        # automata move after the learners' updates, seats in order
        before, z = z, st.move_automata(z, profile, rng)
        _record_triggers(st, record, before, z, t)
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = 0
            break
    q_arr, greedy = _kernel_layout(st, lineup, Q)
    counts, sums = np.zeros(q_arr.shape[::2], dtype=np.int64), np.zeros(q_arr.shape[::2])
    for i, (n_a, s_a) in arms.items():
        counts[int(lineup.seats.lidx[i]), : st.m[i]], sums[int(lineup.seats.lidx[i]), : st.m[i]] = n_a, s_a
    return {"status": status, "periods": t, "history": tuple(history), "state": st.state_index(history, st.K),
            "z": tuple(z), "Q": q_arr, "greedy": greedy, "rng": np.array(rng.s, dtype=np.uint64),
            "triggers": _trigger_array(st, record), "counts": counts, "sums": sums}


def _record_triggers(st, record, before, after, t):
    """Count, for every automaton, a period played in a non-collusive state as punishing, and a move from a
    collusive state into a non-collusive one as an entry into punishment in period ``t``."""
    for i, au in st.automata.items():
        r = record[i]
        if au.rows[before[i]][S.COLLUSIVE] == 0:
            r["punishing"] += 1
        elif au.rows[after[i]][S.COLLUSIVE] == 0:
            r["count"] += 1
            r["first"] = t if r["first"] < 0 else r["first"]
            r["last"] = t


def _trigger_array(st, record):
    """The record in the kernel's layout (rows of seats; learner rows as :func:`sim.learning.inputs.new_triggers`
    leaves them)."""
    out = [[0, -1, -1, 0] for _ in range(st.n)]
    for i, r in record.items():
        out[i] = [r["count"], r["first"], r["last"], r["punishing"]]
    return np.array(out, dtype=np.int64)


# ------------------------------------------------------------------------------------------------
# Greedy play after learning
# ------------------------------------------------------------------------------------------------


class _GreedyPlay:
    """Greedy play of the learned strategies; a state is ``(history, automaton states)``."""

    def __init__(self, lineup, greedy, t_end):
        self.st = _Setup(lineup)
        self.lu = lineup
        self.greedy = greedy
        self.t_end = t_end

    def start(self, history, z):
        st = self.st
        return tuple(history), tuple(0 if st.learner[i] else int(z[i]) for i in range(st.n))

    def play(self, state, rng):
        hist, zs = state
        st, out = self.st, []
        for i in range(st.n):
            if st.learner[i]:
                out.append(int(self.greedy[int(self.lu.seats.lidx[i]), st.state_index(hist, st.k[i])]))
            else:
                out.append(st.automaton_action(i, zs[i], self.t_end, rng))
        return tuple(out)

    def step(self, state, profile, rng):
        hist, zs = state
        return (profile, *hist[: self.st.K - 1]), tuple(self.st.move_automata(list(zs), profile, rng))

    def deviation(self, state, dev, rng):
        """The deviation period's profile (the others greedy, the deviator forced) and the forced action."""
        st, seat = self.st, dev.seat
        others = self.play(state, rng)
        if dev.action >= 0:
            a_dev = dev.action
        else:
            a_dev = _argmax([self.dev_profit(others[:seat] + (a,) + others[seat + 1:], dev) for a in range(st.m[seat])])
        return others[:seat] + (a_dev,) + others[seat + 1:], a_dev

    def path_to_cycle(self, state, rng):
        """States from ``state`` until one repeats: (transient states, cycle states)."""
        seen, order = {}, []
        while state not in seen:
            seen[state] = len(order)
            order.append(state)
            state = self.step(state, self.play(state, rng), rng)
        start = seen[state]
        return order[:start], order[start:]

    def dev_profit(self, profile, dev):
        """The deviator's profit at ``profile`` as its deviation is valued: its owner's after a merger
        (``dev.value``), else its own."""
        if len(dev.value):
            return float(dev.value[self.st.index(profile)])
        return self.st.profits(profile)[dev.seat]

    def value(self, state, dev, rng):
        """Discounted profit of the deviator (:meth:`dev_profit`) from ``state`` on: transient, then the cycle
        forever."""
        d = dev.discount
        transient, cycle = self.path_to_cycle(state, rng)
        v, w = 0.0, 1.0
        for h in transient:
            v += w * self.dev_profit(self.play(h, rng), dev)
            w *= d
        c, wc = 0.0, 1.0
        for h in cycle:
            c += wc * self.dev_profit(self.play(h, rng), dev)
            wc *= d
        return v + w * c / (1.0 - wc)

    def add(self, rows, tau, profile):
        """Add a profile's prices and profits to row ``tau`` of ``rows = (prices, profits)``."""
        j = self.st.index(profile)
        rows[0][tau] = [a + b for a, b in zip(rows[0][tau], self.st.prices_table[j])]
        rows[1][tau] = [a + b for a, b in zip(rows[1][tau], self.st.profit_table[j])]


def _pays(gain, v_no):
    return gain > 1e-9 * max(1.0, abs(v_no))


def _rows(n, T):
    """Empty response arrays (prices, profits) of T + 2 rows."""
    return [[0.0] * n for _ in range(T + 2)], [[0.0] * n for _ in range(T + 2)]


def _means(rows, k):
    return [[v / k for v in row] for row in rows]


def reference_analysis(lineup, greedy, history, z, t_end, dev, T):
    """Limit cycle and impulse response from a history, by direct simulation.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    greedy : ndarray of int64, shape (n_learners, S_l)
        Greedy action of each learner in each of its states (kernel layout).
    history : tuple of tuple of int
        The last K profiles, most recent first.
    z : sequence of int
        Automaton states (entries of learner seats are ignored).
    t_end : int
        Period counter the automata see during the analysis (the end of learning).
    dev : sim.learning.inputs.DeviationInputs
        As in :func:`sim.learning.limits.analyse_limit` (``action = -1``: static best response).
    T : int
        Periods recorded after the deviation.

    Returns
    -------
    dict
        ``transient``, ``cycle`` (list of profiles), ``lim_prices``, ``lim_profits`` (lists of n), ``ir_prices``,
        ``ir_profits`` (lists of T + 2 rows), ``gain`` (mean value gain), ``pays``, ``returned`` (shares) and
        ``periods_to_return``.
    """
    gp = _GreedyPlay(lineup, greedy, t_end)
    st, n, rng = gp.st, gp.st.n, _NoDraws()
    transient, cycle = gp.path_to_cycle(gp.start(history, z), rng)
    cycle_profiles = [gp.play(h, rng) for h in cycle]
    lam = len(cycle)
    lim_prices = [sum(st.prices_table[st.index(p)][i] for p in cycle_profiles) / lam for i in range(n)]
    lim_profits = [sum(st.profits(p)[i] for p in cycle_profiles) / lam for i in range(n)]
    points = min(lam, dev.points)
    ir = _rows(n, T)
    gains, pays, returned, ret = [], 0, 0, []
    cycle_set = set(cycle)
    for x in cycle[:points]:
        profile, _a = gp.deviation(x, dev, rng)
        rows = [x[0][0], profile]
        y = gp.step(x, profile, rng)
        for _tau in range(T):
            p = gp.play(y, rng)
            rows.append(p)
            y = gp.step(y, p, rng)
        for tau, p in enumerate(rows):
            gp.add(ir, tau, p)
        y0 = gp.step(x, profile, rng)
        v_dev = gp.dev_profit(profile, dev) + dev.discount * gp.value(y0, dev, rng)
        v_no = gp.value(x, dev, rng)
        gains.append(v_dev - v_no)
        pays += _pays(v_dev - v_no, v_no)
        tr2, cy2 = gp.path_to_cycle(y0, rng)
        if cy2[0] in cycle_set:
            returned += 1
            ret.append(len(tr2))
    return {"transient": len(transient), "cycle": cycle_profiles, "lim_prices": lim_prices,
            "lim_profits": lim_profits, "ir_prices": _means(ir[0], points), "ir_profits": _means(ir[1], points),
            "gain": sum(gains) / points, "pays": pays / points, "returned": returned / points,
            "periods_to_return": sum(ret) / len(ret) if ret else float("nan")}


def _simulated_deviation(gp, state, dev, T, branch_base, ir, cf):
    """One deviation and the path without it, each drawing from a copy of ``branch_base`` over
    ``max(horizon, T + 1)`` periods: the first ``T + 1`` added to the response rows, the first ``horizon`` giving
    the deviator's discounted profit. Returns (value with, value without, forced action)."""
    length = max(dev.horizon, T + 1)
    gp.add(ir, 0, state[0][0])
    gp.add(cf, 0, state[0][0])
    rng = ReferenceStream(np.array(branch_base.s, dtype=np.uint64))
    profile, a_dev = gp.deviation(state, dev, rng)
    gp.add(ir, 1, profile)
    v_dev = _follow(gp, gp.step(state, profile, rng), 2, length, T, dev, ir, rng,
                    gp.dev_profit(profile, dev), dev.discount)
    # without it, from the same random numbers
    rng = ReferenceStream(np.array(branch_base.s, dtype=np.uint64))
    v_no = _follow(gp, state, 1, length, T, dev, cf, rng, 0.0, 1.0)
    return v_dev, v_no, a_dev


def _follow(gp, y, first, length, T, dev, rows, rng, v, w):
    """Greedy play from state ``y`` over periods ``first..length``: the first ``T + 1`` added to ``rows``, the first
    ``dev.horizon`` adding the deviator's profit to ``v`` at weights ``w, w * discount, ...``. Returns ``v``."""
    for tau in range(first, length + 1):
        p = gp.play(y, rng)
        if tau <= T + 1:
            gp.add(rows, tau, p)
        if tau <= dev.horizon:
            v += w * gp.dev_profit(p, dev)
            w *= dev.discount
        y = gp.step(y, p, rng)
    return v


def reference_estimate(lineup, greedy, history, z, t_end, rng_state, dev, T):
    """The simulated limit analysis of a line-up whose automata act at random, period by period.

    The main path: greedy play from ``(history, z)`` drawing from the generator at ``rng_state``,
    ``dev.burn_in`` periods not recorded, then ``dev.periods`` periods averaged. At the start of ``points =
    min(dev.points, dev.periods)`` of those, evenly spaced (``0, s, 2 s, ...`` with ``s = dev.periods //
    points``), deviation ``b`` and the path without it are simulated from the main path's state, both
    drawing from the generator at ``rng_state`` jumped ``b + 1`` times by 2**128 draws, each over
    ``max(dev.horizon, T + 1)`` periods. The main path does not see them.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    greedy : ndarray of int64, shape (n_learners, S_l)
    history : tuple of tuple of int
        The last K profiles, most recent first.
    z : sequence of int
        Automaton states.
    t_end : int
        Period counter the automata see.
    rng_state : array_like of uint64, shape (4,)
        The session's generator state at the end of learning.
    dev : sim.learning.inputs.DeviationInputs
        As in :func:`sim.learning.limits.estimate_limit`.
    T : int
        Periods recorded after the deviation.

    Returns
    -------
    dict
        ``lim_actions``, ``lim_prices``, ``lim_profits`` (lists of n), ``ir_prices``, ``ir_profits``,
        ``cf_prices``, ``cf_profits`` (lists of T + 2 rows), ``gain`` (mean realised value gain over
        ``dev.horizon`` periods), ``pays`` (share of deviations with a positive gain), ``first_action`` and
        ``rng`` (the main path's generator state at the end, uint64 array of shape (4,)).
    """
    gp = _GreedyPlay(lineup, greedy, t_end)
    st, n = gp.st, gp.st.n
    main = ReferenceStream(rng_state)
    branch_base = ReferenceStream(rng_state)
    state = gp.start(history, z)
    for _ in range(dev.burn_in):
        state = gp.step(state, gp.play(state, main), main)
    points = min(dev.points, dev.periods)
    spacing = dev.periods // points
    ir, cf = _rows(n, T), _rows(n, T)
    sums = [[0.0] * n for _ in range(3)]
    gains, pays, first_action = [], 0, -1
    for t in range(dev.periods):
        if len(gains) < points and t == len(gains) * spacing:
            branch_base = jumped(branch_base)
            v_dev, v_no, a_dev = _simulated_deviation(gp, state, dev, T, branch_base, ir, cf)
            if first_action < 0:
                first_action = a_dev
            gains.append(v_dev - v_no)
            pays += _pays(v_dev - v_no, v_no)
        p = gp.play(state, main)
        j = st.index(p)
        for i in range(n):
            sums[0][i] += st.values[i][p[i]]
            sums[1][i] += st.prices_table[j][i]
            sums[2][i] += st.profit_table[j][i]
        state = gp.step(state, p, main)
    gain = 0.0
    for g in gains:
        gain += g
    return {"lim_actions": [v / dev.periods for v in sums[0]], "lim_prices": [v / dev.periods for v in sums[1]],
            "lim_profits": [v / dev.periods for v in sums[2]], "ir_prices": _means(ir[0], points),
            "ir_profits": _means(ir[1], points), "cf_prices": _means(cf[0], points),
            "cf_profits": _means(cf[1], points), "gain": gain / points, "pays": pays / points,
            "first_action": first_action, "rng": np.array(main.s, dtype=np.uint64)}
