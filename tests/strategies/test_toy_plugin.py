"""A strategy from a plugin file (tests/strategies/toy_strategy_plugin.py), loaded as a user's ``--plugin FILE``
is, named in experiment-file entries and played by the simulation kernel: its defining behaviour (collusion in
every other period, whatever the rivals do) against a hand computation.

Hand computation: linear Cournot duopoly, inverse demand P = a - b Q with a = 100, b = 1, marginal cost c = 10
(Cournot, 1838; the closed forms of the linear case, e.g. Tirole, 1988, "The Theory of Industrial
Organization", section 5.4, from memory): static Nash q = (a - c) / (3b) = 30 per firm, price 40, profit
(a - c)^2 / (9b) = 900; the joint-profit agreement splits the monopoly output (a - c) / (2b) = 45 equally,
q = 22.5 per firm, price 55, profit (a - c)^2 / (8b) = 1012.5.
"""

from pathlib import Path

import numpy as np
import pytest

from sim import InputError, LinearDemand, Market
from sim.runner.kinds import load_plugin_file
from sim.simulation.engine import simulate
from strategies.registry import STRATEGIES, known_names

PLUGIN = Path(__file__).with_name("toy_strategy_plugin.py")
DUOPOLY = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
Q_C, Q_N, P_C, P_N, PI_C, PI_N = 22.5, 30.0, 55.0, 40.0, 1012.5, 900.0


@pytest.fixture(scope="module")
def plugin():
    """Load the plugin file; the registry gets its old contents back afterwards, so that the shipped
    strategies' own tests see only the shipped strategies."""
    saved = dict(STRATEGIES)
    info = load_plugin_file(PLUGIN)
    yield info
    STRATEGIES.clear()
    STRATEGIES.update(saved)


def test_the_plugin_registers_its_strategy(plugin):
    assert plugin["sha256"] and "every_other_period" in known_names()
    assert STRATEGIES["every_other_period"].__module__ == "toy_strategy_plugin"


def test_two_firms_collude_in_every_other_period(plugin):
    H, delta = 11, 0.9
    res = simulate(DUOPOLY, [{"strategy": "every_other_period", "seats": 2}], periods=H, replications=2,
                   delta=delta, seed=5, paths=1, baseline=False, progress=False)
    actions = res.paths["actions"][0]
    np.testing.assert_allclose(actions[0::2], Q_C, rtol=1e-9)
    np.testing.assert_allclose(actions[1::2], Q_N, rtol=1e-9)
    np.testing.assert_allclose(res.paths["market_price"][0, 0::2], P_C, rtol=1e-9)
    np.testing.assert_allclose(res.paths["market_price"][0, 1::2], P_N, rtol=1e-9)
    # six colluding periods (t = 0, 2, ..., 10) and five competing ones
    np.testing.assert_allclose(res.profits, (6 * PI_C + 5 * PI_N) / H, rtol=1e-9)
    assert res.metrics["collusive_share"].value == pytest.approx(6 / H, rel=1e-12)
    # discounted: pi_C (1 + d^2 + ... + d^10) + pi_N (d + d^3 + ... + d^9), two geometric series
    d2 = delta * delta
    disc = PI_C * (1 - d2 ** 6) / (1 - d2) + PI_N * delta * (1 - d2 ** 5) / (1 - d2)
    np.testing.assert_allclose(res.discounted, disc, rtol=1e-9)
    # the rivals' conduct changes nothing: no cheating, no signal watched
    assert res.counts["cheats"].sum() == 0


def test_out_of_step_firms_never_collude_together(plugin):
    """One firm starts competing: each period one firm plays 22.5 and the other 30, price 100 - 52.5 = 47.5,
    profits 37.5 * 22.5 = 843.75 and 37.5 * 30 = 1125; over an even horizon each firm has each role half
    of the time."""
    lineup = [{"strategy": "every_other_period"}, {"strategy": "every_other_period", "first": "compete"}]
    res = simulate(DUOPOLY, lineup, periods=10, replications=1, delta=0.9, seed=5, paths=1, baseline=False,
                   progress=False)
    np.testing.assert_allclose(res.paths["market_price"][0], 47.5, rtol=1e-9)
    np.testing.assert_allclose(res.profits[0], (843.75 + 1125.0) / 2, rtol=1e-9)
    assert res.metrics["collusive_share"].value == 0.0


def test_a_bad_parameter_names_its_key_path(plugin):
    with pytest.raises(InputError) as exc:
        simulate(DUOPOLY, [{"strategy": "every_other_period", "first": "sometimes", "seats": 2}], periods=5,
                 replications=1, progress=False)
    assert exc.value.key == "strategies[1].first" and "sometimes" in exc.value.message
