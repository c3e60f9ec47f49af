"""Benchmarks of the protocols that observe something else than the prices: the own-profit signal
(:mod:`sim.learning.signals`, ``observe = "own_profit"``) and noisy prices (:mod:`sim.learning.noisy_prices`,
``observe = "noisy_prices"``). Periods per second of the learning kernel against the protocol's plain-Python twin,
on the same fixed-length workload as the simultaneous Q-learning kernel, so that the two compare per period."""

from __future__ import annotations

import time

import numpy as np

from sim.bench.engine import alternate_best
from sim.core.rng import stream_states
from sim.learning import kernel as K
from sim.learning.lineup import compile_lineup
from sim.learning.noisy_prices import PRICE_NOISE, noisy_start, reference_noisy_session
from sim.learning.session import kernel_session
from sim.learning.shocks import shock_code
from sim.learning.signals import SIGNAL_BAND, reference_signal_session, signal_start
from sim.models.demand import LogitDemand
from sim.models.market import Market
from strategies.qlearning import QLearner

__all__ = ["signal_benchmark"]

_NEVER = 2**62
#: the demand shock of the workload: lognormal, sigma 0.1 (the shipped experiment's)
_SIGMA = 0.1


#: per protocol: the kernel's code, its parameter, the start state, the twin, the demand shock's sigma, the workload
_PROTOCOLS = {
    "own_profit": (1, SIGNAL_BAND, signal_start,
                   lambda lu, st, periods, shock, sigma: reference_signal_session(lu, st, _NEVER, periods, shock,
                                                                                  sigma, SIGNAL_BAND),
                   _SIGMA, "two Q-learners seeing their own last price and whether their profit was low (own-profit "
                           "signal), 15 prices each, logit baseline market, lognormal demand shock sigma 0.1, "
                           "fixed-length sessions"),
    "noisy_prices": (2, PRICE_NOISE, noisy_start,
                     lambda lu, st, periods, shock, sigma: reference_noisy_session(lu, st, _NEVER, periods,
                                                                                   PRICE_NOISE, shock, sigma),
                     0.0, "two Q-learners seeing their own last price and the rival's with a normal error of one grid "
                          "step (noisy prices), 15 prices each, logit baseline market, no demand shock, fixed-length "
                          "sessions"),
}


def _kernel_run(lineup, session: int, seed: int, periods: int, shock: int, sigma: float, observe: str):
    """One session of the protocol of exactly ``periods`` periods through the kernel; its Q-values and stream."""
    code, param, start = _PROTOCOLS[observe][:3]
    rng = stream_states(seed, (0,), session, session + 1)[0].copy()
    state = lineup.session_state(rng)
    x = start(K.initial_state(rng, lineup.seats, lineup.stage), lineup)
    K.run_session(lineup.seats, lineup.learning_stage, lineup.automata, state, x, _NEVER, periods, shock, sigma, code,
                  param)
    return state, rng


def signal_benchmark(*, reference_periods: int = 100_000, kernel_periods: int = 20_000_000, repeat: int = 1,
                     seed: int = 0, observe: str = "own_profit") -> dict:
    """Throughput of the learning kernel under a protocol and of its twin: two Q-learners with 15 prices each on the
    logit duopoly of the published simultaneous baseline (Calvano et al., 2020); with the own-profit signal a
    lognormal demand shock of standard deviation 0.1 (after Calvano et al., 2021), with noisy prices an error of one
    grid step and no shock.

    Parameters
    ----------
    reference_periods : int
        Periods of the twin's session (and of each kernel session).
    kernel_periods : int
        Periods of the kernel in all.
    repeat : int
        The kernel timings are the best of this many runs, the protocol's and the baseline Q-learners' (the same
        market and grids, prices observed, no shock) timed in turn.
    seed : int
    observe : {"own_profit", "noisy_prices"}

    Returns
    -------
    dict
        ``workload``, ``kernel_periods_per_second``, ``q_learning_periods_per_second``,
        ``speed_relative_to_q_learning``, ``reference_periods_per_second``, ``ratio`` (kernel over twin) and
        ``reference_identical_to_kernel`` (Q-values and stream equal bit for bit after the twin's periods).
    """
    _code, _param, _start, twin, sd, words = _PROTOCOLS[observe]
    market = Market(LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)
    lineup = compile_lineup(market, QLearner(m=15))
    shock, sigma = shock_code("lognormal", sd)
    q_lineup = compile_lineup(market, None)
    # compile (or load) outside the timings
    _kernel_run(lineup, 0, seed, 1000, shock, sigma, observe)
    kernel_session(q_lineup, seed=seed, convergence=_NEVER, max_periods=1000)
    reps = max(1, kernel_periods // reference_periods)
    t_q, t_ker = alternate_best(
        [lambda: [kernel_session(q_lineup, j, seed=seed, convergence=_NEVER, max_periods=reference_periods)
                  for j in range(reps)],
         lambda: [_kernel_run(lineup, j, seed, reference_periods, shock, sigma, observe) for j in range(reps)]],
        repeat)
    t0 = time.perf_counter()
    ref = twin(lineup, stream_states(seed, (0,), 0, 1)[0].copy(), reference_periods, shock, sigma)
    t_ref = time.perf_counter() - t0
    state, rng = _kernel_run(lineup, 0, seed, reference_periods, shock, sigma, observe)
    same = bool(np.array_equal(state.Q, ref["Q"]) and np.array_equal(rng, ref["rng"]))
    out = {"workload": words,
           "kernel_periods_per_second": reps * reference_periods / t_ker,
           "q_learning_periods_per_second": reps * reference_periods / t_q,
           "speed_relative_to_q_learning": t_q / t_ker,
           "reference_periods_per_second": reference_periods / t_ref,
           "reference_identical_to_kernel": same}
    out["ratio"] = out["kernel_periods_per_second"] / out["reference_periods_per_second"]
    return out

