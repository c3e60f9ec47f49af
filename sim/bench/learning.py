"""Benchmark section ``learning`` of ``supergame bench``: the Q-learning kernel against its plain-Python twin, and
the wall time of 1,000 baseline sessions (Calvano et al., 2020) in a fresh process with an empty numba cache; the
bandit families (UCB, Thompson sampling) against their twins and against the Q-learning kernel of the same run."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

from sim.bench.engine import alternate_best
from sim.bench.learning_alternating import alternating_benchmark
from sim.bench.learning_signal import signal_benchmark
from sim.learning.lineup import compile_lineup
from sim.learning.session import kernel_session, reference_session
from sim.models.demand import LogitDemand
from sim.models.market import Market
from strategies.qlearning import QLearner

__all__ = ["bandit_benchmark", "baseline_market", "bench_section", "benchmark", "time_sessions"]


def baseline_market() -> Market:
    """The market of the published baseline.

    Returns
    -------
    sim.Market
        Logit Bertrand duopoly with a_i = 2, a_0 = 0, c = 1, mu = 1/4 (Calvano et al., 2020).
    """
    return Market(LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=1.0, model="bertrand", n_firms=2)


def benchmark(market=None, learners=None, *, sessions: int = 4, reference_periods: int = 100_000,
              kernel_periods: int = 20_000_000, repeat: int = 1, seed: int = 0) -> dict:
    """Throughput of the learning kernel and of its plain-Python reference, measured in the same run.

    Three timings, on the published baseline unless ``market`` and ``learners`` are given, all on one
    core:

    * the kernel on whole sessions (``sessions`` of them, each to convergence): the realistic
      workload, exploration phase and all;
    * the kernel on the reference's workload: the first ``reference_periods`` periods of as many
      sessions as make ``kernel_periods`` periods;
    * the reference on the first ``reference_periods`` periods of session 0, whose Q-matrix is
      checked to equal the kernel's.

    ``ratio`` compares the kernel and the reference on the same workload. Kernel timings are the best
    of ``repeat`` runs.

    Parameters
    ----------
    market : sim.Market, optional
        Default: :func:`baseline_market`.
    learners : QLearner or list, optional
        Default: the published learner on every seat.
    sessions : int
        Whole sessions timed.
    reference_periods : int
        Periods of the twin's session (and of each kernel session on the same workload).
    kernel_periods : int
        Periods of the kernel on the twin's workload, in all.
    repeat : int
        Kernel timings are the best of this many runs.
    seed : int

    Returns
    -------
    dict
        Plain numbers (periods, seconds, periods per second, ``ratio``), whether the twin's Q-matrix equals the
        kernel's, and a ``workload`` description.
    """
    market = baseline_market() if market is None else market
    lineup = compile_lineup(market, learners)
    never = 2**62
    t0 = time.perf_counter()
    kernel_session(lineup, seed=seed, convergence=never, max_periods=1000)
    t_first = time.perf_counter() - t0

    def best(fn):
        out, tbest = None, math.inf
        for _ in range(max(1, repeat)):
            t0 = time.perf_counter()
            out = fn()
            tbest = min(tbest, time.perf_counter() - t0)
        return out, tbest

    whole, t_whole = best(lambda: sum(kernel_session(lineup, j, seed=seed, convergence=100_000,
                                                     max_periods=10**9)["periods"] for j in range(sessions)))
    reps = max(1, kernel_periods // reference_periods)
    _, t_same = best(lambda: [kernel_session(lineup, j, seed=seed, convergence=never, max_periods=reference_periods)
                              for j in range(reps)])
    t0 = time.perf_counter()
    ref = reference_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    t_ref = time.perf_counter() - t0
    ker = kernel_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    out = {
        "workload": f"{lineup.n_seats} Q-learners, {int(lineup.seats.radix[0])} actions each, memory {lineup.stage.K}",
        "first_call_seconds": t_first,
        "kernel_sessions": sessions,
        "kernel_session_periods": int(whole),
        "kernel_session_seconds": t_whole,
        "kernel_session_periods_per_second": whole / t_whole,
        "kernel_periods": reps * reference_periods,
        "kernel_seconds": t_same,
        "kernel_periods_per_second": reps * reference_periods / t_same,
        "reference_periods": reference_periods,
        "reference_seconds": t_ref,
        "reference_periods_per_second": reference_periods / t_ref,
        "reference_identical_to_kernel": bool(np.array_equal(ref["Q"], ker["Q"])),
    }
    out["ratio"] = out["kernel_periods_per_second"] / out["reference_periods_per_second"]
    return out


def bandit_benchmark(family: str, *, reference_periods: int = 100_000, kernel_periods: int = 20_000_000,
                     repeat: int = 1, seed: int = 0) -> dict:
    """Throughput of the learning kernel with two bandits of one family on the baseline market (m = 15 prices, no
    noise), of its plain-Python twin, and of the Q-learning kernel on the same fixed-length workload.

    The Q-learning kernel runs the workload of :func:`benchmark` (two Q-learners of the published baseline, 15
    prices each), and the bandits the same: as many seats and prices, ``kernel_periods`` in all in sessions of
    ``reference_periods``, each started afresh. The two kernels are timed in turn, ``repeat`` times, each its best.

    Parameters
    ----------
    family : {"ucb", "thompson"}
    reference_periods : int
        Periods of the twin's session (and of each kernel session).
    kernel_periods : int
        Periods of each kernel in all.
    repeat : int
        The kernel timings are the best of this many runs.
    seed : int

    Returns
    -------
    dict
        ``workload``, ``kernel_periods`` (in all), ``reference_periods`` (of each session),
        ``kernel_periods_per_second``, ``q_learning_periods_per_second``, ``speed_relative_to_q_learning`` (the
        bandits' over the Q-learners'), ``reference_periods_per_second``, ``ratio`` (kernel over twin) and
        ``reference_identical_to_kernel`` (statistics and values equal bit for bit).
    """
    lineup = compile_lineup(baseline_market(), QLearner(family=family, m=15))
    q_lineup = compile_lineup(baseline_market(), None)
    never = 2**62
    for lu in (lineup, q_lineup):
        kernel_session(lu, seed=seed, convergence=never, max_periods=1000)  # compile outside the timings
    reps = max(1, kernel_periods // reference_periods)

    def workload(lu):
        return lambda: [kernel_session(lu, j, seed=seed, convergence=never, max_periods=reference_periods)
                        for j in range(reps)]

    t_q, t_ker = alternate_best([workload(q_lineup), workload(lineup)], repeat)
    t0 = time.perf_counter()
    ref = reference_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    t_ref = time.perf_counter() - t0
    ker = kernel_session(lineup, seed=seed, convergence=never, max_periods=reference_periods)
    out = {"workload": f"two {family} bandits, 15 prices each, baseline market, no noise, sessions of "
                       f"{reference_periods} periods",
           "kernel_periods": reps * reference_periods,
           "reference_periods": reference_periods,
           "kernel_periods_per_second": reps * reference_periods / t_ker,
           "q_learning_periods_per_second": reps * reference_periods / t_q,
           "reference_periods_per_second": reference_periods / t_ref,
           "reference_identical_to_kernel": bool(np.array_equal(ref["Q"], ker["Q"])
                                                 and np.array_equal(ref["counts"], ker["counts"]))}
    out["speed_relative_to_q_learning"] = t_q / t_ker
    out["ratio"] = out["kernel_periods_per_second"] / out["reference_periods_per_second"]
    return out


def time_sessions(sessions: int = 1000, workers: int = 2, seed: int = 0, cold: bool = True) -> dict:
    """Wall time of ``sessions`` baseline sessions in a fresh process, compilation included.

    With ``cold`` the process gets an empty numba cache directory, so every kernel is compiled from
    scratch inside the timed run (interpreter start and imports are timed too).

    Parameters
    ----------
    sessions : int
    workers : int
        Sessions run at once.
    seed : int
    cold : bool
        Start from an empty numba cache.

    Returns
    -------
    dict
        ``converged``, ``profit_gain`` (mean), ``in_process_seconds``, ``wall_seconds`` and the settings.
    """
    code = ("import json, time; t0 = time.perf_counter(); from sim.learning.session import learn; "
            "from sim.bench.learning import baseline_market; "
            f"r = learn(baseline_market(), sessions={int(sessions)}, seed={int(seed)}, workers={int(workers)}, "
            "progress=False); s = r.summary(); "
            "print(json.dumps({'converged': int(r.converged.sum()), 'profit_gain': s['profit_gain']['mean'], "
            "'in_process_seconds': time.perf_counter() - t0}))")
    env = dict(os.environ)
    with tempfile.TemporaryDirectory() as cache:
        if cold:
            env["NUMBA_CACHE_DIR"] = cache
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=False)
        wall = time.perf_counter() - t0
    if proc.returncode != 0:
        last = proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "no output"
        raise RuntimeError(f"timed learning run failed: {last}")
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out.update({"sessions": sessions, "workers": workers, "cold_cache": cold, "wall_seconds": wall})
    return out


def bench_section(opts) -> dict:
    """The ``learning`` section of ``supergame bench`` (``opts``: :class:`sim.bench.BenchOptions`).

    Throughput of the two-agent baseline on one core against the plain-Python reference, and the wall
    time of 1,000 baseline sessions with ``opts.threads`` workers in a fresh process with an empty numba
    cache (compilation included). Targets: >= 8e6 periods/s, >= 100 x the reference, 1,000 sessions in under 3
    minutes. Each bandit family (:func:`bandit_benchmark`): >= 100 x its twin and at least half the Q-learning
    kernel's periods per second on the same fixed-length workload, the two timed in turn in the same run; the
    alternating-move kernel (Klein, 2021) likewise.

    Parameters
    ----------
    opts : sim.bench.BenchOptions

    Returns
    -------
    dict
        The measures of :func:`benchmark`, ``sessions_run`` (:func:`time_sessions`), ``bandits`` (per family, the
        measures of :func:`bandit_benchmark`, ``speed_relative_to_q_learning`` included), ``alternating`` (the same for
        alternating moves, :func:`sim.bench.learning_alternating.alternating_benchmark`), ``own_profit_signal`` (the
        same for the own-profit signal, :func:`sim.bench.learning_signal.signal_benchmark`), ``noisy_prices`` (the same
        for noisy prices, ``observe="noisy_prices"``), ``workload``,
        ``targets`` and ``notes``.
    """
    quick = bool(getattr(opts, "quick", False))
    workers = int(getattr(opts, "threads", 2))
    repeat = int(getattr(opts, "repeat", 1))
    # one fixed-length workload for every kernel compared per period: sessions as long, as many periods in all
    size = ({"reference_periods": 5_000, "kernel_periods": 500_000, "repeat": 1} if quick else
            {"reference_periods": 100_000, "kernel_periods": 20_000_000, "repeat": repeat})
    b = benchmark(sessions=1 if quick else 4, **size)
    if quick:
        t = time_sessions(sessions=8, workers=workers, cold=False)
    else:
        t = time_sessions(sessions=1000, workers=workers, cold=True)
    rate = min(b["kernel_session_periods_per_second"], b["kernel_periods_per_second"])
    out = dict(b)
    out["workload"] = ("two Q-learners, logit Bertrand baseline of Calvano et al. (2020): m = 15, k = 1, "
                       "alpha 0.15, beta 4e-6, delta 0.95")
    out["sessions_run"] = t
    out["targets"] = {
        "kernel >= 8e6 periods/s on one core": rate >= 8e6,
        "kernel >= 100 x reference": b["ratio"] >= 100,
        f"{t['sessions']} baseline sessions in < 180 s with {workers} workers, compile included":
            t["wall_seconds"] < 180 and t["sessions"] == 1000 and t["cold_cache"],
        "reference and kernel identical": b["reference_identical_to_kernel"],
    }
    out["notes"] = ["quick workload: the targets refer to the full workload"] if quick else []
    out["notes"].append("bandits: speed relative to the Q-learning kernel timed in turn with it on the same workload "
                        "(bandits.<family>.q_learning_periods_per_second)")
    # the bandit families against the Q-learning kernel of the same run (periods per second on one core)
    out["bandits"] = {}
    for family in ("ucb", "thompson"):
        # timed in turn with the Q-learning kernel on its workload (a change of load falls on both alike)
        bb = bandit_benchmark(family, **size)
        out["bandits"][family] = bb
        out["targets"][f"{family} kernel >= 100 x its twin"] = bb["ratio"] >= 100
        out["targets"][f"{family} kernel within a factor 2 of Q-learning per period"] = (
            bb["speed_relative_to_q_learning"] >= 0.5)
        out["targets"][f"{family} twin and kernel identical"] = bb["reference_identical_to_kernel"]
    # alternating moves (Klein, 2021) against their twin and the simultaneous Q-learning kernel of the same run
    alt = alternating_benchmark(**size)
    alt["speed_relative_to_q_learning"] = alt["kernel_periods_per_second"] / b["kernel_periods_per_second"]
    out["alternating"] = alt
    out["targets"]["alternating kernel >= 100 x its twin"] = alt["ratio"] >= 100
    out["targets"]["alternating kernel within a factor 2 of Q-learning per period"] = (
        alt["speed_relative_to_q_learning"] >= 0.5)
    out["targets"]["alternating twin and kernel identical"] = alt["reference_identical_to_kernel"]
    # learners that see a signal of their own profit under a demand shock (Calvano et al., 2021), timed in turn with
    # the baseline Q-learning kernel
    sig = signal_benchmark(**size)
    out["own_profit_signal"] = sig
    out["targets"]["own-profit signal kernel >= 100 x its twin"] = sig["ratio"] >= 100
    out["targets"]["own-profit signal kernel within a factor 2 of Q-learning per period"] = (
        sig["speed_relative_to_q_learning"] >= 0.5)
    out["targets"]["own-profit signal twin and kernel identical"] = sig["reference_identical_to_kernel"]
    # learners that see the rival's price with error (sim.learning.noisy_prices), timed the same way
    noisy = signal_benchmark(**size, observe="noisy_prices")
    out["noisy_prices"] = noisy
    out["targets"]["noisy-price kernel >= 100 x its twin"] = noisy["ratio"] >= 100
    out["targets"]["noisy-price kernel within a factor 2 of Q-learning per period"] = (
        noisy["speed_relative_to_q_learning"] >= 0.5)
    out["targets"]["noisy-price twin and kernel identical"] = noisy["reference_identical_to_kernel"]
    return out
