"""The same firms in several markets at once: automata that punish in every market after a deviation seen in any.

Firms that meet in several markets can pool their incentive constraints (Bernheim and Whinston, 1990,
"Multimarket contact and collusive behavior", RAND 21(1)): a firm that cheats in one market is punished in all of
them, so the slack of one market can sustain collusion in another. The price of pooling is that a deviation seen
in one market -- an implementation error, a misread rival -- ends collusion everywhere.

:func:`simulate_markets` plays one line-up of automata per market (the same ``n_firms`` firms in every market, one
product each), market by market within each period, with the random draws in this order:

1. in every market in turn, each firm picks its state's level, possibly cheating (:func:`strategies.step.
   choose_level`);
2. implementation errors (when positive): one uniform per market and firm, market by market; a hit plays the
   market's tremble action (its deviation profile) for that firm in that market only;
3. each market's quantities, prices and profits (:func:`sim.models.stagecore.evaluate`, no demand shock);
4. each firm's signal in every market, market by market (:func:`strategies.step.bad_signal`, perception draws
   included); with ``pooled`` a firm's signal is bad in every market when it is bad in any;
5. each firm's next state in every market, market by market (:func:`strategies.step.next_state`).

Each replication draws only from its own stream (:func:`sim.core.rng.stream_states`, family ``key``), so the
numbers never depend on threads or workers; :mod:`sim.simulation.multimarket_twin` is the plain-Python twin.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from sim.core.errors import InputError
from sim.core.records import Record
from sim.core.rng import next_double, stream_states
from sim.core.stats import Estimate, mean_estimate
from sim.models.stagecore import evaluate
from sim.simulation.game import Game
from strategies.step import COLLUSIVE, INITIAL, bad_signal, choose_level, next_state

__all__ = ["ContactPlay", "MarketsInputs", "MarketsRun", "collusive_shares", "contact_play", "markets_inputs",
           "simulate_markets"]


@dataclass
class MarketsInputs:
    """Several compiled games over the same or overlapping firms, stacked for the kernel (``n`` the most firms of a
    market; a market with fewer firms is padded).

    Parameters
    ----------
    codes : int64 ndarray of shape (n_markets,)
    scalars : float64 ndarray of shape (n_markets, 4)
    vector, cost, capacity : float64 ndarray of shape (n_markets, n)
    owner : int64 ndarray of shape (n_markets, n)
    quantity_setting : bool ndarray of shape (n_markets,)
    states : int64 ndarray of shape (n_markets, n, S, N_STATE_INT)
    probs : float64 ndarray of shape (n_markets, n, S, N_STATE_FLT)
    firms : int64 ndarray of shape (n_markets, n, N_FIRM_INT)
    levels : float64 ndarray of shape (n_markets, n, L, n)
    tremble : float64 ndarray of shape (n_markets, n)
    perception_error, implementation_error : float
    n_firms : int64 ndarray of shape (n_markets,)
        Firms in each market.
    firm_ids : int64 ndarray of shape (n_markets, n)
        The firm (0-based, across all markets) in each seat of each market (-1 in padding).
    """

    codes: np.ndarray
    scalars: np.ndarray
    vector: np.ndarray
    cost: np.ndarray
    capacity: np.ndarray
    owner: np.ndarray
    quantity_setting: np.ndarray
    states: np.ndarray
    probs: np.ndarray
    firms: np.ndarray
    levels: np.ndarray
    tremble: np.ndarray
    perception_error: float
    implementation_error: float
    n_firms: np.ndarray
    firm_ids: np.ndarray


def _pad(arrays, fill) -> np.ndarray:
    shape = tuple(max(a.shape[k] for a in arrays) for k in range(arrays[0].ndim))
    out = np.full((len(arrays), *shape), fill, dtype=arrays[0].dtype)
    for m, a in enumerate(arrays):
        out[(m, *(slice(0, n) for n in a.shape))] = a
    return out


def _firm_ids(games: list[Game], firm_ids) -> list[np.ndarray]:
    if firm_ids is None:
        n = games[0].arrays.n_firms
        for m, g in enumerate(games):
            if g.arrays.n_firms != n:
                raise InputError(f"markets[{m + 1}]", f"every market must have the same {n} firms unless each market "
                                                      f"lists its firms; this one has {g.arrays.n_firms}")
        return [np.arange(n, dtype=np.int64) for _ in games]
    if len(firm_ids) != len(games):
        raise InputError("markets", f"must list the firms of each of the {len(games)} markets")
    out = []
    for m, (g, ids) in enumerate(zip(games, firm_ids)):
        ids = np.asarray(ids, dtype=np.int64)
        if ids.shape != (g.arrays.n_firms,) or np.unique(ids).size != ids.size or np.any(ids < 0):
            raise InputError(f"markets[{m + 1}].firms", f"must number the market's {g.arrays.n_firms} firms, each "
                                                        f"once, got {ids.tolist()}")
        out.append(ids)
    return out


def markets_inputs(games: list[Game], firm_ids=None) -> MarketsInputs:
    """Stack the compiled games of the markets (one product per firm, no demand shock).

    Parameters
    ----------
    games : list of Game, length n_markets >= 2
        One compiled line-up per market; every game has the same perception and implementation errors.
    firm_ids : list of array_like of int, optional
        Per market, the firm (0-based, across all markets) in each of its seats; default: seat ``i`` is firm ``i``
        in every market (then every market must have the same firms).

    Returns
    -------
    MarketsInputs
    """
    if len(games) < 2:
        raise InputError("markets", f"must list at least two markets, got {len(games)}")
    ids = _firm_ids(games, firm_ids)
    for m, g in enumerate(games):
        a, mon = g.arrays, g.monitoring
        if a.n_products != a.n_firms:
            raise InputError(f"markets[{m + 1}]", f"every firm must sell one product in each market; this one has "
                                                  f"{a.n_firms} firms and {a.n_products} products")
        if mon["sigma"] > 0 or a.mixed.size:
            raise InputError(f"markets[{m + 1}]", "markets in contact are simulated without a demand shock and "
                                                  "without mixed static equilibria")
        for k in ("perception_error", "implementation_error"):
            if mon[k] != games[0].monitoring[k]:
                raise InputError(f"markets[{m + 1}].monitoring.{k}", "must be the same in every market")
    A = [g.arrays for g in games]
    L = [g.lineup for g in games]
    mon = games[0].monitoring
    return MarketsInputs(
        np.array([a.code for a in A], dtype=np.int64), np.stack([a.scalars for a in A]),
        _pad([a.vector for a in A], 0.0), _pad([a.cost for a in A], 0.0), _pad([a.capacity for a in A], np.inf),
        _pad([a.owner for a in A], 0),
        np.array([a.quantity_setting for a in A]), _pad([x.states for x in L], 0), _pad([x.probs for x in L], 0.0),
        _pad([x.firms for x in L], 0), _pad([x.levels for x in L], np.nan),
        _pad([np.asarray(g.tremble, dtype=np.float64) for g in games], np.nan), float(mon["perception_error"]),
        float(mon["implementation_error"]), np.array([a.n_firms for a in A], dtype=np.int64), _pad(ids, -1))


@njit(cache=True)
def _play_markets(rng_states, codes, scalars, vector, cost, capacity, owner, quantity_setting, states, probs, firms,
                  levels, tremble, perception_error, implementation_error, n_firms, firm_ids, n_periods, delta, pooled,
                  n_paths, out_profit, out_disc, out_collusive, path_actions, path_state,
                  path_collude):  # pragma: no cover
    # compiled; the plain-Python twin is sim.simulation.multimarket_twin
    M, n = owner.shape[0], owner.shape[1]
    seen = np.zeros(firm_ids.max() + 1, dtype=np.bool_)
    state = np.empty((M, n), dtype=np.int64)
    new_state = np.empty((M, n), dtype=np.int64)
    lev = np.empty((M, n), dtype=np.int64)
    cheated = np.zeros((M, n), dtype=np.bool_)
    trembled = np.zeros((M, n), dtype=np.bool_)
    bad = np.zeros((M, n), dtype=np.bool_)
    actions = np.empty((M, n))
    prices = np.empty(M)
    profit = np.empty((M, n))
    q = np.empty(n)
    p = np.empty(n)
    pi = np.empty(n)
    work = np.empty((2, n))
    for r in range(rng_states.shape[0]):
        rng = rng_states[r]
        for m in range(M):
            for i in range(n_firms[m]):
                state[m, i] = firms[m, i, INITIAL]
        disc = 1.0
        for t in range(n_periods):
            for m in range(M):
                for i in range(n_firms[m]):
                    L, ch = choose_level(i, state[m, i], t, states[m], probs[m], firms[m], rng)
                    lev[m, i] = L
                    cheated[m, i] = ch
            for m in range(M):
                for i in range(n_firms[m]):
                    trembled[m, i] = implementation_error > 0.0 and next_double(rng) < implementation_error
            for m in range(M):
                nm = n_firms[m]
                for k in range(nm):
                    i = owner[m, k]
                    actions[m, k] = tremble[m, k] if trembled[m, i] else levels[m, i, lev[m, i], k]
                mp, _ = evaluate(codes[m], scalars[m], vector[m, :nm], cost[m, :nm], capacity[m, :nm], owner[m, :nm],
                                 nm, actions[m, :nm], 1.0, q, p, pi, work, False)
                prices[m] = mp
                all_c = True
                for i in range(nm):
                    profit[m, i] = pi[i]
                    out_profit[r, m, i] += pi[i]
                    out_disc[r, m, i] += disc * pi[i]
                    if states[m, i, state[m, i], COLLUSIVE] == 0 or cheated[m, i] or trembled[m, i]:
                        all_c = False
                if all_c:
                    out_collusive[r, m] += 1
                if r < n_paths:
                    path_collude[r, t, m] = 1 if all_c else 0
                    for i in range(nm):
                        path_actions[r, t, m, i] = actions[m, i]
                        path_state[r, t, m, i] = state[m, i]
            for m in range(M):
                nm = n_firms[m]
                for i in range(nm):
                    bad[m, i] = bad_signal(i, state[m, i], nm, actions[m, :nm], owner[m, :nm], prices[m], profit[m, i],
                                           perception_error, states[m], probs[m], levels[m], quantity_setting[m], rng)
            if pooled:
                # a firm that sees a deviation in any market punishes in every market it is in
                seen[:] = False
                for m in range(M):
                    for i in range(n_firms[m]):
                        if bad[m, i]:
                            seen[firm_ids[m, i]] = True
                for m in range(M):
                    for i in range(n_firms[m]):
                        bad[m, i] = seen[firm_ids[m, i]]
            for m in range(M):
                for i in range(n_firms[m]):
                    new_state[m, i] = next_state(i, state[m, i], bad[m, i], states[m], probs[m], rng)
            for m in range(M):
                for i in range(n_firms[m]):
                    state[m, i] = new_state[m, i]
            disc *= delta


@dataclass
class MarketsRun:
    """What :func:`simulate_markets` (or its twin) produces.

    Parameters
    ----------
    profit : float64 ndarray of shape (n_reps, n_markets, n_firms)
        Sum of each firm's profits in each market.
    disc : float64 ndarray of shape (n_reps, n_markets, n_firms)
        Discounted sum of each firm's profits in each market.
    collusive : int64 ndarray of shape (n_reps, n_markets)
        Periods in which every firm colluded in the market.
    path_actions : float64 ndarray of shape (P, n_periods, n_markets, n_firms)
        Actions of the first ``P = max(n_paths, 1)`` replications (nan when not recorded).
    path_state : int64 ndarray of shape (P, n_periods, n_markets, n_firms)
        Each firm's automaton state in each market at the start of the period (-1 when not recorded).
    path_collude : int64 ndarray of shape (P, n_periods, n_markets)
        1 when every firm colluded in the market (-1 when not recorded).
    """

    profit: np.ndarray
    disc: np.ndarray
    collusive: np.ndarray
    path_actions: np.ndarray
    path_state: np.ndarray
    path_collude: np.ndarray

    @classmethod
    def empty(cls, n_reps: int, n_markets: int, n_firms: int, n_periods: int, n_paths: int) -> MarketsRun:
        """Zeroed outputs (paths filled with nan and -1).

        Parameters
        ----------
        n_reps, n_markets, n_firms, n_periods, n_paths : int

        Returns
        -------
        MarketsRun
        """
        P = max(n_paths, 1)
        return cls(np.zeros((n_reps, n_markets, n_firms)), np.zeros((n_reps, n_markets, n_firms)),
                   np.zeros((n_reps, n_markets), dtype=np.int64), np.full((P, n_periods, n_markets, n_firms), np.nan),
                   np.full((P, n_periods, n_markets, n_firms), -1, dtype=np.int64),
                   np.full((P, n_periods, n_markets), -1, dtype=np.int64))


def simulate_markets(games: list[Game], periods: int, replications: int, delta: float, seed: int, key=(0,),
                     pooled: bool = True, paths: int = 0, firm_ids=None) -> MarketsRun:
    """Play the same firms' line-ups in several markets at once, with pooled or separate punishments.

    Parameters
    ----------
    games : list of Game
        One compiled line-up per market (see :func:`markets_inputs`).
    periods : int >= 1
    replications : int >= 1
    delta : float in (0, 1)
        Discount factor of the discounted sums.
    seed : int
    key : tuple of int
        Stream family of the replications.
    pooled : bool
        True: a firm's signal is bad in every market when it is bad in any (a deviation seen anywhere is punished
        everywhere); False: each market's automata react to that market alone.
    paths : int
        Replications (the first ones) whose paths are recorded.
    firm_ids : list of array_like of int, optional
        Per market, the firm in each seat (see :func:`markets_inputs`); default: the same firms in every market.

    Returns
    -------
    MarketsRun
        Per market, seats beyond the market's firms hold zeros (profits) and nan or -1 (paths).
    """
    inp = markets_inputs(games, firm_ids)
    M, n = inp.owner.shape
    out = MarketsRun.empty(replications, M, n, periods, paths)
    rng = stream_states(seed, key, 0, replications)
    _play_markets(rng, inp.codes, inp.scalars, inp.vector, inp.cost, inp.capacity, inp.owner, inp.quantity_setting,
                  inp.states, inp.probs, inp.firms, inp.levels, inp.tremble, inp.perception_error,
                  inp.implementation_error, inp.n_firms, inp.firm_ids, int(periods), float(delta), bool(pooled),
                  int(paths), out.profit, out.disc, out.collusive, out.path_actions, out.path_state, out.path_collude)
    return out


def collusive_shares(run: MarketsRun, periods: int, confidence: float = 0.95) -> list[Estimate]:
    """The share of periods in which every firm colluded, per market, with its interval across replications.

    Parameters
    ----------
    run : MarketsRun
    periods : int
        Periods per replication.
    confidence : float in (0, 1)

    Returns
    -------
    list of Estimate, one per market
    """
    share = run.collusive / float(periods)
    return [mean_estimate(share[:, m], confidence) for m in range(share.shape[1])]


@dataclass(frozen=True, eq=False)
class ContactPlay(Record):
    """The same line-ups in markets in contact, played with pooled and with separate punishments on the same
    streams.

    Parameters
    ----------
    names : list of str
        A name per market.
    n_firms : int
    periods, replications : int
    pooled : list of Estimate
        Per market: share of periods in which every firm colluded, with pooled punishments.
    separate : list of Estimate
        Per market: the same with each market's automata reacting to that market alone.
    difference : list of Estimate
        Per market: pooled minus separate, replication by replication (paired: the same streams).
    pooled_profit, separate_profit : ndarray of shape (n_markets, n_firms)
        Mean discounted profit of each seat of each market (``n_firms`` the most firms of a market; zero beyond a
        market's own firms).
    market_firms : list of list of int
        Per market, the firm (numbered from 1 across the markets) in each seat.
    """

    names: list
    n_firms: int
    periods: int
    replications: int
    pooled: list[Estimate]
    separate: list[Estimate]
    difference: list[Estimate]
    pooled_profit: np.ndarray
    separate_profit: np.ndarray
    market_firms: list


def contact_play(games: list[Game], names: list, periods: int, replications: int, delta: float, seed: int, key=(0,),
                 confidence: float = 0.95, firm_ids=None) -> ContactPlay:
    """Play the markets with pooled and with separate punishments and compare the collusive shares.

    Parameters
    ----------
    games : list of Game
        One compiled line-up per market (see :func:`markets_inputs`).
    names : list of str
        A name per market.
    periods, replications : int
    delta : float in (0, 1)
    seed : int
    key : tuple of int
        The cell's stream key (both plays use the same streams).
    confidence : float in (0, 1)
    firm_ids : list of array_like of int, optional
        Per market, the firm in each seat (see :func:`markets_inputs`).

    Returns
    -------
    ContactPlay
    """
    pooled = simulate_markets(games, periods, replications, delta, seed, key, pooled=True, firm_ids=firm_ids)
    separate = simulate_markets(games, periods, replications, delta, seed, key, pooled=False, firm_ids=firm_ids)
    diff = (pooled.collusive - separate.collusive) / float(periods)
    ids = markets_inputs(games, firm_ids)
    market_firms = [[int(g) + 1 for g in ids.firm_ids[m, :ids.n_firms[m]]] for m in range(len(games))]
    return ContactPlay(list(names), int(pooled.profit.shape[2]), int(periods), int(replications),
                       collusive_shares(pooled, periods, confidence), collusive_shares(separate, periods, confidence),
                       [mean_estimate(diff[:, m], confidence) for m in range(diff.shape[1])],
                       pooled.disc.mean(axis=0), separate.disc.mean(axis=0), market_firms)
