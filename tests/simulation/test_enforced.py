"""A simulated cartel facing an authority (``[enforcement]`` in the simulate kind, sim.simulation.enforced).

Checks against outside results:

* Wald's identity (Wald, 1944, "On cumulative sums of random variables", Annals of Mathematical Statistics 15(3)):
  each collusive period exposed to the authority is convicted with probability q independently of the past, and
  the number of exposed periods N is a stopping time bounded by the horizon, so E[convictions] = q E[N]: the
  convictions per collusive period estimate q.
* Elementary probability (geometric waiting time, e.g. Feller, 1968, "An Introduction to Probability Theory and Its
  Applications", vol. 1, ch. XIII): a cartel that colludes in every one of H periods is convicted within the horizon
  with probability 1 - (1 - q)^H and colludes on average (1 - (1 - q)^H) / q periods.

Tolerance of the fixed-seed statistical checks: 3 standard errors. A normal statistic leaves +-3 SE with probability
0.27 %, so a correct implementation fails at a fresh seed about once in 370 draws, while a wrong rate (e.g. q read
as 2q, or draws spent in periods of competition) shows up as tens of standard errors at these sizes.
"""

import json

import pytest

from sim.core.errors import InputError
from sim.core.stats import mean_estimate
from sim.runner.single import run_single
from sim.simulation.analysis import SimulateResult
from sim.simulation.engine import run_game
from sim.simulation.events import simulate_detections_many
from sim.theory.enforcement import Enforcement

BASE = {
    "experiment": {"kind": "simulate", "name": "harrowmere-enforced"},
    "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": 10.0, "n_firms": 2},
    "strategies": [{"strategy": "grim_trigger", "seats": 2}],
    "run": {"periods": 40, "replications": 3000, "delta": 0.8, "seed": 11},
}


def _doc(enforcement=None, **run):
    d = json.loads(json.dumps(BASE))
    d["run"].update(run)
    if enforcement is not None:
        d["enforcement"] = enforcement
    return d


def _run(doc, threads=1):
    return run_single(doc, threads=threads).result


def test_convictions_per_collusive_period_estimate_the_conviction_rate():
    # trembles break collusion at random, so the exposed periods differ across replications (Wald's identity)
    doc = _doc({"detection": 0.04, "fine": 100.0})
    doc["monitoring"] = {"implementation_error": 0.02}
    e = _run(doc).enforcement
    r = e.convictions_per_collusive_period
    assert abs(r.value - 0.04) <= 3 * r.se, (r.value, r.se)
    assert e.collusive_share.value < _run(_doc(**{})).simulation.metrics["collusive_share"].value


def test_geometric_conviction_time_without_noise():
    H, q = 40, 0.05
    e = _run(_doc({"detection": q, "fine": 100.0}, periods=H)).enforcement
    p = 1 - (1 - q) ** H
    assert abs(e.detected_share.value - p) <= 3 * e.detected_share.se
    # share of periods in collusion: E[min(K, H)] / H with K geometric
    expected_share = p / q / H
    assert abs(e.collusive_share.value - expected_share) <= 3 * e.collusive_share.se


def test_leniency_and_proof_set_the_conviction_rate():
    # an investigation convicts with probability proof unless the firms report (leniency below proof): then surely
    silent = _run(_doc({"detection": 0.1, "fine": 50.0, "proof": 0.5})).enforcement
    report = _run(_doc({"detection": 0.1, "fine": 50.0, "proof": 0.5, "leniency": 0.2})).enforcement
    assert silent.conviction_rate == pytest.approx(0.05) and report.conviction_rate == pytest.approx(0.1)
    # a conviction without a report costs the whole fine (Motta and Polo, 2003); a report costs the reduced fine
    assert silent.fine_per_conviction.tolist() == pytest.approx([50.0, 50.0])
    assert report.fine_per_conviction.tolist() == pytest.approx([10.0, 10.0])


def test_zero_detection_leaves_the_simulation_unchanged_byte_for_byte():
    doc = _doc(**{"paths": 2})
    doc["monitoring"] = {"perception_error": 0.03}
    plain = run_single(doc)
    enforced = run_single({**doc, "enforcement": {"detection": 0.0, "fine": 500.0}})
    assert json.dumps(enforced.result.simulation.to_dict()) == json.dumps(plain.result.simulation.to_dict())
    # every metric of the plain cell is there with the same float
    assert {k: enforced.cell.metrics[k] for k in plain.cell.metrics} == plain.cell.metrics
    e = enforced.result.enforcement
    assert e.detections.value == 0.0 and e.collusive_share.value == e.plain_collusive_share
    # profits net of fines are the line-up's own profit sums, estimate for estimate
    cfg, run = enforced.config, enforced.config["run"]
    raw = run_game(cfg["game"], run["periods"], run["replications"], run["delta"], run["seed"], (0,))
    for i, est in enumerate(e.net_profit):
        assert est.to_dict() == mean_estimate(raw.profit_sum[:, i]).to_dict()
        assert e.net_discounted_profit[i].to_dict() == mean_estimate(raw.disc[:, i]).to_dict()


def test_fines_paid_are_the_fine_times_the_convictions():
    # a power of two keeps fine x count and its mean free of rounding, so the equality is exact
    e = _run(_doc({"detection": 0.03, "fine": 256.0})).enforcement
    for f in e.fines:
        assert f.value == 256.0 * e.detections.value
    assert all(d.value < f.value for d, f in zip(e.discounted_fines, e.fines))


def test_resumed_collusion_matches_the_compiled_detection_draws():
    # grim trigger without noise colludes in every period, so competition for T periods after each conviction and
    # then a fresh start is the world of the compiled detection kernel (sim.simulation.events): the same stream,
    # one uniform per collusive period; its per-replication counts must come out identical
    H, T, q = 60, 5, 0.06
    one = run_single(_doc({"detection": q, "fine": 64.0, "after_detection": T}, periods=H, replications=400))
    e = one.result.enforcement
    draws = simulate_detections_many(one.config["stage_profits"], Enforcement(q, 64.0, after_detection=T), H, 400,
                                     BASE["run"]["seed"], (0,))
    assert e.detections.value == draws.convictions.mean()
    assert e.collusive_share.value == pytest.approx(draws.collusion_share, rel=1e-12)
    assert e.fines[0].value == 64.0 * e.detections.value
    assert e.detections.value > 1.0  # several convictions per replication: collusion did resume


def test_same_numbers_with_one_and_two_threads():
    doc = _doc({"detection": 0.05, "fine": 100.0}, replications=500)
    assert json.dumps(_run(doc, 1).to_dict()) == json.dumps(_run(doc, 2).to_dict())


def test_result_round_trips_through_json():
    r = _run(_doc({"detection": 0.05, "fine": 100.0, "fine_basis": "gain"}, replications=200))
    doc = r.to_dict()
    assert SimulateResult.from_dict(json.loads(json.dumps(doc, allow_nan=False))).to_dict() == doc


@pytest.mark.parametrize("table, extra, key", [
    ({"detection": 1.5}, {}, "enforcement.detection"),
    ({"detection": 0.1, "fine": -1.0}, {}, "enforcement.fine"),
    ({"detection": 0.1, "after_detection": 4}, {"monitoring": {"perception_error": 0.01}},
     "enforcement.after_detection"),
    ({"detection": 0.1, "after_detection": 4}, {"run": {**BASE["run"], "horizon": "random"}},
     "enforcement.after_detection"),
    ({"detection": 0.1, "deviator_exposed": True}, {}, "enforcement.deviator_exposed"),
    ({"detection": 0.1}, {"monitoring": {"sigma": 0.1}}, "enforcement"),
    ({"detection": 0.1, "fines": 2.0}, {}, "enforcement.fines"),
])
def test_refused_input_names_the_key(table, extra, key):
    with pytest.raises(InputError) as info:
        run_single({**_doc(table), **extra})
    assert info.value.key == key
