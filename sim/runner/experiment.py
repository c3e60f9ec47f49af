"""Experiment files: one schema for every kind of run, sweeps over any parameter, validated up front.

An experiment file is TOML data (:func:`sim.core.tomlfile.read_toml`); nothing in it is ever executed. Its
tables:

``[experiment]``
    ``name`` (run-folder names; letters, digits, ``.``, ``_``, ``-``), ``kind`` (``thresholds``,
    ``simulate``, ``learn``, and the kinds other components register, see :mod:`sim.runner.kinds`),
    ``description`` (free text for the report).
the kind's own tables
    ``[market]``, ``[collusion]``, ``[monitoring]``, ``[[strategies]]``, ``[run]``, ``[learning]``,
    ``[[entrants]]``, ... -- each kind names the tables it reads and validates them with the
    component's own validators (unknown keys refused).
``[sweep]``
    Parameter paths and their values. A path names a key of the file, with list entries counted from
    1 as in error messages: ``run.delta``, ``monitoring.sigma``, ``strategies.1.length``,
    ``market.cost.3``, ``strategies.1`` (a whole entry). Values are a list, or a range table:
    ``{ start = 0.5, stop = 0.95, num = 10 }`` (evenly spaced, both ends included),
    ``{ start = 1, stop = 10, step = 3 }``, ``{ start = 0.001, stop = 0.1, num = 5, log = true }``
    (evenly spaced logarithms) or ``{ values = [...], labels = [...] }`` (labels shown in tables and
    figures). Paths may be written quoted (``"run.delta" = [...]``) or as nested keys
    (``run.delta = [...]``, or ``[sweep.run] delta = [...]``). ``mode = "grid"`` (default: every
    combination) or ``"zip"`` (the i-th values together; equal lengths); ``zip = [["a", "b"]]`` ties
    some paths together inside a grid.
``[report]``
    ``title``, ``metrics`` (the columns of the summary table) and ``[[report.figures]]`` (see
    :data:`FIGURE_KEYS`).

Every cell is built from the file by setting its swept values and validated by the kind before any
work starts (:func:`experiment_from_dict`). Cells are numbered in grid order, the first path varying
slowest, from 1 in everything users see (exports, tables, messages, ``supergame verify --cells``); a
cell's random streams come from the experiment seed and its position counted from 0, ``index``
(``SeedSequence(seed, spawn_key=(index,))``: cell 1 has the key ``(0,)``, the key of a file without a
sweep), so results do not depend on the order in which cells run, on the number of workers or on the
backend.
"""

from __future__ import annotations

import copy
import functools
import hashlib
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.core.tomlfile import read_toml
from sim.core.values import (
    MAX_VALUES,
    canonical_path,
    is_range_spec,
    is_real,
    parse_values,
    value_label,
)
from sim.runner.cost import check_cell_cost
from sim.runner.kinds import get_kind, known_kinds
from sim.runner.report_settings import FIGURE_KEYS, FigureSpec, ReportSettings, parse_report

__all__ = [
    "FIGURE_KEYS",
    "MAX_CELLS",
    "Cell",
    "Experiment",
    "FigureSpec",
    "Parameter",
    "ReportSettings",
    "canonical_path",
    "experiment_from_dict",
    "load_experiment",
    "parse_values",
    "value_label",
]

#: the largest sweep accepted (cells)
MAX_CELLS = MAX_VALUES
#: keys of an ``[experiment]`` table
EXPERIMENT_KEYS = ("name", "kind", "description", "currency", "period")
#: tables every experiment may have, whatever its kind
COMMON_TABLES = ("experiment", "sweep", "report")
_SWEEP_RESERVED = ("mode", "zip")
_UNIT_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 ./-]{0,23}\Z")
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}\Z")


# --------------------------------------------------------------------------------------------------
# Sweep parameters
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Parameter:
    """One swept parameter.

    Attributes
    ----------
    path : str
        Canonical dotted path, e.g. ``strategies.1.length``.
    values : tuple
        The values, as plain TOML data.
    labels : tuple of str
        Display labels, one per value.
    log : bool
        The values come from a logarithmic range (figures use a log axis).
    """

    path: str
    values: tuple
    labels: tuple
    log: bool = False

    @property
    def segments(self) -> tuple:
        """The path's keys, split at the dots (``("strategies", "1", "length")``)."""
        return tuple(self.path.split("."))

    @functools.cached_property
    def numeric(self) -> bool:
        """Whether every value is a number (computed once: reports ask it for every row)."""
        return all(is_real(v) for v in self.values)

    def __len__(self) -> int:
        return len(self.values)


def _flatten_sweep(table: dict, prefix: str = "") -> list[tuple[str, Any]]:
    """(path, spec) pairs of a [sweep] table, accepting quoted dotted keys and nested tables."""
    out = []
    for k, v in table.items():
        if not prefix and k in _SWEEP_RESERVED:
            continue
        path = f"{prefix}.{k}" if prefix else k
        if isinstance(v, list):
            out.append((path, v))
        elif isinstance(v, dict):
            if is_range_spec(v):
                out.append((path, v))
            elif not v:
                raise InputError(f"sweep.{path}", "is an empty table; give a list of values or a range")
            else:
                out.extend(_flatten_sweep(v, path))
        else:
            raise InputError(f"sweep.{path}", f"must be a list of values or a range table {{ start, stop, num }}, "
                                              f"got {v!r}")
    return out


def _parse_sweep(table: Any) -> tuple[tuple[Parameter, ...], tuple[tuple[str, ...], ...], str]:
    if not isinstance(table, dict):
        raise InputError("sweep", f"must be a table, got {table!r}")
    mode = table.get("mode", "grid")
    if mode not in ("grid", "zip"):
        raise InputError("sweep.mode", f"must be one of 'grid', 'zip', got {mode!r}")
    params: list[Parameter] = []
    seen: dict[str, str] = {}
    for raw, spec in _flatten_sweep(table):
        key = f"sweep.{raw}"
        path = canonical_path(raw, key)
        if path in seen:
            raise InputError(key, f"the same parameter is swept twice (also as {seen[path]!r})")
        seen[path] = raw
        vals, labels, log = parse_values(spec, key)
        params.append(Parameter(path, tuple(vals), tuple(labels), log))
    if not params:
        raise InputError("sweep", "names no parameter; give e.g. \"run.delta\" = [0.8, 0.9]")
    if mode == "zip":
        if "zip" in table:
            raise InputError("sweep.zip", "zip groups are for mode = 'grid' (mode = 'zip' ties every path already)")
        groups = [tuple(p.path for p in params)]
    else:
        groups = []
        used = set()
        zt = table.get("zip", [])
        if not isinstance(zt, list) or not all(isinstance(g, list) for g in zt):
            raise InputError("sweep.zip", f"must be a list of lists of parameter paths, got {zt!r}")
        zipped = {}
        for gi, g in enumerate(zt):
            if len(g) < 2:
                raise InputError(f"sweep.zip[{gi + 1}]", f"must name at least two parameter paths, got {g!r}")
            paths = []
            for p in g:
                cp = canonical_path(p, f"sweep.zip[{gi + 1}]")
                if cp not in seen:
                    raise InputError(f"sweep.zip[{gi + 1}]", f"{p!r} is not a swept parameter; swept: "
                                                             f"{', '.join(seen)}")
                if cp in used:
                    raise InputError(f"sweep.zip[{gi + 1}]", f"{p!r} is in two zip groups")
                used.add(cp)
                paths.append(cp)
            for cp in paths:
                zipped[cp] = gi
        done = set()
        for p in params:
            if p.path in zipped:
                gi = zipped[p.path]
                if gi not in done:
                    done.add(gi)
                    groups.append(tuple(canonical_path(x) for x in zt[gi]))
            else:
                groups.append((p.path,))
    by_path = {p.path: p for p in params}
    for g in groups:
        lens = {len(by_path[p]) for p in g}
        if len(lens) > 1:
            desc = ", ".join(f"{p} has {len(by_path[p])}" for p in g)
            key = "sweep.mode" if mode == "zip" else "sweep.zip"
            raise InputError(key, f"zipped parameters need the same number of values: {desc}")
    n = 1
    for g in groups:
        n *= len(by_path[g[0]])
    if n > MAX_CELLS:
        raise InputError("sweep", f"has {n} cells, more than {MAX_CELLS}; sweep fewer values")
    return tuple(params), tuple(groups), mode


def _set_path(doc: dict, path: str, value: Any, tables: tuple[str, ...]) -> None:
    """Set ``path`` in ``doc`` (list entries counted from 1), creating missing tables on the way."""
    segs = path.split(".")
    key = f"sweep.{path}"
    if segs[0] not in tables:
        raise InputError(key, f"does not exist: {segs[0]!r} is not a table of this experiment's kind; tables: "
                              f"{', '.join(tables)}")
    if len(segs) == 1:
        doc[segs[0]] = copy.deepcopy(value)
        return
    cur: Any = doc
    for depth, s in enumerate(segs):
        last = depth == len(segs) - 1
        where = ".".join(segs[:depth]) or "the file"
        if isinstance(cur, list):
            if not s.isdigit() or not 1 <= int(s) <= len(cur):
                raise InputError(key, f"does not exist: {where} has {len(cur)} entr{'y' if len(cur) == 1 else 'ies'} "
                                      f"(counted from 1), got {s!r}")
            if last:
                cur[int(s) - 1] = copy.deepcopy(value)
                return
            cur = cur[int(s) - 1]
        elif isinstance(cur, dict):
            if last:
                cur[s] = copy.deepcopy(value)
                return
            if s not in cur:
                if s.isdigit():
                    raise InputError(key, f"does not exist: {'.'.join(segs[:depth + 1])} is not in the file")
                cur[s] = {}
            cur = cur[s]
        else:
            raise InputError(key, f"does not exist: {where} is a value ({cur!r}), not a table or a list")


# --------------------------------------------------------------------------------------------------
# Report settings
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Cell:
    """One cell of an experiment: its number, swept values and complete document.

    Attributes
    ----------
    index : int
        Position in grid order counted from 0 (0 for an experiment without a sweep); the cell's stream
        key is ``(index,)``. Users see the cell as number ``index + 1`` (:attr:`number`).
    values : dict of str to Any
        Swept path -> value.
    labels : dict of str to str
        Swept path -> display label.
    doc : dict
        The experiment's tables with the swept values set (``[sweep]`` and ``[report]`` removed).
    """

    index: int
    values: dict
    labels: dict
    doc: dict

    @property
    def number(self) -> int:
        """The cell's number in exports and messages (counted from 1, like firms, seats and list entries)."""
        return self.index + 1

    def describe(self) -> str:
        """The cell for messages: ``cell 3 (run.delta = 0.9, market.n = 2)``, or ``cell 1`` without a sweep.

        Returns
        -------
        str
        """
        if not self.values:
            return f"cell {self.number}"
        return f"cell {self.number} (" + ", ".join(f"{p} = {self.labels[p]}" for p in self.values) + ")"


@dataclass(frozen=True)
class Experiment:
    """A validated experiment file.

    Attributes
    ----------
    name, kind, description : str
    doc : dict
        The kind's tables as given (no ``[sweep]``/``[report]``).
    parameters : tuple of Parameter
        Swept parameters (empty: one cell).
    groups : tuple of tuple of str
        Paths varying together, in grid order.
    mode : str
        ``"grid"`` (every combination) or ``"zip"`` (values taken together).
    report : ReportSettings
    text : str or None
        The file's text (what the run folder keeps and hashes).
    sha256 : str or None
    source : str or None
        Where the file was read from.
    metric_names : tuple of str
        Metrics a cell reports (from the kind, for the first cell).
    cost : dict or None
        The estimated cost of the run (:mod:`sim.runner.cost`): ``cell_memory``, ``work``, ``unit``, ``seconds``.
    """

    name: str
    kind: str
    description: str
    doc: dict
    parameters: tuple
    groups: tuple
    mode: str
    report: ReportSettings
    text: str | None = None
    sha256: str | None = None
    source: str | None = None
    metric_names: tuple = field(default=())
    cost: dict | None = None

    @property
    def n_cells(self) -> int:
        """The number of cells of the sweep (1 without one)."""
        by = {p.path: p for p in self.parameters}
        n = 1
        for g in self.groups:
            n *= len(by[g[0]])
        return n

    @property
    def is_sweep(self) -> bool:
        """Whether the experiment sweeps a parameter."""
        return bool(self.parameters)

    def parameter(self, path: str) -> Parameter:
        """The swept parameter at ``path``.

        Parameters
        ----------
        path : str

        Returns
        -------
        Parameter
        """
        for p in self.parameters:
            if p.path == path:
                return p
        raise KeyError(path)

    def kind_spec(self):

        """The experiment's kind.

        Returns
        -------
        sim.runner.kinds.Kind
        """
        return get_kind(self.kind)

    def positions(self, index: int) -> dict:
        """Swept path -> index of its value in cell ``index``.

        Parameters
        ----------
        index : int
            Counted from 0.

        Returns
        -------
        dict
        """
        by = {p.path: p for p in self.parameters}
        sizes = [len(by[g[0]]) for g in self.groups]
        out = {}
        rem = index
        for g, size in zip(reversed(self.groups), reversed(sizes)):
            k = rem % size
            rem //= size
            for p in g:
                out[p] = k
        return {p.path: out[p.path] for p in self.parameters}

    def cell(self, index: int) -> Cell:
        """Cell ``index`` with its complete document.

        Parameters
        ----------
        index : int
            0 .. n_cells - 1.

        Returns
        -------
        Cell
        """
        if not 0 <= index < self.n_cells:
            raise IndexError(index)
        pos = self.positions(index)
        doc = copy.deepcopy(self.doc)
        tables = self.kind_spec().tables
        values, labels = {}, {}
        for p in self.parameters:
            v = p.values[pos[p.path]]
            _set_path(doc, p.path, v, tables)
            values[p.path] = v
            labels[p.path] = p.labels[pos[p.path]]
        return Cell(index, values, labels, doc)

    def cells(self) -> Iterator[Cell]:
        """Every cell in order.

        Yields
        ------
        Cell
        """
        for i in range(self.n_cells):
            yield self.cell(i)

    def seed(self, doc: dict | None = None) -> int | None:
        """The experiment seed (the kind's seed key, e.g. ``run.seed``) of the file or of a cell's document.

        Parameters
        ----------
        doc : dict, optional
            A cell's document (default: the file's).

        Returns
        -------
        int or None
            None for a deterministic kind.
        """
        return self.kind_spec().seed_of(self.doc if doc is None else doc)


def _experiment_table(doc: dict, default_name: str | None) -> tuple[str, str, str]:

    exp = doc.get("experiment")
    if exp is None:
        raise InputError("experiment", f"missing: an experiment file starts with an [experiment] table giving its "
                                       f"kind ({', '.join(known_kinds())})")
    refuse_unknown(exp, "experiment", EXPERIMENT_KEYS)
    if "kind" not in exp:
        raise InputError("experiment.kind", f"missing; one of {', '.join(map(repr, known_kinds()))}")
    kind = exp["kind"]
    name = exp.get("name", default_name)
    if name is None:
        raise InputError("experiment.name", "missing (used to name run folders)")
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise InputError("experiment.name", f"must be 1 to 64 letters, digits, '.', '_' or '-' (starting with a "
                                            f"letter or digit), got {name!r}")
    desc = exp.get("description", "")
    if not isinstance(desc, str):
        raise InputError("experiment.description", f"must be a string, got {desc!r}")
    for unit in ("currency", "period"):
        v = exp.get(unit)
        if v is not None and not (isinstance(v, str) and _UNIT_RE.match(v)):
            raise InputError(f"experiment.{unit}", f"must be a short word such as 'EUR' or 'month' (1 to 24 letters, "
                                                   f"digits, spaces, '.', '-' or '/'), got {v!r}")
    return name, kind, desc


_MISSING = object()


def _lookup(doc: Any, path: str) -> Any:
    """What ``path`` (list entries counted from 1) holds in ``doc``, or ``_MISSING``."""
    cur = doc
    for s in path.split("."):
        if isinstance(cur, dict) and s in cur:
            cur = cur[s]
        elif isinstance(cur, list) and s.isdigit() and 1 <= int(s) <= len(cur):
            cur = cur[int(s) - 1]
        else:
            return _MISSING
    return cur


def _sweep_error(exc: InputError, cell: Cell, swept: set, base: dict) -> InputError:
    """Name the swept parameter behind a cell's validation error where there is one.

    An error about a table or list that holds the swept path (the line-up, when a swept number of seats
    does not fit the market) is about the cell's value; only when the file has a plain value there, and
    the sweep had to make a table of it, does the path not exist."""
    key = canonical_path(exc.key) if exc.key else ""
    for p in sorted(swept, key=len, reverse=True):
        if key == p or key.startswith(p + "."):
            if "unknown" in exc.message and key == p:
                return InputError(f"sweep.{p}", f"does not exist: {exc.key}: {exc.message}")
            return InputError(f"sweep.{p}", f"{cell.describe()}: {exc.key} {exc.message}")
        if key and p.startswith(key + "."):
            if isinstance(_lookup(base, key), dict | list):
                return InputError(f"sweep.{p}", f"{cell.describe()}: {exc.key}: {exc.message}")
            return InputError(f"sweep.{p}", f"does not exist: {exc.key} is a value, not a table ({exc.message})")
    where = f"{exc.key}: " if exc.key else ""
    return InputError("sweep", f"{cell.describe()}: {where}{exc.message}")


def experiment_from_dict(doc: dict, *, text: str | None = None, source: str | None = None,
                         default_name: str | None = None, check_cells: bool = True) -> Experiment:
    """Validate an experiment document (a parsed TOML file) and every cell of its sweep, and estimate its cost.

    Raises :class:`InputError` naming the key path, the allowed values and what was given, before any work starts.

    Parameters
    ----------
    doc : dict
    text : str, optional
        The file's text (kept and hashed by run folders).
    source : str, optional
        Where it was read from.
    default_name : str, optional
        The name when ``[experiment]`` gives none.
    check_cells : bool
        Validate every cell (else only the first; the others are taken to cost what it does).

    Returns
    -------
    Experiment
    """

    if not isinstance(doc, dict):
        raise InputError("", "an experiment must be a table")
    name, kind_name, desc = _experiment_table(doc, default_name)
    kind = get_kind(kind_name, key="experiment.kind")
    allowed = COMMON_TABLES + tuple(kind.tables)
    for k in doc:
        if k not in allowed:
            raise InputError(k, f"unknown table for kind {kind_name!r}; allowed: {', '.join(allowed)}")
    base = {k: copy.deepcopy(v) for k, v in doc.items() if k not in ("sweep", "report")}
    if "sweep" in doc:
        params, groups, mode = _parse_sweep(doc["sweep"])
    else:
        params, groups, mode = (), (), "grid"
    report = parse_report(doc.get("report", {}), params, groups)
    exp = Experiment(name, kind_name, desc, base, params, groups, mode, report, text,
                     hashlib.sha256(text.encode("utf-8")).hexdigest() if text is not None else None, source)
    swept = {p.path for p in params}
    # the file without its sweep: an error that every cell shares is the file's own, reported plainly
    base_error = None
    if params:
        try:
            kind.prepare(copy.deepcopy(base))
        except InputError as exc:
            base_error = exc
    first = None
    n = exp.n_cells if check_cells else 1
    total = {"memory": 0.0, "work": 0.0, "seconds": 0.0, "unit": ""}
    for i in range(n):
        cell = exp.cell(i)
        try:
            prepared = kind.prepare(cell.doc)
        except InputError as exc:
            if not params:
                raise
            if base_error is not None and (exc.key, exc.message) == (base_error.key, base_error.message):
                raise base_error from None
            raise _sweep_error(exc, cell, swept, base) from None
        c = check_cell_cost(kind, prepared, f" ({cell.describe()})" if params else "")
        if c is not None:
            total = {"memory": max(total["memory"], c.memory), "work": total["work"] + c.work,
                     "seconds": total["seconds"] + c.seconds, "unit": c.unit}
        if first is None:
            first = prepared
    if base_error is not None and base_error.key and canonical_path(base_error.key) in swept \
            and _lookup(base, canonical_path(base_error.key)) is not _MISSING:
        # the whole file is validated: a value that the sweep replaces in every cell must be valid too
        raise InputError(base_error.key, f"{base_error.message} (the file's own value, which [sweep] replaces "
                                         "in every cell; give a valid one or leave it out)") from None
    names = tuple(kind.metric_names(first)) if kind.metric_names is not None else ()
    cost = None
    if kind.cost is not None:
        scale = exp.n_cells / n  # the cells not validated are taken to cost what the first did
        cost = {"cell_memory": total["memory"], "work": total["work"] * scale, "unit": total["unit"],
                "seconds": total["seconds"] * scale, "estimated_from": n}
    exp = Experiment(**{**exp.__dict__, "metric_names": names, "cost": cost})
    _check_report_metrics(exp, kind)
    return exp


def _check_report_metrics(exp: Experiment, kind) -> None:
    names = set(exp.metric_names)
    if not names:
        return
    hint = ", ".join(exp.metric_names[:12]) + (", ..." if len(exp.metric_names) > 12 else "")

    def check(key, m):
        if m not in names:
            raise InputError(key, f"{m!r} is not a metric of kind {exp.kind!r}; metrics: {hint}")

    for j, m in enumerate(exp.report.metrics or ()):
        check(f"report.metrics[{j + 1}]", m)
    for i, f in enumerate(exp.report.figures):
        key = f"report.figures[{i + 1}]"
        check(f"{key}.metric", f.metric)
        if f.threshold:
            check(f"{key}.threshold", f.threshold)
        if f.analytic:
            check(f"{key}.analytic", f.analytic)


def leading_comment(text: str) -> str:
    """The comment block at the top of an experiment file (what it shows), without the ``#`` marks.

    Parameters
    ----------
    text : str
        The experiment file's text.

    Returns
    -------
    str
        The comment lines before the first line of TOML, one space after each ``#`` removed, blank lines inside
        the block kept; empty when the file does not start with a comment.
    """
    lines = []
    for line in text.splitlines():
        s = line.strip()
        if s.startswith("#"):
            lines.append(s[1:][1:] if s[1:].startswith(" ") else s[1:])
        elif not s and lines:
            lines.append("")
        elif not s:
            continue
        else:
            break
    return "\n".join(lines).strip()


def load_experiment(path, check_cells: bool = True) -> Experiment:
    """Read and validate an experiment file (see :func:`experiment_from_dict`).

    Parameters
    ----------
    path : path-like
    check_cells : bool

    Returns
    -------
    Experiment
    """

    p = Path(path)
    doc = read_toml(p)
    text = p.read_bytes().decode("utf-8")
    return experiment_from_dict(doc, text=text, source=str(path), default_name=_default_name(p),
                                check_cells=check_cells)


def _default_name(p: Path) -> str | None:
    stem = re.sub(r"[^A-Za-z0-9._-]+", "-", p.stem).strip("-.")[:64]
    return stem or None
