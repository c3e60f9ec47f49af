"""A sweep that zips two paths is one dimension of the sweep: the figure check accepts a figure that names only the
group's lead (the first path of the zip group), and the default figures colour or facet by the group once, labelled
by its lead, with a legend that lists only the lines drawn, under a title.

The sweep is the one a reader writes to vary the number of firms with a line-up entry that has a fixed number of
seats: ``market.n_firms`` zipped with ``strategies.1.seats``.
"""

from __future__ import annotations

import textwrap
import tomllib

import matplotlib
import pytest

matplotlib.use("Agg")

import matplotlib.pyplot as plt

import sim.evidence.figures as figs
from sim.core.errors import InputError
from sim.evidence.catalogue import describe_parameter
from sim.evidence.report import _draw as report_draw
from sim.evidence.report import default_figures
from sim.runner.experiment import experiment_from_dict
from sim.runner.runs import open_run, run_experiment

ZIPPED = textwrap.dedent("""
    # Two to four invented kilns: the number of kilns zipped with the seats of the one line-up entry.
    [experiment]
    name = "zipped-kilns"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 2
    [monitoring]
    perception_error = 0.02
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 30
    replications = 8
    seed = 11
    [sweep]
    "run.delta" = [0.6, 0.8, 0.95]
    "market.n_firms" = [2, 3, 4]
    "strategies.1.seats" = [2, 3, 4]
    zip = [["market.n_firms", "strategies.1.seats"]]
    """)

#: a figure naming the group's lead only (its partner, also swept, is neither an axis nor fixed)
FIGURE = textwrap.dedent("""
    [[report.figures]]
    type = "line"
    x = "run.delta"
    metric = "collusive_share"
    group = "market.n_firms"
    """)


@pytest.fixture(scope="module")
def zipped_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("zipped")
    p = d / "experiment.toml"
    p.write_text(ZIPPED)
    s = run_experiment(p, d / "run", workers=1, progress=False)
    assert s.complete
    with open_run(s.folder) as rf:
        exp, rows = rf.experiment, rf.rows()
    return exp, rows


def _doc(extra: str = "") -> dict:
    return tomllib.loads(ZIPPED + extra)


def test_the_figure_check_accepts_a_zip_group_named_by_one_path():
    exp = experiment_from_dict(_doc(FIGURE), check_cells=False)
    (spec,) = exp.report.figures
    assert spec.group == "market.n_firms"
    # the partner alone shows the group too
    exp = experiment_from_dict(_doc(FIGURE.replace('"market.n_firms"', '"strategies.1.seats"')), check_cells=False)
    assert exp.report.figures[0].group == "strategies.1.seats"


def test_the_figure_check_refuses_one_group_on_two_roles_and_a_missing_dimension():
    both = FIGURE + 'facet = "strategies.1.seats"\n'
    with pytest.raises(InputError) as e:
        experiment_from_dict(_doc(both), check_cells=False)
    assert e.value.key == "report.figures[1].facet" and "zip group" in e.value.message
    # without the group, the figure leaves a dimension open: the error names the group's lead, not its partner
    alone = FIGURE.replace('group = "market.n_firms"\n', "")
    with pytest.raises(InputError) as e:
        experiment_from_dict(_doc(alone), check_cells=False)
    assert e.value.key == "report.figures[1]" and "market.n_firms" in e.value.message
    assert "strategies.1.seats" not in e.value.message
    fixed = alone + 'at = { "strategies.1.seats" = 3 }\n'
    assert experiment_from_dict(_doc(fixed), check_cells=False).report.figures[0].fixed() == {
        "strategies.1.seats": "3"}


def test_default_figures_show_the_group_once_by_its_lead(zipped_run):
    exp, rows = zipped_run
    assert exp.groups == (("run.delta",), ("market.n_firms", "strategies.1.seats"))
    data = figs.SweepData(list(exp.parameters), rows, (None, None), exp.groups)
    specs = default_figures(exp, exp.kind_spec(), data)
    assert specs, "no default figure"
    for s in specs:
        named = {s.x, s.y, s.group, s.facet} - {None}
        assert "strategies.1.seats" not in named, s
        assert s.facet is None, s  # two dimensions: nothing left to facet by
    heat = [s for s in specs if s.type == "heatmap"]
    line = [s for s in specs if s.type == "line"]
    assert heat and {(s.x, s.y) for s in heat} == {("run.delta", "market.n_firms")}
    assert line and {(s.x, s.group) for s in line} == {("run.delta", "market.n_firms")}
    lead = describe_parameter("market.n_firms").label
    for s in line:
        fig = report_draw(s, data)
        try:
            panels = [ax for ax in fig.axes if ax.get_visible()]
            assert len(panels) == 1, "one panel: the group is coloured, not faceted"
            (legend,) = fig.legends
            texts = [t.get_text() for t in legend.get_texts()]
            drawn = [ln.get_label() for ln in panels[0].get_lines() if not ln.get_label().startswith("_")]
            # every legend entry is a line of the panel, and every drawn line has its entry
            assert sorted(texts) == sorted(set(drawn)), (texts, drawn)
            simulated = [t for t in texts if "analytic" not in t]
            assert simulated == ["2", "3", "4"], texts
            assert legend.get_title().get_text() == lead.split(" [")[0]
        finally:
            plt.close(fig)
    for s in heat:
        fig = report_draw(s, data)
        try:
            panels = [ax for ax in fig.axes if ax.get_visible() and ax.get_label() != "<colorbar>"]
            assert len(panels) == 1
            # every cell of the 3 x 3 grid has its value (the partner follows its lead, no hatched holes)
            assert len([t for t in panels[0].texts if t.get_text().strip()]) >= 9
            assert panels[0].get_ylabel().startswith(lead.split(" [")[0])
        finally:
            plt.close(fig)


def test_a_lookup_by_the_partner_finds_the_same_cell(zipped_run):
    exp, rows = zipped_run
    data = figs.SweepData(list(exp.parameters), rows, (None, None), exp.groups)
    for r in rows:
        by_lead = data.value({"run.delta": r.labels["run.delta"], "market.n_firms": r.labels["market.n_firms"]},
                             "collusive_share")
        by_partner = data.value({"run.delta": r.labels["run.delta"],
                                 "strategies.1.seats": r.labels["strategies.1.seats"]}, "collusive_share")
        assert by_lead == by_partner == r.metrics["collusive_share"]
