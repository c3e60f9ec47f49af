"""Run folders: running an experiment into one, resuming it, reading it back, verifying it.

A run folder (default ``runs/<name>-<YYYYmmdd-HHMMSS>``) holds

``experiment.toml``  the experiment file, byte for byte as given
``results.sqlite``   the store (:mod:`sim.store`): one committed row per finished cell
``results.csv``      the results table (always), ``results.parquet`` (when pyarrow is installed) and
                     ``arrays.json`` (small per-cell arrays for figures), written once every cell has a row
``report/``          the evidence bundle (``supergame report`` or ``run --report``, :mod:`sim.report`)
``manifest.json``    the experiment's SHA-256, command lines, package versions, platform, seeds, start and
                     end times and the SHA-256 of every other file in the folder

:func:`run_experiment` validates everything before it creates the folder, so a bad file leaves nothing
behind. :func:`verify_run` checks the hashes and re-runs a sample of cells.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import platform
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from .errors import InputError
from .tomlfile import file_sha256

__all__ = ["RunFolder", "RunSummary", "VerifyResult", "open_run", "run_experiment", "verify_run", "write_manifest"]

RUN_FORMAT = "supergame-run/1"
EXPERIMENT_COPY = "experiment.toml"
MANIFEST = "manifest.json"
CSV_FILE = "results.csv"
PARQUET_FILE = "results.parquet"
ARRAYS_FILE = "arrays.json"
REPORT_DIR = "report"
_TRANSIENT = ("results.sqlite-wal", "results.sqlite-shm", "results.sqlite-journal")
#: seeds of at most this many cells are listed one by one in the manifest
_MANIFEST_CELL_SEEDS = 10_000


def _iso(t: float | None) -> str | None:
    if t is None:
        return None
    return _dt.datetime.fromtimestamp(t, tz=_dt.UTC).isoformat(timespec="seconds")


#: SHA-256 of a file (hex), the one digest of the package's manifests
sha256_file = file_sha256


# --------------------------------------------------------------------------------------------------
# Reading a run folder
# --------------------------------------------------------------------------------------------------


class RunFolder:
    """A run folder opened for reading (see the module notes).

    Attributes
    ----------
    path : Path
    experiment : Experiment
        Parsed from the folder's copy of the experiment file.
    """

    def __init__(self, path, key: str = "RUN_DIR"):
        from .config import experiment_from_dict
        from .store import STORE_FILE, Store

        self.path = Path(path)
        self.key = key
        db = self.path / STORE_FILE
        if not self.path.is_dir() or not db.is_file():
            raise InputError(key, f"{path} is not a run folder (no {STORE_FILE}); give a folder made by "
                                  f"supergame run")
        self.store = Store(db, readonly=True)
        self.meta = self.store.meta()
        copy_path = self.path / EXPERIMENT_COPY
        if not copy_path.is_file():
            raise InputError(key, f"{path} has no {EXPERIMENT_COPY}")
        text = copy_path.read_bytes().decode("utf-8")
        import tomllib

        try:
            doc = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise InputError(f"{path}/{EXPERIMENT_COPY}", f"TOML syntax error: {exc}") from None
        self.experiment = experiment_from_dict(doc, text=text, source=self.meta.get("source"), check_cells=False)

    def close(self) -> None:
        self.store.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def rows(self):
        return self.store.rows()

    def table(self) -> tuple[list[str], list[list]]:
        """Columns and rows of the results table (as in ``results.csv``)."""
        from .store import export_table

        return export_table(self.rows(), list(self.experiment.parameters), self.experiment.metric_names)

    def frame(self):
        """The results table as a pandas DataFrame (pandas is optional)."""
        from .store import frame

        return frame(*self.table())

    def counts(self) -> dict:
        c = self.store.count()
        c["total"] = self.experiment.n_cells
        c["missing"] = c["total"] - c["ok"] - c["failed"]
        return c

    @property
    def complete(self) -> bool:
        return self.counts()["missing"] == 0

    def manifest(self) -> dict | None:
        p = self.path / MANIFEST
        if not p.is_file():
            return None
        return json.loads(p.read_text(encoding="utf-8"))


def open_run(path) -> RunFolder:
    """Open a run folder for reading (results table, DataFrame, counts, manifest)."""
    return RunFolder(path)


# --------------------------------------------------------------------------------------------------
# Manifest
# --------------------------------------------------------------------------------------------------


def package_versions() -> dict:
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for name in ("supergame", "numpy", "numba", "llvmlite", "scipy", "matplotlib", "tqdm", "pandas", "pyarrow",
                 "dask", "distributed"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


def platform_info() -> dict:
    return {"system": platform.system(), "release": platform.release(), "machine": platform.machine(),
            "platform": platform.platform(), "python_implementation": platform.python_implementation(),
            "cpus": os.cpu_count()}


def output_files(folder: Path) -> list[str]:
    """Files of the run folder covered by the manifest (relative POSIX paths, sorted)."""
    out = []
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            rel = p.relative_to(folder).as_posix()
            if rel == MANIFEST or rel in _TRANSIENT:
                continue
            out.append(rel)
    return out


def write_manifest(folder) -> dict:
    """Write ``manifest.json`` from the store and the files now in the folder; return it."""
    from .store import STORE_FILE, Store

    folder = Path(folder)
    with Store(folder / STORE_FILE, readonly=True) as st:
        meta = st.meta()
        attempts = st.attempts()
        rows = st.rows()
    n_cells = int(meta["n_cells"])
    ok = sum(r.status == "ok" for r in rows)
    failed = [{"cell": r.cell, "error": r.error} for r in rows if r.status == "failed"]
    seeds = {"experiment_seed": meta.get("seed"),
             "rule": "cell c draws from numpy.random.SeedSequence(seed, spawn_key=(c,)), seed being the cell's "
                     + (meta.get("seed_key") or "seed") + "; one stream per replication or session within the cell"}
    if meta.get("seed_key") is None:
        seeds["rule"] = "deterministic kind: no random numbers"
    elif n_cells <= _MANIFEST_CELL_SEEDS:
        seeds["cells"] = [[r.cell, r.seed] for r in rows]
    man = {
        "format": RUN_FORMAT,
        "experiment": {"file": EXPERIMENT_COPY, "sha256": meta["sha256"], "source": meta.get("source"),
                       "name": meta["name"], "kind": meta["kind"]},
        "caution": meta.get("caution"),
        "started": _iso(min((a["started"] for a in attempts), default=None)),
        "finished": _iso(max((a["finished"] for a in attempts if a["finished"] is not None), default=None)),
        "attempts": [{"started": _iso(a["started"]), "finished": _iso(a["finished"]), "outcome": a["outcome"],
                      "command": a.get("command"), "backend": a.get("backend"), "cells_run": a.get("cells_run"),
                      "host": a.get("host")} for a in attempts],
        "command": attempts[0].get("command") if attempts else None,
        "packages": package_versions(),
        "platform": platform_info(),
        "plugins": meta.get("plugins", []),
        "seeds": seeds,
        "cells": {"total": n_cells, "ok": ok, "failed": len(failed), "missing": n_cells - ok - len(failed),
                  "failed_cells": failed},
        "files": {rel: sha256_file(folder / rel) for rel in output_files(folder)},
    }
    (folder / MANIFEST).write_text(json.dumps(man, indent=2, sort_keys=False) + "\n", encoding="utf-8")
    return man


# --------------------------------------------------------------------------------------------------
# Running
# --------------------------------------------------------------------------------------------------


@dataclass
class RunSummary:
    """What :func:`run_experiment` did.

    Attributes
    ----------
    folder : Path
    name, kind : str
    n_cells, ok, failed : int
    failed_cells : list of (int, str)
        Cell numbers and their errors.
    ran : int
        Cells computed by this call (fewer than ``n_cells`` when resuming).
    seconds : float
        Wall time of this call.
    backend : str
    complete : bool
        Every cell has a row (exports and manifest written).
    files : list of str
        Output files (relative to ``folder``).
    """

    folder: Path
    name: str
    kind: str
    n_cells: int
    ok: int
    failed: int
    failed_cells: list
    ran: int
    seconds: float
    backend: str
    complete: bool
    files: list = field(default_factory=list)
    report: Path | None = None

    def to_dict(self) -> dict:
        return {"folder": str(self.folder), "name": self.name, "kind": self.kind, "cells": self.n_cells,
                "ok": self.ok, "failed": self.failed, "failed_cells": [{"cell": c, "error": e}
                                                                      for c, e in self.failed_cells],
                "ran": self.ran, "seconds": self.seconds, "backend": self.backend, "complete": self.complete,
                "files": self.files, "report": str(self.report) if self.report else None}


def _default_folder(root: Path, name: str) -> Path:
    stamp = time.strftime("%Y%m%d-%H%M%S")
    p = root / f"{name}-{stamp}"
    k = 2
    while p.exists():
        p = root / f"{name}-{stamp}-{k}"
        k += 1
    return p


def _new_folder(out, name: str, root) -> Path:
    from .store import STORE_FILE

    if out is None:
        return _default_folder(Path(root), name)
    p = Path(out)
    if p.exists():
        if not p.is_dir():
            raise InputError("--out", f"{out} exists and is not a folder")
        if (p / STORE_FILE).exists():
            raise InputError("--out", f"{out} already holds a run; continue it with --resume {out} or choose another "
                                      f"folder")
        if any(p.iterdir()):
            raise InputError("--out", f"{out} exists and is not empty; choose a new or empty folder")
    return p


def _experiment_of(experiment, key="FILE"):
    from .config import Experiment, load_experiment

    if isinstance(experiment, Experiment):
        if experiment.text is None:
            raise InputError(key, "the experiment has no file text; load it with sim.load_experiment(path)")
        return experiment
    return load_experiment(experiment)


def _resume_target(resume, experiment):
    """Open the run to resume and check that it belongs to ``experiment`` (when one is given)."""
    from .config import experiment_from_dict
    from .store import STORE_FILE, Store

    folder = Path(resume)
    if not (folder / STORE_FILE).is_file() or not (folder / EXPERIMENT_COPY).is_file():
        raise InputError("--resume", f"{resume} is not a run folder (no {STORE_FILE} and {EXPERIMENT_COPY})")
    text = (folder / EXPERIMENT_COPY).read_bytes().decode("utf-8")
    with Store(folder / STORE_FILE, readonly=True) as st:
        meta = st.meta()
    if not {"sha256", "n_cells", "kind"} <= set(meta):
        raise InputError("--resume", f"{resume} was stopped while it was being created (its store has no settings); "
                                     "remove it and start the run again")
    if experiment is not None:
        exp = _experiment_of(experiment)
        if exp.sha256 != meta["sha256"]:
            raise InputError("--resume", f"{resume} was started from a different experiment file (SHA-256 "
                                         f"{meta['sha256'][:12]}..., this file {exp.sha256[:12]}...); resume with the "
                                         f"same file or start a new run")
        return folder, exp, meta
    import tomllib

    exp = experiment_from_dict(tomllib.loads(text), text=text, source=meta.get("source"))
    return folder, exp, meta


def run_experiment(experiment, out=None, *, workers: int | None = None, cluster: str | None = None,
                   resume=None, retry_failed: bool = False, report: bool = False, plugins=(),
                   progress: bool | None = None, command: list | None = None, root="runs") -> RunSummary:
    """Run every cell of an experiment into a run folder (see the module notes).

    Parameters
    ----------
    experiment : path-like or Experiment
        The experiment file (None with ``resume``: the run folder's copy).
    out : path-like, optional
        The run folder (new or empty). Default ``<root>/<name>-<YYYYmmdd-HHMMSS>``.
    workers : int, optional
        Local worker processes, or Dask workers with ``cluster="local"`` (default: one per usable core).
    cluster : str, optional
        ``"local"`` or the address of a Dask scheduler.
    resume : path-like, optional
        A run folder to finish: only cells without a row are computed.
    retry_failed : bool
        With ``resume``, compute the failed cells again as well.
    report : bool
        Write the evidence bundle when every cell is done.
    plugins : sequence of dict
        Plugins already loaded (:func:`sim.kinds.load_plugins`), recorded in the manifest and loaded by the
        workers.
    progress : bool, optional
        Progress bar (default: when stderr is a terminal).
    command : list of str, optional
        The command line, for the manifest.

    Returns
    -------
    RunSummary
    """
    from .config import leading_comment
    from .store import STORE_FILE, CellRow, Store
    from .sweep import Progress, choose_backend, execute, usable_cores

    t_start = time.perf_counter()
    created = False
    if resume is not None:
        folder, exp, _meta = _resume_target(resume, experiment)
    else:
        if retry_failed:
            raise InputError("--retry-failed", "only applies with --resume")
        exp = _experiment_of(experiment)
        folder = _new_folder(out, exp.name, root)
    backend = choose_backend(workers, cluster, exp.n_cells)
    kind = exp.kind_spec()
    plugin_info = [dict(p) for p in plugins if "path" in p]
    for p in plugin_info:
        p["path"] = str(Path(p["path"]).resolve())
    if resume is None:
        folder.mkdir(parents=True, exist_ok=True)
        created = True
        (folder / EXPERIMENT_COPY).write_bytes(exp.text.encode("utf-8"))
        store = Store.create(folder / STORE_FILE, {
            "format": RUN_FORMAT, "name": exp.name, "kind": exp.kind, "sha256": exp.sha256,
            "source": exp.source, "n_cells": exp.n_cells, "seed": exp.seed(), "seed_key": kind.seed_key,
            "parameters": [{"path": p.path, "values": list(p.values), "labels": list(p.labels)}
                           for p in exp.parameters],
            "description": exp.description or leading_comment(exp.text), "plugins": plugin_info,
            "caution": _caution(),
        })
    else:
        store = Store(folder / STORE_FILE)
        if plugin_info:
            store.set_meta("plugins", plugin_info)
    try:
        if retry_failed:
            store.forget_failed()
        done = store.done()
        todo = [i for i in range(exp.n_cells) if i not in done]
        single = exp.n_cells == 1
        threads = (workers or usable_cores()) if single and backend.kind == "serial" else 1
        attempt = store.start_attempt({"command": command or ["python API"], "backend": backend.describe(),
                                       "workers": backend.workers, "host": platform.node(),
                                       "cells_to_run": len(todo)})
        show = sys.stderr.isatty() if progress is None else bool(progress)
        seeds = {}

        def payloads():
            for i in todo:
                cell = exp.cell(i)
                seeds[i] = (cell.values, cell.labels, exp.seed(cell.doc))
                yield {"kind": exp.kind, "index": i, "doc": cell.doc, "threads": threads,
                       "progress": bool(show and single), "plugins": plugin_info}

        bar = Progress(exp.n_cells, len(done), exp.name, show and not single)
        ran = 0

        def on_result(res: dict) -> None:
            nonlocal ran
            i = int(res["cell"])
            values, labels, seed = seeds.get(i) or _cell_info(exp, i)
            store.record(CellRow(i, res["status"], values, labels, seed, res["error"], res["metrics"],
                                 res["arrays"], res["started"], res["finished"], res["seconds"], res["worker"],
                                 res["detail"], attempt))
            ran += 1
            bar.update(res["status"] != "ok")

        try:
            execute(payloads(), on_result, backend, plugin_info)
        except KeyboardInterrupt:
            store.finish_attempt(attempt, "interrupted", {"cells_run": ran})
            raise
        except InputError:
            if created and not store.done():
                store.close()
                shutil.rmtree(folder, ignore_errors=True)
                created = False
            raise
        finally:
            bar.close()
        counts = store.count()
        complete = counts["ok"] + counts["failed"] == exp.n_cells
        store.finish_attempt(attempt, "complete" if complete else "incomplete", {"cells_run": ran})
        if complete:
            store.finalize()
    finally:
        if store.con is not None:
            store.close()
    failed_rows = []
    files = []
    report_dir = None
    if complete:
        files = write_exports(folder)
        if report:
            from .report import write_report

            report_dir = write_report(folder)
        write_manifest(folder)
        files = output_files(folder) + [MANIFEST]
    with Store(folder / STORE_FILE, readonly=True) as st:
        failed_rows = [(r.cell, r.error) for r in st.failed()]
    return RunSummary(folder, exp.name, exp.kind, exp.n_cells, counts["ok"], counts["failed"], failed_rows, ran,
                      time.perf_counter() - t_start, backend.describe(), complete, files, report_dir)


def _caution() -> str:
    from ._text import CAUTION

    return CAUTION


def _cell_info(exp, i: int):
    cell = exp.cell(i)
    return cell.values, cell.labels, exp.seed(cell.doc)


def write_exports(folder) -> list[str]:
    """Write ``results.csv``, ``results.parquet`` (with pyarrow) and ``arrays.json`` from the store."""
    from .config import canonical_json
    from .store import write_csv, write_parquet

    folder = Path(folder)
    with RunFolder(folder) as rf:
        header, body = rf.table()
        rows = rf.rows()
    write_csv(folder / CSV_FILE, header, body)
    files = [CSV_FILE]
    if write_parquet(folder / PARQUET_FILE, header, body):
        files.append(PARQUET_FILE)
    arrays = [{"cell": r.cell, "arrays": r.arrays} for r in rows if r.arrays]
    (folder / ARRAYS_FILE).write_text(canonical_json({"cells": arrays}) + "\n", encoding="utf-8")
    files.append(ARRAYS_FILE)
    return files


# --------------------------------------------------------------------------------------------------
# Verification
# --------------------------------------------------------------------------------------------------


@dataclass
class VerifyResult:
    """Outcome of :func:`verify_run`: ``ok`` and the individual checks (``(passed, text)`` pairs)."""

    ok: bool
    checks: list
    cells: list

    def to_dict(self) -> dict:
        return {"ok": self.ok, "checks": [{"passed": p, "check": t} for p, t in self.checks], "cells": self.cells}


def _same(a: float, b: float, rtol: float, atol: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= atol + rtol * abs(b)


def sample_cells(ok_cells: list[int], n: int) -> list[int]:
    """``n`` cells spread evenly over the finished ones, first and last included."""
    if n <= 0 or not ok_cells:
        return []
    if n >= len(ok_cells):
        return list(ok_cells)
    if n == 1:
        return [ok_cells[0]]
    idx = sorted({round(k * (len(ok_cells) - 1) / (n - 1)) for k in range(n)})
    return [ok_cells[i] for i in idx]


def verify_run(folder, sample: int = 3, cells=None, rtol: float = 1e-9, atol: float = 1e-12,
               threads: int = 1) -> VerifyResult:
    """Check a run folder: every file's SHA-256 against the manifest, then re-run a sample of cells and
    compare every metric with the store (relative tolerance ``rtol``; nan must stay nan).

    Parameters
    ----------
    folder : path-like
    sample : int
        Cells to re-run, spread evenly over the finished cells (0: hashes only).
    cells : sequence of int, optional
        Re-run these cells instead of a sample.
    """
    from .kinds import CellContext, clean_metrics

    folder = Path(folder)
    checks: list = []
    with RunFolder(folder) as rf:
        man = rf.manifest()
        if man is None:
            return VerifyResult(False, [(False, f"{MANIFEST} is missing: the run did not finish or the file was "
                                                "removed")], [])
        listed = man.get("files", {})
        for rel, digest in sorted(listed.items()):
            p = folder / rel
            if not p.is_file():
                checks.append((False, f"{rel}: listed in the manifest but missing"))
            elif sha256_file(p) != digest:
                checks.append((False, f"{rel}: SHA-256 differs from the manifest (the file was altered)"))
        n_bad = sum(not ok for ok, _ in checks)
        checks.append((n_bad == 0, f"{len(listed) - n_bad} of {len(listed)} files match their SHA-256"))
        extra = [rel for rel in output_files(folder) if rel not in listed]
        for rel in extra:
            checks.append((False, f"{rel}: in the folder but not in the manifest"))
        text_sha = hashlib.sha256((folder / EXPERIMENT_COPY).read_bytes()).hexdigest()
        checks.append((text_sha == man["experiment"]["sha256"],
                       f"{EXPERIMENT_COPY} has the SHA-256 recorded when the run started ({text_sha[:12]}...)"))
        exp = rf.experiment
        kind = exp.kind_spec()
        rows = {r.cell: r for r in rf.rows()}
        ok_cells = sorted(c for c, r in rows.items() if r.status == "ok")
        if cells is not None:
            chosen = []
            for c in cells:
                if c not in rows:
                    raise InputError("--cells", f"cell {c} has no result in {folder} (cells 0 to {exp.n_cells - 1})")
                if rows[c].status != "ok":
                    raise InputError("--cells", f"cell {c} failed in the run; there is no number to confirm")
                chosen.append(int(c))
        else:
            chosen = sample_cells(ok_cells, sample)
        report = []
        for c in chosen:
            cell = exp.cell(c)
            cfg = kind.prepare(cell.doc)
            res = kind.run(cfg, CellContext(index=c, threads=threads))
            fresh = clean_metrics(res.metrics)
            stored = rows[c].metrics
            names = sorted(set(fresh) | set(stored))
            bad = [k for k in names if not _same(fresh.get(k, math.nan), stored.get(k, math.nan), rtol, atol)]
            worst = 0.0
            for k in names:
                a, b = fresh.get(k, math.nan), stored.get(k, math.nan)
                if math.isfinite(a) and math.isfinite(b) and b != 0:
                    worst = max(worst, abs(a - b) / abs(b))
            exact = all((fresh.get(k) == stored.get(k)) or (math.isnan(fresh.get(k, math.nan)) and
                                                             math.isnan(stored.get(k, math.nan))) for k in names)
            report.append({"cell": c, "metrics": len(names), "mismatched": bad, "max_relative_difference": worst,
                           "identical": exact})
            if bad:
                k = bad[0]
                checks.append((False, f"{cell.describe()}: {len(bad)} of {len(names)} metrics do not reproduce, e.g. "
                                      f"{k} = {fresh.get(k)!r} now, {stored.get(k)!r} stored"))
            else:
                how = "identically" if exact else f"within a relative {worst:.1e}"
                checks.append((True, f"{cell.describe()}: all {len(names)} metrics reproduce {how}"))
    return VerifyResult(all(ok for ok, _ in checks), checks, report)
