"""Numba kernel of the repeated-game simulation: many replications of one line-up in parallel.

:func:`simulate_chunks` plays replications in chunks (``prange`` over chunks); each replication draws
only from its own xoshiro256** stream (:mod:`sim.core.rng`), and everything accumulated across
replications is an integer count, so the results do not depend on the number of threads, on the
chunking, or on how the driver splits replications into batches. Nothing here allocates in
proportion to the number of periods except the per-period and per-length count arrays, whose size
is ``n_periods`` per chunk; paths are written only for the first ``n_paths`` replications.

Inputs come in groups (named tuples, which numba passes by value and types field by field): the
batch of replications (:class:`Batch`), the market (:class:`MarketInputs`), the compiled line-up
(:class:`LineupInputs`), the monitoring (:class:`MonitoringInputs`) and the run settings
(:class:`RunInputs`); outputs are two groups of arrays written in place (:class:`Totals`,
:class:`PathBuffers`). :func:`sim.simulation.driver.kernel_groups` builds the input groups of a game.

One period, in this order (the random draws happen in this order too):

1. each firm picks its state's level, possibly cheating (:func:`strategies.step.choose_level`);
2. implementation errors: one uniform per firm when the error probability is positive; a hit replaces
   the firm's action by its cheating action (``tremble``); then, only in a market with a mixed static
   equilibrium, one uniform for each product whose action is ``MIXED_PRICE``, which draws its price from the
   product's mixed distribution (:func:`sim.models.capacity_stage.draw_mixed`);
3. the demand shock: one standard normal (ziggurat, :func:`sim.core.rng.next_normal_zig`) when
   ``noise_code > 0`` (a normal shock ``1 + sigma Z`` is floored at zero, see :mod:`sim.models.monitoring`);
4. quantities, prices and profits (:func:`sim.models.stagecore.evaluate`);
5. a firm colludes in the period when its state is collusive and it neither cheated nor trembled;
   the period is collusive when every firm colludes; it is a *punishment* period when some firm's
   state is not collusive (the non-collusive periods in which every state is collusive are the
   deviations: cheating and trembles);
6. each firm's signal and next state (:func:`strategies.step.bad_signal`, :func:`next_state`), all
   from the states at the start of the period.

With demand states (:func:`simulate_state_chunks`, :class:`DemandInputs`) a period first takes its state's market
parameters and level profiles, drawn beforehand from another stream family: no draw of the period moves.

With a random horizon one uniform is drawn before the first period: the number of periods is
``min(n_periods, 1 + floor(log(1 - u) / log(continuation)))``, i.e. the game ends after each period
with probability ``1 - continuation``.

Outputs per replication (``Totals.ints`` columns ``R_*``, ``Totals.flts`` columns ``F_*``, per-firm
sums) and per chunk (length histograms ``H_*`` of collusive spells, price wars and punishment phases
-- maximal runs of punishment periods -- that ended or were cut off by the horizon, and per-period
counts of collusive replications) are added to what the arrays already hold, so that the driver can
call the kernel batch after batch.

Speed: the per-period steps (:func:`strategies.step.choose_level`, :func:`~strategies.step.bad_signal`,
:func:`~strategies.step.next_state`, :func:`sim.models.stagecore.evaluate`,
:func:`sim.core.rng.next_normal_zig`) are declared ``inline="always"`` and the rest of the period is written
out in the loop, so that it has no out-of-line calls with array arguments; inlining works on numba's IR and
changes no arithmetic, so the kernel computes exactly what the plain-Python twin (:mod:`sim.simulation.twin`)
computes. :func:`simulate_chunks` takes the grouped inputs and hands their arrays, as plain arguments, to the
parallel loop (a prange body drops writes to arrays reached through a named tuple, numba issue 7135).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit, prange

from sim.core.rng import next_double, next_normal_zig
from sim.models.capacity_stage import MIXED_PRICE, draw_mixed
from sim.models.stagecore import evaluate
from strategies.step import COLLUSIVE, INITIAL, bad_signal, choose_level, next_state

__all__ = ["Batch", "DemandInputs", "LineupInputs", "MarketInputs", "MonitoringInputs", "PathBuffers", "RunInputs",
           "Totals", "horizon_length", "simulate_chunks", "simulate_state_chunks"]

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


# --------------------------------------------------------------------------------------------------
# Input and output groups
# --------------------------------------------------------------------------------------------------


class Batch(NamedTuple):
    """The replications of one kernel call and how they are split into chunks.

    Parameters
    ----------
    chunk_start : int64 ndarray of shape (n_chunks + 1,)
        Chunk ``c`` plays the batch-local replications ``chunk_start[c] .. chunk_start[c + 1] - 1``.
    rng_states : uint64 ndarray of shape (n_batch, 4)
        One generator state per replication of the batch (advanced in place).
    first : int
        Global index of the batch's first replication (paths are recorded for global indices below
        ``RunInputs.n_paths``).
    """

    chunk_start: np.ndarray
    rng_states: np.ndarray
    first: int


class MarketInputs(NamedTuple):
    """The market in the layout of the numba stage core (see :class:`sim.models.stagecore.MarketArrays`).

    Parameters
    ----------
    code : int
        Market code of :func:`sim.models.stagecore.evaluate`.
    scalars : float64 ndarray of shape (4,)
        Scalar demand parameters.
    vector : float64 ndarray of shape (n_products,)
        Per-product demand parameters.
    cost : float64 ndarray of shape (n_products,)
        Marginal cost of each product.
    capacity : float64 ndarray of shape (n_products,)
        Capacity of each product (``inf``: none).
    owner : int64 ndarray of shape (n_products,)
        Firm owning each product.
    n_firms : int
        Number of firms.
    quantity_setting : bool
        True for Cournot (actions are quantities), False for Bertrand (actions are prices).
    mixed : float64 ndarray of shape (n_products, n_levels), or (0, 0)
        Quantile levels of mixed equilibrium prices: an action at ``MIXED_PRICE`` is drawn from them
        (:mod:`sim.models.capacity_stage`); empty when no level is mixed.
    """

    code: int
    scalars: np.ndarray
    vector: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    owner: np.ndarray
    n_firms: int
    quantity_setting: bool
    mixed: np.ndarray


class LineupInputs(NamedTuple):
    """A compiled line-up (layout in :mod:`strategies.step`) and the actions of implementation errors.

    Parameters
    ----------
    states : int64 ndarray of shape (n_firms, S, N_STATE_INT)
        Integer fields of each firm's states.
    probs : float64 ndarray of shape (n_firms, S, N_STATE_FLT)
        Float fields of each firm's states.
    firms : int64 ndarray of shape (n_firms, N_FIRM_INT)
        Per-firm fields (state count, initial state, cheating level and window).
    levels : float64 ndarray of shape (n_firms, L, n_products)
        Action profile of each firm's levels.
    tremble : float64 ndarray of shape (n_products,)
        Action of each product when its firm makes an implementation error.
    """

    states: np.ndarray
    probs: np.ndarray
    firms: np.ndarray
    levels: np.ndarray
    tremble: np.ndarray


class MonitoringInputs(NamedTuple):
    """What firms see and how often they err.

    Parameters
    ----------
    noise_code : int
        Demand shock: 0 none, 1 lognormal, 2 normal.
    sigma : float
        Standard deviation of the shock's normal draw.
    perception_error : float
        Probability of misreading each rival's conduct.
    implementation_error : float
        Probability per firm and period of playing the tremble action.
    """

    noise_code: int
    sigma: float
    perception_error: float
    implementation_error: float


class RunInputs(NamedTuple):
    """Length of the game, discounting and the paths to record.

    Parameters
    ----------
    n_periods : int
        Number of periods (the cap of a random horizon).
    delta : float
        Discount factor of the discounted profit sums.
    random_horizon : bool
        Whether the game ends after each period with probability ``1 - continuation``.
    continuation : float
        Continuation probability of a random horizon.
    n_paths : int
        Replications (by global index) whose full paths are recorded.
    """

    n_periods: int
    delta: float
    random_horizon: bool
    continuation: float
    n_paths: int


class Totals(NamedTuple):
    """Per-replication and per-chunk results, added to in place.

    Parameters
    ----------
    profit : float64 ndarray of shape (n_batch, n_firms)
        Sum of each firm's profits.
    disc : float64 ndarray of shape (n_batch, n_firms)
        Discounted sum of each firm's profits.
    ints : int64 ndarray of shape (n_batch, N_RINT)
        Per-replication counts (columns ``R_*``).
    flts : float64 ndarray of shape (n_batch, N_RFLT)
        Per-replication sums of the market price and of consumer surplus (columns ``F_*``).
    hist : int64 ndarray of shape (n_chunks, N_HIST, n_periods + 1)
        Length histograms (rows ``H_*``).
    by_period : int64 ndarray of shape (n_chunks, n_periods)
        Per period, replications in which every firm colluded.
    status : int64 ndarray of shape (n_chunks,)
        Written: ``STATUS_OK`` or the first failure code of the chunk.
    """

    profit: np.ndarray
    disc: np.ndarray
    ints: np.ndarray
    flts: np.ndarray
    hist: np.ndarray
    by_period: np.ndarray
    status: np.ndarray


class PathBuffers(NamedTuple):
    """Full paths of the first replications (first axis ``max(n_paths, 1)``, second ``n_periods``).

    Parameters
    ----------
    actions : float64 ndarray of shape (P, n_periods, n_products)
        Actions played.
    prices : float64 ndarray of shape (P, n_periods, n_products)
        Prices of the products.
    market : float64 ndarray of shape (P, n_periods, 3)
        Market price, demand shock and consumer surplus (columns ``M_*``).
    profit : float64 ndarray of shape (P, n_periods, n_firms)
        Profits.
    state : int64 ndarray of shape (P, n_periods, n_firms)
        Each firm's state at the start of the period.
    flags : int64 ndarray of shape (P, n_periods, n_firms)
        ``FLAG_*`` bits: cheated, trembled, colluded.
    collude : int64 ndarray of shape (P, n_periods)
        1 when every firm colluded.
    """

    actions: np.ndarray
    prices: np.ndarray
    market: np.ndarray
    profit: np.ndarray
    state: np.ndarray
    flags: np.ndarray
    collude: np.ndarray


class DemandInputs(NamedTuple):
    """The demand state of every period and what changes with it (:func:`simulate_state_chunks`).

    In period ``t`` of batch-local replication ``r`` the market is state ``d = path[r, t]``'s market (its demand
    parameters, costs and capacities) and every level of the line-up is the state's profile of that level: the
    automata's states and transitions are those of :class:`LineupInputs`, what each level stands for moves with
    the demand state (a state-contingent collusive path; :mod:`sim.simulation.state_game`).

    Parameters
    ----------
    path : int64 ndarray of shape (n_batch, n_periods)
        Demand state of each period of each replication of the batch (drawn beforehand from the replication's
        own stream family, so the kernel's draws are those of the same line-up without states).
    scalars : float64 ndarray of shape (n_states, 4)
        Scalar demand parameters per state.
    vector : float64 ndarray of shape (n_states, n_products)
        Per-product demand parameters per state.
    cost : float64 ndarray of shape (n_states, n_products)
        Marginal costs per state.
    capacity : float64 ndarray of shape (n_states, n_products)
        Capacities per state.
    levels : float64 ndarray of shape (n_states, n_firms, L, n_products)
        Action profile of each firm's levels in each state.
    tremble : float64 ndarray of shape (n_states, n_products)
        Action of each product after an implementation error, per state.
    """

    path: np.ndarray
    scalars: np.ndarray
    vector: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    levels: np.ndarray
    tremble: np.ndarray


# --------------------------------------------------------------------------------------------------
# Steps of a period (inlined into the kernel)
# --------------------------------------------------------------------------------------------------


@njit(cache=True)
def horizon_length(rng, n_periods, random_horizon, continuation):
    """Number of periods of one replication (draws one uniform with a random horizon).

    Parameters
    ----------
    rng : uint64 ndarray of shape (4,)
        The replication's generator state (advanced in place).
    n_periods : int
        The cap of the horizon.
    random_horizon : bool
        Whether to draw the horizon.
    continuation : float
        Probability of playing one more period.

    Returns
    -------
    int
        ``n_periods``, or ``min(n_periods, 1 + floor(log(1 - u) / log(continuation)))``.
    """
    if not random_horizon:
        return n_periods
    u = next_double(rng)
    if continuation >= 1.0:
        return n_periods
    h = 1 + int(math.floor(math.log(1.0 - u) / math.log(continuation)))  # noqa: RUF046 (an int in numba too)
    return min(h, n_periods)


# --------------------------------------------------------------------------------------------------
# The kernel
# --------------------------------------------------------------------------------------------------


@njit(cache=True)
def simulate_chunks(batch, market, lineup, monitoring, run, totals, paths):
    """Play replications ``batch.chunk_start[c] .. batch.chunk_start[c+1]-1`` (batch-local) of every chunk ``c``,
    chunks in parallel.

    Parameters
    ----------
    batch : Batch
        Chunk boundaries, the replications' generator states and the global index of the first.
    market : MarketInputs
        The market.
    lineup : LineupInputs
        The compiled line-up and the tremble actions.
    monitoring : MonitoringInputs
        Demand shock and error probabilities.
    run : RunInputs
        Horizon, discount factor and number of recorded paths.
    totals : Totals
        Results, added to in place; ``totals.status`` gets ``STATUS_OK`` or ``STATUS_EVALUATION_FAILED`` (the
        stage game could not be evaluated; the chunk stops there) for each chunk.
    paths : PathBuffers
        Path buffers, written for global replication indices below ``run.n_paths``.
    """
    chunk_start, rng_states, first = batch
    code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting, mixed = market
    states, probs, firms, levels, tremble = lineup
    noise_code, sigma, perception_error, implementation_error = monitoring
    n_periods, delta, random_horizon, continuation, n_paths = run
    hist, by_period, out_profit, out_disc, out_int, out_flt = (totals.hist, totals.by_period, totals.profit,
                                                               totals.disc, totals.ints, totals.flts)
    p_actions, p_prices, p_market, p_profit, p_state, p_flags, p_collude = (
        paths.actions, paths.prices, paths.market, paths.profit, paths.state, paths.flags, paths.collude)
    n_products = owner.shape[0]
    # no demand states: ``None`` for the path of states, so the compiled loop has no state branch at all
    _play_chunks(chunk_start, rng_states, first, code, scalars, vector, cost, capacity, owner, n_firms,
                 quantity_setting, states, probs, firms, levels, tremble, noise_code, sigma, perception_error,
                 implementation_error, n_periods, delta, random_horizon, continuation, n_paths, out_profit, out_disc,
                 out_int, out_flt, hist, by_period, p_actions, p_prices, p_market, p_profit, p_state, p_flags,
                 p_collude, totals.status, mixed, None, np.empty((0, 4)),
                 np.empty((0, n_products)), np.empty((0, n_products)), np.empty((0, n_products)),
                 np.empty((0, 1, 1, n_products)), np.empty((0, n_products)))


@njit(cache=True)
def simulate_state_chunks(batch, market, lineup, monitoring, run, totals, paths, demand):
    """:func:`simulate_chunks` in a market whose demand state moves: each period is played in its state's
    market with its state's level profiles.

    The period's steps and random draws are those of :func:`simulate_chunks`; the demand states come drawn in
    ``demand.path``, so a line-up whose states all equal the experiment's market plays exactly the numbers of
    :func:`simulate_chunks`.

    Parameters
    ----------
    batch : Batch
        Chunk boundaries, the replications' generator states and the global index of the first.
    market : MarketInputs
        The market's structure (code, owners, firms, quantity setting); its parameters are replaced by the state's.
    lineup : LineupInputs
        The compiled line-up; its levels and tremble actions are replaced by the state's.
    monitoring : MonitoringInputs
        Demand shock and error probabilities.
    run : RunInputs
        Horizon, discount factor and number of recorded paths.
    totals : Totals
        Results, added to in place (see :func:`simulate_chunks`).
    paths : PathBuffers
        Path buffers, written for global replication indices below ``run.n_paths``.
    demand : DemandInputs
        The demand states of the batch's periods and the per-state arrays.
    """
    chunk_start, rng_states, first = batch
    code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting, mixed = market
    states, probs, firms, levels, tremble = lineup
    noise_code, sigma, perception_error, implementation_error = monitoring
    n_periods, delta, random_horizon, continuation, n_paths = run
    d_path, d_scalars, d_vector, d_cost, d_capacity, d_levels, d_tremble = demand
    _play_chunks(chunk_start, rng_states, first, code, scalars, vector, cost, capacity, owner, n_firms,
                 quantity_setting, states, probs, firms, levels, tremble, noise_code, sigma, perception_error,
                 implementation_error, n_periods, delta, random_horizon, continuation, n_paths, totals.profit,
                 totals.disc, totals.ints, totals.flts, totals.hist, totals.by_period, paths.actions, paths.prices,
                 paths.market, paths.profit, paths.state, paths.flags, paths.collude, totals.status, mixed, d_path,
                 d_scalars, d_vector, d_cost, d_capacity, d_levels, d_tremble)


@njit(cache=True, parallel=True)
def _play_chunks(chunk_start, rng_states, rep_offset,
                 code, scalars, vector, cost, capacity, owner, n_firms, quantity_setting,
                 states, probs, firms, levels, tremble_profile,
                 noise_code, sigma, perception_error, implementation_error,
                 n_periods, delta, random_horizon, continuation, n_paths,
                 out_profit, out_disc, out_int, out_flt, hist, by_period,
                 path_actions, path_prices, path_market, path_profit, path_state, path_flags, path_collude,
                 status, mixed, d_path, d_scalars, d_vector, d_cost, d_capacity, d_levels, d_tremble):
    # the period loop of every chunk, chunks in parallel, every array a plain argument: inside a prange body
    # numba drops writes to arrays reached through a named tuple (numba issue 7135), also once they are taken
    # out of it, and a chunk played by a separate function, or a period built from helper calls, measured two
    # to three times slower (engine section of the benchmark); :func:`simulate_chunks` keeps the grouped inputs.
    # Without demand states ``d_path`` is None, so numba drops the state branch when it compiles that entry: the
    # period's market arrays are then never rebound in the loop, which measured about 10 % faster on one thread
    n_chunks = chunk_start.shape[0] - 1
    n_products = owner.shape[0]
    s2 = 0.5 * sigma * sigma
    for c in prange(n_chunks):
        # the period's market and level profiles: the experiment's, or the demand state's
        sc, ve, co, ca, lv, tr = scalars, vector, cost, capacity, levels, tremble_profile
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
                if d_path is not None:
                    d = d_path[r, t]
                    sc, ve, co, ca, lv, tr = (d_scalars[d], d_vector[d], d_cost[d], d_capacity[d], d_levels[d],
                                              d_tremble[d])
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
                    actions[k] = tr[k] if trembled[i] else lv[i, lev[i], k]
                if mixed.shape[1] > 0:
                    for k in range(n_products):
                        if actions[k] == MIXED_PRICE:
                            actions[k] = draw_mixed(mixed, k, next_double(rng))
                theta = 1.0
                if noise_code == 1:
                    theta = math.exp(sigma * next_normal_zig(rng) - s2)
                elif noise_code == 2:
                    theta = 1.0 + sigma * next_normal_zig(rng)
                    if theta < 0.0:
                        theta = 0.0
                mp, cs = evaluate(code, sc, ve, co, ca, owner, n_firms, actions, theta, q, p, profit, work, True)
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
                                     states, probs, lv, quantity_setting, rng)
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
