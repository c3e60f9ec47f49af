"""numba kernel of a Q-learning session (see :mod:`sim.learning.session` for the public API).

Everything here takes the grouped arrays of :mod:`sim.learning.inputs`, writes into the arrays it is given and
returns status codes; nothing raises, allocates large buffers or knows about files. The readable twin of every
function is in :mod:`sim.learning.twin`, and the tests check that both give the same numbers bit for bit. Greedy
play after learning (limit cycle, impulse response, value of a deviation) is in :mod:`sim.learning.limits`.

Layout
------
* Seats ``0 .. n-1`` (one per firm), each a learner (``kind = LEARNER``) or an automaton from
  :mod:`strategies` (``kind = AUTOMATON``), stepped by the engine's own numba functions
  (:mod:`strategies.step`) on the engine's compiled arrays.
* Seat ``i`` has ``radix[i]`` actions (a learner's grid; an automaton's distinct action values). An
  action profile is the mixed-radix number ``prof = sum_i a_i * place[i]`` with
  ``place[i] = prod(radix[:i])``; there are ``M = prod(radix)`` profiles.
* The history state is the profile of the last ``K`` periods, ``s = sum_l prof_{t-1-l} * M**l`` (lag 1
  in the lowest digit), ``0 <= s < S = M**K``. Learner ``i`` with memory ``k_i <= K`` sees
  ``s % mod[i]`` (``mod[i] = M**k_i``).
* ``payoff[prof, i]``: profit of seat ``i``; ``Q[lidx[i], state, a]``; ``greedy[lidx[i], state]``: the
  first index of the largest entry of ``Q[lidx[i], state, :radix[i]]``, maintained incrementally (only
  the row just updated can change, and the test in :func:`_update_learner` keeps the first-index rule exact).
* Automaton seat ``i`` is in state ``z[i]``; level ``l`` it plays is action ``act_of_level[i, l]``;
  ``values[i, a]`` is the value of action ``a`` (what the automata's signals look at), ``mprice[prof]``
  the public market price of a profile.

One period of the protocol played here (simultaneous moves, epsilon-greedy Q-learning updating the action played)
is three steps, each an inlined function: every seat chooses (:func:`_choose_actions`), every learner updates the
value of the action it played (:func:`_update_learners`), every automaton moves on its signal
(:func:`_move_automata`). Another protocol replaces a step, not the loop.

Random draws
------------
Everything draws from the session's one xoshiro256** stream, in this fixed order. Learning, per
period: seats in order, a learner's exploration draws (one uniform, and a second one when it explores)
or an automaton's cheat draw (:func:`strategies.step.choose_level`); then, after the learners'
updates, automaton seats in order, each its transition draw (:func:`strategies.step.next_state`).
Automata seated with learners see no perception errors, so :func:`strategies.step.bad_signal` never
draws here. The engine's functions draw only when a probability is strictly between 0 and 1, so a
line-up of deterministic automata draws exactly what the learners draw.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.rng import next_below, next_double
from sim.learning.inputs import AUTOMATON, LEARNER, STATUS_CAP, STATUS_CONVERGED
from strategies.step import bad_signal, choose_level, next_state

__all__ = ["initial_state", "run_session"]


@njit(cache=True, nogil=True)
def initial_state(rng, seats, stage):
    """Draw the history of the first ``K`` periods uniformly: lag 1 first, seats in order.

    Parameters
    ----------
    rng : ndarray of uint64, shape (4,)
        The session's generator state, advanced in place.
    seats : SeatInputs
    stage : StageInputs

    Returns
    -------
    int
        The history state ``s``, ``0 <= s < S``.
    """
    s = 0
    mult = 1
    for _lag in range(stage.K):
        prof = 0
        for i in range(seats.radix.size):
            prof += next_below(rng, seats.radix[i]) * seats.place[i]
        s += prof * mult
        mult *= stage.M
    return s


@njit(cache=True, nogil=True, inline="always")
def _choose_actions(s, t, seats, stage, automata, session, act):
    """Every seat's action in period ``t`` from history state ``s``, into ``act``; returns the profile number.

    A learner draws one uniform ``u`` and, if ``u < exp(-beta t)`` (t counted from 0), a second one that picks
    its action uniformly; otherwise it plays its greedy action. An automaton draws what
    :func:`strategies.step.choose_level` draws.
    """
    tf = np.float64(t)
    prof = 0
    eps = -1.0
    prev_beta = -1.0
    for i in range(seats.radix.size):
        if seats.kind[i] == LEARNER:
            si = s if seats.mod[i] == stage.S else s % seats.mod[i]
            # one exponential per period when the learners share beta (the usual case)
            if seats.beta[i] != prev_beta:
                eps = math.exp(-seats.beta[i] * tf)
                prev_beta = seats.beta[i]
            if next_double(session.rng) < eps:
                a = next_below(session.rng, seats.radix[i])
            else:
                a = session.greedy[seats.lidx[i], si]
        else:
            lev, _cheated = choose_level(i, session.z[i], t, automata.states, automata.probs, automata.firms,
                                         session.rng)
            a = automata.act_of_level[i, lev]
        act[i] = a
        prof += a * seats.place[i]
    return prof


@njit(cache=True, nogil=True, inline="always")
def _next_history(prof, s, stage):
    """The history state after profile ``prof`` is played in history state ``s`` (lag 1 in the lowest digit)."""
    return prof if stage.K == 1 else prof + (s * stage.M) % stage.S


@njit(cache=True, nogil=True, inline="always")
def _update_learner(i, si, sn, a, reward, seats, session):
    """Learner seat ``i`` played action ``a`` in its state ``si``, earned ``reward`` and moved to its state
    ``sn``: the Q-learning update of that one entry (Watkins and Dayan, 1992), with the value of ``sn`` before any
    update of this period, and the greedy action of row ``si`` kept up to date. Returns whether it changed."""
    li = seats.lidx[i]
    Q = session.Q
    greedy = session.greedy
    alpha = seats.alpha[i]
    target = reward + seats.delta[i] * Q[li, sn, greedy[li, sn]]
    old = Q[li, si, a]
    new = (1.0 - alpha) * old + alpha * target
    Q[li, si, a] = new
    g = greedy[li, si]
    if a == g:
        if new < old:
            # the greedy action lost value: search the row again (first index of the largest)
            best = 0
            bv = Q[li, si, 0]
            for j in range(1, seats.radix[i]):
                if Q[li, si, j] > bv:
                    bv = Q[li, si, j]
                    best = j
            if best != g:
                greedy[li, si] = best
                return True
        return False
    qg = Q[li, si, g]
    if new > qg or (new == qg and a < g):
        greedy[li, si] = a
        return True
    return False


@njit(cache=True, nogil=True, inline="always")
def _update_learners(s, s_new, prof, act, seats, stage, session):
    """Every learner updates the value of the action it played (asynchronous updating); returns whether any
    learner's greedy strategy changed."""
    changed = False
    for i in range(seats.radix.size):
        if seats.kind[i] != LEARNER:
            continue
        if seats.mod[i] == stage.S:
            si = s
            sn = s_new
        else:
            si = s % seats.mod[i]
            sn = s_new % seats.mod[i]
        if _update_learner(i, si, sn, act[i], stage.payoff[prof, i], seats, session):
            changed = True
    return changed


@njit(cache=True, nogil=True, inline="always")
def _move_automata(prof, act, vals, seats, stage, automata, session):
    """Every automaton seat, in order, moves on its signal of profile ``prof`` (no perception errors next to
    learners); ``vals`` is scratch of shape (n,)."""
    n = seats.radix.size
    for i in range(n):
        vals[i] = stage.values[i, act[i]]
    for i in range(n):
        if seats.kind[i] == AUTOMATON:
            bad = bad_signal(i, session.z[i], n, vals, seats.owner, stage.mprice[prof], stage.payoff[prof, i], 0.0,
                             automata.states, automata.probs, automata.levels, stage.quantity_setting, session.rng)
            session.z[i] = next_state(i, session.z[i], bad, automata.states, automata.probs, session.rng)


@njit(cache=True, nogil=True)
def run_session(seats, stage, automata, session, s, convergence, max_periods):
    """Run one session from history state ``s`` until convergence or the cap.

    Parameters
    ----------
    seats : SeatInputs
    stage : StageInputs
    automata : AutomatonInputs
    session : SessionState
        Modified in place; ``session.greedy`` must hold the first argmax of every row of ``session.Q`` on entry.
    s : int
        History state at the start (:func:`initial_state`).
    convergence : int
        Stop once no learner's greedy strategy has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.

    Returns
    -------
    status : int
        ``STATUS_CONVERGED`` or ``STATUS_CAP``.
    periods : int
        Periods played.
    s : int
        History state after the last period.
    """
    n = seats.radix.size
    act = np.empty(n, np.int64)
    vals = np.empty(n, np.float64)
    has_automata = False
    for i in range(n):
        if seats.kind[i] == AUTOMATON:
            has_automata = True
    t = 0
    stable = 0
    while t < max_periods:
        prof = _choose_actions(s, t, seats, stage, automata, session, act)
        s_new = _next_history(prof, s, stage)
        changed = _update_learners(s, s_new, prof, act, seats, stage, session)
        if has_automata:
            _move_automata(prof, act, vals, seats, stage, automata, session)
        s = s_new
        t += 1
        if changed:
            stable = 0
        else:
            stable += 1
            if stable >= convergence:
                return STATUS_CONVERGED, t, s
    return STATUS_CAP, t, s
