"""The learn analysis: its result is plain data that survives JSON, and the flat metrics of a cell come from it."""

import json
import math

import numpy as np
import pytest

import sim
from sim.learning.analysis import LearnResult, LearnSpec, learn_analysis, learn_result
from sim.learning.session import learn
from sim.runner.analyses.learn import learn_arrays, learn_metrics
from strategies import ForgivingTitForTat
from strategies.qlearning import QLearner


def _market():
    return sim.Market(sim.LogitDemand(quality=2.0, outside=0.0, mu=0.25), cost=[1.0, 1.1], model="bertrand",
                      n_firms=2)


SETTINGS = {"sessions": 3, "seed": 5, "convergence": 2000, "response_periods": 4}


@pytest.fixture(scope="module")
def exact():
    return learn_analysis(LearnSpec(_market(), QLearner(m=4, beta=5e-4), dict(SETTINGS)), workers=2)


@pytest.fixture(scope="module")
def estimate():
    seats = [QLearner(m=4, beta=5e-4), ForgivingTitForTat(forgiveness=0.3)]
    return learn_analysis(LearnSpec(_market(), seats, {**SETTINGS, "limit_periods": 200}), workers=1)


@pytest.mark.parametrize("name", ["exact", "estimate"])
def test_the_result_round_trips_through_json(request, name):
    res = request.getfixturevalue(name)
    doc = json.loads(json.dumps(res.to_dict(), allow_nan=False))  # JSON proper: no nan, no infinity
    back = LearnResult.from_dict(doc)
    assert back.to_dict() == res.to_dict()
    # the result is plain data already: what a command holds is what a run folder gives back
    assert back.summary == res.summary and back.per_session == res.per_session
    assert np.array_equal(back.limit_actions, res.limit_actions)
    assert back.limit_exact == (name == "exact")


def test_the_result_holds_the_sessions_outcomes(exact):
    """The result keeps what the sessions found: per-session profit gains and limit actions, and the summary's
    statistics of them (the mean of the converged sessions' gains)."""
    r = learn(_market(), QLearner(m=4, beta=5e-4), workers=1, **SETTINGS)
    assert exact.per_session["profit_gain"] == r.profit_gain.tolist()
    assert np.array_equal(exact.limit_actions, r.limit_actions)
    sel = exact.selected
    assert exact.summary["profit_gain"]["mean"] == pytest.approx(np.mean(r.profit_gain[sel]), rel=1e-12)
    assert exact.settings["deviator"] == 1  # firms counted from 1, as in every output
    assert exact.n_firms == 2 and not exact.symmetric and not exact.quantity_setting


def test_undefined_values_are_stored_as_none_and_read_as_nan(estimate):
    """With an automaton that acts at random the return to the cycle is not defined: None in the result (JSON has
    no nan), nan in the cell's metrics."""
    assert estimate.summary["returned"]["mean"] is None
    m = learn_metrics(estimate)
    assert m["returned"] is None
    from sim.runner.kinds import clean_metrics

    assert math.isnan(clean_metrics(m)["returned"])


def test_metrics_and_arrays_are_read_from_the_result(exact):
    m = learn_metrics(exact)
    sm = exact.summary
    assert m["profit_gain"] == sm["profit_gain"]["mean"] and m["limit_price.firm2"] == sm["limit_prices"][1]["mean"]
    a = learn_arrays(exact)
    assert a["impulse.prices"] == sm["impulse_response"]["prices"]["mean"]
    assert len(a["impulse.prices"]) == SETTINGS["response_periods"] + 2
    over = sm["converged"]["count"] or sm["sessions"]  # the converged sessions, or all when none converged
    assert sum(a["profit_gain_histogram.counts"]) == over


def test_learn_result_of_a_learning_result_is_the_analysis(exact):
    r = learn(_market(), QLearner(m=4, beta=5e-4), workers=2, **SETTINGS)
    assert learn_result(r, _market()).to_dict() == exact.to_dict()
