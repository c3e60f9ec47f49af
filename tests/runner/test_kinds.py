"""Experiment kinds: the built-in adapters against the components' public APIs and closed forms."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

import sim
from sim.runner.experiment import experiment_from_dict
from sim.runner.kinds import CellContext, CellResult, Kind, clean_metrics, get_kind, load_plugin_file, register_kind

TARNVALE = {"model": "cournot", "demand": "linear", "intercept": 100.0, "slope": 1.0, "cost": [10.0, 10.0, 14.0]}


def sim_doc(**over):
    d = {"experiment": {"name": "t", "kind": "simulate"}, "market": dict(TARNVALE),
         "collusion": {"agreement": "proportional"},
         "strategies": [{"strategy": "grim_trigger", "seats": 3}],
         "run": {"periods": 60, "replications": 40, "delta": 0.9, "seed": 11}}
    d.update(copy.deepcopy(over))
    return d


def run_cell(d, index=0):
    e = experiment_from_dict(d)
    kind = e.kind_spec()
    cell = e.cell(index)
    cfg = kind.prepare(cell.doc)
    return kind.run(cfg, CellContext(index=cell.index)), cfg, e


def test_simulate_cell_equals_the_engine_entry_with_the_cell_key():
    d = sim_doc(monitoring={"perception_error": 0.01})
    d["sweep"] = {"run.delta": [0.8, 0.9]}
    res, _cfg, _e = run_cell(d, index=1)
    direct = sim.simulate(sim.market_from_dict(TARNVALE), [{"strategy": "grim_trigger", "seats": 3}],
                          {"perception_error": 0.01}, periods=60, replications=40, delta=0.9, seed=11,
                          agreement="proportional", key=(1,), progress=False)
    for k, est in direct.metrics.items():
        assert res.metrics[k] == est.value or (math.isnan(est.value) and math.isnan(res.metrics[k])), k
        assert res.metrics[f"{k}.high"] == est.high or math.isnan(est.high)
    assert res.metrics["discounted_profit.firm3"] == direct.firm_metrics["discounted_profit"][2].value
    # another cell number is another stream family: different numbers
    other = sim.simulate(sim.market_from_dict(TARNVALE), [{"strategy": "grim_trigger", "seats": 3}],
                         {"perception_error": 0.01}, periods=60, replications=40, delta=0.9, seed=11,
                         agreement="proportional", key=(0,), progress=False)
    assert other.metrics["first_breakdown"].value != res.metrics["first_breakdown"]


@pytest.mark.parametrize("strategy, T", [("grim_trigger", None), ("finite_punishment", 3)])
@pytest.mark.parametrize("delta", [0.5, 0.6, 0.75])
def test_deviation_gain_without_noise_equals_the_closed_form(strategy, T, delta):
    """Friedman (1971): a one-shot deviation gains pi_d - pi_c now and loses delta^t (pi_c - pi_N) in each
    of the punishment periods (all remaining periods for grim trigger) -- summed over the fixed horizon."""
    entry = {"strategy": strategy, "seats": 3, **({"length": T} if T else {})}
    H = 60
    res, _cfg, _ = run_cell(sim_doc(strategies=[entry], deviation={"firm": 1},
                                   run={"periods": H, "replications": 5, "delta": delta, "seed": 3}))
    st = sim.stage_game(sim.market_from_dict(TARNVALE), "proportional")
    c, d, n = st.collusive.firm_profits[0], st.deviation_profits[0], st.nash.firm_profits[0]
    last = H - 1 if T is None else min(T, H - 1)
    expected = (d - c) - sum(delta**t for t in range(1, last + 1)) * (c - n)
    assert res.metrics["deviation.gain"] == pytest.approx(expected, rel=1e-9, abs=1e-9)
    assert res.metrics["analytic.deviation.gain"] == pytest.approx(expected, rel=1e-12, abs=1e-9)
    # the sign flips at the analytic critical discount factor (grim 0.5778, T=3: 0.6560 here)
    crit = res.metrics["analytic.critical_delta"]
    assert (res.metrics["deviation.gain"] > 0) == (delta < crit)


def test_binding_firm_deviates_by_default():
    # firm 3 (cost 14) is less tempted under grim trigger: firms 1 and 2 bind, the first is chosen
    res, cfg, _ = run_cell(sim_doc(deviation={}))
    assert res.metrics["deviation.firm"] == 1
    gt = sim.grim_threshold(*(np.asarray(cfg["game"].levels.firm_profits[k]) for k in ("collusive", "deviation",
                                                                                           "nash")))
    assert int(np.argmax(gt)) == 0 and gt[2] < gt[0]


def test_grim_threshold_of_the_simulation_matches_the_n_firm_formula():
    """Symmetric linear Cournot with n firms, joint profit and Nash reversion: (n+1)^2 / (n^2 + 6n + 1)
    (the textbook closed form, e.g. 9/17 for a duopoly; from memory)."""
    for n in (2, 3, 4):
        d = sim_doc(market={"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": n},
                    collusion={"agreement": "joint"}, strategies=[{"strategy": "grim_trigger", "seats": n}])
        res, _, _ = run_cell(d)
        assert res.metrics["analytic.critical_delta"] == pytest.approx((n + 1) ** 2 / (n * n + 6 * n + 1), rel=1e-9)
        assert res.metrics["analytic.clears"] == float(0.9 >= (n + 1) ** 2 / (n * n + 6 * n + 1))


def test_thresholds_kind_matches_the_closed_form_and_names_every_metric():
    d = {"experiment": {"name": "x", "kind": "thresholds"},
         "market": {"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 2},
         "thresholds": {"punishments": [2, 5], "deltas": [0.4]},
         "sweep": {"market.n_firms": [2, 3, 5]}}
    e = experiment_from_dict(d)
    kind = e.kind_spec()
    for cell in e.cells():
        n = cell.values["market.n_firms"]
        cfg = kind.prepare(cell.doc)
        res = kind.run(cfg, CellContext(cell.index))
        assert res.metrics["threshold.grim"] == pytest.approx((n + 1) ** 2 / (n * n + 6 * n + 1), rel=1e-9)
        assert set(res.metrics) == set(kind.metric_names(cfg))
        # longer punishments need less patience; stick and carrot needs the least
        assert res.metrics["threshold.finite[2]"] < res.metrics["threshold.finite[1]"]
        assert res.metrics["threshold.stick_carrot"] < res.metrics["threshold.grim"]


def test_trigger_price_cell_reports_the_green_porter_prediction():
    d = sim_doc(market={"model": "cournot", "demand": "linear", "intercept": 100.0, "cost": 10.0, "n_firms": 3},
                collusion={"agreement": "joint"}, monitoring={"signal": "price", "sigma": 0.1},
                strategies=[{"strategy": "trigger_price", "trigger": 50.0, "length": 2, "seats": 3}],
                run={"periods": 400, "replications": 200, "delta": 0.95, "seed": 2})
    res, _, _ = run_cell(d)
    m = res.metrics
    beta = m["analytic.war_probability"]
    # Green and Porter (1984): long-run war share beta T / (1 + beta T)
    assert m["analytic.war_share_long_run"] == pytest.approx(2 * beta / (1 + 2 * beta), rel=1e-12)
    assert m["analytic.spell_length"] == pytest.approx(1 / beta, rel=1e-12)
    # simulated war share within 4 standard errors of the finite-horizon prediction (fixed seed; 4 se so
    # that the check is not a coin toss at this small size)
    assert abs(m["war_share"] - m["analytic.war_share"]) < 4 * m["war_share.se"]


@pytest.mark.parametrize("deviation", [False, True])
def test_simulate_reports_exactly_its_declared_metrics(deviation):
    d = sim_doc(strategies=[{"strategy": "finite_punishment", "length": 2, "seats": 2},
                            {"strategy": "grim_trigger"}], **({"deviation": {"firm": 3}} if deviation else {}))
    res, cfg, _ = run_cell(d)
    assert set(res.metrics) == set(get_kind("simulate").metric_names(cfg))


def test_learn_cell_equals_the_learning_entry_with_the_cell_number():
    d = {"experiment": {"name": "l", "kind": "learn"},
         "market": {"model": "bertrand", "demand": "logit", "quality": 2.0, "outside": 0.0, "mu": 0.25, "cost": 1.0,
                    "n_firms": 2},
         "learning": {"m": 5, "beta": 2e-4, "convergence": 500, "max_periods": 200_000},
         "run": {"sessions": 3, "seed": 4},
         "sweep": {"learning.alpha": [0.1, 0.2]}}
    res, cfg, _ = run_cell(d, index=1)
    assert set(res.metrics) == set(get_kind("learn").metric_names(cfg))
    from strategies.qlearning import QLearner

    direct = sim.learn(sim.market_from_dict(d["market"]), QLearner(alpha=0.2, m=5, beta=2e-4), sessions=3, seed=4,
                       convergence=500, max_periods=200_000, workers=1, progress=False, cell=1)
    s = direct.summary()
    assert res.metrics["profit_gain"] == s["profit_gain"]["mean"] or math.isnan(s["profit_gain"]["mean"])
    assert res.metrics["converged"] == s["converged"]["share"]
    assert res.metrics["limit_price.firm2"] == s["limit_prices"][1]["mean"]


def test_metrics_must_be_numbers():
    out = clean_metrics({"a": True, "b": None, "c": float("inf"), "d": 2})
    assert out["a"] == 1.0 and math.isnan(out["b"]) and math.isnan(out["c"]) and out["d"] == 2.0
    with pytest.raises(TypeError):
        clean_metrics({"a": "high"})


def test_a_kind_registers_with_one_call_and_refuses_a_name_clash():
    k = Kind("unit-test-kind", ("params",), prepare=lambda doc: doc, run=lambda cfg, ctx: CellResult({"x": 1.0}),
             seed_key=None)
    register_kind(k)
    assert get_kind("unit-test-kind") is k
    with pytest.raises(ValueError):
        register_kind(Kind("unit-test-kind", (), prepare=dict, run=lambda c, x: None))


def test_plugin_file_registers_a_kind(tmp_path):
    p = tmp_path / "plugin_kind_for_test.py"
    p.write_text("from sim.runner.kinds import Kind, CellResult, register_kind\n"
                 "register_kind(Kind('plugin-kind', ('params',), prepare=lambda d: d.get('params', {}),\n"
                 "              run=lambda c, ctx: CellResult({'twice': 2.0 * c.get('x', 0)}), seed_key=None))\n")
    info = load_plugin_file(p)
    assert info["sha256"] and get_kind("plugin-kind").run({"x": 3}, CellContext()).metrics == {"twice": 6.0}
    bad = tmp_path / "bad_plugin_for_test.py"
    bad.write_text("raise RuntimeError('boom')\n")
    with pytest.raises(sim.InputError) as e:
        load_plugin_file(bad)
    assert e.value.key == "plugins" and "boom" in e.value.message


def test_simulate_reports_the_punishment_length_with_its_analytic_value():
    """T-period Nash reversion played by every firm with conduct seen exactly: every punishment phase
    lasts T periods (the scheme's definition, Friedman 1971), whatever the trembles that start it."""
    d = sim_doc(monitoring={"implementation_error": 0.02},
                strategies=[{"strategy": "finite_punishment", "length": 3, "seats": 3}],
                run={"periods": 200, "replications": 40, "delta": 0.9, "seed": 11})
    res, cfg, _ = run_cell(d)
    assert "punishment_length" in get_kind("simulate").metric_names(cfg)
    direct = sim.simulate(sim.market_from_dict(TARNVALE), d["strategies"], d["monitoring"], periods=200,
                          replications=40, delta=0.9, seed=11, agreement="proportional", key=(0,), progress=False)
    assert res.metrics["punishment_length"] == direct.punishment_length.value
    assert res.metrics["punishment_length.high"] == direct.punishment_length.high
    assert res.metrics["analytic.punishment_length"] == 3.0
    assert res.metrics["punishment_length"] == pytest.approx(3.0, abs=1e-12)
    # grim trigger has no fixed punishment length: no analytic value
    res, _, _ = run_cell(sim_doc(monitoring={"implementation_error": 0.02}))
    assert math.isnan(res.metrics["analytic.punishment_length"])


@pytest.mark.parametrize("after, grim", [("collude", False), ("nash", True)])
def test_an_opportunist_that_never_punishes_plays_no_grim_trigger(after, grim):
    d = sim_doc(strategies=[{"strategy": "opportunist", "probability": 0.1, "after": after, "seats": 3}])
    e = experiment_from_dict(d)
    assert ("analytic.critical_delta.grim" in e.metric_names) is grim
    res, _, _ = run_cell(d)
    assert set(res.metrics) == set(e.metric_names)
    if grim:
        # Nash reversion forever after any deviation: the grim-trigger threshold of the agreement
        st = sim.stage_game(sim.market_from_dict(TARNVALE), "proportional")
        c, dv, n = (np.asarray(x) for x in (st.collusive.firm_profits, st.deviation_profits, st.nash.firm_profits))
        assert res.metrics["analytic.critical_delta.grim"] == pytest.approx(float(np.max((dv - c) / (dv - n))),
                                                                            rel=1e-9)


def test_arrays_may_hold_a_json_document():
    """A cell's arrays may hold a document for its kind's report (a dict): plain JSON data, numpy values
    as Python numbers, nan and inf as None, strings and nesting kept; what JSON cannot hold fails in the
    cell. Number arrays stay lists of floats with nan."""
    from sim.runner.kinds import clean_arrays

    out = clean_arrays({"doc": {"a": np.float64(0.5), "b": [math.nan, math.inf, None, np.int64(2)],
                                "c": {"s": "text", "t": (True, np.bool_(False))}}, "x": [1, math.nan]})
    assert out["doc"] == {"a": 0.5, "b": [None, None, None, 2], "c": {"s": "text", "t": [True, False]}}
    assert type(out["doc"]["b"][3]) is int and out["x"][0] == 1.0 and math.isnan(out["x"][1])
    with pytest.raises(TypeError):
        clean_arrays({"doc": {"market": object()}})
