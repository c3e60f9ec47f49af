"""Market construction, validation messages and vectorised evaluation."""

import numpy as np
import pytest

from sim import DifferentiatedDemand, InputError, IsoelasticDemand, LinearDemand, LogitDemand, Market
from sim.models.market import market_from_dict


def test_profits_are_vectorised_over_leading_dimensions():
    m = Market(LinearDemand(10, 1), cost=[1.0, 2.0])
    A = np.arange(24, dtype=float).reshape(3, 4, 2) / 10
    pi = m.profits(A)
    assert pi.shape == (3, 4, 2)
    flat = np.array([m.profits(a) for a in A.reshape(-1, 2)]).reshape(3, 4, 2)
    assert np.allclose(pi, flat)
    Q = A.sum(-1)
    assert np.allclose(pi[..., 0], A[..., 0] * (np.maximum(0, 10 - Q) - 1.0))


def test_quantities_never_exceed_capacity():
    m = Market(LinearDemand(10, 1), cost=1.0, n_firms=2, capacity=[2.0, 5.0])
    q, p, _pi = m.evaluate([[4.0, 4.0]])
    assert np.allclose(q, [[2.0, 4.0]])
    assert np.allclose(p, 4.0)


def test_demand_shock_scales_price_under_cournot_and_quantity_under_bertrand():
    mc = Market(LinearDemand(10, 1), cost=1.0, n_firms=2)
    _q, p, pi = mc.evaluate([[2.0, 3.0]], shock=1.5)
    assert np.allclose(p, 7.5) and np.allclose(pi, [[13.0, 19.5]])
    mb = Market(LogitDemand(2, 0, 0.25), cost=1.0, n_firms=2, model="bertrand")
    q1, _, _ = mb.evaluate([[1.5, 1.6]])
    q2, _, _ = mb.evaluate([[1.5, 1.6]], shock=0.8)
    assert np.allclose(q2, 0.8 * q1)


def test_owner_map_aggregates_profits_by_firm():
    m = Market(LogitDemand(2, 0, 0.25), cost=1.0, owner=[1, 2, 1], model="bertrand")
    ms = m.spec()
    assert (ms.n_products, ms.n_firms) == (3, 2)
    a = np.array([1.6, 1.5, 1.7])
    pi = m.profits(a)
    assert np.allclose(m.firm_profits(a), [pi[0] + pi[2], pi[1]])


@pytest.mark.parametrize(
    "kwargs, key, fragment",
    [
        (dict(demand=LinearDemand(10, -1), cost=1.0, n_firms=2), "market.slope", "(0, 1e+09]"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0, 12.0]), "market.cost", "choke price"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0, 10.0]), "market.cost", "at or above the choke"),
        (dict(demand=LinearDemand(10, 1), cost=1.0, n_firms=1), "market.n_firms", "[2, 1000]"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0]), "market.n_firms", "[2, 1000]"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0, 1.0], capacity=[-1.0, 2.0]), "market.capacity", "(0, 1e+09]"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0, 1.0], capacity=[1.0, 2.0, 3.0]), "market.capacity",
         "one value per firm"),
        (dict(demand=LinearDemand(10, 1), cost=[1.0, 1.0, 1.0], n_firms=2), "market.cost", "one value per firm (2)"),
        (dict(demand=LinearDemand(10, 1), cost=1.0, n_firms=2, model="stackelberg"), "market.model", "one of"),
        (dict(demand=LinearDemand(10, 1), cost=1.0, n_firms=2, model="bertrand", capacity=3.0), "market.capacity",
         "quantity (cournot) competition only"),
        (dict(demand=LogitDemand(), cost=1.0, n_firms=2, model="cournot"), "market.model", "supports bertrand"),
        (dict(demand=IsoelasticDemand(1, -2), cost=1.0, n_firms=2), "market.elasticity", "absolute value"),
        (dict(demand=IsoelasticDemand(1, 0.5), cost=1.0, n_firms=2), "market.elasticity", "(1, 100]"),
        (dict(demand=IsoelasticDemand(1, 2), cost=0.0, n_firms=2), "market.cost", "positive costs"),
        (dict(demand=DifferentiatedDemand(10, 1, 1.0), cost=1.0, n_firms=2, model="bertrand"),
         "market.substitution", "substitution < 1"),
        (dict(demand=DifferentiatedDemand(10, 1, 1.5), cost=1.0, n_firms=2), "market.substitution", "[0, 1]"),
        (dict(demand=LinearDemand(10, 1), cost=1.0, owner=[1, 1, 2]), "market.owner", "differentiated products"),
        (dict(demand=LogitDemand(), cost=1.0, owner=[1, 3], model="bertrand"), "market.owner", "without gaps"),
        (dict(demand="linear", cost=1.0, n_firms=2), "market.demand", "must be one of"),
        (dict(demand=LinearDemand(1e300, 1), cost=1.0, n_firms=2), "market.intercept", "(0, 1e+09]"),
        (dict(demand=LinearDemand(10, 1), cost=1.0, n_firms=100_000), "market.n_firms", "[2, 1000]"),
        (dict(demand=LogitDemand(quality=1e308), cost=1.0, n_firms=2, model="bertrand"), "market.quality",
         "[-1e+06, 1e+06]"),
        (dict(demand=IsoelasticDemand(1, 2), cost=1e-300, n_firms=2), "market.cost", "1e-6 of the scale"),
    ],
)
def test_bad_markets_name_the_field(kwargs, key, fragment):
    with pytest.raises(InputError) as err:
        Market(**kwargs).spec()
    assert err.value.key == key
    assert fragment in str(err.value)
    assert "\n" not in str(err.value)


def test_market_table_refuses_unknown_keys_and_builds_markets():
    with pytest.raises(InputError) as err:
        market_from_dict({"demand": "linear", "cost": 1.0, "n_firms": 2, "elasticity": 2.0})
    assert err.value.key == "market.elasticity"
    m = market_from_dict({"demand": "logit", "model": "bertrand", "quality": [2, 2], "cost": 1.0, "mu": 0.25})
    assert m.spec().n_firms == 2
    assert market_from_dict(m.to_dict()) == m


def test_spec_cache_is_dropped_when_a_parameter_changes():
    m = Market(LinearDemand(10, 1), cost=1.0, n_firms=2)
    assert m.spec().n_firms == 2
    m.set_params(n_firms=3)
    assert m.spec().n_firms == 3
    m.cost = 20.0
    with pytest.raises(InputError):
        m.spec()
