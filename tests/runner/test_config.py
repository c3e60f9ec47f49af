"""Experiment files: schema, sweeps and their cells, validation before any work starts."""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path

import pytest

from sim.core.errors import InputError
from sim.core.values import canonical_path, parse_values, value_label
from sim.runner.experiment import experiment_from_dict, load_experiment

ROOT = Path(__file__).resolve().parents[2]

BASE = {
    "experiment": {"name": "t", "kind": "simulate"},
    "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": [10.0, 10.0, 14.0]},
    "strategies": [{"strategy": "grim_trigger", "seats": 3}],
    "run": {"periods": 20, "replications": 10, "seed": 1},
}


def doc(**tables):
    d = copy.deepcopy(BASE)
    for k, v in tables.items():
        if v is None:
            d.pop(k, None)
        else:
            d[k] = v
    return d


def error_of(d) -> InputError:
    with pytest.raises(InputError) as info:
        experiment_from_dict(d)
    return info.value


# --------------------------------------------------------------------------------------------------
# sweeps
# --------------------------------------------------------------------------------------------------


def test_grid_order_first_path_slowest_and_cells_carry_their_values():
    sweep = {"run.delta": [0.8, 0.9], "monitoring": {"perception_error": [0.0, 0.01, 0.02]}}
    e = experiment_from_dict(doc(sweep=sweep))
    assert e.n_cells == 6
    got = [(c.values["run.delta"], c.values["monitoring.perception_error"]) for c in e.cells()]
    assert got == [(0.8, 0.0), (0.8, 0.01), (0.8, 0.02), (0.9, 0.0), (0.9, 0.01), (0.9, 0.02)]
    c = e.cell(4)
    assert c.doc["run"]["delta"] == 0.9 and c.doc["monitoring"]["perception_error"] == 0.01
    assert "sweep" not in c.doc and "report" not in c.doc
    # the base document is not modified by building cells
    assert "delta" not in e.doc["run"]


def test_ranges_linear_step_log_and_labelled_values():
    e = experiment_from_dict(doc(sweep={
        "run.delta": {"start": 0.5, "stop": 0.95, "step": 0.05},
        "monitoring.perception_error": {"start": 0.001, "stop": 0.1, "num": 3, "log": True},
        "strategies.1.seats": {"start": 3, "stop": 3, "num": 1},
    }))
    assert list(e.parameter("run.delta").values) == [0.5, 0.55, 0.6, 0.65, 0.7, 0.75, 0.8, 0.85, 0.9, 0.95]
    assert list(e.parameter("monitoring.perception_error").values) == [0.001, 0.01, 0.1]
    assert e.parameter("monitoring.perception_error").log
    assert e.parameter("strategies.1.seats").values == (3,)
    e = experiment_from_dict(doc(sweep={"run.periods": {"start": 10, "stop": 30, "num": 3}}))
    assert e.parameter("run.periods").values == (10, 20, 30)
    assert all(isinstance(v, int) for v in e.parameter("run.periods").values)


def test_whole_entries_swept_with_labels():
    e = experiment_from_dict(doc(sweep={"strategies.1": {
        "values": [{"strategy": "grim_trigger", "seats": 3},
                   {"strategy": "finite_punishment", "length": 3, "seats": 3}],
        "labels": ["grim", "T=3"]}}))
    assert e.parameter("strategies.1").labels == ("grim", "T=3")
    assert e.cell(1).doc["strategies"][0] == {"strategy": "finite_punishment", "length": 3, "seats": 3}
    assert value_label({"strategy": "finite_punishment", "length": 3, "seats": 3}) == "finite_punishment(length=3)"


def test_zip_mode_and_zip_groups():
    sw = {"mode": "zip", "market.n_firms": [2, 3, 4], "strategies.1.seats": [2, 3, 4]}
    d = doc(sweep=sw)
    d["market"] = {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2}
    e = experiment_from_dict(d)
    assert e.n_cells == 3
    assert [c.values["market.n_firms"] for c in e.cells()] == [2, 3, 4]
    sw = {"market.n_firms": [2, 3], "strategies.1.seats": [2, 3], "run.delta": [0.8, 0.9, 0.95],
          "zip": [["market.n_firms", "strategies[1].seats"]]}
    d["sweep"] = sw
    e = experiment_from_dict(d)
    assert e.n_cells == 6
    assert [(c.values["market.n_firms"], c.values["strategies.1.seats"]) for c in e.cells()][::3] == [(2, 2), (3, 3)]


def test_paths_in_bracket_or_dotted_form_are_the_same():
    assert canonical_path("strategies[2].length") == "strategies.2.length"
    assert canonical_path("market.cost.3") == "market.cost.3"
    e = experiment_from_dict(doc(sweep={"market.cost.3": [12.0, 14.0]}))
    assert e.cell(0).doc["market"]["cost"] == [10.0, 10.0, 12.0]


def test_cell_seed_is_the_experiment_seed_unless_swept():
    e = experiment_from_dict(doc(sweep={"run.delta": [0.8, 0.9]}))
    assert [e.seed(c.doc) for c in e.cells()] == [1, 1]
    e = experiment_from_dict(doc(sweep={"run.seed": [5, 6]}))
    assert [e.seed(c.doc) for c in e.cells()] == [5, 6]


# --------------------------------------------------------------------------------------------------
# errors: one key path, the allowed values, what was given
# --------------------------------------------------------------------------------------------------


def test_misspelt_key_is_named():
    e = error_of(doc(monitoring={"sigmaa": 0.1}))
    assert e.key == "monitoring.sigmaa" and "unknown key" in e.message and "sigma" in e.message


def test_unknown_table_and_kind():
    e = error_of(doc(learnin={"alpha": 0.1}))
    assert e.key == "learnin" and "allowed" in e.message
    d = doc()
    d["experiment"]["kind"] = "simulat"
    e = error_of(d)
    assert e.key == "experiment.kind" and "'simulate'" in e.message and "'simulat'" in e.message


def test_missing_experiment_table():
    e = error_of(doc(experiment=None))
    assert e.key == "experiment" and "kind" in e.message


def test_value_out_of_range_in_one_cell_names_the_sweep_path_cell_range_and_value():
    e = error_of(doc(sweep={"run.delta": [0.9, 1.5]}))
    assert e.key == "sweep.run.delta"
    # the second cell, counted from 1 as everywhere users see cells
    assert "cell 2 (run.delta = 1.5)" in e.message and "(0, 1)" in e.message and "1.5" in e.message


def test_out_of_range_in_the_file_itself_is_reported_plainly():
    d = doc(sweep={"monitoring.perception_error": [0.0, 0.01]})
    d["run"]["delta"] = 2.0
    e = error_of(d)
    assert e.key == "run.delta" and "2.0" in e.message


def test_a_value_the_sweep_replaces_must_be_valid_too():
    # the whole file is validated, not only the cells: a bad value under a sweep of the same path is
    # named as the file's own; leaving it out is fine
    d = doc(sweep={"run.delta": [0.9, 0.95]})
    d["run"]["delta"] = 1.5
    e = error_of(d)
    assert e.key == "run.delta" and "1.5" in e.message and "[sweep] replaces" in e.message
    d["run"].pop("delta")
    assert experiment_from_dict(d).n_cells == 2


@pytest.mark.parametrize("path, fragment", [
    ("monitoring.sigmaa", "does not exist"),
    ("strategies.2.length", "does not exist"),
    ("strategies.1.lenght", "does not exist"),
    ("nothere.x", "does not exist"),
    ("run.delta.x", "does not exist"),
])
def test_sweep_path_that_does_not_exist(path, fragment):
    e = error_of(doc(sweep={path: [1, 2]}))
    assert e.key == f"sweep.{path}" and fragment in e.message


def test_a_swept_value_that_the_table_around_it_refuses_is_named_as_such():
    """The path exists (the line-up has a first entry with seats); the value does not fit the market."""
    e = error_of(doc(sweep={"strategies.1.seats": [3, 4]}))
    assert e.key == "sweep.strategies.1.seats" and "does not exist" not in e.message
    assert e.message.startswith("cell 2 (strategies.1.seats = 4): strategies: ") and "4 seats" in e.message
    # a plain value the sweep would have to make a table of: that path does not exist
    e = error_of(doc(sweep={"monitoring.sigma.x": [1, 2]}))
    assert e.key == "sweep.monitoring.sigma.x" and e.message.startswith("does not exist: monitoring.sigma is a value")


def test_sweep_specs_refused():
    assert error_of(doc(sweep={"run.delta": 0.9})).key == "sweep.run.delta"
    assert error_of(doc(sweep={"run.delta": []})).key == "sweep.run.delta"
    assert error_of(doc(sweep={"run.delta": {"start": 0.5, "stop": 0.9}})).key == "sweep.run.delta"
    assert error_of(doc(sweep={"run.delta": {"start": 0.5, "stop": 0.9, "num": 3, "stpe": 1}})).key == \
        "sweep.run.delta.stpe"
    assert error_of(doc(sweep={"run.delta": {"start": -1, "stop": 0.9, "num": 3, "log": True}})).key == \
        "sweep.run.delta.start"
    assert error_of(doc(sweep={"run.delta": [0.8, 0.8]})).key == "sweep.run.delta"
    assert error_of(doc(sweep={"mode": "zip", "run.delta": [0.8, 0.9], "run.seed": [1]})).key == "sweep.mode"
    assert error_of(doc(sweep={"mode": "grd", "run.delta": [0.8]})).key == "sweep.mode"
    assert error_of(doc(sweep={"run.delta": [0.8], "zip": [["run.delta", "run.seed"]]})).key == "sweep.zip[1]"


def test_the_range_parser_is_shared_by_other_tables():
    """``parse_values``: the sweep's one range syntax, for any table that takes ranges (key given by the
    caller, a bound of its own on the number of values)."""
    key = "assess.sensitivity.cost"
    assert parse_values([3, 1, 2], key) == ([3, 1, 2], ["3", "1", "2"], False)
    assert parse_values({"start": 1.0, "stop": 2.0, "num": 3}, key) == ([1.0, 1.5, 2.0], ["1.0", "1.5", "2.0"], False)
    vals, _labels, log = parse_values({"start": 0.01, "stop": 1.0, "num": 3, "log": True}, key)
    assert vals == [0.01, 0.1, 1.0] and log
    assert parse_values({"values": [0.5, 2.0], "labels": ["half", "double"]}, key)[1] == ["half", "double"]
    with pytest.raises(InputError) as e:
        parse_values({"start": 1, "stop": 5000, "step": 1}, key, max_values=1000)
    assert e.value.key == f"{key}.step" and "5000 values, more than 1000" in e.value.message
    with pytest.raises(InputError) as e:
        parse_values({"start": 1, "stop": 2, "nmu": 3}, key)
    # the wording of every unknown key of an experiment file (sim.core.tables.refuse_unknown)
    assert e.value.key == f"{key}.nmu" and e.value.message.startswith("unknown key; allowed: start, stop, num, step")
    with pytest.raises(InputError) as e:
        parse_values(0.5, key)
    assert e.value.key == key and "0.5" in e.value.message


def test_report_figures_validated_against_the_sweep_and_the_metrics():
    sw = {"run.delta": [0.8, 0.9], "monitoring.perception_error": [0.0, 0.01]}
    ok = {"figures": [{"type": "heatmap", "x": "run.delta", "y": "monitoring.perception_error",
                       "metric": "collusive_share", "threshold": "analytic.critical_delta"}]}
    e = experiment_from_dict(doc(sweep=sw, report=ok))
    assert e.report.figures[0].threshold == "analytic.critical_delta"
    bad = copy.deepcopy(ok)
    bad["figures"][0]["metric"] = "colusive_share"
    assert error_of(doc(sweep=sw, report=bad)).key == "report.figures[1].metric"
    bad = copy.deepcopy(ok)
    bad["figures"][0]["y"] = "run.seed"
    assert error_of(doc(sweep=sw, report=bad)).key == "report.figures[1].y"
    bad = {"figures": [{"type": "line", "x": "run.delta", "metric": "collusive_share"}]}
    err = error_of(doc(sweep=sw, report=bad))
    assert err.key == "report.figures[1]" and "monitoring.perception_error" in err.message
    fixed = {"figures": [{"type": "line", "x": "run.delta", "metric": "collusive_share",
                          "at": {"monitoring.perception_error": 0.01}}]}
    assert experiment_from_dict(doc(sweep=sw, report=fixed)).report.figures[0].fixed() == \
        {"monitoring.perception_error": "0.01"}
    fixed["figures"][0]["at"] = {"monitoring.perception_error": 0.5}
    assert error_of(doc(sweep=sw, report=fixed)).key == "report.figures[1].at.monitoring.perception_error"


def test_toml_syntax_error_names_the_line(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text('[experiment]\nname = "x"\nkind = "simulate"\n[market\ncost = 1\n')
    with pytest.raises(InputError) as info:
        load_experiment(p)
    assert "TOML syntax error" in str(info.value) and "line 4" in str(info.value)


def test_every_cell_is_validated_before_work():
    # the bad cell is the last one of 50
    vals = [round(0.5 + 0.01 * k, 2) for k in range(49)] + [0.0]
    e = error_of(doc(sweep={"run.delta": vals}))
    assert e.key == "sweep.run.delta" and "cell 50 " in e.message


def test_huge_sweeps_refused_before_expansion():
    e = error_of(doc(sweep={"run.seed": {"start": 0, "stop": 2_000_000, "step": 1}}))
    assert e.key.startswith("sweep") and "1000000" in e.message


# --------------------------------------------------------------------------------------------------
# shipped experiments and other kinds
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("path", sorted((ROOT / "experiments").glob("*.toml")), ids=lambda p: p.name)
def test_every_shipped_experiment_is_valid_and_says_what_it_shows(path):
    e = load_experiment(path)
    assert e.n_cells >= 1 and e.metric_names
    text = path.read_text()
    assert text.lstrip().startswith("#"), "a shipped experiment opens with a comment block saying what it shows"
    assert tomllib.loads(text)["experiment"]["kind"] == e.kind


def test_thresholds_and_learn_kinds_validate_their_own_tables():
    d = {"experiment": {"name": "x", "kind": "thresholds"},
         "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2},
         "thresholds": {"punishments": [2, 0]}}
    assert error_of(d).key == "thresholds.punishments[2]"
    d = {"experiment": {"name": "x", "kind": "learn"},
         "market": {"model": "bertrand", "demand": "logit", "quality": 2.0, "outside": 0.0, "mu": 0.25, "cost": 1.0,
                    "n_firms": 2},
         "learning": {"alpha": 1.5}}
    e = error_of(d)
    assert e.key == "learning.alpha" and "1.5" in e.message
    d["learning"] = {"alpha": 0.15}
    d["sweep"] = {"learning.m": [5, 1]}
    e = error_of(d)
    assert e.key == "sweep.learning.m" and "cell 2 " in e.message


def test_metric_names_of_a_simulation_are_finite_in_number_and_distinct():
    e = experiment_from_dict(doc(deviation={}))
    assert len(set(e.metric_names)) == len(e.metric_names)
    assert "deviation.gain" in e.metric_names and "analytic.critical_delta.grim" in e.metric_names
    assert not math.isnan(len(e.metric_names))


def test_given_actions_are_checked_against_the_market_before_work():
    d = {"experiment": {"name": "x", "kind": "thresholds"},
         "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2},
         "collusion": {"actions": [10.0]}}
    e = error_of(d)
    assert e.key == "collusion.actions" and "(2)" in e.message
