"""Benchmark: 1,000 sessions of each published learning setting the project ships, on two cores.

The settings are the cells of the shipped experiments that reproduce a published result: the simultaneous baseline
(Calvano, Calzolari, Denicolo and Pastorello, 2020; ``qlearning-baseline.toml``), sequential pricing on a coarse and
a fine grid (Klein, 2021; ``learning-sequential.toml``), asynchronous and synchronous updating (Asker, Fershtman and
Pakes, 2022; ``learning-update-rules.toml``), learning under demand shocks (Calvano et al., 2021;
``learning-noisy-demand.toml``) and UCB bandits at three signal-to-noise ratios (Hansen, Misra and Pai, 2021;
``learning-bandits.toml``). Each cell runs on its own, with ``run.sessions`` set to 1,000 and nothing else changed
(its session length is the file's: ``convergence`` and ``max_periods``), in a fresh process with two workers, as
``supergame run`` computes a cell (the learn kind's ``prepare`` and ``run``). Each process first runs the cell with
two sessions, untimed, so that the times are of the work and not of compiling the kernels (which the ``learning``
section times).

Target (issue text): 1,000 sessions of a setting in under 5 minutes on 2 cores where the setting's session length
allows; a cell that takes longer is reported with its session length, which is what decides it.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

from sim.runner.experiment import load_experiment

#: the published settings: shipped experiment file -> what it reproduces
SETTINGS = {
    "qlearning-baseline.toml": "Calvano et al. (2020), simultaneous baseline",
    "learning-sequential.toml": "Klein (2021), sequential pricing",
    "learning-update-rules.toml": "Asker, Fershtman and Pakes (2022), update rules",
    "learning-noisy-demand.toml": "Calvano et al. (2021), demand shocks",
    "learning-bandits.toml": "Hansen, Misra and Pai (2021), UCB bandits",
}

#: the limit of the target, seconds
LIMIT = 300.0

_CODE = """
import json, sys, tempfile, time, tomllib
t0 = time.perf_counter()
from sim.runner.experiment import experiment_from_dict
from sim.runner.kinds import CellContext
path, index, sessions, workers = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])
with open(path, "rb") as fh:
    doc = tomllib.load(fh)
doc.setdefault("run", {})["sessions"] = sessions
exp = experiment_from_dict(doc, check_cells=False)
cell = exp.cell(index)
kind = exp.kind_spec()
# compile first: the same cell with two sessions, untimed
warm = dict(cell.doc, run=dict(cell.doc["run"], sessions=2))
with tempfile.TemporaryDirectory() as scratch:
    kind.run(kind.prepare(warm), CellContext(index=index, threads=workers, folder=scratch))
t1 = time.perf_counter()
with tempfile.TemporaryDirectory() as scratch:
    res = kind.run(kind.prepare(cell.doc), CellContext(index=index, threads=workers, folder=scratch))
t2 = time.perf_counter()
m = res.metrics
learning = cell.doc.get("learning", {})
print(json.dumps({"cell": cell.describe(), "seconds": t2 - t1, "start_seconds": t1 - t0,
                  "sessions": sessions, "converged": m.get("converged"), "periods": m.get("periods"),
                  "profit_gain": m.get("profit_gain"), "convergence": learning.get("convergence"),
                  "max_periods": learning.get("max_periods")}, default=float))
"""


def experiments_folder() -> Path:
    """The shipped experiments (beside the package in a checkout).

    Returns
    -------
    pathlib.Path
    """
    return Path(__file__).resolve().parents[2] / "experiments"


def n_cells(path: Path) -> int:
    """The number of cells of an experiment file (its sweep).

    Parameters
    ----------
    path : pathlib.Path

    Returns
    -------
    int
    """
    return load_experiment(path, check_cells=False).n_cells


def time_cell(path: Path, index: int, sessions: int, workers: int) -> dict:
    """Run one cell of ``path`` with ``run.sessions = sessions`` in a fresh process and time it.

    Parameters
    ----------
    path : pathlib.Path
    index : int
        The cell, counted from 0.
    sessions : int
    workers : int

    Returns
    -------
    dict
        ``cell`` (its description), ``seconds`` (the cell's work, its preparation included), ``start_seconds``
        (imports, validation and the untimed two-session run that compiles the kernels), ``wall_seconds`` (the
        whole process), ``sessions``, the cell's ``converged`` share, mean
        ``periods`` and ``profit_gain``, and its ``convergence`` window and ``max_periods``.
    """
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", _CODE, str(path), str(index), str(sessions), str(workers)],
                          capture_output=True, text=True, check=False)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        last = proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "no output"
        raise RuntimeError(f"timed cell {index + 1} of {path.name} failed: {last}")
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out["wall_seconds"] = wall
    return out


def bench_section(opts) -> dict:
    """The ``published`` section of ``supergame bench`` (``opts``: :class:`sim.bench.BenchOptions`): every cell of
    every published setting (:data:`SETTINGS`) with 1,000 sessions (8 with ``quick``) and ``opts.threads`` workers.

    Parameters
    ----------
    opts : sim.bench.BenchOptions

    Returns
    -------
    dict
        Per file (its name without ``.toml``), per cell (``cell1``, ...), the measures of :func:`time_cell`;
        ``workload``, ``targets`` (one per cell: its 1,000 sessions in under 5 minutes) and ``notes``.
    """
    quick = bool(getattr(opts, "quick", False))
    workers = int(getattr(opts, "threads", 2))
    sessions = 8 if quick else 1000
    folder = experiments_folder()
    out: dict = {"workload": f"each cell of the published settings' shipped files with run.sessions = {sessions}, "
                             f"{workers} workers, in a fresh process"}
    missing = [name for name in SETTINGS if not (folder / name).is_file()]
    if missing:
        # an installed package without the project's experiments folder: nothing to time, the other sections go on
        out.update(targets={}, notes=[f"not measured: the shipped experiments ({', '.join(missing)}) are not in "
                                      f"{folder}; run the benchmark from a checkout of the project"])
        return out
    targets, notes = {}, []
    for name, what in SETTINGS.items():
        path = folder / name
        per = {}
        for c in range(n_cells(path)):
            r = time_cell(path, c, sessions, workers)
            per[f"cell{c + 1}"] = r
            ok = r["seconds"] < LIMIT
            targets[f"{what}, {r['cell']}: {sessions} sessions in < {LIMIT:.0f} s with {workers} workers"] = (
                ok and sessions == 1000)
            if not ok:
                conv = r["converged"] or 0.0
                mean = f", the converged ones {r['periods']:.3g} periods on average" if r["periods"] else ""
                notes.append(f"{name} {r['cell']}: {r['seconds']:.0f} s; sessions of up to {r['max_periods']} periods "
                             f"(converged after {r['convergence']} periods without a change); {conv:.0%} of them "
                             f"converged{mean}, the others ran to the cap")
        out[name.removesuffix(".toml")] = per
    out["targets"] = targets
    if quick:
        notes.insert(0, "quick workload: the targets refer to 1,000 sessions")
    out["notes"] = notes
    return out
