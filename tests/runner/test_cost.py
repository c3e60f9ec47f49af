"""Cost checked before work: a cell that cannot fit in memory is refused at once, naming the setting; a run that
would take months needs to be allowed; check prints the estimates."""

from __future__ import annotations

import tomllib

import pytest

from sim.runner.cost import MAX_SECONDS, Cost, check_cell_cost
from sim.runner.experiment import load_experiment

BASE = """
[experiment]
name = "{name}"
kind = "simulate"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
cost = 10.0
n_firms = {n}
[[strategies]]
strategy = "grim_trigger"
seats = {n}
[run]
periods = {periods}
replications = {reps}
"""


@pytest.mark.parametrize("periods, reps, key", [(100_000_000, 50, "run.periods"),
                                                 (1_000, 1_000_000_000, "run.replications")])
def test_a_cell_too_large_for_memory_is_refused_before_anything_is_written(cli, write_experiment, tmp_path,
                                                                           monkeypatch, periods, reps, key):
    monkeypatch.chdir(tmp_path)
    f = write_experiment(BASE.format(name="big", n=2, periods=periods, reps=reps))
    for command in ("check", "run"):
        r = cli(command, f)
        assert r.code == 2 and r.err.count("\n") == 1
        assert f"error: {key}: a cell would need about" in r.err and "GiB of memory" in r.err
    assert not (tmp_path / "runs").exists()


def test_the_estimate_follows_the_arrays_a_cell_allocates():
    # the memory estimate is linear in periods and in replications: twice the periods, about twice the memory
    from sim.runner.analyses.simulate import KIND

    def cost(periods, reps):
        doc = tomllib.loads(BASE.format(name="x", n=3, periods=periods, reps=reps))
        return KIND.cost(KIND.prepare(doc))

    a, b, c = cost(10_000, 100), cost(20_000, 100), cost(10_000, 200)
    assert b.memory / a.memory == pytest.approx(2.0, rel=0.05) and c.memory > a.memory
    assert b.work == 2 * a.work == 2 * 10_000 * 100 * 3 and b.unit == "firm-periods"


def test_a_run_of_months_needs_to_be_allowed(cli, write_experiment, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    text = BASE.format(name="months", n=10, periods=1_000_000, reps=100_000) + \
        '\n[sweep]\n"run.seed" = { start = 1, stop = 100, step = 1 }\n'
    f = write_experiment(text)
    exp = load_experiment(f)
    assert exp.cost["seconds"] > MAX_SECONDS and exp.cost["work"] == 100 * 1_000_000 * 100_000 * 10
    r = cli("run", f)
    assert r.code == 2 and r.err.startswith("supergame run: error: --allow-long: the run is estimated at")
    assert not (tmp_path / "runs").exists()
    r = cli("check", f)
    assert r.code == 0 and "estimated cost: 1e+14 firm-periods" in r.out


def test_a_kind_without_a_cost_is_not_estimated_and_a_plugin_may_give_one():
    from sim.runner.kinds import Kind

    def prepare(doc):
        return doc

    bare = Kind("bare", (), prepare, lambda c, ctx: None)
    assert check_cell_cost(bare, {}) is None
    heavy = Kind("heavy", (), prepare, lambda c, ctx: None, cost=lambda c: Cost(1e15, 1.0, "cells", 1.0, "x.size"))
    with pytest.raises(Exception) as e:
        check_cell_cost(heavy, {}, available=1e9)
    assert e.value.key == "x.size"
