"""Presentation of an assessment: tables, figures, the summary and the evidence bundle, all read from
the assessment's plain JSON data -- :meth:`sim.antitrust.assess.Assessment.to_dict`, which a cell of the
``assess`` kind stores under ``arrays["assessment"]``.

* :func:`assessment_data` -- that data, from a stored cell's document or an :class:`~sim.antitrust.assess.Assessment`;
* :func:`assessment_tables` -- every table of the summary as ``(headers, rows)``;
* :func:`assessment_figures` -- the figures (matplotlib, Agg backend), as unsaved figure objects;
* :func:`summary_blocks` -- the summary in reading order (headings, paragraphs, lists, tables,
  figures);
* :func:`kind_report` -- the kind's account in the evidence bundle of a run folder
  (:attr:`sim.runner.kinds.Kind.report`, written by :func:`sim.evidence.report.write_report` for ``supergame assess``,
  ``supergame run --report`` and ``supergame report`` alike): the summary, figures and tables, plus the
  full result as ``assessment.json``;
* :func:`render_text` -- the terminal summary.

Nothing here recomputes a number: it only reads the assessment. Each function takes the data or an
:class:`~sim.antitrust.assess.Assessment` (read through the same JSON form, so that both give the same output).
The stored data hold no nan or inf (JSON null) and their dicts come back with sorted keys: sections
follow fixed orders, never a dict's order.
"""

from __future__ import annotations

import json
import math

import numpy as np

from sim.antitrust.assess import FACTOR_LEGEND, IVALDI_SOURCE, SENSITIVITY_INPUTS
from sim.antitrust.merger import difference
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION, fmt_num, table
from sim.models.market import DEMAND_KEYS
from sim.runner.analyses.assess import describe_cell

__all__ = ["assessment_data", "assessment_figures", "assessment_tables", "kind_report", "render_text",
           "summary_blocks"]

#: Where the assessment's data sit in its cell's stored arrays.
ARRAYS_KEY = "assessment"
#: Order of the sensitivity ranges (that of :func:`sim.antitrust.assess.run_assessment`).
_SENS_ORDER = (*SENSITIVITY_INPUTS, "delta", "noise")
_SIDES = ("before", "after")
_SCHEME_LABELS = {"grim": "grim trigger", "stick_carrot": "stick and carrot"}

_CATEGORY_COLOURS = {"neither": "#d9d9d9", "both": "#fdae61", "after only": "#d7191c", "before only": "#2c7bb6"}
_CATEGORY_LABELS = {"neither": "sustainable neither before nor after", "both": "sustainable before and after",
                    "after only": "sustainable only after the merger", "before only": "sustainable only before"}


def _n(x, digits: int = 4) -> str:
    return fmt_num(x, digits)


def _yes(x) -> str:
    if x is None:
        return "-"
    return "yes" if x else "no"


def _val(x):
    """A stored number as a float (None, JSON's nan or inf, as nan)."""
    return np.nan if x is None else float(x)


def _arr(xs) -> np.ndarray:
    return np.asarray(xs, dtype=float)  # None -> nan


def assessment_data(a) -> dict:
    """The assessment as plain JSON data: a stored cell's document as it is, or an
    :class:`~sim.antitrust.assess.Assessment` through :meth:`~sim.antitrust.assess.Assessment.to_dict` and JSON (nan and
    inf become None, as in the store)."""
    if isinstance(a, dict):
        return a

    return json.loads(dumps(a.to_dict()))


def _ordered(d: dict, order=_SENS_ORDER) -> list:
    """Items of a dict keyed by sensitivity inputs, in the order of :data:`_SENS_ORDER`."""
    return [(k, d[k]) for k in order if k in d]


def _ratio_cell(v, xs):
    """A largest-to-smallest ratio as stored: JSON holds no inf, so a null ratio of finite values whose
    smallest is not positive is inf again (see :func:`sim.antitrust.assess._ratio`)."""
    if v is None and xs and all(x is not None for x in xs) and min(xs) <= 0:
        return math.inf
    return v


# --------------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------------


def assessment_tables(a) -> dict:
    """Every table of the summary: name -> (headers, rows); cells are numbers or strings."""
    d = assessment_data(a)
    out = {}
    c = d["conclusion"]
    out["thresholds"] = (
        ["scheme", "before", "binding before", "after", "binding after", "effect of the merger",
         f"sustainable at {c['delta']:.4g} before", "after"],
        [[s["scheme"], s["before"], s["binding_before"], s["after"], s["binding_after"], s["direction"],
          _yes(s["sustainable_before"]), _yes(s["sustainable_after"])] for s in c["schemes"]],
    )
    for label in _SIDES:
        side = d[label]
        th = side["thresholds"]
        schemes = [("grim trigger", th["grim"])] + [(f"Nash reversion, T={f['T']}", f) for f in th["finite"]] + [
            ("stick and carrot", th["stick_carrot"])]
        rows = [[name, *map(_val, s["per_firm"])] for name, s in schemes]
        out[f"thresholds_per_firm_{label}"] = (["scheme", *side["names"]], rows)
        pr = side["stage"]["profits"]
        frows = [[nm, *(_val(pr[k][i]) for k in ("collusive", "deviation", "nash", "minmax"))]
                 for i, nm in enumerate(side["names"])]
        out[f"stage_game_{label}"] = (["firm", "collusive profit", "deviation profit", "Nash profit",
                                       "minmax profit"], frows)
    prow = []
    after_by = {_partial_key(p): p for p in d["after"]["partial_collusion"]}
    for p in d["before"]["partial_collusion"]:
        q = after_by.get(_partial_key(p))
        name = _SCHEME_LABELS.get(p["scheme"], f"Nash reversion, T={p.get('T')}")
        prow.append([p["delta"], name, _val(p["profit_gain"]), None if q is None else _val(q["profit_gain"]),
                     None if q is None else difference(_val(q["profit_gain"]), _val(p["profit_gain"]))])
    out["partial_collusion"] = (["delta", "scheme", "profit gain before", "profit gain after", "change"], prow)
    arow = []
    for label in _SIDES:
        s = d[label]["asymmetry"]
        arow.append([label, len(d[label]["names"]), _val(s["hhi"]), _val(_ratio_cell(s["share_ratio"], s["shares"])),
                     _val(_ratio_cell(s["cost_ratio"], s["costs"])), _val(s["cost_cv"]),
                     _val(_ratio_cell(s["capacity_ratio"], s["capacities"])) if s["capacities"] is not None else "-"])
    out["asymmetry"] = (["market", "firms", "HHI", "largest / smallest share", "highest / lowest cost",
                         "cost coefficient of variation", "largest / smallest capacity"], arow)
    srow = []
    for label in _SIDES:
        s = d[label]["asymmetry"]
        for i, nm in enumerate(d[label]["names"]):
            srow.append([label, nm, _val(s["shares"][i]), _val(s["costs"][i]),
                         _val(s["capacities"][i]) if s["capacities"] is not None else "-", s["products"][i]])
    out["firms"] = (["market", "firm", "share (static Nash)", "marginal cost", "capacity", "products"], srow)
    out["merger_prices"] = (["product", "owner after", "price before", "price after", "change"],
                            [[r["product"], r["owner"] or "-", _val(r["pre"]), _val(r["post"]), _val(r["change"])]
                             for r in d["merger"]["price_changes"]])
    if "simulation" in d["before"]:
        keys = [("collusive_share", "share of collusive periods"), ("war_share", "share of price-war periods"),
                ("first_breakdown", "time to first breakdown (periods)"),
                ("broken_down", "share of replications that broke down"),
                ("spell_length", "mean collusive spell (periods)"), ("profit_gain", "profit gain"),
                ("price", "mean market price"), ("consumer_surplus", "mean consumer surplus")]
        rows = []
        for k, label in keys:
            eb, ea = d["before"]["simulation"][k], d["after"]["simulation"][k]
            rows.append([label, *(_val(e[k]) for e in (eb, ea) for k in ("value", "low", "high"))])
        out["persistence"] = (["metric", "before", "95% low", "95% high", "after", "95% low", "95% high"], rows)
    frow = []
    for f in d["factors"]:
        frow.append([f["factor"], f["varied"], _factor_values(f), f["model_direction"], f["ivaldi_direction"],
                     "" if f["agrees"] is None else _yes(f["agrees"]), f["reading"]])
    out["factors"] = (FACTOR_HEADERS, frow)
    cal = d["calibration"]
    if cal is not None:
        ob, eq, res = cal["observed"], cal["equilibrium"], cal["residuals"]
        rows = []
        for k in range(len(cal["costs"])):
            rows.append([k + 1, *map(_val, (ob["prices"][k], ob["quantities"][k], ob["shares"][k], cal["costs"][k],
                                            cal["margins"][k], eq["prices"][k], eq["quantities"][k], res["prices"][k],
                                            res["quantities"][k]))])
        out["calibration"] = (["product", "observed price", "observed quantity", "observed share", "implied cost",
                               "implied margin", "model price", "model quantity", "price residual",
                               "quantity residual"], rows)
        out["calibration_parameters"] = (["parameter", "value"], [[k, _param_text(cal["parameters"][k])] for k in
                                                                  _demand_order(cal["demand"], cal["parameters"])])
    for name, s in _ordered(d["sensitivity"]):
        if name == "delta":
            rows = [[x, cat, _val(gb), _val(ga)] for x, cat, gb, ga in
                    zip(s["values"], s["category"], s["profit_gain_before"], s["profit_gain_after"])]
            out["sensitivity_delta"] = (["delta", "conclusion", "profit gain before", "profit gain after"], rows)
        elif name == "noise":
            rows = [[k, _val(b), _val(a_), _val(df)] for k, b, a_, df in
                    zip(s["scales"], s["collusive_share_before"], s["collusive_share_after"], s["difference"])]
            out["sensitivity_noise"] = (["noise scale", "collusive share before", "collusive share after",
                                         "after - before"], rows)
        else:
            rows = [[x, b, a_, dr, cat, st if st != "ok" else ""] for x, b, a_, dr, cat, st in
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


def _partial_key(p: dict) -> tuple:
    return p["scheme"], p.get("T"), p["delta"]


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
    d = assessment_data(a)
    plt = _pyplot()
    figs = []
    delta = d["conclusion"]["delta"]

    # 1. thresholds per scheme, before and after
    sch = d["conclusion"]["schemes"]
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
    if d["before"]["partial_collusion"]:
        fig, ax = plt.subplots(figsize=(7, 4))
        groups = {}
        for label in _SIDES:
            for p in d[label]["partial_collusion"]:
                groups.setdefault((p["scheme"], p.get("T")), {}).setdefault(label, []).append(
                    (p["delta"], _val(p["profit_gain"])))
        for k, (key, sides) in enumerate(sorted(groups.items(), key=lambda t: (t[0][0], t[0][1] or 0))):
            name = _SCHEME_LABELS.get(key[0], f"reversion T={key[1]}")
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
    if "simulation" in d["before"]:
        fig, ax = plt.subplots(figsize=(7, 3.5))
        for label, col in (("before", "#2c7bb6"), ("after", "#d7191c")):
            y = _arr(d[label]["simulation"]["collusive_by_period"])
            ax.plot(np.arange(1, y.size + 1), y, color=col, lw=1, label=label)
        ax.set_xlabel("period")
        ax.set_ylabel("share of replications colluding")
        ax.set_ylim(-0.02, 1.02)
        ax.set_title("Simulated persistence of collusion under the experiment's monitoring noise", fontsize=9)
        ax.legend(fontsize=8)
        fig.tight_layout()
        figs.append(("persistence", fig, _CAPTIONS["persistence"]))

    # 4. sensitivity
    sens = d["sensitivity"]
    for name, s in _ordered(sens):
        if name in ("delta", "noise"):
            continue
        figs += _phase_figure(plt, d, name, s)
    if "delta" in sens:
        s = sens["delta"]
        fig, ax = plt.subplots(figsize=(7, 4))
        ds = _arr(s["values"])
        for lo_, hi_, cat in _segments(ds, s["category"]):
            ax.axvspan(lo_, hi_, color=_CATEGORY_COLOURS[cat], alpha=0.35, lw=0)
        ax.plot(ds, _arr(s["profit_gain_before"]), "-o", ms=3, color="#2c7bb6", label="before")
        ax.plot(ds, _arr(s["profit_gain_after"]), "--o", ms=3, color="#d7191c", label="after")
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
    if "noise" in sens:
        s = sens["noise"]
        fig, ax = plt.subplots(figsize=(7, 4))
        k = _arr(s["scales"])
        for lab, col, ls in (("before", "#2c7bb6", "-"), ("after", "#d7191c", "--")):
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


def _phase_figure(plt, doc: dict, name: str, s: dict) -> list:
    xs = _arr(s["values"])
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
    d0 = doc["conclusion"]["delta"]
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
    ax.set_title(f"Sensitivity to the calibration input '{name}' ({doc['conclusion']['scheme']})", fontsize=9)
    fig.tight_layout()
    return [(f"sensitivity_{name}", fig, f"Sensitivity to the calibration input '{name}': critical discount factors "
                                         "before and after, and the conclusion at each discount factor")]


# --------------------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------------------


#: Keys of a market's table that follow its demand's parameters, in this order.
_MARKET_LAST = ("cost", "n_firms", "capacity", "tick", "owner")


def _demand_order(demand: str, keys) -> list:
    """``keys`` in the order of a ``[market]`` table of that demand (the others after them, sorted)."""

    first = [k for k in DEMAND_KEYS.get(demand, ()) if k in keys]
    return first + sorted(k for k in keys if k not in first)


def _market_text(d: dict) -> str:
    """A market's table (``Market.to_dict``) in words: the demand's parameters, then costs and structure."""
    keys = _demand_order(d["demand"], [k for k in d if k not in ("model", "demand", *_MARKET_LAST)])
    keys += [k for k in _MARKET_LAST if k in d]
    params = "; ".join(f"{k} {_param_text(d[k]) if isinstance(d[k], list) else _n(d[k], 6)}" for k in keys)
    return f"{d['model'].capitalize()} competition, {d['demand']} demand: {params}"


def summary_blocks(a, figures=()) -> list:
    """The summary in reading order, as blocks: ``("heading", text)``, ``("paragraph", text)``,
    ``("bullets", [items])``, ``("table", name, caption)`` (a table of :func:`assessment_tables`) and
    ``("figure", name)`` (one of ``figures``, the names of :func:`assessment_figures`)."""
    d = assessment_data(a)
    figures = set(figures)
    T = assessment_tables(d)
    c = d["conclusion"]
    m = d["merger"]
    st = d["settings"]
    B = [("paragraph", "Caution: " + CAUTION + " What follows is a model result under the assumptions stated at "
                       "the end, not a finding of fact.")]

    def fig(name):
        if name in figures:
            B.append(("figure", name))

    B.append(("heading", "Conclusion under the stated assumptions"))
    B.append(("paragraph", c["statement"]))
    if c.get("robustness"):
        B.append(("bullets", [f"sensitivity to {k.replace('_', ' ')}: {v}" for k, v in _ordered(c["robustness"])]))
    B.append(("table", "thresholds", "Critical discount factors of each scheme ('-': not sustainable below one)"))
    fig("thresholds")
    B.append(("heading", "Setup"))
    items = [f"Pre-merger market: {_market_text(m['pre_market'])}",
             f"Merger: {' and '.join(m['merging'])} become {m['merged_firm']}"
             + (f", efficiency {m['efficiency']:g}" if m["efficiency"] else "")
             + (f", stated post-merger cost {st['merger']['cost']}" if st["merger"]["cost"] is not None else ""),
             f"Post-merger market: {_market_text(m['post_market'])}",
             f"Collusive agreement: {st['agreement']}; headline scheme: {c['scheme']}; discount factor "
             f"{c['delta']:.4g}"]
    if st["simulate"]:
        r = st["run"]
        mon = st["monitoring"]
        items.append(f"Simulation: {r['periods']} periods, {r['replications']} replications, seed {r['seed']}, "
                     f"{r['horizon']} horizon; monitoring '{mon['signal']}', {mon['noise']} demand shock sigma "
                     f"{mon['sigma']:g}, perception error {mon['perception_error']:g}, implementation error "
                     f"{mon['implementation_error']:g}; line-up before: "
                     + ", ".join(e["strategy"] for e in st["lineup"]) + "; after: "
                     + ", ".join(e["strategy"] for e in st["lineup_after"]))
    B.append(("bullets", items))
    cal = d["calibration"]
    if cal is not None:
        B.append(("heading", "Calibration"))
        B.append(("paragraph", f"Conduct assumed: {cal['conduct']}. The price parameter is identified by "
                               f"{cal['identified_by']}. The calibrated model's static Nash equilibrium "
                               + ("reproduces" if cal["reproduced"] else "does NOT reproduce")
                               + f" the observed prices and quantities: largest relative residual "
                                 f"{_val(cal['max_relative_residual']):.3g} (tolerance 1e-08). Market elasticity at "
                                 f"the observed point: {_val(cal['market_elasticity']):.6g}."))
        B.append(("table", "calibration_parameters", "Calibrated demand parameters"))
        B.append(("table", "calibration", "Observed data, implied costs and margins, and the model's static "
                                          "equilibrium with its residuals"))
        if cal["fit"] is not None:
            res = _arr(cal["fit"]["residuals"])
            B.append(("paragraph", f"Over-identified input ({cal['fit']['input']} of every product), fitted by least "
                                   f"squares: largest absolute residual {np.abs(res).max():.3g}."))
    B.append(("heading", "The post-merger static equilibrium"))
    cs_pre, cs_post = _val(m["consumer_surplus_pre"]), _val(m["consumer_surplus_post"])
    cs = difference(cs_post, cs_pre)
    cs_rel = cs / cs_pre if cs_pre else 0.0
    h0, h1, dh, naive = (_val(m[k]) for k in ("hhi_pre", "hhi_post", "delta_hhi", "naive_delta_hhi"))
    B.append(("paragraph", f"HHI at the static equilibrium: {h0:.0f} before, {h1:.0f} after (change {dh:+.0f}; at "
                           f"pre-merger shares {naive:.0f}). Consumer surplus at the static equilibrium changes by "
                           f"{cs:+.6g} ({cs_rel:+.2%})."))
    B.append(("table", "merger_prices", "Static Nash prices before and after the merger"))
    if m["notes"]:
        B.append(("bullets", list(m["notes"])))
    B.append(("heading", "Stage games and per-firm thresholds"))
    for label in _SIDES:
        B.append(("table", f"stage_game_{label}", f"Stage game {label} the merger"))
        B.append(("table", f"thresholds_per_firm_{label}",
                  f"Critical discount factor of each firm {label} the merger ('-': not sustainable)"))
    if d["before"]["partial_collusion"]:
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
    notes = [f"{f['factor']}: {f['note']}" for f in d["factors"] if f["note"]]
    if notes:
        B.append(("bullets", notes))
    if d["sensitivity"]:
        B.append(("heading", "Sensitivity"))
        for key, s in _ordered(d["sensitivity"]):
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
    # the run's report closes with the kind's general assumptions under "Assumptions and limitations"
    B.append(("heading", "Assumptions and limitations of the assessment"))
    B.append(("bullets", list(d["assumptions"]) + [
        "critical discount factors say when an agreement can be sustained, not that firms coordinate: the model "
        "does not show that coordination happens or would happen",
        "the punishment schemes, the collusive agreement and the monitoring structure are modelling choices; other "
        "choices give other numbers"]))
    return B


def render_text(a, name: str = "assessment") -> str:
    """The terminal summary: the headline, the thresholds, persistence, the factors and the caution."""
    d = assessment_data(a)
    T = assessment_tables(d)
    c = d["conclusion"]
    lines = [f"Assessment: {name}", ""]
    cal = d["calibration"]
    if cal is not None:
        lines.append(f"Calibration ({cal['demand']} demand, {cal['conduct'].split(':')[0]}; identified by "
                     f"{cal['identified_by']}): the model's static equilibrium "
                     + ("reproduces" if cal["reproduced"] else "does NOT reproduce")
                     + f" the observed prices and quantities (largest relative residual "
                       f"{_val(cal['max_relative_residual']):.3g})")
        lines.append("")
    m = d["merger"]
    lines.append(f"Merger: {' + '.join(m['merging'])}; HHI {_val(m['hhi_pre']):.0f} -> {_val(m['hhi_post']):.0f}; "
                 + "; ".join(f"{'product ' + str(r['product']) if r['product'] != 'market' else 'market price'} "
                             f"{_val(r['change']):+.2%}" for r in m["price_changes"]))
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
    for k, v in _ordered(c.get("robustness") or {}):
        lines.append(f"  sensitivity ({k}): {v}")
    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------------
# Evidence bundle of a run folder (the experiment kind's ``report`` hook)
# --------------------------------------------------------------------------------------------------


def kind_report(rf, b):
    """The assessment's account of a finished run in its evidence bundle (:attr:`sim.runner.kinds.Kind.report`).

    One cell (an assessment file): the summary, figures and tables of the assessment and its full result
    as ``assessment.json``, all read from the cell's stored ``arrays["assessment"]``; the stream keys of
    its simulations in the manifest. A sweep (``supergame run`` of a file with a ``[sweep]``): every
    cell's conclusion, with the thresholds along one numeric swept parameter. Returns the lines on
    reproducing the numbers (for the report's section of that name).
    """
    exp = rf.experiment
    rows = rf.rows()
    b.title = f"Coordinated effects of a merger: {exp.name}"
    if exp.parameters:
        return _sweep_account(b, exp, rows)
    row = rows[0]
    if row.status != "ok":
        b.paragraph("The assessment failed: no results to report (see the failed cells below).", note=True)
        return None
    if ARRAYS_KEY not in row.arrays:
        raise _no_document(rf)
    return write_assessment(b, row.arrays[ARRAYS_KEY], key=(row.cell,))


def _no_document(rf):

    return InputError("RUN_DIR", f"the stored cell of {rf.path} holds no assessment (an earlier version of "
                                 "supergame ran it); run the experiment file again")


def write_assessment(b, a, key=(0,)) -> list:
    """Add an assessment's summary, figures, tables and ``assessment.json`` to the bundle ``b`` (a
    :class:`sim.evidence.bundle.Bundle`), and the stream keys of its simulations (drawn from the cell's stream
    key ``key``) to its manifest. Returns the lines on reproducing the numbers."""
    import matplotlib.pyplot as plt


    d = assessment_data(a)
    tables = assessment_tables(d)
    figs = assessment_figures(d)
    fig_of = {name: (fig, cap) for name, fig, cap in figs}
    try:
        _fill(b, summary_blocks(d, [f[0] for f in figs]), tables, fig_of)
    finally:
        for fig, _cap in fig_of.values():  # figures not added (an error part-way)
            plt.close(fig)
    b.attach("assessment.json", (dumps(d, indent=2, sort_keys=True) + "\n").encode("utf-8"))
    k = [int(x) for x in key]
    lines = []
    if d["settings"]["simulate"]:
        b.manifest["seeds"] = {
            "run.seed": d["settings"]["run"]["seed"],
            "rule": "stream key k draws from numpy.random.SeedSequence(run.seed, spawn_key=k)",
            "streams": {"simulation before": [*k, 0], "simulation after": [*k, 1],
                        "rescaled noise before": [*k, 2, 0], "rescaled noise after": [*k, 2, 1],
                        "noise sensitivity point j (from 0)": f"{[*k, 3]} + [j, 0] before, [j, 1] after"}}
        lines.append(f"The assessment's simulations draw from the streams of its cell (stream keys starting {k}: "
                     f"{[*k, 0]} before and {[*k, 1]} after the merger, the others listed in `manifest.json`); "
                     "results do not depend on the number of threads.")
    lines.append("`supergame assess experiment.toml` and `supergame run experiment.toml` give the same numbers, and "
                 "`supergame report RUN_DIR` this bundle again from the stored results; `supergame verify RUN_DIR` "
                 "checks the SHA-256 of every file of the run folder, this bundle included, and re-runs the "
                 "assessment to confirm every stored number.")
    return lines


def _fill(b, blocks, tables, fig_of: dict) -> None:
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


_DIRECTIONS = {-1.0: "easier", 0.0: "unchanged", 1.0: "harder"}


def _sweep_account(b, exp, rows) -> list:
    """A sweep of assessments: every finished cell's conclusion, and the headline thresholds along a
    single numeric swept parameter."""

    b.heading("Setup")
    b.bullets(describe_cell(exp.doc))
    b.paragraph("Each cell of the sweep is one complete assessment with these settings and the swept values below; "
                "its full account (every table of a single assessment) is the cell's `assessment` entry in "
                "`arrays.json`.", note=True)
    b.heading("Sweep")
    b.table("sweep", ["parameter", "values", "number"],
            [[p.path, ", ".join(p.labels), len(p)] for p in exp.parameters], caption="Swept parameters")
    b.heading("Results")
    ok = [r for r in rows if r.status == "ok" and ARRAYS_KEY in r.arrays]
    if not ok:
        b.paragraph("No cell finished: no results to report (see the failed cells below).", note=True)
        return []
    body = []
    for r in ok:
        c = r.arrays[ARRAYS_KEY]["conclusion"]
        body.append([r.number, *[r.labels[p.path] for p in exp.parameters], c["threshold_before"],
                     c["binding_before"], c["threshold_after"], c["binding_after"], c["direction"],
                     _yes(c["sustainable_before"]), _yes(c["sustainable_after"])])
    c0 = ok[0].arrays[ARRAYS_KEY]["conclusion"]
    b.table("cells", ["cell", *[p.path for p in exp.parameters], "threshold before", "binding before",
                      "threshold after", "binding after", "effect of the merger", "sustainable before", "after"],
            [[_plain(v) for v in r] for r in body], caption=f"Conclusion of every finished cell ({c0['scheme']})",
            note="'-': not sustainable below one; sustainable: at the cell's discount factor")
    numeric = [p for p in exp.parameters if p.numeric]
    if len(exp.parameters) != 1 or not numeric or len(ok) < 2:
        return []
    p = numeric[0]
    plt = _pyplot()
    xs = np.array([float(r.params[p.path]) for r in ok])
    srt = np.argsort(xs)
    fig, ax = plt.subplots(figsize=(7, 4))
    for label, col, ls in (("before", "#2c7bb6", "-o"), ("after", "#d7191c", "--o")):
        y = np.array([_val(r.arrays[ARRAYS_KEY]["conclusion"][f"threshold_{label}"]) for r in ok])[srt]
        ax.plot(xs[srt], y, ls, ms=3, color=col, label=label)
    if p.log:
        ax.set_xscale("log")
    ax.set_xlabel(p.path)
    ax.set_ylabel("critical discount factor (market)")
    ax.set_ylim(0, 1.02)
    ax.legend(fontsize=8)
    fig.tight_layout()
    b.figure("thresholds-over-sweep", fig, f"Critical discount factor ({c0['scheme']}) before and after the merger "
                                          f"against {p.path}; a missing point is not sustainable below one.")
    return []
