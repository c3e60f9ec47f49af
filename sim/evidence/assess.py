"""How an assessment is shown: the terminal summary, the JSON document, the figures and its evidence bundle (see
:mod:`sim.evidence.render`).

Everything is read from the assessment's plain data (:class:`sim.antitrust.result.Assessment`): ``supergame assess``
prints :func:`console` of the result stored with its run's cell, and the bundle of the run folder (written by
:func:`sim.evidence.report.write_report` for ``supergame assess``, ``supergame run --report`` and ``supergame report``
alike) is :func:`bundle`, read from the same stored result. Nothing here recomputes a number.

The tables, figures and written summary live in :mod:`sim.evidence.assess_tables`,
:mod:`sim.evidence.assess_figures` and :mod:`sim.evidence.assess_summary`.
"""

from __future__ import annotations

import numpy as np

from sim.antitrust.factors import FACTOR_LEGEND
from sim.core.errors import InputError
from sim.core.jsonutil import dumps
from sim.core.text import CAUTION, table
from sim.evidence.answers import assessment_headline
from sim.evidence.assess_figures import assessment_figures
from sim.evidence.assess_payoffs import payoff_lines
from sim.evidence.assess_summary import summary_blocks
from sim.evidence.assess_tables import (
    SIDES,
    as_float,
    assessment_data,
    assessment_tables,
    csv_tables,
    in_order,
    named_products,
    num,
    percent,
    price_rows,
    units,
    yes_no,
)
from sim.evidence.front import parameter_column
from sim.evidence.pairs import assessment_pairs, pair_lines
from sim.evidence.render import Renderer, pyplot
from sim.runner.analyses.assess import describe_cell

__all__ = ["RENDERER", "as_json", "bundle", "console", "figures", "headline", "write_assessment"]


def _stick_and_carrot_lines(d: dict) -> list[str]:
    money = units(d)[0]
    out = []
    for label in SIDES:
        sc = d[label]["thresholds"]["stick_carrot"]
        if sc["market"] is None:
            continue
        act = "quantity" if d[label]["market"]["model"] == "cournot" else "price"
        what = {"collusion": "not deviating from the agreement",
                "punishment": "not deviating from the punishment"}.get(sc.get("binding_constraint"), "-")
        level = num(sc["punishment_action"]) + (f" {money}" if act == "price" else "")
        out.append(f"  stick and carrot {label}: one period at a common {act} of {level}, then back to the "
                   f"agreement; {sc['binding_name']} binds, on {what}")
    return out


def console(a) -> str:
    """The terminal summary of an assessment: the calibration, the merger, the thresholds (with the stick-and-carrot
    punishments), persistence, the factors, the conclusion and the caution.

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    str
    """
    d = assessment_data(a)
    T = assessment_tables(d)
    c = d["conclusion"]
    lines = [assessment_headline(d), "", f"Assessment: {d.get('name', 'assessment')}", ""]
    cal = d["calibration"]
    if cal is not None:
        lines.append(f"Calibration ({cal['demand']} demand, {cal['conduct'].split(':')[0]}; identified by "
                     f"{named_products(d, cal['identified_by'])}): the model's static equilibrium "
                     + ("reproduces" if cal["reproduced"] else "does NOT reproduce")
                     + f" the observed prices and quantities (largest relative residual "
                       f"{as_float(cal['max_relative_residual']):.3g})")
        lines.append("")
    m = d["merger"]
    lines.append(f"Merger: {' + '.join(m['merging'])}; HHI {as_float(m['hhi_pre']):.0f} -> "
                 f"{as_float(m['hhi_post']):.0f}; static Nash prices: "
                 + ", ".join(f"{lab} {percent(r['change'])}" for lab, r in price_rows(d)))
    lines += ["", "Critical discount factors ('-': not sustainable below one)", table(*T["thresholds"], "lrlrllll")]
    lines += [*_stick_and_carrot_lines(d), ""]
    lines += payoff_lines(d)
    pt, mv = assessment_pairs(d)
    if pt is not None:
        lines += ["Every two-firm merger of the market before the merger (grim trigger)",
                  table(*T["pair_mergers"]), *pair_lines(pt, mv, what="grim trigger"), ""]
    if "persistence" in T:
        lines += ["Simulated persistence (95% confidence intervals)", table(*T["persistence"]), ""]
    lines.append("Factors, each named by the change it considers: its effect on collusion in the model and in the "
                 "literature")
    lines.append(table(["factor", "model", "literature", "agree", "source"],
                       [[r[0], r[3], r[4], r[6] or "-", r[5].split(";")[0]] for r in T["factors"][1]], "lllll"))
    lines += [FACTOR_LEGEND, "", c["statement"]]
    lines += [f"  sensitivity ({k}): {v}" for k, v in in_order(c.get("robustness") or {})]
    lines += ["", CAUTION]
    return "\n".join(lines)


def as_json(a) -> dict:
    """The ``--json`` document of an assessment: its whole plain data, the caution included.

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    dict
    """
    return assessment_data(a)


def figures(a) -> list:
    """The figures of an assessment (see :func:`sim.evidence.assess_figures.assessment_figures`).

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    list of Drawn
    """
    return assessment_figures(a)


def bundle(rf, b):
    """The assessment's account of a finished run in its evidence bundle.

    One cell (an assessment file): the summary, figures and tables of the assessment and its full result as
    ``assessment.json``, all read from the cell's stored result; the stream keys of its simulations in the manifest.
    A sweep (``supergame run`` of a file with a ``[sweep]``): every cell's conclusion, with the thresholds along one
    numeric swept parameter.

    Parameters
    ----------
    rf : RunFolder
        The open run folder.
    b : Bundle
        The bundle being written.

    Returns
    -------
    list of str or None
        Lines on reproducing the numbers (for the report's section of that name).
    """
    exp = rf.experiment
    rows = rf.rows()
    b.title = f"Coordinated effects of a merger: {exp.name}"
    if exp.parameters:
        return _sweep_account(rf, b, exp, rows)
    row = rows[0]
    if row.status != "ok":
        b.paragraph("The assessment failed: no results to report (see the failed cells below).", note=True)
        return None
    result = rf.result(row.cell)
    if result is None:
        raise InputError("RUN_DIR", f"the stored cell of {rf.path} holds no assessment (an earlier version of "
                                    "supergame ran it); run the experiment file again")
    return write_assessment(b, result, key=(row.cell,))


def write_assessment(b, a, key=(0,)) -> list:
    """Add an assessment's summary, figures, tables and ``assessment.json`` to a bundle.

    Parameters
    ----------
    b : Bundle
    a : Assessment
    key : tuple of int
        The stream key of the assessment's cell (its simulations draw from keys that start with it), recorded in the
        bundle's manifest.

    Returns
    -------
    list of str
        The lines on reproducing the numbers.
    """
    d = assessment_data(a)
    tables = assessment_tables(d)
    drawn = assessment_figures(d)
    fig_of = {f.name: f for f in drawn}
    try:
        _fill(b, summary_blocks(d, list(fig_of)), tables, fig_of, csv_tables(d))
    finally:
        plt = pyplot()
        for f in fig_of.values():  # figures not added (an error part-way)
            plt.close(f.figure)
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


def _fill(b, blocks, tables, fig_of: dict, csv: dict) -> None:
    shown = set()
    for blk in blocks:
        if blk[0] == "heading":
            b.heading(*blk[1:])
        elif blk[0] == "paragraph":
            b.paragraph(blk[1])
        elif blk[0] == "note":
            b.paragraph(blk[1], note=True)
        elif blk[0] == "assumptions":
            b.assumption_items.extend(blk[1])
        elif blk[0] == "bullets":
            b.bullets(blk[1])
        elif blk[0] == "table":
            headers, rows = tables[blk[1]]
            b.table(blk[1], headers, rows, caption=blk[2], max_rows=200, csv_rows=csv.get(blk[1]))
            shown.add(blk[1])
        elif blk[0] == "figure":
            f = fig_of.pop(blk[1])
            b.figure(f.name, f.figure, f.caption)
    for name, (headers, rows) in tables.items():
        if name not in shown:
            b.table(name, headers, rows, caption=name.replace("_", " "), show=False, csv_rows=csv.get(name))


def _sweep_account(rf, b, exp, rows) -> list:
    """A sweep of assessments: every finished cell's conclusion, and the headline thresholds along a
    single numeric swept parameter."""
    b.heading("Setup")
    b.bullets(describe_cell(exp.doc))
    b.paragraph("Each cell of the sweep is one complete assessment with these settings and the swept values below; "
                "its full account (every table of a single assessment) is the cell's `assessment` entry in "
                "`arrays.json`.", note=True)
    b.heading("Sweep")
    b.table("sweep", ["parameter", "values", "number"],
            [[parameter_column(p.path), ", ".join(p.labels), len(p)] for p in exp.parameters],
            caption="Swept parameters")
    b.heading("Results")
    done = [(r, rf.result(r.cell)) for r in rows if r.status == "ok"]
    done = [(r, a) for r, a in done if a is not None]
    if not done:
        b.paragraph("No cell finished: no results to report (see the failed cells below).", note=True)
        return []
    body = []
    for r, a in done:
        c = a.conclusion
        body.append([r.number, *[r.labels[p.path] for p in exp.parameters], c["threshold_before"],
                     c["binding_before"], c["threshold_after"], c["binding_after"], c["direction"],
                     yes_no(c["sustainable_before"]), yes_no(c["sustainable_after"])])
    c0 = done[0][1].conclusion
    b.table("cells", ["cell", *[parameter_column(p.path) for p in exp.parameters], "threshold before", "binding before",
                      "threshold after", "binding after", "effect of the merger", "sustainable before", "after"],
            body, caption=f"Conclusion of every finished cell ({c0['scheme']})",
            note="'-': not sustainable below one; sustainable: at the cell's discount factor")
    numeric = [p for p in exp.parameters if p.numeric]
    if len(exp.parameters) == 1 and numeric and len(done) >= 2:
        _sweep_figure(b, numeric[0], done, c0["scheme"])
    return []


def _sweep_figure(b, p, done: list, scheme: str) -> None:
    plt = pyplot()
    xs = np.array([float(r.params[p.path]) for r, _a in done])
    srt = np.argsort(xs)
    fig, ax = plt.subplots(figsize=(7, 4))
    for label, col, ls in (("before", "#2c7bb6", "-o"), ("after", "#d7191c", "--o")):
        y = np.array([as_float(a.conclusion[f"threshold_{label}"]) for _r, a in done])[srt]
        ax.plot(xs[srt], y, ls, ms=3, color=col, label=label)
    if p.log:
        ax.set_xscale("log")
    ax.set_xlabel(parameter_column(p.path))
    ax.set_ylabel("critical discount factor (market)")
    ax.set_ylim(0, 1.02)
    ax.legend(fontsize=8)
    fig.tight_layout()
    b.figure("thresholds-over-sweep", fig, f"Critical discount factor ({scheme}) before and after the merger "
                                           f"against the {parameter_column(p.path)}; a missing point is not "
                                           "sustainable below one.")


def headline(a) -> str:
    """The answer: whether the merger makes coordination easier, with the threshold before and after.

    Parameters
    ----------
    a : Assessment

    Returns
    -------
    str
    """
    return assessment_headline(assessment_data(a))


RENDERER = Renderer(console=console, as_json=as_json, figures=figures, bundle=bundle, headline=headline)
