"""One cell in memory (sim.runner.single): the code of a cell of supergame run, with the same numbers."""

import math

import pytest

from sim.core.errors import InputError
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single

DOC = {
    "experiment": {"kind": "thresholds", "name": "three-quarries"},
    "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": [10.0, 10.0, 14.0]},
    "collusion": {"agreement": "proportional"},
    "thresholds": {"punishments": [1, 3], "deltas": [0.5]},
}

TEXT = """
[experiment]
kind = "thresholds"
name = "three-quarries"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = [10.0, 10.0, 14.0]

[collusion]
agreement = "proportional"

[thresholds]
punishments = [1, 3]
deltas = [0.5]
"""


def _same(a: float, b: float) -> bool:
    return (math.isnan(a) and math.isnan(b)) or a == b


def test_a_cell_in_memory_gives_the_numbers_of_the_run_folder(tmp_path):
    one = run_single(DOC)
    p = tmp_path / "t.toml"
    p.write_text(TEXT)
    s = run_experiment(p, tmp_path / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        row = rf.rows()[0]
        stored = rf.result(0)
    assert set(one.cell.metrics) == set(row.metrics)
    assert all(_same(one.cell.metrics[k], row.metrics[k]) for k in row.metrics)
    # the stored result object is the one the command prints
    assert stored.to_dict() == one.result.to_dict()


def test_a_sweep_is_not_a_single_cell():
    doc = dict(DOC, sweep={"thresholds.deltas": [[0.4], [0.6]]})
    with pytest.raises(InputError) as err:
        run_single(doc)
    assert err.value.key == "sweep"
