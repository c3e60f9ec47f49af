"""A swept tournament in its evidence bundle: the setup, the sweep, every cell's outcome and, over one numeric
parameter, each rule's profit gain along it -- all read from the results the run folder stores for its cells."""

from __future__ import annotations

import math

import numpy as np

from sim.evidence.render import pyplot
from sim.evidence.tournament_figures import WIDTH, line_style, percent
from sim.runner.analyses.tournament import describe as describe_setup

__all__ = ["parameter_words", "sweep_account"]


def parameter_words(path: str) -> str:
    """A swept parameter's path in words: ``monitoring.implementation_error`` -> ``implementation error
    (monitoring)``.

    Parameters
    ----------
    path : str

    Returns
    -------
    str
    """
    parts = path.split(".")
    name = parts[-1].replace("_", " ")
    return f"{name} ({' '.join(p.replace('_', ' ') for p in parts[:-1])})" if len(parts) > 1 else name


def _cell_row(r, out, exp) -> list:
    first = [out.labels[e] for e in out.order if out.ranks[e] == 1]
    gain = float(out.estimates[out.score][out.order[0]][0])
    top = int(np.argmax(out.evolution.final))
    holds = out.stability["ranking_holds"] if out.stability else math.nan
    resist = [lab for e, lab in enumerate(out.labels) if out.evolution.resists_finite[e]]
    return [r.number, *[r.labels[p.path] for p in exp.parameters], ", ".join(first), gain, percent(holds),
            f"{out.labels[top]} ({percent(float(out.evolution.final[top]))})", ", ".join(resist) or "none"]


def sweep_account(run, b, ok: list) -> None:
    """Write the account of a swept tournament into a bundle.

    Parameters
    ----------
    run : sim.runner.runs.RunFolder
    b : sim.evidence.bundle.Bundle
    ok : list of sim.runner.store.CellRow
        The finished cells.

    Returns
    -------
    None
    """
    exp = run.experiment
    b.heading("Setup")
    b.bullets(describe_setup(exp.doc))
    b.paragraph("These are the file's settings; the values of " + ", ".join(f"`{p.path}`" for p in exp.parameters)
                + " are those of the sweep below.", note=True)
    b.heading("Sweep")
    b.table("sweep", ["parameter", "values", "number"],
            [[parameter_words(p.path), ", ".join(p.labels), len(p)] for p in exp.parameters],
            caption="Swept parameters")
    b.heading("Results")
    if not ok:
        b.paragraph("No cell finished: no results to report (see the failed cells below).", note=True)
        return
    outs = {r.cell: run.result(r.cell) for r in ok}
    first = outs[ok[0].cell]
    what = "profit gain" if first.score == "profit_gain" else first.score.replace("_", " ")
    gens = int(first.evolution.settings["generations"])
    N = first.evolution.population
    b.table("cells", ["cell", *[parameter_words(p.path) for p in exp.parameters], "first place", f"its {what}",
                      "order holds in resamples", f"largest population share after {gens:,} generations",
                      f"resists invasion among {N} firms"],
            [_cell_row(r, outs[r.cell], exp) for r in ok], caption="Outcome of every finished cell",
            note="first place: the rule(s) with the highest score against rivals drawn at random from the rules")
    numeric = [p for p in exp.parameters if p.numeric]
    if len(exp.parameters) == 1 and numeric:
        fig = _along(numeric[0], ok, outs)
        b.figure("profit-gain-over-sweep", fig,
                 f"Each rule's profit gain against {parameter_words(numeric[0].path)}; band: "
                 f"{100 * first.confidence:g} % confidence interval (simulation error only). 0 is the static Nash "
                 "profit, 1 the collusive profit of the rule's seats.")


def _along(p, ok: list, outs: dict):
    """Each rule's profit gain along one numeric swept parameter, with its band."""
    plt = pyplot()
    labels = outs[ok[0].cell].labels
    xs = np.array([float(r.params[p.path]) for r in ok])
    srt = np.argsort(xs)
    fig, ax = plt.subplots(figsize=(WIDTH, 3.6), layout="constrained")
    for e, lab in enumerate(labels):
        est = []
        for r in ok:
            out = outs[r.cell]
            k = out.labels.index(lab) if lab in out.labels else None
            est.append(out.estimates["profit_gain"][k] if k is not None else [math.nan] * 4)
        est = np.asarray(est, dtype=float)[srt]
        style = line_style(e)
        ax.plot(xs[srt], est[:, 0], marker="o", ms=3, lw=1.3, label=lab, **style)
        ax.fill_between(xs[srt], est[:, 2], est[:, 3], color=style["color"], alpha=0.18, lw=0)
    if p.log:
        ax.set_xscale("log")
    ax.set_xlabel(parameter_words(p.path), fontsize=9)
    ax.set_ylabel("profit gain", fontsize=9)
    ax.tick_params(labelsize=8)
    ax.grid(alpha=0.3)
    ax.legend(title="rule", fontsize=8, title_fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return fig
