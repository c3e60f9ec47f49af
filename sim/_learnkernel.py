"""numba kernel of Q-learning sessions (see :mod:`sim.learning` for the public API).

Everything here takes plain arrays and scalars, writes into the arrays it is given and returns status
codes; nothing raises, allocates large buffers or knows about files. The readable twin of every
function is in :mod:`sim._learnref` and the tests check that both give the same numbers bit for bit.

Layout shared with the driver
-----------------------------
* Seats ``0 .. n-1`` (one per firm). Seat ``i`` has ``radix[i]`` actions; an action profile is the
  mixed-radix number ``prof = sum_i a_i * place[i]`` with ``place[i] = prod(radix[:i])``, so there
  are ``M = prod(radix)`` profiles.
* The history state is the profile of the last ``K`` periods, ``s = sum_l prof_{t-1-l} * M**l``
  (lag 1 in the lowest digit), ``0 <= s < S = M**K``. Learner ``l`` with memory ``k_l <= K`` sees
  ``s % mod[l]`` with ``mod[l] = M**k_l``.
* ``payoff[prof, i]``: profit of seat ``i`` at profile ``prof``; ``Q[l, state, a]``; ``greedy[l,
  state]``: the first index of the largest entry of ``Q[l, state, :radix[i]]``, maintained
  incrementally (only the row just updated can change, and the test below keeps the first-index
  rule exact).
* Learners-only line-ups: seat ``i`` is learner ``i``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ._rng import next_below, next_double

__all__: list[str] = []

STATUS_CONVERGED = 0
STATUS_CAP = 1


@njit(cache=True, nogil=True)
def _initial_state(rng, radix, place, M, K):
    """Draw the history of the first ``K`` periods uniformly: lag 1 first, seats in order."""
    s = 0
    mult = 1
    for _lag in range(K):
        prof = 0
        for i in range(radix.size):
            prof += next_below(rng, radix[i]) * place[i]
        s += prof * mult
        mult *= M
    return s


@njit(cache=True, nogil=True)
def _learn(radix, place, S, K, mod, alpha, beta, delta, payoff, Q, greedy, rng, s, convergence, max_periods):
    """Run one session from history state ``s`` until convergence or the cap.

    Parameters
    ----------
    radix, place : int64 arrays of shape (n,)
    S, K : int
        Number of history states (``M**K``) and the longest memory.
    mod : int64 array of shape (n,)
        ``M**k_l``: learner ``l`` sees ``s % mod[l]``.
    alpha, beta, delta : float64 arrays of shape (n,)
    payoff : float64 array of shape (M, n)
    Q : float64 array of shape (n, S_l, m_max)
        Modified in place.
    greedy : int64 array of shape (n, S_l)
        Modified in place; must hold the first argmax of every row of ``Q`` on entry.
    rng : uint64 array of shape (4,)
        xoshiro256** state, advanced in place.
    s : int
        History state at the start.
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

    Notes
    -----
    Per period and learner, in seat order: one uniform ``u``; if ``u < exp(-beta t)`` (t counted from
    0) a second draw picks the action uniformly, otherwise the greedy action is played. Then every
    learner updates its entry of the state it was in, using the value of the next state *before*
    any update of this period (all learners update simultaneously).
    """
    n = radix.size
    M = place[n - 1] * radix[n - 1]
    act = np.empty(n, np.int64)
    t = 0
    stable = 0
    while t < max_periods:
        tf = np.float64(t)
        prof = 0
        eps = 0.0
        for i in range(n):
            si = s if mod[i] == S else s % mod[i]
            # one exponential per period when the learners share beta (the usual case)
            if i == 0 or beta[i] != beta[i - 1]:
                eps = math.exp(-beta[i] * tf)
            if next_double(rng) < eps:
                a = next_below(rng, radix[i])
            else:
                a = greedy[i, si]
            act[i] = a
            prof += a * place[i]
        s_new = prof if K == 1 else prof + (s * M) % S
        changed = False
        for i in range(n):
            if mod[i] == S:
                si = s
                sn = s_new
            else:
                si = s % mod[i]
                sn = s_new % mod[i]
            a = act[i]
            target = payoff[prof, i] + delta[i] * Q[i, sn, greedy[i, sn]]
            old = Q[i, si, a]
            new = (1.0 - alpha[i]) * old + alpha[i] * target
            Q[i, si, a] = new
            g = greedy[i, si]
            if a == g:
                if new < old:
                    best = 0
                    bv = Q[i, si, 0]
                    for j in range(1, radix[i]):
                        if Q[i, si, j] > bv:
                            bv = Q[i, si, j]
                            best = j
                    if best != g:
                        greedy[i, si] = best
                        changed = True
            else:
                qg = Q[i, si, g]
                if new > qg or (new == qg and a < g):
                    greedy[i, si] = a
                    changed = True
        s = s_new
        t += 1
        if changed:
            stable = 0
        else:
            stable += 1
            if stable >= convergence:
                return STATUS_CONVERGED, t, s
    return STATUS_CAP, t, s


@njit(cache=True, nogil=True)
def _greedy_profile(s, greedy, mod, place, S):
    prof = 0
    for i in range(place.size):
        si = s if mod[i] == S else s % mod[i]
        prof += greedy[i, si] * place[i]
    return prof


@njit(cache=True, nogil=True)
def _advance(s, prof, M, S, K):
    return prof if K == 1 else prof + (s * M) % S


@njit(cache=True, nogil=True)
def _greedy_next(s, greedy, mod, place, M, S, K):
    return _advance(s, _greedy_profile(s, greedy, mod, place, S), M, S, K)


@njit(cache=True, nogil=True)
def _cycle_of(s0, greedy, mod, place, M, S, K):
    """Brent's cycle detection (Brent, 1980, "An improved Monte Carlo factorization algorithm", BIT
    20) on greedy play from state ``s0``.

    Returns
    -------
    mu : int
        Periods before the path enters its cycle.
    lam : int
        Length of the cycle.
    entry : int
        The first state of the path that lies on the cycle.
    """
    power = 1
    lam = 1
    tort = s0
    hare = _greedy_next(s0, greedy, mod, place, M, S, K)
    while tort != hare:
        if power == lam:
            tort = hare
            power *= 2
            lam = 0
        hare = _greedy_next(hare, greedy, mod, place, M, S, K)
        lam += 1
    tort = s0
    hare = s0
    for _ in range(lam):
        hare = _greedy_next(hare, greedy, mod, place, M, S, K)
    mu = 0
    while tort != hare:
        tort = _greedy_next(tort, greedy, mod, place, M, S, K)
        hare = _greedy_next(hare, greedy, mod, place, M, S, K)
        mu += 1
    return mu, lam, tort


@njit(cache=True, nogil=True)
def _value(s0, seat, d, payoff, greedy, mod, place, M, S, K):
    """Discounted profit of seat ``seat`` from state ``s0`` on when everyone plays greedily forever:
    the transient sum plus the cycle's sum times ``1 / (1 - d**lam)`` -- exact, no truncation."""
    mu, lam, _entry = _cycle_of(s0, greedy, mod, place, M, S, K)
    v = 0.0
    w = 1.0
    s = s0
    for _ in range(mu):
        prof = _greedy_profile(s, greedy, mod, place, S)
        v += w * payoff[prof, seat]
        w *= d
        s = _advance(s, prof, M, S, K)
    c = 0.0
    wc = 1.0
    for _ in range(lam):
        prof = _greedy_profile(s, greedy, mod, place, S)
        c += wc * payoff[prof, seat]
        wc *= d
        s = _advance(s, prof, M, S, K)
    return v + w * c / (1.0 - wc)


@njit(cache=True, nogil=True)
def _on_cycle(x, entry, lam, greedy, mod, place, M, S, K):
    """True when state ``x`` is one of the ``lam`` states of the cycle through ``entry``."""
    s = entry
    for _ in range(lam):
        if s == x:
            return True
        s = _greedy_next(s, greedy, mod, place, M, S, K)
    return False


@njit(cache=True, nogil=True)
def _analyse(s_final, greedy, radix, mod, place, M, S, K, payoff, actions, prices, deviator, dev_action, d_dev,
             n_points, cycle_out, lim_actions, lim_prices, lim_profits, ir_prices, ir_profits, cf_prices,
             cf_profits, info):
    """The limit path from the final state and the impulse response to a one-period deviation.

    Parameters
    ----------
    s_final : int
        History state at the end of learning.
    payoff, actions, prices : float64 arrays of shape (M, n)
        Profit, action value and price of every seat at every profile.
    deviator : int
        Seat forced to deviate.
    dev_action : int
        Its forced action index, or -1 for its static best response (on its grid, first index on
        ties) to the rivals' actions in the deviation period.
    d_dev : float
        The deviator's discount factor (for the value of the deviation).
    n_points : int
        Deviate from at most this many points of the limit cycle (the first ones from its entry).
    cycle_out : int64 array of shape (L,)
        Receives the profiles of the first ``min(lam, L)`` periods of the cycle.
    lim_actions, lim_prices, lim_profits : float64 arrays of shape (n,)
        Receive the means over the cycle.
    ir_prices, ir_profits, cf_prices, cf_profits : float64 arrays of shape (T + 2, n)
        Receive the impulse response (row 0: the period before the deviation, row 1: the deviation,
        rows 2..T+1: greedy play afterwards) and the path without deviation, averaged over the
        points of the cycle deviated from.
    info : float64 array of shape (8,)
        Receives ``[mu, lam, points, mean value gain of the deviation, share of points where it
        pays, share of points after which play returns to the same cycle, mean periods to return
        (nan if never), forced action at the first point]``.
    """
    n = place.size
    mu, lam, entry = _cycle_of(s_final, greedy, mod, place, M, S, K)
    lim_actions[:] = 0.0
    lim_prices[:] = 0.0
    lim_profits[:] = 0.0
    s = entry
    for c in range(lam):
        prof = _greedy_profile(s, greedy, mod, place, S)
        if c < cycle_out.size:
            cycle_out[c] = prof
        for i in range(n):
            lim_actions[i] += actions[prof, i]
            lim_prices[i] += prices[prof, i]
            lim_profits[i] += payoff[prof, i]
        s = _advance(s, prof, M, S, K)
    for i in range(n):
        lim_actions[i] /= lam
        lim_prices[i] /= lam
        lim_profits[i] /= lam

    T2 = ir_prices.shape[0]
    ir_prices[:, :] = 0.0
    ir_profits[:, :] = 0.0
    cf_prices[:, :] = 0.0
    cf_profits[:, :] = 0.0
    points = min(lam, n_points)
    gain_sum = 0.0
    pays = 0
    returned = 0
    ret_sum = 0.0
    first_action = -1
    x = entry
    for _c in range(points):
        # period before the deviation: the last profile of the history x
        last = x % M
        for i in range(n):
            ir_prices[0, i] += prices[last, i]
            ir_profits[0, i] += payoff[last, i]
            cf_prices[0, i] += prices[last, i]
            cf_profits[0, i] += payoff[last, i]
        # deviation period: rivals play greedily at x, the deviator is forced
        prof = _greedy_profile(x, greedy, mod, place, S)
        m_dev = radix[deviator]
        base = prof - ((prof // place[deviator]) % m_dev) * place[deviator]
        if dev_action >= 0:
            a_dev = dev_action
        else:
            a_dev = 0
            best = payoff[base, deviator]
            for a in range(1, m_dev):
                v = payoff[base + a * place[deviator], deviator]
                if v > best:
                    best = v
                    a_dev = a
        if first_action < 0:
            first_action = a_dev
        pdev = base + a_dev * place[deviator]
        for i in range(n):
            ir_prices[1, i] += prices[pdev, i]
            ir_profits[1, i] += payoff[pdev, i]
        y = _advance(x, pdev, M, S, K)
        for tau in range(2, T2):
            p = _greedy_profile(y, greedy, mod, place, S)
            for i in range(n):
                ir_prices[tau, i] += prices[p, i]
                ir_profits[tau, i] += payoff[p, i]
            y = _advance(y, p, M, S, K)
        z = x
        for tau in range(1, T2):
            p = _greedy_profile(z, greedy, mod, place, S)
            for i in range(n):
                cf_prices[tau, i] += prices[p, i]
                cf_profits[tau, i] += payoff[p, i]
            z = _advance(z, p, M, S, K)
        # exact discounted value of deviating versus not
        y0 = _advance(x, pdev, M, S, K)
        v_dev = payoff[pdev, deviator] + d_dev * _value(y0, deviator, d_dev, payoff, greedy, mod, place, M, S, K)
        v_no = _value(x, deviator, d_dev, payoff, greedy, mod, place, M, S, K)
        gain = v_dev - v_no
        gain_sum += gain
        if gain > 1e-9 * max(1.0, abs(v_no)):
            pays += 1
        mu2, lam2, entry2 = _cycle_of(y0, greedy, mod, place, M, S, K)
        if lam2 == lam and _on_cycle(entry2, entry, lam, greedy, mod, place, M, S, K):
            returned += 1
            ret_sum += mu2 + 1.0
        x = _greedy_next(x, greedy, mod, place, M, S, K)
    for tau in range(T2):
        for i in range(n):
            ir_prices[tau, i] /= points
            ir_profits[tau, i] /= points
            cf_prices[tau, i] /= points
            cf_profits[tau, i] /= points
    info[0] = mu
    info[1] = lam
    info[2] = points
    info[3] = gain_sum / points
    info[4] = pays / points
    info[5] = returned / points
    info[6] = ret_sum / returned if returned > 0 else np.nan
    info[7] = first_action
