"""numba kernels of greedy play after learning: the limit cycle, the impulse response and the value of a deviation.

Inputs are the groups of :mod:`sim.learning.inputs`; the twins are :func:`sim.learning.twin.reference_analysis`
and :func:`sim.learning.twin.reference_estimate`, equal bit for bit.

The whole system is one integer, ``x = s + S * sum_i z[i] * zplace[i]`` (``s`` the history state, ``z[i]`` the
state of automaton seat ``i``, ``zn[i]`` its number of states; ``zn = 1``, ``zplace = 0`` for learners). With
deterministic automata, greedy play is a map on these integers, and its cycle is found by Brent's method
(:func:`analyse_limit`, exact). With an automaton that acts at random greedy play is a Markov chain on them instead;
:func:`estimate_limit` simulates it (a seeded estimate, no cycle). The estimate continues the session's stream for
its main path and gives each simulated deviation a non-overlapping subsequence of it (jumps of 2**128 draws); the
exact analysis draws nothing.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from sim.core.rng import next_u64
from sim.learning.inputs import AUTOMATON, LEARNER
from strategies.step import bad_signal, choose_level, next_state

__all__ = ["JUMP", "analyse_limit", "cycle_of", "estimate_limit", "jump", "value_of"]

#: xoshiro256** jump polynomial: advancing by 2**128 draws (Blackman and Vigna, 2021, "Scrambled linear
#: pseudorandom number generators", ACM TOMS 47(4); their reference code's ``jump``)
JUMP = np.array([0x180EC6D33CFD0ABA, 0xD5A61266F0C9392C, 0xA9582618E03FC9AA, 0x39ABDC4529B1661C], dtype=np.uint64)

#: a deviation "pays" when its value gain exceeds this share of the value without it (at least 1)
_PAYS_TOL = 1e-9


@njit(cache=True, nogil=True)
def _profile(x, play):
    """The profile everyone plays greedily in system state ``x``."""
    # the arrays as locals, taken once: an access through a tuple takes and releases a reference every time
    kind, lidx, radix, place, mod, zn, zplace = (play.seats.kind, play.seats.lidx, play.seats.radix,
                                                 play.seats.place, play.seats.mod, play.seats.zn, play.seats.zplace)
    a_states, a_probs, a_firms, act_of_level = (play.automata.states, play.automata.probs, play.automata.firms,
                                                play.automata.act_of_level)
    greedy, rng, t_end, S = play.greedy, play.rng, play.t_end, play.stage.S
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
def _after(x, prof, play):
    """System state after profile ``prof`` is played in system state ``x``."""
    kind, radix, place, zn, zplace, owner = (play.seats.kind, play.seats.radix, play.seats.place, play.seats.zn,
                                             play.seats.zplace, play.seats.owner)
    M, S, K, payoff, mprice, values, qs = (play.stage.M, play.stage.S, play.stage.K, play.stage.payoff,
                                           play.stage.mprice, play.stage.values, play.stage.quantity_setting)
    n = radix.size
    s = x % S
    zc = x // S
    s_new = prof if K == 1 else prof + (s * M) % S
    if zc == 0 and zn.max() == 1:
        return s_new
    a_states, a_probs, a_levels, rng = play.automata.states, play.automata.probs, play.automata.levels, play.rng
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
def _next(x, play):
    return _after(x, _profile(x, play), play)


@njit(cache=True, nogil=True)
def cycle_of(x0, play):
    """Brent's cycle detection (Brent, 1980, "An improved Monte Carlo factorization algorithm", BIT 20) on greedy
    play from system state ``x0``.

    Parameters
    ----------
    x0 : int
        The system state greedy play starts from.
    play : Play
        A deterministic line-up (no automaton that acts at random).

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
    hare = _next(x0, play)
    while tort != hare:
        if power == lam:
            tort = hare
            power *= 2
            lam = 0
        hare = _next(hare, play)
        lam += 1
    tort = x0
    hare = x0
    for _ in range(lam):
        hare = _next(hare, play)
    mu = 0
    while tort != hare:
        tort = _next(tort, play)
        hare = _next(hare, play)
        mu += 1
    return mu, lam, tort


@njit(cache=True, nogil=True)
def limit_prices_of(x0, play, out):
    """The mean prices of the cycle greedy play from system state ``x0`` enters (into ``out``, one per seat): the
    limit a line-up would play if it stopped learning in state ``x0``.

    Parameters
    ----------
    x0 : int
        The system state greedy play starts from.
    play : Play
        A deterministic line-up (no automaton that acts at random).
    out : ndarray of float64, shape (n_seats,)
        Overwritten with the means.
    """
    _, lam, x = cycle_of(x0, play)
    out[:] = 0.0
    for _ in range(lam):
        prof = _profile(x, play)
        for i in range(out.size):
            out[i] += play.stage.prices[prof, i]
        x = _after(x, prof, play)
    for i in range(out.size):
        out[i] /= lam


@njit(cache=True, nogil=True)
def value_of(x0, seat, d, play):
    """Discounted profit of ``seat`` from system state ``x0`` on when everyone plays greedily forever: the
    transient sum plus the cycle's sum times ``1 / (1 - d**lam)`` -- exact, no truncation.

    Parameters
    ----------
    x0 : int
        The system state greedy play starts from.
    seat : int
        Whose profit.
    d : float
        Discount factor in [0, 1).
    play : Play
        A deterministic line-up.

    Returns
    -------
    float
    """
    return _value_with(x0, d, play, play.stage.payoff[:, seat])


@njit(cache=True, nogil=True)
def _value_with(x0, d, play, profit):
    """:func:`value_of` with the profit at each profile given (``profit[prof]``)."""
    mu, lam, _entry = cycle_of(x0, play)
    v = 0.0
    w = 1.0
    x = x0
    for _ in range(mu):
        prof = _profile(x, play)
        v += w * profit[prof]
        w *= d
        x = _after(x, prof, play)
    c = 0.0
    wc = 1.0
    for _ in range(lam):
        prof = _profile(x, play)
        c += wc * profit[prof]
        wc *= d
        x = _after(x, prof, play)
    return v + w * c / (1.0 - wc)


@njit(cache=True, nogil=True, inline="always")
def _dev_profit(prof, play, dev):
    """The deviator's profit at profile ``prof`` as its deviation is valued: its owner's after a merger
    (``dev.value``), else its own."""
    if dev.value.size > 0:
        return dev.value[prof]
    return play.stage.payoff[prof, dev.seat]


@njit(cache=True, nogil=True)
def _dev_value(x0, play, dev):
    """:func:`value_of` for the deviator, its profit as :func:`_dev_profit` takes it (the same sums, in the same
    order)."""
    if dev.value.size > 0:
        return _value_with(x0, dev.discount, play, dev.value)
    return _value_with(x0, dev.discount, play, play.stage.payoff[:, dev.seat])


@njit(cache=True, nogil=True)
def _on_cycle(x, entry, lam, play):
    """True when system state ``x`` is one of the ``lam`` states of the cycle through ``entry``."""
    y = entry
    for _ in range(lam):
        if y == x:
            return True
        y = _next(y, play)
    return False


@njit(cache=True, nogil=True)
def _deviation_profile(x, play, dev):
    """The profile of the deviation period in system state ``x``: the others play greedily, the deviator its
    forced action (``dev.action``, or its best response -- the first of equal ones -- to the others' actions).
    Returns the profile and the deviator's action."""
    place, seat = play.seats.place, dev.seat
    m_dev = play.seats.radix[seat]
    prof = _profile(x, play)
    base = prof - ((prof // place[seat]) % m_dev) * place[seat]
    a_dev = dev.action
    if a_dev < 0:
        a_dev = 0
        best = _dev_profit(base, play, dev)
        for a in range(1, m_dev):
            v = _dev_profit(base + a * place[seat], play, dev)
            if v > best:
                best = v
                a_dev = a
    return base + a_dev * place[seat], a_dev


@njit(cache=True, nogil=True)
def _add_profile(out_prices, out_profits, row, p, stage):
    """Add profile ``p``'s prices and profits to row ``row`` of the response arrays."""
    for i in range(out_prices.shape[1]):
        out_prices[row, i] += stage.prices[p, i]
        out_profits[row, i] += stage.payoff[p, i]


@njit(cache=True, nogil=True)
def _follow(y, tau0, stop, play, out_prices, out_profits, dev, horizon, v, w):
    """Greedy play from system state ``y`` in periods ``tau0 .. stop-1`` (counted from the deviation period, 1).
    Each period's profile is added to its row of the response arrays (rows beyond them are not recorded); in
    periods ``tau <= horizon`` the deviator's profit, weighted by ``w`` and then ``w * d``, ``w * d**2``, ...
    (``d = dev.discount``), is added to ``v``, which is returned (in this order, so that the twin's sums are
    matched bit for bit)."""
    rows = out_prices.shape[0]
    for tau in range(tau0, stop):
        p = _profile(y, play)
        if tau < rows:
            _add_profile(out_prices, out_profits, tau, p, play.stage)
        if tau <= horizon:
            v += w * _dev_profit(p, play, dev)
            w *= dev.discount
        y = _after(y, p, play)
    return v


@njit(cache=True, nogil=True)
def _clear(out):
    """Zero the means and the response arrays of ``out``."""
    out.lim_actions[:] = 0.0
    out.lim_prices[:] = 0.0
    out.lim_profits[:] = 0.0
    out.ir_prices[:, :] = 0.0
    out.ir_profits[:, :] = 0.0
    out.cf_prices[:, :] = 0.0
    out.cf_profits[:, :] = 0.0


@njit(cache=True, nogil=True)
def _add_means(out, prof, stage):
    """Add profile ``prof`` to the sums of the limit means."""
    for i in range(out.lim_actions.size):
        out.lim_actions[i] += stage.actions[prof, i]
        out.lim_prices[i] += stage.prices[prof, i]
        out.lim_profits[i] += stage.payoff[prof, i]


@njit(cache=True, nogil=True)
def _divide(out, periods, points):
    """Sums to means: the limit means over ``periods``, the response rows over ``points``."""
    n = out.lim_actions.size
    for i in range(n):
        out.lim_actions[i] /= periods
        out.lim_prices[i] /= periods
        out.lim_profits[i] /= periods
    for tau in range(out.ir_prices.shape[0]):
        for i in range(n):
            out.ir_prices[tau, i] /= points
            out.ir_profits[tau, i] /= points
            out.cf_prices[tau, i] /= points
            out.cf_profits[tau, i] /= points


@njit(cache=True, nogil=True)
def _record_before(x, out, stage):
    """Row 0 of both response arrays: the last profile of the history of system state ``x``."""
    last = (x % stage.S) % stage.M
    _add_profile(out.ir_prices, out.ir_profits, 0, last, stage)
    _add_profile(out.cf_prices, out.cf_profits, 0, last, stage)


@njit(cache=True, nogil=True)
def _deviate_exactly(x, entry, lam, play, dev, out):
    """The deviation from cycle point ``x`` (the cycle through ``entry``, of length ``lam``): its responses
    added to ``out``, its exact value gain, whether play returns to the cycle and after how many periods."""
    T2 = out.ir_prices.shape[0]
    _record_before(x, out, play.stage)
    pdev, a_dev = _deviation_profile(x, play, dev)
    _add_profile(out.ir_prices, out.ir_profits, 1, pdev, play.stage)
    y0 = _after(x, pdev, play)
    # the responses only (horizon -1: no value; the exact values follow)
    _follow(y0, 2, T2, play, out.ir_prices, out.ir_profits, dev, -1, 0.0, 1.0)
    _follow(x, 1, T2, play, out.cf_prices, out.cf_profits, dev, -1, 0.0, 1.0)
    v_dev = _dev_profit(pdev, play, dev) + dev.discount * _dev_value(y0, play, dev)
    v_no = _dev_value(x, play, dev)
    mu2, lam2, entry2 = cycle_of(y0, play)
    back = lam2 == lam and _on_cycle(entry2, entry, lam, play)
    # periods after the deviation until the state is on the cycle again: 1 when the period after it is already back,
    # 0 when the forced deviation was the price the cycle plays there (the deviation left nothing)
    return v_dev - v_no, v_no, back, float(mu2), a_dev


@njit(cache=True, nogil=True)
def analyse_limit(x_final, play, dev, out):
    """The limit path from the final state and the impulse response to a one-period deviation, exact.

    Parameters
    ----------
    x_final : int
        System state at the end of learning.
    play : Play
        A deterministic line-up and its learned greedy tables.
    dev : DeviationInputs
        The deviation (``burn_in``, ``periods`` and ``horizon`` unused); it starts from at most ``dev.points``
        points of the limit cycle, the first ones from its entry.
    out : LimitOutputs
        Receives the cycle, the means over it, the impulse response and the path without deviation averaged over
        the points deviated from, and ``info``: ``[mu, lam, points, mean value gain of the deviation, share of
        points where it pays, share of points after which play returns to the same cycle, mean periods to return
        (nan if never), forced action at the first point]``.
    """
    mu, lam, entry = cycle_of(x_final, play)
    _clear(out)
    x = entry
    for c in range(lam):
        prof = _profile(x, play)
        if c < out.cycle.size:
            out.cycle[c] = prof
        _add_means(out, prof, play.stage)
        x = _after(x, prof, play)
    points = min(lam, dev.points)
    gain_sum = 0.0
    pays = 0
    returned = 0
    ret_sum = 0.0
    first_action = -1
    x = entry
    for _c in range(points):
        gain, v_no, back, periods, a_dev = _deviate_exactly(x, entry, lam, play, dev, out)
        if first_action < 0:
            first_action = a_dev
        gain_sum += gain
        if gain > _PAYS_TOL * max(1.0, abs(v_no)):
            pays += 1
        if back:
            returned += 1
            ret_sum += periods
        x = _next(x, play)
    _divide(out, lam, points)
    info = out.info
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
def jump(rng):
    """Advance a generator state by 2**128 draws: the start of a subsequence that does not overlap the 2**128
    draws after the current state.

    Parameters
    ----------
    rng : ndarray of uint64, shape (4,)
        xoshiro256** state, modified in place.
    """
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
def _branch(x, play, dev, out, start):
    """One simulated deviation from system state ``x``: the deviation path, then the path without deviation,
    both drawing from generator state ``start`` (common random numbers; copied into ``play.rng``, which is left
    modified).

    Each path runs ``max(horizon, T + 1)`` periods, the deviation period included; the first ``T + 1`` are added
    to rows ``1 .. T+1`` of the response arrays, the first ``horizon`` give the deviator's discounted profit. Row 0
    receives the last profile of the history. Returns the value with the deviation, the value without it and the
    forced action.
    """
    rng = play.rng
    length = max(dev.horizon, out.ir_prices.shape[0] - 1)
    _record_before(x, out, play.stage)
    for k in range(4):
        rng[k] = start[k]
    pdev, a_dev = _deviation_profile(x, play, dev)
    _add_profile(out.ir_prices, out.ir_profits, 1, pdev, play.stage)
    v_dev = _follow(_after(x, pdev, play), 2, length + 1, play, out.ir_prices, out.ir_profits, dev, dev.horizon,
                    _dev_profit(pdev, play, dev), dev.discount)
    for k in range(4):
        rng[k] = start[k]
    v_no = _follow(x, 1, length + 1, play, out.cf_prices, out.cf_profits, dev, dev.horizon, 0.0, 1.0)
    return v_dev, v_no, a_dev


@njit(cache=True, nogil=True)
def estimate_limit(x_final, play, dev, out):
    """Limit outcomes and impulse response of greedy play when automata act at random: estimates.

    With an automaton that draws (forgiveness, lapses, cheating with a probability strictly between 0
    and 1) greedy play from the final state is a Markov chain, not a deterministic path: there is no
    exact limit cycle. This function simulates it. ``play.rng`` holds, on entry, the session's generator
    state at the end of learning, ``r``:

    1. the *main path* draws from ``r`` on: ``dev.burn_in`` periods of greedy play from ``x_final``, not
       recorded, then ``dev.periods`` periods whose means give ``out.lim_actions``, ``out.lim_prices`` and
       ``out.lim_profits``;
    2. at the start of periods ``0, s, 2 s, ...`` of the recorded ones (``points = min(dev.points,
       dev.periods)`` of them, ``s = dev.periods // points``) deviation ``b`` (from 0) is simulated by
       :func:`_branch` from the main path's current state, drawing from ``r`` advanced by
       ``(b + 1) * 2**128`` draws (:func:`jump`): the deviations never share a draw with each other
       or with the main path, which goes on as if they had not happened.

    Parameters
    ----------
    x_final : int
        System state at the end of learning.
    play : Play
        The line-up, its learned greedy tables and the generator (modified).
    dev : DeviationInputs
        The deviation and the simulation: ``burn_in``, ``periods``, ``points``, and ``horizon``, the periods (the
        deviation period included) over which each value is summed; the truncated tail is at most
        ``discount**horizon * max|profit| / (1 - discount)`` per value.
    out : LimitOutputs
        Receives the means over the simulated periods, the impulse response and the path without deviation
        averaged over the simulated deviations (``cycle`` unused), and ``info``: ``[-1 (no transient), 0 (no
        cycle), points, mean realised value gain of the deviation, share of deviations with a positive realised
        gain, nan, nan, forced action at the first deviation]``.

    Returns
    -------
    int
        The main path's system state at the end.
    """
    rng = play.rng
    _clear(out)
    branch = rng.copy()
    main = np.empty(4, np.uint64)
    x = x_final
    for _ in range(dev.burn_in):
        x = _next(x, play)
    points = min(dev.points, dev.periods)
    spacing = dev.periods // points
    done = 0
    gain_sum = 0.0
    pays = 0
    first_action = -1
    for t in range(dev.periods):
        if done < points and t == done * spacing:
            for k in range(4):
                main[k] = rng[k]
            jump(branch)
            v_dev, v_no, a_dev = _branch(x, play, dev, out, branch)
            for k in range(4):
                rng[k] = main[k]
            gain = v_dev - v_no
            gain_sum += gain
            if gain > _PAYS_TOL * max(1.0, abs(v_no)):
                pays += 1
            if first_action < 0:
                first_action = a_dev
            done += 1
        prof = _profile(x, play)
        _add_means(out, prof, play.stage)
        x = _after(x, prof, play)
    _divide(out, dev.periods, points)
    info = out.info
    info[0] = -1.0
    info[1] = 0.0
    info[2] = points
    info[3] = gain_sum / points
    info[4] = pays / points
    info[5] = np.nan
    info[6] = np.nan
    info[7] = first_action
    return x
