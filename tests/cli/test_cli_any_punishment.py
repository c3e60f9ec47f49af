"""``supergame thresholds`` with the any-punishment part: the command shows what the run stores, its figure is
the bundle's, and bad settings are refused in one line before any work."""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest

from sim.cli import main
from sim.evidence.render import renderer_for
from sim.runner.analyses.thresholds import KIND
from sim.runner.runs import open_run

TEXT = """
[experiment]
kind = "thresholds"
name = "two-kilns"

[market]
model = "cournot"
demand = "linear"
intercept = 10.0
slope = 1.0
cost = [1.0, 1.5]

[collusion]
agreement = "proportional"

[thresholds]
punishments = [2]

[any_punishment]
grid = 9
delta = 0.4
"""


def test_the_command_shows_the_stored_result_and_plots_the_bundles_figure(tmp_path, capsys):
    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT)
    assert main(["thresholds", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "any punishment (9 x 9 grid)" in printed and "accuracy" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        assert renderer_for("thresholds").console(rf.result(0)) == printed.rstrip("\n")
    command_png = (tmp_path / "plots" / "payoff-set.png").read_bytes()
    bundle_png = (tmp_path / "run" / "report" / "figures" / "payoff-set.png").read_bytes()
    assert command_png == bundle_png


def test_json_and_flags_write_the_table(tmp_path, capsys):
    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT.split("[any_punishment]")[0])
    assert main(["thresholds", str(f), "--json"]) == 0
    assert "any_punishment" not in json.loads(capsys.readouterr().out)
    assert main(["thresholds", str(f), "--grid", "9", "--at-delta", "0.4", "--json"]) == 0
    ap = json.loads(capsys.readouterr().out)["any_punishment"]
    assert ap["grid"] == [9, 9] and ap["delta"] == 0.4 and ap["threshold"]["low"] <= ap["threshold"]["high"]
    # the named schemes on the grid are never below the best punishment (Abreu, 1988: optimal penal codes are
    # the most severe punishments, so every scheme's equilibrium is among those the lowest threshold counts)
    assert ap["high"] <= ap["stick_carrot"] <= ap["grim"]


def test_the_metric_columns_without_the_table_are_unchanged():
    """New columns are appended after the existing ones only when the table is there."""
    doc = {"market": {"model": "cournot", "demand": "linear", "intercept": 10.0, "slope": 1.0, "cost": [1.0, 1.5]},
           "thresholds": {"punishments": [2], "deltas": [0.5]}}
    plain = KIND.metric_names(KIND.prepare(doc))
    assert not any(m.startswith("any_punishment") for m in plain)
    more = KIND.metric_names(KIND.prepare({**doc, "any_punishment": {"grid": 9}}))
    assert more[:len(plain)] == plain and all(m.startswith("any_punishment.") for m in more[len(plain):])


@pytest.mark.parametrize(
    "table, flags, key",
    [
        # a grid far beyond memory: refused from the cost estimate before any array exists
        ("grid = 20000", ["--grid", "20000"], "grid"),
        ("grid = [600, 600, 600]", ["--grid", "600"], "grid"),
        ("delta = 1.0", ["--at-delta", "1"], "delta"),
        ("delta = 0.0", ["--at-delta", "-0.2"], "delta"),
        ("directions = 3", ["--directions", "3"], "directions"),
        ("grid = 3", ["--grid", "3"], "grid"),
        ("tolerance = 0.5", ["--bracket", "0.5"], "tolerance"),
        ("bogus = 1", None, "bogus"),
        ("refine = [16, 8]", None, "refine"),
        ("refine = 8", None, "refine"),
        ("refine = [3, 8]", None, "refine"),
        ("refine = [8, 9, 10, 11, 12, 13, 14, 15, 16]", None, "refine"),
        # the finest grid of the refinement table beyond memory: refused from the cost estimate, naming the table
        ("refine = [8, 600]", None, "refine"),
    ],
)
def test_bad_settings_are_one_line_naming_the_key_with_status_2(tmp_path, capsys, table, flags, key):
    three = "[market]\nmodel = 'cournot'\ndemand = 'linear'\nintercept = 10.0\ncost = [1.0, 1.0, 1.0]\n"
    f = tmp_path / "bad.toml"
    f.write_text(f"{three}[any_punishment]\n{table}\n")
    code = main(["thresholds", str(f)])
    out, err = capsys.readouterr()
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and f"any_punishment.{key}" in err
    if flags is None:
        return
    code = main(["thresholds", "--firms", "3", "--intercept", "10", "--cost", "1", *flags])
    out, err = capsys.readouterr()
    flag = {"grid": "--grid", "delta": "--at-delta", "directions": "--directions", "tolerance": "--bracket"}[key]
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and flag in err


def test_a_refused_grid_writes_no_run_folder(tmp_path, capsys):
    f = tmp_path / "big.toml"
    f.write_text(TEXT.replace("grid = 9", "grid = 20000"))
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "any_punishment.grid" in err and "memory" in err and not (tmp_path / "run").exists()


THREE = """
[experiment]
kind = "thresholds"
name = "three-quarries"

[market]
model = "cournot"
demand = "linear"
intercept = 10.0
slope = 1.0
cost = [1.0, 1.0, 1.0]

[thresholds]
punishments = [2]

[any_punishment]
grid = 5
directions = 16
tolerance = 0.01
delta = 0.4
"""


def test_three_firms_show_and_store_the_symmetric_slice(tmp_path, capsys):
    """With three firms the run stores the symmetric slice in its own columns (after the existing ones), the
    command prints its line, the figure's caption names it, and the printed text is the stored result's."""
    f = tmp_path / "three-quarries.toml"
    f.write_text(THREE)
    assert main(["thresholds", str(f)]) == 0
    printed = capsys.readouterr().out
    assert "symmetric slice (every firm earning the same profit per period)" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        ap = rf.result(0).any_punishment
        assert renderer_for("thresholds").console(rf.result(0)) == printed.rstrip("\n")
        row = rf.rows()[0].metrics
        drawn = [d for d in renderer_for("thresholds").figures(rf.result(0)) if d.name == "payoff-set"]
    ends = ("min_outer", "min_inner", "max_inner", "max_outer")
    assert [row[f"any_punishment.symmetric_slice.{e}"] for e in ends] == pytest.approx(list(ap.symmetric))
    assert "symmetric slice" in drawn[0].caption
    names = KIND.metric_names(KIND.prepare(tomllib.loads(THREE)))
    slice_names = [m for m in names if ".symmetric_slice." in m]
    assert slice_names == [f"any_punishment.symmetric_slice.{e}" for e in ends]


def test_the_refinement_table_is_printed_stored_and_drawn_as_in_the_bundle(tmp_path, capsys):
    f = tmp_path / "refined.toml"
    f.write_text(TEXT.replace("grid = 9\n", "grid = 9\nrefine = [9, 18]\n"))
    assert main(["thresholds", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "How the answers move with the action grid" in printed and "18 x 18" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        res = rf.result(0)
        assert renderer_for("thresholds").console(res) == printed.rstrip("\n")
        row = rf.rows()[0].metrics
    # the 9 x 9 row of the table is the main question asked again
    assert row["any_punishment.refine.actions[1]"] == 9
    assert row["any_punishment.refine.threshold.upper[1]"] == pytest.approx(row["any_punishment.threshold.upper"])
    assert row["any_punishment.refine.actions[2]"] == 18
    command_png = (tmp_path / "plots" / "grid-refinement.png").read_bytes()
    assert command_png == (tmp_path / "run" / "report" / "figures" / "grid-refinement.png").read_bytes()


#: the any-punishment columns of a two-firm run before the frontier was added (they stay, in this order)
TWO_FIRM_COLUMNS = [
    "any_punishment.grid.firm1", "any_punishment.grid.firm2", "any_punishment.directions",
    "any_punishment.threshold.lower", "any_punishment.threshold.upper", "any_punishment.on_grid.grim",
    "any_punishment.on_grid.stick_carrot", "any_punishment.on_grid.two_phase", "any_punishment.delta",
    "any_punishment.sustained", "any_punishment.accuracy", "any_punishment.worst.lower.firm1",
    "any_punishment.worst.lower.firm2", "any_punishment.worst.upper.firm1", "any_punishment.worst.upper.firm2",
]
FRONTIER_COLUMNS = [
    "any_punishment.best_joint.lower", "any_punishment.best_joint.upper", "any_punishment.best_profit.lower.firm1",
    "any_punishment.best_profit.lower.firm2", "any_punishment.best_profit.upper.firm1",
    "any_punishment.best_profit.upper.firm2", "any_punishment.best_equal_profit.lower",
    "any_punishment.best_equal_profit.upper",
]


def test_the_frontier_is_printed_stored_and_catalogued(tmp_path, capsys):
    """The best joint profit and each firm's best payoff at the reported delta: a console line, the --json
    document, results columns after the existing ones (which stay), each with a catalogue entry."""
    from sim.evidence.catalogue import describe

    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT)
    assert main(["thresholds", str(f)]) == 0
    printed = capsys.readouterr().out
    assert "best sustainable profits per period (constructed equilibrium to outer bound): joint" in printed
    assert main(["thresholds", str(f), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        ap = rf.result(0).any_punishment
        assert renderer_for("thresholds").console(rf.result(0)) == printed.rstrip("\n")
        row = rf.rows()[0].metrics
    part = doc["any_punishment"]
    assert part["best_joint"] == pytest.approx(list(ap.best_joint))
    assert np.allclose(part["best_profits"], ap.best_profits, rtol=1e-12, atol=0)
    stored = [*ap.best_joint, *ap.best_profits.T.ravel(), *ap.best_equal]
    assert [row[m] for m in FRONTIER_COLUMNS] == pytest.approx(stored)
    names = [m for m in KIND.metric_names(KIND.prepare(tomllib.loads(TEXT))) if m.startswith("any_punishment.")]
    assert names[:len(TWO_FIRM_COLUMNS)] == TWO_FIRM_COLUMNS
    assert names[len(TWO_FIRM_COLUMNS):len(TWO_FIRM_COLUMNS) + len(FRONTIER_COLUMNS)] == FRONTIER_COLUMNS
    for m in FRONTIER_COLUMNS:
        assert "best" in describe(m).label
