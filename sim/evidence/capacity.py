"""How a capacity result is shown: the terminal report, the JSON document, the figures and the bundle (see
:mod:`sim.evidence.render`).

The same tables (:func:`sections`) make the terminal report and the bundle's summary, so the two never disagree.
"""

from __future__ import annotations

import json

import numpy as np

from sim.antitrust.capacity_assess import CapacityResult
from sim.core.errors import InputError
from sim.core.text import CAUTION, fmt_num, table
from sim.evidence.answers import capacity_headline
from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.pairs import PAIR_HEADERS, pair_lines, pair_rows, pairs_figure
from sim.evidence.render import Drawn, Renderer, pyplot

__all__ = ["RENDERER", "as_json", "bundle", "console", "figures", "sections"]

_STYLES = ("-", "--", "-.", ":")
_KINDS = {"market_clearing": "pure: every firm sells its capacity at the market-clearing price",
          "cost_pricing": "pure: price equals marginal cost", "mixed": "mixed (Bertrand-Edgeworth)"}


def _firm_rows(th) -> list:
    c, eq = th.collusion, th.equilibrium
    rows = []
    for i, name in enumerate(th.names):
        rows.append([name, c.capacity[i], eq.support_low[i], eq.support_high[i], eq.atoms[i], eq.payoffs[i],
                     c.agreement.profits[i], c.deviation_profits[i], c.deviation_kinds[i], c.minmax_profits[i],
                     c.grim[i], c.harshest[i]])
    return rows


_FIRM_HEAD = ["firm", "capacity", "lowest price", "highest price", "atom at top", "static profit", "collusive profit",
              "deviation profit", "deviation", "minmax profit", "threshold (Nash reversion)", "threshold (minmax)"]


def _binding(c, scheme: str) -> str:
    ties = c.grim_ties if scheme == "grim" else c.harshest_ties
    b = c.grim_binding if scheme == "grim" else c.harshest_binding
    if len(ties) > 1:
        return f"{len(ties)} firms tie ({', '.join(c.names[k] for k in ties)})"
    return c.names[b]


def _side_lines(th) -> list:
    c, eq = th.collusion, th.equilibrium
    return [f"Static equilibrium: {_KINDS.get(eq.kind, eq.kind)} (method: {eq.method})",
            f"Agreement: {c.agreement.rule} shares at price {fmt_num(c.agreement.price)}",
            f"Critical discount factor, Nash reversion: {fmt_num(c.grim_market)}; binding: {_binding(c, 'grim')}",
            f"Critical discount factor, minmax punishment: {fmt_num(c.harshest_market)}; binding: "
            f"{_binding(c, 'harshest')}",
            f"Largest capacity share {fmt_num(th.symmetry['largest_share'])} (equal split "
            f"{fmt_num(th.symmetry['equal_share'])}); the largest firm's rivals cover "
            f"{fmt_num(th.symmetry['rivals_cover'])} of demand; spare capacity {fmt_num(th.spare_capacity)}",
            *(f"Note: {x}" for x in c.notes)]


def sections(res: CapacityResult) -> list:
    """The report's sections, shared by the terminal report and the bundle.

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    list of dict
        ``name`` (file stem), ``heading``, ``lines`` (list of str) and optionally ``headers`` and ``rows``.
    """
    th = res.thresholds
    mk = th.market
    out = [{"name": "capacity-market", "heading": "Market and thresholds",
            "lines": [f"Price competition with capacities: {mk.get('demand', 'inelastic')} demand, reservation price "
                      f"{fmt_num(mk.get('reservation_price'))}, market size {fmt_num(mk.get('market_size'))}, cost "
                      f"{fmt_num(mk.get('cost', 0.0))}, {mk.get('rationing', 'efficient')} rationing",
                      *_side_lines(th)], "headers": _FIRM_HEAD, "rows": _firm_rows(th)}]
    if res.pairs is not None:
        out.append(_pairs_section(res))
    mg = res.merger
    if mg is None:
        return out
    out.append({"name": "capacity-merger-after", "heading": "After the merger",
                "lines": [*(f"Step: {s}" for s in mg.steps), *_side_lines(mg.after)],
                "headers": _FIRM_HEAD, "rows": _firm_rows(mg.after)})
    b, a = mg.before.collusion, mg.after.collusion
    rows = [["Nash reversion", b.grim_market, a.grim_market, mg.change.grim_change, _binding(b, "grim"),
             _binding(a, "grim")],
            ["minmax punishment", b.harshest_market, a.harshest_market, mg.harshest_change,
             mg.harshest_binding_before, mg.harshest_binding_after]]
    sym = [["largest capacity share", mg.before.symmetry["largest_share"], mg.after.symmetry["largest_share"]],
           ["equal split 1/n", mg.before.symmetry["equal_share"], mg.after.symmetry["equal_share"]],
           ["rivals of the largest cover (share of demand)", mg.before.symmetry["rivals_cover"],
            mg.after.symmetry["rivals_cover"]],
           ["HHI of capacity shares", mg.before.symmetry["capacity_hhi"], mg.after.symmetry["capacity_hhi"]]]
    verdict = ("the binding firm under minmax punishments changes" if mg.harshest_binding_before !=
               mg.harshest_binding_after else "the binding firm under minmax punishments stays the same")
    out.append({"name": "capacity-merger", "heading": "Before and after the merger",
                "lines": [f"{verdict}: {mg.harshest_binding_before} -> {mg.harshest_binding_after}"],
                "headers": ["punishment", "threshold before", "threshold after", "change", "binding before",
                            "binding after"], "rows": rows})
    out.append({"name": "capacity-symmetry", "heading": "Capacity symmetry (Compte, Jenny and Rey, 2002)",
                "lines": [], "headers": ["measure", "before", "after"], "rows": sym})
    out.append({"name": "capacity-factors", "heading": "Factors", "lines": [],
                "headers": ["factor", "varied", "model", "literature", "reading", "source"],
                "rows": [[r["factor"], r["varied"], r["model_direction"], r["literature_direction"], r["reading"],
                          r["source"]] for r in mg.factors]})
    cs = mg.concentration
    out.append({"name": "capacity-concentration", "heading": "Concentration screens", "lines": [cs.eu_note, cs.us_note],
                "headers": ["HHI before", "HHI after", "change", "EU zone", "US concentration", "US presumption"],
                "rows": [[cs.hhi_pre, cs.hhi_post, cs.change, cs.eu_zone, cs.us_concentration, cs.us_presumption]]})
    if mg.cartels is not None:
        out.append({"name": "capacity-cartels", "heading": f"Partial cartels at delta = {fmt_num(mg.delta)}",
                    "lines": [f"The worry: {mg.cartels.explanation}"],
                    "headers": ["cartel after", "same firms before", "threshold before", "threshold after",
                                "stable after"],
                    "rows": [[" + ".join(r["members"]), " + ".join(r["counterpart"]), r["threshold_before"],
                              r["threshold_after"], r["stable_after"]] for r in mg.cartels.rows]})
    if mg.sobol is not None:
        out.append(_sobol_section(mg.sobol))
    return out


def _pairs_section(res: CapacityResult) -> dict:
    """The threshold after every two-firm merger of the market of the file, and the maverick."""
    return {"name": "capacity-pair-mergers", "heading": "Every two-firm merger and the maverick",
            "lines": pair_lines(res.pairs, res.maverick, accuracy_note=True), "headers": PAIR_HEADERS,
            "rows": pair_rows(res.pairs)}


def _pairs_figure(res: CapacityResult):
    d = pairs_figure(res.pairs)
    return Drawn("capacity-pair-mergers", d.figure, d.caption[:-1] + " (capacities summed).")


def _constant(s, o: str) -> bool:
    """An output the inputs do not move (its spread is rounding only)."""
    return s.std.get(o, 1.0) <= 1e-12 * max(1.0, abs(s.mean.get(o, 0.0)))


def _sobol_section(s) -> dict:
    rows = []
    for o in s.outputs:
        for j, name in enumerate(s.inputs):
            rows.append([o, name, s.first[o][j], s.first_low[o][j], s.first_high[o][j], s.total[o][j],
                         s.total_low[o][j], s.total_high[o][j]])
    return {"name": "capacity-sobol", "heading": "Global sensitivity (Sobol indices)",
            "lines": [f"Outputs: critical discount factor under minmax punishments before, after, and the change; "
                      f"{s.n_base} base samples, {s.n_evaluations} evaluations, seed {s.seed}; "
                      f"{s.confidence:.0%} bootstrap intervals (Saltelli et al., 2010, by SALib)",
                      *(f"The output '{o}' does not vary over the ranges: its indices are 0."
                        for o in s.outputs if _constant(s, o))],
            "headers": ["output", "input", "first order", "low", "high", "total", "low", "high"], "rows": rows}


def console(res: CapacityResult) -> str:
    """The terminal report of a capacity result.

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    str
    """
    lines = [capacity_headline(res), ""]
    for s in sections(res):
        lines += [s["heading"], "=" * len(s["heading"]), *s["lines"]]
        if s.get("rows"):
            lines += ["", table(s["headers"], s["rows"])]
        lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


def as_json(res: CapacityResult) -> dict:
    """The ``--json`` document of a capacity result (its stored document with the caution).

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    dict
    """
    return {**res.to_dict(), "caution": CAUTION}


def _threshold_figure(res: CapacityResult):
    plt = pyplot()
    sides = [("before the merger" if res.merger else "the market", res.thresholds)]
    if res.merger is not None:
        sides.append(("after the merger", res.merger.after))
    fig, axes = plt.subplots(1, len(sides), figsize=(PAGE_WIDTH, 2.9), sharex=True, squeeze=False)
    for ax, (title, th) in zip(axes[0], sides):
        c = th.collusion
        y = np.arange(th.n_firms)
        ax.barh(y - 0.2, np.nan_to_num(c.grim, nan=1.0), 0.4, color=color(0), label="Nash reversion")
        ax.barh(y + 0.2, np.nan_to_num(c.harshest, nan=1.0), 0.4, color=color(1), label="minmax punishment")
        ax.set_yticks(y, th.names, fontsize=SMALL)
        ax.invert_yaxis()
        ax.set_xlim(0, 1)
        ax.set_title(title, fontsize=FONT)
        ax.tick_params(labelsize=SMALL)
        ax.set_xlabel("critical discount factor", fontsize=FONT)
        ax.grid(axis="x", alpha=0.3)
    handles, labels = axes[0][0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=2, fontsize=SMALL, frameon=False)
    fig.tight_layout(rect=(0, 0.08, 1, 1))
    return Drawn("capacity-thresholds", fig, "Critical discount factor of each firm under Nash reversion and under "
                                             "minmax punishments; the longest bar of a scheme is the binding firm.")


def _equilibrium_figure(res: CapacityResult):
    plt = pyplot()
    sides = [("before the merger" if res.merger else "the market", res.thresholds)]
    if res.merger is not None:
        sides.append(("after the merger", res.merger.after))
    fig, axes = plt.subplots(1, len(sides), figsize=(PAGE_WIDTH, 2.9), sharey=True, squeeze=False)
    names = list(dict.fromkeys(n for _, th in sides for n in th.names))
    for ax, (title, th) in zip(axes[0], sides):
        eq = th.equilibrium
        lo, hi = float(eq.support_low.min()), float(eq.support_high.max())
        grid = np.linspace(lo - 0.05 * (hi - lo + 1), hi + 0.05 * (hi - lo + 1), 400)
        F = eq.cdf_at(grid)
        for i, name in enumerate(th.names):
            k = names.index(name)
            # equal firms have equal distributions: line styles keep overlapping curves apart
            ax.step(grid, F[i], where="post", color=color(k), ls=_STYLES[k % 4], lw=1.3, label=name)
        ax.set_title(title, fontsize=FONT)
        ax.set_xlabel("price", fontsize=FONT)
        ax.tick_params(labelsize=SMALL)
        ax.grid(alpha=0.3)
    axes[0][0].set_ylabel("probability of a price at most p", fontsize=FONT)
    handles = [plt.Line2D([], [], color=color(k), ls=_STYLES[k % 4], lw=1.3) for k in range(len(names))]
    fig.legend(handles, names, loc="lower center", ncol=min(len(names), 6), fontsize=SMALL, frameon=False)
    fig.tight_layout(rect=(0, 0.1, 1, 1))
    return Drawn("capacity-static-equilibrium", fig,
                 "Distribution of each firm's price in the static equilibrium (the punishment of Nash reversion); a "
                 "jump at the top is an atom.")


def _sobol_figure(s):
    plt = pyplot()
    fig, axes = plt.subplots(1, len(s.outputs), figsize=(PAGE_WIDTH, 2.6), sharey=True, squeeze=False)
    titles = {"before": "threshold before", "after": "threshold after", "change": "change"}
    y = np.arange(len(s.inputs))
    for ax, o in zip(axes[0], s.outputs):
        for k, (what, lo, hi, off) in enumerate((("first", s.first_low, s.first_high, -0.18),
                                                 ("total", s.total_low, s.total_high, 0.18))):
            v = getattr(s, what)[o]
            err = np.vstack([np.clip(v - lo[o], 0, None), np.clip(hi[o] - v, 0, None)])
            ax.barh(y + off, v, 0.36, color=color(k), label="first order" if what == "first" else "total")
            shown = err.sum(axis=0) > 0  # no whiskers of zero width on an output the inputs do not move
            if shown.any():
                ax.errorbar(v[shown], (y + off)[shown], xerr=err[:, shown], fmt="none", ecolor="black", capsize=2,
                            lw=1.0)
        constant = _constant(s, o)
        ax.set_title(titles.get(o, o) + (" (constant)" if constant else ""), fontsize=FONT)
        ax.set_xlim(-0.1, max(1.1, float(np.max(s.total_high[o])) + 0.05, float(np.max(s.first_high[o])) + 0.05))
        ax.set_xlabel("Sobol index", fontsize=FONT)
        ax.tick_params(labelsize=SMALL)
        ax.grid(axis="x", alpha=0.3)
    axes[0][0].set_yticks(y, list(s.inputs), fontsize=SMALL)
    axes[0][0].invert_yaxis()
    handles, labels = axes[0][0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=2, fontsize=SMALL, frameon=False)
    fig.tight_layout(rect=(0, 0.1, 1, 1))
    return Drawn("capacity-sobol", fig, f"Sobol indices of the critical discount factor under minmax punishments "
                                        f"with {s.confidence:.0%} bootstrap intervals: the share of its variance due "
                                        f"to each input alone (first order) and with its interactions (total).")


def figures(res: CapacityResult) -> list[Drawn]:
    """The thresholds per firm, the static equilibrium's price distributions and, when computed, the Sobol indices.

    Parameters
    ----------
    res : CapacityResult

    Returns
    -------
    list of Drawn
    """
    out = [_threshold_figure(res), _equilibrium_figure(res)]
    if res.pairs is not None:
        out.append(_pairs_figure(res))
    if res.merger is not None and res.merger.sobol is not None:
        out.append(_sobol_figure(res.merger.sobol))
    return out


def bundle(rf, b):
    """The capacity analysis's account of a finished run in its evidence bundle, read from the stored cell.

    Parameters
    ----------
    rf : RunFolder
        The open run folder.
    b : Bundle
        The bundle being written.

    Returns
    -------
    list of str or None
        Lines on reproducing the numbers.
    """
    exp = rf.experiment
    rows = rf.rows()
    b.title = f"Price competition with capacities: {exp.name}"
    if exp.parameters:
        b.paragraph("A sweep of a capacity experiment: see the results table below.", note=True)
        return None
    row = rows[0]
    if row.status != "ok":
        b.paragraph("The analysis failed: no results to report (see the failed cells below).", note=True)
        return None
    res = rf.result(row.cell)
    if res is None:
        raise InputError("RUN_DIR", f"the stored cell of {rf.path} holds no result; run the experiment file again")
    if exp.description:
        b.paragraph(exp.description)
    for s in sections(res):
        b.heading(s["heading"])
        for line in s["lines"]:
            b.paragraph(line)
        if s.get("rows"):
            b.table(s["name"], s["headers"], s["rows"])
    b.heading("Figures")
    for d in figures(res):
        b.figure(d.name, d.figure, d.caption)
    b.attach("capacity.json", json.dumps(res.to_dict(), indent=2, allow_nan=False).encode("utf-8"))
    return ["The full result is `capacity.json` (the stored document of the cell)."]


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, bundle=bundle, headline=capacity_headline)
