"""Benchmark section ``runfolders`` of ``supergame bench``: ``report`` and ``verify`` on run folders of 200, 2,000
and 20,000 cells.

The folders are made as a run makes them -- the experiment copy, the store with one row per cell and its result
document, the exports and the manifest -- for an experiment of a tiny built-in kind (``bench-square``: one number
per cell, computed in microseconds), so that the figures measure the report and the verification themselves, not
the cells' computation. Each command runs in a fresh process (as a user runs it): its wall time and its peak memory
(maximum resident set size) are measured. Targets: each under 10 s and 500 MB at 20,000 cells, and a cost that
grows linearly with the cells (the time per cell at 20,000 cells within twice that at 2,000).
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

from sim.core.files import write_atomic
from sim.runner.experiment import experiment_from_dict
from sim.runner.exports import write_exports
from sim.runner.folder import EXPERIMENT_COPY
from sim.runner.kinds import CellResult, Kind, get_kind, register_kind
from sim.runner.manifest import write_manifest
from sim.runner.store import STORE_FILE, CellRow, Store

__all__ = ["bench_section", "make_run_folder"]

_TEXT = """
[experiment]
name = "bench-folder"
kind = "bench-square"
[bench]
x = 0.0
[sweep]
"bench.x" = {{ start = 0.0, stop = 1.0, num = {n} }}
"""


def _prepare(doc: dict) -> dict:
    return {"x": float(doc["bench"]["x"])}


def _run(cfg: dict, ctx) -> CellResult:
    x = cfg["x"]
    return CellResult({"square": x * x, "square.low": x * x - 0.01, "square.high": x * x + 0.01, "x": x})


def bench_kind() -> Kind:
    """The tiny kind of the benchmark's run folders (registered on first use).

    Returns
    -------
    Kind
    """
    try:
        return get_kind("bench-square")
    except Exception:
        return register_kind(Kind(name="bench-square", tables=("bench",), prepare=_prepare, run=_run,
                                  metric_names=lambda cfg: ["square", "square.low", "square.high", "x"],
                                  seed_key=None, headline=("square",),
                                  summary="a number per cell (benchmark of run folders)"))


def make_run_folder(folder: Path, n_cells: int) -> Path:
    """A finished run folder of ``n_cells`` cells of the benchmark kind, as a run writes it.

    Parameters
    ----------
    folder : Path
        Created (must not exist).
    n_cells : int

    Returns
    -------
    Path
    """
    kind = bench_kind()
    text = _TEXT.format(n=n_cells)
    exp = experiment_from_dict(tomllib.loads(text), text=text, source="bench", check_cells=False)
    folder.mkdir(parents=True)
    write_atomic(folder / EXPERIMENT_COPY, text)
    store = Store.create(folder / STORE_FILE, {
        "format": "supergame-run/1", "name": exp.name, "kind": exp.kind, "sha256": exp.sha256, "source": "bench",
        "n_cells": exp.n_cells, "seed": None, "seed_key": None,
        "parameters": [{"path": p.path, "values": list(p.values), "labels": list(p.labels)} for p in exp.parameters],
        "description": "", "plugins": [], "caution": ""})
    attempt = store.start_attempt({"command": ["bench"], "backend": "this process", "cells_to_run": n_cells})
    now = time.time()
    store.con.execute("PRAGMA synchronous=OFF")  # a benchmark folder need not survive a power cut
    for i in range(exp.n_cells):
        cell = exp.cell(i)
        res = kind.run(kind.prepare(cell.doc), None)
        store.record(CellRow(i, "ok", cell.values, cell.labels, None, None, res.metrics, {}, now, now, 0.0, "bench",
                             None, attempt))
    store.finish_attempt(attempt, "complete", {"cells_run": n_cells})
    store.finalize()
    store.close()
    write_exports(folder)
    write_manifest(folder)
    return folder


_CHILD = """
import json, resource, sys, time
from sim.bench.runfolders import bench_kind
bench_kind()
what, folder = sys.argv[1], sys.argv[2]
t0 = time.perf_counter()
if what == "report":
    from sim.evidence.report import write_report
    write_report(folder)
    ok = True
else:
    from sim.runner.verify import verify_run
    ok = verify_run(folder).ok
seconds = time.perf_counter() - t0
print(json.dumps({"seconds": seconds, "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "ok": ok}))
"""


def _timed(what: str, folder: Path) -> dict:
    out = subprocess.run([sys.executable, "-c", _CHILD, what, str(folder)], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def bench_section(opts) -> dict:
    """Wall time and peak memory of ``report`` and ``verify`` against the number of cells.

    Parameters
    ----------
    opts : sim.bench.BenchOptions

    Returns
    -------
    dict
    """
    sizes = (50, 200, 800) if getattr(opts, "quick", False) else (200, 2000, 20000)
    res: dict = {}
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            folder = make_run_folder(Path(tmp) / f"run-{n}", n)
            rep, ver = _timed("report", folder), _timed("verify", folder)
            res[f"cells_{n}"] = {"report_seconds": rep["seconds"], "report_peak_mb": rep["peak_mb"],
                                 "verify_seconds": ver["seconds"], "verify_peak_mb": ver["peak_mb"],
                                 "verify_ok": ver["ok"]}
    mid, big = res[f"cells_{sizes[1]}"], res[f"cells_{sizes[2]}"]
    scale = sizes[2] / sizes[1]
    res["growth"] = {"report_time_ratio_per_cell": big["report_seconds"] / mid["report_seconds"] / scale,
                     "verify_time_ratio_per_cell": big["verify_seconds"] / mid["verify_seconds"] / scale}
    res["workload"] = (f"report and verify in fresh processes on run folders of {', '.join(map(str, sizes))} cells "
                       "of a one-number kind")
    res["targets"] = {
        f"report at {sizes[2]} cells < 10 s": big["report_seconds"] < 10,
        f"verify at {sizes[2]} cells < 10 s": big["verify_seconds"] < 10,
        f"report and verify at {sizes[2]} cells < 500 MB": max(big["report_peak_mb"], big["verify_peak_mb"]) < 500,
        "cost linear in cells (time per cell at the largest size within 2 x the middle size's)":
            max(res["growth"].values()) < 2.0,
        "verify checks out": all(v["verify_ok"] for k, v in res.items() if k.startswith("cells_")),
    }
    return res
