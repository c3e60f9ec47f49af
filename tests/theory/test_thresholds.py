"""Critical discount factors against published closed forms, with property tests of the trade's
rules of thumb."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import sim
from sim import DifferentiatedDemand, LinearDemand, Market
from sim.theory.thresholds import finite_threshold, grim_threshold, threshold_sensitivity


@pytest.mark.parametrize("n", [2, 3, 4, 5, 6])
def test_symmetric_linear_cournot_grim_threshold(n):
    """delta* = (n+1)^2 / (n^2 + 6n + 1) for n symmetric firms with linear demand and constant
    cost colluding on the joint-profit maximum under grim trigger (Friedman, 1971; the n-firm form
    as in Vives, 1999, Oligopoly Pricing, ch. 9 -- from memory)."""
    r = sim.critical_discount_factors(Market(LinearDemand(100, 2), cost=10.0, n_firms=n), punishments=())
    assert r.grim.market == pytest.approx((n + 1) ** 2 / (n * n + 6 * n + 1), rel=1e-12)
    assert np.allclose(r.grim.per_firm, r.grim.market, rtol=1e-12)


@pytest.mark.parametrize("n", [2, 3, 5, 8])
def test_homogeneous_bertrand_grim_threshold(n):
    """delta* = 1 - 1/n (Tirole, 1988, The Theory of Industrial Organization, ch. 6)."""
    m = Market(LinearDemand(10, 1), cost=2.0, n_firms=n, model="bertrand")
    r = sim.critical_discount_factors(m, punishments=(1, 3))
    assert r.grim.market == pytest.approx(1 - 1 / n, rel=1e-13)
    # zero static profits make any finite punishment as harsh as grim trigger in the limit, but a
    # T-period punishment still needs delta + ... + delta^T >= K = (n - 1) (solved directly)
    for f in r.finite:
        K = n - 1.0
        if K >= f.T:
            assert math.isnan(f.market)
        else:
            d = f.market
            assert sum(d**t for t in range(1, f.T + 1)) == pytest.approx(K, rel=1e-12)


def test_finite_reversion_in_linear_cournot_duopoly():
    """T-period Nash reversion deters deviation when pi_D - pi_C <= (pi_C - pi_N)(delta + ... +
    delta^T) (the condition of, e.g., Motta, 2004, Competition Policy, ch. 4 -- from memory). With
    a = 1, c = 0: pi_C = 1/8, pi_N = 1/9, pi_D = 9/64, so K = 9/8: one period of punishment can never
    deter (K > 1), two periods work from delta = (-1 + sqrt(1 + 4K))/2."""
    r = sim.critical_discount_factors(Market(LinearDemand(1, 1), cost=0.0, n_firms=2), punishments=(1, 2, 3, 50))
    t1, t2, t3, t50 = r.finite
    assert math.isnan(t1.market) and not t1.sustainable
    assert t2.market == pytest.approx((-1 + math.sqrt(1 + 4 * 9 / 8)) / 2, rel=1e-13)
    # T = 3 against numpy's polynomial roots of d^3 + d^2 + d - K (a reference root finder)
    roots = np.roots([1, 1, 1, -9 / 8])
    real = roots[np.abs(roots.imag) < 1e-12].real
    assert t3.market == pytest.approx(real[(real > 0) & (real < 1)][0], rel=1e-12)
    # longer punishments approach grim trigger from above
    assert t2.market > t3.market > t50.market > r.grim.market
    assert t50.market == pytest.approx(r.grim.market, abs=1e-9)


def test_optimal_symmetric_punishment_in_linear_cournot_duopoly():
    """Abreu (1986, JET, "Extremal equilibria of oligopolistic supergames"): with linear demand
    P = a - Q, cost c and a - c = 1, the optimal symmetric two-phase punishment sustains the
    monopoly outcome for delta >= 9/32 with punishment output 5/12 per firm (both constraints
    binding; values as computed for linear demand in the literature that followed, e.g. Lambertini
    and Sasaki, 2002 -- from memory). Here a = 2, c = 1 so that the price floor does not bind."""
    r = sim.critical_discount_factors(Market(LinearDemand(2, 1), cost=1.0, n_firms=2), punishments=())
    sc = r.stick_carrot
    assert sc.market == pytest.approx(9 / 32, rel=1e-10)
    assert sc.punishment_level == pytest.approx(5 / 12, rel=1e-8)
    assert sc.market < r.grim.market


def test_stick_and_carrot_respects_the_price_floor():
    """Worked example (derived by hand): with zero cost the price cannot fall below zero, so the
    harshest punishment profit is 0 (reached by flooding the market, which a best reply answers with
    zero output). The collusion constraint 1/64 <= delta (1/8 - 0) then binds: delta = 1/8."""
    sc = sim.stick_and_carrot(Market(LinearDemand(1, 1), cost=0.0, n_firms=2))
    assert sc.market == pytest.approx(1 / 8, rel=1e-10)
    assert sc.punishment_profits == pytest.approx([0.0, 0.0], abs=1e-12)


@pytest.mark.parametrize("g", [0.1, 0.4, 0.7, 0.9, 1.0])
def test_differentiated_cournot_duopoly_threshold(g):
    """Deneckere (1983, Economics Letters 11, "Duopoly supergames with product differentiation"):
    Cournot with p_i = 1 - q_i - g q_j: delta* = (2 + g)^2 / (8 + 8g + g^2) (from memory; at g = 1
    it is the homogeneous 9/17)."""
    r = sim.critical_discount_factors(Market(DifferentiatedDemand(1, 1, g), cost=0.0, n_firms=2), punishments=())
    assert r.grim.market == pytest.approx((2 + g) ** 2 / (8 + 8 * g + g * g), rel=1e-12)


@pytest.mark.parametrize("g", [0.1, 0.3, 0.5, 0.7, 0.75, 0.85, 0.95])
def test_differentiated_bertrand_duopoly_threshold(g):
    """Deneckere (1983): Bertrand with p_i = 1 - q_i - g q_j. While the deviator's rival keeps a
    positive demand (g <= sqrt(3) - 1), delta* = (2 - g)^2 / (8 - 8g + g^2). Beyond, the best
    deviation prices the rival out: p_D = 1 - 1/(2g), pi_D = (2g - 1)/(4 g^2) (from memory,
    re-derived in this docstring's terms), with pi_C = 1/(4(1+g)) and pi_N = (1-g)/((2-g)^2 (1+g))."""
    r = sim.critical_discount_factors(Market(DifferentiatedDemand(1, 1, g), cost=0.0, n_firms=2, model="bertrand"),
                       punishments=())
    pi_c = 1 / (4 * (1 + g))
    pi_n = (1 - g) / ((2 - g) ** 2 * (1 + g))
    if g <= math.sqrt(3) - 1:
        expected = (2 - g) ** 2 / (8 - 8 * g + g * g)
    else:
        pi_d = (2 * g - 1) / (4 * g * g)
        expected = (pi_d - pi_c) / (pi_d - pi_n)
        assert r.stage.deviation_actions[0] == pytest.approx(1 - 1 / (2 * g), rel=1e-12)
    assert r.grim.market == pytest.approx(expected, rel=1e-10)


def test_bertrand_threshold_is_not_monotone_in_substitutability():
    """Deneckere's (1983) finding: under price competition the threshold first rises, then falls
    with substitutability (toward the homogeneous value 1/2)."""
    th = [sim.critical_discount_factors(Market(DifferentiatedDemand(1, 1, g), cost=0.0, n_firms=2, model="bertrand"),
                         punishments=()).grim.market for g in (0.3, 0.8, 0.99)]
    assert th[1] > th[0] and th[1] > th[2]


def test_partial_collusion_in_linear_cournot_duopoly():
    """Below 9/17 grim trigger sustains the symmetric output q(delta) that makes the incentive
    constraint (1-q)^2/4 - q(1-2q) = delta/(1-delta) (q(1-2q) - 1/9) bind; solving the quadratic
    by hand gives q = (9 - 5 delta) / (3 (9 - delta)) (a = 1, c = 0)."""
    m = Market(LinearDemand(1, 1), cost=0.0, n_firms=2)
    for delta in (0.1, 0.3, 0.5):
        pc = sim.partial_collusion(m, delta, "grim")
        assert pc.actions == pytest.approx([(9 - 5 * delta) / (3 * (9 - delta))] * 2, rel=1e-9)
        assert 0 < pc.profit_gain < 1
    above = sim.partial_collusion(m, 0.6, "grim")
    assert above.weight == 1.0 and above.profit_gain == pytest.approx(1.0)
    # the stick and carrot sustains more than grim trigger at the same discount factor
    sc = sim.partial_collusion(m, 0.2, "stick_carrot")
    assert sc.profit_gain > sim.partial_collusion(m, 0.2, "grim").profit_gain


def test_asymmetric_market_binding_firm():
    # with proportional quotas in asymmetric Cournot the lowest-cost firm gains most from cheating
    r = sim.critical_discount_factors(Market(LinearDemand(100, 1), cost=[10.0, 12.0, 16.0]), agreement="proportional",
                       punishments=())
    assert r.grim.binding == int(np.argmax(r.grim.per_firm))
    assert r.grim.market == r.grim.per_firm.max()
    # joint-profit maximisation shuts the high-cost firms down: they earn less than at Nash, so the
    # honest answer is "not sustainable"
    j = sim.critical_discount_factors(Market(LinearDemand(100, 1), cost=[10.0, 12.0, 16.0]), punishments=())
    assert not j.grim.sustainable and j.grim.to_dict()["market"] is None


profits = st.tuples(
    st.floats(0.01, 100.0), st.floats(0.01, 100.0), st.floats(0.0, 100.0)
).map(lambda t: (t[2] + t[0] + t[1], t[2] + t[0], t[2]))  # (deviation > collusive > nash)


@settings(max_examples=200, deadline=None)
@given(profits)
def test_grim_threshold_rules_of_thumb(p):
    """Common practice, no source: the threshold lies in (0, 1), rises with the cheating and the
    competitive profit and falls with the collusive profit."""
    d, c, n = p
    base = float(grim_threshold(c, d, n))
    assert 0 < base < 1
    h = 1e-3 * (c - n)
    assert float(grim_threshold(c, d + h, n)) > base
    assert float(grim_threshold(c + h, d, n)) < base
    assert float(grim_threshold(c, d, n + h)) > base
    sens = threshold_sensitivity(c, d, n)
    assert sens["d_deviation"] > 0 > sens["d_collusive"] and sens["d_nash"] > 0


@settings(max_examples=60, deadline=None)
@given(profits, st.integers(1, 40))
def test_finite_thresholds_fall_with_punishment_length(p, T):
    d, c, n = p
    a, b = finite_threshold(c, d, n, T), finite_threshold(c, d, n, T + 1)
    g = grim_threshold(c, d, n)
    # strictly decreasing in exact arithmetic; for long punishments delta^T falls below the double
    # precision of the threshold, hence the rounding allowance
    if not math.isnan(a):
        assert b <= a + 1e-14
    if not math.isnan(b):
        assert g <= b + 1e-14 and b < 1
    sens = threshold_sensitivity(c, d, n, T)
    K = (d - c) / (c - n)
    if sens["d_deviation"] is not None and K < T * (1 - 1e-3):  # away from "not sustainable"
        h = 1e-6 * (c - n)
        fd = (finite_threshold(c, d + h, n, T) - finite_threshold(c, d - h, n, T)) / (2 * h)
        assert sens["d_deviation"] == pytest.approx(fd, rel=1e-4)


@settings(max_examples=40, deadline=None)
@given(st.integers(2, 6), st.floats(20.0, 200.0), st.floats(0.2, 5.0), st.floats(0.0, 0.8))
def test_cheat_beats_collude_beats_compete_beats_being_cheated(n, a, b, cfrac):
    """Common practice, no source: in symmetric linear Cournot, deviating beats colluding, which
    beats competing; in a duopoly competing also beats colluding while the rival cheats (the
    prisoners' dilemma ordering). With more firms one cheater lowers the price less, so a loyal firm
    can still earn more than at Nash, and the last link is only checked for two firms."""
    c = cfrac * a
    m = Market(LinearDemand(a, b), cost=c, n_firms=n)
    stg = sim.stage_game(m)
    pd, pc, pn = stg.deviation_profits[0], stg.collusive.firm_profits[0], stg.nash.firm_profits[0]
    cheated = m.firm_profits(stg.deviation_profiles[1])[0]  # firm 1 colludes, firm 2 deviates
    assert pd > pc > pn
    if n == 2:
        assert pn > cheated
    th = sim.critical_discount_factors(m, punishments=()).grim.market
    assert 0 < th < 1


def test_sensitivity_derivatives_match_finite_differences():
    c, d, n = 2.0, 3.0, 1.0
    s = threshold_sensitivity(c, d, n)
    h = 1e-7
    assert s["d_deviation"] == pytest.approx((grim_threshold(c, d + h, n) - grim_threshold(c, d - h, n)) / (2 * h))
    assert s["d_collusive"] == pytest.approx((grim_threshold(c + h, d, n) - grim_threshold(c - h, d, n)) / (2 * h))
    assert s["d_nash"] == pytest.approx((grim_threshold(c, d, n + h) - grim_threshold(c, d, n - h)) / (2 * h))


def test_bad_discount_factors_and_punishment_lengths():
    m = Market(LinearDemand(1, 1), cost=0.0, n_firms=2)
    for bad in (0.0, 1.0, -0.2, 1.5, float("nan")):
        with pytest.raises(sim.InputError) as err:
            sim.partial_collusion(m, bad)
        assert err.value.key == "delta" and "(0, 1)" in str(err.value)
    with pytest.raises(sim.InputError):
        sim.critical_discount_factors(m, punishments=(0,))


def test_a_firm_that_prefers_the_punishment_cannot_be_held_by_it():
    """Along the path from Nash to the asymmetric joint-profit maximum the high-cost firm's profit
    falls below its Nash profit: Nash reversion is then a reward, not a threat, so no discount factor
    sustains any step along the path (partial collusion stays at Nash)."""
    m = Market(LinearDemand(100, 1), cost=[10.0, 12.0, 16.0])
    pc = sim.partial_collusion(m, 0.9, "grim")
    assert pc.weight == 0.0
    assert math.isnan(float(grim_threshold(1.0, 1.0, 2.0)))  # collusive 1 < Nash 2, no gain from cheating


def test_stick_and_carrot_is_flagged_when_weaker_than_grim_trigger():
    """With capacity 2.5 (a = 10, c = 1, two firms) the harshest stick is both firms at capacity, which
    is also the static Nash outcome: one period of it cannot deter a deviation (delta would have to be
    (10.625 - 10.125) / (10.125 - 10) = 4), while Nash reversion forever can, from delta = 0.8."""
    r = sim.critical_discount_factors(Market(LinearDemand(10, 1), cost=1.0, n_firms=2, capacity=2.5), punishments=())
    assert r.grim.market == pytest.approx(0.8, rel=1e-12)
    assert r.grim.sustainable
    assert r.stick_carrot.weaker_than_grim and r.best.scheme == "grim"
    ok = sim.critical_discount_factors(Market(LinearDemand(2, 1), cost=1.0, n_firms=2), punishments=())
    assert not ok.stick_carrot.weaker_than_grim and ok.best.scheme == "stick_carrot"


@pytest.mark.parametrize(
    "market",
    [
        Market(sim.IsoelasticDemand(1, 2), cost=1.0, n_firms=2),
        Market(sim.LogitDemand(2, 0, 0.25), cost=1.0, n_firms=2, model="bertrand"),
        Market(DifferentiatedDemand(10, 1, 0.5), cost=1.0, n_firms=3, model="bertrand"),
        Market(DifferentiatedDemand(10, 1, 0.5), cost=1.0, n_firms=3),
    ],
    ids=["isoelastic", "logit", "diff-bertrand", "diff-cournot"],
)
def test_agreements_coincide_to_many_digits_in_symmetric_markets(market):
    """With identical firms the joint-profit maximum is symmetric and proportional to Nash, so the
    three agreement rules must give the same threshold; the 1-D rules solve their first-order
    condition on the analytic gradient, hence the tight tolerance."""
    th = [sim.critical_discount_factors(market, agreement=a, punishments=()).grim.market
          for a in ("joint", "symmetric", "proportional")]
    assert th[1] == pytest.approx(th[0], rel=1e-12, abs=0)
    assert th[2] == pytest.approx(th[0], rel=1e-12, abs=0)
