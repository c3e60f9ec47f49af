"""The figures of an assessment, drawn from its plain data (matplotlib, Agg backend).

:func:`assessment_figures` returns unsaved figures (:class:`sim.evidence.render.Drawn`); the caller saves and closes
them. The command's ``--plot`` and the evidence bundle draw them from the same stored result, so they are the same
bytes.
"""

from __future__ import annotations

import itertools

import numpy as np

from sim.core.stats import wilson_band
from sim.evidence.assess_payoffs import payoff_figure
from sim.evidence.assess_tables import SCHEME_LABELS, SIDES, as_float, assessment_data, in_order
from sim.evidence.figure_sizes import SHARE_BAND_WORDS, share_trials
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color, fit_legend
from sim.evidence.pairs import assessment_pairs, pairs_figure
from sim.evidence.render import Drawn, pyplot

__all__ = ["assessment_figures"]

_BEFORE, _AFTER = "#2c7bb6", "#d7191c"
_CATEGORY_COLOURS = {"neither": "#d9d9d9", "both": "#fdae61", "after only": "#d7191c", "before only": "#2c7bb6"}
_CATEGORY_LABELS = {"neither": "sustainable neither before nor after", "both": "sustainable before and after",
                    "after only": "sustainable only after the merger", "before only": "sustainable only before"}
_CAPTIONS = {
    "thresholds": ("Critical discount factors of each scheme before and after the merger, with the experiment's "
                   "discount factor"),
    "partial_collusion": ("Partial collusion: profit gain of the most profitable sustainable outcome against the "
                          "discount factor"),
    "persistence": "Simulated persistence: share of replications in which every firm colludes, period by period",
    "sensitivity_delta": ("Where the conclusion flips along the discount factor (shaded: sustainable before "
                          "and/or after)"),
    "sensitivity_noise": "Simulated persistence against the monitoring noise, with 95% confidence bands",
}


def _arr(xs) -> np.ndarray:
    return np.asarray(xs, dtype=float)  # None -> nan


def _thresholds(plt, d: dict) -> Drawn:
    delta = d["conclusion"]["delta"]
    sch = d["conclusion"]["schemes"]
    fig, ax = _axes(plt, 3.6)
    x = np.arange(len(sch))
    b = [as_float(s["before"]) for s in sch]
    af = [as_float(s["after"]) for s in sch]
    for off, vals, lab, col in ((-0.2, b, "before", _BEFORE), (0.2, af, "after", _AFTER)):
        ok = ~np.isnan(vals)
        ax.bar(x[ok] + off, np.asarray(vals)[ok], 0.4, label=lab, color=col)
        if (~ok).any():
            # not sustainable below one: an empty hatched bar up to one
            ax.bar(x[~ok] + off, np.ones((~ok).sum()), 0.4, color="none", edgecolor=col, hatch="//", lw=0.8)
            for k in np.flatnonzero(~ok):
                ax.text(k + off, 1.0, "none", ha="center", va="bottom", fontsize=SMALL)
    ax.axhline(delta, color="k", lw=1, ls="--", label=f"discount factor {delta:.3g}")
    ax.set_xticks(x, [s["scheme"] for s in sch], rotation=35, ha="right", rotation_mode="anchor")
    ax.set_ylim(0, 1.12)
    ax.set_xlabel("punishment scheme")
    ax.set_ylabel("critical discount factor (market)")
    return _drawn(fig, ax, "thresholds",
                  "Critical discount factors before and after the merger ('none': not sustainable below one)",
                  "market before or after the merger, and the experiment's discount factor")


def _partial(plt, d: dict) -> Drawn:
    fig, ax = _axes(plt, 3.8)
    groups = {}
    for label in SIDES:
        for p in d[label]["partial_collusion"]:
            groups.setdefault((p["scheme"], p.get("T")), {}).setdefault(label, []).append(
                (p["delta"], as_float(p["profit_gain"])))
    handles, labels = [], []
    for k, (key, sides) in enumerate(sorted(groups.items(), key=lambda t: (t[0][0], t[0][1] or 0))):
        name = SCHEME_LABELS.get(key[0], f"Nash reversion, T={key[1]}")
        for label, ls in (("before", "-"), ("after", "--")):
            pts = sorted(sides.get(label, []))
            if pts:
                ax.plot([p[0] for p in pts], [p[1] for p in pts], ls, marker="o", ms=3, color=color(k))
        # one entry per scheme in its colour; the line style says the market (two entries below)
        handles.append(plt.Line2D([], [], color=color(k), marker="o", ms=3))
        labels.append(name)
    handles += [plt.Line2D([], [], color="black", ls="-"), plt.Line2D([], [], color="black", ls="--")]
    labels += ["before the merger (solid)", "after the merger (dashed)"]
    ax.set_xlabel("discount factor")
    ax.set_ylabel("profit gain of the best\nsustainable outcome")
    ax.set_ylim(-0.02, 1.05)
    return _drawn(fig, ax, "partial_collusion", "Partial collusion before (solid) and after (dashed) the merger",
                  "punishment scheme (colour) and market (line style)", handles, labels)


def _persistence(plt, d: dict) -> Drawn:
    fig, ax = _axes(plt, 3.2)
    banded = []
    for label, col in (("before", _BEFORE), ("after", _AFTER)):
        sim = d[label]["simulation"]
        y = _arr(sim["collusive_by_period"])
        t = np.arange(1, y.size + 1)
        ax.plot(t, y, color=col, lw=1, label=label)
        n = share_trials(sim["settings"]["run"])
        if n:
            lo, hi = wilson_band(y, n)
            ax.fill_between(t, lo, hi, color=col, alpha=0.2, lw=0, label=f"{label}: 95 % band")
            banded.append(n)
    ax.set_xlabel("period")
    ax.set_ylabel("share of replications colluding")
    ax.set_ylim(-0.02, 1.02)
    drawn = _drawn(fig, ax, "persistence", "Simulated persistence of collusion under the experiment's monitoring "
                                           "noise", "market before or after the merger")
    caption = drawn.caption + (f"; band: {SHARE_BAND_WORDS.format(n=banded[0])}" if banded else
                               "; no band: the horizon is random, so the replications behind each period vary")
    return Drawn(drawn.name, drawn.figure, caption)


def _axes(plt, height: float):
    """A figure at the printed width of the page (text sizes of :mod:`sim.evidence.figures`), its layout
    constrained so that the legend below the axes keeps clear of them."""
    fig, ax = plt.subplots(figsize=(PAGE_WIDTH, height), layout="constrained")
    ax.tick_params(labelsize=SMALL)
    ax.xaxis.label.set_size(FONT)
    ax.yaxis.label.set_size(FONT)
    return fig, ax


def _drawn(fig, ax, name: str, title: str, legend_title: str, handles=None, labels=None) -> Drawn:
    """The figure finished -- its title and its titled legend below the data -- under its name and caption."""
    ax.set_title(title, fontsize=FONT)
    _legend_outside(ax, handles, labels, title=legend_title)
    return Drawn(name, fig, _CAPTIONS[name])


def _legend_outside(ax, handles=None, labels=None, title: str | None = None) -> None:
    """The legend below the axes, clear of the data, at the figures' legible size, with a title; none for a single
    unnamed line."""
    if handles is None:
        handles, labels = ax.get_legend_handles_labels()
    if labels:
        fit_legend(ax.figure, list(handles), list(labels), ncol=3, title=title)


def _segments(lo: float, hi: float, before, after) -> list:
    """Spans of the discount factor in [lo, hi] with one conclusion each: the conclusion changes exactly at the
    thresholds before and after (None: not sustainable below one)."""
    cuts = sorted({lo, hi, *(t for t in (before, after) if t is not None and lo < t < hi)})
    out = []
    for a, b in itertools.pairwise(cuts):
        mid = (a + b) / 2
        pre, post = before is not None and mid >= before, after is not None and mid >= after
        out.append((a, b, {(True, True): "both", (False, False): "neither", (False, True): "after only",
                           (True, False): "before only"}[(pre, post)]))
    return out


def _along_delta(plt, s: dict) -> Drawn:
    fig, ax = _axes(plt, 3.8)
    ds = _arr(s["values"])
    spans = _segments(float(ds[0]), float(ds[-1]), s["threshold_before"], s["threshold_after"])
    for lo_, hi_, cat in spans:
        ax.axvspan(lo_, hi_, color=_CATEGORY_COLOURS[cat], alpha=0.35, lw=0)
    ax.plot(ds, _arr(s["profit_gain_before"]), "-o", ms=3, color=_BEFORE, label="before")
    ax.plot(ds, _arr(s["profit_gain_after"]), "--o", ms=3, color=_AFTER, label="after")
    for t, lab in ((s["threshold_before"], "threshold before"), (s["threshold_after"], "threshold after")):
        if t is not None:
            ax.axvline(t, color="k", lw=0.8, ls=":")
            ax.text(t, 0.02, f"{lab} {t:.4f}", rotation=90, fontsize=SMALL, va="bottom", ha="right")
    if s.get("log"):
        ax.set_xscale("log")
    ax.set_xlabel("discount factor")
    ax.set_ylabel(f"profit gain ({s['scheme']})")
    ax.set_ylim(-0.02, 1.25)
    drawn = {cat for _lo, _hi, cat in spans}
    handles = [plt.Rectangle((0, 0), 1, 1, color=_CATEGORY_COLOURS[c], alpha=0.35) for c in _CATEGORY_COLOURS
               if c in drawn]
    labels = [_CATEGORY_LABELS[c] for c in _CATEGORY_COLOURS if c in drawn]
    h0, l0 = ax.get_legend_handles_labels()
    return _drawn(fig, ax, "sensitivity_delta", "Where the conclusion flips along the discount factor",
                  "profit gain (lines) and conclusion (shading)", h0 + handles, l0 + labels)


def _along_noise(plt, s: dict) -> Drawn:
    fig, ax = _axes(plt, 3.6)
    k = _arr(s["scales"])
    for lab, col, ls in (("before", _BEFORE, "-"), ("after", _AFTER, "--")):
        y = _arr(s[f"collusive_share_{lab}"])
        ci = _arr(s[f"collusive_share_{lab}_ci"])
        ax.plot(k, y, ls, marker="o", ms=3, color=col, label=lab)
        ax.fill_between(k, ci[:, 0], ci[:, 1], color=col, alpha=0.15, lw=0)
    for f in s["flips"]:
        ax.axvline(f, color="k", lw=0.8, ls=":")
    if s.get("log"):
        ax.set_xscale("log")
    ax.set_xlabel("noise scale (1 = the experiment's monitoring noise)")
    ax.set_ylabel("share of collusive periods")
    ax.set_ylim(-0.02, 1.02)
    return _drawn(fig, ax, "sensitivity_noise", "Simulated persistence against monitoring noise (95% confidence bands)",
                  "market before or after the merger")


def _cell_edges(xs: np.ndarray, log: bool) -> np.ndarray:
    if xs.size > 1 and log:
        # cell edges halfway between points on the log axis
        lx = np.log(xs)
        return np.exp(np.concatenate([[lx[0] - (lx[1] - lx[0]) / 2], (lx[1:] + lx[:-1]) / 2,
                                      [lx[-1] + (lx[-1] - lx[-2]) / 2]]))
    if xs.size > 1:
        return np.concatenate([[xs[0] - (xs[1] - xs[0]) / 2], (xs[1:] + xs[:-1]) / 2,
                               [xs[-1] + (xs[-1] - xs[-2]) / 2]])
    return np.array([xs[0] - 0.5, xs[0] + 0.5])


_CODES = {"neither": 0, "before only": 1, "both": 2, "after only": 3}
_INPUT_LABELS = {"margin": "price-cost margin of the reference product", "elasticity": "own-price elasticity of the "
                 "reference product", "market_elasticity": "market elasticity of demand",
                 "size": "potential market size (logit)"}


def _phase_grid(s: dict, ds: np.ndarray) -> tuple:
    xs = _arr(s["values"])
    tb = np.array([as_float(v) for v in s["threshold_before"]])
    ta = np.array([as_float(v) for v in s["threshold_after"]])
    grid = np.full((ds.size, xs.size), np.nan)
    for j in range(xs.size):
        if s["status"][j] != "ok":
            continue
        for i, d in enumerate(ds):
            pre = np.isfinite(tb[j]) and d >= tb[j]
            post = np.isfinite(ta[j]) and d >= ta[j]
            grid[i, j] = _CODES[{(True, True): "both", (False, False): "neither", (False, True): "after only",
                                 (True, False): "before only"}[(bool(pre), bool(post))]]
    return xs, tb, ta, grid


def _phase(plt, doc: dict, name: str, s: dict) -> Drawn:
    from matplotlib.colors import BoundaryNorm, ListedColormap  # heavy: only when a figure is drawn

    ds = np.linspace(0.0, 1.0, 201)
    xs, tb, ta, grid = _phase_grid(s, ds)
    cmap = ListedColormap([_CATEGORY_COLOURS[c] for c in ("neither", "before only", "both", "after only")])
    norm = BoundaryNorm([-0.5, 0.5, 1.5, 2.5, 3.5], 4)
    fig, ax = _axes(plt, 4.2)
    de = np.concatenate([[ds[0]], (ds[1:] + ds[:-1]) / 2, [ds[-1]]])
    ax.pcolormesh(_cell_edges(xs, bool(s.get("log"))), de, np.ma.masked_invalid(grid), cmap=cmap, norm=norm,
                  alpha=0.6, shading="flat")
    ax.plot(xs, tb, "-o", ms=3, color=_BEFORE, label="threshold before")
    ax.plot(xs, ta, "--o", ms=3, color=_AFTER, label="threshold after")
    d0 = doc["conclusion"]["delta"]
    ax.axhline(d0, color="k", lw=0.8, ls="--", label=f"discount factor {d0:.3g}")
    if s.get("observed") is not None:
        ax.axvline(s["observed"], color="k", lw=0.8, ls=":", label=f"observed {name} {s['observed']:.4g}")
    for f in s["flips"]:
        ax.axvline(f, color="#7b3294", lw=1.2, label=f"effect flips at {f:.4g}")
    handles, labels = ax.get_legend_handles_labels()
    inv = {v: k for k, v in _CODES.items()}
    for v in sorted({int(v) for v in np.unique(grid[np.isfinite(grid)])}):
        handles.append(plt.Rectangle((0, 0), 1, 1, color=_CATEGORY_COLOURS[inv[v]], alpha=0.6))
        labels.append(_CATEGORY_LABELS[inv[v]])
    _legend_outside(ax, handles, labels, title="thresholds, discount factor (lines) and conclusion (shading)")
    if s.get("log"):
        ax.set_xscale("log")
    ax.set_xlabel(_INPUT_LABELS[name])
    ax.set_ylabel("discount factor")
    ax.set_ylim(0, 1)
    ax.set_title(f"Sensitivity to the calibration input '{name}' ({doc['conclusion']['scheme']})", fontsize=FONT)
    return Drawn(f"sensitivity_{name}", fig, f"Sensitivity to the calibration input '{name}': critical discount "
                                             "factors before and after, and the conclusion at each discount factor")


def assessment_figures(a) -> list:
    """The figures of an assessment.

    Parameters
    ----------
    a : Assessment or dict

    Returns
    -------
    list of Drawn
        Thresholds before and after; partial collusion and simulated persistence (when computed); one figure per
        sensitivity range.
    """
    d = assessment_data(a)
    plt = pyplot()
    figs = [_thresholds(plt, d)]
    if d["before"]["partial_collusion"]:
        figs.append(_partial(plt, d))
    if "simulation" in d["before"]:
        figs.append(_persistence(plt, d))
    sens = d["sensitivity"]
    figs += [_phase(plt, d, name, s) for name, s in in_order(sens) if name not in ("delta", "noise")]
    if "delta" in sens:
        figs.append(_along_delta(plt, sens["delta"]))
    if "noise" in sens:
        figs.append(_along_noise(plt, sens["noise"]))
    sets = payoff_figure(d)
    if sets is not None:
        figs.append(sets)
    pt, _mv = assessment_pairs(d)
    if pt is not None:
        figs.append(pairs_figure(pt, "grim trigger"))
    return figs
