"""A learn run in its evidence bundle: the account of a run folder of learning sessions, read from the results its
cells store.

Without a sweep: the setup, the figures of ``supergame learn --plot`` (byte for byte: the same renderer draws them
from the same stored result) and the terminal report. With a sweep: the setup, the swept values, a table of every
cell's limit outcomes, one figure that sets the cells side by side -- every session's profit gain and firm 1's
mean limit price per cell, with the mean and its interval -- every cell's own figures, named after the cell, and
every cell's terminal report.
"""

from __future__ import annotations

import numpy as np

from sim.evidence.figures import FONT, PAGE_WIDTH, SMALL, color
from sim.evidence.front import describe_experiment, where
from sim.evidence.learn import console, figures, sessions_are_copies
from sim.evidence.render import pyplot
from sim.runner.analyses.learn import KIND as LEARN
from sim.runner.experiment import leading_comment

__all__ = ["bundle", "comparison_figure"]


def _num(x) -> float:
    return np.nan if x is None else float(x)


def _setup(b, exp) -> None:
    desc = exp.description or leading_comment(exp.text or "")
    if desc:
        b.heading("What the experiment asks")
        describe_experiment(b, desc)
    b.heading("Setup")
    b.bullets(LEARN.describe(exp.doc))


def bundle(run, b) -> list | None:
    """The learn kind's account of a finished run folder in its evidence bundle (see the module notes).

    Parameters
    ----------
    run : sim.runner.folder.RunFolder
    b : sim.evidence.bundle.Bundle

    Returns
    -------
    None
        Nothing is added to "Reproducing these numbers".
    """
    exp = run.experiment
    ok = [r for r in run.rows() if r.status == "ok"]
    _setup(b, exp)
    if exp.parameters:
        b.paragraph("These are the file's settings; the values of " + ", ".join(f"`{p.path}`" for p in exp.parameters)
                    + " are those of the sweep below.", note=True)
        b.heading("Sweep")
        b.table("sweep", ["parameter", "values", "number"],
                [[p.path, ", ".join(p.labels), len(p)] for p in exp.parameters], caption="Swept parameters")
    b.heading("Results")
    if not ok:
        b.paragraph("No cell finished: no results to report (see the failed cells below).", note=True)
        return None
    if not exp.parameters:
        res = run.result(ok[0].cell)
        for d in figures(res):
            b.figure(d.name, d.figure, d.caption)
        b.code(console(res))
        return None
    _sweep_account(run, b, exp, ok)
    return None


def _none_converged(ok, results) -> str:
    """Words for the cells where no session converged, whose means are over every session (empty when none)."""
    none = [str(r.number) for r in ok if results[r.cell].summary["converged"]["count"] == 0]
    if not none:
        return ""
    return (f", or over all its sessions in cell{'s' if len(none) > 1 else ''} {', '.join(none)}, where none "
            "converged (greedy play at the cap, the learners still learning)")


def _cell_label(r, exp) -> str:
    """A cell's swept values in words (the parameters' labels from the catalogue)."""
    return where(r, exp.parameters)


def _sweep_account(run, b, exp, ok) -> None:
    """Every cell's outcome in a table, the cells side by side, and each cell's own figures."""
    results = {r.cell: run.result(r.cell) for r in ok}
    rows = []
    for r in ok:
        sm = results[r.cell].summary
        pg, lp = sm["profit_gain"], sm["limit_prices"][0]
        rows.append([r.number, *[r.labels[p.path] for p in exp.parameters], pg["mean"], _num(pg["low"]),
                     _num(pg["high"]), lp["mean"], sm["near_nash"]["share"], sm["near_collusive"]["share"],
                     sm["converged"]["share"]])
    lvl = f"{100 * results[ok[0].cell].confidence:g} %"
    b.table("cells", ["cell", *[p.path for p in exp.parameters], "profit gain", f"{lvl} low", f"{lvl} high",
                      "limit price, firm 1", "share near static Nash", "share near joint profit",
                      "share converged"], rows, caption="Limit outcomes of every finished cell",
            note=f"means over each cell's converged sessions{_none_converged(ok, results)}; {lvl} confidence "
                 "intervals across sessions (simulation error only)")
    copies = [str(r.number) for r in ok if sessions_are_copies(results[r.cell])]
    if copies:
        b.paragraph(f"Warning: in cell{'s' if len(copies) > 1 else ''} {', '.join(copies)} every session ran the same "
                    "way (nothing the sessions draw changed their course): the sessions are copies of one session, "
                    "not independent observations, so the intervals there have no width and the shares count one "
                    "outcome many times.")
    with_error = all(results[r.cell].error_play for r in ok)
    if with_error:
        _error_play_table(b, exp, ok, results, lvl)
    if any(results[r.cell].shock_response for r in ok):
        _price_war_table(b, exp, ok, results, lvl)
    labels = [_cell_label(r, exp) for r in ok]
    b.figure("cells-side-by-side", comparison_figure([results[r.cell] for r in ok], labels, _swept_name(exp),
                                                     lvl),
             f"Every session's profit gain (left) and firm 1's mean limit price (right), one column per cell; bar: "
             f"the mean and its {lvl} confidence interval across sessions; dotted: static Nash, dashed: joint "
             "profit." + (" Open diamond: the mean profit gain in play with error after learning, with its "
                          "interval." if with_error else ""))
    for r, label in zip(ok, labels):
        for d in figures(results[r.cell]):
            b.figure(f"cell{r.number}-{d.name}", d.figure, f"Cell {r.number} ({label}). {d.caption}")
    b.heading("Each cell's report")
    b.paragraph("The full report of every finished cell, as `supergame learn` prints it for that cell's settings: "
                "the seats, every number with its interval, the responses to a deviation firm by firm, and the "
                "cell's own records (an event, an automaton's punishments and why the sessions ended where they "
                "did, demand shocks, play with error).", note=True)
    for r, label in zip(ok, labels):
        b.heading(f"Cell {r.number}: {label}", level=3)
        b.code(console(results[r.cell]))


def _price_war_table(b, exp, ok, results, lvl) -> None:
    """Every cell's learned response to one adverse demand draw (blank where a cell has no demand shock)."""
    rows = []
    for r in ok:
        sr = results[r.cell].shock_response
        vals = []
        for key in ("cut", "temporary", "price_war"):
            e = sr.get(key) if sr else None
            vals += [_num(e["value"]), _num(e["low"]), _num(e["high"])] if e else [np.nan] * 3
        rows.append([r.number, *[r.labels[p.path] for p in exp.parameters], *vals,
                     sr["cut"]["n"] if sr else 0])
    heads = []
    for what in ("share cutting prices in period 2", "share with a cut that ends", "share below the path in any "
                 "period"):
        heads += [what, f"{lvl} low", f"{lvl} high"]
    b.table("cells-price-wars", ["cell", *[p.path for p in exp.parameters], *heads, "sessions"], rows,
            caption="Learned response to one adverse demand draw",
            note="each converged session learns on from its final state twice from the same random numbers, with "
                 "and without one forced adverse draw three standard deviations below the median in period 1; "
                 "shares of sessions (Wilson intervals); blank: a cell without a demand shock, where nothing is "
                 "measured")


def _error_play_table(b, exp, ok, results, lvl) -> None:
    """Every cell's profit gain without and with error after learning from noisy prices."""
    rows = []
    for r in ok:
        res = results[r.cell]
        pg, ep = res.summary["profit_gain"], res.error_play
        e, c = ep["profit_gain"], ep["gain_change"]
        rows.append([r.number, *[r.labels[p.path] for p in exp.parameters], pg["mean"], e["value"], _num(e["low"]),
                     _num(e["high"]), c["value"], _num(c["low"]), _num(c["high"]), e["n"]])
    periods = results[ok[0].cell].error_play["periods"]
    b.table("cells-with-error", ["cell", *[p.path for p in exp.parameters], "profit gain without error",
                                 "with error", f"{lvl} low", f"{lvl} high", "change", f"{lvl} low", f"{lvl} high",
                                 "sessions"], rows,
            caption="Profit gain of the learned strategies without and with error",
            note=f"without error: the limit outcomes; with error: {periods:,} periods of greedy play per session from "
                 "its final state, each learner seeing its rivals' prices with the error of learning (no learning, "
                 "no exploration); change: with minus without, session by session; over converged sessions")


def _swept_name(exp) -> str | None:
    """The swept parameter in words, for the comparison figure's axis (None for several)."""
    if len(exp.parameters) != 1:
        return None
    path = exp.parameters[0].path
    parts = path.split(".")
    if len(parts) != 2 or parts[0] != "strategies" or not parts[1].isdigit():
        return None
    # [[strategies]] entries are counted from 1 in a sweep's path, and an entry may hold several seats
    entries = exp.doc.get("strategies") if isinstance(exp.doc.get("strategies"), list) else []
    k = int(parts[1])
    if not 1 <= k <= len(entries):
        return None
    seats = [int(e.get("seats", 1)) if isinstance(e, dict) else 1 for e in entries]
    first = sum(seats[:k - 1]) + 1
    firms = list(range(first, first + seats[k - 1]))
    return (f"firm {firms[0]}'s strategy" if len(firms) == 1 else
            f"strategy of firms {', '.join(map(str, firms[:-1]))} and {firms[-1]}")


def comparison_figure(results: list, labels: list, swept: str | None = None, level: str = "95 %"):
    """Every session's profit gain and firm 1's mean limit price, one column per result.

    Parameters
    ----------
    results : list of sim.learning.analysis.LearnResult
    labels : list of str
        One per result.
    swept : str, optional
        The swept parameter in words when there is one whose labels are the values alone (a strategy).
    level : str
        The intervals' confidence level, for the legend.

    Returns
    -------
    matplotlib.figure.Figure
    """
    plt = pyplot()
    fig, axes = plt.subplots(1, 2, figsize=(PAGE_WIDTH, 3.4), layout="constrained")
    rng = np.random.default_rng(0)  # a fixed horizontal spread of the points, the same figure every time
    act = "quantity" if results[0].quantity_setting else "price"
    for k, res in enumerate(results):
        sel = res.selected
        gains = np.array([_num(x) for x in res.per_session["profit_gain"]])[sel]
        prices = np.array([row[0] for row in res.per_session["limit_prices"]], dtype=float)[sel]
        sm = res.summary
        for ax, vals, est in ((axes[0], gains, sm["profit_gain"]), (axes[1], prices, sm["limit_prices"][0])):
            x = k + rng.uniform(-0.18, 0.18, vals.size)
            ax.plot(x, vals, "o", ms=2.5, color=color(k), alpha=0.5, mec="none")
            mean, lo, hi = _num(est["mean"]), _num(est["low"]), _num(est["high"])
            ax.errorbar([k + 0.3], [mean], yerr=[[mean - lo if np.isfinite(lo) else 0.0],
                                                  [hi - mean if np.isfinite(hi) else 0.0]],
                        fmt="s", color="black", ms=4, capsize=3)
        ep = res.error_play
        if ep:
            e = ep["profit_gain"]
            mean, lo, hi = _num(e["value"]), _num(e["low"]), _num(e["high"])
            axes[0].errorbar([k + 0.42], [mean], yerr=[[mean - lo if np.isfinite(lo) else 0.0],
                                                        [hi - mean if np.isfinite(hi) else 0.0]],
                             fmt="D", color="black", mfc="white", ms=4, capsize=3)
    bm = results[0].summary["benchmarks"]
    which = "actions" if act == "quantity" else "prices"
    axes[0].axhline(0.0, color="grey", ls=":", lw=1)
    axes[0].axhline(1.0, color="grey", ls="--", lw=1)
    axes[1].axhline(float(bm[f"nash_{which}"][0]), color="grey", ls=":", lw=1)
    axes[1].axhline(float(bm[f"collusive_{which}"][0]), color="grey", ls="--", lw=1)
    keyed = all(lab.count(" = ") == 1 for lab in labels)
    short = [lab.split(" = ", 1)[-1] if keyed or (swept and " = " not in lab) else f"cell {k + 1}"
             for k, lab in enumerate(labels)]
    ylabels = ("0: static Nash, 1: joint profit", f"{act}, firm 1")
    for ax, title, ylab in zip(axes, ("profit gain", f"firm 1 mean limit {act}"), ylabels):
        ax.set_xticks(range(len(results)), short, fontsize=SMALL)
        ax.set_xlim(-0.6, len(results) - 0.4)
        ax.set_title(title, fontsize=FONT)
        ax.set_ylabel(ylab, fontsize=SMALL)
        ax.tick_params(labelsize=SMALL)
        ax.grid(axis="y", alpha=0.3)
    xname = (labels[0].split(" = ", 1)[0] if keyed else
             swept if swept and all(" = " not in lab for lab in labels) else None)
    if xname:
        for ax in axes:
            ax.set_xlabel(xname, fontsize=SMALL)
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], ls="none", marker="o", ms=3, color="grey", alpha=0.6, label="one session"),
               Line2D([], [], ls="none", marker="s", ms=4, color="black", label=f"mean, {level} interval"),
               Line2D([], [], color="grey", ls=":", lw=1, label="static Nash"),
               Line2D([], [], color="grey", ls="--", lw=1, label="joint profit")]
    fig.legend(handles=handles, loc="outside lower center", ncol=4, fontsize=SMALL, frameon=False)
    return fig
