"""Plain-Python reference of one Q-learning session: slow, readable, and the check on the kernel.

It follows the definitions rather than the kernel's tricks: a state is the tuple of the last ``k``
action profiles (most recent first), Q-values live in a dictionary keyed by that tuple, the greedy
action is recomputed with ``max`` on every use, and the limit cycle is found by remembering every
state visited. It draws from :class:`sim._rng.ReferenceStream` in exactly the kernel's order, so the
tests can require the same Q-matrix, bit for bit, after any number of periods.
"""

from __future__ import annotations

import math

import numpy as np

from ._rng import ReferenceStream

__all__ = ["reference_analysis", "reference_session"]


def _argmax(row):
    """First index of the largest value (ties go to the lowest action)."""
    return row.index(max(row))


def _state_index(history, k, place, M):
    """Position of the state ``history[:k]`` in the kernel's layout (lag 1 in the lowest digit)."""
    s = 0
    for lag in range(k):
        s += sum(a * p for a, p in zip(history[lag], place)) * M**lag
    return s


class _Setup:
    """The line-up in plain Python containers."""

    def __init__(self, lineup):
        self.n = lineup.n_seats
        self.m = [int(r) for r in lineup.radix]
        self.k = [c.k for c in lineup.learners]
        self.K = max(self.k)
        self.alpha = [float(x) for x in lineup.alpha]
        self.beta = [float(x) for x in lineup.beta]
        self.delta = [float(x) for x in lineup.delta]
        self.place = [int(p) for p in lineup.place]
        self.M = int(lineup.M)
        table = lineup.payoff.tolist()
        self.prices_table = lineup.prices.tolist()
        self.actions_table = lineup.actions.tolist()
        self.profit_table = table
        self.q0 = lineup.q0

    def index(self, profile):
        return sum(a * p for a, p in zip(profile, self.place))

    def profits(self, profile):
        return self.profit_table[self.index(profile)]

    def initial_q(self, i):
        """Learner i's Q-values as {state tuple: list of floats}, from the kernel-layout template."""
        import itertools

        q = {}
        profiles = list(itertools.product(*[range(m) for m in reversed(self.m)]))
        profiles = [tuple(reversed(p)) for p in profiles]
        for hist in itertools.product(profiles, repeat=self.k[i]):
            s = _state_index(hist, self.k[i], self.place, self.M)
            q[hist] = [float(v) for v in self.q0[i, s, : self.m[i]]]
        return q


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
    profiles, most recent first), ``state`` (its index in the kernel's layout), ``Q`` (ndarray in the
    kernel's layout, shape (n, S_l, m_max)) and ``greedy`` (ndarray of shape (n, S_l)).
    """
    st = _Setup(lineup)
    rng = ReferenceStream(rng_state)
    history = []
    for _lag in range(st.K):
        history.append(tuple(rng.next_below(st.m[i]) for i in range(st.n)))
    Q = [st.initial_q(i) for i in range(st.n)]

    t = 0
    stable = 0
    status = 1
    while t < max_periods:
        states = [tuple(history[: st.k[i]]) for i in range(st.n)]
        profile = []
        for i in range(st.n):
            epsilon = math.exp(-st.beta[i] * t)
            if rng.next_double() < epsilon:
                profile.append(rng.next_below(st.m[i]))
            else:
                profile.append(_argmax(Q[i][states[i]]))
        profile = tuple(profile)
        profits = st.profits(profile)
        history = [profile, *history[: st.K - 1]]
        changed = False
        for i in range(st.n):
            row = Q[i][states[i]]
            before = _argmax(row)
            continuation = max(Q[i][tuple(history[: st.k[i]])])
            a = profile[i]
            row[a] = (1.0 - st.alpha[i]) * row[a] + st.alpha[i] * (profits[i] + st.delta[i] * continuation)
            if _argmax(row) != before:
                changed = True
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = 0
            break

    q_arr = lineup.q0.copy()
    greedy = np.zeros(q_arr.shape[:2], dtype=np.int64)
    for i in range(st.n):
        for hist, row in Q[i].items():
            s = _state_index(hist, st.k[i], st.place, st.M)
            q_arr[i, s, : st.m[i]] = row
            greedy[i, s] = _argmax(row)
    return {
        "status": status,
        "periods": t,
        "history": tuple(history),
        "state": _state_index(history, st.K, st.place, st.M),
        "Q": q_arr,
        "greedy": greedy,
    }


def reference_analysis(lineup, greedy, history, deviator, dev_action, n_points, T):
    """Limit cycle and impulse response from a history, by direct simulation.

    Parameters
    ----------
    lineup : sim.learning.Lineup
    greedy : ndarray of shape (n, S_l)
        Greedy action of each learner in each of its states (kernel layout).
    history : tuple of profiles
        The last K profiles, most recent first.
    deviator, dev_action, n_points, T
        As in :func:`sim._learnkernel._analyse` (``dev_action = -1``: static best response).

    Returns
    -------
    dict with ``transient``, ``cycle`` (list of profiles), ``lim_prices``, ``lim_profits``,
    ``ir_prices``, ``ir_profits`` (lists of T + 2 rows), ``gain`` (mean value gain), ``pays``,
    ``returned`` (shares) and ``return_periods``.
    """
    st = _Setup(lineup)
    n = st.n

    def play(hist):
        return tuple(int(greedy[i, _state_index(hist, st.k[i], st.place, st.M)]) for i in range(n))

    def step(hist, profile):
        return (profile, *hist[: st.K - 1])

    def path_to_cycle(hist):
        """States from ``hist`` until one repeats: (transient states, cycle states)."""
        seen = {}
        order = []
        while hist not in seen:
            seen[hist] = len(order)
            order.append(hist)
            hist = step(hist, play(hist))
        start = seen[hist]
        return order[:start], order[start:]

    def value(hist, seat, d):
        transient, cycle = path_to_cycle(hist)
        v, w = 0.0, 1.0
        for h in transient:
            v += w * st.profits(play(h))[seat]
            w *= d
        c, wc = 0.0, 1.0
        for h in cycle:
            c += wc * st.profits(play(h))[seat]
            wc *= d
        return v + w * c / (1.0 - wc)

    history = tuple(history)
    transient, cycle = path_to_cycle(history)
    cycle_profiles = [play(h) for h in cycle]
    lam = len(cycle)
    lim_prices = [sum(st.prices_table[st.index(p)][i] for p in cycle_profiles) / lam for i in range(n)]
    lim_profits = [sum(st.profits(p)[i] for p in cycle_profiles) / lam for i in range(n)]

    d = st.delta[deviator]
    points = min(lam, n_points)
    ir_prices = [[0.0] * n for _ in range(T + 2)]
    ir_profits = [[0.0] * n for _ in range(T + 2)]
    gains, pays, returned, ret = [], 0, 0, []
    cycle_set = set(cycle)
    for c in range(points):
        x = cycle[c]
        rows = [x[0]]
        rivals = play(x)
        if dev_action >= 0:
            a_dev = dev_action
        else:
            candidates = [st.profits(rivals[:deviator] + (a,) + rivals[deviator + 1:])[deviator]
                          for a in range(st.m[deviator])]
            a_dev = _argmax(candidates)
        dev = rivals[:deviator] + (a_dev,) + rivals[deviator + 1:]
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
        v_dev = st.profits(dev)[deviator] + d * value(y0, deviator, d)
        v_no = value(x, deviator, d)
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
