"""Benchmark section ``sweep`` of ``supergame bench``."""

from __future__ import annotations

import json
import subprocess
import sys
import tomllib

from sim.bench.engine import best_time
from sim.core.parallel import usable_cores
from sim.runner.experiment import experiment_from_dict
from sim.runner.kinds import CellContext

# --------------------------------------------------------------------------------------------------
# Benchmark (section ``sweep`` of ``supergame bench``)
# --------------------------------------------------------------------------------------------------

_BENCH_TINY = """
[experiment]
name = "bench-overhead"
kind = "simulate"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
cost = [10.0, 10.0, 14.0]
[[strategies]]
strategy = "grim_trigger"
seats = 3
[run]
periods = 2
replications = 2
seed = 1
[sweep]
"run.delta" = {{ start = 0.5, stop = 0.99, num = {n} }}
"""

_BENCH_HEAVY = """
[experiment]
name = "bench-speedup"
kind = "simulate"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
cost = 10.0
n_firms = 3
[monitoring]
signal = "price"
sigma = 0.1
[[strategies]]
strategy = "trigger_price"
trigger = 50.0
length = 2
seats = 3
[run]
periods = {periods}
replications = {reps}
seed = 2
[sweep]
"run.delta" = {{ start = 0.8, stop = 0.95, num = {n} }}
"""


_BENCH_CHILD = """
import json, sys, tempfile, time, tomllib
from pathlib import Path
from sim.runner.experiment import experiment_from_dict
from sim.runner.runs import run_experiment
text = sys.stdin.read()
exp = experiment_from_dict(tomllib.loads(text), text=text, source="bench")
with tempfile.TemporaryDirectory() as tmp:
    t0 = time.perf_counter()
    s = run_experiment(exp, Path(tmp) / "run", workers=int(sys.argv[1]), progress=False)
    seconds = time.perf_counter() - t0
    csv = (Path(tmp) / "run" / "results.csv").read_text()
print(json.dumps({"seconds": seconds, "ok": s.ok, "csv": csv, "backend": s.backend}))
"""


def _timed_run(text: str, workers: int) -> dict:
    """Wall time of :func:`sim.runner.runs.run_experiment` in a fresh process (as ``supergame run`` runs it)."""

    proc = subprocess.run([sys.executable, "-c", _BENCH_CHILD, str(workers)], input=text, capture_output=True,
                          text=True, check=False)
    if proc.returncode != 0:
        last = proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "no output"
        raise RuntimeError(f"timed sweep failed: {last}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def bench_section(opts) -> dict:
    """Per-cell overhead of the sweep machinery and the speed-up of 2 local workers over 1.

    * Overhead: sweeps of tiny cells (two periods, two replications) run through
      :func:`sim.runner.runs.run_experiment` -- validation of every cell, payloads, one committed row per cell,
      exports and manifest included -- against a plain loop calling the kind on the same cells. Two sweep
      sizes separate the cost per cell (the slope: target < 5 ms) from the fixed cost of a run (run folder,
      exports, manifest); the all-in cost per cell of the larger sweep is reported too. The same with 2
      worker processes gives the cost per cell of the parallel path.
    * Speed-up: a CPU-bound sweep (trigger-price strategies under demand shocks, each cell about a
      second on one core, some 25 s in all) with 1 and with 2 local workers, each in a fresh process as
      ``supergame run`` runs it; target >= 1.7. Both must give the same results file. The ratio includes
      the fixed cost of starting the workers (each loads the compiled kernels, about half a second).

    Parameters
    ----------
    opts : BenchOptions
        ``quick`` for smaller sweeps, ``repeat`` for the best-of count (``threads`` is not used: cells run on
        one thread each).

    Returns
    -------
    dict
        ``workload``; ``overhead`` (seconds of the plain loop and of the sweeps with 1 and 2 workers, cost per
        cell in ms, fixed cost per run); ``speedup`` (seconds with 1 and 2 workers, their ratio, whether the
        results files are identical, the usable cores); ``targets`` and ``notes``.
    """


    quick = bool(getattr(opts, "quick", False))
    repeat = max(1, int(getattr(opts, "repeat", 1)))
    sizes = (50, 300) if quick else (100, 1000)
    heavy = {"n": 4, "periods": 500, "reps": 200} if quick else {"n": 24, "periods": 15000, "reps": 1000}

    def load(text):
        return experiment_from_dict(tomllib.loads(text), text=text, source="bench")

    def best(fn):
        return best_time(fn, repeat)

    res: dict = {}
    for n in sizes:
        text = _BENCH_TINY.format(n=n)
        exp = load(text)
        kind = exp.kind_spec()
        cfgs = [(c.index, kind.prepare(c.doc)) for c in exp.cells()]
        kind.run(cfgs[0][1], CellContext(0))  # compile or load the kernels

        def direct(cfgs=cfgs, kind=kind):
            for i, cfg in cfgs:
                kind.run(cfg, CellContext(i))

        # the sweeps run in fresh processes, as `supergame run` does (the one-time costs of a process,
        # imports and loading the compiled kernels, are the same for both sizes and drop out of the slope)
        res[n] = {"direct": best(direct),
                  "sweep1": min(_timed_run(text, 1)["seconds"] for _ in range(repeat)),
                  "sweep2": min(_timed_run(text, 2)["seconds"] for _ in range(repeat))}
    a, b = sizes
    extra1 = lambda n: res[n]["sweep1"] - res[n]["direct"]  # noqa: E731
    extra2 = lambda n: res[n]["sweep2"] - res[n]["direct"] / 2  # noqa: E731
    per_cell = (extra1(b) - extra1(a)) / (b - a)
    per_cell2 = (extra2(b) - extra2(a)) / (b - a)
    fixed = extra1(a) - a * per_cell
    heavy_text = _BENCH_HEAVY.format(**heavy)
    h1 = min((_timed_run(heavy_text, 1) for _ in range(repeat)), key=lambda r: r["seconds"])
    h2 = min((_timed_run(heavy_text, 2) for _ in range(repeat)), key=lambda r: r["seconds"])
    speedup = h1["seconds"] / h2["seconds"]
    same = h1["csv"] == h2["csv"]
    cores = usable_cores()
    return {
        "workload": (f"overhead: sweeps of {a} and {b} tiny simulate cells (2 periods x 2 replications); speed-up: "
                     f"{heavy['n']} trigger-price cells of {heavy['periods']} periods x {heavy['reps']} replications "
                     "x 3 firms"),
        "overhead": {
            f"direct_loop_seconds_{b}_cells": res[b]["direct"],
            f"sweep_1_worker_seconds_{b}_cells": res[b]["sweep1"],
            f"sweep_2_workers_seconds_{b}_cells": res[b]["sweep2"],
            "per_cell_ms": 1000 * per_cell,
            "per_cell_2_workers_ms": 1000 * per_cell2,
            "fixed_per_run_seconds": fixed,
            f"sweep_1_worker_seconds_{a}_cells": res[a]["sweep1"],
            f"direct_loop_seconds_{a}_cells": res[a]["direct"],
            f"all_in_per_cell_ms_{b}_cells": 1000 * extra1(b) / b,
        },
        "speedup": {"cells": heavy["n"], "one_worker_seconds": h1["seconds"], "two_workers_seconds": h2["seconds"],
                    "ratio": speedup, "identical_results": bool(same), "usable_cores": cores,
                    "two_worker_backend": h2["backend"]},
        "targets": {
            "per-cell overhead < 5 ms (1 worker)": per_cell < 0.005,
            "2 workers >= 1.7 x 1 worker on a CPU-bound sweep": speedup >= 1.7,
            "1 and 2 workers give identical results": bool(same),
        },
        "notes": (["quick workload: the targets refer to the full workload"] if quick else [])
        + (["fewer than 2 usable cores: the speed-up target cannot be met here"] if cores < 2 else []),
    }
