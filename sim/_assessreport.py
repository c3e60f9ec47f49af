"""Presentation of an assessment (:class:`sim.assess.Assessment`): tables, figures, the summary and
the evidence bundle.

* :func:`assessment_tables` -- every table of the summary as ``(headers, rows)``;
* :func:`assessment_figures` -- the figures (matplotlib, Agg backend), as unsaved figure objects;
* :func:`summary_blocks` -- the summary in reading order (headings, paragraphs, lists, tables,
  figures);
* :func:`write_assessment_bundle` -- the evidence bundle, written with the shared
  :class:`sim.bundle.Bundle` (Markdown and self-contained HTML summaries, PNG and PDF figures, CSV
  and LaTeX tables, manifest with hashes), plus the full result as ``assessment.json`` and the
  experiment file;
* :func:`render_text` -- the terminal summary.

Nothing here recomputes a number: it only reads the assessment.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._text import CAUTION, fmt_num, table
from .assess import FACTOR_LEGEND, IVALDI_SOURCE
from .merger import difference

__all__ = ["assessment_figures", "assessment_tables", "render_text", "summary_blocks", "write_assessment_bundle"]

_CATEGORY_COLOURS = {"neither": "#d9d9d9", "both": "#fdae61", "after only": "#d7191c", "before only": "#2c7bb6"}
_CATEGORY_LABELS = {"neither": "sustainable neither before nor after", "both": "sustainable before and after",
                    "after only": "sustainable only after the merger", "before only": "sustainable only before"}


def _n(x, digits: int = 4) -> str:
    return fmt_num(x, digits)


def _yes(x) -> str:
    if x is None:
        return "-"
    return "yes" if x else "no"


# --------------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------------


def assessment_tables(a) -> dict:
    """Every table of the summary: name -> (headers, rows); cells are numbers or strings."""
    out = {}
    c = a.conclusion
    out["thresholds"] = (
        ["scheme", "before", "binding before", "after", "binding after", "effect of the merger",
         f"sustainable at {c['delta']:.4g} before", "after"],
        [[s["scheme"], s["before"], s["binding_before"], s["after"], s["binding_after"], s["direction"],
          _yes(s["sustainable_before"]), _yes(s["sustainable_after"])] for s in c["schemes"]],
    )
    for side in (a.before, a.after):
        rep = side.report
        rows = []
        schemes = [("grim trigger", rep.grim)] + [(f"Nash reversion, T={f.T}", f) for f in rep.finite] + [
            ("stick and carrot", rep.stick_carrot)]
        for name, s in schemes:
            rows.append([name, *[float(x) for x in s.per_firm]])
        out[f"thresholds_per_firm_{side.label}"] = (["scheme", *side.names], rows)
        st = rep.stage
        frows = []
        for i, nm in enumerate(side.names):
            frows.append([nm, float(st.collusive.firm_profits[i]), float(st.deviation_profits[i]),
                          float(st.nash.firm_profits[i]), float(st.minmax_profits[i])])
        out[f"stage_game_{side.label}"] = (["firm", "collusive profit", "deviation profit", "Nash profit",
                                            "minmax profit"], frows)
    prow = []
    after_by = {(p.scheme, p.T, p.delta): p for p in a.after.partial}
    for p in a.before.partial:
        q = after_by.get((p.scheme, p.T, p.delta))
        name = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}.get(p.scheme, f"Nash reversion, T={p.T}")
        prow.append([p.delta, name, p.profit_gain, None if q is None else q.profit_gain,
                     None if q is None else difference(q.profit_gain, p.profit_gain)])
    out["partial_collusion"] = (["delta", "scheme", "profit gain before", "profit gain after", "change"], prow)
    arow = []
    for side in (a.before, a.after):
        s = side.asymmetry
        arow.append([side.label, len(side.names), s["hhi"], s["share_ratio"], s["cost_ratio"], s["cost_cv"],
                     s["capacity_ratio"] if s["capacity_ratio"] is not None else "-"])
    out["asymmetry"] = (["market", "firms", "HHI", "largest / smallest share", "highest / lowest cost",
                         "cost coefficient of variation", "largest / smallest capacity"], arow)
    srow = []
    for side in (a.before, a.after):
        for i, nm in enumerate(side.names):
            s = side.asymmetry
            srow.append([side.label, nm, s["shares"][i], s["costs"][i],
                         s["capacities"][i] if s["capacities"] is not None else "-", s["products"][i]])
    out["firms"] = (["market", "firm", "share (static Nash)", "marginal cost", "capacity", "products"], srow)
    m = a.merger
    out["merger_prices"] = (["product", "owner after", "price before", "price after", "change"],
                            [[r["product"], r["owner"] or "-", r["pre"], r["post"], r["change"]]
                             for r in m.price_changes()])
    if a.before.simulation is not None:
        keys = [("collusive_share", "share of collusive periods"), ("war_share", "share of price-war periods"),
                ("first_breakdown", "time to first breakdown (periods)"),
                ("broken_down", "share of replications that broke down"),
                ("spell_length", "mean collusive spell (periods)"), ("profit_gain", "profit gain"),
                ("price", "mean market price"), ("consumer_surplus", "mean consumer surplus")]
        rows = []
        for k, label in keys:
            eb, ea = a.before.simulation.metrics[k], a.after.simulation.metrics[k]
            rows.append([label, eb.value, eb.low, eb.high, ea.value, ea.low, ea.high])
        out["persistence"] = (["metric", "before", "95% low", "95% high", "after", "95% low", "95% high"], rows)
    frow = []
    for f in a.factors:
        frow.append([f["factor"], f["varied"], _factor_values(f), f["model_direction"], f["ivaldi_direction"],
                     "" if f["agrees"] is None else _yes(f["agrees"]), f["reading"]])
    out["factors"] = (FACTOR_HEADERS, frow)
    if a.calibration is not None:
        cal = a.calibration
        rows = []
        for k in range(len(cal.costs)):
            rows.append([k + 1, cal.observed["prices"][k], cal.observed["quantities"][k], cal.observed["shares"][k],
                         cal.costs[k], cal.margins[k], cal.equilibrium["prices"][k],
                         cal.equilibrium["quantities"][k], cal.residuals["prices"][k],
                         cal.residuals["quantities"][k]])
        out["calibration"] = (["product", "observed price", "observed quantity", "observed share", "implied cost",
                               "implied margin", "model price", "model quantity", "price residual",
                               "quantity residual"], rows)
        out["calibration_parameters"] = (["parameter", "value"], [[k, _param_text(v)] for k, v in
                                                                  cal.parameters.items()])
    for name, s in a.sensitivity.items():
        if name == "delta":
            rows = [[d, cat, gb, ga] for d, cat, gb, ga in zip(s["values"], s["category"], s["profit_gain_before"],
                                                              s["profit_gain_after"])]
            out["sensitivity_delta"] = (["delta", "conclusion", "profit gain before", "profit gain after"], rows)
        elif name == "noise":
            rows = [[k, b, a_, d] for k, b, a_, d in zip(s["scales"], s["collusive_share_before"],
                                                        s["collusive_share_after"], s["difference"])]
            out["sensitivity_noise"] = (["noise scale", "collusive share before", "collusive share after",
                                         "after - before"], rows)
        else:
            rows = [[x, b, a_, d, cat, st if st != "ok" else ""] for x, b, a_, d, cat, st in
                    zip(s["values"], s["threshold_before"], s["threshold_after"], s["direction"],
                        s["category_at_delta"], s["status"])]
            out[f"sensitivity_{name}"] = ([name, "threshold before", "threshold after", "effect of the merger",
                                           f"conclusion at delta {c['delta']:.4g}", "status"], rows)
        if s.get("labels"):
            # the range's own labels beside its values
            headers, rows = out[f"sensitivity_{name}"]
            out[f"sensitivity_{name}"] = ([headers[0], "label", *headers[1:]],
                                          [[r[0], lab, *r[1:]] for r, lab in zip(rows, s["labels"])])
    return {name: (headers, [[_plain(v) for v in r] for r in rows]) for name, (headers, rows) in out.items()}


#: Columns of the factor table; the last one says in words what the row's direction cells mean (the
#: table's legend, row by row, so that the CSV file carries it too).
FACTOR_HEADERS = ["factor (the change considered)", "what the model varies", "values (before; after)",
                  "model: effect on collusion", "Ivaldi et al. (2003): effect on collusion", "agree", "reading"]


def _plain(v):
    """A table cell as a plain Python value (numpy scalars would be written as ``np.float64(...)``)."""
    if isinstance(v, np.bool_):
        return bool(v)
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.floating):
        return float(v)
    return v


def _param_text(v) -> str:
    if isinstance(v, list | tuple):
        return ", ".join(_n(x, 6) for x in v)
    return _n(v, 6)


def _factor_values(f: dict) -> str:
    v = f["values"]
    name = f["key"]
    if not v:
        return f["note"] or "-"
    if name == "firms":
        return f"{v['base_label']}: {_n(v['base'])}; {v['varied_label']}: {_n(v['varied'])}"
    parts = []
    for side in ("before", "after"):
        x = v.get(side)
        if not x:
            continue
        if name == "symmetry":
            parts.append(f"{side}: actual {_n(x['actual'])}, symmetric {_n(x['symmetric'])}")
        elif name == "transparency":
            parts.append(f"{side}: {_n(x['noise'])} at the experiment's noise, {_n(x['scaled_noise'])} at noise "
                         f"x{x['scale']:g}")
        elif name == "frequency":
            parts.append(f"{side}: threshold {_n(x['threshold'])}, longest interval "
                         f"{_n(x.get('longest_interval'), 3)} periods")
        elif name == "growth":
            parts.append(f"{side}: growth needed {_n(x['growth_needed'])}; growing {_yes(x['sustainable_growing'])}, "
                         f"declining {_yes(x['sustainable_declining'])}")
    return "; ".join(parts)


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams["svg.hashsalt"] = "supergame"
    return plt


def _val(x):
    return np.nan if x is None else float(x)


#: Caption of the factor table (the LaTeX file carries it): its legend.
FACTORS_CAPTION = ("Factors, each named by the change it considers: its effect on collusion computed by the model and "
                   "in Ivaldi et al. (2003). " + FACTOR_LEGEND)

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


def assessment_figures(a) -> list:
    """The figures of an assessment as ``(name, matplotlib figure, caption)``; the caller saves and closes
    them (the bundle saves PNG and PDF without timestamps, so the same content gives the same bytes)."""
    plt = _pyplot()
    figs = []
    delta = a.conclusion["delta"]

    # 1. thresholds per scheme, before and after
    sch = a.conclusion["schemes"]
    fig, ax = plt.subplots(figsize=(8, 4))
    x = np.arange(len(sch))
    b = [_val(s["before"]) for s in sch]
    af = [_val(s["after"]) for s in sch]
    for off, vals, lab, col in ((-0.2, b, "before", "#2c7bb6"), (0.2, af, "after", "#d7191c")):
        ok = ~np.isnan(vals)
        ax.bar(x[ok] + off, np.asarray(vals)[ok], 0.4, label=lab, color=col)
        if (~ok).any():
            # not sustainable below one: an empty hatched bar up to one
            ax.bar(x[~ok] + off, np.ones((~ok).sum()), 0.4, color="none", edgecolor=col, hatch="//", lw=0.8)
            for k in np.flatnonzero(~ok):
                ax.text(k + off, 1.0, "none", ha="center", va="bottom", fontsize=7)
    ax.axhline(delta, color="k", lw=1, ls="--", label=f"discount factor {delta:.3g}")
    ax.set_xticks(x, [s["scheme"] for s in sch], rotation=20, ha="right", fontsize=8)
    ax.set_ylim(0, 1.08)
    ax.set_ylabel("critical discount factor (market)")
    ax.set_title("Critical discount factors before and after the merger ('none': not sustainable below one)",
                 fontsize=9)
    ax.legend(fontsize=8, loc="lower right")
    fig.tight_layout()
    figs.append(("thresholds", fig, _CAPTIONS["thresholds"]))

    # 2. partial collusion against delta
    if a.before.partial:
        fig, ax = plt.subplots(figsize=(7, 4))
        groups = {}
        for side in (a.before, a.after):
            for p in side.partial:
                groups.setdefault((p.scheme, p.T), {}).setdefault(side.label, []).append((p.delta, p.profit_gain))
        for k, (key, sides) in enumerate(sorted(groups.items(), key=lambda t: (t[0][0], t[0][1] or 0))):
            name = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}.get(key[0], f"reversion T={key[1]}")
            for label, ls in (("before", "-"), ("after", "--")):
                pts = sorted(sides.get(label, []))
                if pts:
                    ax.plot([p[0] for p in pts], [p[1] for p in pts], ls, marker="o", ms=3, color=f"C{k}",
                            label=f"{name}, {label}")
        ax.set_xlabel("discount factor")
        ax.set_ylabel("profit gain of the best sustainable outcome")
        ax.set_ylim(-0.02, 1.05)
        ax.set_title("Partial collusion before (solid) and after (dashed) the merger", fontsize=9)
        ax.legend(fontsize=7, ncol=2)
        fig.tight_layout()
        figs.append(("partial_collusion", fig, _CAPTIONS["partial_collusion"]))

    # 3. simulated persistence by period
    if a.before.simulation is not None:
        fig, ax = plt.subplots(figsize=(7, 3.5))
        for side, col in ((a.before, "#2c7bb6"), (a.after, "#d7191c")):
            y = np.asarray(side.simulation.collusive_by_period, dtype=float)
            ax.plot(np.arange(1, y.size + 1), y, color=col, lw=1, label=side.label)
        ax.set_xlabel("period")
        ax.set_ylabel("share of replications colluding")
        ax.set_ylim(-0.02, 1.02)
        ax.set_title("Simulated persistence of collusion under the experiment's monitoring noise", fontsize=9)
        ax.legend(fontsize=8)
        fig.tight_layout()
        figs.append(("persistence", fig, _CAPTIONS["persistence"]))

    # 4. sensitivity
    for name, s in a.sensitivity.items():
        if name in ("delta", "noise"):
            continue
        figs += _phase_figure(plt, a, name, s)
    if "delta" in a.sensitivity:
        s = a.sensitivity["delta"]
        fig, ax = plt.subplots(figsize=(7, 4))
        ds = np.asarray(s["values"])
        for lo_, hi_, cat in _segments(ds, s["category"]):
            ax.axvspan(lo_, hi_, color=_CATEGORY_COLOURS[cat], alpha=0.35, lw=0)
        ax.plot(ds, s["profit_gain_before"], "-o", ms=3, color="#2c7bb6", label="before")
        ax.plot(ds, s["profit_gain_after"], "--o", ms=3, color="#d7191c", label="after")
        for t, lab in ((s["threshold_before"], "threshold before"), (s["threshold_after"], "threshold after")):
            if t is not None:
                ax.axvline(t, color="k", lw=0.8, ls=":")
                ax.text(t, 0.02, lab, rotation=90, fontsize=7, va="bottom", ha="right")
        if s.get("log"):
            ax.set_xscale("log")
        ax.set_xlabel("discount factor")
        ax.set_ylabel(f"profit gain ({s['scheme']})")
        ax.set_ylim(-0.02, 1.25)
        handles = [plt.Rectangle((0, 0), 1, 1, color=_CATEGORY_COLOURS[c], alpha=0.35) for c in _CATEGORY_COLOURS
                   if c in s["category"]]
        labels = [_CATEGORY_LABELS[c] for c in _CATEGORY_COLOURS if c in s["category"]]
        h0, l0 = ax.get_legend_handles_labels()
        ax.legend(h0 + handles, l0 + labels, fontsize=7, loc="lower right")
        ax.set_title("Where the conclusion flips along the discount factor", fontsize=9)
        fig.tight_layout()
        figs.append(("sensitivity_delta", fig, _CAPTIONS["sensitivity_delta"]))
    if "noise" in a.sensitivity:
        s = a.sensitivity["noise"]
        fig, ax = plt.subplots(figsize=(7, 4))
        k = np.asarray(s["scales"])
        for lab, col, ls in (("before", "#2c7bb6", "-"), ("after", "#d7191c", "--")):
            y = np.asarray(s[f"collusive_share_{lab}"])
            ci = np.asarray(s[f"collusive_share_{lab}_ci"], dtype=float)
            ax.plot(k, y, ls, marker="o", ms=3, color=col, label=lab)
            ax.fill_between(k, ci[:, 0], ci[:, 1], color=col, alpha=0.15, lw=0)
        for f in s["flips"]:
            ax.axvline(f, color="k", lw=0.8, ls=":")
        if s.get("log"):
            ax.set_xscale("log")
        ax.set_xlabel("noise scale (1 = the experiment's monitoring noise)")
        ax.set_ylabel("share of collusive periods")
        ax.set_ylim(-0.02, 1.02)
        ax.set_title("Simulated persistence against monitoring noise (95% confidence bands)", fontsize=9)
        ax.legend(fontsize=8)
        fig.tight_layout()
        figs.append(("sensitivity_noise", fig, _CAPTIONS["sensitivity_noise"]))
    return figs


def _segments(xs: np.ndarray, cats: list):
    """Contiguous spans of equal category along ``xs`` (boundaries halfway between points)."""
    out = []
    if len(xs) == 0:
        return out
    edges = np.concatenate([[xs[0]], (xs[1:] + xs[:-1]) / 2, [xs[-1]]])
    for k, c in enumerate(cats):
        if c is None:
            continue
        out.append((edges[k], edges[k + 1], c))
    return out


def _phase_figure(plt, a, name: str, s: dict) -> list:
    xs = np.asarray(s["values"], dtype=float)
    tb = np.array([_val(v) for v in s["threshold_before"]])
    ta = np.array([_val(v) for v in s["threshold_after"]])
    ok = np.array([st == "ok" for st in s["status"]])
    lo = 0.0
    ds = np.linspace(lo, 1.0, 201)
    grid = np.full((ds.size, xs.size), np.nan)
    codes = {"neither": 0, "before only": 1, "both": 2, "after only": 3}
    for j in range(xs.size):
        if not ok[j]:
            continue
        for i, d in enumerate(ds):
            pre = np.isfinite(tb[j]) and d >= tb[j]
            post = np.isfinite(ta[j]) and d >= ta[j]
            grid[i, j] = codes[{(True, True): "both", (False, False): "neither", (False, True): "after only",
                                (True, False): "before only"}[(bool(pre), bool(post))]]
    from matplotlib.colors import BoundaryNorm, ListedColormap

    cmap = ListedColormap([_CATEGORY_COLOURS[c] for c in ("neither", "before only", "both", "after only")])
    norm = BoundaryNorm([-0.5, 0.5, 1.5, 2.5, 3.5], 4)
    fig, ax = plt.subplots(figsize=(7.5, 4.5))
    if xs.size > 1 and s.get("log"):
        # cell edges halfway between points on the log axis
        lx = np.log(xs)
        xe = np.exp(np.concatenate([[lx[0] - (lx[1] - lx[0]) / 2], (lx[1:] + lx[:-1]) / 2,
                                    [lx[-1] + (lx[-1] - lx[-2]) / 2]]))
    elif xs.size > 1:
        xe = np.concatenate([[xs[0] - (xs[1] - xs[0]) / 2], (xs[1:] + xs[:-1]) / 2,
                             [xs[-1] + (xs[-1] - xs[-2]) / 2]])
    else:
        xe = np.array([xs[0] - 0.5, xs[0] + 0.5])
    de = np.concatenate([[ds[0]], (ds[1:] + ds[:-1]) / 2, [ds[-1]]])
    ax.pcolormesh(xe, de, np.ma.masked_invalid(grid), cmap=cmap, norm=norm, alpha=0.6, shading="flat")
    ax.plot(xs, tb, "-o", ms=3, color="#2c7bb6", label="threshold before")
    ax.plot(xs, ta, "--o", ms=3, color="#d7191c", label="threshold after")
    d0 = a.conclusion["delta"]
    ax.axhline(d0, color="k", lw=0.8, ls="--", label=f"discount factor {d0:.3g}")
    if s.get("observed") is not None:
        ax.axvline(s["observed"], color="k", lw=0.8, ls=":", label=f"observed {name} {s['observed']:.4g}")
    for f in s["flips"]:
        ax.axvline(f, color="#7b3294", lw=1.2, label=f"effect flips at {f:.4g}")
    handles, labels = ax.get_legend_handles_labels()
    present = {int(v) for v in np.unique(grid[np.isfinite(grid)])}
    inv = {v: k for k, v in codes.items()}
    for v in sorted(present):
        handles.append(plt.Rectangle((0, 0), 1, 1, color=_CATEGORY_COLOURS[inv[v]], alpha=0.6))
        labels.append(_CATEGORY_LABELS[inv[v]])
    ax.legend(handles, labels, fontsize=7, loc="lower left")
    if s.get("log"):
        ax.set_xscale("log")
    ax.set_xlabel(name.replace("_", " ") + (" (reference product)" if name in ("margin", "elasticity") else ""))
    ax.set_ylabel("discount factor")
    ax.set_ylim(0, 1)
    ax.set_title(f"Sensitivity to the calibration input '{name}' ({a.conclusion['scheme']})", fontsize=9)
    fig.tight_layout()
    return [(f"sensitivity_{name}", fig, f"Sensitivity to the calibration input '{name}': critical discount factors "
                                         "before and after, and the conclusion at each discount factor")]


# --------------------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------------------


def _market_text(market) -> str:
    d = market.to_dict()
    skip = {"model", "demand"}
    params = "; ".join(f"{k} {_param_text(v) if isinstance(v, list) else _n(v, 6)}" for k, v in d.items()
                       if k not in skip)
    return f"{d['model'].capitalize()} competition, {d['demand']} demand: {params}"


def summary_blocks(a, figures=()) -> list:
    """The summary in reading order, as blocks: ``("heading", text)``, ``("paragraph", text)``,
    ``("bullets", [items])``, ``("table", name, caption)`` (a table of :func:`assessment_tables`) and
    ``("figure", name)`` (one of ``figures``, the names of :func:`assessment_figures`)."""
    figures = set(figures)
    T = assessment_tables(a)
    c = a.conclusion
    m = a.merger
    B = [("paragraph", "Caution: " + CAUTION + " What follows is a model result under the assumptions stated at "
                       "the end, not a finding of fact.")]

    def fig(name):
        if name in figures:
            B.append(("figure", name))

    B.append(("heading", "Conclusion under the stated assumptions"))
    B.append(("paragraph", c["statement"]))
    if c.get("robustness"):
        B.append(("bullets", [f"sensitivity to {k.replace('_', ' ')}: {v}" for k, v in c["robustness"].items()]))
    B.append(("table", "thresholds", "Critical discount factors of each scheme ('-': not sustainable below one)"))
    fig("thresholds")
    B.append(("heading", "Setup"))
    items = [f"Pre-merger market: {_market_text(m.pre)}",
             f"Merger: {' and '.join(m.names_pre[i] for i in m.merging)} become {m.names_post[m.merged]}"
             + (f", efficiency {m.efficiency:g}" if m.efficiency else "")
             + (f", stated post-merger cost {a.settings['merger']['cost']}" if a.settings["merger"]["cost"]
                is not None else ""),
             f"Post-merger market: {_market_text(m.post)}",
             f"Collusive agreement: {a.settings['agreement']}; headline scheme: {c['scheme']}; discount factor "
             f"{c['delta']:.4g}"]
    if a.settings["simulate"]:
        r = a.settings["run"]
        mon = a.settings["monitoring"]
        items.append(f"Simulation: {r['periods']} periods, {r['replications']} replications, seed {r['seed']}, "
                     f"{r['horizon']} horizon; monitoring '{mon['signal']}', {mon['noise']} demand shock sigma "
                     f"{mon['sigma']:g}, perception error {mon['perception_error']:g}, implementation error "
                     f"{mon['implementation_error']:g}; line-up before: "
                     + ", ".join(e["strategy"] for e in a.settings["lineup"]) + "; after: "
                     + ", ".join(e["strategy"] for e in a.settings["lineup_after"]))
    B.append(("bullets", items))
    if a.calibration is not None:
        cal = a.calibration
        B.append(("heading", "Calibration"))
        B.append(("paragraph", f"Conduct assumed: {cal.conduct}. The price parameter is identified by "
                               f"{cal.identified_by}. The calibrated model's static Nash equilibrium "
                               + ("reproduces" if cal.reproduced else "does NOT reproduce")
                               + f" the observed prices and quantities: largest relative residual "
                                 f"{cal.max_relative_residual:.3g} (tolerance 1e-08). Market elasticity at the "
                                 f"observed point: {cal.market_elasticity:.6g}."))
        B.append(("table", "calibration_parameters", "Calibrated demand parameters"))
        B.append(("table", "calibration", "Observed data, implied costs and margins, and the model's static "
                                          "equilibrium with its residuals"))
        if cal.fit is not None:
            res = np.asarray(cal.fit["residuals"])
            B.append(("paragraph", f"Over-identified input ({cal.fit['input']} of every product), fitted by least "
                                   f"squares: largest absolute residual {np.abs(res).max():.3g}."))
    B.append(("heading", "The post-merger static equilibrium"))
    cs = difference(m.consumer_surplus_post, m.consumer_surplus_pre)
    cs_rel = cs / m.consumer_surplus_pre if m.consumer_surplus_pre else 0.0
    B.append(("paragraph", f"HHI at the static equilibrium: {m.hhi_pre:.0f} before, {m.hhi_post:.0f} after "
                           f"(change {m.delta_hhi:+.0f}; at pre-merger shares {m.naive_delta_hhi:.0f}). Consumer "
                           f"surplus at the static equilibrium changes by {cs:+.6g} ({cs_rel:+.2%})."))
    B.append(("table", "merger_prices", "Static Nash prices before and after the merger"))
    if m.notes:
        B.append(("bullets", list(m.notes)))
    B.append(("heading", "Stage games and per-firm thresholds"))
    for side in (a.before, a.after):
        B.append(("table", f"stage_game_{side.label}", f"Stage game {side.label} the merger"))
        B.append(("table", f"thresholds_per_firm_{side.label}",
                  f"Critical discount factor of each firm {side.label} the merger ('-': not sustainable)"))
    if a.before.partial:
        B.append(("heading", "Partial collusion"))
        B.append(("paragraph", "Below a threshold the firms can still sustain a less profitable outcome on the path "
                               "from static Nash to the agreement; its profit gain is (profit - Nash) / (collusive - "
                               "Nash)."))
        B.append(("table", "partial_collusion", "Profit gain of the most profitable sustainable outcome"))
        fig("partial_collusion")
    if "persistence" in T:
        B.append(("heading", "Simulated persistence of collusion"))
        B.append(("paragraph", "Firms follow the line-up's strategies under the experiment's monitoring noise; "
                               "intervals are 95% confidence intervals across replications. Simulated persistence "
                               "reflects the noise and the number of firms that can set off a punishment; whether "
                               "the strategies are an equilibrium at the discount factor is what the thresholds "
                               "say."))
        B.append(("table", "persistence", "Persistence metrics before and after the merger"))
        fig("persistence")
    B.append(("heading", "Asymmetry"))
    B.append(("table", "asymmetry", "Asymmetry measures at the static equilibrium"))
    B.append(("table", "firms", "Firms at the static equilibrium"))
    B.append(("heading", "The usual factors"))
    B.append(("paragraph", "Each factor is named by the change it considers (fewer firms, more symmetric firms, "
                           "less monitoring noise, more frequent interaction, growing demand) and varied in the model "
                           "with the rest held fixed; the direction the model computes is set beside the direction in "
                           f"{IVALDI_SOURCE}."))
    B.append(("table", "factors", FACTORS_CAPTION))
    notes = [f"{f['factor']}: {f['note']}" for f in a.factors if f["note"]]
    if notes:
        B.append(("bullets", notes))
    if a.sensitivity:
        B.append(("heading", "Sensitivity"))
        for key, s in a.sensitivity.items():
            tname = f"sensitivity_{key}"
            if key == "delta":
                B.append(("table", tname, "Conclusion along the discount factor"))
            elif key == "noise":
                B.append(("table", tname, "Simulated persistence against the monitoring noise (scale 1: the "
                                          "experiment's noise)"))
            else:
                B.append(("table", tname, f"Thresholds ({c['scheme']}) against the calibration input "
                                          f"'{key.replace('_', ' ')}'"))
                if s.get("note"):
                    B.append(("paragraph", s["note"] + "."))
            fig(tname)
    B.append(("heading", "Assumptions and limitations"))
    B.append(("bullets", list(a.assumptions) + [
        "critical discount factors say when an agreement can be sustained, not that firms coordinate: the model "
        "does not show that coordination happens or would happen",
        "the punishment schemes, the collusive agreement and the monitoring structure are modelling choices; other "
        "choices give other numbers"]))
    return B


def render_text(a, name: str = "assessment") -> str:
    """The terminal summary: the headline, the thresholds, persistence, the factors and the caution."""
    T = assessment_tables(a)
    c = a.conclusion
    lines = [f"Assessment: {name}", ""]
    if a.calibration is not None:
        cal = a.calibration
        lines.append(f"Calibration ({cal.demand} demand, {cal.conduct.split(':')[0]}; identified by "
                     f"{cal.identified_by}): the model's static equilibrium "
                     + ("reproduces" if cal.reproduced else "does NOT reproduce")
                     + f" the observed prices and quantities (largest relative residual "
                       f"{cal.max_relative_residual:.3g})")
        lines.append("")
    m = a.merger
    lines.append(f"Merger: {' + '.join(m.names_pre[i] for i in m.merging)}; HHI {m.hhi_pre:.0f} -> {m.hhi_post:.0f}; "
                 + "; ".join(f"{'product ' + str(r['product']) if r['product'] != 'market' else 'market price'} "
                             f"{r['change']:+.2%}" for r in m.price_changes()))
    lines.append("")
    lines.append("Critical discount factors ('-': not sustainable below one)")
    h, rows = T["thresholds"]
    lines.append(table(h, rows, "lrlrllll"))
    lines.append("")
    if "persistence" in T:
        lines.append("Simulated persistence (95% confidence intervals)")
        h, rows = T["persistence"]
        lines.append(table(h, rows))
        lines.append("")
    lines.append("Factors, each named by the change it considers: its effect on collusion in the model and in "
                 "Ivaldi et al. (2003)")
    h, rows = T["factors"]
    lines.append(table(["factor", "model", "Ivaldi et al. (2003)", "agree"],
                       [[r[0], r[3], r[4], r[5] or "-"] for r in rows], "llll"))
    lines.append(FACTOR_LEGEND)
    lines.append("")
    lines.append(c["statement"])
    for k, v in (c.get("robustness") or {}).items():
        lines.append(f"  sensitivity ({k}): {v}")
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)




# --------------------------------------------------------------------------------------------------
# Evidence bundle
# --------------------------------------------------------------------------------------------------

def _manifest_extra(a, raw: bytes, name: str, start: float, end: float, argv, source, key) -> dict:
    import datetime as dt
    import hashlib

    run = a.settings["run"]
    k = [int(x) for x in key]
    return {
        "kind": "assess",
        "experiment": {"file": "experiment.toml", "sha256": hashlib.sha256(raw).hexdigest(), "name": name,
                       "source": None if source is None else str(source)},
        "command": argv,
        "seeds": {"run.seed": run["seed"],
                  "rule": "stream key k draws from numpy.random.SeedSequence(run.seed, spawn_key=k)",
                  "streams": {"simulation before": [*k, 0], "simulation after": [*k, 1],
                              "rescaled noise before": [*k, 2, 0], "rescaled noise after": [*k, 2, 1],
                              "noise sensitivity point j (from 0)": f"{[*k, 3]} + [j, 0] before, [j, 1] after"}}
        if a.settings["simulate"] else {},
        "started": dt.datetime.fromtimestamp(start, tz=dt.UTC).isoformat(timespec="seconds"),
        "finished": dt.datetime.fromtimestamp(end, tz=dt.UTC).isoformat(timespec="seconds"),
    }


def write_assessment_bundle(target, a, experiment_file, name: str, start: float, end: float, argv=None,
                            source=None, key=(0,)) -> Path:
    """Write the evidence bundle of an assessment into ``target``.

    :class:`sim.bundle.Bundle` stages the bundle beside ``target`` and moves it into place at the
    end, so that a failure leaves no partial folder. Contents: ``summary.md``, ``summary.html`` (self-contained),
    ``figures/*.png|pdf``, ``tables/*.csv|tex``, ``assessment.json`` (every number),
    ``experiment.toml`` (the experiment file byte for byte) and ``manifest.json`` (the experiment's
    SHA-256, the command line, package versions, platform, seeds, start and end times, and the SHA-256
    of every other file). Uses the shared :class:`sim.bundle.Bundle` writer.

    ``source`` is where the experiment file was read from and ``key`` the stream key of the
    assessment's cell (``(0,)``, the one cell of a run folder), both recorded in the manifest. Written as
    ``RUN_DIR/report`` by ``supergame assess``, whose run folder ``supergame verify`` checks.
    """
    from ._jsonutil import dumps

    target = Path(target)
    raw = Path(experiment_file).read_bytes()
    title = f"Coordinated effects of a merger: {name}"
    tables = assessment_tables(a)
    figs = assessment_figures(a)
    blocks = summary_blocks(a, [f[0] for f in figs])
    blocks += _reproduce_blocks(a, raw, key)
    extra = _manifest_extra(a, raw, name, start, end,
                            argv if argv is not None else ["supergame", "assess", str(experiment_file)], source, key)
    result = (dumps(a.to_dict(), indent=2, sort_keys=True) + "\n").encode("utf-8")
    _write_with_bundle(target, title, blocks, tables, figs, raw, result, extra)
    return target


def _reproduce_blocks(a, raw: bytes, key) -> list:
    import hashlib

    seed = a.settings["run"]["seed"]
    items = [f"Experiment file: `experiment.toml` (SHA-256 `{hashlib.sha256(raw).hexdigest()}`), copied into this "
             "bundle and into the run folder."]
    if a.settings["simulate"]:
        items.append(f"Seed {seed} (`run.seed`); the simulations draw from the streams of the run folder's one cell "
                     f"(stream keys starting {[int(k) for k in key]}, listed in `manifest.json`). Results do not "
                     "depend on the number of threads.")
    items.append("`supergame assess experiment.toml` and `supergame run experiment.toml` give the same numbers; "
                 "`supergame verify RUN_DIR` checks the SHA-256 of every file of the run folder, this bundle "
                 "included, and re-runs the assessment to confirm every stored number.")
    return [("heading", "Reproducing these numbers"), ("bullets", items)]


def _write_with_bundle(folder: Path, title, blocks, tables, figs, raw: bytes, result: bytes, extra: dict) -> None:
    import matplotlib.pyplot as plt

    from .bundle import Bundle

    fig_of = {name: (fig, cap) for name, fig, cap in figs}
    try:
        # the bundle is staged beside its folder and moved into place by write(); on an error the
        # context drops what was staged, leaving the folder as it was
        with Bundle(folder, title) as b:
            _fill(b, blocks, tables, fig_of, raw, result, extra)
    finally:
        for fig, _cap in fig_of.values():  # figures not added (an error part-way)
            plt.close(fig)


def _fill(b, blocks, tables, fig_of: dict, raw: bytes, result: bytes, extra: dict) -> None:
    shown = set()
    for blk in blocks:
        if blk[0] == "heading":
            b.heading(blk[1])
        elif blk[0] == "paragraph":
            b.paragraph(blk[1])
        elif blk[0] == "bullets":
            b.bullets(blk[1])
        elif blk[0] == "table":
            headers, rows = tables[blk[1]]
            b.table(blk[1], headers, rows, caption=blk[2], max_rows=200)
            shown.add(blk[1])
        elif blk[0] == "figure":
            fig, cap = fig_of.pop(blk[1])
            b.figure(blk[1], fig, cap)
    for name, (headers, rows) in tables.items():
        if name not in shown:
            b.table(name, headers, rows, caption=name.replace("_", " "), show=False)
    b.attach("experiment.toml", raw)
    b.attach("assessment.json", result)
    b.write(manifest=extra)

