"""Multimarket contact: pooled incentive constraints (Bernheim and Whinston, 1990, "Multimarket contact
and collusive behavior", RAND 21(1)), slack lending, the best allocation of collusion across markets and
the contact a merger adds.

With punishment in every shared market after a deviation in any, firm i keeps the agreement when
    sum_m [c_im / (1 - delta) - d_im] >= 0,    c = pi_C - pi_N, d = pi_D - pi_N,
i.e. delta >= 1 - sum_m c_im / sum_m d_im: the pooled threshold is a weighted combination of the
markets' own thresholds 1 - c_m / d_m (weights d_m), so it lies between them (derived from the grim
trigger condition of Friedman, 1971, summed over markets as Bernheim and Whinston do).
"""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sim import InputError, LinearDemand, Market
from sim.theory.contact_allocation import Allocation, ContactChange, best_allocation, merger_contact
from sim.theory.enforcement import Enforcement, enforcement_threshold
from sim.theory.equilibrium import stage_game
from sim.theory.multimarket import (
    ContactGame,
    ContactMarket,
    PooledThresholds,
    SlackReport,
    pooled_thresholds,
    slack_at,
)
from sim.theory.stage_profits import path_point
from sim.theory.thresholds import partial_collusion

BERTRAND = Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=2, model="bertrand")  # c = 8, d = 16
COURNOT = Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=2)  # c = 8/9, d = 17/9


def pair(*markets, firms=("Firm A", "Firm B"), **kw):
    return ContactGame(list(firms), [ContactMarket(m, list(firms), **kw) for m in markets])


def test_pooling_identical_markets_changes_nothing():
    """Bernheim and Whinston (1990), their first irrelevance result: with identical markets the sums
    scale both sides by the number of markets. Linear Cournot duopoly: 9/17 alone and pooled
    (Friedman, 1971; the closed form of the enforcement tests)."""
    p = pooled_thresholds(pair(COURNOT, COURNOT.clone()))
    assert p.market_thresholds == pytest.approx([9 / 17, 9 / 17], rel=1e-10)
    assert p.pooled == pytest.approx([9 / 17, 9 / 17], rel=1e-10)
    assert p.common == pytest.approx(p.highest_standalone, rel=1e-12)


def test_pooling_asymmetric_markets_lowers_the_higher_threshold():
    """Bertrand (threshold 1/2: c = 8, d = 16) pooled with Cournot (9/17: c = 8/9, d = 17/9):
    1 - (8 + 8/9) / (16 + 17/9) = 81/161, between the two and below the higher."""
    p = pooled_thresholds(pair(BERTRAND, COURNOT))
    assert p.market_thresholds == pytest.approx([0.5, 9 / 17], rel=1e-10)
    assert p.pooled == pytest.approx([81 / 161] * 2, rel=1e-10)
    assert 0.5 < p.common < 9 / 17 == pytest.approx(p.highest_standalone)
    back = PooledThresholds.from_dict(json.loads(json.dumps(p.to_dict())))
    assert np.allclose(back.standalone, p.standalone, equal_nan=True) and back.common == p.common


def test_reciprocal_cost_advantages_pool_into_a_lower_threshold():
    """Bernheim and Whinston (1990), firm asymmetries (from memory): Firm A is the low-cost firm in
    North, Firm B in South (Cournot, P = 100 - Q, costs 10 and 25 mirrored, quantities proportional to
    the static-Nash ones; Schmalensee, 1987). Alone each market is held back by its low-cost firm; pooled,
    each firm's constraint sums a market where it is strong with one where it is weak, and its
    threshold is 1 - sum_m c_m / sum_m d_m with the profits of sim's stage games (module docstring),
    below both standalone thresholds."""
    north = Market(LinearDemand(100.0, 1.0), cost=[10.0, 25.0])
    south = Market(LinearDemand(100.0, 1.0), cost=[25.0, 10.0])
    g = ContactGame(["Firm A", "Firm B"], [ContactMarket(north, ["Firm A", "Firm B"]),
                                           ContactMarket(south, ["Firm A", "Firm B"])], agreement="proportional")
    p = pooled_thresholds(g)
    stages = [stage_game(m, "proportional") for m in (north, south)]
    c = sum(s.collusive.firm_profits - s.nash.firm_profits for s in stages)
    d = sum(s.deviation_profits - s.nash.firm_profits for s in stages)
    assert p.pooled == pytest.approx(1 - c / d, rel=1e-10)
    assert p.common < p.market_thresholds.min()
    s = slack_at(g, 0.6)
    assert not s.alone.any() and s.together and s.lends.tolist() == [[False, True], [True, False]]


def test_overlapping_firms_only_pool_their_own_markets():
    """Firm C sells only in the three-firm Bertrand market (threshold 1 - 1/3): no contact elsewhere
    can help it, so the common threshold stays 2/3 while A and B pool the duopoly (1/2) with the
    three-firm market: 1 - (8 + 16/3) / (16 + 16) = 7/12 (Bertrand profits: Tirole, 1988, ch. 6)."""
    three = Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=3, model="bertrand")
    g = ContactGame(["A", "B", "C"], [ContactMarket(BERTRAND, ["A", "B"]), ContactMarket(three, ["B", "C", "A"])])
    p = pooled_thresholds(g)
    assert p.pooled == pytest.approx([7 / 12, 7 / 12, 2 / 3], rel=1e-10)
    assert p.common == pytest.approx(2 / 3, rel=1e-10) and p.binding_firm == 2
    assert np.isnan(p.standalone[2, 0]) and not p.presence[2, 0]
    assert g.contact().tolist() == [[2, 2, 1], [2, 2, 1], [1, 1, 1]]


def test_growth_per_market_enters_each_market_discount():
    """A market growing at rate g discounts its losses at delta (1 + g): firm i keeps the agreement when
    sum_m [c_m / (1 - delta (1 + g_m)) - d_m] >= 0. At the pooled threshold the sum is zero; a Bertrand
    duopoly growing at 10% alone has threshold (1/2) / 1.1 (the demand-state tests' growth rule)."""
    g = ContactGame(["A", "B"], [ContactMarket(BERTRAND, ["A", "B"], growth=0.1),
                                 ContactMarket(COURNOT, ["A", "B"], growth=-0.05)])
    p = pooled_thresholds(g)
    assert p.market_thresholds[0] == pytest.approx(0.5 / 1.1, rel=1e-10)
    assert p.market_thresholds[1] == pytest.approx((9 / 17) / 0.95, rel=1e-10)
    d = p.common
    total = 8 / (1 - 1.1 * d) - 16 + (8 / 9) / (1 - 0.95 * d) - 17 / 9
    assert total == pytest.approx(0.0, abs=1e-9)


def test_one_market_with_enforcement_is_the_enforcement_constraint():
    """With one market the pooled constraint is the constraint of sim.theory.enforcement, for the
    default convention and with leniency and an exposed deviator."""
    for enf in (Enforcement(detection=0.1, fine=3.0), Enforcement(detection=0.2, fine=2.0, proof=0.6, leniency=0.2,
                                                                  deviator_exposed=True)):
        p = pooled_thresholds(pair(COURNOT, enforcement=enf))
        ref = enforcement_threshold(COURNOT, enf)
        assert p.pooled == pytest.approx(ref, rel=1e-10) and p.standalone[:, 0] == pytest.approx(ref, rel=1e-10)


def test_a_conviction_in_one_market_ends_collusion_in_both():
    """The multimarket convention: any conviction ends collusion everywhere, so two identical markets
    each detected at rate rho end collusion at rate q = 1 - (1 - rho)^2 when pooled; summing the
    default constraint over both markets gives delta* = (d - c + rho F) / (d (1 - rho)^2), above the
    standalone (d - c + rho F) / (d (1 - rho)) -- pooling is not neutral under this convention."""
    rho, F = 0.1, 1.0
    enf = Enforcement(detection=rho, fine=F)
    p = pooled_thresholds(pair(BERTRAND, BERTRAND.clone(), enforcement=enf))
    assert p.market_thresholds == pytest.approx([(8 + rho * F) / (16 * (1 - rho))] * 2, rel=1e-10)
    assert p.pooled == pytest.approx([(8 + rho * F) / (16 * (1 - rho) ** 2)] * 2, rel=1e-10)


def test_slack_lending_between_the_thresholds():
    """At delta = 0.51 (between 81/161 and 9/17) the Bertrand market has slack c/(1 - delta) - d > 0,
    the Cournot market falls short, and pooled the firms sustain both: Bertrand lends to Cournot."""
    s = slack_at(pair(BERTRAND, COURNOT), 0.51)
    assert s.slack[:, 0] == pytest.approx([8 / 0.49 - 16] * 2, rel=1e-10)
    assert s.slack[:, 1] == pytest.approx([(8 / 9) / 0.49 - 17 / 9] * 2, rel=1e-10)
    assert s.alone.tolist() == [True, False] and s.together
    assert s.lends.tolist() == [[False, True], [False, False]]
    back = SlackReport.from_dict(json.loads(json.dumps(s.to_dict())))
    assert np.array_equal(back.lends, s.lends) and np.allclose(back.slack, s.slack)


def _brute_force_best(game, delta, n=41):
    """Grid search over the weights of two markets, each point's profits from sim's own path evaluation
    and the pooled constraint summed here (no enforcement, no growth)."""
    ws = np.linspace(0.0, 1.0, n)
    pts = [[path_point(stage_game(cm.market), w).profits for w in ws] for cm in game.markets]
    best = -math.inf
    for a in range(n):
        for b in range(n):
            p0, p1 = pts[0][a], pts[1][b]
            slack = sum((p.collusive - p.nash) / (1 - delta) - (p.deviation - p.nash) for p in (p0, p1))
            if np.all(slack >= -1e-12):
                best = max(best, (p0.collusive.sum() + p1.collusive.sum()) / (1 - delta))
    return best


@pytest.mark.parametrize("delta", [0.45, 0.502])
def test_best_allocation_beats_every_feasible_grid_point(delta):
    """The SLSQP allocation is feasible and at least as good as the best feasible point of a 41 x 41
    grid and as each market's standalone collusion; below 1/2 the Cournot market's slack sustains some
    Bertrand collusion that Bertrand alone cannot."""
    g = pair(BERTRAND, COURNOT)
    a = best_allocation(g, delta)
    assert a.success and np.all(a.pooled_slack >= -1e-9 * 40)
    assert a.value >= _brute_force_best(g, delta) - 1e-9
    assert a.value >= a.standalone_value - 1e-9
    if delta < 0.5:
        assert a.standalone_weights[0] < 1e-6 and a.weights[0] > 0.05
    back = Allocation.from_dict(json.loads(json.dumps(a.to_dict())))
    assert np.array_equal(back.weights, a.weights) and back.method == "SLSQP"


def test_best_allocation_of_identical_markets_is_each_market_alone():
    """Identical markets: pooling adds nothing, so the best allocation is each market's own partial
    collusion, computed independently by sim.theory.thresholds.partial_collusion (grim trigger)."""
    a = best_allocation(pair(COURNOT, COURNOT.clone()), 0.45)
    ref = partial_collusion(COURNOT, 0.45).weight
    assert a.weights == pytest.approx([ref, ref], rel=1e-6)
    assert a.standalone_weights == pytest.approx([ref, ref], rel=1e-9)
    full = best_allocation(pair(BERTRAND, COURNOT), 0.52)
    assert np.all(full.weights == 1.0)


def test_merger_adds_contact_and_lowers_the_common_threshold():
    """Firm A meets X in a Bertrand market, firm B meets X in a Cournot market. Before the merger A and
    B each face their market alone (thresholds 1/2 and 9/17); after A and B merge, the merged firm
    pools both markets like X: the common threshold falls from 9/17 to 81/161 (the pooled value of the
    asymmetric test)."""
    g = ContactGame(["A", "B", "X"], [ContactMarket(BERTRAND, ["A", "X"], label="north"),
                                      ContactMarket(COURNOT, ["B", "X"], label="south")])
    ch = merger_contact(g, {"A": "AB", "B": "AB"})
    assert ch.firms_after == ("AB", "X")
    assert ch.contact_before.tolist() == [[1, 0, 1], [0, 1, 1], [1, 1, 2]]
    assert ch.contact_after.tolist() == [[2, 2], [2, 2]]
    assert ch.added_contact == [("AB", "X", 1, 2)]
    assert ch.before.common == pytest.approx(9 / 17, rel=1e-10)
    assert ch.after.common == pytest.approx(81 / 161, rel=1e-10)
    assert ch.change < 0
    back = ContactChange.from_dict(json.loads(json.dumps(ch.to_dict())))
    assert back.added_contact == ch.added_contact and back.after.common == ch.after.common


def test_merger_inside_a_market_needs_the_post_merger_market():
    three = Market(LinearDemand(10.0, 1.0), cost=2.0, n_firms=3, model="bertrand")
    g = ContactGame(["A", "B", "X"], [ContactMarket(three, ["A", "B", "X"]), ContactMarket(COURNOT, ["A", "X"])])
    with pytest.raises(InputError) as e:
        merger_contact(g, {"B": "A"})
    assert e.value.key == "merger.markets[0]" and "A and B" in str(e.value) and "\n" not in str(e.value)
    ch = merger_contact(g, {"B": "A"}, replacements={0: BERTRAND})
    assert ch.after.market_thresholds[0] == pytest.approx(0.5, rel=1e-10)
    with pytest.raises(InputError) as e:
        merger_contact(g, {"A": "A2"})
    assert e.value.key == "merger.mapping" and "merges no firms" in str(e.value)


@settings(max_examples=20, deadline=None)
@given(st.floats(5.0, 50.0), st.floats(5.0, 50.0), st.floats(0.0, 0.8), st.floats(0.0, 0.8),
       st.sampled_from(["cournot", "bertrand"]))
def test_pooled_threshold_lies_between_the_markets(a1, a2, c1, c2, model2):
    """Bernheim and Whinston: the pooled threshold of two symmetric duopolies is a weighted mean of the
    two standalone thresholds (module docstring), so it lies between them."""
    m1 = Market(LinearDemand(a1, 1.0), cost=c1 * a1, n_firms=2)
    m2 = Market(LinearDemand(a2, 1.0), cost=c2 * a2, n_firms=2, model=model2)
    p = pooled_thresholds(pair(m1, m2))
    lo, hi = sorted(p.market_thresholds)
    assert lo - 1e-10 <= p.common <= hi + 1e-10


@pytest.mark.parametrize("markets,key,fragment", [
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"]},
      {"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"]},
      {"market": {"cost": 2.0, "n_firms": 3}, "firms": ["A", "B"]}], "markets[2].firms", "3 firms"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "Z"]}], "markets[0].firms", "'Z'"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "A"]}], "markets[0].firms", "twice"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"], "growth": -1.5}], "markets[0].growth", "-1.5"),
    ([{"market": {"cost": 12.0, "n_firms": 2}, "firms": ["A", "B"]}], "markets[0].market.cost", "choke"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"], "enforcement": {"detection": 1.2}}],
     "markets[0].enforcement.detection", "1.2"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"], "enforcement": {"fine": -1.0}}],
     "markets[0].enforcement.fine", "-1.0"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "B"], "enforcement": {"after_detection": 3}}],
     "markets[0].enforcement.after_detection", "forever"),
    ([{"market": {"cost": 2.0, "n_firms": 2}, "firms": ["A", "C"]}], "firms", "'B'"),
])
def test_bad_contact_input_is_one_line_naming_the_key(markets, key, fragment):
    firms = ["A", "B", "C"] if key == "firms" else ["A", "B"]
    with pytest.raises(InputError) as e:
        ContactGame.from_dict({"firms": firms, "markets": markets})
    assert e.value.key == key and fragment in str(e.value) and "\n" not in str(e.value)


def test_contact_game_round_trip_and_delta_checks():
    g = ContactGame(["A", "B"], [ContactMarket(BERTRAND, ["A", "B"], growth=0.2, label="east"),
                                 ContactMarket(COURNOT, ["B", "A"], enforcement=Enforcement(detection=0.05, fine=1.0))])
    back = ContactGame.from_dict(json.loads(json.dumps(g.to_dict())))
    assert back.markets[1].firms == ("B", "A") and back.markets[0].label == "east"
    assert pooled_thresholds(back).pooled == pytest.approx(pooled_thresholds(g).pooled, rel=1e-12)
    with pytest.raises(InputError) as e:
        slack_at(g, 0.9)  # 0.9 x 1.2 >= 1
    assert e.value.key == "delta" and "east" in str(e.value)
