"""How stable the order of the entrants is: the bootstrap over replications, a numba kernel and its plain-Python
twin.

The bootstrap resamples the replications of every match with replacement, ``bootstrap`` times, recomputes every
entrant's score and the order, and reports for each entrant the share of resamples in which it keeps its place, its
place interval, the share in which it comes first, and ``P(i placed above j)``; also the share in which the whole
order holds. Resample ``b`` draws from stream ``b`` of the family ``(*key, BOOTSTRAP_KEY)``, so it is deterministic
given the seed and independent of threads.

Three layers, as for every heavy computation: :func:`bootstrap_scores` (validated entry from a plan and its played
matches), :func:`bootstrap_inputs` (the grouped inputs: :class:`Replications` and :class:`Seats`) and
:func:`bootstrap_kernel` (numba, ``prange`` over resamples) with the twin :func:`bootstrap_reference`.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit, prange

from sim.core.compiling import announce_compile
from sim.core.parallel import NumbaThreads
from sim.core.rng import ReferenceStream, next_u64, stream_states
from sim.tournament.plan import TournamentPlan, rival_weights

__all__ = ["BOOTSTRAP_KEY", "Replications", "Seats", "bootstrap_inputs", "bootstrap_kernel", "bootstrap_reference",
           "bootstrap_scores", "competition_ranks", "rank_stability"]

#: stream family (appended to the caller's key) of the bootstrap resamples
BOOTSTRAP_KEY = 2**32


class Replications(NamedTuple):
    """The replications of every match, one after the other, with what the score needs of each.

    Parameters
    ----------
    offsets : int64 ndarray of shape (M + 1,)
        Replications of match ``m`` are columns ``offsets[m] .. offsets[m+1]-1``.
    values : float64 ndarray of shape (n_seats, total)
        Per replication and seat: the sum of the per-period profits (mean profit and profit gain) or the discounted
        profit.
    periods : float64 ndarray of shape (total,)
        Periods of each replication.
    same_length : bool ndarray of shape (M,)
        The match's replications all have the same length.
    per_replication : int
        1: a seat's value is the mean of ``values`` over the drawn replications (discounted profit); 0: the sum of
        the drawn ``values`` over the sum of the drawn ``periods`` (a mean per period).
    """

    offsets: np.ndarray
    values: np.ndarray
    periods: np.ndarray
    same_length: np.ndarray
    per_replication: int


class Seats(NamedTuple):
    """Who sits in each seat of each match and how a seat's value enters its entrant's score.

    Parameters
    ----------
    entrant : int64 ndarray of shape (M, n_seats)
    weight : float64 ndarray of shape (M, n_seats)
        The seat's weight in its entrant's score.
    shift, scale : float64 ndarray of shape (n_seats,)
        A seat's value ``v`` enters as ``(v - shift) / scale`` (the profit gain; 0 and 1 otherwise).
    """

    entrant: np.ndarray
    weight: np.ndarray
    shift: np.ndarray
    scale: np.ndarray


def bootstrap_inputs(plan: TournamentPlan, records: list, metric: str) -> tuple[Replications, Seats]:
    """The grouped inputs of :func:`bootstrap_kernel` for the score ``metric``.

    Parameters
    ----------
    plan : TournamentPlan
    records : list of sim.tournament.scoring.MatchRecord
        The played matches, in plan order.
    metric : {"profit_gain", "discounted_profit", "profit"}

    Returns
    -------
    Replications
    Seats
    """
    W = rival_weights(plan)
    n = plan.seats
    M = len(records)
    offsets = np.zeros(M + 1, dtype=np.int64)
    for k, r in enumerate(records):
        offsets[k + 1] = offsets[k] + r.n_reps
    src = "discounted" if metric == "discounted_profit" else "profit_sum"
    x = np.ascontiguousarray(np.concatenate([getattr(r, src) for r in records]).T, dtype=np.float64)
    per = np.ascontiguousarray(np.concatenate([r.periods for r in records]), dtype=np.float64)
    # matches whose replications all have the same length (a fixed horizon, learning sessions): the
    # resampled total of periods is R times that length, exactly (sums of integers below 2**53)
    const = np.array([bool(np.all(r.periods == r.periods[0])) for r in records], dtype=np.bool_)
    ent = np.zeros((M, n), dtype=np.int64)
    wgt = np.zeros((M, n))
    for k, r in enumerate(records):
        n_seat = len(plan.group_seatings[r.group])
        for s, e in enumerate(r.lineup):
            ent[k, s] = e
            wgt[k, s] = W[r.group, e] / (n_seat * r.lineup.count(e))
    if metric == "profit_gain":
        shift = np.ascontiguousarray(plan.nash, dtype=np.float64)
        # an undefined gain (see gain_defined) stays undefined in every resample
        scale = np.ascontiguousarray(np.where(plan.gain_defined, plan.collusive - plan.nash, np.nan), dtype=np.float64)
    else:
        shift, scale = np.zeros(n), np.ones(n)
    mode = {"profit_gain": 0, "profit": 0, "discounted_profit": 1}[metric]
    return Replications(offsets, x, per, const, mode), Seats(ent, wgt, shift, scale)


@njit(cache=True, inline="always")
def _sum_drawn(v, idx, R):
    """``sum(v[idx[:R]])`` with four running sums (elements ``r mod 4``) added as ``(s0 + s1) + (s2 + s3)``:
    independent additions keep the processor busy where one running sum waits on each addition."""
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    s3 = 0.0
    r = 0
    while r + 4 <= R:
        s0 += v[idx[r]]
        s1 += v[idx[r + 1]]
        s2 += v[idx[r + 2]]
        s3 += v[idx[r + 3]]
        r += 4
    if r < R:
        s0 += v[idx[r]]
    if r + 1 < R:
        s1 += v[idx[r + 1]]
    if r + 2 < R:
        s2 += v[idx[r + 2]]
    return (s0 + s1) + (s2 + s3)


def _sum_drawn_py(v, draws) -> float:
    """Plain-Python twin of :func:`_sum_drawn` (``draws``: the indices)."""
    s = [0.0, 0.0, 0.0, 0.0]
    for r, i in enumerate(draws):
        s[r % 4] += float(v[i])
    return (s[0] + s[1]) + (s[2] + s[3])


@njit(cache=True, inline="always")
def _draw_replications(rng, lo, R, idx):
    """Fill ``idx[:R]`` with ``R`` indices drawn uniformly from ``lo .. lo + R - 1``, two per 64-bit draw."""
    mask = np.uint64(0xFFFFFFFF)
    sh = np.uint64(32)
    uR = np.uint64(R)
    r = 0
    while r < R:
        u = next_u64(rng)
        idx[r] = lo + np.int64(((u >> sh) * uR) >> sh)
        r += 1
        if r < R:
            idx[r] = lo + np.int64(((u & mask) * uR) >> sh)
            r += 1


@njit(cache=True, parallel=True)
def bootstrap_kernel(reps, seats, rng_states, out):
    """Scores of every bootstrap resample (``prange`` over resamples).

    Resample ``b`` (stream ``rng_states[b]``, advanced in place) draws, match by match in match order, ``R_m``
    replication indices uniformly with replacement, two per 64-bit draw (the high and then the low 32 bits, each
    mapped to ``0 .. R_m - 1`` by ``(bits * R_m) >> 32``, Lemire, 2019, "Fast random integer generation in an
    interval", ACM TOMACS 29; the bias is below ``R_m / 2**32``). Seat ``s`` of match ``m`` then adds
    ``seats.weight[m, s] * (v - seats.shift[s]) / seats.scale[s]`` to its entrant's score
    ``out[b, seats.entrant[m, s]]`` (zeros on entry), where ``v`` is the seat's resampled mean per period or per
    replication (see :class:`Replications`). Sums run over the draws in order, in four running sums
    (:func:`_sum_drawn`).

    Parameters
    ----------
    reps : Replications
    seats : Seats
    rng_states : uint64 ndarray of shape (B, 4)
    out : ndarray of shape (B, n_entrants)

    Returns
    -------
    int
        0 (status OK).
    """
    offsets, x, per, const = reps.offsets, reps.values, reps.periods, reps.same_length
    B = rng_states.shape[0]
    M = offsets.shape[0] - 1
    n = x.shape[0]
    r_max = 1
    for m in range(M):
        r_max = max(r_max, offsets[m + 1] - offsets[m])
    for b in prange(B):
        rng = rng_states[b]
        idx = np.empty(r_max, dtype=np.int64)
        for m in range(M):
            lo = offsets[m]
            R = offsets[m + 1] - lo
            _draw_replications(rng, lo, R, idx)
            if reps.per_replication == 1:
                den = np.float64(R)
            elif const[m]:
                den = np.float64(R) * per[lo]
            else:
                den = _sum_drawn(per, idx, R)
            for s in range(n):
                a = _sum_drawn(x[s], idx, R)
                v = a / den if den > 0.0 else np.nan
                g = (v - seats.shift[s]) / seats.scale[s] if seats.scale[s] != 0.0 else np.nan
                out[b, seats.entrant[m, s]] += seats.weight[m, s] * g
    return 0


def bootstrap_reference(reps: Replications, seats: Seats, rng_states: np.ndarray, n_entrants: int) -> np.ndarray:
    """Plain-Python twin of :func:`bootstrap_kernel`: the same draws in the same order.

    Parameters
    ----------
    reps : Replications
    seats : Seats
    rng_states : uint64 ndarray of shape (B, 4)
    n_entrants : int

    Returns
    -------
    ndarray of shape (B, n_entrants)
    """
    offsets, x, per = reps.offsets, reps.values, reps.periods
    B = rng_states.shape[0]
    M = offsets.shape[0] - 1
    n = x.shape[0]
    out = np.zeros((B, n_entrants))
    for b in range(B):
        rng = ReferenceStream(rng_states[b])
        for m in range(M):
            lo = int(offsets[m])
            R = int(offsets[m + 1]) - lo
            draws = []
            while len(draws) < R:
                u = rng.next_u64()
                draws.append(lo + ((u >> 32) * R >> 32))
                if len(draws) < R:
                    draws.append(lo + ((u & 0xFFFFFFFF) * R >> 32))
            if reps.per_replication == 1:
                den = float(R)
            elif reps.same_length[m]:
                den = R * float(per[lo])
            else:
                den = _sum_drawn_py(per, draws)
            for s in range(n):
                a = _sum_drawn_py(x[s], draws)
                v = a / den if den > 0.0 else math.nan
                scale = float(seats.scale[s])
                g = (v - float(seats.shift[s])) / scale if scale != 0.0 else math.nan
                out[b, int(seats.entrant[m, s])] += float(seats.weight[m, s]) * g
    return out


def bootstrap_scores(plan: TournamentPlan, records: list, threads: int | None = None, metric: str | None = None,
                     reference: bool = False) -> np.ndarray:
    """Entrant scores of every bootstrap resample (see :func:`bootstrap_kernel`).

    Parameters
    ----------
    plan : TournamentPlan
    records : list of sim.tournament.scoring.MatchRecord
    threads : int, optional
    metric : str, optional
        Default: the ranking score.
    reference : bool
        Run the plain-Python twin instead of the kernel.

    Returns
    -------
    ndarray of shape (B, E)
    """

    metric = metric or plan.settings["score"]
    B = int(plan.settings["bootstrap"])
    E = len(plan.entrants)
    reps, seats = bootstrap_inputs(plan, records, metric)
    states = stream_states(plan.run["seed"], (*tuple(plan.settings["key"]), BOOTSTRAP_KEY), 0, B)
    if reference:
        return bootstrap_reference(reps, seats, states, E)
    out = np.zeros((B, E))
    announce_compile("tournament bootstrap", (bootstrap_kernel,))
    with NumbaThreads(threads):
        bootstrap_kernel(reps, seats, states, out)
    return out


def competition_ranks(S: np.ndarray) -> np.ndarray:
    """Competition ranks of each row: 1 for the highest score, ties share the better rank.

    Parameters
    ----------
    S : ndarray of shape (B, E)

    Returns
    -------
    int ndarray of shape (B, E)
    """
    # rank = 1 + number of entrants with a strictly higher score
    return 1 + (S[:, None, :] > S[:, :, None]).sum(axis=2)


def rank_stability(plan: TournamentPlan, records: list, ranks: np.ndarray, threads: int | None = None) -> dict:
    """How often each entrant keeps its place when the replications are resampled.

    Parameters
    ----------
    plan : TournamentPlan
    records : list of sim.tournament.scoring.MatchRecord
    ranks : int ndarray of shape (E,)
        The places of the played tournament.
    threads : int, optional

    Returns
    -------
    dict
        ``resamples``, ``ranking_holds`` (share of resamples keeping every place), ``above`` (E x E: share in which
        the row entrant is placed above the column entrant), ``per_entrant`` (lists of length E: ``rank_share``,
        ``rank_low``, ``rank_high``, ``top_share``, ``score_low``, ``score_high``) and ``metric``.
    """
    S = bootstrap_scores(plan, records, threads)
    R = competition_ranks(S)
    B = S.shape[0]
    alpha = 1.0 - plan.settings["confidence"]
    above = (S[:, :, None] > S[:, None, :]).mean(axis=0)
    per = {
        "rank_share": (R == ranks[None, :]).mean(axis=0).tolist(),
        "rank_low": np.quantile(R, alpha / 2, axis=0, method="lower").astype(int).tolist(),
        "rank_high": np.quantile(R, 1 - alpha / 2, axis=0, method="higher").astype(int).tolist(),
        "top_share": (R == 1).mean(axis=0).tolist(),
        "score_low": np.quantile(S, alpha / 2, axis=0).tolist(),
        "score_high": np.quantile(S, 1 - alpha / 2, axis=0).tolist(),
    }
    return {"resamples": B, "ranking_holds": float(np.all(R == ranks[None, :], axis=1).mean()),
            "above": above.tolist(), "per_entrant": per, "metric": plan.settings["score"]}
