"""Run folders: running an experiment into one, resuming it, reading it back, verifying it.

A run folder (default ``runs/<name>-<YYYYmmdd-HHMMSS>``) holds

``experiment.toml``  the experiment file, byte for byte as given
``results.sqlite``   the store (:mod:`sim.runner.store`): one committed row per finished cell
``results.csv``      the results table (always), ``results.parquet`` (when pyarrow is installed) and
                     ``arrays.json`` (small per-cell arrays for figures), written from the store once every
                     cell has a row
``report/``          the evidence bundle (``supergame report`` or ``run --report``, :mod:`sim.evidence.report`)
``manifest.json``    the experiment's SHA-256, command lines, package versions, platform, seeds, start and
                     end times and the SHA-256 of every other file in the folder

:func:`run_experiment` validates everything before it creates the folder, so a bad file leaves nothing
behind. A resumed run continues only with the experiment file, the plugins and the versions of the
packages that compute numbers it was started with; each attempt records its package versions and a
digest of the package's code. Once written, the manifest is the folder's record: it is rewritten only
for the files a command writes again from the store (exports, the report), and a command refuses to
go on when any other file listed there was altered, removed or added (:func:`check_manifest`).
:func:`verify_run` checks the hashes, rebuilds the exports from the store and compares them byte for
byte, and re-runs a sample of cells. Cells are counted from 1 in everything users see; the store and
the random streams use the index counted from 0 (see :mod:`sim.runner.experiment`).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import json
import math
import platform
import shutil
import sqlite3
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from sim.core.errors import InputError
from sim.core.files import clear_leftovers, partial_path, write_atomic
from sim.core.parallel import usable_cores
from sim.core.provenance import COMPUTING_PACKAGES, code_digest, package_versions, platform_info
from sim.core.text import CAUTION
from sim.core.tomlfile import file_sha256, read_toml
from sim.core.values import canonical_json
from sim.runner.experiment import Experiment, experiment_from_dict, leading_comment, load_experiment
from sim.runner.kinds import CellContext, clean_metrics
from sim.runner.store import STORE_FILE, CellRow, DamagedStore, Store, csv_text, export_table, frame, parquet_bytes
from sim.runner.sweep import Progress, choose_backend, execute

__all__ = ["RunFolder", "RunSummary", "VerifyResult", "check_manifest", "open_run", "run_experiment", "verify_run",
           "write_manifest"]

RUN_FORMAT = "supergame-run/1"
EXPERIMENT_COPY = "experiment.toml"
MANIFEST = "manifest.json"
CSV_FILE = "results.csv"
PARQUET_FILE = "results.parquet"
ARRAYS_FILE = "arrays.json"
REPORT_DIR = "report"
EXPORTS = (CSV_FILE, PARQUET_FILE, ARRAYS_FILE)
_TRANSIENT = ("results.sqlite-wal", "results.sqlite-shm", "results.sqlite-journal")
#: seeds of at most this many cells are listed one by one in the manifest
_MANIFEST_CELL_SEEDS = 10_000
#: packages whose version can change the numbers a cell computes: a run is resumed only with the same ones
#: the seed rule, as stated in manifests and reports
SEED_RULE = ("cell k (counted from 1) draws from numpy.random.SeedSequence(seed, spawn_key=(k - 1,)), seed being "
             "the cell's {key}; one stream per replication or session within the cell")

#: SHA-256 of a file (hex), the one digest of the package's manifests
sha256_file = file_sha256


def iso_time(t: float | None) -> str | None:
    if t is None:
        return None
    return _dt.datetime.fromtimestamp(t, tz=_dt.UTC).isoformat(timespec="seconds")


@contextmanager
def _reading(key: str, folder: Path):
    """Damage of the store becomes one line naming ``key`` (never a traceback)."""

    try:
        yield
    except (sqlite3.DatabaseError, DamagedStore) as exc:
        raise InputError(key, f"{Path(folder) / STORE_FILE} cannot be read ({exc}): the store is damaged; "
                              f"supergame verify {folder} lists what is wrong") from None


def _read_copy(folder: Path, key: str) -> tuple[str, dict]:
    """Text and table of the run folder's copy of the experiment file."""

    p = folder / EXPERIMENT_COPY
    if not p.is_file():
        raise InputError(key, f"{folder} has no {EXPERIMENT_COPY}")
    try:
        doc = read_toml(p)
    except InputError as exc:
        raise InputError(key, f"{exc.key}: {exc.message}") from None
    return p.read_bytes().decode("utf-8"), doc


# --------------------------------------------------------------------------------------------------
# Reading a run folder
# --------------------------------------------------------------------------------------------------


class RunFolder:
    """A run folder opened for reading (see the module notes).

    Parameters
    ----------
    path : path-like
    key : str
        Names the folder in error messages (``RUN_DIR``, ``--resume``).
    check_copy : bool
        Refuse a copy of the experiment file whose SHA-256 is not the one recorded when the run started.
    check_cells : bool
        Validate every cell of the copy (only the first when false).

    Attributes
    ----------
    path : Path
    meta : dict
        The run's settings as stored.
    experiment : Experiment
        Parsed from the folder's copy of the experiment file.
    copy_sha256 : str
        SHA-256 of that copy.

    Raises
    ------
    InputError
        Naming ``key``: not a run folder, a damaged store, a copy that was changed or cannot be read.
    """

    def __init__(self, path, key: str = "RUN_DIR", check_copy: bool = True, check_cells: bool = False):

        self.path = Path(path)
        self.key = key
        self._rows = None
        db = self.path / STORE_FILE
        if not self.path.is_dir() or not db.is_file():
            raise InputError(key, f"{path} is not a run folder (no {STORE_FILE}); give a folder made by "
                                  f"supergame run")
        self.store = Store(db, readonly=True)
        try:
            with _reading(key, self.path):
                self.meta = self.store.meta()
            if not {"sha256", "n_cells", "kind"} <= set(self.meta):
                raise InputError(key, f"{path} was stopped while it was being created (its store has no settings); "
                                      "remove it and start the run again")
            text, doc = _read_copy(self.path, key)
            self.copy_sha256 = hashlib.sha256(text.encode("utf-8")).hexdigest()
            if check_copy and self.copy_sha256 != self.meta["sha256"]:
                raise InputError(key, f"{self.path / EXPERIMENT_COPY} was changed after the run started (SHA-256 "
                                      f"{self.copy_sha256[:12]}..., recorded {self.meta['sha256'][:12]}...): the "
                                      "stored results belong to the recorded file; restore it")
            try:
                self.experiment = experiment_from_dict(doc, text=text, source=self.meta.get("source"),
                                                       check_cells=check_cells)
            except InputError as exc:
                raise InputError(key, f"{self.path / EXPERIMENT_COPY}: {exc.key}: {exc.message}") from None
            if self.experiment.n_cells != self.meta["n_cells"]:
                raise InputError(key, f"{path}: the store was made for {self.meta['n_cells']} cells, its "
                                      f"{EXPERIMENT_COPY} has {self.experiment.n_cells}: the folder is damaged")
        except BaseException:
            self.store.close()
            raise

    def close(self) -> None:
        self.store.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def rows(self, problems: list | None = None) -> list:
        """The stored cells in cell order. A row that cannot be read back or lies outside the sweep raises
        InputError; with a list as ``problems``, it is described there and left out instead."""
        if self._rows is not None and problems is None:
            return self._rows
        with _reading(self.key, self.path):
            raw = self.store.rows(problems=problems)
        n = self.experiment.n_cells
        out = []
        for r in raw:
            if not 0 <= r.cell < n:
                msg = f"the store has a row for cell {r.number}, outside the {n} cells of the sweep"
                if problems is None:
                    raise InputError(self.key, f"{self.path}: {msg}: the store is damaged or was edited")
                problems.append(msg)
                continue
            if r.status not in ("ok", "failed"):  # pragma: no cover - the schema's CHECK refuses it
                msg = f"cell {r.number} has the status {r.status!r}"
                if problems is None:
                    raise InputError(self.key, f"{self.path}: {msg}")
                problems.append(msg)
                continue
            out.append(r)
        if problems is None:
            self._rows = out
        return out

    def attempts(self) -> list[dict]:
        with _reading(self.key, self.path):
            return self.store.attempts()

    def result(self, cell: int):
        """The result object of cell ``cell`` (counted from 0), rebuilt from its stored document by the kind's
        ``result_type``; None for a failed cell or a kind without result objects."""
        kind = self.experiment.kind_spec()
        if kind.result_type is None:
            return None
        with _reading(self.key, self.path):
            doc = self.store.document(cell)
        return None if doc is None else kind.result_type.from_dict(doc)

    def table(self) -> tuple[list[str], list[list]]:
        """Columns and rows of the results table (as in ``results.csv``)."""

        return export_table(self.rows(), list(self.experiment.parameters), self.experiment.metric_names)

    def frame(self):
        """The results table as a pandas DataFrame (pandas is optional)."""

        return frame(*self.table())

    def counts(self) -> dict:
        rows = self.rows()
        c = {"ok": sum(r.status == "ok" for r in rows), "failed": sum(r.status == "failed" for r in rows)}
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
        try:
            return load_manifest(p)
        except ValueError as exc:
            raise InputError(self.key, f"{p} cannot be read ({exc}); supergame verify {self.path} lists what is "
                                       "wrong") from None


def open_run(path) -> RunFolder:
    """Open a run folder for reading (results table, DataFrame, counts, manifest)."""
    return RunFolder(path)


# --------------------------------------------------------------------------------------------------
# Manifest
# --------------------------------------------------------------------------------------------------


def output_files(folder: Path) -> list[str]:
    """Files of the run folder covered by the manifest (relative POSIX paths, sorted)."""
    out = []
    for p in sorted(Path(folder).rglob("*")):
        if p.is_file():
            rel = p.relative_to(folder).as_posix()
            if rel == MANIFEST or rel in _TRANSIENT:
                continue
            out.append(rel)
    return out


def load_manifest(path) -> dict:
    """A run folder's ``manifest.json``; ValueError when it is not one."""
    try:
        man = json.loads(Path(path).read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise ValueError("not UTF-8 text") from None
    except json.JSONDecodeError as exc:
        raise ValueError(f"not JSON: {exc}") from None
    if not isinstance(man, dict) or not isinstance(man.get("files"), dict) or not all(
            isinstance(k, str) and isinstance(v, str) for k, v in man["files"].items()):
        raise ValueError("not a manifest (no table of files and their SHA-256)")
    return man


def _covered(rel: str, rewritten) -> bool:
    return any(rel == r or (r.endswith("/") and rel.startswith(r)) for r in rewritten)


def check_manifest(folder, rewritten=(), key: str = "RUN_DIR") -> dict | None:
    """Check that the run folder still holds what its manifest records, except the files about to be
    written again (``rewritten``: relative paths, or folders ending in ``/``); return the manifest (None
    when there is none yet).

    Raises
    ------
    InputError
        Naming ``key``, for a manifest that cannot be read or a file listed there that was altered or
        removed, or one that was added since.
    """
    folder = Path(folder)
    p = folder / MANIFEST
    if not p.exists():
        return None
    try:
        man = load_manifest(p)
    except ValueError as exc:
        raise InputError(key, f"{p} cannot be read ({exc}): the folder's record of its files is damaged; "
                              f"supergame verify {folder} lists what is wrong") from None
    listed = man["files"]
    now = set(output_files(folder))
    hint = f"the folder no longer holds what its manifest records (supergame verify {folder})"
    for rel, digest in sorted(listed.items()):
        if _covered(rel, rewritten):
            continue
        if rel not in now:
            raise InputError(key, f"{rel} is listed in {MANIFEST} but missing: {hint}; restore it")
        if sha256_file(folder / rel) != digest:
            raise InputError(key, f"{rel} was altered after {MANIFEST} was written (its SHA-256 differs): {hint}; "
                                  "restore the file")
    for rel in sorted(now - set(listed)):
        if not _covered(rel, rewritten):
            raise InputError(key, f"{rel} was added after {MANIFEST} was written: {hint}; remove it")
    return man


def clear_run_leftovers(folder) -> None:
    """Remove what an interrupted write left in a run folder: a half-written manifest, the hidden
    folders of a report being written or replaced (:func:`sim.core.files.clear_leftovers`)."""

    folder = Path(folder)
    partial_path(folder / MANIFEST).unlink(missing_ok=True)
    for p in folder.glob(".*.partial-*"):
        if p.is_dir():
            clear_leftovers(folder / p.name[1:].split(".partial-")[0])
    for p in folder.glob(".*.replaced-*"):
        if p.is_dir():
            clear_leftovers(folder / p.name[1:].split(".replaced-")[0])


def _attempt_record(a: dict) -> dict:
    return {"started": iso_time(a["started"]), "finished": iso_time(a["finished"]), "outcome": a["outcome"],
            "command": a.get("command"), "backend": a.get("backend"), "cells_run": a.get("cells_run"),
            "host": a.get("host"), "packages": a.get("packages"), "code_sha256": a.get("code"),
            "plugins": a.get("plugins")}


def code_notes(attempts: list[dict]) -> list[str]:
    """Notes for the manifest and the report when the attempts that computed cells ran different code."""
    ran = [a for a in attempts if a.get("code") and (a.get("cells_run") or 0) > 0]
    codes = sorted({a["code"] for a in ran})
    if len(codes) <= 1:
        return []
    return [f"the cells were computed by {len(ran)} attempts running {len(codes)} different versions of the "
            f"package's code (SHA-256 {', '.join(c[:12] + '...' for c in codes)}); supergame verify re-runs cells "
            "with the code installed now"]


def write_manifest(folder, rewritten=(), key: str = "RUN_DIR") -> dict:
    """Write ``manifest.json`` from the store and the files now in the folder; return it.

    An earlier manifest is kept as the record of every file not in ``rewritten`` (the files the caller
    has just written again from the store: relative paths, or folders ending in ``/``); such a file
    that was altered, removed or added since refuses the write (:func:`check_manifest`).
    """
    folder = Path(folder)
    check_manifest(folder, rewritten, key)
    with RunFolder(folder, key=key) as rf:
        meta = rf.meta
        attempts = rf.attempts()
        rows = rf.rows()
    n_cells = int(meta["n_cells"])
    ok = sum(r.status == "ok" for r in rows)
    failed = [{"cell": r.number, "error": r.error} for r in rows if r.status == "failed"]
    seeds = {"experiment_seed": meta.get("seed"),
             "rule": SEED_RULE.format(key=meta.get("seed_key") or "seed")}
    if meta.get("seed_key") is None:
        seeds["rule"] = "deterministic kind: no random numbers"
    elif n_cells <= _MANIFEST_CELL_SEEDS:
        seeds["cells"] = [[r.number, r.seed] for r in rows]
    man = {
        "format": RUN_FORMAT,
        "experiment": {"file": EXPERIMENT_COPY, "sha256": meta["sha256"], "source": meta.get("source"),
                       "name": meta["name"], "kind": meta["kind"]},
        "caution": meta.get("caution"),
        "started": iso_time(min((a["started"] for a in attempts), default=None)),
        "finished": iso_time(max((a["finished"] for a in attempts if a["finished"] is not None), default=None)),
        "attempts": [_attempt_record(a) for a in attempts],
        "command": attempts[0].get("command") if attempts else None,
        "packages": package_versions(),
        "platform": platform_info(),
        "plugins": meta.get("plugins", []),
        "seeds": seeds,
        "cells": {"total": n_cells, "ok": ok, "failed": len(failed), "missing": n_cells - ok - len(failed),
                  "failed_cells": failed},
        "notes": code_notes(attempts),
        "files": {rel: sha256_file(folder / rel) for rel in output_files(folder)},
    }
    write_atomic(folder / MANIFEST, json.dumps(man, indent=2, sort_keys=False) + "\n")
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
            raise InputError("--out", f"{out} exists and is not a folder")
        if (p / STORE_FILE).exists():
            raise InputError("--out", f"{out} already holds a run; continue it with --resume {out} or choose another "
                                      f"folder")
        if any(p.iterdir()):
            raise InputError("--out", f"{out} exists and is not empty; choose a new or empty folder")
    return p


def _experiment_of(experiment, key="FILE"):

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
        raise InputError("--resume", f"{resume} is not a run folder (no {STORE_FILE} and {EXPERIMENT_COPY})")

    # the plugins first: the copy of the experiment may need them to be read at all
    with Store(folder / STORE_FILE, readonly=True) as st, _reading("--resume", folder):
        recorded = st.meta().get("plugins") or []
    _check_plugins(recorded if isinstance(recorded, list) else [], plugin_info)
    clear_run_leftovers(folder)
    with RunFolder(folder, key="--resume", check_copy=True, check_cells=experiment is None) as rf:
        meta = rf.meta
        exp = rf.experiment
        if experiment is not None:
            exp = _experiment_of(experiment)
            if exp.sha256 != meta["sha256"]:
                raise InputError("--resume", f"{resume} was started from a different experiment file (SHA-256 "
                                             f"{meta['sha256'][:12]}..., this file {exp.sha256[:12]}...); resume with "
                                             "the same file or start a new run")
        rows = rf.rows()
        attempts = rf.attempts()
        with _reading("--resume", folder):
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


def _check_plugins(recorded: list, now: list, key: str = "--plugin") -> None:
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


def _check_packages(attempts: list, key: str = "--resume") -> None:
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
            raise InputError("--out", f"cannot be combined with --resume: the run continues in {resume}; leave "
                                      "--out out")
        res_info = _resume_target(resume, experiment, plugin_info)
        folder, exp = res_info.folder, res_info.experiment
    else:
        if retry_failed:
            raise InputError("--retry-failed", "only applies with --resume")
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
        check_manifest(folder, rewritten, key="--resume")
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


def export_bytes(rf: RunFolder) -> dict:
    """The exports of a finished run as the store gives them: file name -> bytes (``None`` for the
    Parquet file without pyarrow)."""

    header, body = rf.table()
    arrays = [{"cell": r.number, "arrays": r.arrays} for r in rf.rows() if r.arrays]
    return {CSV_FILE: csv_text(header, body).encode("utf-8"), PARQUET_FILE: parquet_bytes(header, body),
            ARRAYS_FILE: (canonical_json({"cells": arrays}) + "\n").encode("utf-8")}


def write_exports(folder) -> list[str]:
    """Write ``results.csv``, ``results.parquet`` (with pyarrow) and ``arrays.json`` from the store."""
    folder = Path(folder)
    with RunFolder(folder, check_copy=False) as rf:
        data = export_bytes(rf)
    files = []
    for rel in EXPORTS:
        if data[rel] is not None:
            (folder / rel).write_bytes(data[rel])
            files.append(rel)
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


def _same_parquet(path: Path, data: bytes) -> bool:
    """The same table in two Parquet files written by different pyarrow versions."""

    import pyarrow.parquet as pq

    try:
        return pq.read_table(str(path)).equals(pq.read_table(io.BytesIO(data)))
    except Exception:  # a file that is not Parquet at all
        return False


def _check_files(folder: Path, checks: list) -> dict | None:
    """Hashes of the files against the manifest; returns the manifest (None when it is missing or
    unreadable, which is a failed check)."""
    p = folder / MANIFEST
    if not p.is_file():
        checks.append((False, f"{MANIFEST} is missing: the run did not finish or the file was removed"))
        return None
    try:
        man = load_manifest(p)
    except ValueError as exc:
        checks.append((False, f"{MANIFEST} cannot be read ({exc})"))
        return None
    listed = man["files"]
    n_bad = 0
    for rel, digest in sorted(listed.items()):
        f = folder / rel
        if not f.is_file():
            checks.append((False, f"{rel}: listed in the manifest but missing"))
            n_bad += 1
        elif sha256_file(f) != digest:
            checks.append((False, f"{rel}: SHA-256 differs from the manifest (the file was altered)"))
            n_bad += 1
    checks.append((n_bad == 0, f"{len(listed) - n_bad} of {len(listed)} files match their SHA-256"))
    for rel in output_files(folder):
        if rel not in listed:
            checks.append((False, f"{rel}: in the folder but not in the manifest"))
    return man


def _check_rows(exp, rows: list, problems: list, checks: list) -> None:
    """Every row is the cell it claims to be: the swept values, labels and seed of that cell."""
    for msg in problems:
        checks.append((False, f"results.sqlite: {msg}"))
    bad = 0
    for r in rows:
        cell = exp.cell(r.cell)
        seed = exp.seed(cell.doc)
        if r.params != cell.values or r.labels != cell.labels or r.seed != seed:
            what = ("swept values" if r.params != cell.values else "labels" if r.labels != cell.labels else "seed")
            checks.append((False, f"results.sqlite: the row of {cell.describe()} holds other {what} than the "
                                  "experiment file gives that cell (the store was edited)"))
            bad += 1
    n = exp.n_cells
    missing = n - len(rows)
    if missing > 0:
        checks.append((False, f"{missing} of {n} cells have no result (finish the run with supergame run --resume)"))
    elif not problems and not bad:
        checks.append((True, f"the store has one row for each of the {n} cells, with the cell's swept values and "
                             "seed"))


def _check_exports(folder: Path, rf: RunFolder, man: dict | None, checks: list) -> None:
    """The exports are what the store gives, byte for byte (Parquet: the same table when another pyarrow
    version wrote it); the report's tables and record of the run's data agree with them."""
    fresh = export_bytes(rf)
    for rel in EXPORTS:
        data, p = fresh[rel], folder / rel
        if data is None:
            if p.exists():
                checks.append((True, f"{rel}: not rebuilt (pyarrow is not installed here); its SHA-256 was checked"))
            continue
        if not p.is_file():
            checks.append((False, f"{rel}: missing (every cell has a row; the file should hold them)"))
        elif p.read_bytes() == data:
            checks.append((True, f"{rel} is what the store gives, byte for byte"))
        elif rel == PARQUET_FILE and _same_parquet(p, data):
            was = ((man or {}).get("packages") or {}).get("pyarrow")
            checks.append((True, f"{rel} holds the table the store gives (written by pyarrow {was}, here "
                                 f"{package_versions().get('pyarrow')})"))
        else:
            checks.append((False, f"{rel} differs from what the store gives: the file or the store was altered"))
    rep = folder / REPORT_DIR
    if (rep / MANIFEST).is_file():
        try:
            rman = json.loads((rep / MANIFEST).read_text(encoding="utf-8"))
            run_data = rman.get("run_data") or {}
        except (ValueError, AttributeError) as exc:
            checks.append((False, f"{REPORT_DIR}/{MANIFEST} cannot be read ({exc})"))
            return
        stale = [rel[3:] for rel, digest in sorted(run_data.items())
                 if rel.startswith("../") and (not (folder / rel[3:]).is_file()
                                               or sha256_file(folder / rel[3:]) != digest)]
        if stale:
            checks.append((False, f"{REPORT_DIR}/ was written from other run data ({', '.join(stale)} changed since); "
                                  "write it again with supergame report"))
        tab = rep / "tables" / CSV_FILE
        if tab.is_file() and tab.read_bytes() != fresh[CSV_FILE]:
            checks.append((False, f"{REPORT_DIR}/tables/{CSV_FILE} differs from what the store gives"))
        elif not stale:
            checks.append((True, f"{REPORT_DIR}/ was written from these results"))


def _without_hint(message: str) -> str:
    """An error message without its pointer to supergame verify (verify is what is running)."""
    return message.split("; supergame verify ")[0]


def verify_run(folder, sample: int = 3, cells=None, rtol: float = 1e-9, atol: float = 1e-12,
               threads: int = 1) -> VerifyResult:
    """Check a run folder: every file's SHA-256 against the manifest; every stored row against the cell
    it claims to be; the exports (and the report's copy of the results table) against what the store
    gives, byte for byte; then re-run a sample of cells and compare every metric with the store
    (relative tolerance ``rtol``; nan must stay nan). A damaged folder (an unreadable store, manifest or
    experiment copy) is a failed check, not an error.

    Parameters
    ----------
    folder : path-like
    sample : int
        Cells to re-run, spread evenly over the finished cells (0: no re-run).
    cells : sequence of int, optional
        Re-run these cells (numbers counted from 1, as in the exports) instead of a sample.

    Raises
    ------
    InputError
        ``RUN_DIR`` when the folder is not a run folder at all; ``--cells`` for a cell without a result.
    """

    folder = Path(folder)
    if not folder.is_dir() or not any((folder / f).exists() for f in (STORE_FILE, EXPERIMENT_COPY, MANIFEST)):
        raise InputError("RUN_DIR", f"{folder} is not a run folder (no {STORE_FILE}, {EXPERIMENT_COPY} or "
                                    f"{MANIFEST}); give a folder made by supergame run")
    checks: list = []
    man = _check_files(folder, checks)
    try:
        rf = RunFolder(folder, check_copy=False)
    except InputError as exc:
        checks.append((False, _without_hint(exc.message)))
        return VerifyResult(False, checks, [])
    report = []
    with rf:
        same_copy = rf.copy_sha256 == rf.meta["sha256"]
        checks.append((same_copy, f"{EXPERIMENT_COPY} has the SHA-256 recorded when the run started "
                                  f"({rf.meta['sha256'][:12]}...)" if same_copy else
                                  f"{EXPERIMENT_COPY} was changed after the run started (SHA-256 "
                                  f"{rf.copy_sha256[:12]}..., recorded {rf.meta['sha256'][:12]}...)"))
        problems: list = []
        try:
            rows = rf.rows(problems=problems)
        except InputError as exc:
            checks.append((False, _without_hint(exc.message)))
            return VerifyResult(False, checks, [])
        exp = rf.experiment
        if same_copy:
            _check_rows(exp, rows, problems, checks)
        else:
            for msg in problems:
                checks.append((False, f"results.sqlite: {msg}"))
        intact = same_copy and not problems and len(rows) == exp.n_cells
        if intact:
            _check_exports(folder, rf, man, checks)
        by_cell = {r.cell: r for r in rows}
        ok_cells = sorted(c for c, r in by_cell.items() if r.status == "ok")
        if cells is not None:
            chosen = []
            for c in cells:
                i = int(c) - 1
                if i not in by_cell:
                    raise InputError("--cells", f"cell {c} has no result in {folder} (cells 1 to {exp.n_cells})")
                if by_cell[i].status != "ok":
                    raise InputError("--cells", f"cell {c} failed in the run; there is no number to confirm")
                chosen.append(i)
        else:
            chosen = sample_cells(ok_cells, sample)
        if chosen and not same_copy:
            checks.append((False, "no cell re-run: the experiment file is not the one the run started with"))
            chosen = []
        kind = exp.kind_spec()
        for c in chosen:
            cell = exp.cell(c)
            cfg = kind.prepare(cell.doc)
            res = kind.run(cfg, CellContext(index=c, threads=threads))
            fresh = clean_metrics(res.metrics)
            stored = by_cell[c].metrics
            names = sorted(set(fresh) | set(stored))
            bad = [k for k in names if not _same(fresh.get(k, math.nan), stored.get(k, math.nan), rtol, atol)]
            worst = 0.0
            for k in names:
                a, b = fresh.get(k, math.nan), stored.get(k, math.nan)
                if math.isfinite(a) and math.isfinite(b) and b != 0:
                    worst = max(worst, abs(a - b) / abs(b))
            exact = all((fresh.get(k) == stored.get(k)) or (math.isnan(fresh.get(k, math.nan)) and
                                                             math.isnan(stored.get(k, math.nan))) for k in names)
            report.append({"cell": cell.number, "metrics": len(names), "mismatched": bad,
                           "max_relative_difference": worst, "identical": exact})
            if bad:
                k = bad[0]
                checks.append((False, f"{cell.describe()}: {len(bad)} of {len(names)} metrics do not reproduce, e.g. "
                                      f"{k} = {fresh.get(k)!r} now, {stored.get(k)!r} stored"))
            else:
                how = "identically" if exact else f"within a relative {worst:.1e}"
                checks.append((True, f"{cell.describe()}: all {len(names)} metrics reproduce {how}"))
    return VerifyResult(all(ok for ok, _ in checks), checks, report)
