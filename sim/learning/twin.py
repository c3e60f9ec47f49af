"""Plain-Python reference of one Q-learning session: slow, readable, and the check on the kernel.

It follows the definitions rather than the kernel's tricks: a state is the tuple of the last ``k``
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

:func:`reference_analysis` is the exact limit analysis of deterministic line-ups;
:func:`reference_estimate` the simulated one of line-ups whose automata act at random.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

import strategies.step as S
from sim.core.rng import ReferenceStream

__all__ = ["jumped", "reference_analysis", "reference_estimate", "reference_session"]


def _argmax(row):
    """First index of the largest value (ties go to the lowest action)."""
    return row.index(max(row))


#: xoshiro256** jump by 2**128 draws (Blackman and Vigna, 2021, ACM TOMS 47(4), their reference ``jump``)
_JUMP = (0x180EC6D33CFD0ABA, 0xD5A61266F0C9392C, 0xA9582618E03FC9AA, 0x39ABDC4529B1661C)


def jumped(stream):
    """A new :class:`~sim.core.rng.ReferenceStream` 2**128 draws ahead of ``stream`` (which is unchanged):
    the XOR of the states after the draws whose bit is set in the jump polynomial."""
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

        self.S = S
        self.i = i
        ns = int(lineup.a_firms[i, S.N_STATES])
        self.rows = [[int(v) for v in lineup.a_states[i, s]] for s in range(ns)]
        self.probs = [[float(v) for v in lineup.a_probs[i, s]] for s in range(ns)]
        self.cheat_level = int(lineup.a_firms[i, S.CHEAT_LEVEL])
        self.cheat_from = int(lineup.a_firms[i, S.CHEAT_FROM])
        self.cheat_until = int(lineup.a_firms[i, S.CHEAT_UNTIL])
        self.levels = [[float(v) for v in row] for row in lineup.a_levels[i]]
        self.act_of_level = [int(v) for v in lineup.act_of_level[i]]

    def action(self, z, t, rng):
        """Action index played in state ``z`` at period ``t`` (the cheating level with probability
        ``cheat`` inside the cheat window)."""
        S = self.S
        level = self.rows[z][S.ACTION]
        pc = self.probs[z][S.P_CHEAT]
        if pc > 0.0 and self.cheat_from <= t < self.cheat_until and (pc >= 1.0 or rng.next_double() < pc):
            level = self.cheat_level
        return self.act_of_level[level]

    def complies(self, x, expected, judge, quantity_setting):
        S = self.S
        tol = S.TOL * max(1.0, abs(expected))
        more = x - expected if quantity_setting else expected - x  # how much more aggressive than expected
        if judge == S.JUDGE_RESTRAINT:
            return more <= tol
        return more >= -tol

    def next(self, z, values, market_price, own_profit, quantity_setting, rng):
        """State after a period in which the seats played action values ``values``."""
        S = self.S
        row, pr = self.rows[z], self.probs[z]
        watch = row[S.WATCH]
        if watch == S.WATCH_NOTHING:
            bad = False
        elif watch == S.WATCH_PRICE:
            bad = market_price < pr[S.THRESHOLD]
        elif watch == S.WATCH_PROFIT:
            bad = own_profit < pr[S.THRESHOLD]
        else:
            bad = False
            if row[S.EXPECT] >= 0:
                expected = self.levels[row[S.EXPECT]]
                for j, x in enumerate(values):
                    ok = self.complies(x, expected[j], row[S.JUDGE], quantity_setting)
                    if j == self.i and watch == S.WATCH_RIVALS:
                        continue
                    bad = bad or not ok
        nxt, alt, pa = ((row[S.BAD], row[S.ALT_BAD], pr[S.P_ALT_BAD]) if bad
                        else (row[S.GOOD], row[S.ALT_GOOD], pr[S.P_ALT_GOOD]))
        if pa > 0.0 and (pa >= 1.0 or rng.next_double() < pa):
            nxt = alt
        return nxt


class _Setup:
    """The line-up in plain Python containers."""

    def __init__(self, lineup):
        self.lu = lineup
        self.n = lineup.n_seats
        self.m = [int(r) for r in lineup.radix]
        self.learner = [c is not None for c in lineup.learners]
        self.k = [c.k if c is not None else 0 for c in lineup.learners]
        self.K = max(self.k)
        self.alpha = [float(x) for x in lineup.alpha]
        self.beta = [float(x) for x in lineup.beta]
        self.delta = [float(x) for x in lineup.delta]
        self.place = [int(p) for p in lineup.place]
        self.M = int(lineup.M)
        self.profit_table = lineup.payoff.tolist()
        self.prices_table = lineup.prices.tolist()
        self.mprice = lineup.mprice.tolist()
        self.values = lineup.values.tolist()
        self.quantity_setting = bool(lineup.market.quantity_setting)
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
        li = int(self.lu.lidx[i])
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


def reference_session(lineup, rng_state, convergence, max_periods):
    """One session, period by period.

    Parameters
    ----------
    lineup : sim.learning.session.Lineup
    rng_state : array_like of 4 uint64
    convergence, max_periods : int

    Returns
    -------
    dict with ``status`` (0 converged, 1 cap), ``periods``, ``history`` (tuple of the last K
    profiles, most recent first), ``state`` (its index in the kernel's layout), ``z`` (automaton
    states), ``Q`` (ndarray in the kernel's layout), ``greedy`` (ndarray of shape (n_learners, S_l))
    and ``rng`` (the generator state after the last period, uint64 array of shape (4,)).
    """
    st = _Setup(lineup)
    rng = ReferenceStream(rng_state)
    history = []
    for _lag in range(st.K):
        history.append(tuple(rng.next_below(st.m[i]) for i in range(st.n)))
    Q = {i: st.initial_q(i) for i in range(st.n) if st.learner[i]}
    z = [int(v) for v in lineup.z0]

    t = 0
    stable = 0
    status = 1
    while t < max_periods:
        states = {i: tuple(history[: st.k[i]]) for i in Q}
        profile = []
        for i in range(st.n):
            if st.learner[i]:
                epsilon = math.exp(-st.beta[i] * t)
                if rng.next_double() < epsilon:
                    profile.append(rng.next_below(st.m[i]))
                else:
                    profile.append(_argmax(Q[i][states[i]]))
            else:
                profile.append(st.automaton_action(i, z[i], t, rng))
        profile = tuple(profile)
        profits = st.profits(profile)
        history = [profile, *history[: st.K - 1]]
        changed = False
        for i in Q:
            row = Q[i][states[i]]
            before = _argmax(row)
            continuation = max(Q[i][tuple(history[: st.k[i]])])
            a = profile[i]
            row[a] = (1.0 - st.alpha[i]) * row[a] + st.alpha[i] * (profits[i] + st.delta[i] * continuation)
            if _argmax(row) != before:
                changed = True
        # automata move after the learners' updates, seats in order
        z = [z[i] if st.learner[i] else st.automaton_next(i, z[i], profile, rng) for i in range(st.n)]
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = 0
            break

    q_arr = lineup.q0.copy()
    greedy = np.zeros(q_arr.shape[:2], dtype=np.int64)
    for i in Q:
        li = int(lineup.lidx[i])
        for hist, row in Q[i].items():
            s = st.state_index(hist, st.k[i])
            q_arr[li, s, : st.m[i]] = row
            greedy[li, s] = _argmax(row)
    return {
        "status": status,
        "periods": t,
        "history": tuple(history),
        "state": st.state_index(history, st.K),
        "z": tuple(z),
        "Q": q_arr,
        "greedy": greedy,
        "rng": np.array(rng.s, dtype=np.uint64),
    }


def reference_analysis(lineup, greedy, history, z, t_end, deviator, dev_action, d_dev, n_points, T):
    """Limit cycle and impulse response from a history, by direct simulation.

    Parameters
    ----------
    lineup : sim.learning.session.Lineup
    greedy : ndarray of shape (n_learners, S_l)
        Greedy action of each learner in each of its states (kernel layout).
    history : tuple of profiles
        The last K profiles, most recent first.
    z : tuple of int
        Automaton states (entries of learner seats are ignored).
    t_end : int
        Period counter the automata see during the analysis (the end of learning).
    deviator, dev_action, d_dev, n_points, T
        As in :func:`sim.learning.kernel._analyse` (``dev_action = -1``: static best response).

    Returns
    -------
    dict with ``transient``, ``cycle`` (list of profiles), ``lim_prices``, ``lim_profits``,
    ``ir_prices``, ``ir_profits`` (lists of T + 2 rows), ``gain`` (mean value gain), ``pays``,
    ``returned`` (shares) and ``return_periods``.
    """
    st = _Setup(lineup)
    n = st.n
    rng = _NoDraws()

    def play(state):
        hist, zs = state
        out = []
        for i in range(n):
            if st.learner[i]:
                out.append(int(greedy[int(lineup.lidx[i]), st.state_index(hist, st.k[i])]))
            else:
                out.append(st.automaton_action(i, zs[i], t_end, rng))
        return tuple(out)

    def step(state, profile):
        hist, zs = state
        new_z = tuple(zs[i] if st.learner[i] else st.automaton_next(i, zs[i], profile, rng) for i in range(n))
        return (profile, *hist[: st.K - 1]), new_z

    def path_to_cycle(state):
        """States from ``state`` until one repeats: (transient states, cycle states)."""
        seen = {}
        order = []
        while state not in seen:
            seen[state] = len(order)
            order.append(state)
            state = step(state, play(state))
        start = seen[state]
        return order[:start], order[start:]

    def value(state, seat, d):
        transient, cycle = path_to_cycle(state)
        v, w = 0.0, 1.0
        for h in transient:
            v += w * st.profits(play(h))[seat]
            w *= d
        c, wc = 0.0, 1.0
        for h in cycle:
            c += wc * st.profits(play(h))[seat]
            wc *= d
        return v + w * c / (1.0 - wc)

    z = tuple(0 if st.learner[i] else int(z[i]) for i in range(n))
    start = (tuple(history), z)
    transient, cycle = path_to_cycle(start)
    cycle_profiles = [play(h) for h in cycle]
    lam = len(cycle)
    lim_prices = [sum(st.prices_table[st.index(p)][i] for p in cycle_profiles) / lam for i in range(n)]
    lim_profits = [sum(st.profits(p)[i] for p in cycle_profiles) / lam for i in range(n)]

    points = min(lam, n_points)
    ir_prices = [[0.0] * n for _ in range(T + 2)]
    ir_profits = [[0.0] * n for _ in range(T + 2)]
    gains, pays, returned, ret = [], 0, 0, []
    cycle_set = set(cycle)
    for c in range(points):
        x = cycle[c]
        rows = [x[0][0]]
        others = play(x)
        if dev_action >= 0:
            a_dev = dev_action
        else:
            candidates = [st.profits(others[:deviator] + (a,) + others[deviator + 1:])[deviator]
                          for a in range(st.m[deviator])]
            a_dev = _argmax(candidates)
        dev = others[:deviator] + (a_dev,) + others[deviator + 1:]
        rows.append(dev)
        y = step(x, dev)
        for _tau in range(T):
            p = play(y)
            rows.append(p)
            y = step(y, p)
        for tau, p in enumerate(rows):
            for i in range(n):
                ir_prices[tau][i] += st.prices_table[st.index(p)][i]
                ir_profits[tau][i] += st.profits(p)[i]
        y0 = step(x, dev)
        v_dev = st.profits(dev)[deviator] + d_dev * value(y0, deviator, d_dev)
        v_no = value(x, deviator, d_dev)
        gains.append(v_dev - v_no)
        if v_dev - v_no > 1e-9 * max(1.0, abs(v_no)):
            pays += 1
        tr2, cy2 = path_to_cycle(y0)
        if cy2[0] in cycle_set:
            returned += 1
            ret.append(len(tr2) + 1)
    ir_prices = [[v / points for v in row] for row in ir_prices]
    ir_profits = [[v / points for v in row] for row in ir_profits]
    return {
        "transient": len(transient),
        "cycle": cycle_profiles,
        "lim_prices": lim_prices,
        "lim_profits": lim_profits,
        "ir_prices": ir_prices,
        "ir_profits": ir_profits,
        "gain": sum(gains) / points,
        "pays": pays / points,
        "returned": returned / points,
        "return_periods": sum(ret) / len(ret) if ret else float("nan"),
    }


def reference_estimate(lineup, greedy, history, z, t_end, rng_state, deviator, dev_action, d_dev, n_points, burn_in,
                       n_periods, horizon, T):
    """The simulated limit analysis of a line-up whose automata act at random, period by period.

    The main path: greedy play from ``(history, z)`` drawing from the generator at ``rng_state``,
    ``burn_in`` periods not recorded, then ``n_periods`` periods averaged. At the start of ``points =
    min(n_points, n_periods)`` of those, evenly spaced (``0, s, 2 s, ...`` with ``s = n_periods //
    points``), deviation ``b`` and the path without it are simulated from the main path's state, both
    drawing from the generator at ``rng_state`` jumped ``b + 1`` times by 2**128 draws, each over
    ``max(horizon, T + 1)`` periods. The main path does not see them.

    Returns
    -------
    dict with ``lim_actions``, ``lim_prices``, ``lim_profits`` (lists of n), ``ir_prices``,
    ``ir_profits``, ``cf_prices``, ``cf_profits`` (lists of T + 2 rows), ``gain`` (mean realised
    value gain over ``horizon`` periods), ``pays`` (share of deviations with a positive gain),
    ``first_action`` and ``rng`` (the main path's generator state at the end, uint64 array of shape (4,)).
    """
    st = _Setup(lineup)
    n = st.n

    def play(state, rng):
        hist, zs = state
        out = []
        for i in range(n):
            if st.learner[i]:
                out.append(int(greedy[int(lineup.lidx[i]), st.state_index(hist, st.k[i])]))
            else:
                out.append(st.automaton_action(i, zs[i], t_end, rng))
        return tuple(out)

    def step(state, profile, rng):
        hist, zs = state
        new_z = tuple(zs[i] if st.learner[i] else st.automaton_next(i, zs[i], profile, rng) for i in range(n))
        return (profile, *hist[: st.K - 1]), new_z

    def add(rows, tau, profile):
        j = st.index(profile)
        rows[0][tau] = [a + b for a, b in zip(rows[0][tau], st.prices_table[j])]
        rows[1][tau] = [a + b for a, b in zip(rows[1][tau], st.profit_table[j])]

    main = ReferenceStream(rng_state)
    branch_base = ReferenceStream(rng_state)
    state = (tuple(history), tuple(0 if st.learner[i] else int(z[i]) for i in range(n)))
    for _ in range(burn_in):
        state = step(state, play(state, main), main)
    points = min(n_points, n_periods)
    spacing = n_periods // points
    length = max(horizon, T + 1)
    ir = ([[0.0] * n for _ in range(T + 2)], [[0.0] * n for _ in range(T + 2)])
    cf = ([[0.0] * n for _ in range(T + 2)], [[0.0] * n for _ in range(T + 2)])
    sums = [[0.0] * n for _ in range(3)]
    gains, pays, first_action = [], 0, -1
    for t in range(n_periods):
        if len(gains) < points and t == len(gains) * spacing:
            branch_base = jumped(branch_base)
            add(ir, 0, state[0][0])
            add(cf, 0, state[0][0])
            # with the deviation
            rng = ReferenceStream(np.array(branch_base.s, dtype=np.uint64))
            others = play(state, rng)
            if dev_action >= 0:
                a_dev = dev_action
            else:
                a_dev = _argmax([st.profits(others[:deviator] + (a,) + others[deviator + 1:])[deviator]
                                 for a in range(st.m[deviator])])
            if first_action < 0:
                first_action = a_dev
            dev = others[:deviator] + (a_dev,) + others[deviator + 1:]
            add(ir, 1, dev)
            v_dev, w = st.profits(dev)[deviator], d_dev
            y = step(state, dev, rng)
            for tau in range(2, length + 1):
                p = play(y, rng)
                if tau <= T + 1:
                    add(ir, tau, p)
                if tau <= horizon:
                    v_dev += w * st.profits(p)[deviator]
                    w *= d_dev
                y = step(y, p, rng)
            # without it, from the same random numbers
            rng = ReferenceStream(np.array(branch_base.s, dtype=np.uint64))
            v_no, w = 0.0, 1.0
            y = state
            for tau in range(1, length + 1):
                p = play(y, rng)
                if tau <= T + 1:
                    add(cf, tau, p)
                if tau <= horizon:
                    v_no += w * st.profits(p)[deviator]
                    w *= d_dev
                y = step(y, p, rng)
            gains.append(v_dev - v_no)
            if v_dev - v_no > 1e-9 * max(1.0, abs(v_no)):
                pays += 1
        p = play(state, main)
        j = st.index(p)
        for i in range(n):
            sums[0][i] += st.values[i][p[i]]
            sums[1][i] += st.prices_table[j][i]
            sums[2][i] += st.profit_table[j][i]
        state = step(state, p, main)
    gain = 0.0
    for g in gains:
        gain += g
    return {
        "lim_actions": [v / n_periods for v in sums[0]],
        "lim_prices": [v / n_periods for v in sums[1]],
        "lim_profits": [v / n_periods for v in sums[2]],
        "ir_prices": [[v / points for v in row] for row in ir[0]],
        "ir_profits": [[v / points for v in row] for row in ir[1]],
        "cf_prices": [[v / points for v in row] for row in cf[0]],
        "cf_profits": [[v / points for v in row] for row in cf[1]],
        "gain": gain / points,
        "pays": pays / points,
        "first_action": first_action,
        "rng": np.array(main.s, dtype=np.uint64),
    }
