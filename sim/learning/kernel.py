"""numba kernel of Q-learning sessions (see :mod:`sim.learning.session` for the public API).

Everything here takes plain arrays and scalars, writes into the arrays it is given and returns status
codes; nothing raises, allocates large buffers or knows about files. The readable twin of every
function is in :mod:`sim.learning.twin` and the tests check that both give the same numbers bit for bit.

Layout shared with the driver
-----------------------------
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
  the row just updated can change, and the test below keeps the first-index rule exact).
* Automaton seat ``i`` is in state ``z[i]``; level ``l`` it plays is action ``act_of_level[i, l]``;
  ``values[i, a]`` is the value of action ``a`` (what the automata's signals look at), ``mprice[prof]``
  the public market price of a profile.
* For the limit analysis the whole system is one integer, ``x = s + S * sum_i z[i] * zplace[i]``
  (``zn[i]`` states of seat ``i``; ``zn = 1``, ``zplace = 0`` for learners): greedy play with
  deterministic automata is then a map on integers, and its cycle is found by Brent's method
  (:func:`_analyse`, exact). With an automaton that acts at random greedy play is a Markov chain on
  these integers instead; :func:`_estimate` simulates it (a seeded estimate, no cycle).

Random draws
------------
Everything draws from the session's one xoshiro256** stream, in this fixed order. Learning, per
period: seats in order, a learner's exploration draws (one uniform, and a second one when it explores)
or an automaton's cheat draw (:func:`strategies.step.choose_level`); then, after the learners'
updates, automaton seats in order, each its transition draw (:func:`strategies.step.next_state`).
Automata seated with learners see no perception errors, so :func:`strategies.step.bad_signal` never
draws here. The engine's functions draw only when a probability is strictly between 0 and 1, so a
line-up of deterministic automata draws exactly what the learners draw. After learning, the
estimate of :func:`_estimate` continues the same stream for its main path and gives each simulated
deviation a non-overlapping subsequence of it (jumps of 2**128 draws); the exact analysis draws
nothing.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from sim.core.rng import next_below, next_double, next_u64
from strategies.step import bad_signal, choose_level, next_state

__all__: list[str] = []

#: xoshiro256** jump polynomial: advancing by 2**128 draws (Blackman and Vigna, 2021, "Scrambled linear
#: pseudorandom number generators", ACM TOMS 47(4); their reference code's ``jump``)
JUMP = np.array([0x180EC6D33CFD0ABA, 0xD5A61266F0C9392C, 0xA9582618E03FC9AA, 0x39ABDC4529B1661C], dtype=np.uint64)

STATUS_CONVERGED = 0
STATUS_CAP = 1
LEARNER = 0
AUTOMATON = 1


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
def _learn(kind, lidx, radix, place, S, K, mod, alpha, beta, delta, payoff, Q, greedy, rng, s, convergence,
           max_periods, z, a_states, a_probs, a_firms, a_levels, act_of_level, values, mprice, owner,
           quantity_setting):
    """Run one session from history state ``s`` until convergence or the cap.

    Parameters
    ----------
    kind, lidx, radix, place, mod : int64 arrays of shape (n,)
    S, K : int
        Number of history states (``M**K``) and the longest memory.
    alpha, beta, delta : float64 arrays of shape (n,)
        Learner parameters (ignored for automaton seats).
    payoff : float64 array of shape (M, n)
    Q : float64 array of shape (n_learners, S_l, m_max)
        Modified in place.
    greedy : int64 array of shape (n_learners, S_l)
        Modified in place; must hold the first argmax of every row of ``Q`` on entry.
    rng : uint64 array of shape (4,)
        xoshiro256** state, advanced in place.
    s : int
        History state at the start.
    convergence : int
        Stop once no learner's greedy strategy has changed for this many consecutive periods.
    max_periods : int
        Stop after this many periods in any case.
    z : int64 array of shape (n,)
        Automaton states, modified in place.
    a_states, a_probs, a_firms, a_levels : arrays
        The engine's compiled automata (:mod:`strategies.step`), one row per seat.
    act_of_level : int64 array of shape (n, L)
    values : float64 array of shape (n, A_max)
    mprice : float64 array of shape (M,)
    owner : int64 array of shape (n,)
    quantity_setting : bool

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
    Draws per period, seats in order: a learner draws one uniform ``u`` and, if
    ``u < exp(-beta t)`` (t counted from 0), a second one that picks its action uniformly; otherwise it
    plays its greedy action. An automaton draws what :func:`strategies.step.choose_level` draws. Then
    every learner updates the entry of the state it was in, with the value of the next state *before*
    any update of this period, and every automaton moves on its signal
    (:func:`strategies.step.bad_signal`, :func:`strategies.step.next_state`).
    """
    n = radix.size
    M = place[n - 1] * radix[n - 1]
    act = np.empty(n, np.int64)
    vals = np.empty(n, np.float64)
    has_automata = False
    for i in range(n):
        if kind[i] == AUTOMATON:
            has_automata = True
    t = 0
    stable = 0
    while t < max_periods:
        tf = np.float64(t)
        prof = 0
        eps = -1.0
        prev_beta = -1.0
        for i in range(n):
            if kind[i] == LEARNER:
                li = lidx[i]
                si = s if mod[i] == S else s % mod[i]
                # one exponential per period when the learners share beta (the usual case)
                if beta[i] != prev_beta:
                    eps = math.exp(-beta[i] * tf)
                    prev_beta = beta[i]
                if next_double(rng) < eps:
                    a = next_below(rng, radix[i])
                else:
                    a = greedy[li, si]
            else:
                lev, _cheated = choose_level(i, z[i], t, a_states, a_probs, a_firms, rng)
                a = act_of_level[i, lev]
            act[i] = a
            prof += a * place[i]
        s_new = prof if K == 1 else prof + (s * M) % S
        changed = False
        for i in range(n):
            if kind[i] != LEARNER:
                continue
            li = lidx[i]
            if mod[i] == S:
                si = s
                sn = s_new
            else:
                si = s % mod[i]
                sn = s_new % mod[i]
            a = act[i]
            target = payoff[prof, i] + delta[i] * Q[li, sn, greedy[li, sn]]
            old = Q[li, si, a]
            new = (1.0 - alpha[i]) * old + alpha[i] * target
            Q[li, si, a] = new
            g = greedy[li, si]
            if a == g:
                if new < old:
                    best = 0
                    bv = Q[li, si, 0]
                    for j in range(1, radix[i]):
                        if Q[li, si, j] > bv:
                            bv = Q[li, si, j]
                            best = j
                    if best != g:
                        greedy[li, si] = best
                        changed = True
            else:
                qg = Q[li, si, g]
                if new > qg or (new == qg and a < g):
                    greedy[li, si] = a
                    changed = True
        if has_automata:
            for i in range(n):
                vals[i] = values[i, act[i]]
            for i in range(n):
                if kind[i] == AUTOMATON:
                    bad = bad_signal(i, z[i], n, vals, owner, mprice[prof], payoff[prof, i], 0.0, a_states, a_probs,
                                     a_levels, quantity_setting, rng)
                    z[i] = next_state(i, z[i], bad, a_states, a_probs, rng)
        s = s_new
        t += 1
        if changed:
            stable = 0
        else:
            stable += 1
            if stable >= convergence:
                return STATUS_CONVERGED, t, s
    return STATUS_CAP, t, s


# ------------------------------------------------------------------------------------------------
# Greedy play after learning: the whole system as one integer state
# ------------------------------------------------------------------------------------------------
# G = (kind, lidx, radix, place, mod, M, S, K, greedy, a_states, a_probs, a_firms, a_levels,
#      act_of_level, values, mprice, payoff, owner, zplace, zn, t_end, quantity_setting, rng)


@njit(cache=True, nogil=True)
def _profile(x, G):
    """The profile everyone plays greedily in system state ``x``."""
    kind, lidx, radix, place, mod, S = G[0], G[1], G[2], G[3], G[4], G[6]
    greedy, a_states, a_probs, a_firms, act_of_level = G[8], G[9], G[10], G[11], G[13]
    zplace, zn, t_end, rng = G[18], G[19], G[20], G[22]
    s = x % S
    zc = x // S
    prof = 0
    for i in range(radix.size):
        if kind[i] == LEARNER:
            si = s if mod[i] == S else s % mod[i]
            a = greedy[lidx[i], si]
        else:
            zi = (zc // zplace[i]) % zn[i]
            lev, _c = choose_level(i, zi, t_end, a_states, a_probs, a_firms, rng)
            a = act_of_level[i, lev]
        prof += a * place[i]
    return prof


@njit(cache=True, nogil=True)
def _after(x, prof, G):
    """System state after profile ``prof`` is played in state ``x``."""
    kind, radix, place, M, S, K = G[0], G[2], G[3], G[5], G[6], G[7]
    a_states, a_probs, a_levels, values, mprice, payoff, owner = G[9], G[10], G[12], G[14], G[15], G[16], G[17]
    zplace, zn, qs, rng = G[18], G[19], G[21], G[22]
    n = radix.size
    s = x % S
    zc = x // S
    s_new = prof if K == 1 else prof + (s * M) % S
    if zc == 0 and zn.max() == 1:
        return s_new
    vals = np.empty(n, np.float64)
    for i in range(n):
        vals[i] = values[i, (prof // place[i]) % radix[i]]
    zc_new = 0
    for i in range(n):
        if kind[i] == AUTOMATON:
            zi = (zc // zplace[i]) % zn[i]
            bad = bad_signal(i, zi, n, vals, owner, mprice[prof], payoff[prof, i], 0.0, a_states, a_probs, a_levels,
                             qs, rng)
            zc_new += next_state(i, zi, bad, a_states, a_probs, rng) * zplace[i]
    return s_new + S * zc_new


@njit(cache=True, nogil=True)
def _next(x, G):
    return _after(x, _profile(x, G), G)


@njit(cache=True, nogil=True)
def _cycle_of(x0, G):
    """Brent's cycle detection (Brent, 1980, "An improved Monte Carlo factorization algorithm", BIT
    20) on greedy play from system state ``x0``.

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
    tort = x0
    hare = _next(x0, G)
    while tort != hare:
        if power == lam:
            tort = hare
            power *= 2
            lam = 0
        hare = _next(hare, G)
        lam += 1
    tort = x0
    hare = x0
    for _ in range(lam):
        hare = _next(hare, G)
    mu = 0
    while tort != hare:
        tort = _next(tort, G)
        hare = _next(hare, G)
        mu += 1
    return mu, lam, tort


@njit(cache=True, nogil=True)
def _value(x0, seat, d, G):
    """Discounted profit of ``seat`` from system state ``x0`` on when everyone plays greedily forever:
    the transient sum plus the cycle's sum times ``1 / (1 - d**lam)`` -- exact, no truncation."""
    payoff = G[16]
    mu, lam, _entry = _cycle_of(x0, G)
    v = 0.0
    w = 1.0
    x = x0
    for _ in range(mu):
        prof = _profile(x, G)
        v += w * payoff[prof, seat]
        w *= d
        x = _after(x, prof, G)
    c = 0.0
    wc = 1.0
    for _ in range(lam):
        prof = _profile(x, G)
        c += wc * payoff[prof, seat]
        wc *= d
        x = _after(x, prof, G)
    return v + w * c / (1.0 - wc)


@njit(cache=True, nogil=True)
def _on_cycle(x, entry, lam, G):
    """True when system state ``x`` is one of the ``lam`` states of the cycle through ``entry``."""
    y = entry
    for _ in range(lam):
        if y == x:
            return True
        y = _next(y, G)
    return False


@njit(cache=True, nogil=True)
def _forced_action(payoff, base, step, m_dev, deviator, dev_action):
    """The deviator's action in the deviation period: ``dev_action`` when given (>= 0), else its
    best response (the first of equal ones) in the profile ``base + a * step``, ``a`` its action."""
    if dev_action >= 0:
        return dev_action
    a_dev = 0
    best = payoff[base, deviator]
    for a in range(1, m_dev):
        v = payoff[base + a * step, deviator]
        if v > best:
            best = v
            a_dev = a
    return a_dev


@njit(cache=True, nogil=True)
def _add_profile(out_prices, out_profits, row, p, prices, payoff):
    """Add profile ``p``'s prices and profits to row ``row`` of the response arrays."""
    for i in range(out_prices.shape[1]):
        out_prices[row, i] += prices[p, i]
        out_profits[row, i] += payoff[p, i]


@njit(cache=True, nogil=True)
def _follow(y, tau0, stop, G, prices, out_prices, out_profits, deviator, d_dev, horizon, v, w):
    """Greedy play from system state ``y`` in periods ``tau0 .. stop-1`` (counted from the deviation
    period, 1). Each period's profile is added to its row of the response arrays (rows beyond them are
    not recorded); in periods ``tau <= horizon`` the deviator's profit, weighted by ``w`` and then
    ``w * d_dev``, ``w * d_dev**2``, ..., is added to ``v``, which is returned (in this order, so that the
    plain-Python twin's sums are matched bit for bit)."""
    payoff = G[16]
    rows = out_prices.shape[0]
    for tau in range(tau0, stop):
        p = _profile(y, G)
        if tau < rows:
            _add_profile(out_prices, out_profits, tau, p, prices, payoff)
        if tau <= horizon:
            v += w * payoff[p, deviator]
            w *= d_dev
        y = _after(y, p, G)
    return v


@njit(cache=True, nogil=True)
def _analyse(x_final, G, actions, prices, deviator, dev_action, d_dev, n_points, cycle_out, lim_actions, lim_prices,
             lim_profits, ir_prices, ir_profits, cf_prices, cf_profits, info):
    """The limit path from the final state and the impulse response to a one-period deviation.

    Parameters
    ----------
    x_final : int
        System state at the end of learning.
    G : tuple
        The line-up (see the comment above :func:`_profile`).
    actions, prices : float64 arrays of shape (M, n)
        Action value and price of every seat at every profile (profits are ``G[16]``).
    deviator : int
        Seat forced to deviate.
    dev_action : int
        Its forced action index, or -1 for its static best response (over its actions, first index
        on ties) to the rivals' actions in the deviation period.
    d_dev : float
        Discount factor of the deviator's value.
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
    radix, place, M, S, payoff = G[2], G[3], G[5], G[6], G[16]
    n = place.size
    mu, lam, entry = _cycle_of(x_final, G)
    lim_actions[:] = 0.0
    lim_prices[:] = 0.0
    lim_profits[:] = 0.0
    x = entry
    for c in range(lam):
        prof = _profile(x, G)
        if c < cycle_out.size:
            cycle_out[c] = prof
        for i in range(n):
            lim_actions[i] += actions[prof, i]
            lim_prices[i] += prices[prof, i]
            lim_profits[i] += payoff[prof, i]
        x = _after(x, prof, G)
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
    m_dev = radix[deviator]
    x = entry
    for _c in range(points):
        # the period before the deviation: the last profile of the history
        last = (x % S) % M
        _add_profile(ir_prices, ir_profits, 0, last, prices, payoff)
        _add_profile(cf_prices, cf_profits, 0, last, prices, payoff)
        # the deviation period: the others play greedily in x, the deviator is forced
        prof = _profile(x, G)
        base = prof - ((prof // place[deviator]) % m_dev) * place[deviator]
        a_dev = _forced_action(payoff, base, place[deviator], m_dev, deviator, dev_action)
        if first_action < 0:
            first_action = a_dev
        pdev = base + a_dev * place[deviator]
        _add_profile(ir_prices, ir_profits, 1, pdev, prices, payoff)
        y0 = _after(x, pdev, G)
        # the responses only (horizon -1: no value; the exact values follow)
        _follow(y0, 2, T2, G, prices, ir_prices, ir_profits, deviator, d_dev, -1, 0.0, 1.0)
        _follow(x, 1, T2, G, prices, cf_prices, cf_profits, deviator, d_dev, -1, 0.0, 1.0)
        # exact discounted value of deviating versus not
        v_dev = payoff[pdev, deviator] + d_dev * _value(y0, deviator, d_dev, G)
        v_no = _value(x, deviator, d_dev, G)
        gain = v_dev - v_no
        gain_sum += gain
        if gain > 1e-9 * max(1.0, abs(v_no)):
            pays += 1
        mu2, lam2, entry2 = _cycle_of(y0, G)
        if lam2 == lam and _on_cycle(entry2, entry, lam, G):
            returned += 1
            ret_sum += mu2 + 1.0
        x = _next(x, G)
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


# ------------------------------------------------------------------------------------------------
# Greedy play with automata that act at random: a Markov chain, estimated by simulation
# ------------------------------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _jump(rng):
    """Advance the generator state ``rng`` (modified in place) by 2**128 draws: the start of a
    subsequence that does not overlap the 2**128 draws after the current state."""
    s0 = np.uint64(0)
    s1 = np.uint64(0)
    s2 = np.uint64(0)
    s3 = np.uint64(0)
    one = np.uint64(1)
    for i in range(4):
        for b in range(64):
            if (JUMP[i] >> np.uint64(b)) & one:
                s0 ^= rng[0]
                s1 ^= rng[1]
                s2 ^= rng[2]
                s3 ^= rng[3]
            next_u64(rng)
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3


@njit(cache=True, nogil=True)
def _branch(x, G, prices, deviator, dev_action, d_dev, horizon, ir_prices, ir_profits, cf_prices, cf_profits,
            start, out):
    """One simulated deviation from system state ``x``: the deviation path, then the path without
    deviation, both drawing from generator state ``start`` (common random numbers; copied into
    ``G[22]``, which is left modified).

    Each path runs ``max(horizon, T + 1)`` periods, the deviation period included; the first
    ``T + 1`` are added to rows ``1 .. T+1`` of the response arrays, the first ``horizon`` give the
    deviator's discounted profit. Row 0 receives the last profile of the history. ``out`` receives
    ``[value with deviation, value without, forced action]``.
    """
    radix, place, M, S, payoff, rng = G[2], G[3], G[5], G[6], G[16], G[22]
    T2 = ir_prices.shape[0]
    length = max(horizon, T2 - 1)
    last = (x % S) % M
    _add_profile(ir_prices, ir_profits, 0, last, prices, payoff)
    _add_profile(cf_prices, cf_profits, 0, last, prices, payoff)
    for k in range(4):
        rng[k] = start[k]
    prof = _profile(x, G)
    m_dev = radix[deviator]
    base = prof - ((prof // place[deviator]) % m_dev) * place[deviator]
    a_dev = _forced_action(payoff, base, place[deviator], m_dev, deviator, dev_action)
    pdev = base + a_dev * place[deviator]
    _add_profile(ir_prices, ir_profits, 1, pdev, prices, payoff)
    v_dev = _follow(_after(x, pdev, G), 2, length + 1, G, prices, ir_prices, ir_profits, deviator, d_dev, horizon,
                    payoff[pdev, deviator], d_dev)
    for k in range(4):
        rng[k] = start[k]
    v_no = _follow(x, 1, length + 1, G, prices, cf_prices, cf_profits, deviator, d_dev, horizon, 0.0, 1.0)
    out[0] = v_dev
    out[1] = v_no
    out[2] = a_dev


@njit(cache=True, nogil=True)
def _estimate(x_final, G, actions, prices, deviator, dev_action, d_dev, n_points, burn_in, n_periods, horizon,
              lim_actions, lim_prices, lim_profits, ir_prices, ir_profits, cf_prices, cf_profits, info):
    """Limit outcomes and impulse response of greedy play when automata act at random: estimates.

    With an automaton that draws (forgiveness, lapses, cheating with a probability strictly between 0
    and 1) greedy play from the final state is a Markov chain, not a deterministic path: there is no
    exact limit cycle. This function simulates it. ``G[22]`` holds, on entry, the session's generator
    state at the end of learning, ``r``:

    1. the *main path* draws from ``r`` on: ``burn_in`` periods of greedy play from ``x_final``, not
       recorded, then ``n_periods`` periods whose means give ``lim_actions``, ``lim_prices`` and
       ``lim_profits``;
    2. at the start of periods ``0, s, 2 s, ...`` of the recorded ones (``points = min(n_points,
       n_periods)`` of them, ``s = n_periods // points``) deviation ``b`` (from 0) is simulated by
       :func:`_branch` from the main path's current state, drawing from ``r`` advanced by
       ``(b + 1) * 2**128`` draws (:func:`_jump`): the deviations never share a draw with each other
       or with the main path, which goes on as if they had not happened.

    Parameters
    ----------
    x_final : int
        System state at the end of learning.
    G : tuple
        The line-up (see the comment above :func:`_profile`); ``G[22]`` the generator (modified).
    actions, prices : float64 arrays of shape (M, n)
    deviator, dev_action, d_dev : as in :func:`_analyse`
    n_points, burn_in, n_periods : int
    horizon : int
        Periods (the deviation period included) over which each value is summed; the truncated tail
        is at most ``d_dev**horizon * max|profit| / (1 - d_dev)`` per value.
    lim_actions, lim_prices, lim_profits : float64 arrays of shape (n,)
    ir_prices, ir_profits, cf_prices, cf_profits : float64 arrays of shape (T + 2, n)
        Receive the means over the simulated deviations (rows as in :func:`_analyse`).
    info : float64 array of shape (8,)
        Receives ``[-1 (no transient), 0 (no cycle), points, mean realised value gain of the
        deviation, share of deviations with a positive realised gain, nan, nan, forced action at the
        first deviation]``.
    """
    payoff, rng = G[16], G[22]
    n = lim_actions.size
    lim_actions[:] = 0.0
    lim_prices[:] = 0.0
    lim_profits[:] = 0.0
    ir_prices[:, :] = 0.0
    ir_profits[:, :] = 0.0
    cf_prices[:, :] = 0.0
    cf_profits[:, :] = 0.0
    branch = rng.copy()
    main = np.empty(4, np.uint64)
    out = np.empty(3, np.float64)
    x = x_final
    for _ in range(burn_in):
        x = _next(x, G)
    points = min(n_points, n_periods)
    spacing = n_periods // points
    done = 0
    gain_sum = 0.0
    pays = 0
    first_action = -1
    for t in range(n_periods):
        if done < points and t == done * spacing:
            for k in range(4):
                main[k] = rng[k]
            _jump(branch)
            _branch(x, G, prices, deviator, dev_action, d_dev, horizon, ir_prices, ir_profits, cf_prices,
                    cf_profits, branch, out)
            for k in range(4):
                rng[k] = main[k]
            gain = out[0] - out[1]
            gain_sum += gain
            if gain > 1e-9 * max(1.0, abs(out[1])):
                pays += 1
            if first_action < 0:
                first_action = int(out[2])
            done += 1
        prof = _profile(x, G)
        for i in range(n):
            lim_actions[i] += actions[prof, i]
            lim_prices[i] += prices[prof, i]
            lim_profits[i] += payoff[prof, i]
        x = _after(x, prof, G)
    for i in range(n):
        lim_actions[i] /= n_periods
        lim_prices[i] /= n_periods
        lim_profits[i] /= n_periods
    for tau in range(ir_prices.shape[0]):
        for i in range(n):
            ir_prices[tau, i] /= points
            ir_profits[tau, i] /= points
            cf_prices[tau, i] /= points
            cf_profits[tau, i] /= points
    info[0] = -1.0
    info[1] = 0.0
    info[2] = points
    info[3] = gain_sum / points
    info[4] = pays / points
    info[5] = np.nan
    info[6] = np.nan
    info[7] = first_action
    return x
