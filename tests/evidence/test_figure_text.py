"""No text of a figure overlaps other text or leaves the canvas.

Every figure the renderers (thresholds, learning, tournament, assessment) and the report of a run folder (heatmaps,
lines, the single-cell figures) draw on small runs is drawn on matplotlib's Agg canvas; the window extent of each
visible text artist -- titles, axis labels, tick labels that are drawn, legend texts and titles, annotations such as
heatmap cell numbers, colour-bar labels -- is read from the renderer. Two extents may touch (a tolerance of
``TOUCH`` pixels, anti-aliasing) but not overlap, and every extent lies inside the figure. The data are adversarial
where a reader's data could be: one cell, a cell without a value, values of both signs, long group names.
"""

from __future__ import annotations

import textwrap
import tomllib
from dataclasses import dataclass

import matplotlib
import pytest

matplotlib.use("Agg")

from matplotlib.text import Text

import sim.evidence.figures as figs
from sim.evidence.assess import figures as assess_figures
from sim.evidence.learn import figures as learn_figures
from sim.evidence.report import _draw as report_draw
from sim.evidence.report import _single_cell_figures, default_figures
from sim.evidence.thresholds import figures as thresholds_figures
from sim.evidence.tournament import figures as tournament_figures
from sim.runner.analyses.assess import KIND as ASSESS
from sim.runner.kinds import CellContext, get_kind
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single
from tests.cli.test_cli_learn import SMALL as LEARN_SMALL
from tests.evidence.test_assess_render import LOGIT

#: pixels two text extents may share (anti-aliased edges of neighbouring glyph boxes)
TOUCH = 1.0


def _drawn_ticks(ax) -> set:
    """The tick label artists an axes draws (matplotlib keeps others, outside the view, that it does not draw)."""
    out = set()
    for axis in (ax.xaxis, ax.yaxis):
        for tick in axis._update_ticks():
            out.update(t for t in (tick.label1, tick.label2) if t.get_visible())
    return out


def text_extents(fig) -> list:
    """(description, extent) of every text a reader sees in the figure, after drawing it on the Agg canvas."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    ticks_all = {t for ax in fig.axes for axis in (ax.xaxis, ax.yaxis)
                 for tick in axis.get_major_ticks() + axis.get_minor_ticks() for t in (tick.label1, tick.label2)}
    drawn = set().union(*(_drawn_ticks(ax) for ax in fig.axes)) if fig.axes else set()
    out = []
    for t in fig.findobj(Text):
        if t in ticks_all and t not in drawn:
            continue
        if not t.get_visible() or not t.get_text().strip() or (t.axes is not None and not t.axes.get_visible()):
            continue
        if t.get_alpha() == 0:
            continue
        out.append((repr(t.get_text())[:60], t.get_window_extent(renderer=renderer)))
    return out


def text_problems(fig) -> list[str]:
    """Texts that overlap each other or leave the canvas."""
    ext = text_extents(fig)
    W, H = fig.bbox.width, fig.bbox.height
    bad = []
    for name, e in ext:
        if e.x0 < -TOUCH or e.y0 < -TOUCH or e.x1 > W + TOUCH or e.y1 > H + TOUCH:
            bad.append(f"{name} leaves the canvas ({e.x0:.0f}, {e.y0:.0f}, {e.x1:.0f}, {e.y1:.0f}; figure {W:.0f} x "
                       f"{H:.0f})")
    for i in range(len(ext)):
        for j in range(i + 1, len(ext)):
            (a, ea), (b, eb) = ext[i], ext[j]
            w = min(ea.x1, eb.x1) - max(ea.x0, eb.x0)
            h = min(ea.y1, eb.y1) - max(ea.y0, eb.y0)
            if w > TOUCH and h > TOUCH:
                bad.append(f"{a} overlaps {b}")
    return bad


def _check(drawn) -> None:
    problems = {d.name: text_problems(d.figure) for d in drawn}
    problems = {k: v for k, v in problems.items() if v}
    assert not problems, problems


@dataclass
class _D:
    name: str
    figure: object


# -- the checker itself -------------------------------------------------------------------------------------------


def test_the_checker_finds_overlapping_and_cut_text():
    plt = figs._plt()
    fig, ax = plt.subplots(figsize=(4, 3))
    ax.text(0.5, 0.5, "first words", transform=ax.transAxes)
    ax.text(0.52, 0.5, "second words", transform=ax.transAxes)
    ax.set_ylabel("a label")
    fig.text(0.98, 0.5, "runs off the right edge")
    found = text_problems(fig)
    assert any("overlaps" in p and "first words" in p for p in found)
    assert any("leaves the canvas" in p and "right edge" in p for p in found)
    plt.close(fig)
    fig, ax = plt.subplots(figsize=(4, 3))
    ax.set_xlabel("x")
    ax.set_ylabel("y")
    fig.tight_layout()
    assert text_problems(fig) == []
    plt.close(fig)


# -- the report's sweep figures -----------------------------------------------------------------------------------

SWEEP = textwrap.dedent("""
    # Figure text check: three schemes over delta and noise; one cell fails (a value missing in the grid).
    [experiment]
    name = "figure-text"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 14.0]
    [monitoring]
    perception_error = 0.0
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 30
    replications = 8
    seed = 3
    [deviation]
    firm = "binding"
    [sweep]
    "run.delta" = [0.5, 0.65, 0.8, 0.95]
    "monitoring.perception_error" = [0.0, 0.01, 0.05]
    "strategies.1" = { values = [
        { strategy = "grim_trigger", seats = 2 },
        { strategy = "finite_punishment", length = 3, seats = 2 },
        { strategy = "forgiving_tit_for_tat", forgiveness = 0.3, seats = 2 },
    ], labels = ["grim trigger, the harshest punishment of all", "Nash reversion for three periods",
                 "forgiving tit for tat with forgiveness 0.3"] }
    """)


@pytest.fixture(scope="module")
def sweep_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("figure-text")
    p = d / "sweep.toml"
    p.write_text(SWEEP)
    s = run_experiment(p, d / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        exp, rows = rf.experiment, rf.rows()
    # a cell without values: the figures must draw around it
    rows[5].metrics.clear()
    rows[5].status = "failed"
    return exp, rows


def test_heatmaps_and_lines_of_a_sweep_keep_their_text_apart(sweep_run):
    exp, rows = sweep_run
    data = figs.SweepData(list(exp.parameters), rows)
    kind = exp.kind_spec()
    specs = default_figures(exp, kind, data)
    assert {s.type for s in specs} == {"heatmap", "line"}
    drawn = [_D(f"{s.type}-{s.metric}", report_draw(s, data)) for s in specs]
    # both signs (the deviation gain) with the analytic threshold and the simulated boundary, one value of delta
    drawn.append(_D("gain-levels", figs.heatmap(data, "run.delta", "monitoring.perception_error", "deviation.gain",
                                                threshold="analytic.critical_delta", level=0.0,
                                                facet="strategies.1")))
    drawn.append(_D("one-x", figs.lines(data, "monitoring.perception_error", "collusive_share", group="strategies.1",
                                        at={"run.delta": "0.8"})))
    _check(drawn)


def test_a_sweep_of_one_value_keeps_its_text_apart(tmp_path):
    p = tmp_path / "one.toml"
    p.write_text(SWEEP.replace('[0.5, 0.65, 0.8, 0.95]', '[0.9]').replace('[0.0, 0.01, 0.05]', '[0.0, 0.02]'))
    s = run_experiment(p, tmp_path / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        exp, rows = rf.experiment, rf.rows()
    data = figs.SweepData(list(exp.parameters), rows)
    _check([_D("one-delta", figs.heatmap(data, "run.delta", "monitoring.perception_error", "profit_gain",
                                         facet="strategies.1")),
            _D("lines", figs.lines(data, "monitoring.perception_error", "profit_gain", group="strategies.1"))])


def test_a_dense_sweep_in_three_panels_keeps_its_text_apart(tmp_path):
    # ten discount factors in each of three panels (the demo's shape): tick labels must not run into each other
    p = tmp_path / "dense.toml"
    deltas = "[" + ", ".join(f"{0.5 + 0.05 * k:.2f}" for k in range(10)) + "]"
    p.write_text(SWEEP.replace('[0.5, 0.65, 0.8, 0.95]', deltas).replace('[0.0, 0.01, 0.05]', '[0.0, 0.02]')
                 .replace("replications = 8", "replications = 2").replace("periods = 30", "periods = 10"))
    s = run_experiment(p, tmp_path / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        exp, rows = rf.experiment, rf.rows()
    data = figs.SweepData(list(exp.parameters), rows)
    _check([_D("dense", figs.heatmap(data, "run.delta", "monitoring.perception_error", "collusive_share",
                                     threshold="analytic.critical_delta", facet="strategies.1")),
            _D("dense-lines", figs.lines(data, "run.delta", "collusive_share", group="strategies.1",
                                         facet="monitoring.perception_error"))])


def test_the_single_cell_figures_of_a_report_keep_their_text_apart(tmp_path):
    p = tmp_path / "cell.toml"
    p.write_text(SWEEP.split("[sweep]")[0].replace("seed = 3", "seed = 3\ndelta = 0.9")
                 .replace("perception_error = 0.0", "perception_error = 0.02"))
    s = run_experiment(p, tmp_path / "run", workers=1, progress=False)
    got = []

    class _B:
        def figure(self, name, fig, caption):
            got.append(_D(name, fig))

    with open_run(s.folder) as rf:
        _single_cell_figures(_B(), rf, rf.experiment.kind_spec(), rf.rows()[0])
    assert got
    _check(got)


# -- the renderers' figures ---------------------------------------------------------------------------------------


def test_threshold_figures_keep_their_text_apart():
    doc = {"experiment": {"kind": "thresholds", "name": "quarries"},
           "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0,
                      "cost": [10.0, 10.0, 14.0, 11.0, 12.5]},
           "collusion": {"agreement": "proportional"},
           "thresholds": {"punishments": [1, 3, 12], "deltas": [0.5, 0.9]}}
    drawn = thresholds_figures(run_single(doc).result)
    assert drawn
    _check(drawn)


def test_learning_figures_keep_their_text_apart():
    drawn = learn_figures(run_single(tomllib.loads(LEARN_SMALL)).result)
    assert len(drawn) == 3
    _check(drawn)


def test_tournament_figures_keep_their_text_apart():
    doc = {"experiment": {"kind": "tournament", "name": "t", "currency": "EUR", "period": "month"},
           "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2},
           "entrants": [{"label": "grim trigger with a long name", "strategy": "grim_trigger"},
                        {"label": "always compete", "strategy": "always_compete"},
                        {"label": "tit for tat", "strategy": "tit_for_tat"}],
           "tournament": {"bootstrap": 0, "generations": 5, "population": 4, "moran_runs": 0},
           "run": {"periods": 10, "replications": 3}}
    kind = get_kind("tournament")
    drawn = tournament_figures(kind.run(kind.prepare(doc), CellContext()).result)
    assert drawn
    _check(drawn)


def test_assessment_figures_keep_their_text_apart():
    doc = {"experiment": {"name": "units", "kind": "assess", "currency": "EUR", "period": "month"},
           "data": {"demand": "logit", **LOGIT}, "merger": {"firms": [2, 3]},
           "monitoring": {"perception_error": 0.01}, "run": {"periods": 30, "replications": 20, "seed": 1},
           "assess": {"deltas": [], "growth": -0.03}}
    drawn = assess_figures(ASSESS.run(ASSESS.prepare(doc), CellContext()).result)
    assert drawn
    _check(drawn)


def test_any_punishment_figures_keep_their_text_apart():
    """The payoff set (two firms; three firms with the symmetric slice) and the grid-refinement figure."""
    for cost, refine in (([10.0, 12.0], [8, 12]), ([10.0, 10.0, 12.0], [6, 8])):
        doc = {"experiment": {"kind": "thresholds", "name": "kilns", "currency": "EUR", "period": "month"},
               "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": cost},
               "collusion": {"agreement": "proportional"},
               "any_punishment": {"grid": refine[0], "refine": refine, "directions": 8} if len(cost) > 2 else
               {"grid": refine[0], "refine": refine}}
        drawn = thresholds_figures(run_single(doc).result)
        assert {"payoff-set", "grid-refinement"} <= {d.name for d in drawn}
        _check(drawn)


def test_alternating_learning_figures_keep_their_text_apart():
    doc = tomllib.loads(LEARN_SMALL)
    doc.setdefault("learning", {}).update({"timing": "alternating", "grid": [0.0, 0.25, 0.5, 0.75, 1.0]})
    doc["market"] = {"model": "bertrand", "demand": "linear", "intercept": 1.0, "slope": 1.0, "cost": 0.0,
                     "n_firms": 2}
    drawn = learn_figures(run_single(doc).result)
    assert "alternating_outcomes" in {d.name for d in drawn}
    _check(drawn)
