"""Static Nash, collusive outcomes, deviations and minmax against published closed forms and
general-purpose reference libraries (nashpy, scipy)."""

import nashpy
import numpy as np
import pytest
from scipy import optimize

import sim
from sim import DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand, Market


@pytest.mark.parametrize("n", [2, 3, 5, 10])
def test_linear_cournot_nash_asymmetric_closed_form(n):
    # q_i = (a - (n+1) c_i + sum_j c_j) / ((n+1) b): the textbook n-firm linear Cournot equilibrium
    # (e.g. Tirole, 1988, The Theory of Industrial Organization, ch. 5), valid while every q_i > 0.
    a, b = 100.0, 2.0
    c = np.linspace(5.0, 15.0, n)
    out = sim.static_nash(Market(LinearDemand(a, b), cost=c))
    expected = (a - (n + 1) * c + c.sum()) / ((n + 1) * b)
    assert np.allclose(out.actions, expected, rtol=1e-12)


def test_linear_cournot_high_cost_firm_exits():
    out = sim.static_nash(Market(LinearDemand(10, 1), cost=[1.0, 1.0, 8.0]))
    # without firm 3 the duopoly output is (10-1)/3 = 3 each, price 4 < 8, so firm 3 stays out
    assert np.allclose(out.actions, [3.0, 3.0, 0.0], atol=1e-12)


def test_cournot_with_a_binding_capacity():
    out = sim.static_nash(Market(LinearDemand(10, 1), cost=1.0, n_firms=2, capacity=[2.0, 10.0]))
    # firm 1 is capped at 2; firm 2 best-responds: (10 - 1 - 2) / 2 = 3.5
    assert np.allclose(out.actions, [2.0, 3.5], atol=1e-12)


def test_homogeneous_bertrand_static_equilibria():
    sym = sim.static_nash(Market(LinearDemand(10, 1), cost=2.0, n_firms=3, model="bertrand"))
    assert np.allclose(sym.prices, 2.0) and np.allclose(sym.firm_profits, 0.0)
    # asymmetric costs, continuous prices: the low-cost firm undercuts the rival's cost by the
    # effective step (1e-9 of the choke price), approaching the limit profit (3 - 1) * 7 = 14
    asym = sim.static_nash(Market(LinearDemand(10, 1), cost=[1.0, 3.0, 4.0], model="bertrand"))
    assert asym.prices[0] == pytest.approx(3.0 - 1e-8, abs=1e-15)
    assert asym.firm_profits == pytest.approx([14.0, 0, 0], rel=1e-8)
    # with a price tick the low-cost firm prices one tick below its rival's cost
    ticked = sim.static_nash(Market(LinearDemand(10, 1), cost=[1.0, 3.0], model="bertrand", tick=0.01))
    assert ticked.prices[0] == pytest.approx(2.99)
    # one tick below the rival's cost would be below the own cost: the two tie at the rival's cost
    # (a one-tick undercut loses money, pricing higher sells nothing), and nobody prices below cost
    close = sim.static_nash(Market(LinearDemand(10, 1), cost=[1.0, 1.005], model="bertrand", tick=0.01))
    assert np.allclose(close.prices, 1.005) and np.all(close.firm_profits >= 0)
    assert close.firm_profits[0] == pytest.approx(0.005 * 8.995 / 2)
    # a cost advantage so large that the monopoly price is below the rival's cost
    blockaded = sim.static_nash(Market(LinearDemand(10, 1), cost=[1.0, 9.0], model="bertrand"))
    assert blockaded.prices[0] == pytest.approx(5.5)


@pytest.mark.parametrize(
    "market",
    [
        Market(LinearDemand(10, 1), cost=[1.0, 3.0, 4.0], model="bertrand"),
        Market(LinearDemand(10, 1), cost=[1.0, 1.0, 2.0], model="bertrand", tick=0.05),
        Market(LinearDemand(10, 1), cost=[1.0, 2.0], capacity=[2.0, 9.0]),
        Market(DifferentiatedDemand([10.0, 9.0, 8.0], 1.0, 0.9), cost=[1.0, 2.0, 6.0], model="bertrand"),
        Market(LogitDemand([2.0, 1.5], 0.0, 0.25), cost=[1.0, 0.8], model="bertrand"),
        Market(IsoelasticDemand(2.0, 1.8), cost=[1.0, 1.3]),
    ],
    ids=["homog-bertrand", "homog-bertrand-tick", "cournot-capacity", "diff-bertrand", "logit", "isoelastic"],
)
def test_reported_profiles_are_attainable(market):
    """Every profile the stage game reports evaluates to the profits reported with it."""
    st = sim.stage_game(market)
    assert np.allclose(market.firm_profits(st.nash.actions), st.nash.firm_profits, rtol=1e-12)
    assert np.allclose(market.firm_profits(st.collusive.actions), st.collusive.firm_profits, rtol=1e-12)
    for i in range(market.spec().n_firms):
        assert market.firm_profits(st.deviation_profiles[i])[i] == pytest.approx(st.deviation_profits[i], rel=1e-12)


def test_differentiated_bertrand_best_response_with_exits_matches_brute_force(rng):
    """Near-perfect substitutes, rivals priced near cost: the profitable price band is narrow and a
    coarse search misses it. Reference: a brute-force grid of 200,001 prices."""
    m = Market(DifferentiatedDemand(10.0, 1.0, 0.99), cost=1.0, n_firms=3, model="bertrand")
    prof, v = sim.best_response(m, 0, [5.0, 1.25, 1.25])
    grid = np.linspace(1.0, 10.0, 200_001)
    P = np.tile([5.0, 1.25, 1.25], (grid.size, 1))
    P[:, 0] = grid
    ref = m.profits(P)[:, 0]
    # the exact answer is at least the best grid point and within the grid's resolution of it
    assert v >= ref.max() - 1e-12 and v == pytest.approx(ref.max(), rel=1e-4)
    assert prof[0] == pytest.approx(grid[ref.argmax()], abs=1e-4)
    for _ in range(60):
        n = int(rng.integers(3, 6))
        a, c = rng.uniform(5, 10, n), rng.uniform(0, 4, n)
        mk = Market(DifferentiatedDemand(a, 1.0, float(rng.choice([0.5, 0.9, 0.99]))), cost=c, model="bertrand")
        row, i = rng.uniform(0, 10, n), int(rng.integers(n))
        _, v = sim.best_response(mk, i, row)
        grid = np.linspace(c[i], a[i], 20_001)
        P = np.tile(row, (grid.size, 1))
        P[:, i] = grid
        assert mk.profits(P)[:, i].max() <= v + 1e-9 * max(1.0, abs(v))


def test_asymmetric_differentiated_bertrand_equilibria_are_certified(rng):
    """Random 3- and 4-firm markets with high substitution and exits, single- and multi-product
    firms: the certified static Nash exists and no firm gains on a fine grid of its own prices."""
    for t in range(30):
        n = int(rng.integers(3, 5))
        a, c = rng.uniform(8, 10, n), rng.uniform(0, 6, n)
        owner = None if t % 2 else [*range(1, n), 1]
        m = Market(DifferentiatedDemand(a, 1.0, float(rng.uniform(0.5, 0.99))), cost=c, model="bertrand", owner=owner)
        nash = sim.static_nash(m)
        ms = m.spec()
        for k in range(ms.n_products):
            grid = np.linspace(0.0, a[k], 4001)
            P = np.tile(nash.actions, (grid.size, 1))
            P[:, k] = grid
            gain = m.firm_profits(P)[:, ms.owner[k]].max() - nash.firm_profits[ms.owner[k]]
            assert gain <= 1e-9 * max(1.0, nash.firm_profits.max())


def test_differentiated_duopoly_nash_closed_forms():
    # Singh and Vives (1984): with inverse demand p_i = a - q_i - g q_j and cost c,
    # Cournot q = (a - c)/(2 + g); Bertrand p = (a (1 - g) + c)/(2 - g).
    a, c, g = 10.0, 2.0, 0.6
    qc = sim.static_nash(Market(DifferentiatedDemand(a, 1, g), cost=c, n_firms=2)).actions
    pb = sim.static_nash(Market(DifferentiatedDemand(a, 1, g), cost=c, n_firms=2, model="bertrand")).actions
    assert np.allclose(qc, (a - c) / (2 + g), rtol=1e-13)
    assert np.allclose(pb, (a * (1 - g) + c) / (2 - g), rtol=1e-13)


def test_isoelastic_cournot_nash_lerner_rule():
    # symmetric Cournot with constant elasticity e: (P - c)/P = 1/(n e), so P = c / (1 - 1/(n e))
    n, e, c = 3, 1.5, 2.0
    out = sim.static_nash(Market(IsoelasticDemand(5.0, e), cost=c, n_firms=n))
    assert out.prices[0] == pytest.approx(c / (1 - 1 / (n * e)), rel=1e-12)


def test_logit_baseline_prices_of_the_published_algorithmic_pricing_study():
    """Calvano, Calzolari, Denicolo and Pastorello (2020, AER, "Artificial Intelligence, Algorithmic
    Pricing, and Collusion"), baseline: a_i = 2, a_0 = 0, c = 1, mu = 0.25, two firms. Published
    (from memory): Bertrand-Nash price 1.4729 and joint-profit price 1.9250."""
    m = Market(LogitDemand(2.0, 0.0, 0.25), cost=1.0, n_firms=2, model="bertrand")
    st = sim.stage_game(m)
    assert np.allclose(st.nash.prices, 1.4729, atol=1e-4)
    assert np.allclose(st.collusive.prices, 1.9250, atol=1e-4)


def test_logit_nash_matches_a_generic_root_finder():
    """Reference: scipy's hybrid root finder on the first-order conditions
    q_i + (p_i - c_i) dq_i/dp_i = 0 with dq_i/dp_i = -q_i (1 - s_i) / mu."""
    qual = np.array([2.0, 1.7, 2.3])
    cost = np.array([1.0, 0.8, 1.2])
    mu = 0.3
    m = Market(LogitDemand(qual, 0.2, mu), cost=cost, model="bertrand")
    ours = sim.static_nash(m).prices

    def foc(p):
        e = np.exp((qual - p) / mu)
        s = e / (e.sum() + np.exp(0.2 / mu))
        return 1 - (p - cost) * (1 - s) / mu

    ref = optimize.root(foc, cost + mu, method="hybr", tol=1e-12)
    assert np.abs(foc(ref.x)).max() < 1e-12
    assert np.allclose(ours, ref.x, atol=1e-10)


def test_joint_profit_maximum_closed_forms():
    # linear monopoly: Q = (a - c)/(2b), shared equally among equal-cost firms
    out = sim.collusive_outcome(Market(LinearDemand(10, 1), cost=1.0, n_firms=3))
    assert np.allclose(out.actions, 1.5)
    # merit order with capacities: cheapest firm at capacity, next fills up to MR = its cost
    out = sim.collusive_outcome(Market(LinearDemand(10, 1), cost=[1.0, 2.0], capacity=[2.0, 10.0]))
    assert np.allclose(out.actions, [2.0, (10 - 2) / 2 - 2.0])
    # multi-product logit monopoly: equal markups m with m * s_0 = mu (Anderson, de Palma and
    # Thisse, 1992, Discrete Choice Theory of Product Differentiation, ch. 7)
    m = Market(LogitDemand([2.0, 1.5, 2.5], 0.0, 0.4), cost=[1.0, 0.5, 1.5], model="bertrand")
    p = sim.collusive_outcome(m).prices
    markup = p - np.array([1.0, 0.5, 1.5])
    assert np.allclose(markup, markup[0], rtol=1e-12)
    s0 = 1.0 / (1.0 + np.exp((np.array([2.0, 1.5, 2.5]) - p) / 0.4).sum())
    assert markup[0] * s0 == pytest.approx(0.4, rel=1e-12)


@pytest.mark.parametrize("model", ["cournot", "bertrand"])
def test_differentiated_joint_maximum_matches_generic_optimiser(model):
    """Reference: scipy's bounded quasi-Newton optimiser on joint profit written in quantities,
    sum_i (P_i(q) - c_i) q_i with the inverse demand of the representative consumer; under price
    competition the firms can reach any quantity vector q >= 0 through prices, so the maximum is
    the same (Singh and Vives, 1984)."""
    a = np.array([10.0, 9.0, 11.0])
    c = np.array([1.0, 2.0, 1.5])
    b, g = 1.0, 0.5
    m = Market(DifferentiatedDemand(a, b, g), cost=c, model=model)
    ours = sim.collusive_outcome(m)

    def neg(q):
        p = a - b * ((1 - g) * q + g * q.sum())
        return -((p - c) @ q)

    res = optimize.minimize(neg, np.ones(3), method="L-BFGS-B", bounds=[(0, None)] * 3,
                            options={"ftol": 1e-15, "gtol": 1e-12})
    assert ours.joint_profit == pytest.approx(-res.fun, rel=1e-9)
    assert np.allclose(ours.quantities, res.x, atol=1e-5)


def test_symmetric_and_proportional_agreements():
    m = Market(LinearDemand(100, 1), cost=[10.0, 10.0, 14.0])
    sym = sim.collusive_outcome(m, "symmetric")
    assert np.allclose(sym.actions, sym.actions[0])
    # joint profit with a common quantity x: (100 - 3x) * 3x - x * (10 + 10 + 14); maximised at
    # x = (300 - 34) / 18
    assert sym.actions[0] == pytest.approx((300 - 34) / 18, rel=1e-9)
    prop = sim.collusive_outcome(m, "proportional")
    qn = sim.static_nash(m).actions
    assert np.allclose(prop.actions / qn, prop.actions[0] / qn[0], rtol=1e-12)
    joint = sim.collusive_outcome(m, "joint")
    assert joint.joint_profit >= prop.joint_profit >= sim.static_nash(m).joint_profit


def test_cournot_deviation_and_minmax():
    m = Market(LinearDemand(1, 1), cost=0.0, n_firms=2)
    st = sim.stage_game(m)
    # monopoly split 1/4 each; best reply (1 - 1/4)/2 = 3/8 earns 9/64 (textbook duopoly numbers)
    assert np.allclose(st.deviation_actions, 3 / 8)
    assert np.allclose(st.deviation_profits, 9 / 64)
    assert np.allclose(st.minmax_profits, 0.0)
    capped = sim.stage_game(Market(LinearDemand(10, 1), cost=1.0, n_firms=2, capacity=[2.0, 10.0]))
    # firm 2 can flood the market (price 0); firm 1 produces at most 2, which leaves
    # (10 - 1 - 2)^2 / 4 = 12.25 to firm 2 when it best responds
    assert np.allclose(capped.minmax_profits, [0.0, 12.25])


def _pure_equilibria(A, B):
    eqs = []
    for s1, s2 in nashpy.Game(A, B).support_enumeration():
        if (s1 > 0).sum() == 1 and (s2 > 0).sum() == 1:
            eqs.append((int(np.argmax(s1)), int(np.argmax(s2))))
    return eqs


@pytest.mark.parametrize("model", ["cournot", "bertrand"])
def test_static_nash_is_the_pure_equilibrium_of_the_discretised_game(model):
    """Cross-check with nashpy (Knight and Campbell, 2018, "Nashpy: A Python library for the
    computation of Nash equilibria", JOSS): on a grid that contains our equilibrium action, support
    enumeration of the discretised duopoly finds it as a pure equilibrium (a small grid keeps the
    enumeration of supports cheap)."""
    if model == "cournot":
        m = Market(DifferentiatedDemand(10.0, 1.0, 0.5), cost=1.0, n_firms=2)
        star = sim.static_nash(m).actions[0]  # (10 - 1)/2.5 = 3.6
        grid = star + 0.2 * np.arange(-3, 4)
    else:
        m = Market(DifferentiatedDemand(10.0, 1.0, 0.5), cost=1.0, n_firms=2, model="bertrand")
        star = sim.static_nash(m).actions[0]  # (10 * 0.5 + 1)/1.5 = 4
        grid = star + 0.25 * np.arange(-3, 4)
    X, Y = np.meshgrid(grid, grid, indexing="ij")
    pi = m.profits(np.stack([X, Y], axis=-1))
    eqs = _pure_equilibria(pi[..., 0], pi[..., 1])
    k = int(np.argmin(np.abs(grid - star)))
    assert (k, k) in eqs


def test_merged_logit_firm_prices_match_a_generic_optimiser():
    """A firm owning two products sets both prices to maximise their joint profit given the rival
    (the standard merger-simulation first-order conditions); reference: scipy minimize."""
    m = Market(LogitDemand([2.0, 2.0, 2.0], 0.0, 0.25), cost=1.0, owner=[1, 1, 2], model="bertrand")
    nash = sim.static_nash(m)
    for firm, own in ((0, [0, 1]), (1, [2])):
        def neg(x, own=own, firm=firm):
            p = nash.prices.copy()
            p[own] = x
            return -m.firm_profits(p)[firm]
        res = optimize.minimize(neg, nash.prices[own] + 0.1, method="Nelder-Mead",
                                options={"xatol": 1e-12, "fatol": 1e-15, "maxiter": 20000})
        assert np.allclose(nash.prices[own], res.x, atol=1e-6)
    # the merged firm prices above the outsider, which prices above the pre-merger level
    pre = sim.static_nash(Market(LogitDemand(2.0, 0.0, 0.25), cost=1.0, n_firms=3, model="bertrand")).prices
    assert nash.prices[0] > nash.prices[2] > pre[0]
