"""Running an experiment into a run folder, and resuming one."""

from __future__ import annotations

import platform
import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from sim.core.errors import InputError
from sim.core.files import symlinks_in, write_atomic
from sim.core.parallel import usable_cores
from sim.core.provenance import COMPUTING_PACKAGES, code_digest, package_versions
from sim.core.text import CAUTION
from sim.runner.cost import MAX_SECONDS, describe_seconds
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
from sim.runner.inputs import check_inputs, input_problems, record_inputs
from sim.runner.lock import LOCK_FILE, FolderLock
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
        """The summary as plain JSON data (paths as strings; failed cells as ``{"cell", "error"}`` tables).

        Returns
        -------
        dict
            ``folder``, ``name``, ``kind``, ``cells``, ``ok``, ``failed``, ``failed_cells``, ``ran``,
            ``seconds``, ``backend``, ``complete``, ``status``, ``files`` and ``report`` (None when no bundle).
        """
        return {"folder": str(self.folder), "name": self.name, "kind": self.kind, "cells": self.n_cells,
                "ok": self.ok, "failed": self.failed, "failed_cells": [{"cell": c, "error": e}
                                                                      for c, e in self.failed_cells],
                "ran": self.ran, "seconds": self.seconds, "backend": self.backend, "complete": self.complete,
                "status": self.status, "files": self.files, "report": str(self.report) if self.report else None}


def default_folder(root: Path, name: str) -> Path:
    """A new run folder's default path: ``root/<name>-<YYYYmmdd-HHMMSS>``.

    Parameters
    ----------
    root : Path
        The folder that holds run folders.
    name : str
        The experiment's name.

    Returns
    -------
    Path
        A path that does not exist yet: the local time stamp, followed by ``-2``, ``-3``, ... when a folder
        of that second already exists.
    """
    stamp = time.strftime("%Y%m%d-%H%M%S")
    p = root / f"{name}-{stamp}"
    k = 2
    while p.exists():
        p = root / f"{name}-{stamp}-{k}"
        k += 1
    return p


def _new_folder(out, name: str, root) -> Path:
    """The folder ``out`` checked as the place of a new run (new, or empty but for a stale lock file)."""
    if out is None:
        return default_folder(Path(root), name)
    p = Path(out)
    if p.is_symlink():
        raise InputError("out", f"{out} is a symbolic link; give the folder itself")
    if p.exists():
        if not p.is_dir():
            raise InputError("out", f"{out} exists and is not a folder")
        if (p / STORE_FILE).exists():
            raise InputError("out", f"{out} already holds a run; resume it (supergame run --resume {out}) or choose "
                                    "another folder")
        if any(q.name != LOCK_FILE for q in p.iterdir()):
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


def _resume_target(folder: Path, experiment, plugin_info: list) -> _Resumed:
    """Open the run to resume and check that it continues as it started: the same experiment file (the
    folder's copy unchanged, and FILE when given), the same plugins, a store that reads back."""

    resume = folder
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
                   progress: bool | None = None, command: list | None = None, root="runs",
                   allow_long: bool = False) -> RunSummary:
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
    root : path-like
        Where the default run folder is made.
    allow_long : bool
        Run even when the estimated time on one core exceeds :data:`sim.runner.cost.MAX_SECONDS`.

    Returns
    -------
    RunSummary
    """

    t_start = time.perf_counter()
    plugin_info = _plugin_records(plugins)
    if resume is not None:
        if out is not None and Path(out).resolve() != Path(resume).resolve():
            raise InputError("out", f"cannot be combined with resuming: the run continues in {resume}; give no "
                                    "other folder")
        folder = _existing_run(resume)
        lock = FolderLock(folder, key="resume").acquire()
    else:
        if retry_failed:
            raise InputError("retry_failed", "only applies when resuming a run")
        exp = _experiment_of(experiment)
        choose_backend(workers, cluster, exp.n_cells)  # every setting checked before the folder exists
        _check_time(exp, allow_long)
        _check_ready(exp)
        folder, lock = _create_folder(out, exp.name, root)
    try:
        plan = _plan(folder, experiment, resume, retry_failed, report, workers, cluster, plugin_info)
        if resume is None:
            _start_store(plan, exp, plugin_info).close()
        try:
            counts, status, ran = _compute(plan, workers, progress, command, plugin_info)
        except InputError:
            if resume is None and plan.fresh_store():
                lock.release()
                shutil.rmtree(folder, ignore_errors=True)
            raise
        finished = status != "incomplete"
        if finished and ran:
            _check_inputs_after(plan)
        files, report_dir = _finish(plan, status, write_report) if finished else ([], None)
        with RunFolder(folder, check_copy=False) as rf:
            failed_rows = [(r.number, r.error) for r in rf.rows() if r.status == "failed"]
    finally:
        lock.release()
    exp = plan.exp
    return RunSummary(folder, exp.name, exp.kind, exp.n_cells, counts["ok"], counts["failed"], failed_rows, ran,
                      time.perf_counter() - t_start, plan.backend.describe(), status == "complete", files, report_dir,
                      status)


def _check_inputs_after(plan) -> None:
    """The files the cells read are still the ones recorded when the run started (:mod:`sim.runner.inputs`): one
    replaced while the run went on may have been read in either version, so the folder is left unfinished."""
    with Store(plan.folder / STORE_FILE, readonly=True) as st:
        recorded = st.meta().get("inputs")
    problems = input_problems(recorded, "the cells computed meanwhile may have read either version; the folder is "
                                        "left unfinished: start a new run")
    if problems:
        raise InputError(*problems[0])


def _check_ready(exp) -> None:
    """Every cell's inputs are there (``Kind.ready``): a file an earlier run writes is read before the folder exists."""
    kind = exp.kind_spec()
    if kind.ready is not None:
        for i in range(exp.n_cells):
            kind.ready(exp.cell(i).doc)


def _check_time(exp, allow_long: bool) -> None:
    c = exp.cost
    if c and c["seconds"] > MAX_SECONDS and not allow_long:
        raise InputError("allow_long", f"the run is estimated at {c['work']:.3g} {c['unit']}, about "
                                       f"{describe_seconds(c['seconds'])} on one core, more than the "
                                       f"{describe_seconds(MAX_SECONDS)} a run takes unless it is allowed")


@dataclass
class _Plan:
    """What a call of :func:`run_experiment` will do, decided before anything is computed."""

    folder: Path
    exp: object
    backend: object
    todo: list
    rewrite_report: bool
    rewritten: tuple
    resumed: _Resumed | None
    retry_failed: bool

    @property
    def idle(self) -> bool:
        """A finished run resumed with nothing to compute: its store is not opened for writing (it keeps its
        bytes)."""
        return self.resumed is not None and not self.todo and self.resumed.finalized

    def fresh_store(self) -> bool:
        """Whether the store of a new run holds no cell yet."""
        with Store(self.folder / STORE_FILE, readonly=True) as st:
            return not st.done()


def _existing_run(resume) -> Path:
    folder = Path(resume)
    if not folder.is_dir() or not (folder / STORE_FILE).is_file() or not (folder / EXPERIMENT_COPY).is_file():
        raise InputError("resume", f"{resume} is not a run folder (no {STORE_FILE} and {EXPERIMENT_COPY})")
    links = symlinks_in(folder)
    if links:
        raise InputError("resume", f"{links[0]} is a symbolic link; a run folder holds none (a write could land "
                                   "elsewhere): remove it")
    return folder


def _plan(folder: Path, experiment, resume, retry_failed: bool, report: bool, workers, cluster,
          plugin_info: list) -> _Plan:
    if resume is None:
        exp = _experiment_of(experiment)
        return _Plan(folder, exp, choose_backend(workers, cluster, exp.n_cells), list(range(exp.n_cells)), report,
                     (), None, False)
    res = _resume_target(folder, experiment, plugin_info)
    exp = res.experiment
    backend = choose_backend(workers, cluster, exp.n_cells)
    todo = [i for i in range(exp.n_cells) if i not in res.done or (retry_failed and i in res.failed)]
    if todo:
        _check_packages(res.attempts)
    if todo or not (folder / MANIFEST).is_file():
        # cells still to compute read the files, and a folder is not finished with files changed under it
        check_inputs(res.meta.get("inputs"))
    rewrite_report = report or ((folder / REPORT_DIR).exists() and bool(todo))
    rewritten = (*EXPORTS, STORE_FILE) + ((REPORT_DIR + "/",) if rewrite_report else ())
    check_manifest(folder, rewritten, key="resume")
    return _Plan(folder, exp, backend, todo, rewrite_report, rewritten, res, retry_failed)


def _create_folder(out, name: str, root) -> tuple[Path, FolderLock]:
    """A new run folder, made and locked at once: two runs never share one (the loser of a race is refused)."""
    if out is None:
        while True:
            folder = default_folder(Path(root), name)
            folder.parent.mkdir(parents=True, exist_ok=True)
            try:
                folder.mkdir()
                break
            except FileExistsError:  # another run took the name meanwhile
                continue
    else:
        folder = _new_folder(out, name, root)
        folder.parent.mkdir(parents=True, exist_ok=True)
        folder.mkdir(exist_ok=True)
    lock = FolderLock(folder, key="out").acquire()
    if any(p.name != LOCK_FILE for p in folder.iterdir()):
        lock.release()
        raise InputError("out", f"{folder} was filled by another process meanwhile; choose another folder")
    return folder, lock


def _start_store(plan: _Plan, exp, plugin_info: list) -> Store:
    write_atomic(plan.folder / EXPERIMENT_COPY, exp.text.encode("utf-8"))
    kind = exp.kind_spec()
    return Store.create(plan.folder / STORE_FILE, {
        "format": RUN_FORMAT, "name": exp.name, "kind": exp.kind, "sha256": exp.sha256,
        "source": exp.source, "n_cells": exp.n_cells, "seed": exp.seed(), "seed_key": kind.seed_key,
        "parameters": [{"path": p.path, "values": list(p.values), "labels": list(p.labels)} for p in exp.parameters],
        "description": exp.description or leading_comment(exp.text), "plugins": plugin_info,
        "caution": CAUTION, **({"inputs": inputs} if (inputs := record_inputs(exp)) else {}),
    })


def _compute(plan: _Plan, workers, progress, command, plugin_info: list) -> tuple[dict, str, int]:
    """Run the cells to do and record each as it finishes; return the counts, the run's status and the number
    of cells computed. An interruption (Ctrl-C, SIGTERM) is recorded as such and raised again."""
    exp = plan.exp
    if plan.idle:
        failed = len(plan.resumed.failed)
        counts = {"ok": exp.n_cells - failed, "failed": failed}
        return counts, ("complete" if counts["ok"] else "failed"), 0
    store = Store(plan.folder / STORE_FILE)
    try:
        if plan.retry_failed:
            store.forget_failed()
        single = exp.n_cells == 1
        threads = (workers or usable_cores()) if single and plan.backend.kind == "serial" else 1
        attempt = store.start_attempt({"command": command or ["python API"], "backend": plan.backend.describe(),
                                       "workers": plan.backend.workers, "host": platform.node(),
                                       "cells_to_run": len(plan.todo), "packages": package_versions(),
                                       "code": code_digest(), "plugins": plugin_info})
        show = sys.stderr.isatty() if progress is None else bool(progress)
        bar = Progress(exp.n_cells, exp.n_cells - len(plan.todo), exp.name, show and not single)
        recorder = _Recorder(exp, store, attempt, bar)
        # the input files as the run recorded them: every cell checks them before and after it computes
        inputs = store.meta().get("inputs") or {}
        payloads = ({"kind": exp.kind, "index": i, "doc": exp.cell(i).doc, "threads": threads,
                     "progress": bool(show and single), "plugins": plugin_info, "folder": str(plan.folder),
                     **({"inputs": inputs} if inputs else {})}
                    for i in plan.todo)
        try:
            execute(payloads, recorder, plan.backend, plugin_info)
        except KeyboardInterrupt:
            store.finish_attempt(attempt, "interrupted", {"cells_run": recorder.ran})
            raise
        except BaseException:
            store.finish_attempt(attempt, "stopped", {"cells_run": recorder.ran})
            raise
        finally:
            bar.close()
        counts = store.count()
        finished = counts["ok"] + counts["failed"] == exp.n_cells
        status = ("complete" if counts["ok"] else "failed") if finished else "incomplete"
        store.finish_attempt(attempt, status, {"cells_run": recorder.ran})
        if finished:
            store.finalize()
        return counts, status, recorder.ran
    finally:
        store.close()


class _Recorder:
    """Stores each finished cell in its own committed transaction and advances the progress bar."""

    def __init__(self, exp, store: Store, attempt: int, bar):
        self.exp, self.store, self.attempt, self.bar = exp, store, attempt, bar
        self.ran = 0

    def __call__(self, res: dict) -> None:
        i = int(res["cell"])
        cell = self.exp.cell(i)
        self.store.record(CellRow(i, res["status"], cell.values, cell.labels, self.exp.seed(cell.doc), res["error"],
                                  res["metrics"], res["arrays"], res["started"], res["finished"], res["seconds"],
                                  res["worker"], res["detail"], self.attempt), res.get("document"))
        self.ran += 1
        self.bar.update(res["status"] != "ok")


def _finish(plan: _Plan, status: str, write_report) -> tuple[list, Path | None]:
    """Exports, the report (when asked for and some cell finished) and the manifest of a run whose every cell
    has a row."""
    folder = plan.folder
    links = symlinks_in(folder)
    if links:
        raise InputError("folder", f"{links[0]} is a symbolic link; a run folder holds none (a write could land "
                                   "elsewhere): remove it and resume the run")
    clear_run_leftovers(folder)
    write_exports(folder)
    report_dir = None
    if plan.rewrite_report and status == "complete" and write_report is not None:
        report_dir = write_report(folder, update_manifest=False)
    elif plan.rewrite_report and (folder / REPORT_DIR).exists():
        # no cell finished (or no writer given): a report of earlier results would not describe this run
        shutil.rmtree(folder / REPORT_DIR)
    write_manifest(folder, plan.rewritten + ((REPORT_DIR + "/",) if plan.rewrite_report else ()))
    return output_files(folder) + [MANIFEST], report_dir
