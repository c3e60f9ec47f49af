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
from dataclasses import dataclass

import numpy as np

__all__ = ["SweepData", "heatmap", "lines"]


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


@dataclass
class SweepData:
    """Stored results arranged by swept values.

    Attributes
    ----------
    parameters : list of Parameter
    rows : list of CellRow
    """

    parameters: list
    rows: list

    def __post_init__(self):
        self.by_path = {p.path: p for p in self.parameters}
        self.index = {}
        for r in self.rows:
            if r.status != "ok":
                continue
            key = tuple(r.labels[p.path] for p in self.parameters)
            self.index[key] = r.metrics

    def value(self, fixed: dict, metric: str) -> float:
        """The metric of the cell whose swept values have labels ``fixed`` (path -> label); nan if none."""
        key = tuple(fixed[p.path] for p in self.parameters)
        m = self.index.get(key)
        return math.nan if m is None else float(m.get(metric, math.nan))

    def has(self, metric: str) -> bool:
        return any(metric in m for m in self.index.values())

    def fixed_labels(self, exclude, at: dict | None = None) -> dict:
        """Labels of the parameters not in ``exclude``: those in ``at`` (path -> label), the others take one
        value each."""
        at = at or {}
        return {p.path: at.get(p.path, p.labels[0]) for p in self.parameters if p.path not in exclude}


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


def _label(path: str) -> str:
    names = {"run.delta": "discount factor delta", "monitoring.sigma": "demand-shock sigma",
             "monitoring.perception_error": "perception error", "monitoring.implementation_error":
             "implementation error", "market.n_firms": "number of firms"}
    return names.get(path, path)


def heatmap(data: SweepData, x: str, y: str, metric: str, threshold: str | None = None, level: float | None = None,
            facet: str | None = None, title: str | None = None, at: dict | None = None):
    """A heatmap of ``metric`` over the swept parameters ``x`` and ``y`` (see the module notes).

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = _plt()
    from matplotlib.colors import TwoSlopeNorm

    px, py = data.by_path[x], data.by_path[y]
    xs, ys = _axis_values(px), _axis_values(py)
    ox, oy = np.argsort(xs, kind="stable"), np.argsort(ys, kind="stable")
    facets = list(data.by_path[facet].labels) if facet else [None]
    fixed = data.fixed_labels({x, y} | ({facet} if facet else set()), at)
    grids, thr = [], []
    for fv in facets:
        Z = np.full((ys.size, xs.size), np.nan)
        T = np.full(ys.size, np.nan)
        for a, i in enumerate(ox):
            for b, j in enumerate(oy):
                lab = {**fixed, x: px.labels[i], y: py.labels[j]}
                if facet:
                    lab[facet] = fv
                Z[b, a] = data.value(lab, metric)
        if threshold:
            for b, j in enumerate(oy):
                vals = []
                for i in ox:
                    lab = {**fixed, x: px.labels[i], y: py.labels[j]}
                    if facet:
                        lab[facet] = fv
                    vals.append(data.value(lab, threshold))
                vals = np.array(vals)
                T[b] = np.nanmedian(vals) if np.isfinite(vals).any() else np.nan
        grids.append(Z)
        thr.append(T)
    xs, ys = xs[ox], ys[oy]
    xp, xcat = _positions(xs, px.log)
    yp, ycat = _positions(ys, py.log)
    xlog, ylog = px.log and not xcat, py.log and not ycat
    labx = [px.labels[i] for i in ox]
    laby = [py.labels[j] for j in oy]
    allv = np.concatenate([g[np.isfinite(g)] for g in grids]) if grids else np.zeros(0)
    lo, hi = (float(allv.min()), float(allv.max())) if allv.size else (0.0, 1.0)
    if lo < 0 < hi:
        norm, cmap = TwoSlopeNorm(vmin=lo, vcenter=0.0, vmax=hi), "RdBu_r"
    else:
        norm, cmap = None, "viridis"
    nr, nc = _panels(len(facets))
    fig, axes = plt.subplots(nr, nc, figsize=(4.4 * nc + 1.2, 3.6 * nr + 0.9), squeeze=False, sharex=True,
                             sharey=True, layout="constrained")
    xe, ye = _edges(xp, xlog), _edges(yp, ylog)
    mesh = None
    legend: dict = {}
    for k, fv in enumerate(facets):
        ax = axes[k // nc][k % nc]
        Z = grids[k]
        mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(Z), cmap=cmap, norm=norm,
                             vmin=None if norm else lo, vmax=None if norm else hi, shading="flat")
        if xs.size <= 12 and ys.size <= 16:
            size = 6.5 if xs.size * len(facets) <= 12 else 5.0
            for b in range(ys.size):
                for a in range(xs.size):
                    if np.isfinite(Z[b, a]):
                        v = Z[b, a]
                        txt = f"{v:.2f}" if abs(v) < 10 else f"{v:.3g}"
                        ax.text(xp[a], yp[b], txt, ha="center", va="center", fontsize=size, color="black")
        if level is not None and xs.size > 1 and ys.size > 1 and np.isfinite(Z).sum() >= 4:
            zmin, zmax = np.nanmin(Z), np.nanmax(Z)
            if zmin < level < zmax:
                ax.contour(xp, yp, np.where(np.isfinite(Z), Z, level), levels=[level], colors="black",
                           linewidths=1.2, linestyles="-")
                ax.plot([], [], color="black", lw=1.2, label=f"simulated boundary ({metric} = {level:g})")
        T = thr[k]
        if threshold and np.isfinite(T).any():
            ok = np.isfinite(T)
            tx = np.array([_to_position(v, xs, xp) if np.isfinite(v) else np.nan for v in T])
            inside = ok & (tx >= xe[0]) & (tx <= xe[-1])
            if np.allclose(T[ok], T[ok][0], rtol=1e-9, atol=0):
                if inside.any():
                    ax.axvline(tx[ok][0], color="magenta", lw=2, ls="--",
                               label=f"analytic critical value: {T[ok][0]:.4g}")
                else:
                    ax.plot([], [], color="magenta", lw=2, ls="--",
                            label=f"analytic critical value {T[ok][0]:.4g} (outside the swept range)")
            elif inside.any():
                ax.plot(tx[inside], yp[inside], color="magenta", lw=2, ls="--", marker="o", ms=3,
                        label="analytic critical value")
        if xlog:
            ax.set_xscale("log")
        if ylog:
            ax.set_yscale("log")
        if xcat:
            ax.set_xticks(xp, labx, rotation=45 if len(labx) > 6 else 0, fontsize=7)
        if ycat:
            ax.set_yticks(yp, laby, fontsize=7)
        ax.set_xlim(xe[0], xe[-1])
        ax.set_ylim(ye[0], ye[-1])
        if facet:
            ax.set_title(f"{facet} = {fv}", fontsize=9)
        if k // nc == nr - 1:
            ax.set_xlabel(_label(x))
        if k % nc == 0:
            ax.set_ylabel(_label(y))
        for h, lab in zip(*ax.get_legend_handles_labels()):
            legend.setdefault(lab, h)
    for k in range(len(facets), nr * nc):
        axes[k // nc][k % nc].set_visible(False)
    if mesh is not None:
        fig.colorbar(mesh, ax=axes.ravel().tolist(), label=metric, shrink=0.9)
    if legend:
        fig.legend(list(legend.values()), list(legend), loc="outside lower center", ncol=min(3, len(legend)),
                   fontsize=8, frameon=False)
    fig.suptitle(title or f"{metric} over {_label(x)} and {_label(y)}", fontsize=11)
    return fig


def lines(data: SweepData, x: str, metric: str, analytic: str | None = None, group: str | None = None,
          facet: str | None = None, title: str | None = None, band: bool = True, at: dict | None = None):
    """``metric`` against the swept parameter ``x`` (see the module notes).

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
    fig, axes = plt.subplots(nr, nc, figsize=(5.0 * nc + 0.6, 3.8 * nr), squeeze=False, sharex=True, sharey=True)
    has_band = band and data.has(f"{metric}.low") and data.has(f"{metric}.high")
    for k, fv in enumerate(facets):
        ax = axes[k // nc][k % nc]
        for g, gv in enumerate(groups):
            color = f"C{g % 10}"

            def series(m, gv=gv, fv=fv):
                out = []
                for i in order:
                    lab = {**fixed, x: px.labels[i]}
                    if group:
                        lab[group] = gv
                    if facet:
                        lab[facet] = fv
                    out.append(data.value(lab, m))
                return np.array(out)

            yv = series(metric)
            label = f"{gv}" if group else "simulated"
            ax.plot(xs[order], yv, color=color, marker="o", ms=3.5, lw=1.5, label=label)
            if has_band:
                lo, hi = series(f"{metric}.low"), series(f"{metric}.high")
                ok = np.isfinite(lo) & np.isfinite(hi)
                if ok.any():
                    ax.fill_between(xs[order][ok], lo[ok], hi[ok], color=color, alpha=0.18, lw=0)
            if analytic:
                av = series(analytic)
                if np.isfinite(av).any():
                    ax.plot(xs[order], av, color=color, ls="--", lw=1.2,
                            label=("analytic" if not group else f"{gv}, analytic"))
        lo_y, hi_y = ax.get_ylim()
        if lo_y < 0 < hi_y:
            ax.axhline(0.0, color="black", lw=0.6)
        if px.log:
            ax.set_xscale("log")
        if facet:
            ax.set_title(f"{facet} = {fv}", fontsize=9)
        if k // nc == nr - 1:
            ax.set_xlabel(_label(x))
        if k % nc == 0:
            ax.set_ylabel(metric)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7, loc="best", framealpha=0.8)
    for k in range(len(facets), nr * nc):
        axes[k // nc][k % nc].set_visible(False)
    fig.suptitle(title or f"{metric} against {_label(x)}", fontsize=10)
    fig.tight_layout()
    return fig
