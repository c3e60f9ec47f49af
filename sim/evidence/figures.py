"""Figures of a sweep: heatmaps (phase diagrams) over two swept parameters and lines against one.

Both read the stored results only (:class:`SweepData`), never recompute. matplotlib is imported on
first use with the Agg backend (no display needed).

* :func:`heatmap` -- a metric over two swept parameters, one panel per value of a ``facet`` parameter;
  optionally the analytic critical value of the x parameter as a curve over y (``threshold``; for
  example the critical discount factor, drawn over the noise levels) and the contour where the
  simulated metric crosses ``level`` (the simulated phase boundary). Metrics that take both signs use
  a diverging colour map centred on zero.
* :func:`lines` -- a metric against one swept parameter, one line per value of ``group``, with its
  confidence band (``metric.low`` to ``metric.high`` when the cells report them) and the analytic
  prediction (``analytic``) dashed in the same colour.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from sim.evidence.catalogue import describe, describe_parameter

__all__ = [
    "PAGE_WIDTH",
    "PALETTE",
    "SweepData",
    "color",
    "fit_legend",
    "heatmap",
    "lines",
    "metric_axis",
    "metric_label",
    "number_format",
]


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


@dataclass
class SweepData:
    """Stored results arranged by swept values.

    Parameters zipped together (``[sweep] zip``, or ``mode = "zip"``) form one dimension: a cell is found by the
    position of its group's values, so fixing any path of a group (its lead, the first path named, or a partner)
    fixes the whole group.

    Attributes
    ----------
    parameters : list of Parameter
    rows : list of CellRow
    units : tuple of (str or None, str or None)
        The experiment's currency and period (labels of money).
    groups : tuple of tuple of str
        Paths varying together, the lead first (the experiment's ``groups``); empty: every path alone.
    """

    parameters: list
    rows: list
    units: tuple = field(default=(None, None))
    groups: tuple = field(default=())

    def __post_init__(self):
        self.by_path = {p.path: p for p in self.parameters}
        known = {q for g in self.groups for q in g}
        self.groups = tuple(tuple(g) for g in self.groups) + tuple(
            (p.path,) for p in self.parameters if p.path not in known)
        self.lead = {q: g[0] for g in self.groups for q in g}
        # label -> position per path (the first position, as ``tuple.index`` gives): a lookup per cell stays O(1)
        self.position = {}
        for p in self.parameters:
            pos: dict = {}
            for i, lab in enumerate(p.labels):
                pos.setdefault(lab, i)
            self.position[p.path] = pos
        self.index = {}
        for r in self.rows:
            if r.status != "ok":
                continue
            self.index[self._key(r.labels)] = r.metrics

    def _key(self, labels: dict):
        # one position per group, read from the first of its paths that ``labels`` names
        key = []
        for g in self.groups:
            path = next((q for q in g if q in labels), None)
            if path is None:
                return None
            i = self.position[path].get(labels[path])
            if i is None:
                return None
            key.append(i)
        return tuple(key)

    def value(self, fixed: dict, metric: str) -> float:
        """The metric of the cell whose swept values have labels ``fixed`` (path -> label); nan if none.

        Parameters
        ----------
        fixed : dict
        metric : str

        Returns
        -------
        float
        """
        m = self.index.get(self._key(fixed))
        return math.nan if m is None else float(m.get(metric, math.nan))

    def has(self, metric: str) -> bool:
        """Whether any cell has the metric.

        Parameters
        ----------
        metric : str

        Returns
        -------
        bool
        """
        return any(metric in m for m in self.index.values())

    def partners(self, path: str) -> tuple:
        """The paths zipped with ``path`` (``path`` itself included, the lead first).

        Parameters
        ----------
        path : str

        Returns
        -------
        tuple of str
        """
        return next(g for g in self.groups if path in g)

    def fixed_labels(self, exclude, at: dict | None = None) -> dict:
        """Labels fixing the groups with no path in ``exclude``: a path given in ``at`` (path -> label) fixes its
        group, the others take their first value.

        Parameters
        ----------
        exclude : collection of str
            Paths left out (with every path zipped to them).
        at : dict, optional

        Returns
        -------
        dict
        """
        at = at or {}
        out = {}
        for g in self.groups:
            if any(q in exclude for q in g):
                continue
            given = next((q for q in g if q in at), None)
            if given is not None:
                out[given] = at[given]
            else:
                out[g[0]] = self.by_path[g[0]].labels[0]
        return out


def _axis_values(p) -> np.ndarray:
    return np.array([float(v) for v in p.values])


def _even(x: np.ndarray, log: bool) -> bool:
    """Whether sorted values are evenly spaced (on a log scale for log ranges)."""
    if x.size < 3:
        return True
    if log:
        if np.any(x <= 0):
            return False
        x = np.log(x)
    d = np.diff(x)
    return bool(np.allclose(d, d[0], rtol=1e-6, atol=0))


def _positions(x: np.ndarray, log: bool) -> tuple[np.ndarray, bool]:
    """Plot positions of sorted axis values: the values themselves when evenly spaced, else 0, 1, 2, ...
    (equal cells, ticks labelled with the values)."""
    if _even(x, log):
        return x, False
    return np.arange(x.size, dtype=float), True


def _to_position(v: float, x: np.ndarray, pos: np.ndarray) -> float:
    """Position of value ``v`` on an axis whose values ``x`` sit at ``pos`` (linear between them)."""
    if x.size == 1:
        return float(pos[0])
    if v <= x[0]:
        return float(pos[0] + (v - x[0]) / (x[1] - x[0]) * (pos[1] - pos[0]))
    if v >= x[-1]:
        return float(pos[-1] + (v - x[-1]) / (x[-1] - x[-2]) * (pos[-1] - pos[-2]))
    return float(np.interp(v, x, pos))


def _edges(x: np.ndarray, log: bool) -> np.ndarray:
    if x.size == 1:
        return np.array([x[0] * 0.9, x[0] * 1.1]) if log else np.array([x[0] - 0.5, x[0] + 0.5])
    if log:
        lx = np.log(x)
        mid = (lx[1:] + lx[:-1]) / 2
        return np.exp(np.concatenate([[lx[0] - (mid[0] - lx[0])], mid, [lx[-1] + (lx[-1] - mid[-1])]]))
    mid = (x[1:] + x[:-1]) / 2
    return np.concatenate([[x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]])


def _panels(n: int):
    cols = min(n, 3)
    rows = (n + cols - 1) // cols
    return rows, cols


#: width of a figure at the printed width of an A4 page's text column (16 cm), in inches
PAGE_WIDTH = 6.3
#: font sizes (points) at that width: nothing is smaller than 8 pt on paper
FONT, SMALL = 9.0, 8.0
#: a palette that colour-blind readers tell apart and that shows in print: the colours of Okabe and Ito (2008, "Color
#: Universal Design") with a contrast of at least 3:1 against white paper (the graphics threshold of WCAG 2.1,
#: success criterion 1.4.11, W3C 2018); their orange, sky blue and yellow, which do not, replaced by the wine and
#: olive of Tol's muted scheme (P. Tol, "Colour Schemes", SRON technical note SRON/EPS/TN/09-002) and a mid grey
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#000000", "#882255", "#999933", "#6E6E6E")


def color(k: int) -> str:
    """The ``k``-th colour of :data:`PALETTE` (cycling).

    Parameters
    ----------
    k : int

    Returns
    -------
    str
    """
    return PALETTE[k % len(PALETTE)]


def _label(path: str, data: SweepData | None = None) -> str:
    try:
        return describe_parameter(path, *(data.units if data is not None else (None, None))).axis
    except KeyError:
        return path


def metric_axis(metric: str, data: SweepData | None = None) -> str:
    """A metric's axis label from the evidence catalogue (label and unit; the stored name when it has no entry).

    Parameters
    ----------
    metric : str
    data : SweepData, optional
        Gives the currency and period.

    Returns
    -------
    str
    """
    try:
        return describe(metric, *(data.units if data is not None else (None, None))).axis
    except KeyError:
        return metric


def metric_label(metric: str, data: SweepData | None = None) -> str:
    """A metric's label without its unit.

    Parameters
    ----------
    metric : str
    data : SweepData, optional

    Returns
    -------
    str
    """
    try:
        return describe(metric, *(data.units if data is not None else (None, None))).label
    except KeyError:
        return metric


def number_format(values) -> Callable[[float], str]:
    """One format for every number of a figure: three significant digits at the scale of the largest, with
    thousands separators.

    Parameters
    ----------
    values : array_like

    Returns
    -------
    callable
        ``fmt(x) -> str``.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    big = float(np.max(np.abs(v))) if v.size else 1.0
    if big == 0:
        return lambda x: "0"
    decimals = max(0, 2 - math.floor(math.log10(big)))
    return lambda x: f"{x:,.{decimals}f}"


def text_color(rgba) -> str:
    """The colour of text that reads best on a cell of colour ``rgba``: black on light cells, white on dark ones
    (relative luminance and its contrast threshold, W3C, 2018, "Web Content Accessibility Guidelines 2.1").

    Parameters
    ----------
    rgba : sequence of float
        The cell's colour, components in [0, 1].

    Returns
    -------
    str
    """
    r, g, b = (c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in rgba[:3])
    return "black" if 0.2126 * r + 0.7152 * g + 0.0722 * b > 0.179 else "white"


def _grids(data: SweepData, x, y, metric, threshold, facet, at):
    px, py = data.by_path[x], data.by_path[y]
    xs, ys = _axis_values(px), _axis_values(py)
    ox, oy = np.argsort(xs, kind="stable"), np.argsort(ys, kind="stable")
    facets = list(data.by_path[facet].labels) if facet else [None]
    fixed = data.fixed_labels({x, y} | ({facet} if facet else set()), at)
    grids, thr = [], []
    for fv in facets:
        Z = np.full((ys.size, xs.size), np.nan)
        T = np.full(ys.size, np.nan)
        for b, j in enumerate(oy):
            row_t = []
            for a, i in enumerate(ox):
                lab = {**fixed, x: px.labels[i], y: py.labels[j], **({facet: fv} if facet else {})}
                Z[b, a] = data.value(lab, metric)
                if threshold:
                    row_t.append(data.value(lab, threshold))
            vals = np.array(row_t)
            if threshold and np.isfinite(vals).any():
                T[b] = np.nanmedian(vals)
        grids.append(Z)
        thr.append(T)
    return px, py, xs[ox], ys[oy], [px.labels[i] for i in ox], [py.labels[j] for j in oy], facets, grids, thr


def heatmap(data: SweepData, x: str, y: str, metric: str, threshold: str | None = None, level: float | None = None,
            facet: str | None = None, title: str | None = None, at: dict | None = None, center: float | None = None):
    """A heatmap of ``metric`` over the swept parameters ``x`` and ``y`` (see the module notes).

    Parameters
    ----------
    data : SweepData
    x, y : str
        Swept paths on the horizontal and vertical axes.
    metric : str
    threshold : str, optional
        A metric holding the analytic critical value of ``x`` (drawn as a dashed line or curve).
    level : float, optional
        Draw the contour where the metric crosses this level.
    facet : str, optional
        One panel per value of this swept path.
    title : str, optional
    at : dict, optional
        Labels of the other swept paths (path -> label).
    center : float, optional
        Centre of a diverging colour map (default 0 when the metric takes both signs).

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = _plt()

    px, py, xs, ys, labx, laby, facets, grids, thr = _grids(data, x, y, metric, threshold, facet, at)
    xp, xcat = _positions(xs, px.log)
    yp, ycat = _positions(ys, py.log)
    xlog, ylog = px.log and not xcat, py.log and not ycat
    allv = np.concatenate([g[np.isfinite(g)] for g in grids]) if grids else np.zeros(0)
    lo, hi = (float(allv.min()), float(allv.max())) if allv.size else (0.0, 1.0)
    norm, cmap = _color_map(plt, lo, hi, center)
    fmt = number_format(allv)
    nr, nc = _panels(len(facets))
    width = PAGE_WIDTH if nc == 1 else PAGE_WIDTH * min(1.0, 0.55 * nc)
    fig, axes = plt.subplots(nr, nc, figsize=(max(width, PAGE_WIDTH), 2.7 * nr + 1.3), squeeze=False, sharex=True,
                             sharey=True, layout="constrained")
    xe, ye = _edges(xp, xlog), _edges(yp, ylog)
    mesh = None
    legend: dict = {}
    numbers = []  # (text, axes, cell corners) of the cell numbers, fitted to their cells once laid out
    for k, fv in enumerate(facets):
        ax = axes[k // nc][k % nc]
        Z = grids[k]
        mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(Z), cmap=cmap, norm=norm,
                             vmin=None if norm else lo, vmax=None if norm else hi, shading="flat")
        if not np.isfinite(Z).all():
            # a cell without a value (failed, or not in the sweep) is hatched, never left blank
            ax.patch.set_facecolor("white")
            ax.patch.set_hatch("///")
            ax.patch.set_edgecolor("0.7")
            legend.setdefault("no value (cell failed or not run)",
                              _hatch_handle())
        if xs.size * nc <= 12 and ys.size * nr <= 16:
            numbers += _cell_numbers(ax, Z, xp, yp, xe, ye, cmap, norm, lo, hi, fmt)
        if level is not None and xs.size > 1 and ys.size > 1 and np.isfinite(Z).sum() >= 4:
            zmin, zmax = np.nanmin(Z), np.nanmax(Z)
            if zmin < level < zmax:
                ax.contour(xp, yp, np.where(np.isfinite(Z), Z, level), levels=[level], colors="black",
                           linewidths=1.2, linestyles="-")
                ax.plot([], [], color="black", lw=1.2, label=f"boundary: {metric_label(metric, data)} = "
                                                             f"{level:g}")
        _threshold_line(ax, thr[k], xs, xp, xe, yp, threshold, data, legend)
        if xlog:
            ax.set_xscale("log")
        if ylog:
            ax.set_yscale("log")
        # ticks at the swept values (a continuous scale would show values that were never run, below zero even),
        # every k-th one where the panel is too narrow for all
        if xcat or (not xlog and xs.size <= 12):
            step = _tick_step(fig, nc, labx)
            ax.set_xticks(xp[::step], labx[::step])
        if ycat or (not ylog and ys.size <= 16):
            ax.set_yticks(yp, laby)
        ax.tick_params(labelsize=SMALL)
        ax.set_xlim(xe[0], xe[-1])
        ax.set_ylim(ye[0], ye[-1])
        if facet:
            ax.set_title(_wrap(str(fv), _title_chars(fig, nc, colorbar=True)), fontsize=FONT)
        _panel_labels(ax, k, nr, nc, len(facets), _label(x, data), _label(y, data))
        for h, lab in zip(*ax.get_legend_handles_labels()):
            legend.setdefault(lab, h)
    for k in range(len(facets), nr * nc):
        axes[k // nc][k % nc].set_visible(False)
    if mesh is not None:
        cb = fig.colorbar(mesh, ax=axes.ravel().tolist(), shrink=0.9)
        cb.set_label(_wrap_axis(metric_axis(metric, data), 40), fontsize=FONT)
        cb.ax.tick_params(labelsize=SMALL)
    if legend:
        fit_legend(fig, list(legend.values()), list(legend), ncol=1)
    fig.suptitle(_wrap((title or f"{metric_label(metric, data)}") + _panel_note(facet, data), 80), fontsize=FONT + 1)
    _fit_numbers(fig, numbers)
    return fig


def _color_map(plt, lo: float, hi: float, center):
    """(norm, colour map) of a heatmap: diverging when the values lie on both sides of the level of interest."""
    from matplotlib.colors import TwoSlopeNorm

    mid = center if center is not None else (0.0 if lo < 0 < hi else None)
    if mid is not None and lo < mid < hi:
        # a diverging map centred at the level of interest; each side uses its own range, so a small
        # positive side keeps its ticks and colours (PuOr reads for colour-blind readers too)
        return TwoSlopeNorm(vmin=lo, vcenter=mid, vmax=hi), plt.get_cmap("PuOr_r")
    return None, plt.get_cmap("viridis")


def _cell_numbers(ax, Z, xp, yp, xe, ye, cmap, norm, lo, hi, fmt) -> list:
    """The value written in each cell; returns (text, axes, cell corners) for fitting once laid out."""
    out = []
    for b in range(Z.shape[0]):
        for a in range(Z.shape[1]):
            if np.isfinite(Z[b, a]):
                rgba = cmap(norm(Z[b, a]) if norm else (Z[b, a] - lo) / (hi - lo or 1.0))
                # a backing in the cell's own colour: a threshold or boundary line passes behind the
                # number instead of through it (a minus sign struck through reads as no sign)
                t = ax.text(xp[a], yp[b], fmt(Z[b, a]), ha="center", va="center", fontsize=SMALL,
                            color=text_color(rgba), zorder=4,
                            bbox={"boxstyle": "square,pad=0.1", "fc": rgba, "ec": "none"})
                out.append((t, ax, (xe[a], ye[b], xe[a + 1], ye[b + 1])))
    return out


def _tick_step(fig, nc: int, labels) -> int:
    """Every how many swept values a tick label fits under a panel (upright labels, about 0.6 em a character)."""
    width_pt = fig.get_figwidth() * 72 * 0.78 / nc
    per_label = SMALL * 0.6 * max(len(str(t)) for t in labels) + 10
    fit = max(2, int(width_pt // per_label))
    return max(1, math.ceil(len(labels) / fit))


def _hatch_handle():
    from matplotlib.patches import Patch

    return Patch(facecolor="white", edgecolor="0.6", hatch="///")


def _title_chars(fig, nc: int, colorbar: bool = False) -> int:
    """Characters of a panel title that fit over its panel (about 0.55 em a character)."""
    width_pt = fig.get_figwidth() * 72 * (0.78 if colorbar else 0.88) / nc
    return max(12, int(width_pt / (FONT * 0.55)))


def _fit_numbers(fig, numbers) -> None:
    """Cell numbers that fit their cells: upright, else turned a quarter, else left out (the colour bar reads the
    values; a note says so)."""
    if not numbers:
        return
    fig.canvas.draw()
    r = fig.canvas.get_renderer()

    def fits() -> bool:
        for t, ax, (x0, y0, x1, y1) in numbers:
            (a, b), (c, d) = ax.transData.transform([(x0, y0), (x1, y1)])
            e = t.get_window_extent(renderer=r)
            if e.width > 0.92 * abs(c - a) or e.height > 0.92 * abs(d - b):
                return False
        return True

    if fits():
        return
    for t, _, _ in numbers:
        t.set_rotation(90)
    if fits():
        return
    for t, _, _ in numbers:
        t.remove()
    fig.text(0.01, 0.005, "cells too small for their numbers: read the values off the colour bar or the table",
             fontsize=SMALL, ha="left", va="bottom", color="0.3")


def fit_legend(fig, handles, labels, ncol: int = 3, title: str | None = None, width: int = 45):
    """A figure legend below the plot, in as many columns as fit the figure's width (long labels wrapped).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    handles : list of artists
    labels : list of str
    ncol : int
        The most columns to try.
    title : str, optional
    width : int
        Characters of a label line.

    Returns
    -------
    matplotlib.legend.Legend
    """
    labels = [_wrap(str(lab), width) for lab in labels]
    fig.canvas.draw()
    for n in range(min(ncol, len(labels)), 0, -1):
        leg = fig.legend(handles, labels, loc="outside lower center", fontsize=SMALL, frameon=False, title=title,
                         title_fontsize=SMALL, ncol=n)
        if n == 1 or leg.get_window_extent(renderer=fig.canvas.get_renderer()).width <= 0.98 * fig.bbox.width:
            return leg
        leg.remove()
    return leg


def _panel_note(facet: str | None, data: SweepData) -> str:
    # the panels' parameter, named once in the title (each panel shows its value only)
    return f"; panels by {_label(facet, data).split(' [')[0]}" if facet else ""


def _panel_labels(ax, k: int, nr: int, nc: int, n: int, xlabel: str, ylabel: str) -> None:
    # one axis label per figure: under the middle panel of the lowest row and beside the middle row's first
    # panel (a label on every panel would run into its neighbours)
    last_row = (n - 1) // nc
    row, col = divmod(k, nc)
    in_last = min(nc, n - last_row * nc)
    if row == last_row and col == (in_last - 1) // 2:
        ax.set_xlabel(xlabel, fontsize=FONT)
        if in_last % 2 == 0:
            ax.xaxis.set_label_coords(1.04, -0.12)  # between the two middle panels
    if col == 0 and row == last_row // 2:
        ax.set_ylabel(ylabel, fontsize=FONT)


def _wrap(text: str, width: int) -> str:
    return "\n".join(textwrap.wrap(text, width)) or text


def _wrap_axis(text: str, width: int) -> str:
    """An axis label wrapped to ``width`` characters, its unit in brackets kept whole on a line of its own when
    the label does not fit on one."""
    if len(text) <= width or " [" not in text:
        return _wrap(text, width)
    label, unit = text.split(" [", 1)
    return _wrap(label, width) + "\n" + _wrap("[" + unit, width)


def _threshold_line(ax, T, xs, xp, xe, yp, threshold, data, legend) -> None:
    if not threshold or not np.isfinite(T).any():
        return
    ok = np.isfinite(T)
    tx = np.array([_to_position(v, xs, xp) if np.isfinite(v) else np.nan for v in T])
    inside = ok & (tx >= xe[0]) & (tx <= xe[-1])
    name = metric_label(threshold, data).replace("analytic prediction of the ", "")
    if np.allclose(T[ok], T[ok][0], rtol=1e-9, atol=0):
        where = "" if inside.any() else ", outside the swept range"
        if inside.any():
            ax.axvline(tx[ok][0], color="black", lw=1.6, ls="--")
            ax.annotate(f"{T[ok][0]:.3f}", (tx[ok][0], 1.0), xycoords=("data", "axes fraction"), xytext=(3, -3),
                        textcoords="offset points", ha="left", va="top", fontsize=SMALL,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85})
            ax.plot([], [], color="black", lw=1.6, ls="--", label=f"{name} (value at the top of the line)")
        else:
            ax.plot([], [], color="black", lw=1.6, ls="--", label=f"{name}: {T[ok][0]:.3f}{where}")
    elif inside.any():
        ax.plot(tx[inside], yp[inside], color="black", lw=1.6, ls="--", marker="o", ms=3, label=name)


def lines(data: SweepData, x: str, metric: str, analytic: str | None = None, group: str | None = None,
          facet: str | None = None, title: str | None = None, band: bool = True, at: dict | None = None):
    """``metric`` against the swept parameter ``x`` (see the module notes).

    Parameters
    ----------
    data : SweepData
    x : str
        Swept path on the horizontal axis.
    metric : str
    analytic : str, optional
        A metric holding the analytic prediction (dashed, same colour).
    group : str, optional
        One line per value of this swept path.
    facet : str, optional
        One panel per value of this swept path.
    title : str, optional
    band : bool
        Draw the 95 % interval where the cells report one.
    at : dict, optional
        Labels of the other swept paths.

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = _plt()
    px = data.by_path[x]
    xs = _axis_values(px)
    order = np.argsort(xs, kind="stable")
    groups = list(data.by_path[group].labels) if group else [None]
    facets = list(data.by_path[facet].labels) if facet else [None]
    fixed = data.fixed_labels({x} | ({group} if group else set()) | ({facet} if facet else set()), at)
    nr, nc = _panels(len(facets))
    fig, axes = plt.subplots(nr, nc, figsize=(PAGE_WIDTH, 2.6 * nr + 1.2), squeeze=False, sharex=True, sharey=True,
                             layout="constrained")
    has_band = band and data.has(f"{metric}.low") and data.has(f"{metric}.high")
    legend: dict = {}
    for k, fv in enumerate(facets):
        ax = axes[k // nc][k % nc]
        for g, gv in enumerate(groups):

            def series(m, gv=gv, fv=fv):
                out = []
                for i in order:
                    lab = {**fixed, x: px.labels[i], **({group: gv} if group else {}), **({facet: fv} if facet else {})}
                    out.append(data.value(lab, m))
                return np.array(out)

            yv = series(metric)
            if not np.isfinite(yv).any():
                continue  # nothing to draw: no legend entry either
            ax.plot(xs[order], yv, color=color(g), marker="o", ms=3.5, lw=1.5, label=f"{gv}" if group else "simulated")
            if has_band:
                lo, hi = series(f"{metric}.low"), series(f"{metric}.high")
                ok = np.isfinite(lo) & np.isfinite(hi)
                if ok.any():
                    ax.fill_between(xs[order][ok], lo[ok], hi[ok], color=color(g), alpha=0.2, lw=0)
            if analytic:
                av = series(analytic)
                if np.isfinite(av).any():
                    ax.plot(xs[order], av, color=color(g), ls="--", lw=1.2,
                            label=("analytic" if not group else f"{gv}, analytic"))
        lo_y, hi_y = ax.get_ylim()
        if lo_y < 0 < hi_y:
            ax.axhline(0.0, color="black", lw=0.6)
        if px.log:
            ax.set_xscale("log")
        if facet:
            ax.set_title(_wrap(str(fv), _title_chars(fig, nc)), fontsize=FONT)
        _panel_labels(ax, k, nr, nc, len(facets), _label(x, data), _wrap_axis(metric_axis(metric, data), 30))
        ax.tick_params(labelsize=SMALL)
        ax.grid(alpha=0.3)
        for h, lab in zip(*ax.get_legend_handles_labels()):
            legend.setdefault(lab, h)
    for k in range(len(facets), nr * nc):
        axes[k // nc][k % nc].set_visible(False)
    # a single ungrouped line needs no legend (the axis names it); otherwise the legend says what its entries are
    if legend and (group or len(legend) > 1):
        title_l = _label(group, data).split(" [")[0] if group else metric_label(metric, data)
        fit_legend(fig, list(legend.values()), list(legend), ncol=3, title=title_l)
    extra = " (band: 95 % interval across replications)" if has_band else ""
    fig.suptitle(_wrap((title or f"{metric_label(metric, data)}{extra}") + _panel_note(facet, data), 80),
                 fontsize=FONT + 1)
    return fig
