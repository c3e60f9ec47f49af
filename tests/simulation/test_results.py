"""The simulation's result as plain data: a JSON round trip that keeps every stored number, nan included."""

import json
import math

import numpy as np
import pytest

import strategies as S
from sim import LinearDemand, Market
from sim.core.stats import Estimate, kaplan_meier
from sim.models.monitoring import Monitoring
from sim.simulation.engine import simulate
from sim.simulation.results import SimulationResult

DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)


def _through_json(doc: dict) -> dict:
    # allow_nan=False: the document must be strict JSON (nan stored as None)
    return json.loads(json.dumps(doc, allow_nan=False))


def _same_estimate(a: Estimate, b: Estimate) -> None:
    for f in ("value", "se", "low", "high"):
        x, y = getattr(a, f), getattr(b, f)
        assert (math.isnan(x) and math.isnan(y)) or x == y, f
    assert (a.n, a.method, a.note) == (b.n, b.method, b.note)


@pytest.fixture(scope="module")
def noisy():
    """Trembles, a random horizon and recorded paths: some metrics are nan, paths hold nan after the end."""
    return simulate(DUOPOLY, [S.FinitePunishment(length=2)] * 2, Monitoring(implementation_error=0.05), periods=60,
                    replications=30, delta=0.9, seed=3, horizon="random", continuation=0.9, paths=3, progress=False)


def test_estimate_round_trip_keeps_nan():
    e = Estimate(1.5, math.nan, math.nan, math.nan, 7, "kaplan-meier", "at least")
    d = e.to_dict()
    assert d["se"] is None and d["low"] is None and d["high"] is None
    _same_estimate(Estimate.from_dict(_through_json(d)), e)


@pytest.mark.parametrize("per_replication", [False, True])
def test_result_round_trips_through_json(noisy, per_replication):
    d = noisy.to_dict(per_replication=per_replication)
    back = SimulationResult.from_dict(_through_json(d))
    assert back.to_dict(per_replication=per_replication) == d
    for k, e in noisy.metrics.items():
        _same_estimate(back.metrics[k], e)
    for k, es in noisy.firm_metrics.items():
        for a, b in zip(back.firm_metrics[k], es, strict=True):
            _same_estimate(a, b)
    # the horizon (at most 60 periods) is short enough for every curve to be stored whole
    np.testing.assert_array_equal(back.collusive_by_period, noisy.collusive_by_period)
    for name in ("spells", "wars", "breakdown", "punishments"):
        a, b = getattr(back, name), getattr(noisy, name)
        for f in ("lengths", "survival", "se", "low", "high", "at_risk", "ended", "censored"):
            np.testing.assert_array_equal(getattr(a, f), getattr(b, f), err_msg=f"{name}.{f}")
    for k, v in noisy.paths.items():
        np.testing.assert_array_equal(np.asarray(back.paths[k]), np.asarray(v), err_msg=k)
    assert np.isnan(back.paths["market_price"]).any()  # periods after a replication's end
    if per_replication:
        np.testing.assert_array_equal(back.profits, noisy.profits)
        np.testing.assert_array_equal(back.periods, noisy.periods)
        assert all(np.array_equal(back.counts[k], v) for k, v in noisy.counts.items())
    else:
        assert back.profits is None and back.n_reps == noisy.n_reps == 30


def test_long_runs_store_thinned_curves_that_round_trip():
    """2,000 periods without noise: one spell of 2,000 periods per replication. The document keeps the
    share colluding at 1,000 periods and the spell curve at 200 lengths; the totals of the survival counts
    and the curve at the kept lengths are those of the full curve."""
    res = simulate(DUOPOLY, [S.GrimTrigger()] * 2, periods=2000, replications=3, delta=0.9, seed=1, progress=False)
    d = res.to_dict()
    assert len(d["collusive_by_period"]["period"]) == 1000 and d["collusive_by_period"]["period"][-1] == 2000
    sv = d["survival"]["spells"]
    # a spell cut off by the horizon after 2,000 periods is censored at 1,999 (see summarize)
    assert len(sv["lengths"]) == 200 and sv["lengths"][-1] == 1999
    assert sum(sv["censored"]) == int(res.spells.censored.sum()) == 3
    back = SimulationResult.from_dict(_through_json(d))
    assert back.to_dict() == d
    kept = np.asarray(sv["lengths"]) - 1
    np.testing.assert_array_equal(back.spells.survival, res.spells.survival[kept])
    assert np.isnan(back.collusive_by_period).sum() == 1000  # the periods the document does not hold


def test_thinned_curve_groups_the_counts():
    """Kaplan and Meier (1958): the product-limit curve at a length depends only on the counts up to it, so
    the curve kept at some lengths is the full curve there; the grouped counts keep their totals."""
    rng = np.random.default_rng(0)
    ended = np.concatenate([[0], rng.integers(0, 5, 500)])
    censored = np.concatenate([[0], rng.integers(0, 2, 500)])
    full = kaplan_meier(ended, censored)
    thin = full.thinned(50)
    assert thin.lengths.shape == (50,) and thin.lengths[0] == 1 and thin.lengths[-1] == 500
    np.testing.assert_array_equal(thin.survival, full.survival[thin.lengths - 1])
    np.testing.assert_array_equal(thin.at_risk, full.at_risk[thin.lengths - 1])
    assert thin.ended.sum() == full.ended.sum() and thin.censored.sum() == full.censored.sum()
    # the counts between two kept lengths go to the later one
    assert thin.ended[1] == full.ended[1:thin.lengths[1]].sum()
    assert thin.thinned(50) is thin
