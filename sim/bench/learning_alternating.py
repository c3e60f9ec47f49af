"""Benchmark of the alternating-move kernel (:mod:`sim.learning.alternating`, Klein, 2021): periods per second
against its plain-Python twin and against the simultaneous Q-learning kernel, measured in the same run."""

from __future__ import annotations

import time

import numpy as np

from sim.bench.engine import best_time
from sim.core.rng import stream_states
from sim.learning.alternating import run_alternating
from sim.learning.alternating_twin import reference_alternating
from sim.learning.lineup import compile_lineup
from sim.learning.session import alternating_state
from sim.models.demand import LogitDemand
from sim.models.market import Market
from strategies.qlearning import QLearner

__all__ = ["alternating_benchmark"]

_NEVER = 2**62


def _kernel_run(lineup, session: int, seed: int, periods: int):
    """One alternating session of exactly ``periods`` periods through the kernel; its state at the end."""
    st = alternating_state(lineup, stream_states(seed, (0,), session, session + 1)[0].copy())
    run_alternating(lineup.seats, lineup.stage, st, _NEVER, periods)
    return st


def alternating_benchmark(*, reference_periods: int = 100_000, kernel_periods: int = 20_000_000, repeat: int = 1,
                          seed: int = 0) -> dict:
    """Throughput of the alternating kernel and of its twin on the same fixed-length workload: two Q-learners with
    15 prices each on the logit duopoly of the published simultaneous baseline (Calvano et al., 2020), so that the
    periods per second compare with the simultaneous kernel's on that market.

    Parameters
    ----------
    reference_periods : int
        Periods of the twin's session (and of each kernel session).
    kernel_periods : int
        Periods of the kernel in all.
    repeat : int
        The kernel timing is the best of this many runs.
    seed : int

    Returns
    -------
    dict
        ``workload``, ``kernel_periods_per_second``, ``reference_periods_per_second``, ``ratio`` (kernel over
        twin) and ``reference_identical_to_kernel`` (Q-values equal bit for bit after the twin's periods).
    """
    market = Market(LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)
    lineup = compile_lineup(market, QLearner(m=15))
    _kernel_run(lineup, 0, seed, 1000)  # compile (or load) outside the timings
    reps = max(1, kernel_periods // reference_periods)
    t_ker = best_time(lambda: [_kernel_run(lineup, j, seed, reference_periods) for j in range(reps)], repeat)
    t0 = time.perf_counter()
    ref = reference_alternating(lineup, stream_states(seed, (0,), 0, 1)[0], _NEVER, reference_periods)
    t_ref = time.perf_counter() - t0
    ker = _kernel_run(lineup, 0, seed, reference_periods)
    same = all(np.array_equal(ker.Q[i], np.array(ref["Q"][i])) for i in range(2))
    out = {"workload": "two Q-learners moving in turn (Klein, 2021), 15 prices each, logit baseline market, "
                       "alpha 0.15, beta 4e-6, delta 0.95, fixed-length sessions",
           "kernel_periods_per_second": reps * reference_periods / t_ker,
           "reference_periods_per_second": reference_periods / t_ref,
           "reference_identical_to_kernel": bool(same)}
    out["ratio"] = out["kernel_periods_per_second"] / out["reference_periods_per_second"]
    return out
