"""Plain-Python reference of one Q-learning session: slow, readable, and the check on the kernel.

It follows the definitions rather than the kernel's tricks: a state is the tuple of the last ``k``
action profiles (most recent first), Q-values live in a dictionary keyed by that tuple, the greedy
action is recomputed with ``max`` on every use, and the limit cycle is found by remembering every
state visited. It draws from :class:`sim._rng.ReferenceStream` in exactly the kernel's order, so the
tests can require the same Q-matrix, bit for bit, after any number of periods.

Automaton seats are stepped with the engine's own functions (:mod:`strategies._step`) in their
uncompiled Python form (``.py_func``): this module re-implements the learning, not the automata.
Automata seated with learners are deterministic (the line-up compiler refuses random ones), so they
never draw from the stream.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from ._rng import ReferenceStream

__all__ = ["reference_analysis", "reference_session"]


def _argmax(row):
    """First index of the largest value (ties go to the lowest action)."""
    return row.index(max(row))


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
        self.values = lineup.values
        self.act_of_level = lineup.act_of_level.tolist()
        self.owner = np.arange(self.n, dtype=np.int64)
        self.no_draws = np.zeros(4, dtype=np.uint64)  # automata here never draw

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

    def automaton_action(self, i, z, t):
        from strategies import _step as S

        lu = self.lu
        level, _cheated = S.choose_level.py_func(i, z, t, lu.a_states, lu.a_probs, lu.a_firms, self.no_draws)
        return self.act_of_level[i][level]

    def automaton_next(self, i, z, profile):
        from strategies import _step as S

        lu = self.lu
        vals = np.array([self.values[j, profile[j]] for j in range(self.n)])
        j = self.index(profile)
        bad = S.bad_signal.py_func(i, z, self.n, vals, self.owner, self.mprice[j], self.profit_table[j][i], 0.0,
                                   lu.a_states, lu.a_probs, lu.a_levels, bool(lu.market.quantity_setting),
                                   self.no_draws)
        return int(S.next_state.py_func(i, z, bad, lu.a_states, lu.a_probs, self.no_draws))


def reference_session(lineup, rng_state, convergence, max_periods):
    """One session, period by period.

    Parameters
    ----------
    lineup : sim.learning.Lineup
    rng_state : array_like of 4 uint64
    convergence, max_periods : int

    Returns
    -------
    dict with ``status`` (0 converged, 1 cap), ``periods``, ``history`` (tuple of the last K
    profiles, most recent first), ``state`` (its index in the kernel's layout), ``z`` (automaton
    states), ``Q`` (ndarray in the kernel's layout) and ``greedy`` (ndarray of shape (n_learners, S_l)).
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
                profile.append(st.automaton_action(i, z[i], t))
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
        z = [z[i] if st.learner[i] else st.automaton_next(i, z[i], profile) for i in range(st.n)]
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
    }


def reference_analysis(lineup, greedy, history, z, t_end, deviator, dev_action, d_dev, n_points, T):
    """Limit cycle and impulse response from a history, by direct simulation.

    Parameters
    ----------
    lineup : sim.learning.Lineup
    greedy : ndarray of shape (n_learners, S_l)
        Greedy action of each learner in each of its states (kernel layout).
    history : tuple of profiles
        The last K profiles, most recent first.
    z : tuple of int
        Automaton states (entries of learner seats are ignored).
    t_end : int
        Period counter the automata see during the analysis (the end of learning).
    deviator, dev_action, d_dev, n_points, T
        As in :func:`sim._learnkernel._analyse` (``dev_action = -1``: static best response).

    Returns
    -------
    dict with ``transient``, ``cycle`` (list of profiles), ``lim_prices``, ``lim_profits``,
    ``ir_prices``, ``ir_profits`` (lists of T + 2 rows), ``gain`` (mean value gain), ``pays``,
    ``returned`` (shares) and ``return_periods``.
    """
    st = _Setup(lineup)
    n = st.n

    def play(state):
        hist, zs = state
        out = []
        for i in range(n):
            if st.learner[i]:
                out.append(int(greedy[int(lineup.lidx[i]), st.state_index(hist, st.k[i])]))
            else:
                out.append(st.automaton_action(i, zs[i], t_end))
        return tuple(out)

    def step(state, profile):
        hist, zs = state
        new_z = tuple(zs[i] if st.learner[i] else st.automaton_next(i, zs[i], profile) for i in range(n))
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
