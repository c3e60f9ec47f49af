"""Simulate cells whose line-up colludes on a state-contingent path (``demand_states.collusive_path``): the same
bytes for one and two worker processes, and the shipped experiment against Rotemberg and Saloner (1986).

Source of the check on the shipped file: Rotemberg and Saloner (1986), "A supergame-theoretic model of price wars
during booms", AER 76(3). Homogeneous Bertrand duopoly, unit cost c, demand a_s - p in state s, i.i.d. states with
probabilities w_s, grim trigger: cheating in state s gains x_s / 2 of the agreed joint profit x_s and loses
delta / (1 - delta) E[x] / 2, the same in every state, so x_s <= delta / (1 - delta) E[x]. Where only the state
with the highest demand H binds, x_H = delta sum_{s != H} w_s P_s / (1 - delta - delta w_H) with the monopoly
profits P_s = (a_s - c)^2 / 4, and its price solves (p - c)(a_H - p) = x_H on the lower branch.
"""

from __future__ import annotations

import math
import textwrap
import tomllib
from pathlib import Path

import numpy as np

from sim.cli import main
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single

ROOT = Path(__file__).resolve().parents[2]

SWEEP = textwrap.dedent("""
    [experiment]
    name = "quillmoor-sweep"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 2
    [monitoring]
    implementation_error = 0.03
    [[strategies]]
    strategy = "finite_punishment"
    length = 2
    seats = 2
    [run]
    periods = 60
    replications = 40
    delta = 0.8
    seed = 9
    [demand_states]
    kind = "markov"
    transition = [[0.7, 0.3], [0.4, 0.6]]
    parameter = "intercept"
    values = [80.0, 130.0]
    collusive_path = "agreement"
    [sweep]
    "run.delta" = [0.6, 0.8]
    "monitoring.implementation_error" = [0.0, 0.03]
    """)


def test_one_and_two_workers_give_the_same_bytes(tmp_path):
    exp = tmp_path / "states.toml"
    exp.write_text(SWEEP)
    one = run_experiment(exp, tmp_path / "one", workers=1, progress=False)
    two = run_experiment(exp, tmp_path / "two", workers=2, progress=False)
    assert one.ok == two.ok == 4
    for f in ("results.csv", "arrays.json", "results.parquet"):
        assert (tmp_path / "one" / f).read_bytes() == (tmp_path / "two" / f).read_bytes(), f
    res = open_run(tmp_path / "one").result(3)
    # implementation errors break collusion in both states: a share strictly between 0 and 1
    assert 0.0 < float(np.min(res.states.contingent.collusive_share)) < 1.0


def test_shipped_experiment_plays_the_rotemberg_saloner_prices():
    path = ROOT / "experiments" / "price-wars-in-booms.toml"
    doc = tomllib.loads(path.read_text())
    ds, c, delta = doc["demand_states"], doc["market"]["cost"], doc["run"]["delta"]
    w, a = np.array(ds["probabilities"]), np.array(ds["values"])
    x_h = delta * float(np.sum(w[:2] * (a[:2] - c) ** 2 / 4.0)) / (1.0 - delta - delta * w[2])
    p_h = ((a[2] + c) - math.sqrt((a[2] - c) ** 2 - 4.0 * x_h)) / 2.0
    one = run_single(doc)
    m = one.cell.metrics
    expected = [(a[0] + c) / 2.0, (a[1] + c) / 2.0, p_h]
    for k in range(3):
        assert math.isclose(m[f"state_play.price[{k + 1}]"], expected[k], rel_tol=1e-7), k
    assert m["state_play.price[3]"] < m["state_play.price[1]"]
    # full collusion in every state needs P_H / 2 <= delta / (1 - delta) E[P] / 2: delta >= P_H / (P_H + E[P])
    P = (a - c) ** 2 / 4.0
    assert math.isclose(m["state_play.full_collusion_delta"], P[2] / (P[2] + float(w @ P)), rel_tol=1e-9)
    assert m["state_play.full_collusion_delta"] > delta


def test_command_prints_and_plots_what_the_run_stores(tmp_path, capsys):
    path = ROOT / "experiments" / "price-wars-in-booms.toml"
    assert main(["simulate", str(path), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "full-collusion price" in printed
    assert main(["run", str(path), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        assert renderer_for("simulate").console(rf.result(0)) == printed.rstrip("\n")
    name = "prices-by-state.png"
    assert (tmp_path / "plots" / name).read_bytes() == (tmp_path / "run" / "report" / "figures" / name).read_bytes()


def _rich_start(path_kind: str) -> dict:
    """The shipped market with i.i.d. states written as a chain whose first period is the rich week."""
    doc = tomllib.loads((ROOT / "experiments" / "price-wars-in-booms.toml").read_text())
    w = doc["demand_states"].pop("probabilities")
    doc["demand_states"].update(kind="markov", transition=[w, w, w], initial=[0.0, 0.0, 1.0],
                                collusive_path=path_kind)
    doc["deviation"] = {"firm": 1}
    doc["run"]["replications"] = 400
    return doc


def test_a_one_shot_deviation_in_the_rich_week_pays_under_full_collusion_only():
    """The deviation check in the demand states (Rotemberg and Saloner, 1986): firm 1 undercuts in period 0, a rich
    week. With full collusion in every state at delta = 0.6 (below the threshold P_H / (P_H + E[P]) = 0.677) it gains
    P_H / 2 today and loses delta / (1 - delta) E[P] / 2 from next week on, so the gain is
    P_H / 2 - delta / (1 - delta) E[P] / 2 > 0; on the best path the rich week's constraint binds and the gain is 0
    (the horizon of 200 weeks truncates the loss by delta^200, below 1e-40). The loss depends on the weeks drawn
    after the deviation, so the paired gain is checked within 3 standard errors across replications (a normal
    statistic leaves +-3 SE with probability 0.27 %); the two expectations, 798.75 and 0, lie about 16 SE apart."""
    doc = tomllib.loads((ROOT / "experiments" / "price-wars-in-booms.toml").read_text())
    w, a = np.array(doc["demand_states"]["probabilities"]), np.array(doc["demand_states"]["values"])
    c, delta = doc["market"]["cost"], doc["run"]["delta"]
    P = (a - c) ** 2 / 4.0
    full = run_single(_rich_start("agreement")).result.deviation
    expected = P[2] / 2 - delta / (1 - delta) * float(w @ P) / 2
    assert expected > 0 and abs(full.gain.value - expected) <= 3 * full.gain.se, (full.gain, expected)
    assert full.pays and full.gain.low > 0
    best = run_single(_rich_start("best")).result.deviation
    assert abs(best.gain.value) <= 3 * best.gain.se, best.gain
    # the deviator takes the whole joint profit of the rich week, P_H or the capped x_H, and earns static Nash
    # (zero) after: its discounted profit is that one week's (relative 1e-6: the undercut by the price step)
    x_h = delta * float(np.sum(w[:2] * P[:2])) / (1.0 - delta - delta * w[2])
    assert math.isclose(full.deviate_value, P[2], rel_tol=1e-6)
    assert math.isclose(best.deviate_value, x_h, rel_tol=1e-6)
    assert math.isnan(best.analytic_gain)
