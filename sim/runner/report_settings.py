"""The ``[report]`` table of an experiment file: the title, the metrics of the summary table and the figures
asked for (``[[report.figures]]``), validated against the experiment's swept parameters."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from sim.core.errors import InputError
from sim.core.tables import refuse_unknown
from sim.core.values import canonical_path, is_real

__all__ = ["FIGURE_KEYS", "REPORT_KEYS", "FigureSpec", "ReportSettings", "figure_name", "parse_report"]

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}\Z")

REPORT_KEYS = ("title", "metrics", "figures")
#: keys of a ``[[report.figures]]`` entry
FIGURE_KEYS = {
    "type": "'heatmap' (a metric over two swept parameters) or 'line' (a metric against one)",
    "x": "swept parameter on the horizontal axis",
    "y": "heatmap: swept parameter on the vertical axis",
    "metric": "metric shown (colour of a heatmap, height of a line)",
    "threshold": "metric holding the analytic critical value of x (drawn as a curve over y, or a vertical line)",
    "analytic": "line plots: metric holding the analytic prediction of the metric (dashed)",
    "level": "heatmap: draw the contour where the metric equals this value (phase boundary)",
    "group": "line plots: swept parameter with one line per value",
    "facet": "swept parameter with one panel per value",
    "at": "table fixing other swept parameters at one of their values, e.g. { \"run.delta\" = 0.8 }",
    "title": "figure title",
    "name": "file name of the figure (without extension)",
}

@dataclass(frozen=True)
class FigureSpec:
    """One ``[[report.figures]]`` entry (validated); the keys are explained in :data:`FIGURE_KEYS`.

    Attributes
    ----------
    type : {"heatmap", "line"}
        The kind of figure.
    x : str
        Swept parameter (canonical path) on the horizontal axis.
    metric : str
        Metric shown: the colour of a heatmap, the height of a line.
    y : str or None
        Heatmaps: swept parameter on the vertical axis.
    threshold : str or None
        Metric holding the analytic critical value of ``x``.
    analytic : str or None
        Line plots: metric holding the analytic prediction (drawn dashed).
    level : float or None
        Heatmaps: the value of the metric whose contour is drawn.
    group : str or None
        Line plots: swept parameter with one line per value.
    facet : str or None
        Swept parameter with one panel per value.
    title : str or None
        Figure title.
    name : str or None
        File name of the figure, without extension (:func:`figure_name` chooses one when None).
    at : tuple of (str, str)
        (swept path, label of a value) pairs fixing the swept parameters the figure does not show.
    """

    type: str
    x: str
    metric: str
    y: str | None = None
    threshold: str | None = None
    analytic: str | None = None
    level: float | None = None
    group: str | None = None
    facet: str | None = None
    title: str | None = None
    name: str | None = None
    at: tuple = ()

    def fixed(self) -> dict:
        """Swept path -> label of the value the figure is drawn at.

        Returns
        -------
        dict of str to str
        """
        return dict(self.at)


@dataclass(frozen=True)
class ReportSettings:
    """The validated ``[report]`` table (:func:`parse_report`).

    Attributes
    ----------
    title : str or None
        Title of the report.
    metrics : tuple of str or None
        Metrics of the summary table, in order; None shows the kind's headline metrics.
    figures : tuple of FigureSpec
        The figures asked for, in the file's order.
    """

    title: str | None = None
    metrics: tuple | None = None
    figures: tuple = ()


def parse_report(table: Any, params: tuple, groups: tuple = ()) -> ReportSettings:
    """The validated ``[report]`` table.

    Parameters
    ----------
    table : dict
        The file's ``[report]`` table (empty when absent).
    params : tuple of Parameter
        The experiment's swept parameters (figures name their axes among them).
    groups : tuple of tuple of str
        Paths zipped together (the experiment's ``groups``): a group is one dimension of the sweep, shown by
        naming any one of its paths.

    Returns
    -------
    ReportSettings

    Raises
    ------
    InputError
        Naming the key path (``report.figures[2].x``) of what is wrong.
    """
    refuse_unknown(table, "report", REPORT_KEYS)
    title = table.get("title")
    if title is not None and not isinstance(title, str):
        raise InputError("report.title", f"must be a string, got {title!r}")
    metrics = table.get("metrics")
    if metrics is not None:
        if not isinstance(metrics, list) or not metrics or not all(isinstance(m, str) for m in metrics):
            raise InputError("report.metrics", f"must be a non-empty list of metric names, got {metrics!r}")
        metrics = tuple(metrics)
    figs = table.get("figures", [])
    if not isinstance(figs, list):
        raise InputError("report.figures", "must be an array of tables ([[report.figures]] entries)")
    swept = {p.path: p for p in params}
    group_of = {q: tuple(g) for g in groups for q in g}
    group_of.update({p.path: (p.path,) for p in params if p.path not in group_of})
    out = []
    names = set()
    for i, f in enumerate(figs):
        key = f"report.figures[{i + 1}]"
        refuse_unknown(f, key, FIGURE_KEYS)
        typ = f.get("type")
        if typ not in ("heatmap", "line"):
            raise InputError(f"{key}.type", f"must be one of 'heatmap', 'line', got {typ!r}")
        for k in ("x", "metric") + (("y",) if typ == "heatmap" else ()):
            if k not in f:
                raise InputError(f"{key}.{k}", f"missing ({FIGURE_KEYS[k]})")
        for k in f:
            if k not in ("type", "level", "at") and not isinstance(f[k], str):
                raise InputError(f"{key}.{k}", f"must be a string, got {f[k]!r}")
        axes = {}
        for k in ("x", "y", "group", "facet"):
            if k in f:
                cp = canonical_path(f[k], f"{key}.{k}")
                if cp not in swept:
                    raise InputError(f"{key}.{k}", f"{f[k]!r} is not a swept parameter; swept: "
                                                   f"{', '.join(swept) or 'none'}")
                axes[k] = cp
        if len(set(axes.values())) != len(axes):
            raise InputError(key, "x, y, group and facet must be different swept parameters")
        dims = {k: group_of[v] for k, v in axes.items()}
        if len(set(dims.values())) != len(dims):
            a, b = [k for k in dims if list(dims.values()).count(dims[k]) > 1][:2]
            raise InputError(f"{key}.{b}", f"{axes[b]} varies together with {axes[a]} ({a}) in a zip group: "
                                           "one of them shows both")
        _check_axes(f, key, typ, swept, axes)
        level = f.get("level")
        if level is not None and (not is_real(level) or not math.isfinite(float(level))):
            raise InputError(f"{key}.level", f"must be a finite number, got {level!r}")
        at = _parse_at(f.get("at", {}), key, swept, axes)
        for p, _ in at:
            if group_of[p] in {group_of[q] for q in axes.values()}:
                raise InputError(f"{key}.at.{p}", f"{p} varies together with an axis, group or facet of this figure "
                                                  "in a zip group")
        shown = {group_of[q] for q in [*axes.values(), *(p for p, _ in at)]}
        rest = [p for p in params if group_of[p.path] not in shown and group_of[p.path][0] == p.path and len(p) > 1]
        if rest:
            p = rest[0]
            raise InputError(key, f"the sweep also varies {p.path} ({len(p)} values); name it as "
                                  f"{'group or facet' if typ == 'line' else 'facet'} of this figure, or fix it with "
                                  f"at = {{ \"{p.path}\" = ... }}")
        name = f.get("name")
        if name is not None and not _NAME_RE.match(name):
            raise InputError(f"{key}.name", f"must be letters, digits, '.', '_' or '-', got {name!r}")
        spec = FigureSpec(type=typ, x=axes["x"], y=axes.get("y"), metric=f["metric"], threshold=f.get("threshold"),
                          analytic=f.get("analytic"), level=None if level is None else float(level),
                          group=axes.get("group"), facet=axes.get("facet"), title=f.get("title"), name=name,
                          at=tuple(at))
        fname = figure_name(spec, i)
        if fname in names:
            raise InputError(f"{key}.name", f"another figure is already called {fname!r}")
        names.add(fname)
        out.append(spec)
    return ReportSettings(title=title, metrics=metrics, figures=tuple(out))


def _check_axes(f: dict, key: str, typ: str, swept: dict, axes: dict) -> None:
    """Axes that take numbers, and the keys of the other figure type refused."""
    if not swept[axes["x"]].numeric:
        raise InputError(f"{key}.x", f"{axes['x']} must take numbers to be an axis; use it as group or facet")
    if typ == "heatmap":
        if not swept[axes["y"]].numeric:
            raise InputError(f"{key}.y", f"{axes['y']} must take numbers to be an axis; use it as facet")
        if "group" in f:
            raise InputError(f"{key}.group", "is for line plots; a heatmap takes facet")
        if "analytic" in f:
            raise InputError(f"{key}.analytic", "is for line plots; a heatmap takes threshold and level")
    else:
        if "level" in f:
            raise InputError(f"{key}.level", "is for heatmaps")


def _flatten_at(t: dict, prefix: str = "") -> list:
    out = []
    for k, v in t.items():
        path = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict) and v and "strategy" not in v:
            out.extend(_flatten_at(v, path))
        else:
            out.append((path, v))
    return out


def figure_name(spec: FigureSpec, index: int) -> str:
    """The file name of a figure (without extension): its ``name``, or one made from its number, type, metric
    and axes (``02-heatmap-profit_gain-run.delta-market.n``).

    Parameters
    ----------
    spec : FigureSpec
        The figure.
    index : int
        Its position among the ``[[report.figures]]`` entries, counted from 0.

    Returns
    -------
    str
        Letters, digits, ``.``, ``_`` and ``-`` only.
    """
    if spec.name:
        return spec.name
    base = f"{spec.type}-{spec.metric}-{spec.x}" + (f"-{spec.y}" if spec.y else "")
    return f"{index + 1:02d}-" + re.sub(r"[^A-Za-z0-9._-]+", "_", base)


# --------------------------------------------------------------------------------------------------
# Experiments
# --------------------------------------------------------------------------------------------------


def _parse_at(at_t, key: str, swept: dict, axes: dict) -> list:
    """The ``at`` table of a figure: (path, label) pairs fixing the swept parameters it does not show."""
    at = []
    if not isinstance(at_t, dict):
        raise InputError(f"{key}.at", f"must be a table of swept parameters and values, got {at_t!r}")
    for raw, v in _flatten_at(at_t):
        cp = canonical_path(raw, f"{key}.at")
        if cp not in swept:
            raise InputError(f"{key}.at.{raw}", f"{raw!r} is not a swept parameter; swept: {', '.join(swept)}")
        if cp in axes.values():
            raise InputError(f"{key}.at.{raw}", f"{cp} is already an axis, group or facet of this figure")
        p = swept[cp]
        match = [lab for val, lab in zip(p.values, p.labels) if val == v or lab == v]
        if not match:
            raise InputError(f"{key}.at.{raw}", f"must be one of the swept values ({', '.join(p.labels)}), got "
                                                f"{v!r}")
        at.append((cp, match[0]))
    return at
