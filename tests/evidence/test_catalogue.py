"""Every number a reader can see has one entry in the evidence catalogue: every metric of every shipped experiment,
every swept parameter, and the labels of the figures and tables drawn from them."""

from __future__ import annotations

import glob
from pathlib import Path

import pytest

from sim.evidence.catalogue import ENTRIES, describe, describe_parameter, glossary
from sim.runner.experiment import load_experiment

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = sorted(glob.glob(str(ROOT / "experiments" / "*.toml")))


@pytest.mark.parametrize("path", SHIPPED, ids=[Path(p).stem for p in SHIPPED])
def test_every_metric_and_swept_parameter_of_a_shipped_experiment_has_an_entry(path):
    exp = load_experiment(path, check_cells=False)
    missing = []
    for m in exp.metric_names:
        try:
            d = describe(m)
        except KeyError:
            missing.append(m)
            continue
        assert d.label and "." not in d.label.split(" (")[0].replace("e.g.", ""), (m, d.label)
    for p in exp.parameters:
        try:
            describe_parameter(p.path)
        except KeyError:
            missing.append(p.path)
    assert not missing, "no catalogue entry: " + ", ".join(missing)


def test_qualifiers_are_read_off_the_stored_name():
    d = describe("threshold.grim.before.firm2.low", currency="EUR", period="month", firm_names=["A", "B"])
    assert d.label == ("lower bound of the 95 % interval of the critical discount factor, grim trigger (B; before the "
                       "merger)")
    assert describe("profit.nash.firm1", currency="EUR", period="month").unit == "EUR per month"
    assert describe("analytic.collusive_share").label == "analytic prediction of the share of collusive periods"
    assert describe("score.grim").label == "score (grim trigger)"
    assert describe("partial_gain.finite[2][1]").label.endswith("(item 2, 1)")
    assert describe_parameter("run.delta").axis == "discount factor delta"  # a pure number: no unit in brackets
    with pytest.raises(KeyError):
        describe("no_such_metric")


def test_every_entry_names_its_method_and_the_glossary_folds_bounds():
    assert all(e.label and e.definition and e.method for e in ENTRIES.values())
    rows = glossary(["collusive_share", "collusive_share.low", "collusive_share.high", "profit.nash.firm1"])
    assert [r[0] for r in rows] == ["collusive_share", "profit.nash.firm1"]
    assert "Wilson" in rows[0][5]
