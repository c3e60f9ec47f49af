"""Repeated price competition with capacity constraints in the simulation engine: the kernel against its
plain-Python twin, independence from the work split, the draws of the mixed equilibrium, and grim trigger
around the Compte-Jenny-Rey threshold."""

import copy

import numpy as np
import pytest

from sim.core.errors import InputError
from sim.runner.analyses.simulate_capacity import prepare_capacity_game
from sim.runner.single import run_single
from sim.simulation.engine import RawRun, run_game
from sim.simulation.twin import reference_run

RAW_FIELDS = [f for f in RawRun.__dataclass_fields__ if f != "n_paths"]

# Two kilns, capacities 60 and 40, buyers who need 80 at any price up to 10, no cost: a mixed static equilibrium
DUOPOLY = {
    "experiment": {"kind": "simulate", "name": "two-kilns"},
    "market": {"model": "capacity", "demand": "inelastic", "capacity": [60.0, 40.0], "market_size": 80.0,
               "reservation_price": 10.0, "cost": 0.0},
    "collusion": {"agreement": "proportional"},
    "strategies": [{"strategy": "grim_trigger", "seats": 2}],
    "run": {"periods": 60, "replications": 400, "delta": 0.65, "seed": 20261203},
    "deviation": {"firm": "binding"},
}


def _same(a: RawRun, b: RawRun):
    for f in RAW_FIELDS:
        x, y = getattr(a, f), getattr(b, f)
        assert x.shape == y.shape, f
        np.testing.assert_array_equal(x, y, err_msg=f)


def _game(doc, strategies, monitoring=None):
    d = copy.deepcopy(doc)
    d["strategies"] = strategies
    if monitoring:
        d["monitoring"] = monitoring
    return prepare_capacity_game(d, {})["game"]


@pytest.mark.parametrize("demand, rationing, capacity", [("inelastic", "efficient", [60.0, 40.0, 30.0]),
                                                         ("linear", "proportional", [30.0, 20.0])])
def test_kernel_equals_plain_python_twin(demand, rationing, capacity):
    """Same seed, same path: every array (paths included) equals the plain-Python reference, with trembles,
    perception errors, a demand shock and, in the mixed case, the compete phase's draws."""
    doc = copy.deepcopy(DUOPOLY)
    doc["market"].update(demand=demand, rationing=rationing, capacity=capacity)
    game = _game(doc, [{"strategy": "grim_trigger"}, {"strategy": "finite_punishment", "length": 2},
                       {"strategy": "always_compete"}][:len(capacity)],
                 {"sigma": 0.1, "perception_error": 0.05, "implementation_error": 0.05})
    assert game.arrays.mixed.shape[1] > 0
    kw = dict(periods=30, replications=5, delta=0.9, seed=3, key=(2,), paths=3)
    _same(run_game(game, **kw), reference_run(game, **kw))


def test_identical_for_any_threads_and_split():
    """The draws come from each replication's own stream: the numbers do not depend on batches or chunks."""
    game = _game(DUOPOLY, [{"strategy": "always_compete", "seats": 2}], {"implementation_error": 0.02})
    kw = dict(periods=50, replications=37, delta=0.9, seed=9, key=(1,))
    a = run_game(game, **kw, batch=37, n_chunks=1)
    b = run_game(game, **kw, batch=10, n_chunks=4)
    _same(a, b)


def test_compete_phase_earns_the_mixed_equilibrium_profits():
    """Firms that always compete draw their prices from the Bertrand-Edgeworth equilibrium each period; their mean
    profits match its expected profits, 400 and 800/3 (Deneckere and Kovenock, 1996; the larger firm's payoff is
    its residual-monopoly profit 10 * (80 - 40)). Tolerance: four standard errors across replications plus 0.3 %
    for the tabulated distribution."""
    game = _game(DUOPOLY, [{"strategy": "always_compete", "seats": 2}])
    raw = run_game(game, periods=100, replications=300, delta=0.9, seed=4)
    mean = raw.profit_sum / 100.0
    se = mean.std(axis=0, ddof=1) / np.sqrt(mean.shape[0])
    target = np.array([400.0, 800.0 / 3.0])
    assert np.all(np.abs(mean.mean(axis=0) - target) <= 4 * se + 3e-3 * target)


@pytest.mark.parametrize("delta, pays", [(0.65, False), (0.55, True)])
def test_grim_trigger_around_the_compte_jenny_rey_threshold(delta, pays):
    """Compte, Jenny and Rey (2002), "Capacity constraints, mergers and collusion", European Economic Review
    46(1): with inelastic demand M up to a reservation price v, capacities k_1 >= ... >= k_n summing to K, rivals of
    the largest firm unable to serve the market alone (K - k_1 < M), no cost and shares proportional to
    capacities, firm i earns alpha_i v M colluding (alpha_i = k_i / K), v min(k_i, M) by undercutting, and in the
    static equilibrium p_low k_i with p_low = v (M - K + k_1) / k_1 (the largest firm's residual-monopoly profit
    spread over its capacity). Grim trigger holds firm i if delta >= (pi_D - pi_C) / (pi_D - pi_N)
    = v k_i (1 - M / K) / (k_i (v - p_low)) = (1 - M / K) k_1 / (K - M) = k_1 / K, the same for every firm.
    Here k = (60, 40), M = 80, v = 10: the threshold is 60 / 100 = 0.6.

    Above it (0.65) the line-up colludes in every period and the binding firm's best one-shot deviation loses;
    below it (0.55) the deviation pays: the closed-form gain over 60 periods is 120 - 80 sum_t delta^t, -28.6 at
    0.65 and +22.2 at 0.55; the simulated gain (the deviator's punishment draws are random) must have the same sign
    with its 95 % interval excluding zero (400 replications; its standard error is about 5)."""
    doc = copy.deepcopy(DUOPOLY)
    doc["run"]["delta"] = delta
    cell = run_single(doc).cell
    m = cell.metrics
    assert m["analytic.critical_delta.grim"] == pytest.approx(0.6, abs=1e-6)
    assert m["collusive_share"] == 1.0 and m["broken_down"] == 0.0
    assert m["analytic.deviation.gain"] == pytest.approx(-28.57 if not pays else 22.22, abs=0.05)
    assert m["deviation.pays"] == float(pays)
    if pays:
        assert m["deviation.gain.low"] > 0
    else:
        assert m["deviation.gain.high"] < 0


def test_stick_and_carrot_is_refused_naming_the_key():
    with pytest.raises(InputError) as exc:
        _game(DUOPOLY, [{"strategy": "stick_and_carrot", "seats": 2}])
    assert exc.value.key.startswith("strategies")
