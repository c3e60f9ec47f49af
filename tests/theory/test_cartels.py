"""Partial cartels (sim.theory.cartels).

Sources:
* Salant, Switzer and Reynolds (1983), "Losses from horizontal merger: the effects of an exogenous
  change in industry structure on Cournot-Nash equilibrium", Quarterly Journal of Economics 98(2):
  in linear Cournot with n symmetric firms, m firms that coordinate (merge) against the others each
  earn (a - c)^2 / (m (n - m + 2)^2 b) instead of (a - c)^2 / ((n + 1)^2 b); they gain only if
  (n + 1)^2 >= m (n - m + 2)^2 -- two of three firms lose (from memory; the formula is the Cournot
  equilibrium with n - m + 1 players, worked out in the test).
* The grim-trigger threshold of n symmetric linear Cournot firms colluding on the joint-profit
  output, (n + 1)^2 / (n^2 + 6 n + 1) (e.g. Motta, 2004, "Competition Policy", ch. 4; from memory,
  re-derived in the test: pi_C = (a-c)^2 / (4 n b), pi_D = ((n+1)(a-c))^2 / (16 n^2 b), pi_N =
  (a-c)^2 / ((n+1)^2 b)).
* d'Aspremont, Jacquemin, Gabszewicz and Weymark (1983), "On the stability of collusive price
  leadership", Canadian Journal of Economics 16(1): internal and external stability, applied by hand
  below.
* Bos and Harrington (2010), RAND Journal of Economics 41(1): the umbrella outcome of a partial
  cartel with capacity constraints, checked in closed form.
"""

import json

import numpy as np
import pytest

from sim.antitrust.merger import Merger, merge
from sim.core.errors import InputError
from sim.models.capacity_pricing import CapacityPricing
from sim.models.demand import DifferentiatedDemand, LinearDemand, LogitDemand
from sim.models.market import Market
from sim.theory.cartels import CartelTable, CartelWorry, cartel_table, merger_cartel_worry
from sim.theory.thresholds import critical_discount_factors


def cournot(n, a=10.0, b=1.0, c=1.0):
    return Market(LinearDemand(a, b), cost=c, n_firms=n)


def test_two_of_three_cournot_firms_gain_nothing():
    """Salant, Switzer and Reynolds (1983): a = 10, b = 1, c = 1. Before: each earns 81/16. Two firms
    that coordinate face one outsider: two players earn 81/9 each; the pair splits 81/9, 81/18 each,
    less than 81/16; the outsider earns 81/9."""
    t = cartel_table(cournot(3))
    r = t.row([0, 1])
    np.testing.assert_allclose(t.profits[r], [81 / 18, 81 / 18, 81 / 9], rtol=1e-12)
    np.testing.assert_allclose(t.gains[r], [81 / 18 - 81 / 16, 81 / 18 - 81 / 16, 81 / 9 - 81 / 16], rtol=1e-12)
    assert np.all(t.gains[r, :2] < 0)
    # a coalition that loses is not held by any discount factor below one
    assert np.isnan(t.market_threshold[r])


@pytest.mark.parametrize("n", [3, 4, 5, 6, 8])
def test_salant_switzer_reynolds_condition(n):
    """Members gain iff (n + 1)^2 >= m (n - m + 2)^2 (equality: no gain, n = 5, m = 4)."""
    t = cartel_table(cournot(n))
    for m in range(2, n + 1):
        r = t.row(range(m))
        per_member = 81.0 / (m * (n - m + 2) ** 2)
        assert t.profits[r, 0] == pytest.approx(per_member, rel=1e-12)
        lhs, rhs = (n + 1) ** 2, m * (n - m + 2) ** 2
        if lhs > rhs:
            assert t.gains[r, 0] > 0
        elif lhs < rhs:
            assert t.gains[r, 0] < 0
        else:
            assert t.gains[r, 0] == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("n", [2, 3, 4, 6])
def test_grand_coalition_is_the_textbook_threshold(n):
    t = cartel_table(cournot(n))
    r = t.row(range(n))
    expected = (n + 1) ** 2 / (n**2 + 6 * n + 1)
    assert t.market_threshold[r] == pytest.approx(expected, rel=1e-12)
    # and the same number as the library's own threshold computation
    assert critical_discount_factors(cournot(n), punishments=()).grim.market == pytest.approx(expected, rel=1e-9)


def test_partial_cartel_threshold_by_hand():
    """Four symmetric firms, a cartel of two (a - c = 9, b = 1). Three players: each produces 9/4; the
    cartel's 9/4 is split 9/8 each. A member's collusive profit: P - c = 9/4, times 9/8 = 81/32. It
    deviates against Q_-i = 3 * 9/4 + 9/8 = 63/8: q = (9 - 63/8)/2 = 9/16, profit (9/16)^2 = 81/256.
    That is below 81/32: deviating does not pay, threshold 0 -- but the members lose relative to
    Nash (81/25 > 81/32), so no discount factor holds them: nan. With sharing the joint profit
    there is no difference (symmetric members)."""
    t = cartel_table(cournot(4))
    r = t.row([0, 1])
    assert t.profits[r, 0] == pytest.approx(81 / 32)
    assert t.nash[0] == pytest.approx(81 / 25)
    assert np.isnan(t.thresholds[r, 0])


def test_stability_by_hand():
    """Three symmetric Cournot firms. The grand coalition's threshold is 16/28 = 4/7; pairs lose
    against Nash (Salant, Switzer and Reynolds) and are never sustainable. At delta = 0.9 the grand
    coalition is sustainable; internally stable because a member that leaves faces a pair that is not
    sustainable and earns only its Nash profit 81/16 < 81/12; externally stable trivially. At
    delta = 0.5 < 4/7 nothing is sustainable."""
    t = cartel_table(cournot(3))
    high = t.stability(0.9)
    rows = high["rows"]
    grand = list(rows).index(t.row([0, 1, 2]))
    assert high["stable"][grand] and high["internal"][grand] and high["external"][grand]
    assert high["stable"].sum() == 1
    low = t.stability(0.5)
    assert not low["sustainable"].any()


def test_capacity_cartel_is_the_umbrella_outcome():
    """Bos and Harrington (2010): inelastic demand M = 80 up to v = 10, capacities (40, 30, 20, 5).
    The cartel {1, 2} prices at v above the fringe {3, 4}, which sells its 25 units just below; the
    cartel sells 80 - 25 = 55, shared 40 : 30. Fringe profits 10 * 20 and 10 * 5."""
    m = CapacityPricing([40.0, 30.0, 20.0, 5.0], reservation_price=10.0, market_size=80.0)
    t = cartel_table(m, cartels=[[0, 1]])
    r = t.row([0, 1])
    np.testing.assert_allclose(t.profits[r], [550 * 40 / 70, 550 * 30 / 70, 200.0, 50.0], rtol=1e-12)
    # a member deviates by undercutting everyone and selling its capacity at (just below) v
    np.testing.assert_allclose(t.deviation[r, :2], [400.0, 300.0], rtol=1e-12)


def test_logit_grand_coalition_matches_the_library():
    m = Market(LogitDemand([2.0, 2.2, 1.9], 0.0, 0.3), cost=[1.0, 1.1, 0.9], model="bertrand")
    t = cartel_table(m)
    expected = critical_discount_factors(m, punishments=()).grim.market
    assert t.market_threshold[t.row([0, 1, 2])] == pytest.approx(expected, rel=1e-8)
    # coordinating pairs raise their members' profits above Nash (prices are strategic complements)
    assert np.all(t.gains[t.row([0, 1]), :2] > 0)


def test_merger_worry_by_hand():
    """Four symmetric Cournot firms; firms 1 and 2 merge (no efficiency), leaving three symmetric
    firms. The grand coalition's threshold falls from 25/41 to 16/28. At delta = 0.59 it was not
    sustainable before and is stable after: that is the worry."""
    pre = cournot(4)
    res = merge(pre, Merger(firms=[1, 2]))
    worry = merger_cartel_worry(pre, res.post, res.firm_map, 0.59)
    assert worry.worry is not None
    assert sorted(worry.worry["counterpart"]) == ["Firm 1", "Firm 2", "Firm 3", "Firm 4"]
    assert worry.worry["threshold_before"] == pytest.approx(25 / 41)
    assert worry.worry["threshold_after"] == pytest.approx(16 / 28)
    back = CartelWorry.from_dict(json.loads(json.dumps(worry.to_dict())))
    assert back.to_dict() == worry.to_dict()


def test_table_round_trip_and_bad_input():
    t = cartel_table(Market(DifferentiatedDemand(10.0, 1.0, 0.5), cost=1.0, n_firms=3, model="bertrand"))
    back = CartelTable.from_dict(json.loads(json.dumps(t.to_dict())))
    np.testing.assert_array_equal(back.members, t.members)
    np.testing.assert_allclose(back.thresholds, t.thresholds, equal_nan=True)
    with pytest.raises(InputError) as err:
        cartel_table(cournot(3), sharing="equal")
    assert err.value.key == "cartels.sharing"
    with pytest.raises(InputError) as err:
        cartel_table(cournot(3), max_size=5)
    assert err.value.key == "cartels.max_size"
    with pytest.raises(InputError) as err:
        cartel_table(cournot(3), cartels=[[0, 7]])
    assert err.value.key == "cartels[1]"
    with pytest.raises(InputError) as err:
        cartel_table(Market(LinearDemand(10.0, 1.0), cost=1.0, n_firms=3, model="bertrand"))
    assert err.value.key == "market.demand"
    with pytest.raises(InputError) as err:
        merger_cartel_worry(cournot(3), cournot(2), [0, 0, 1], 1.5)
    assert err.value.key == "run.delta"


def test_proportional_sharing_splits_the_joint_profit():
    """Asymmetric linear Cournot (costs 1, 2, 3): the pair {1, 2} produces with firm 1 only; with
    proportional sharing both members get shares of the pair's profit in proportion to their Nash
    profits, and the shares add up to the joint profit."""
    m = Market(LinearDemand(10.0, 1.0), cost=[1.0, 2.0, 3.0])
    own = cartel_table(m, cartels=[[0, 1]], sharing="own")
    prop = cartel_table(m, cartels=[[0, 1]], sharing="proportional")
    r = own.row([0, 1])
    assert own.profits[r, 1] == 0.0
    assert prop.profits[r, :2].sum() == pytest.approx(own.profits[r, :2].sum())
    ratio = prop.profits[r, 0] / prop.profits[r, 1]
    assert ratio == pytest.approx(prop.nash[0] / prop.nash[1])
