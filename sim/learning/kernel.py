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

One period of the protocol played here (simultaneous moves, epsilon-greedy Q-learning)
is three steps, marked in :func:`run_session`: every seat chooses (the exploration probability is
:func:`_exploration`), every learner updates the value of the action it played (the update rule is
:func:`_q_learning`; the greedy action is kept up to date) -- and, with a synchronous or mixed update rule
(``seats.share`` above 0), the values of the actions it did not play, from their counterfactual profits
(:func:`_update_counterfactual`) -- and every automaton moves on its signal, its punishments counted in the
session's record (``session.triggers``, :data:`TRIGGER_FIELDS`; no draw, no change to the numbers). Another protocol
replaces a step, not the loop. The rules of a step are inlined functions of numbers (``inline="always"``, which
changes no arithmetic); the arrays stay in the loop itself, taken out of their groups once before it, because an
inlined function that takes an array takes and releases a reference to it at every call, which costs more here
than the period's arithmetic (measured: a loop whose steps took their arrays ran at a third of the speed). The
bandits' loops over their prices are written in the period loop for that reason (the rules themselves are in
:mod:`sim.learning.bandits`), and a Thompson seat draws its ``m`` normals, two from each 64-bit word, from the
generator state held in four local words (:func:`sim.core.rng.zig_half_candidate`, the draws of
:func:`sim.core.rng.next_normals_by_halves`), keeping the first largest draw as it comes.

Random draws
------------
Everything draws from the session's one xoshiro256** stream, in this fixed order. Learning, per period: seats in
order, a learner's exploration draws (one uniform, and a second one when it explores) or an automaton's cheat draw
(:func:`strategies.step.choose_level`); then, with a demand shock (``shock > 0``), one ziggurat normal for the
period's shock (:mod:`sim.learning.shocks`); with noisy prices (``observe = 2``), learners in seat order, one
ziggurat normal for each rival's price it sees, rivals in seat order (:mod:`sim.learning.noisy_prices`); then,
learners in seat order, a learner with the mixed update rule draws one uniform for each action it did not play, in
increasing order (the asynchronous and synchronous rules draw nothing); a bandit draws in its own steps (a Thompson
seat ``m`` normals where a Q-learner draws its exploration uniforms, a bandit with observation noise one normal at
its update: :mod:`sim.learning.bandits`); then, after the learners' updates, automaton seats in order, each its
transition draw (:func:`strategies.step.next_state`). Automata seated with learners see no perception errors, so
:func:`strategies.step.bad_signal` never draws here. The engine's functions draw only when a probability is strictly
between 0 and 1, so a line-up of deterministic automata draws exactly what the learners draw.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.rng import next_below, next_double, next_normal_zig, next_u64_words, zig_finish, zig_half_candidate
from sim.learning.bandits import arm_stats, bandit_reward, bandit_scales, ucb_bonus
from sim.learning.inputs import (
    AUTOMATON,
    FIXED_FAMILY,
    LEARNER,
    Q_FAMILY,
    STATUS_CAP,
    STATUS_CONVERGED,
    TRIGGER_FIELDS,
    UCB_FAMILY,
    new_triggers,
)
from sim.learning.noisy_prices import seen_price
from sim.learning.shocks import demand_shock
from sim.learning.signals import signal_code, signal_state
from strategies.step import COLLUSIVE, bad_signal, choose_level, next_state

__all__ = ["TRIGGER_FIELDS", "initial_state", "new_triggers", "run_session"]


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
def _seen(s, mod_i, S):
    """The history state a learner with ``mod_i`` states sees in history state ``s``."""
    return s if mod_i == S else s % mod_i


@njit(cache=True, nogil=True, inline="always")
def _exploration(beta_i, tf, eps, prev_beta):
    """The exploration probability ``exp(-beta t)`` of a learner, and the ``beta`` it was computed for: one
    exponential per period when the learners share ``beta`` (the usual case)."""
    if beta_i != prev_beta:
        return math.exp(-beta_i * tf), beta_i
    return eps, prev_beta


@njit(cache=True, nogil=True, inline="always")
def _next_history(prof, s, M, S, K):
    """The history state after profile ``prof`` is played in history state ``s`` (lag 1 in the lowest digit)."""
    return prof if K == 1 else prof + (s * M) % S


@njit(cache=True, nogil=True, inline="always")
def _q_learning(old, reward, continuation, alpha, delta):
    """The Q-learning update of the value of the action played (Watkins and Dayan, 1992): ``continuation`` is the
    largest value of the state reached, before any update of this period."""
    target = reward + delta * continuation
    return (1.0 - alpha) * old + alpha * target


@njit(cache=True, nogil=True, inline="always")
def _takes_over(new, qg, a, g):
    """Whether action ``a``, whose value rose to ``new``, becomes the first largest of its row instead of the
    greedy action ``g`` of value ``qg``."""
    return new > qg or (new == qg and a < g)


@njit(cache=True, nogil=True)
def _update_counterfactual(Q, greedy, li, si, s, prof, a, m, place_i, mod_i, M, S, K, payoff_i, alpha, delta, share,
                           rng, cont, upd, theta=1.0):
    """The synchronous or mixed update of one learner's row ``Q[li, si]`` (Asker, Fershtman and Pakes, 2022).

    Action ``b`` is updated, as if it had been played against the rivals' actual actions: with the profit of the
    profile ``prof + (b - a) place_i`` and the largest value of the state that profile leads to. The action played
    ``a`` always is; every other one with probability ``share`` (one uniform draw per action, in increasing order,
    only when ``0 < share < 1``). Every continuation is read before any value of the row changes. ``cont`` and
    ``upd`` are scratch arrays of at least ``m`` entries; ``theta`` scales every profit (the period's demand shock,
    :mod:`sim.learning.shocks`). Returns whether the greedy action of the row changed.
    """
    for b in range(m):
        upd[b] = b == a or share >= 1.0 or next_double(rng) < share
        if upd[b]:
            sb = _seen(_next_history(prof + (b - a) * place_i, s, M, S, K), mod_i, S)
            cont[b] = Q[li, sb, greedy[li, sb]]
    for b in range(m):
        if upd[b]:
            Q[li, si, b] = _q_learning(Q[li, si, b], theta * payoff_i[prof + (b - a) * place_i], cont[b], alpha,
                                          delta)
    best = 0
    bv = Q[li, si, 0]
    for b in range(1, m):
        if Q[li, si, b] > bv:
            bv = Q[li, si, b]
            best = b
    if best != greedy[li, si]:
        greedy[li, si] = best
        return True
    return False


@njit(cache=True, nogil=True)
def run_session(seats, stage, automata, session, s, convergence, max_periods, shock=0, sigma=0.0, observe=0,
                band=0.0):
    """Run one session from history state ``s`` until convergence or the cap.

    Parameters
    ----------
    seats : SeatInputs
    stage : StageInputs
    automata : AutomatonInputs
    session : SessionState
        Modified in place; ``session.greedy`` must hold the first argmax of every row of ``session.Q`` on entry.
        The session goes on from ``session.clock`` (periods played, the last of them without a change), which
        receives the counters at the end: a session stopped at the cap and run again with a higher cap plays the
        periods an uninterrupted one would, and one that had converged under this ``convergence`` plays none.
    s : int
        History state at the start (:func:`initial_state`).
    convergence : int
        Stop once no learner's greedy strategy has changed for this many consecutive periods.
    max_periods : int
        Stop once this many periods have been played in all (counted from the session's start) in any case.
    shock : int
        The demand shock's code (:func:`sim.learning.shocks.shock_code`; 0: none, nothing drawn).
    sigma : float
        Its standard deviation.
    observe : int
        What the learners' state is made of: 0 the last periods' prices (``s`` a history state), 1 the own last
        price and a low-profit signal (``s`` the system state of :mod:`sim.learning.signals`; Q-learners with the
        asynchronous rule only, as :func:`sim.learning.signals.check_signal_lineup` requires), 2 the last prices as
        each learner saw them (``s`` the system state of :mod:`sim.learning.noisy_prices`, the same learners, memory
        one).
    band : float
        The signal's band (``observe = 1``), or the standard deviation of a seen price's error in grid steps
        (``observe = 2``).

    Returns
    -------
    status : int
        ``STATUS_CONVERGED`` or ``STATUS_CAP``.
    periods : int
        Periods played.
    s : int
        History state after the last period.
    """
    if shock == 0 and observe == 0:
        # the usual protocol (prices observed, no demand shock): with None for the shock and the signal, numba
        # drops both branches from this copy of the period loop, which measured a few per cent faster
        return _period_loop(seats, stage, automata, session, s, convergence, max_periods, 0, None, None, 0.0)
    return _period_loop(seats, stage, automata, session, s, convergence, max_periods, shock, sigma, observe, band)


@njit(cache=True, nogil=True)
def _period_loop(seats, stage, automata, session, s, convergence, max_periods, shock, sigma, observe, band):
    # the period loop of :func:`run_session`; ``sigma`` None: no demand shock, ``observe`` None: prices observed
    (kind, lidx, radix, place, mod, _zn, _zplace, owner, alpha, beta, delta, share, family, explore, noise, reward_lo,
     reward_span) = seats
    M, S, K, payoff, _actions, _prices, mprice, values, quantity_setting = stage
    a_states, a_probs, a_firms, a_levels, act_of_level = automata
    Q, greedy, z, rng, clock, triggers, counts, sums = session
    n = radix.size
    act = np.empty(n, np.int64)
    vals = np.empty(n, np.float64)
    cont = np.empty(radix.max(), np.float64)
    upd = np.empty(radix.max(), np.bool_)
    has_automata = (kind == AUTOMATON).any()
    score = np.empty(radix.max(), np.float64)
    w = bandit_scales(kind, family, lidx, radix, counts, explore)
    reward_inv = 1.0 / reward_span
    # the profit signal: the profile where every seat charges price a is a * ptot (sim.learning.signals)
    ptot = place.sum()
    # a learner's states under a signal: 2 m (own price, low profit) or m ** n (the profile it saw)
    width = 2 * radix[0] if observe is None or observe != 2 else M
    wl = w.shape[1] - 1
    ucb_t, ucb_c, ucb_cs = -1.0, -1.0, 0.0
    t = clock[0]
    stable = clock[1]
    if stable >= convergence:
        # a continued session that had converged under this rule: an uninterrupted one would have stopped there
        return STATUS_CONVERGED, t, s
    while t < max_periods:
        # 1. every seat chooses: a learner explores with probability exp(-beta t), else plays its greedy action
        tf = np.float64(t)
        prof = 0
        eps = -1.0
        prev_beta = -1.0
        for i in range(n):
            if kind[i] == LEARNER and family[i] == FIXED_FAMILY:
                # a fixed policy (sim.learning.fixed): its greedy action, no draw
                a = greedy[lidx[i], _seen(s, mod[i], S)]
            elif kind[i] == LEARNER and family[i] != Q_FAMILY:
                # a bandit: its own statistics, whatever the history (sim.learning.bandits); its arrays are read
                # here, not in a function, and its normals drawn from the state in four local words
                li, m, c = lidx[i], radix[i], explore[i]
                a = -1
                if family[i] == UCB_FAMILY:
                    tb = w[li, wl]
                    if tb < m:
                        # every price is tried once first, in increasing order
                        a = 0
                        while a < m - 1 and counts[li, a] > 0:
                            a += 1
                    else:
                        if tb != ucb_t or c != ucb_c:
                            # one logarithm per period for the bandits that share t and c
                            ucb_t, ucb_c, ucb_cs = tb, c, ucb_bonus(c, tb)
                        for b in range(m):
                            score[b] = Q[li, 0, b] + ucb_cs * w[li, b]
                else:
                    # one normal per price, in increasing order, two from each word (sim.core.rng.
                    # next_normals_by_halves: the ziggurat's fast path here, its rare branches in zig_finish), and
                    # the first largest draw kept as it comes
                    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
                    a = 0
                    bv = -math.inf
                    word = np.uint64(0)
                    for b in range(m):
                        if b & 1 == 0:
                            word, s0, s1, s2, s3 = next_u64_words(s0, s1, s2, s3)
                            h = word
                        else:
                            h = word >> np.uint64(32)
                        zb, accepted, j = zig_half_candidate(h)
                        if not accepted:
                            rng[0], rng[1], rng[2], rng[3] = s0, s1, s2, s3
                            zb = zig_finish(rng, j, zb)
                            s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
                        # w holds v sqrt(1 / (n + 1)), the scale v folded in (sim.learning.bandits.arm_stats)
                        sb = Q[li, 0, b] + zb * w[li, b]
                        if sb > bv:
                            bv = sb
                            a = b
                    rng[0], rng[1], rng[2], rng[3] = s0, s1, s2, s3
                if a < 0:
                    # the first largest score
                    a = 0
                    bv = -math.inf
                    for b in range(m):
                        if score[b] > bv:
                            bv = score[b]
                            a = b
            elif kind[i] == LEARNER:
                eps, prev_beta = _exploration(beta[i], tf, eps, prev_beta)
                if next_double(rng) < eps:
                    a = next_below(rng, radix[i])
                elif observe is not None and observe:
                    a = greedy[lidx[i], signal_state(s, i, width)]
                else:
                    a = greedy[lidx[i], _seen(s, mod[i], S)]
            else:
                lev, _cheated = choose_level(i, z[i], t, a_states, a_probs, a_firms, rng)
                a = act_of_level[i, lev]
            act[i] = a
            prof += a * place[i]
        s_new = _next_history(prof, s, M, S, K)
        # the period's demand shock scales every realised profit (1.0, drawing nothing, without one)
        theta = 1.0
        if sigma is not None:
            theta = demand_shock(shock, sigma, rng)
        if observe is not None and observe == 1:
            # the state the shock moves: every learner's own price and whether its realised profit was low
            s_new = 0
            for i in range(n):
                s_new += signal_code(act[i], theta * payoff[prof, i], payoff[act[i] * ptot, i], band, radix[i]) * \
                    width**i
        elif observe is not None and observe == 2:
            # noisy prices (sim.learning.noisy_prices): every learner's own price, and its rivals' as it saw them
            s_new = 0
            for i in range(n):
                o = 0
                for j in range(n):
                    aj = act[j]
                    if j != i:
                        aj = seen_price(aj, band, radix[j], next_normal_zig(rng))
                    o += aj * place[j]
                s_new += o * width**i
        # 2. every learner updates the value of the action it played, and keeps its greedy action
        changed = False
        for i in range(n):
            if kind[i] != LEARNER:
                continue
            li, a = lidx[i], act[i]
            if family[i] == FIXED_FAMILY:
                continue
            if family[i] != Q_FAMILY:
                # a bandit: the statistics of the price played, its estimate in Q[li, 0, a], its scale
                r = bandit_reward(theta * payoff[prof, i], reward_lo[i], reward_inv[i])
                if noise[i] > 0.0:
                    r += noise[i] * next_normal_zig(rng)
                na = counts[li, a] + 1
                counts[li, a] = na
                sums[li, a] += r
                si = 0
                old = Q[li, 0, a]
                new, w[li, a] = arm_stats(family[i], sums[li, a], na, explore[i])
                w[li, wl] += 1.0
            else:
                if observe is not None and observe:
                    si, sn = signal_state(s, i, width), signal_state(s_new, i, width)
                else:
                    si, sn = _seen(s, mod[i], S), _seen(s_new, mod[i], S)
                if share[i] > 0.0:
                    # synchronous or mixed: the other actions too, from what they would have earned
                    if _update_counterfactual(Q, greedy, li, si, s, prof, a, radix[i], place[i], mod[i], M, S, K,
                                              payoff[:, i], alpha[i], delta[i], share[i], rng, cont, upd, theta):
                        changed = True
                    continue
                old = Q[li, si, a]
                new = _q_learning(old, theta * payoff[prof, i], Q[li, sn, greedy[li, sn]], alpha[i], delta[i])
            # the greedy action (a bandit's greedy price: si = 0) as the value of the action played moved
            Q[li, si, a] = new
            g = greedy[li, si]
            if a == g:
                if new < old:
                    # the greedy action lost value: the first largest of the row again
                    best = 0
                    bv = Q[li, si, 0]
                    for j in range(1, radix[i]):
                        if Q[li, si, j] > bv:
                            bv = Q[li, si, j]
                            best = j
                    if best != g:
                        greedy[li, si] = best
                        changed = True
            elif _takes_over(new, Q[li, si, g], a, g):
                greedy[li, si] = a
                changed = True
        # 3. every automaton moves on its signal (no perception errors next to learners)
        if has_automata:
            for i in range(n):
                vals[i] = values[i, act[i]]
            for i in range(n):
                if kind[i] == AUTOMATON:
                    zi = z[i]
                    bad = bad_signal(i, zi, n, vals, owner, mprice[prof], payoff[prof, i], 0.0, a_states, a_probs,
                                     a_levels, quantity_setting, rng)
                    z[i] = next_state(i, zi, bad, a_states, a_probs, rng)
                    # the record of punishments: why a learner facing this automaton ends where it does
                    if a_states[i, zi, COLLUSIVE] == 0:
                        triggers[i, 3] += 1
                    elif a_states[i, z[i], COLLUSIVE] == 0:
                        triggers[i, 0] += 1
                        if triggers[i, 1] < 0:
                            triggers[i, 1] = t
                        triggers[i, 2] = t
        s = s_new
        t += 1
        if changed:
            stable = 0
        else:
            stable += 1
            if stable >= convergence:
                clock[0], clock[1] = t, stable
                return STATUS_CONVERGED, t, s
    clock[0], clock[1] = t, stable
    return STATUS_CAP, t, s
