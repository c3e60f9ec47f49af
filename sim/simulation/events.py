"""Simulated market events: detections of a cartel and paths of demand states, in compiled kernels.

Each replication owns its own xoshiro256** stream (:func:`sim.core.rng.stream_states`, stream family
``(key..., 0)`` for detections and ``(key..., 1)`` for demand states), so the draws depend only on the
user's seed, the key and the replication index -- never on workers or threads. The kernels use the
draws in exactly the order of the plain-Python references in :mod:`sim.theory.draws`
(:func:`~sim.theory.draws.simulate_detections`, :func:`~sim.theory.draws.draw_state_path`), which are
their twins: the same seed gives the same path (a test checks every period).

* :func:`simulate_detections_many` -- collusion under the default detection convention (one uniform per
  colluding period, detected below the conviction rate; competition for ``after_detection`` periods or
  forever after a conviction): convictions, periods in collusion and fines paid per replication.
* :func:`simulate_state_frequencies` -- the share of periods spent in each demand state, to be set
  against the state probabilities or the stationary distribution of the chain
  (:func:`sim.theory.demand_states.stationary_distribution`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from sim.core.params import Integer
from sim.core.records import Record
from sim.core.rng import next_double, stream_states
from sim.theory.demand_states import DemandStates
from sim.theory.enforcement import Enforcement, enforcement_terms

__all__ = ["DetectionSimulation", "StateFrequencies", "simulate_detections_many", "simulate_state_frequencies"]


@njit(cache=True)
def _detection_kernel(states, n_periods, q, after):  # pragma: no cover - compiled; twin in sim.theory.draws
    n = states.shape[0]
    colluding = np.zeros(n, dtype=np.int64)
    convictions = np.zeros(n, dtype=np.int64)
    for r in range(n):
        s = states[r].copy()
        wait = 0  # periods of competition left; -1: competition forever
        for _t in range(n_periods):
            if wait != 0:
                if wait > 0:
                    wait -= 1
                continue
            colluding[r] += 1
            if next_double(s) < q:
                convictions[r] += 1
                wait = after  # -1 for forever
    return colluding, convictions


@njit(cache=True)
def _pick(u, cumulative):
    k = 0
    last = cumulative.shape[0] - 1
    while k < last and u >= cumulative[k]:
        k += 1
    return k


@njit(cache=True)
def _state_kernel(states, n_periods, initial_cum, rows_cum):  # pragma: no cover - compiled; twin in sim.theory.draws
    n = states.shape[0]
    S = rows_cum.shape[0]
    counts = np.zeros((n, S), dtype=np.int64)
    for r in range(n):
        s = states[r].copy()
        k = _pick(next_double(s), initial_cum)
        counts[r, k] += 1
        for _t in range(1, n_periods):
            k = _pick(next_double(s), rows_cum[k])
            counts[r, k] += 1
    return counts


@dataclass(frozen=True)
class DetectionSimulation(Record):
    """Simulated collusion under enforcement, per replication and on average.

    Parameters
    ----------
    conviction_rate : float
        ``q``: the probability per colluding period that collusion ends with a conviction.
    fine_per_conviction : ndarray of shape (n_firms,)
        What each firm pays at a conviction.
    n_periods : int
    replications : int
    collusive_periods : ndarray of shape (replications,)
        Periods spent colluding in each replication.
    convictions : ndarray of shape (replications,)
        Convictions in each replication.
    conviction_share : float
        Convictions per colluding period, pooled over replications (ratio of totals).
    conviction_share_se : float
        Its standard error by the delta method for a ratio of sums across independent replications.
    collusion_share : float
        Share of all periods spent colluding.
    fines_paid : ndarray of shape (n_firms,)
        Mean total fines per replication and firm.
    """

    conviction_rate: float
    fine_per_conviction: np.ndarray
    n_periods: int
    replications: int
    collusive_periods: np.ndarray
    convictions: np.ndarray
    conviction_share: float
    conviction_share_se: float
    collusion_share: float
    fines_paid: np.ndarray


def _ratio_se(num: np.ndarray, den: np.ndarray) -> float:
    """Standard error of ``sum(num) / sum(den)`` over independent replications (delta method; e.g. Cochran, 1977,
    Sampling Techniques, 3rd ed., section 6.4, the ratio estimator)."""
    n = num.size
    if n < 2 or den.sum() <= 0:
        return math.nan
    ratio = num.sum() / den.sum()
    resid = num - ratio * den
    return float(math.sqrt(resid.var(ddof=1) / n) / den.mean())


def simulate_detections_many(profits, enforcement: Enforcement, n_periods: int, replications: int, seed: int,
                             key: tuple = (0,)) -> DetectionSimulation:
    """Simulate collusion under an enforcement regime in independent replications.

    Parameters
    ----------
    profits : StageProfits, StageGame, Market or dict
        The agreement whose collusion is exposed (its price sets a price-dependent detection rate).
    enforcement : Enforcement
    n_periods : int >= 1
    replications : int >= 1
    seed : int
    key : tuple of int
        Stream family (e.g. the cell index).

    Returns
    -------
    DetectionSimulation
    """
    n_periods = Integer(1, 10**9).check("n_periods", n_periods)
    replications = Integer(1, 10**7).check("replications", replications)
    t = enforcement_terms(profits, enforcement)
    q = float(t.conviction_rate)
    after = -1 if t.after_detection is None else int(t.after_detection)
    states = stream_states(seed, (*key, 0), 0, replications)
    colluding, convictions = _detection_kernel(states, n_periods, q, after)
    per = t.expected_fine / q if q > 0 else np.zeros_like(t.expected_fine)
    share = float(convictions.sum() / colluding.sum()) if colluding.sum() else math.nan
    return DetectionSimulation(q, per, n_periods, replications, colluding.astype(float), convictions.astype(float),
                               share, _ratio_se(convictions.astype(float), colluding.astype(float)),
                               float(colluding.sum() / (n_periods * replications)), per * convictions.mean())


@dataclass(frozen=True)
class StateFrequencies(Record):
    """Simulated share of periods in each demand state.

    Parameters
    ----------
    labels : list of str
    n_periods : int
    replications : int
    frequencies : ndarray of shape (n_states,)
        Share of all simulated periods in each state.
    standard_errors : ndarray of shape (n_states,)
        Standard errors across independent replications (each replication's share is one observation).
    expected : ndarray of shape (n_states,)
        The long-run frequencies of the chain (the probabilities for i.i.d. states).
    """

    labels: list
    n_periods: int
    replications: int
    frequencies: np.ndarray
    standard_errors: np.ndarray
    expected: np.ndarray


def simulate_state_frequencies(states: DemandStates, n_periods: int, replications: int, seed: int,
                               key: tuple = (0,)) -> StateFrequencies:
    """Simulate demand-state paths and count the periods in each state.

    Parameters
    ----------
    states : DemandStates
        A deterministic cycle is counted without draws.
    n_periods : int >= 1
    replications : int >= 2
    seed : int
    key : tuple of int

    Returns
    -------
    StateFrequencies
    """
    n_periods = Integer(1, 10**9).check("n_periods", n_periods)
    replications = Integer(2, 10**7).check("replications", replications)
    S = states.n_states
    if states.kind == "cycle":
        one = np.bincount((np.argmax(states.initial) + np.arange(n_periods)) % S, minlength=S)
        counts = np.tile(one, (replications, 1))
    else:
        rng = stream_states(seed, (*key, 1), 0, replications)
        counts = _state_kernel(rng, n_periods, np.cumsum(states.initial), np.cumsum(states.transition, axis=1))
    shares = counts / n_periods
    return StateFrequencies(list(states.labels), n_periods, replications, shares.mean(axis=0),
                            shares.std(axis=0, ddof=1) / math.sqrt(replications), states.probabilities)
