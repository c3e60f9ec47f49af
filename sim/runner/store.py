"""The results store of a run: an embedded SQLite database with one committed row per finished cell.

Durability: the database is in write-ahead-log mode and every finished cell is one transaction, so a
process killed at any moment (even by SIGKILL) loses at most the cells still being computed; a
resumed run (``supergame run FILE --resume RUN_DIR``) computes only the cells without a row. With
``synchronous = FULL`` the log is flushed to the disk before a commit returns, so a row whose commit returned
survives the death of the process and a power cut alike: the loss bound is the cell whose commit was under way
(its transaction is rolled back whole, never half written; tests/runner/test_signals.py kills writers in the
middle of commits). When a run completes the log is folded back into the database file, which from then on does
not change.

The results table and its CSV and Parquet exports are in :mod:`sim.runner.tabular`.
"""

from __future__ import annotations

import json
import math
import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sim.core.jsonutil import jsonable

__all__ = ["STORE_FILE", "CellRow", "DamagedStore", "Store"]

STORE_FILE = "results.sqlite"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS cells (
    cell INTEGER PRIMARY KEY,
    status TEXT NOT NULL CHECK (status IN ('ok', 'failed')),
    params TEXT NOT NULL,
    labels TEXT NOT NULL,
    seed INTEGER,
    error TEXT,
    detail TEXT,
    metrics TEXT NOT NULL,
    arrays TEXT NOT NULL,
    started REAL,
    finished REAL,
    seconds REAL,
    worker TEXT,
    attempt INTEGER
);
CREATE TABLE IF NOT EXISTS documents (
    cell INTEGER PRIMARY KEY REFERENCES cells (cell),
    doc TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS attempts (
    attempt INTEGER PRIMARY KEY,
    started REAL NOT NULL,
    finished REAL,
    outcome TEXT,
    info TEXT NOT NULL
);
"""


class DamagedStore(ValueError):
    """A store whose contents cannot be read back (a row or a setting that is not what this module
    wrote). SQLite's own damage reports are :class:`sqlite3.DatabaseError`."""


def _loads(text: Any, what: str, typ: type = dict):
    try:
        out = json.loads(text)
    except (TypeError, ValueError) as exc:
        raise DamagedStore(f"{what}: not valid JSON ({exc})") from None
    if typ is not None and not isinstance(out, typ):
        raise DamagedStore(f"{what}: not a JSON {'object' if typ is dict else typ.__name__}")
    return out


def _dumps(obj: Any) -> str:

    return json.dumps(jsonable(obj), sort_keys=True, separators=(",", ":"), allow_nan=False)


@dataclass
class CellRow:
    """One finished cell as stored (``metrics`` hold floats, nan for missing).

    ``cell`` is the cell's index counted from 0, as in the store's ``cell`` column: the cell's stream key
    (``SeedSequence(seed, spawn_key=(cell,))``). Everything shown to users -- exports, tables, messages
    -- counts cells from 1 (:attr:`number`).

    Attributes
    ----------
    cell : int
        The cell's index, counted from 0.
    status : {"ok", "failed"}
        Whether the cell's computation finished or raised.
    params : dict
        Swept path -> value of the cell.
    labels : dict of str to str
        Swept path -> display label of the value.
    seed : int or None
        The user's seed the cell's streams came from.
    error : str or None
        A failed cell's error, in one line.
    metrics : dict of str to float
        The cell's metrics (nan for missing).
    arrays : dict
        The cell's small arrays, as plain JSON data.
    started, finished : float or None
        When the cell's computation started and ended, in seconds since the epoch.
    seconds : float or None
        Its compute time.
    worker : str or None
        ``host:pid`` of the process that computed it.
    detail : str or None
        A failed cell's traceback.
    attempt : int or None
        The attempt (run or resume) that computed it.
    """

    cell: int
    status: str
    params: dict
    labels: dict
    seed: int | None
    error: str | None
    metrics: dict
    arrays: dict
    started: float | None = None
    finished: float | None = None
    seconds: float | None = None
    worker: str | None = None
    detail: str | None = None
    attempt: int | None = None

    @property
    def number(self) -> int:
        """The cell's number as users see it (counted from 1)."""
        return int(self.cell) + 1


class Store:
    """An open results database (see the module notes).

    Parameters
    ----------
    path : path-like
        The database file.
    readonly : bool
        Open without write access (reports, exports, verification).
    """

    def __init__(self, path, readonly: bool = False):
        self.path = Path(path)
        self.readonly = readonly
        if readonly:
            if not self.path.is_file():
                raise FileNotFoundError(str(self.path))
            self.con = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, isolation_level=None, timeout=30)
        else:
            self.con = sqlite3.connect(str(self.path), isolation_level=None, timeout=30)
            self.con.execute("PRAGMA journal_mode=WAL")
            self.con.execute("PRAGMA synchronous=FULL")  # a committed cell survives a power cut
            self.con.executescript(_SCHEMA)

    # -- lifecycle ---------------------------------------------------------------------------------

    @classmethod
    def create(cls, path, meta: dict) -> Store:
        """A new database holding ``meta`` (string keys, JSON-able values), written in one transaction.

        Parameters
        ----------
        path : path-like
            The database file.
        meta : dict
            The run's settings; the schema version is added as ``schema_version``.

        Returns
        -------
        Store
            The store, open for writing.
        """
        s = cls(path)
        s.con.execute("BEGIN")
        s.con.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        for k, v in meta.items():
            s.con.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (k, _dumps(v)))
        s.con.execute("COMMIT")
        return s

    def close(self) -> None:
        """Close the database connection (a second call does nothing)."""
        if self.con is not None:
            self.con.close()
            self.con = None

    def finalize(self) -> None:
        """Fold the write-ahead log into the database file and leave it in rollback-journal mode, so
        that the file no longer changes when it is read."""
        self.con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        self.con.execute("PRAGMA journal_mode=DELETE")

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    # -- meta --------------------------------------------------------------------------------------

    def meta(self) -> dict:
        """The run's settings as :meth:`create` and :meth:`set_meta` wrote them.

        Returns
        -------
        dict
            Key -> value (``schema_version`` as an int).

        Raises
        ------
        DamagedStore
            When a value cannot be read back.
        """
        out = {}
        for k, v in self.con.execute("SELECT key, value FROM meta ORDER BY key"):
            try:
                out[k] = _loads(v, f"setting {k!r}", None) if k != "schema_version" else int(v)
            except (TypeError, ValueError) as exc:
                raise DamagedStore(f"setting {k!r} cannot be read ({exc})") from None
        return out

    def set_meta(self, key: str, value: Any) -> None:
        """Write one setting, replacing any earlier value.

        Parameters
        ----------
        key : str
            The setting's name.
        value : object
            Its value (JSON-able; non-finite floats are written as null).
        """
        self.con.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (key, _dumps(value)))

    # -- attempts ----------------------------------------------------------------------------------

    def start_attempt(self, info: dict) -> int:
        """Record the start of an attempt (a run or a resume) at the current time.

        Parameters
        ----------
        info : dict
            What the attempt runs with (command, backend, host, package versions, code digest, plugins).

        Returns
        -------
        int
            The attempt's number, counted from 1.
        """
        cur = self.con.execute("INSERT INTO attempts (started, info) VALUES (?, ?)", (time.time(), _dumps(info)))
        return int(cur.lastrowid)

    def finish_attempt(self, attempt: int, outcome: str, info: dict | None = None) -> None:
        """Record the end of an attempt at the current time.

        Parameters
        ----------
        attempt : int
            The number :meth:`start_attempt` returned.
        outcome : str
            How it ended: the run's status, ``"interrupted"`` or ``"stopped"``.
        info : dict or None
            Entries to add to the attempt's information (e.g. the number of cells it ran).
        """
        if info is not None:
            old = json.loads(self.con.execute("SELECT info FROM attempts WHERE attempt = ?", (attempt,)).fetchone()[0])
            old.update(info)
            self.con.execute("UPDATE attempts SET finished = ?, outcome = ?, info = ? WHERE attempt = ?",
                             (time.time(), outcome, _dumps(old), attempt))
        else:
            self.con.execute("UPDATE attempts SET finished = ?, outcome = ? WHERE attempt = ?",
                             (time.time(), outcome, attempt))

    def attempts(self) -> list[dict]:
        """Every attempt in order.

        Returns
        -------
        list of dict
            ``attempt``, ``started``, ``finished`` (seconds since the epoch, None while running), ``outcome``
            and the entries of its information.

        Raises
        ------
        DamagedStore
            When an attempt's information cannot be read back.
        """
        rows = self.con.execute("SELECT attempt, started, finished, outcome, info FROM attempts ORDER BY attempt")
        return [{"attempt": a, "started": s, "finished": f, "outcome": o, **_loads(i, f"attempt {a}")}
                for a, s, f, o, i in rows]

    # -- cells -------------------------------------------------------------------------------------

    def record(self, row: CellRow, document: dict | None = None) -> None:
        """Store one finished cell (and its result document, if any) in its own committed transaction. A cell
        already stored is kept (the first result wins; a second, identical computation can only come from a
        duplicate submission).

        Parameters
        ----------
        row : CellRow
            The finished cell.
        document : dict or None
            Its result object as plain JSON data; kept only when the row is new.
        """
        self.con.execute("BEGIN")
        try:
            cur = self.con.execute(
                "INSERT OR IGNORE INTO cells (cell, status, params, labels, seed, error, detail, metrics, arrays, "
                "started, finished, seconds, worker, attempt) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (int(row.cell), row.status, _dumps(row.params), _dumps(row.labels), row.seed, row.error, row.detail,
                 _dumps(row.metrics), _dumps(row.arrays), row.started, row.finished, row.seconds, row.worker,
                 row.attempt),
            )
            if document is not None and cur.rowcount:
                self.con.execute("INSERT OR IGNORE INTO documents (cell, doc) VALUES (?, ?)",
                                 (int(row.cell), _dumps(document)))
            self.con.execute("COMMIT")
        except BaseException:
            self.con.execute("ROLLBACK")
            raise

    def document(self, cell: int) -> dict | None:
        """The result document of cell ``cell`` (counted from 0), or None (a failed cell, or a kind without
        result objects).

        Parameters
        ----------
        cell : int
            The cell's index, counted from 0.

        Returns
        -------
        dict or None

        Raises
        ------
        DamagedStore
            When the stored document cannot be read back.
        """
        try:
            r = self.con.execute("SELECT doc FROM documents WHERE cell = ?", (int(cell),)).fetchone()
        except sqlite3.OperationalError:  # a store written before documents were kept
            return None
        return None if r is None else _loads(r[0], f"the result document of cell {int(cell) + 1}")

    def done(self) -> set[int]:
        """The indices (counted from 0) of the cells that have a row, finished or failed.

        Returns
        -------
        set of int
        """
        return {int(c) for (c,) in self.con.execute("SELECT cell FROM cells")}

    def count(self) -> dict:
        """How many stored cells finished and how many failed.

        Returns
        -------
        dict of str to int
            ``ok`` and ``failed``.
        """
        out = {"ok": 0, "failed": 0}
        for status, n in self.con.execute("SELECT status, COUNT(*) FROM cells GROUP BY status"):
            out[status] = int(n)
        return out

    def forget_failed(self) -> int:
        """Delete the rows of the failed cells, so that a resumed run computes them again.

        Returns
        -------
        int
            The number of rows deleted.
        """
        cur = self.con.execute("DELETE FROM cells WHERE status = 'failed'")
        return int(cur.rowcount)

    def rows(self, cells=None, problems: list | None = None) -> list[CellRow]:
        """Stored cells in cell order (all, or those in ``cells``, given by index counted from 0).

        A row that cannot be read back raises :class:`DamagedStore`; with a list as ``problems``, it is
        described there and left out instead.

        Parameters
        ----------
        cells : iterable of int or None
            Indices of the cells wanted; None for all.
        problems : list or None
            A list to append the description of each unreadable row to.

        Returns
        -------
        list of CellRow

        Raises
        ------
        DamagedStore
            For an unreadable row, when ``problems`` is None.
        """
        q = ("SELECT cell, status, params, labels, seed, error, metrics, arrays, started, finished, seconds, worker, "
             "detail, attempt FROM cells ORDER BY cell")
        out = []
        want = None if cells is None else {int(c) for c in cells}
        for r in self.con.execute(q):
            if want is not None and r[0] not in want:
                continue
            try:
                out.append(_row(r))
            except DamagedStore as exc:
                if problems is None:
                    raise
                problems.append(str(exc))
        return out

    def failed(self) -> list[CellRow]:
        """The rows of the failed cells, in cell order.

        Returns
        -------
        list of CellRow
        """
        return [r for r in self.rows() if r.status == "failed"]

    def journal_mode(self) -> str:
        """``"wal"`` while a run writes to the store, ``"delete"`` once :meth:`finalize` folded the log.

        Returns
        -------
        str
            SQLite's journal mode, in lower case.
        """
        return str(self.con.execute("PRAGMA journal_mode").fetchone()[0]).lower()


def _row(r: tuple) -> CellRow:
    """A stored row as written by :meth:`Store.record`, or :class:`DamagedStore`."""
    cell = r[0]
    if not isinstance(cell, int) or isinstance(cell, bool):
        raise DamagedStore(f"a row has the cell number {cell!r}, not an integer")
    what = f"the row of cell {cell + 1}"
    metrics = _loads(r[6], f"{what}, metrics")
    try:
        metrics = {str(k): (math.nan if v is None else float(v)) for k, v in metrics.items()}
    except (TypeError, ValueError):
        raise DamagedStore(f"{what}, metrics: not all numbers") from None
    if r[4] is not None and (not isinstance(r[4], int) or isinstance(r[4], bool)):
        raise DamagedStore(f"{what}, seed: {r[4]!r} is not an integer")
    return CellRow(cell, r[1], _loads(r[2], f"{what}, parameters"), _loads(r[3], f"{what}, labels"), r[4],
                   r[5], metrics, _loads(r[7], f"{what}, arrays"), r[8], r[9], r[10], r[11], r[12], r[13])
