"""Benchmark sections ``engine`` and ``matches``: the simulation kernel against its plain-Python twin.

``engine`` -- the simulation kernel (:mod:`sim.simulation.kernel`) on the fixed workload of the acceptance
criteria: three firms, linear Cournot demand, trigger-price strategies watching the public price
under a lognormal demand shock, 1,000 periods x 20,000 replications. Reports firm-periods per second
on one thread, on more threads and for the plain-Python reference (:mod:`sim.simulation.twin`, on a slice
of the same workload, whose results are checked to be identical to the kernel's), their ratios, and
the peak memory of a fresh process running the workload with 1x and 10x the periods.

``matches`` -- many small matches through the lower-level entry (:func:`sim.simulation.game.compile_game` and
:func:`sim.simulation.driver.run_game`), as a tournament plays them: ten strategies, every pairing in a duopoly
(55 matches), 1,000 replications of 1,000 periods each, and the fixed cost of one call.
"""

from __future__ import annotations

import itertools
import json
import resource
import subprocess
import sys
import time

import numpy as np

import strategies as S
from sim.bench import BenchOptions
from sim.models.demand import LinearDemand
from sim.models.market import Market, market_from_dict
from sim.models.monitoring import Monitoring
from sim.simulation.engine import RawRun, compile_game, prepare_game, run_game, stage_levels
from sim.simulation.twin import reference_run

# --------------------------------------------------------------------------------------------------
# engine
# --------------------------------------------------------------------------------------------------

ENGINE_WORKLOAD = {
    "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0,
               "n_firms": 3},
    "strategies": [{"strategy": "trigger_price", "trigger": 50.0, "length": 2, "seats": 3}],
    "monitoring": {"signal": "price", "noise": "lognormal", "sigma": 0.1},
    "periods": 1000,
    "replications": 20_000,
    "delta": 0.95,
    "seed": 20261201,
}
_QUICK = {"periods": 100, "replications": 400}


def _engine_game():

    w = ENGINE_WORKLOAD
    return prepare_game(market_from_dict(w["market"]), w["strategies"], w["monitoring"])


def best_time(fn, repeat: int) -> float:
    """The shortest wall time of ``repeat`` calls of ``fn`` (at least one), in seconds.

    Parameters
    ----------
    fn : callable
        Called without arguments.
    repeat : int

    Returns
    -------
    float
    """
    best = float("inf")
    for _ in range(max(1, repeat)):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def alternate_best(fns, repeat: int) -> list[float]:
    """The shortest wall time of each of ``fns``, called in turn ``repeat`` times (at least once).

    On a shared machine a change of load then falls on every timing alike, which one best-of after the other does
    not ensure.

    Parameters
    ----------
    fns : sequence of callable
        Each called without arguments.
    repeat : int

    Returns
    -------
    list of float
        Seconds, one per function.
    """
    best = [float("inf")] * len(fns)
    for _ in range(max(1, repeat)):
        for k, fn in enumerate(fns):
            t0 = time.perf_counter()
            fn()
            best[k] = min(best[k], time.perf_counter() - t0)
    return best


def memory_probe(periods: int, replications: int, threads: int) -> dict:
    """Run in a fresh process: the workload once, then report the peak resident memory.

    Parameters
    ----------
    periods, replications : int
        Size of the engine workload to run.
    threads : int
        Threads of the kernel.

    Returns
    -------
    dict
        ``peak_kib`` (the process's peak resident memory after the run, KiB), ``before_kib`` (the same after a
        tiny warm-up run) and ``result_bytes`` (the bytes of the arrays the run returned).
    """


    game = _engine_game()
    run_game(game, 10, 10, 0.95, 1, threads=threads, progress=False)  # compile or load the cache
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    raw = run_game(game, periods, replications, ENGINE_WORKLOAD["delta"], ENGINE_WORKLOAD["seed"],
                   threads=threads, progress=False)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    held = sum(getattr(raw, f).nbytes for f in RawRun.__dataclass_fields__ if f != "n_paths")
    return {"peak_kib": int(peak), "before_kib": int(before), "result_bytes": int(held)}


def _probe_in_subprocess(periods: int, replications: int, threads: int) -> dict:
    code = ("import json, sys; from sim.bench.engine import memory_probe; "
            f"print(json.dumps(memory_probe({periods}, {replications}, {threads})))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    if out.returncode != 0:
        raise RuntimeError(f"memory probe failed: {out.stderr.strip().splitlines()[-1] if out.stderr else ''}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def engine_benchmark(opts: BenchOptions) -> dict:
    """The engine section (see the module notes).

    Parameters
    ----------
    opts : BenchOptions
        ``quick`` for the small workload, ``threads`` for the multi-thread timings, ``repeat`` for the best-of count.

    Returns
    -------
    dict
        ``workload``; the time of the first call; firm-periods per second of the kernel on one thread and on
        ``opts.threads`` threads and of the plain-Python reference (and whether it gives identical results);
        their ratios; peak memory with 1x and 10x the periods; ``targets`` (target text -> met) and ``notes``.
    """


    w = dict(ENGINE_WORKLOAD)
    if opts.quick:
        w.update(_QUICK)
    periods, reps, delta, seed = w["periods"], w["replications"], w["delta"], w["seed"]
    game = _engine_game()
    n = game.n_firms
    t0 = time.perf_counter()
    run_game(game, 10, 10, delta, seed, threads=1, progress=False)
    first_call = time.perf_counter() - t0

    def kernel(threads):
        return lambda: run_game(game, periods, reps, delta, seed, threads=threads, progress=False)

    t1 = best_time(kernel(1), opts.repeat)
    tn = best_time(kernel(opts.threads), opts.repeat) if opts.threads > 1 else t1
    work = periods * reps * n
    # the reference on a slice of the same workload (same periods, the first replications)
    ref_reps = 2 if opts.quick else 12
    t0 = time.perf_counter()
    ref = reference_run(game, periods, ref_reps, delta, seed)
    t_ref = time.perf_counter() - t0
    ker = run_game(game, periods, ref_reps, delta, seed, threads=1, progress=False)
    identical = all(np.array_equal(getattr(ref, f), getattr(ker, f))
                    for f in ("profit_sum", "disc", "ints", "flts", "hist", "by_period"))
    rate1 = work / t1
    raten = work / tn
    rate_ref = periods * ref_reps * n / t_ref
    # memory: a fresh process per setting, so that both start from the same baseline
    mem_reps = reps
    m1 = _probe_in_subprocess(periods, mem_reps, opts.threads)
    m10 = _probe_in_subprocess(10 * periods, mem_reps, opts.threads)
    growth = (m10["peak_kib"] - m1["peak_kib"]) / m1["peak_kib"]
    return {
        "workload": (f"{n} firms, linear Cournot, trigger-price strategies watching the price, lognormal shock "
                     f"sigma 0.1; {periods} periods x {reps} replications"),
        "firm_periods": work,
        "first_call_seconds": first_call,
        "kernel_1_thread": {"seconds": t1, "firm_periods_per_second": rate1},
        f"kernel_{opts.threads}_threads": {"seconds": tn, "firm_periods_per_second": raten},
        "reference": {"replications": ref_reps, "seconds": t_ref, "firm_periods_per_second": rate_ref,
                      "identical_to_kernel": bool(identical)},
        "ratio_kernel_to_reference": rate1 / rate_ref,
        "thread_speedup": t1 / tn,
        "threads": opts.threads,
        "memory": {"periods_1x": periods, "periods_10x": 10 * periods, "replications": mem_reps,
                   "peak_kib_1x": m1["peak_kib"], "peak_kib_10x": m10["peak_kib"],
                   "result_bytes_1x": m1["result_bytes"], "result_bytes_10x": m10["result_bytes"],
                   "growth": growth},
        "targets": {
            "kernel >= 3e7 firm-periods/s on one thread": rate1 >= 3e7,
            "kernel >= 50 x reference": rate1 / rate_ref >= 50,
            f"{opts.threads} threads >= 1.7 x one thread": opts.threads >= 2 and t1 / tn >= 1.7,
            "10 x periods raises peak memory by < 10 %": growth < 0.10,
            "reference and kernel identical": bool(identical),
        },
        "notes": ["quick workload: the targets refer to the full workload"] if opts.quick else [],
    }


def matches_benchmark(opts: BenchOptions) -> dict:
    """The matches section (see the module notes).

    Parameters
    ----------
    opts : BenchOptions
        ``quick`` for the small workload, ``threads`` for the multi-thread timings, ``repeat`` for the best-of count.

    Returns
    -------
    dict
        ``workload``, the number of matches, the seconds to build the stage game, compile and play every
        match, firm-periods per second, the fixed cost of one call, ``targets`` and ``notes``.
    """


    periods, reps = (100, 100) if opts.quick else (1000, 1000)
    market = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
    t0 = time.perf_counter()
    stage, levels = stage_levels(market)
    t_stage = time.perf_counter() - t0
    entrants = [S.GrimTrigger(), S.FinitePunishment(length=3), S.TitForTat(), S.ForgivingTitForTat(forgiveness=0.2),
                S.WinStayLoseShift(), S.StickAndCarrot(), S.AlwaysCompete(), S.AlwaysCollude(),
                S.Opportunist(probability=0.05, after="collude"), S.Opportunist(probability=1.0, start=10)]
    mon = Monitoring(perception_error=0.01, implementation_error=0.01)
    pairs = list(itertools.combinations_with_replacement(range(len(entrants)), 2))
    compiled = {}
    t0 = time.perf_counter()
    for a, b in pairs:
        compiled[(a, b)] = compile_game(stage, levels, [entrants[a], entrants[b]], mon, strict=False)
    t_compile = time.perf_counter() - t0
    run_game(compiled[pairs[0]], 10, 10, 0.95, 0, threads=opts.threads, progress=False)

    def play():
        for k, pair in enumerate(pairs):
            run_game(compiled[pair], periods, reps, 0.95, 0, key=(k,), threads=opts.threads, progress=False)

    t_all = best_time(play, 1 if opts.quick else max(1, opts.repeat - 1))
    tiny = compiled[pairs[0]]
    n_calls = 200
    t0 = time.perf_counter()
    for k in range(n_calls):
        run_game(tiny, 1, 1, 0.95, 0, key=(k,), threads=opts.threads, progress=False)
    per_call = (time.perf_counter() - t0) / n_calls
    work = len(pairs) * periods * reps * 2
    return {
        "workload": f"{len(entrants)} strategies, {len(pairs)} duopoly matches, {reps} replications x {periods} "
                    f"periods each, perception and implementation errors 0.01, {opts.threads} threads",
        "matches": len(pairs),
        "stage_game_seconds": t_stage,
        "compile_seconds_all_matches": t_compile,
        "play_seconds_all_matches": t_all,
        "firm_periods_per_second": work / t_all,
        "overhead_seconds_per_call": per_call,
        "targets": {"55 matches x 1000 x 1000 in < 10 s (play and compile)": (not opts.quick)
                    and t_all + t_compile < 10.0},
        "notes": ["quick workload: the target refers to the full workload"] if opts.quick else [],
    }


#: name -> (callable or "module:function", description)
