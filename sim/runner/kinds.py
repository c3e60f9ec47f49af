"""Experiment kinds: what one cell of an experiment is, and how to run it.

A kind (:class:`Kind`) tells the experiments layer which tables of an experiment file it reads, how to
validate one cell's document (``prepare``, raising :class:`~sim.core.errors.InputError` with the key path)
and how to run it (``run``: the prepared config and a :class:`CellContext` in, a :class:`CellResult`
out -- a flat dict of numbers and, optionally, a few arrays for figures). Everything else -- sweeps,
seeds, workers, the store, exports, figures, the evidence bundle -- is shared.

The built-in kinds (``thresholds``, ``simulate``, ``learn``) live in :mod:`sim.runner.analyses`. A component
adds its kind with one line in :data:`LAZY_KINDS` (``"tournament": "sim.runner.analyses.tournament:KIND"``),
imported on first use, or by calling :func:`register_kind`. A user's own kinds and strategies come
only from Python code named on the command line (``--plugin FILE``) or from an installed package's
entry point in the group ``supergame.plugins``; both run that code, with the user's rights. The
experiment file itself is data and is never executed.

Contract of ``run``: deterministic given the prepared config and ``ctx.index``, whatever
``ctx.threads`` is; never prints; raises on failure (the sweep records the error and goes on).

Stream keys (the one rule for every command)
--------------------------------------------
Cell k of an experiment -- counted from 1 in exports, tables and messages -- has ``ctx.index = k - 1``
and draws every random number from ``numpy.random.SeedSequence(seed, spawn_key=ctx.key)`` with
``ctx.key == (k - 1,)``; a part j of the cell (a replication, a session, a match) appends to it
(``ctx.key + (j, ...)``). A file without a sweep is cell 1, with the key ``(0,)``. Every command that
runs one experiment file by itself (``supergame simulate``, ``learn``, ``tournament``, ``assess``)
uses that same key ``(0,)``, so that its numbers are those of ``supergame run FILE`` to the last digit
and ``supergame verify`` can confirm them.
"""

from __future__ import annotations

import importlib
import importlib.util
import json
import math
import numbers
import sys
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from importlib.metadata import entry_points
from pathlib import Path
from typing import Any

import numpy as np

from sim.core.errors import InputError
from sim.core.jsonutil import jsonable
from sim.core.records import to_plain
from sim.core.tomlfile import file_sha256

__all__ = [
    "LAZY_KINDS",
    "CellContext",
    "CellResult",
    "Kind",
    "PartAssumption",
    "get_kind",
    "known_kinds",
    "load_plugins",
    "register_kind",
    "stated_assumptions",
]

#: kind name -> "module:attribute" of its :class:`Kind`, imported on first use. Other components
#: register their kind here with one line.
LAZY_KINDS: dict[str, str] = {
    "thresholds": "sim.runner.analyses.thresholds:KIND",
    "simulate": "sim.runner.analyses.simulate:KIND",
    "learn": "sim.runner.analyses.learn:KIND",
    "tournament": "sim.runner.analyses.tournament:KIND",
    "assess": "sim.runner.analyses.assess:KIND",
    "capacity": "sim.runner.analyses.capacity:KIND",
    "contact_simulation": "sim.runner.analyses.contact_simulation:KIND",
}
_KINDS: dict[str, Kind] = {}
#: entry-point group of installed plugins (modules that register strategies or kinds on import)
ENTRY_POINT_GROUP = "supergame.plugins"


@dataclass(frozen=True)
class CellContext:
    """What a cell may know about how it is run.

    Attributes
    ----------
    index : int
        The cell's position counted from 0 (users see cell ``index + 1``); its random streams are
        ``SeedSequence(seed, spawn_key=key)``.
    threads : int
        Threads the cell may use (results must not depend on it).
    progress : bool
        Whether the cell may show its own progress bar (only for a single in-process cell).
    folder : str or None
        The run folder, for a cell that writes files of its own into it (covered by the run's manifest); None
        when the cell runs in memory.
    """

    index: int = 0
    threads: int = 1
    progress: bool = False
    folder: str | None = None

    @property
    def key(self) -> tuple:
        """The cell's stream key ``(index,)``: ``(0,)`` for a file without a sweep (see the module notes)."""
        return (int(self.index),)


@dataclass
class CellResult:
    """What one cell produced.

    Attributes
    ----------
    metrics : dict of str to float
        Flat numbers (``nan`` when undefined). Conventions: ``name.se``, ``name.low``, ``name.high``
        for the standard error and confidence interval of ``name``; ``analytic.name`` for the analytic
        prediction of ``name``; per-firm values as ``name.firm1``, ``name.firm2``, ...
    arrays : dict of str to array-like or dict
        Optional small arrays for figures (curves over periods, survival curves); a value that is a
        dict is a JSON document the kind's ``report`` reads (plain data: numbers, strings, booleans,
        None, lists and dicts; nan and inf are stored as None, dict keys come back sorted).
    result : object, optional
        The analysis's result object (a :class:`sim.core.records.Record`): stored as the cell's document
        (:meth:`sim.runner.runs.RunFolder.result`), from which the evidence layer draws what a command prints
        and plots, so that a run folder's bundle shows what the command showed.
    """

    metrics: dict
    arrays: dict = field(default_factory=dict)
    result: Any = None


class PartAssumption(str):
    """An assumption of one part of an analysis (a trigger-price equilibrium, the any-punishment threshold, ...): a
    text like any other assumption, stated only in the report of a run that computed the part.

    Parameters
    ----------
    text : str
        The assumption.
    metrics : str
        The start of the names of the part's metrics: a run computed the part when one of its metrics starts so.
    """

    metrics: str

    def __new__(cls, text: str, metrics: str):
        obj = super().__new__(cls, text)
        obj.metrics = metrics
        return obj

    def __getnewargs__(self):  # copies and pickles (a kind sent to a worker process) keep the part
        return str(self), self.metrics


def stated_assumptions(assumptions, metric_names) -> list[str]:
    """The assumptions of a run: every general one, and those of the parts it computed (:class:`PartAssumption`).

    Parameters
    ----------
    assumptions : sequence of str
        A kind's assumptions.
    metric_names : iterable of str
        The metrics the run's cells report.

    Returns
    -------
    list of str
    """
    names = list(metric_names)
    return [str(a) for a in assumptions
            if not isinstance(a, PartAssumption) or any(m.startswith(a.metrics) for m in names)]


@dataclass(frozen=True)
class Kind:
    """An experiment kind (see the module notes).

    Attributes
    ----------
    name : str
        The value of ``experiment.kind``.
    tables : tuple of str
        Tables of the experiment file the kind reads (besides ``experiment``, ``sweep``, ``report``).
    prepare : callable
        ``prepare(doc) -> config``: validate one cell's document (a dict of tables); raise InputError.
    run : callable
        ``run(config, ctx) -> CellResult``.
    metric_names : callable, optional
        ``metric_names(config) -> list of str``, the metrics a cell reports (checked against
        ``[report]``); the run must report exactly these.
    seed_key : str or None
        Key path of the experiment seed (``run.seed``); None for deterministic kinds.
    seed_default : int
        The seed of a document that gives none.
    headline : tuple of str
        Metrics shown first in summaries and used by default figures.
    analytic : mapping of str to str
        Metric -> metric holding its analytic prediction (drawn beside it in line plots).
    threshold : mapping of str to str
        Swept path -> metric holding the analytic critical value of that parameter (for example
        ``run.delta`` -> ``analytic.critical_delta``), drawn on heatmaps.
    describe : callable, optional
        ``describe(doc) -> list of str``: lines describing the setup, for the report.
    assumptions : tuple of str
        The model's assumptions and limitations, stated in the report.
    ready : callable, optional
        ``ready(doc)``: called on every cell's document just before a run creates its folder; raises
        :class:`sim.core.errors.InputError` when something the cell reads is not there yet (a file an earlier run
        writes, which ``check`` accepts as still to come), so that the run writes nothing.
    inputs : callable, optional
        ``inputs(doc) -> list of (key path, file name)``: the files a cell's document reads besides the experiment
        file (saved learners); the run records their SHA-256 when it starts and checks them when it is resumed or
        verified (:mod:`sim.runner.inputs`).
    read : callable, optional
        ``read(config) -> list of (key path, file name, SHA-256)``: the input files a prepared cell read, with the
        SHA-256 of the very bytes it read; each cell of a run compares them with the ones the run recorded when it
        started, so that no cell is stored from another version of a file (:func:`sim.runner.sweep.run_payload`).
    cell_assumptions : callable, optional
        ``cell_assumptions(doc) -> list of str``: the assumptions of what one cell's document uses (a learner family,
        a protocol); the report states those of every cell of the run, each once, after ``assumptions``.
    summary : str
        One line: what a cell of this kind computes.
    cost : callable, optional
        ``cost(config) -> sim.runner.cost.Cost``: the estimated peak memory and work of a prepared cell, checked
        before any work starts (:mod:`sim.runner.cost`).
    result_type : type, optional
        The class of the kind's result objects (``from_dict`` rebuilds a stored cell's result).
    report : callable, optional
        ``report(run, bundle)``: the kind's own account of a finished run in its evidence bundle, in
        place of the generic sections (what the experiment asks, setup, sweep, figures, result tables).
        ``run`` is the open :class:`sim.runner.runs.RunFolder` (``run.experiment``, ``run.rows()`` with each
        cell's metrics and arrays, ``run.meta``); ``bundle`` the :class:`sim.evidence.bundle.Bundle` being
        written. Everything must be read from the stored rows, never recomputed. The results table,
        failed cells, how to reproduce the numbers, the assumptions and the caution follow as for every
        kind. It may return a list of lines added to "Reproducing these numbers" (None: none), set
        ``bundle.title`` and add entries to ``bundle.manifest`` (merged with the report's own).
    """

    name: str
    tables: tuple
    prepare: Callable[[dict], Any]
    run: Callable[[Any, CellContext], CellResult]
    metric_names: Callable[[Any], Sequence[str]] | None = None
    seed_key: str | None = "run.seed"
    seed_default: int = 0
    headline: tuple = ()
    analytic: Mapping[str, str] = field(default_factory=dict)
    threshold: Mapping[str, str] = field(default_factory=dict)
    describe: Callable[[dict], list] | None = None
    assumptions: tuple = ()
    cell_assumptions: Callable[[dict], Sequence[str]] | None = None
    summary: str = ""
    ready: Callable[[dict], None] | None = None
    inputs: Callable[[dict], Sequence[tuple]] | None = None
    read: Callable[[Any], Sequence[tuple]] | None = None
    cost: Callable[[Any], Any] | None = None
    result_type: type | None = None
    report: Callable[[Any, Any], None] | None = None

    def seed_of(self, doc: dict) -> int | None:
        """The seed a cell's document gives (``seed_default`` when the key is absent).

        Parameters
        ----------
        doc : dict

        Returns
        -------
        int or None
            None for a deterministic kind.
        """
        if self.seed_key is None:
            return None
        cur: Any = doc
        for s in self.seed_key.split("."):
            if not isinstance(cur, dict) or s not in cur:
                return self.seed_default
            cur = cur[s]
        return int(cur) if isinstance(cur, numbers.Real) and not isinstance(cur, bool) else self.seed_default


def register_kind(kind: Kind, replace: bool = False) -> Kind:
    """Make ``kind`` available as ``experiment.kind = kind.name``.

    Parameters
    ----------
    kind : Kind
    replace : bool
        Replace a kind registered under the same name.

    Returns
    -------
    Kind
    """
    if not isinstance(kind, Kind):
        raise TypeError(f"expected a sim.runner.kinds.Kind, got {kind!r}")
    if kind.name in _KINDS and not replace and _KINDS[kind.name] is not kind:
        raise ValueError(f"an experiment kind named {kind.name!r} is already registered")
    _KINDS[kind.name] = kind
    return kind


def known_kinds() -> list[str]:
    """The names of the experiment kinds: those registered and those loaded on first use.

    Returns
    -------
    list of str
        Sorted names.
    """
    return sorted(set(_KINDS) | set(LAZY_KINDS))


def get_kind(name: Any, key: str = "experiment.kind") -> Kind:
    """The kind registered under ``name``; an unknown name raises InputError listing the known ones.

    A kind of the package that is loaded on first use is imported and registered here.

    Parameters
    ----------
    name : object
        The kind as the experiment file gives it (a string when valid).
    key : str
        Key path of ``name`` in error messages.

    Returns
    -------
    Kind

    Raises
    ------
    InputError
        ``key`` when ``name`` is not a known kind, or its module cannot be imported in this installation.
    """
    if isinstance(name, str) and name not in _KINDS and name in LAZY_KINDS:
        mod, _, attr = LAZY_KINDS[name].partition(":")
        try:
            obj = getattr(importlib.import_module(mod), attr)
        except (ImportError, AttributeError):
            raise InputError(key, f"kind {name!r} is not available in this installation ({LAZY_KINDS[name]} "
                                  f"cannot be loaded)") from None
        register_kind(obj, replace=True)
    if not isinstance(name, str) or name not in _KINDS:
        raise InputError(key, f"must be one of {', '.join(map(repr, known_kinds()))}, got {name!r}")
    return _KINDS[name]


# --------------------------------------------------------------------------------------------------
# Metrics
# --------------------------------------------------------------------------------------------------


def clean_metrics(metrics: Mapping) -> dict:
    """Metrics as plain floats (booleans as 0/1; None and non-finite as nan); refuses anything else.

    Parameters
    ----------
    metrics : mapping of str to float, bool or None
        A cell's metrics as its kind returns them.

    Returns
    -------
    dict of str to float

    Raises
    ------
    TypeError
        For a name that is not a non-empty string or a value that is not a number (an error of the kind's
        code, recorded as the cell's failure).
    """
    out = {}
    for k, v in metrics.items():
        if not isinstance(k, str) or not k:
            raise TypeError(f"metric names must be non-empty strings, got {k!r}")
        if v is None:
            out[k] = math.nan
        elif isinstance(v, bool | np.bool_):
            out[k] = 1.0 if v else 0.0
        elif isinstance(v, numbers.Real):
            x = float(v)
            out[k] = x if math.isfinite(x) else math.nan
        else:
            raise TypeError(f"metric {k!r} is not a number: {v!r}")
    return out


def clean_document(result) -> dict | None:
    """The JSON document of a cell's result object (None without one); what JSON cannot hold fails here, in the
    cell, not in the store.

    Parameters
    ----------
    result : Record or None
        The cell's result object.

    Returns
    -------
    dict or None
        Its plain data (:func:`to_plain`), checked to be writable as strict JSON.

    Raises
    ------
    ValueError
        When the document holds a non-finite float (``json.dumps`` with ``allow_nan=False``).
    TypeError
        When it holds something JSON cannot write.
    """
    if result is None:
        return None
    doc = to_plain(result)
    json.dumps(doc, allow_nan=False)
    return doc


def clean_arrays(arrays: Mapping) -> dict:
    """Arrays as nested lists of floats (nan kept), for JSON; a dict as its plain JSON data (nan and inf
    as None, see :func:`sim.core.jsonutil.jsonable`).

    Parameters
    ----------
    arrays : mapping of str to array_like or mapping
        A cell's small arrays as its kind returns them, by name.

    Returns
    -------
    dict
        Name (as str) -> nested lists of floats with the array's shape, or the mapping's plain data.

    Raises
    ------
    ValueError, TypeError
        When an array cannot be read as floats, or a mapping holds what JSON cannot write.
    """
    out = {}
    for k, v in arrays.items():
        if isinstance(v, Mapping):
            doc = jsonable(dict(v))
            json.dumps(doc, allow_nan=False)  # what JSON cannot hold fails in the cell, not in the store
            out[str(k)] = doc
            continue
        a = np.asarray(v, dtype=float)
        out[str(k)] = a.tolist()
    return out


# --------------------------------------------------------------------------------------------------
# Plugins: Python code the user names explicitly (it runs with the user's rights)
# --------------------------------------------------------------------------------------------------

_LOADED_FILES: dict[str, str] = {}
_ENTRY_POINTS_LOADED = False


def file_digest(path) -> str:
    """SHA-256 of a plugin file (hex).

    Parameters
    ----------
    path : str or path-like
        The plugin file.

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    return file_sha256(path)


def load_plugin_file(path, key: str = "plugins") -> dict:
    """Import a plugin module from a file (once per process). Returns ``{"path", "sha256"}``.

    A plugin registers strategies (:func:`strategies.register`) or kinds (:func:`register_kind`) when
    imported. This runs the file's code. The module is imported under the file's stem (the name a
    Dask worker gives it after ``Client.upload_file``); a module of that name imported already from a
    file with the same SHA-256 (as ``upload_file`` does on a Dask worker) is that plugin, loaded. A file
    that changed since this process loaded it is refused: the code running is the earlier one.

    Parameters
    ----------
    path : str or path-like
        The plugin file (a ``.py`` file whose stem is a valid module name).
    key : str
        Key path of the error (the flag or table that named the file).

    Returns
    -------
    dict
        ``path`` (as given), ``sha256`` (of the file) and ``module`` (the name it is imported under).

    Raises
    ------
    InputError
        ``key`` when the file is missing, not a ``.py`` file, changed since this process loaded it, has a name
        another module holds or that is not a module name, or fails on import.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError(key, f"no such file: {path}")
    if p.suffix != ".py":
        raise InputError(key, f"must be a Python file (.py), got {path}")
    real = str(p.resolve())
    digest = file_digest(p)
    name = p.stem
    if real in _LOADED_FILES:
        if _LOADED_FILES[real] != digest:
            raise InputError(key, f"{path} has changed since this process loaded it (SHA-256 "
                                  f"{_LOADED_FILES[real][:12]}... then, {digest[:12]}... now); start again")
        return {"path": str(path), "sha256": digest, "module": name}
    present = sys.modules.get(name)
    if present is not None and _module_digest(present) == digest:
        _LOADED_FILES[real] = digest
        return {"path": str(path), "sha256": digest, "module": name}
    if present is not None or not name.isidentifier():
        raise InputError(key, f"{path}: a plugin file needs a name of its own that is a valid module name (a module "
                              f"named {name!r} exists or the name is not valid); rename the file")
    spec = importlib.util.spec_from_file_location(name, real)
    if spec is None or spec.loader is None:  # pragma: no cover - a .py file always has a loader
        raise InputError(key, f"cannot import {path}")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    try:
        spec.loader.exec_module(mod)
    except InputError:
        raise
    except Exception as exc:
        sys.modules.pop(name, None)
        raise InputError(key, f"{path} failed on import: {type(exc).__name__}: {exc}") from None
    _LOADED_FILES[real] = digest
    return {"path": str(path), "sha256": digest, "module": name}


def _module_digest(module) -> str | None:
    """SHA-256 of the file a module was imported from (None without one)."""
    f = getattr(module, "__file__", None)
    try:
        return file_digest(f) if f and Path(f).is_file() else None
    except OSError:
        return None


def plugin_loaded(record: dict) -> bool:
    """Whether the plugin of a run's record (``path``, ``sha256``, ``module``) is imported in this
    process with that SHA-256.

    Parameters
    ----------
    record : dict
        A plugin's record as :func:`load_plugin_file` returns it.

    Returns
    -------
    bool
    """
    present = sys.modules.get(record.get("module") or "")
    return present is not None and _module_digest(present) == record.get("sha256")


def load_entry_points() -> list[str]:
    """Import the installed plugins (entry-point group ``supergame.plugins``), once per process.

    An entry point that loads a callable has it called (the plugin registers its strategies and kinds there).

    Returns
    -------
    list of str
        ``name = value`` of each entry point loaded, sorted by name; empty on every call after the first.
    """
    global _ENTRY_POINTS_LOADED
    if _ENTRY_POINTS_LOADED:
        return []
    _ENTRY_POINTS_LOADED = True

    names = []
    for ep in sorted(entry_points(group=ENTRY_POINT_GROUP), key=lambda e: e.name):
        obj = ep.load()
        if callable(obj):
            obj()
        names.append(f"{ep.name} = {ep.value}")
    return names


def load_plugins(files: Sequence = (), entry_points: bool = True) -> list[dict]:
    """Load plugin files (``--plugin``) and installed entry points; return what was loaded.

    Parameters
    ----------
    files : sequence of str or path-like
        Plugin files, loaded in order by :func:`load_plugin_file`.
    entry_points : bool
        Whether to import the installed plugins too.

    Returns
    -------
    list of dict
        One record per file (``path``, ``sha256``, ``module``), then ``{"entry_point": "name = value"}`` per
        entry point loaded for the first time.

    Raises
    ------
    InputError
        ``plugins`` when a file cannot be loaded (see :func:`load_plugin_file`).
    """
    out = [load_plugin_file(f) for f in files]
    if entry_points:
        out.extend({"entry_point": e} for e in load_entry_points())
    return out
