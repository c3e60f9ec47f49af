"""The same or overlapping firms in two markets (sim.simulation.multimarket): pooled punishments against separate ones.

Source of the economics: Bernheim and Whinston (1990), "Multimarket contact and collusive behavior", RAND 21(1):
firms in contact in several markets can punish a deviation in one market in all of them. Checks:

* the compiled kernel against its plain-Python twin, bit for bit (same seed, same path);
* a deviation in market 1 in period 0 is followed by competition in market 2 in period 1 under pooled punishment,
  and by collusion there under separate punishments (deterministic);
* with implementation errors in both markets, pooling makes market 2's collusion end after errors of either market,
  so its share of collusive periods falls. Grim trigger in each market with error probability e per firm and market
  starts a war at the first error among the firms' draws: separately market 2 survives t periods with probability
  (1 - e)^(2t), pooled (1 - e)^(4t) (two firms, two markets); the expected collusive shares over T periods are the
  means of these survival curves (a geometric sum), checked within 3 standard errors across replications (a normal
  statistic leaves +-3 SE with probability 0.27 %).
"""

import numpy as np
import pytest

import strategies as S
from sim import InputError, LinearDemand, Market
from sim.models.monitoring import Monitoring
from sim.simulation.engine import prepare_game
from sim.simulation.multimarket import collusive_shares, simulate_markets
from sim.simulation.multimarket_twin import reference_markets

COURNOT = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=2)
BERTRAND = Market(LinearDemand(60.0, 1.0), cost=[5.0, 8.0], n_firms=2, model="bertrand")
# symmetric costs: each firm's error undercuts the agreement (with costs 5 and 8 the low-cost firm already sells
# everything at the agreement, so its "deviation" is the agreed price and its errors go unseen)
SYMMETRIC = Market(LinearDemand(60.0, 1.0), cost=6.0, n_firms=2, model="bertrand")
FIELDS = ("profit", "disc", "collusive", "path_actions", "path_state", "path_collude")


@pytest.mark.parametrize("pooled", [True, False])
def test_kernel_equals_twin(pooled):
    mon = Monitoring(perception_error=0.02, implementation_error=0.05)
    games = [prepare_game(COURNOT, [S.FinitePunishment(length=2), S.GrimTrigger()], mon),
             prepare_game(BERTRAND, [S.ForgivingTitForTat(forgiveness=0.3), S.Opportunist(probability=0.1)], mon)]
    kw = dict(periods=30, replications=6, delta=0.9, seed=4, key=(1,), pooled=pooled, paths=3)
    a, b = simulate_markets(games, **kw), reference_markets(games, **kw)
    for f in FIELDS:
        assert np.array_equal(getattr(a, f), getattr(b, f), equal_nan=True), f


@pytest.mark.parametrize("pooled, collusive_in_market_2", [(True, 0), (False, 1)])
def test_a_deviation_in_market_1_is_punished_in_market_2_only_when_pooled(pooled, collusive_in_market_2):
    """Firm 1 cheats once, in period 0 of market 1; everyone else plays grim trigger."""
    games = [prepare_game(COURNOT, [S.Opportunist(probability=1.0, start=0), S.GrimTrigger()]),
             prepare_game(BERTRAND, [S.GrimTrigger(), S.GrimTrigger()])]
    run = simulate_markets(games, periods=5, replications=1, delta=0.9, seed=1, pooled=pooled, paths=1)
    c = run.path_collude[0]
    assert c[0].tolist() == [0, 1]  # the deviation period: market 1 not collusive, market 2 collusive
    assert c[1, 0] == 0 and c[1, 1] == collusive_in_market_2
    assert np.all(c[1:, 1] == collusive_in_market_2)
    # the competition in market 2 is its static Nash (Bertrand with costs 5 and 8: firm 1 prices just below 8)
    if pooled:
        np.testing.assert_allclose(run.path_actions[0, 1, 1], games[1].levels.profiles["nash"])


def test_pooling_lowers_the_collusive_share_of_market_2_under_errors():
    e, T = 0.02, 40
    mon = Monitoring(implementation_error=e)
    games = [prepare_game(COURNOT, [S.GrimTrigger()] * 2, mon), prepare_game(SYMMETRIC, [S.GrimTrigger()] * 2, mon)]
    kw = dict(periods=T, replications=2000, delta=0.9, seed=12)
    pooled = collusive_shares(simulate_markets(games, pooled=True, **kw), T)[1]
    separate = collusive_shares(simulate_markets(games, pooled=False, **kw), T)[1]
    # market 2 colludes in period t (from 0) when no error has occurred in periods 0..t among the draws that end it
    t = np.arange(T)
    expect_sep = float(np.mean((1 - e) ** (2 * (t + 1))))
    expect_pool = float(np.mean((1 - e) ** (2 * (t + 1)) * (1 - e) ** (2 * t)))
    assert abs(separate.value - expect_sep) <= 3 * separate.se, (separate, expect_sep)
    assert abs(pooled.value - expect_pool) <= 3 * pooled.se, (pooled, expect_pool)
    assert pooled.high < separate.low


def test_markets_must_share_the_same_firms():
    three = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
    games = [prepare_game(COURNOT, [S.GrimTrigger()] * 2), prepare_game(three, [S.GrimTrigger()] * 3)]
    with pytest.raises(InputError) as err:
        simulate_markets(games, periods=5, replications=1, delta=0.9, seed=1)
    assert err.value.key == "markets[2]"


TRIOPOLY = Market(LinearDemand(90.0, 1.0), cost=[10.0, 12.0, 14.0], n_firms=3)


@pytest.mark.parametrize("ids", [[[0, 1], [1, 2]], [[0, 1], [2, 0, 1]]])
@pytest.mark.parametrize("pooled", [True, False])
def test_kernel_equals_twin_with_overlapping_firms(ids, pooled):
    mon = Monitoring(perception_error=0.03, implementation_error=0.04)
    second = SYMMETRIC if len(ids[1]) == 2 else TRIOPOLY
    games = [prepare_game(COURNOT, [S.FinitePunishment(length=2), S.GrimTrigger()], mon),
             prepare_game(second, [S.GrimTrigger()] * len(ids[1]), mon)]
    kw = dict(periods=30, replications=6, delta=0.9, seed=8, key=(2,), pooled=pooled, paths=4, firm_ids=ids)
    a, b = simulate_markets(games, **kw), reference_markets(games, **kw)
    for f in FIELDS:
        assert np.array_equal(getattr(a, f), getattr(b, f), equal_nan=True), f


def test_with_overlapping_firms_a_deviation_travels_through_the_shared_firm():
    """Firms A and B meet in market 1, B and C in market 2. A cheats once in market 1 (period 0). Pooled: B, which
    saw it, competes in market 2 from period 1, and C, seeing B's static Nash price, from period 2; separate: market
    2 keeps colluding."""
    ids = [[0, 1], [1, 2]]
    games = [prepare_game(COURNOT, [S.Opportunist(probability=1.0, start=0), S.GrimTrigger()]),
             prepare_game(SYMMETRIC, [S.GrimTrigger(), S.GrimTrigger()])]
    pooled = simulate_markets(games, periods=4, replications=1, delta=0.9, seed=1, paths=1, firm_ids=ids)
    grim_punish = 1  # grim trigger's second state
    assert pooled.path_collude[0, :, 1].tolist() == [1, 0, 0, 0]
    assert pooled.path_state[0, 1, 1].tolist() == [grim_punish, 0]  # period 1: B punishes, C not yet
    assert pooled.path_state[0, 2, 1].tolist() == [grim_punish, grim_punish]
    separate = simulate_markets(games, periods=4, replications=1, delta=0.9, seed=1, paths=1, firm_ids=ids,
                                pooled=False)
    assert separate.path_collude[0, :, 1].tolist() == [1, 1, 1, 1]


def test_firm_lists_must_number_each_seat_once():
    games = [prepare_game(COURNOT, [S.GrimTrigger()] * 2), prepare_game(SYMMETRIC, [S.GrimTrigger()] * 2)]
    with pytest.raises(InputError) as err:
        simulate_markets(games, periods=5, replications=1, delta=0.9, seed=1, firm_ids=[[0, 1], [2, 2]])
    assert err.value.key == "markets[2].firms"
