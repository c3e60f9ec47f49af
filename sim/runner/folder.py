"""A run folder and what it holds, opened for reading (see :mod:`sim.runner.runs` for the layout)."""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import sqlite3
from contextlib import contextmanager
from pathlib import Path

from sim.core.errors import InputError
from sim.core.tomlfile import file_sha256, read_toml
from sim.runner.experiment import experiment_from_dict
from sim.runner.store import STORE_FILE, DamagedStore, Store
from sim.runner.tabular import export_table, frame

RUN_FORMAT = "supergame-run/1"
EXPERIMENT_COPY = "experiment.toml"
MANIFEST = "manifest.json"
CSV_FILE = "results.csv"
PARQUET_FILE = "results.parquet"
ARRAYS_FILE = "arrays.json"
REPORT_DIR = "report"
EXPORTS = (CSV_FILE, PARQUET_FILE, ARRAYS_FILE)
#: files of a run folder that are not part of its record: the store's journals and the writers' lock
TRANSIENT = ("results.sqlite-wal", "results.sqlite-shm", "results.sqlite-journal", ".lock")
#: packages whose version can change the numbers a cell computes: a run is resumed only with the same ones
#: the seed rule, as stated in manifests and reports
SEED_RULE = ("cell k (counted from 1) draws from numpy.random.SeedSequence(seed, spawn_key=(k - 1,)), seed being "
             "the cell's {key}; one stream per replication or session within the cell")

#: SHA-256 of a file (hex), the one digest of the package's manifests
sha256_file = file_sha256


def iso_time(t: float | None) -> str | None:
    """A time stamp of the store as ISO 8601 text in UTC, to the second (``2026-03-01T12:00:05+00:00``).

    Parameters
    ----------
    t : float or None
        Seconds since the epoch, as the store records them.

    Returns
    -------
    str or None
        None when ``t`` is None.
    """
    if t is None:
        return None
    return _dt.datetime.fromtimestamp(t, tz=_dt.UTC).isoformat(timespec="seconds")


@contextmanager
def reading(key: str, folder: Path):
    """Damage of the store becomes one line naming ``key`` (never a traceback).

    A context manager around reads of the store.

    Parameters
    ----------
    key : str
        Key path of the error (the command's argument, e.g. ``"folder"``).
    folder : Path
        The run folder, named in the message.

    Yields
    ------
    None

    Raises
    ------
    InputError
        ``key`` when a read inside the block meets an SQLite database error or a damaged store.
    """
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

    def __init__(self, path, key: str = "folder", check_copy: bool = True, check_cells: bool = False):

        self.path = Path(path)
        self.key = key
        self._rows = None
        db = self.path / STORE_FILE
        if not self.path.is_dir() or not db.is_file():
            raise InputError(key, f"{path} is not a run folder (no {STORE_FILE}); give a folder made by "
                                  f"supergame run")
        self.store = Store(db, readonly=True)
        try:
            with reading(key, self.path):
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
        """Close the store."""
        self.store.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def rows(self, problems: list | None = None) -> list:
        """The stored cells in cell order.

        A row that cannot be read back or lies outside the sweep raises InputError; with a list as ``problems``, it is
        described there and left out instead.

        Parameters
        ----------
        problems : list, optional

        Returns
        -------
        list of CellRow
        """
        if self._rows is not None:  # a read kept for later had nothing to describe
            return self._rows
        before = len(problems) if problems is not None else 0
        with reading(self.key, self.path):
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
        if problems is None or len(problems) == before:
            self._rows = out
        return out

    def attempts(self) -> list[dict]:
        """The attempts that wrote the folder (the run and its resumptions), oldest first.

        Returns
        -------
        list of dict
        """
        with reading(self.key, self.path):
            return self.store.attempts()

    def result(self, cell: int):
        """The result object of a cell, rebuilt from its stored document by the kind's ``result_type``.

        Parameters
        ----------
        cell : int
            Counted from 0.

        Returns
        -------
        object or None
            None for a failed cell or a kind without result objects.
        """
        kind = self.experiment.kind_spec()
        if kind.result_type is None:
            return None
        with reading(self.key, self.path):
            doc = self.store.document(cell)
        return None if doc is None else kind.result_type.from_dict(doc)

    def table(self) -> tuple[list[str], list[list]]:
        """Columns and rows of the results table (as in ``results.csv``).

        Returns
        -------
        header : list of str
        body : list of list
        """

        return export_table(self.rows(), list(self.experiment.parameters), self.experiment.metric_names)

    def frame(self):
        """The results table as a pandas DataFrame (pandas is optional).

        Returns
        -------
        pandas.DataFrame
        """

        return frame(*self.table())

    def counts(self) -> dict:
        """Cells finished, failed, missing and in all.

        Returns
        -------
        dict
        """
        rows = self.rows()
        c = {"ok": sum(r.status == "ok" for r in rows), "failed": sum(r.status == "failed" for r in rows)}
        c["total"] = self.experiment.n_cells
        c["missing"] = c["total"] - c["ok"] - c["failed"]
        return c

    @property
    def complete(self) -> bool:
        """Whether every cell has a row."""
        return self.counts()["missing"] == 0

    def manifest(self) -> dict | None:
        """The folder's manifest (None before the run finished).

        Returns
        -------
        dict or None
        """
        p = self.path / MANIFEST
        if not p.is_file():
            return None
        try:
            return load_manifest(p)
        except ValueError as exc:
            raise InputError(self.key, f"{p} cannot be read ({exc}); supergame verify {self.path} lists what is "
                                       "wrong") from None


def open_run(path) -> RunFolder:
    """Open a run folder for reading (results table, DataFrame, counts, results, manifest).

    Parameters
    ----------
    path : path-like

    Returns
    -------
    RunFolder
    """
    return RunFolder(path)


def output_files(folder: Path) -> list[str]:
    """Files of the run folder covered by the manifest (relative POSIX paths, sorted).

    Parameters
    ----------
    folder : Path
        The run folder.

    Returns
    -------
    list of str
        Every file below ``folder`` except the manifest itself and the transient files (the store's
        journal files and the lock).
    """
    out = []
    for p in sorted(Path(folder).rglob("*")):
        if p.is_file():
            rel = p.relative_to(folder).as_posix()
            if rel == MANIFEST or rel in TRANSIENT:
                continue
            out.append(rel)
    return out


def load_manifest(path) -> dict:
    """A run folder's ``manifest.json``; ValueError when it is not one.

    Parameters
    ----------
    path : str or path-like
        The manifest file.

    Returns
    -------
    dict
        The manifest, whose ``files`` table maps relative paths to SHA-256 digests.

    Raises
    ------
    ValueError
        When the file is not UTF-8 text, not JSON, or has no ``files`` table of strings (the caller words the
        error for its own key).
    """
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
