"""The ``contact_simulation`` kind (sim.runner.analyses.contact_simulation): the result's round trip, the report of a
stored run equal to the report of the same cell run in memory, the same bytes for one and two workers, the shipped
experiment against the survival formula, and one-line errors.

Source of the formula (Bernheim and Whinston, 1990, "Multimarket contact and collusive behavior", RAND 21(1), for
the pooled punishment; the arithmetic is ours): grim trigger in each of two markets, two firms, an implementation
error with probability e per firm, market and period. Separately a market colludes in period t (from 0) when none of
its 2 (t + 1) draws so far erred; pooled it also needs the other market's 2 t draws before period t clean. The
expected share over T periods is the mean of these survival probabilities; checked within 3 standard errors (a
normal statistic leaves +-3 SE with probability 0.27 %).
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np

from sim.cli import main
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single
from sim.simulation.multimarket import ContactPlay

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = ROOT / "experiments" / "contact-simulation.toml"


def _small(replications=200) -> str:
    return SHIPPED.read_text().replace("replications = 2000", f"replications = {replications}")


def test_result_round_trips_and_the_stored_report_is_the_in_memory_one(tmp_path, capsys):
    one = run_single(tomllib.loads(_small()))
    doc = one.result.to_dict()
    assert ContactPlay.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc
    f = tmp_path / "contact.toml"
    f.write_text(_small())
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
        assert renderer_for("contact_simulation").console(stored) == renderer_for("contact_simulation").console(
            one.result)
        assert rf.rows()[0].metrics["contact.pooled_share[1]"] == one.result.pooled[0].value
    assert (tmp_path / "run" / "report" / "figures" / "contact-collusive-shares.png").is_file()


def test_one_and_two_workers_give_the_same_bytes(tmp_path):
    text = _small(60) + '\n[sweep]\n"monitoring.implementation_error" = [0.0, 0.02]\n'
    f = tmp_path / "sweep.toml"
    f.write_text(text)
    a = run_experiment(f, tmp_path / "one", workers=1, progress=False)
    b = run_experiment(f, tmp_path / "two", workers=2, progress=False)
    assert a.ok == b.ok == 2
    for name in ("results.csv", "results.parquet"):
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes(), name


def test_shipped_experiment_matches_the_survival_formula():
    doc = tomllib.loads(SHIPPED.read_text())
    e, T = doc["monitoring"]["implementation_error"], doc["run"]["periods"]
    res = run_single(doc).result
    t = np.arange(T)
    separate = float(np.mean((1 - e) ** (2 * (t + 1))))
    pooled = float(np.mean((1 - e) ** (4 * t + 2)))
    for k in range(2):
        assert abs(res.separate[k].value - separate) <= 3 * res.separate[k].se, (k, res.separate[k], separate)
        assert abs(res.pooled[k].value - pooled) <= 3 * res.pooled[k].se, (k, res.pooled[k], pooled)
        assert res.difference[k].high < 0.0


def test_markets_with_other_firms_are_refused_in_one_line(tmp_path, capsys):
    f = tmp_path / "bad.toml"
    f.write_text(_small().replace('cost = 10.0\nn_firms = 2', 'cost = 10.0\nn_firms = 3'))
    assert main(["run", str(f), "--out", str(tmp_path / "run")]) == 2
    cap = capsys.readouterr()
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("supergame run: error: markets[2].n_firms:"), cap.err
    assert not (tmp_path / "run").exists()


OVERLAP = """
[experiment]
name = "three-quarries-two-markets"
kind = "contact_simulation"
[[markets]]
name = "north"
model = "cournot"
demand = "linear"
intercept = 100.0
cost = 10.0
n_firms = 2
firms = [1, 2]
[[markets]]
name = "south"
model = "cournot"
demand = "linear"
intercept = 80.0
cost = [10.0, 12.0, 11.0]
n_firms = 3
firms = [2, 3, 1]
[[strategies]]
strategy = "grim_trigger"
seats = "all"
[monitoring]
implementation_error = 0.02
[run]
periods = 30
replications = 100
delta = 0.9
seed = 5
"""


def test_markets_with_overlapping_firms_run_and_round_trip(tmp_path, capsys):
    res = run_single(tomllib.loads(OVERLAP)).result
    assert res.market_firms == [[1, 2], [2, 3, 1]]
    doc = res.to_dict()
    assert ContactPlay.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc
    # pooling adds the other market's errors to what ends collusion in each market
    assert all(d.high < 0 for d in res.difference)
    assert "south: firms 2, 3, 1" in renderer_for("contact_simulation").console(res)


def test_firm_lists_are_given_for_every_market_or_none(tmp_path, capsys):
    for old, new, key in (("firms = [2, 3, 1]", "firms = [2, 2, 1]", "markets[2].firms"),
                          ("firms = [2, 3, 1]\n", "", "markets[2].firms")):
        f = tmp_path / "bad.toml"
        f.write_text(OVERLAP.replace(old, new))
        assert main(["run", str(f), "--out", str(tmp_path / "run")]) == 2
        lines = capsys.readouterr().err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"supergame run: error: {key}:"), lines
