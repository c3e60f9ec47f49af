"""Benchmark sections of ``supergame bench``: each measures a kernel or a layer against a reference measured in the
same run (a plain-Python twin, one worker against two), so that its figures are ratios, not seconds that depend on
the machine.

A section is a function ``section(opts: BenchOptions) -> dict`` registered in :data:`SECTIONS` (imported on first
use, so that listing the sections imports nothing heavy). Its dict holds the measures, ``workload`` (one line),
``targets`` (target text -> met) and ``notes``.
"""

from __future__ import annotations

import importlib
import os
import platform
from dataclasses import dataclass

import numpy


@dataclass
class BenchOptions:
    """Options shared by every section.

    Attributes
    ----------
    quick : bool
        A small workload (for smoke tests); the targets are not meaningful then.
    threads : int
        Threads for the multi-thread timings.
    repeat : int
        Timings are the best of this many runs.
    """

    quick: bool = False
    threads: int = 2
    repeat: int = 3


#: section name -> ("module:function", one line describing what it measures)
SECTIONS: dict = {
    "engine": ("sim.bench.engine:engine_benchmark", "simulation kernel vs plain-Python reference, threads, memory"),
    "matches": ("sim.bench.engine:matches_benchmark",
                "many small duopoly matches through the lower-level engine entry"),
    "theory": ("sim.bench.theory:theory_benchmark", "every threshold of 10-firm asymmetric markets"),
    "learning": ("sim.bench.learning:bench_section",
                 "Q-learning kernel vs plain-Python reference; 1,000 baseline sessions"),
    "published": ("sim.bench.learning_published:bench_section",
                  "1,000 sessions of each published learning setting (every cell of its shipped file), --threads "
                  "workers"),
    "tournament": ("sim.bench.tournament:bench_section",
                   "10-entrant duopoly tournament: wall time, driver overhead"),
    "runfolders": ("sim.bench.runfolders:bench_section",
                   "report and verify on run folders of 200, 2,000 and 20,000 cells: time, memory, growth"),
    "sweep": ("sim.bench.sweep:bench_section", "experiments layer: per-cell overhead, 2 local workers against 1"),
    "capacity": ("sim.bench.capacity:capacity_benchmark",
                 "capacity-constrained pricing, partial cartels and global sensitivity against plain references"),
    "capacity_engine": ("sim.bench.capacity_engine:capacity_engine_benchmark",
                        "simulation kernel in a capacity market against the linear Bertrand kernel"),
    "payoff_sets": ("sim.bench.payoff_sets:payoff_sets_benchmark",
                    "equilibrium payoff sets: 2 firms against an independent implementation, 3 firms against LPs"),
}


def section(name: str):
    """The function of section ``name``, imported on first use.

    Parameters
    ----------
    name : str
        A key of :data:`SECTIONS`.

    Returns
    -------
    callable
        ``section(opts: BenchOptions) -> dict``.

    Raises
    ------
    KeyError
        For a name that is not a section (the command checks names before it calls this).
    """
    fn = SECTIONS[name][0]
    if callable(fn):
        return fn
    mod, _, attr = str(fn).partition(":")
    return getattr(importlib.import_module(mod), attr)


def machine() -> dict:
    """What the figures were measured on: versions, cores and numba's threading.

    Returns
    -------
    dict
        ``python``, ``numpy`` and ``numba`` versions, ``cpus`` (the machine's count), ``numba_threads`` and
        ``threading_layer``.
    """
    import numba  # heavy: only when a benchmark runs

    return {"python": platform.python_version(), "numpy": numpy.__version__, "numba": numba.__version__,
            "cpus": os.cpu_count(), "numba_threads": int(numba.config.NUMBA_NUM_THREADS),
            "threading_layer": str(numba.config.THREADING_LAYER)}
