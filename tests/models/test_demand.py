"""Demand systems against their textbook definitions and independent numerical references."""

import numpy as np
import pytest
from scipy import integrate, optimize

from sim import DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand
from sim.models.demand import consumer_surplus, direct_demand, inverse_demand


def test_linear_inverse_demand_is_floored_at_zero():
    s = LinearDemand(10, 2).spec(2)
    p = inverse_demand(s, np.array([[1.0, 1.5], [4.0, 3.0]]))
    assert np.allclose(p, [[5.0, 5.0], [0.0, 0.0]])


def test_homogeneous_bertrand_lowest_price_takes_market_ties_share_by_weights():
    s = LinearDemand(10, 1).spec(3)
    q = direct_demand(s, np.array([[4.0, 5.0, 4.0]]))[0]
    assert np.allclose(q, [3.0, 0.0, 3.0])  # D(4) = 6 shared equally by the two at 4
    s = LinearDemand(10, 1, split=[1.0, 1.0, 2.0]).spec(3)
    q = direct_demand(s, np.array([[4.0, 5.0, 4.0]]))[0]
    assert np.allclose(q, [2.0, 0.0, 4.0])


def test_differentiated_duopoly_direct_demand_matches_singh_vives():
    # Singh and Vives (1984, RAND J. Econ. 15, "Price and quantity competition in a differentiated
    # duopoly"): q_i = (a (1-g) - p_i + g p_j) / (b (1 - g^2)) when both quantities are positive.
    a, b, g = 10.0, 2.0, 0.6
    s = DifferentiatedDemand(a, b, g).spec(2)
    p = np.array([[4.0, 5.0], [6.0, 6.5]])
    q = direct_demand(s, p)
    expected = (a * (1 - g) - p + g * p[:, ::-1]) / (b * (1 - g**2))
    assert np.all(expected > 0)
    assert np.allclose(q, expected, rtol=1e-13)


def test_differentiated_demand_with_exits_maximises_consumer_utility(rng):
    """Direct demand must solve the representative consumer's problem max U(q) - p.q over q >= 0.
    Reference: scipy's bounded quasi-Newton optimiser on that problem."""
    a = np.array([10.0, 9.0, 8.0, 11.0])
    b, g = 1.5, 0.7
    s = DifferentiatedDemand(a, b, g).spec(4)
    for _ in range(25):
        p = rng.uniform(0.0, 11.0, size=4)
        q = direct_demand(s, p[None, :])[0]

        def neg_surplus(x, p=p):
            tot = x.sum()
            u = a @ x - 0.5 * b * ((1 - g) * (x @ x) + g * tot * tot)
            grad = a - b * ((1 - g) * x + g * tot)
            return -(u - p @ x), -(grad - p)

        ref = optimize.minimize(neg_surplus, np.ones(4), jac=True, method="L-BFGS-B",
                                bounds=[(0, None)] * 4, options={"ftol": 1e-15, "gtol": 1e-12})
        assert np.allclose(q, ref.x, atol=1e-6)
        # the inverse demand of the answer reproduces the prices of the products that sell
        sells = q > 1e-12
        back = inverse_demand(s, q[None, :])[0]
        assert np.allclose(back[sells], p[sells], atol=1e-10)


def test_logit_shares_and_outside_good():
    s = LogitDemand([2.0, 1.5], 0.5, 0.25, size=3.0).spec(2)
    p = np.array([[1.2, 1.0]])
    q = direct_demand(s, p)[0]
    e = np.exp((np.array([2.0, 1.5]) - p[0]) / 0.25)
    e0 = np.exp(0.5 / 0.25)
    assert np.allclose(q, 3.0 * e / (e.sum() + e0), rtol=1e-14)


def test_isoelastic_demand_has_constant_elasticity():
    s = IsoelasticDemand(scale=3.0, elasticity=2.5).spec(2)
    Q = np.array([0.5, 1.0, 2.0, 7.0])
    P = inverse_demand(s, np.stack([Q / 2, Q / 2], axis=1))[:, 0]
    # d ln Q / d ln P = -elasticity
    slope = np.diff(np.log(Q)) / np.diff(np.log(P))
    assert np.allclose(slope, -2.5, rtol=1e-12)


@pytest.mark.parametrize(
    "spec",
    [
        DifferentiatedDemand([10.0, 9.0, 8.0], 1.2, 0.4).spec(3),
        LogitDemand([2.0, 1.8, 2.2], 0.0, 0.3, size=2.0).spec(3),
        LinearDemand(10.0, 2.0).spec(3),
    ],
    ids=["differentiated", "logit", "linear"],
)
def test_consumer_surplus_satisfies_roys_identity(spec):
    """dCS/dp_i = -q_i (Roy's identity for quasi-linear utility); checked by central differences."""
    p = np.array([3.0, 3.5, 4.0]) if spec.kind != "logit" else np.array([1.3, 1.1, 1.6])
    if spec.kind == "linear":
        p = np.array([3.0, 3.0, 3.0])  # common price: CS depends on the lowest price only
    h = 1e-6
    q = direct_demand(spec, p[None, :])[0]
    cs = lambda x: consumer_surplus(spec, direct_demand(spec, x[None, :]), x[None, :])[0]  # noqa: E731
    if spec.kind == "linear":
        d = (cs(p + h) - cs(p - h)) / (2 * h)
        assert d == pytest.approx(-q.sum(), rel=1e-6)
        return
    for i in range(3):
        e = np.zeros(3)
        e[i] = h
        d = (cs(p + e) - cs(p - e)) / (2 * h)
        assert d == pytest.approx(-q[i], rel=1e-6)


def test_isoelastic_consumer_surplus_is_area_under_demand():
    s = IsoelasticDemand(scale=2.0, elasticity=3.0).spec(2)
    q = np.array([[0.4, 0.6]])
    P = inverse_demand(s, q)[0, 0]
    area, _ = integrate.quad(lambda x: (2.0 / x) ** 3.0, P, np.inf)
    assert consumer_surplus(s, q, inverse_demand(s, q))[0] == pytest.approx(area, rel=1e-9)
