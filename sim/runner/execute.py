"""Running an experiment into a run folder, and resuming one."""

from __future__ import annotations

import platform
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from sim.core.errors import InputError
from sim.core.parallel import usable_cores
from sim.core.provenance import COMPUTING_PACKAGES, code_digest, package_versions
from sim.core.text import CAUTION
from sim.runner.experiment import Experiment, leading_comment, load_experiment
from sim.runner.exports import write_exports
from sim.runner.folder import (
    EXPERIMENT_COPY,
    EXPORTS,
    MANIFEST,
    REPORT_DIR,
    RUN_FORMAT,
    RunFolder,
    output_files,
    reading,
)
from sim.runner.manifest import check_manifest, clear_run_leftovers, write_manifest
from sim.runner.store import STORE_FILE, CellRow, Store
from sim.runner.sweep import Progress, choose_backend, execute

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
        Numbers (counted from 1) of the failed cells and their errors.
    ran : int
        Cells computed by this call (fewer than ``n_cells`` when resuming).
    seconds : float
        Wall time of this call.
    backend : str
    complete : bool
        Every cell has a row and at least one finished (exports and manifest written).
    files : list of str
        Output files (relative to ``folder``).
    report : Path or None
        The evidence bundle, when one was written.
    status : str
        ``"complete"`` (every cell has a row, some may have failed), ``"failed"`` (every cell has a row
        and none finished: the exports and the manifest are written, no report) or ``"incomplete"``.
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
    status: str = "complete"

    def to_dict(self) -> dict:
        return {"folder": str(self.folder), "name": self.name, "kind": self.kind, "cells": self.n_cells,
                "ok": self.ok, "failed": self.failed, "failed_cells": [{"cell": c, "error": e}
                                                                      for c, e in self.failed_cells],
                "ran": self.ran, "seconds": self.seconds, "backend": self.backend, "complete": self.complete,
                "status": self.status, "files": self.files, "report": str(self.report) if self.report else None}


def default_folder(root: Path, name: str) -> Path:
    """A new run folder's default path: ``root/<name>-<YYYYmmdd-HHMMSS>``."""
    stamp = time.strftime("%Y%m%d-%H%M%S")
    p = root / f"{name}-{stamp}"
    k = 2
    while p.exists():
        p = root / f"{name}-{stamp}-{k}"
        k += 1
    return p


def _new_folder(out, name: str, root) -> Path:

    if out is None:
        return default_folder(Path(root), name)
    p = Path(out)
    if p.exists():
        if not p.is_dir():
            raise InputError("out", f"{out} exists and is not a folder")
        if (p / STORE_FILE).exists():
            raise InputError("out", f"{out} already holds a run; resume it (supergame run --resume {out}) or choose "
                                    "another folder")
        if any(p.iterdir()):
            raise InputError("out", f"{out} exists and is not empty; choose a new or empty folder")
    return p


def _experiment_of(experiment, key="file"):

    if isinstance(experiment, Experiment):
        if experiment.text is None:
            raise InputError(key, "the experiment has no file text; load it with sim.load_experiment(path)")
        return experiment
    return load_experiment(experiment)


@dataclass
class _Resumed:
    folder: Path
    experiment: object
    meta: dict
    attempts: list
    done: set
    failed: set
    finalized: bool


def _resume_target(resume, experiment, plugin_info: list) -> _Resumed:
    """Open the run to resume and check that it continues as it started: the same experiment file (the
    folder's copy unchanged, and FILE when given), the same plugins, a store that reads back."""

    folder = Path(resume)
    if not folder.is_dir() or not (folder / STORE_FILE).is_file() or not (folder / EXPERIMENT_COPY).is_file():
        raise InputError("resume", f"{resume} is not a run folder (no {STORE_FILE} and {EXPERIMENT_COPY})")

    # the plugins first: the copy of the experiment may need them to be read at all
    with Store(folder / STORE_FILE, readonly=True) as st, reading("resume", folder):
        recorded = st.meta().get("plugins") or []
    _check_plugins(recorded if isinstance(recorded, list) else [], plugin_info)
    clear_run_leftovers(folder)
    with RunFolder(folder, key="resume", check_copy=True, check_cells=experiment is None) as rf:
        meta = rf.meta
        exp = rf.experiment
        if experiment is not None:
            exp = _experiment_of(experiment)
            if exp.sha256 != meta["sha256"]:
                raise InputError("resume", f"{resume} was started from a different experiment file (SHA-256 "
                                             f"{meta['sha256'][:12]}..., this file {exp.sha256[:12]}...); resume with "
                                             "the same file or start a new run")
        rows = rf.rows()
        attempts = rf.attempts()
        with reading("resume", folder):
            finalized = rf.store.journal_mode() != "wal"
    return _Resumed(folder, exp, meta, attempts, {r.cell for r in rows},
                    {r.cell for r in rows if r.status == "failed"}, finalized)


def _plugin_records(plugins) -> list[dict]:
    out = []
    for p in plugins:
        if "path" in p:
            q = dict(p)
            q["path"] = str(Path(p["path"]).resolve())
            q.setdefault("module", Path(p["path"]).stem)
            out.append(q)
    return out


def _check_plugins(recorded: list, now: list, key: str = "plugins") -> None:
    """A resumed run loads exactly the plugin files it was started with, unchanged."""
    rec = {p.get("module") or Path(p["path"]).stem: p for p in recorded}
    cur = {p["module"]: p for p in now}
    for name, p in rec.items():
        q = cur.get(name)
        if q is None:
            raise InputError(key, f"the run was started with the plugin {p['path']} (SHA-256 {p['sha256'][:12]}...); "
                                  "give it again with --plugin")
        if q["sha256"] != p["sha256"]:
            raise InputError(key, f"{q['path']} has changed since the run started (SHA-256 {p['sha256'][:12]}... "
                                  f"then, {q['sha256'][:12]}... now): the stored cells were computed with the earlier "
                                  "code; restore it or start a new run")
    for name, q in cur.items():
        if name not in rec:
            started = ", ".join(p["path"] for p in rec.values()) or "none"
            raise InputError(key, f"{q['path']} was not loaded when the run started (plugins then: {started}); "
                                  "resume with the plugins it was started with")


def _check_packages(attempts: list, key: str = "resume") -> None:
    """A resumed run computes its remaining cells with the versions that computed the stored ones."""
    first = next((a for a in attempts if isinstance(a.get("packages"), dict)), None)
    if first is None:  # a folder from before attempts recorded their versions
        return
    now = package_versions()
    diff = [f"{k} {first['packages'].get(k)} then, {now.get(k)} now" for k in COMPUTING_PACKAGES
            if first["packages"].get(k) != now.get(k)]
    if diff:
        raise InputError(key, f"the stored cells were computed with other versions ({'; '.join(diff)}): the "
                              "numbers could differ and the run would mix them; finish it in the environment that "
                              "started it, or start a new run")


def run_experiment(experiment, out=None, *, workers: int | None = None, cluster: str | None = None,
                   resume=None, retry_failed: bool = False, report: bool = False, write_report=None, plugins=(),
                   progress: bool | None = None, command: list | None = None, root="runs") -> RunSummary:
    """Run every cell of an experiment into a run folder (see the module notes).

    Parameters
    ----------
    experiment : path-like or Experiment
        The experiment file (None with ``resume``: the run folder's copy).
    out : path-like, optional
        The run folder (new or empty). Default ``<root>/<name>-<YYYYmmdd-HHMMSS>``. With ``resume``,
        only the folder being resumed (anything else is refused).
    workers : int, optional
        Local worker processes, or Dask workers with ``cluster="local"`` (default: one per usable core).
    cluster : str, optional
        ``"local"`` or the address of a Dask scheduler.
    resume : path-like, optional
        A run folder to finish: only cells without a row are computed, with the experiment file, the
        plugins and the computing packages' versions it was started with.
    retry_failed : bool
        With ``resume``, compute the failed cells again as well.
    report : bool
        Write the evidence bundle when every cell is done (with ``write_report``). A run folder that has a
        report gets it written again when a resumption computed cells, so that it never describes older
        results (removed instead when no ``write_report`` is given).
    write_report : callable, optional
        ``write_report(folder, update_manifest=False) -> Path``: writes the bundle into ``folder/report``
        (:func:`sim.evidence.report.write_report`; the runner does not know how a report is made). Called
        after the exports and before the manifest, so that the manifest covers the report.
    plugins : sequence of dict
        Plugins already loaded (:func:`sim.runner.kinds.load_plugins`), recorded in the store and loaded by the
        workers.
    progress : bool, optional
        Progress bar (default: when stderr is a terminal).
    command : list of str, optional
        The command line, for the manifest.

    Returns
    -------
    RunSummary
    """

    t_start = time.perf_counter()
    created = False
    plugin_info = _plugin_records(plugins)
    res_info = None
    if resume is not None:
        if out is not None and Path(out).resolve() != Path(resume).resolve():
            raise InputError("out", f"cannot be combined with resuming: the run continues in {resume}; give no "
                                    "other folder")
        res_info = _resume_target(resume, experiment, plugin_info)
        folder, exp = res_info.folder, res_info.experiment
    else:
        if retry_failed:
            raise InputError("retry_failed", "only applies when resuming a run")
        exp = _experiment_of(experiment)
        folder = _new_folder(out, exp.name, root)
    backend = choose_backend(workers, cluster, exp.n_cells)
    kind = exp.kind_spec()
    if res_info is not None:
        todo = [i for i in range(exp.n_cells)
                if i not in res_info.done or (retry_failed and i in res_info.failed)]
        if todo:
            _check_packages(res_info.attempts)
        had_report = (folder / REPORT_DIR).exists()
        rewrite_report = report or (had_report and bool(todo))
        rewritten = (*EXPORTS, STORE_FILE) + ((REPORT_DIR + "/",) if rewrite_report else ())
        check_manifest(folder, rewritten, key="resume")
    else:
        todo = list(range(exp.n_cells))
        rewrite_report = report
        rewritten = ()
    ran = 0
    idle = res_info is not None and not todo and res_info.finalized
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
    elif idle:
        # nothing to compute in a finished store: it is not opened for writing, so that it keeps its bytes
        store = None
    else:
        store = Store(folder / STORE_FILE)
    try:
        if store is not None:
            if retry_failed:
                store.forget_failed()
            single = exp.n_cells == 1
            threads = (workers or usable_cores()) if single and backend.kind == "serial" else 1
            attempt = store.start_attempt({"command": command or ["python API"], "backend": backend.describe(),
                                           "workers": backend.workers, "host": platform.node(),
                                           "cells_to_run": len(todo), "packages": package_versions(),
                                           "code": code_digest(), "plugins": plugin_info})
            show = sys.stderr.isatty() if progress is None else bool(progress)
            seeds = {}

            def payloads():
                for i in todo:
                    cell = exp.cell(i)
                    seeds[i] = (cell.values, cell.labels, exp.seed(cell.doc))
                    yield {"kind": exp.kind, "index": i, "doc": cell.doc, "threads": threads,
                           "progress": bool(show and single), "plugins": plugin_info}

            bar = Progress(exp.n_cells, exp.n_cells - len(todo), exp.name, show and not single)

            def on_result(res: dict) -> None:
                nonlocal ran
                i = int(res["cell"])
                values, labels, seed = seeds.get(i) or _cell_info(exp, i)
                store.record(CellRow(i, res["status"], values, labels, seed, res["error"], res["metrics"],
                                     res["arrays"], res["started"], res["finished"], res["seconds"], res["worker"],
                                     res["detail"], attempt), res.get("document"))
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
                else:
                    store.finish_attempt(attempt, "stopped", {"cells_run": ran})
                raise
            except BaseException:
                store.finish_attempt(attempt, "stopped", {"cells_run": ran})
                raise
            finally:
                bar.close()
            counts = store.count()
            finished = counts["ok"] + counts["failed"] == exp.n_cells
            status = ("complete" if counts["ok"] else "failed") if finished else "incomplete"
            store.finish_attempt(attempt, status, {"cells_run": ran})
            if finished:
                store.finalize()
        else:
            counts = {"ok": exp.n_cells - len(res_info.failed), "failed": len(res_info.failed)}
            finished = True
            status = "complete" if counts["ok"] else "failed"
    finally:
        if store is not None and store.con is not None:
            store.close()
    files = []
    report_dir = None
    if finished:
        clear_run_leftovers(folder)
        files = write_exports(folder)
        if rewrite_report and status == "complete" and write_report is not None:
            report_dir = write_report(folder, update_manifest=False)
        elif rewrite_report and (folder / REPORT_DIR).exists():
            # no cell finished (or no writer given): a report of earlier results would not describe this run
            shutil.rmtree(folder / REPORT_DIR)
        write_manifest(folder, rewritten + ((REPORT_DIR + "/",) if rewrite_report else ()))
        files = output_files(folder) + [MANIFEST]
    with RunFolder(folder, check_copy=False) as rf:
        failed_rows = [(r.number, r.error) for r in rf.rows() if r.status == "failed"]
    return RunSummary(folder, exp.name, exp.kind, exp.n_cells, counts["ok"], counts["failed"], failed_rows, ran,
                      time.perf_counter() - t_start, backend.describe(), status == "complete", files, report_dir,
                      status)


def _caution() -> str:

    return CAUTION


def _cell_info(exp, i: int):
    cell = exp.cell(i)
    return cell.values, cell.labels, exp.seed(cell.doc)
