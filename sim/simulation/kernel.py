"""Numba kernel of the repeated-game simulation: many replications of one line-up in parallel.

:func:`simulate_chunks` plays replications in chunks (``prange`` over chunks); each replication draws
only from its own xoshiro256** stream (:mod:`sim.core.rng`), and everything accumulated across
replications is an integer count, so the results do not depend on the number of threads, on the
chunking, or on how the driver splits replications into batches. Nothing here allocates in
proportion to the number of periods except the per-period and per-length count arrays, whose size
is ``n_periods`` per chunk; paths are written only for the first ``n_paths`` replications.

One period, in this order (the random draws happen in this order too):

1. each firm picks its state's level, possibly cheating (:func:`strategies.step.choose_level`);
2. implementation errors: one uniform per firm when the error probability is positive; a hit replaces
   the firm's action by its cheating action (``tremble``);
3. the demand shock: one standard normal (ziggurat, :func:`sim.core.rng.next_normal_zig`) when ``noise_code > 0``
   (a normal shock ``1 + sigma Z`` is floored at zero, see :mod:`sim.models.monitoring`);
4. quantities, prices and profits (:func:`sim.models.stagecore.evaluate`);
5. a firm colludes in the period when its state is collusive and it neither cheated nor trembled;
   the period is collusive when every firm colludes; it is a *punishment* period when some firm's
   state is not collusive (the non-collusive periods in which every state is collusive are the
   deviations: cheating and trembles);
6. each firm's signal and next state (:func:`strategies.step.bad_signal`, :func:`next_state`), all
   from the states at the start of the period.

With a random horizon one uniform is drawn before the first period: the number of periods is
``min(n_periods, 1 + floor(log(1 - u) / log(continuation)))``, i.e. the game ends after each period
with probability ``1 - continuation``.

Outputs per replication (``out_int`` columns ``R_*``, ``out_flt`` columns ``F_*``, per-firm sums) and per
chunk (length histograms ``H_*`` of collusive spells, price wars and punishment phases -- maximal runs of
punishment periods -- that ended or were cut off by the horizon, and per-period counts of collusive
replications) are added to what the arrays already hold, so that the
driver can call the kernel batch after batch.

Speed: the per-period helpers (:func:`strategies.step.choose_level`, :func:`~strategies.step.bad_signal`,
:func:`~strategies.step.next_state`, :func:`sim.models.stagecore.evaluate`, :func:`sim.core.rng.next_normal_zig`) are
declared ``inline="always"``, so that the period loop below has no out-of-line calls with array
arguments; the kernel stays generic (any line-up, any market code) and computes exactly what the
plain-Python twin computes.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from sim.core.rng import next_double, next_normal_zig
from sim.models.stagecore import evaluate
from strategies.step import COLLUSIVE, INITIAL, bad_signal, choose_level, next_state

__all__ = ["simulate_chunks"]

# integer results per replication
R_PERIODS, R_COLLUSIVE, R_WARS, R_WARS_ENDED, R_WAR_PERIODS, R_WAR_PERIODS_ENDED = range(6)
R_SPELLS, R_SPELLS_ENDED, R_SPELL_PERIODS_ENDED, R_FIRST_BREAKDOWN, R_CHEATS, R_TREMBLES = range(6, 12)
N_RINT = 12
# float results per replication
F_PRICE_SUM, F_CS_SUM = range(2)
N_RFLT = 2
# histograms per chunk
H_SPELL_ENDED, H_SPELL_CENSORED, H_WAR_ENDED, H_WAR_CENSORED, H_PUNISH_ENDED, H_PUNISH_CENSORED = range(6)
N_HIST = 6
# path flags per firm
FLAG_CHEAT, FLAG_TREMBLE, FLAG_COLLUDE = 1, 2, 4
# path market columns
M_PRICE, M_THETA, M_SURPLUS = range(3)

STATUS_OK = 0
STATUS_EVALUATION_FAILED = 1

_DISC_FLOOR = 1e-300  # discount weights below this are set to zero (avoids slow subnormal arithmetic)


@njit(cache=True)
def horizon_length(rng, n_periods, random_horizon, continuation):
    """Number of periods of one replication (draws one uniform with a random horizon)."""
    if not random_horizon:
        return n_periods
    u = next_double(rng)
    if continuation >= 1.0:
        return n_periods
    h = 1 + int(math.floor(math.log(1.0 - u) / math.log(continuation)))  # noqa: RUF046 (an int in numba too)
    return min(h, n_periods)


@njit(cache=True, parallel=True)
def simulate_chunks(chunk_start, rng_states, rep_offset,
                    code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting,
                    states, probs, firms, levels, tremble_profile,
                    noise_code, sigma, perception_error, implementation_error,
                    n_periods, delta, random_horizon, continuation, n_paths,
                    out_profit, out_disc, out_int, out_flt, hist, by_period,
                    path_actions, path_prices, path_market, path_profit, path_state, path_flags, path_collude,
                    status):
    """Play replications ``chunk_start[c] .. chunk_start[c+1]-1`` (batch-local indices) for every chunk c.

    Parameters
    ----------
    chunk_start : int64 ndarray of shape (n_chunks + 1,)
    rng_states : uint64 ndarray of shape (n_batch, 4)
        One generator state per replication of the batch (advanced in place).
    rep_offset : int
        Global index of the batch's first replication (paths are recorded for global indices below
        ``n_paths``).
    code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting :
        The market (see :class:`sim.models.stagecore.MarketArrays`).
    states, probs, firms, levels :
        The compiled line-up (see :mod:`strategies.step`).
    tremble_profile : ndarray of shape (n_products,)
        Action of each product when its firm makes an implementation error.
    noise_code : int
        0 no shock, 1 lognormal, 2 normal.
    sigma, perception_error, implementation_error, delta, continuation : float
    n_periods : int
    random_horizon : bool
    n_paths : int
    out_profit, out_disc : ndarray of shape (n_batch, n_firms)
        Sum and discounted sum of each firm's profits (added to).
    out_int : int64 ndarray of shape (n_batch, N_RINT)
    out_flt : ndarray of shape (n_batch, N_RFLT)
    hist : int64 ndarray of shape (n_chunks, N_HIST, n_periods + 1)
    by_period : int64 ndarray of shape (n_chunks, n_periods)
        Per period, replications in which every firm colluded (added to).
    path_* : path buffers, first axis ``max(n_paths, 1)``, second ``n_periods``
    status : int64 ndarray of shape (n_chunks,)
        Output: ``STATUS_OK`` or the first failure code of the chunk.
    """
    n_chunks = chunk_start.shape[0] - 1
    n_products = owner.shape[0]
    s2 = 0.5 * sigma * sigma
    for c in prange(n_chunks):
        state = np.empty(n_firms, dtype=np.int64)
        new_state = np.empty(n_firms, dtype=np.int64)
        lev = np.empty(n_firms, dtype=np.int64)
        cheated = np.zeros(n_firms, dtype=np.bool_)
        trembled = np.zeros(n_firms, dtype=np.bool_)
        actions = np.empty(n_products)
        q = np.empty(n_products)
        p = np.empty(n_products)
        profit = np.empty(n_firms)
        work = np.empty((2, n_products))
        psum = np.empty(n_firms)
        dsum = np.empty(n_firms)
        st_code = STATUS_OK
        for r in range(chunk_start[c], chunk_start[c + 1]):
            rng = rng_states[r]
            g = rep_offset + r
            record = g < n_paths
            H = horizon_length(rng, n_periods, random_horizon, continuation)
            for i in range(n_firms):
                state[i] = firms[i, INITIAL]
                psum[i] = 0.0
                dsum[i] = 0.0
            disc = 1.0
            prev = False
            run = 0
            prun = 0
            price_sum = 0.0
            cs_sum = 0.0
            n_coll = 0
            n_war = 0
            n_wars = 0
            n_wars_ended = 0
            war_ended_periods = 0
            n_spells = 0
            n_spells_ended = 0
            spell_ended_periods = 0
            first = 0
            n_cheat = 0
            n_tremble = 0
            played = 0
            for t in range(H):
                for i in range(n_firms):
                    L, ch = choose_level(i, state[i], t, states, probs, firms, rng)
                    lev[i] = L
                    cheated[i] = ch
                    if ch:
                        n_cheat += 1
                if implementation_error > 0.0:
                    for i in range(n_firms):
                        trembled[i] = next_double(rng) < implementation_error
                        if trembled[i]:
                            n_tremble += 1
                for k in range(n_products):
                    i = owner[k]
                    actions[k] = tremble_profile[k] if trembled[i] else levels[i, lev[i], k]
                theta = 1.0
                if noise_code == 1:
                    theta = math.exp(sigma * next_normal_zig(rng) - s2)
                elif noise_code == 2:
                    theta = 1.0 + sigma * next_normal_zig(rng)
                    if theta < 0.0:
                        theta = 0.0
                mp, cs = evaluate(code, scalars, vector, cost, capacity, owner, n_firms, actions, theta, q, p,
                                  profit, work, True)
                if mp != mp:
                    st_code = STATUS_EVALUATION_FAILED
                    break
                all_c = True
                punishing = False
                for i in range(n_firms):
                    if states[i, state[i], COLLUSIVE] == 0:
                        all_c = False
                        punishing = True
                    elif cheated[i] or trembled[i]:
                        all_c = False
                if record:
                    for k in range(n_products):
                        path_actions[g, t, k] = actions[k]
                        path_prices[g, t, k] = p[k]
                    path_market[g, t, M_PRICE] = mp
                    path_market[g, t, M_THETA] = theta
                    path_market[g, t, M_SURPLUS] = cs
                    for i in range(n_firms):
                        path_profit[g, t, i] = profit[i]
                        path_state[g, t, i] = state[i]
                        fl = 0
                        if cheated[i]:
                            fl |= FLAG_CHEAT
                        if trembled[i]:
                            fl |= FLAG_TREMBLE
                        if states[i, state[i], COLLUSIVE] != 0 and not cheated[i] and not trembled[i]:
                            fl |= FLAG_COLLUDE
                        path_flags[g, t, i] = fl
                    path_collude[g, t] = 1 if all_c else 0
                # signals and transitions, all from the states at the start of the period
                for i in range(n_firms):
                    bad = bad_signal(i, state[i], n_firms, actions, owner, mp, profit[i], perception_error,
                                     states, probs, levels, quantity_setting, rng)
                    new_state[i] = next_state(i, state[i], bad, states, probs, rng)
                for i in range(n_firms):
                    state[i] = new_state[i]
                # streamed metrics
                for i in range(n_firms):
                    psum[i] += profit[i]
                    dsum[i] += disc * profit[i]
                disc *= delta
                if disc < _DISC_FLOOR:
                    disc = 0.0
                price_sum += mp
                cs_sum += cs
                if all_c:
                    by_period[c, t] += 1
                    n_coll += 1
                else:
                    n_war += 1
                    if first == 0:
                        first = t + 1
                if t == 0:
                    run = 1
                    if all_c:
                        n_spells += 1
                    else:
                        n_wars += 1
                elif all_c == prev:
                    run += 1
                else:
                    if prev:
                        hist[c, H_SPELL_ENDED, run] += 1
                        n_spells_ended += 1
                        spell_ended_periods += run
                        n_wars += 1
                    else:
                        hist[c, H_WAR_ENDED, run] += 1
                        n_wars_ended += 1
                        war_ended_periods += run
                        n_spells += 1
                    run = 1
                prev = all_c
                if punishing:
                    prun += 1
                elif prun > 0:
                    hist[c, H_PUNISH_ENDED, prun] += 1
                    prun = 0
                played += 1
            if st_code != STATUS_OK:
                break
            if run > 0:
                if prev:
                    hist[c, H_SPELL_CENSORED, run] += 1
                else:
                    hist[c, H_WAR_CENSORED, run] += 1
            if prun > 0:
                hist[c, H_PUNISH_CENSORED, prun] += 1
            for i in range(n_firms):
                out_profit[r, i] += psum[i]
                out_disc[r, i] += dsum[i]
            out_flt[r, F_PRICE_SUM] += price_sum
            out_flt[r, F_CS_SUM] += cs_sum
            out_int[r, R_PERIODS] += played
            out_int[r, R_COLLUSIVE] += n_coll
            out_int[r, R_WAR_PERIODS] += n_war
            out_int[r, R_WARS] += n_wars
            out_int[r, R_WARS_ENDED] += n_wars_ended
            out_int[r, R_WAR_PERIODS_ENDED] += war_ended_periods
            out_int[r, R_SPELLS] += n_spells
            out_int[r, R_SPELLS_ENDED] += n_spells_ended
            out_int[r, R_SPELL_PERIODS_ENDED] += spell_ended_periods
            out_int[r, R_FIRST_BREAKDOWN] += first
            out_int[r, R_CHEATS] += n_cheat
            out_int[r, R_TREMBLES] += n_tremble
        status[c] = st_code
