"""Plain-Python twin of the alternating-move kernels (:mod:`sim.learning.alternating`): the same draws in the same
order and the same arithmetic, written for reading. Slow; the tests compare it with the kernels bit for bit.
"""

from __future__ import annotations

import math

import numpy as np

from sim.core.rng import ReferenceStream
from sim.learning.inputs import STATUS_CAP, STATUS_CONVERGED

__all__ = ["reference_alternating", "reference_alternating_limit"]


def _first_argmax(row: list) -> int:
    """First index of the largest value (ties go to the lowest price)."""
    return row.index(max(row))


def reference_alternating(lineup, rng_state, convergence: int, max_periods: int) -> dict:
    """One alternating session from its random stream, in plain Python.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
        Two Q-learner seats.
    rng_state : ndarray of uint64, shape (4,)
        The session's generator state at the start.
    convergence : int
        Stop once no greedy action has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.

    Returns
    -------
    dict
        ``status``, ``periods``, ``Q`` (list of 2 tables, ``m_j`` rows of ``m_i`` values), ``greedy`` (list of 2
        lists), ``prices`` and ``seen`` (lists of 2) and ``rng`` (ndarray of uint64, shape (4,), the generator
        state after the last draw).
    """
    rng = ReferenceStream(rng_state)
    seats = lineup.seats
    m = [int(seats.radix[0]), int(seats.radix[1])]
    place = [int(seats.place[0]), int(seats.place[1])]
    payoff = lineup.stage.payoff
    alpha, beta, delta = ([float(x) for x in v] for v in (seats.alpha, seats.beta, seats.delta))
    # the learner's initial values, the same in every state (its first row of the simultaneous table)
    Q = [[[float(lineup.q0[i, 0, a]) for a in range(m[i])] for _s in range(m[1 - i])] for i in range(2)]
    greedy = [[_first_argmax(row) for row in Q[i]] for i in range(2)]
    prices = [rng.next_below(m[0]), rng.next_below(m[1])]
    seen = [-1, -1]
    t, stable = 0, 0
    status = STATUS_CAP
    while t < max_periods:
        i, j = t % 2, 1 - t % 2
        s_new = prices[j]
        changed = False
        if seen[i] >= 0:
            s, a = seen[i], prices[i]
            target = (float(payoff[a * place[i] + s * place[j], i])
                      + delta[i] * float(payoff[a * place[i] + s_new * place[j], i])
                      + delta[i] * delta[i] * Q[i][s_new][greedy[i][s_new]])
            Q[i][s][a] = (1.0 - alpha[i]) * Q[i][s][a] + alpha[i] * target
            best = _first_argmax(Q[i][s])
            if best != greedy[i][s]:
                greedy[i][s] = best
                changed = True
        eps = math.exp(-beta[i] * float(t))
        if rng.next_double() < eps:
            a = rng.next_below(m[i])
        else:
            a = greedy[i][s_new]
        prices[i] = a
        seen[i] = s_new
        t += 1
        stable = 0 if changed else stable + 1
        if stable >= convergence:
            status = STATUS_CONVERGED
            break
    return {"status": status, "periods": t, "Q": Q, "greedy": greedy, "prices": prices, "seen": seen,
            "rng": np.array(rng.s, dtype=np.uint64)}


def reference_alternating_limit(lineup, greedy: list, prices: list, t: int) -> dict:
    """Greedy play from the end of an alternating session, in plain Python: walk until a system state repeats.

    Parameters
    ----------
    lineup : sim.learning.lineup.Lineup
    greedy : list of 2 lists of int
        The learned greedy tables.
    prices : list of 2 int
        The prices in force at the end.
    t : int
        Periods played (who moves next is ``t % 2``).

    Returns
    -------
    dict
        ``transient``, ``length`` and ``period`` (see :func:`sim.learning.alternating.alternating_limit`),
        ``cycle`` (the profiles of one price period) and ``means`` (ndarray of shape (3, 2): mean action, price
        and profit of each seat over the cycle).
    """
    place = [int(x) for x in lineup.seats.place]
    stage = lineup.stage
    p, mover = list(prices), t % 2
    first, path = {}, []
    while (p[0], p[1], mover) not in first:
        first[(p[0], p[1], mover)] = len(path)
        p[mover] = greedy[mover][p[1 - mover]]
        path.append(p[0] * place[0] + p[1] * place[1])
        mover = 1 - mover
    start = first[(p[0], p[1], mover)]
    cycle = path[start:]
    length = len(cycle)
    period = next(d for d in range(1, length + 1) if length % d == 0 and cycle == cycle[d:] + cycle[:d])
    means = np.zeros((3, 2))
    for r, table in enumerate((stage.actions, stage.prices, stage.payoff)):
        for i in range(2):
            means[r, i] = sum(float(table[prof, i]) for prof in cycle) / length
    return {"transient": start, "length": length, "period": period, "cycle": cycle[:period], "means": means}
