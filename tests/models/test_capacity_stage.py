"""The numba stage core of price competition with capacity constraints against its plain-Python twin, and the
tabulated draws from the mixed (Bertrand-Edgeworth) equilibrium against its closed form."""

import numpy as np
import pytest

from sim.models._capacity_core import DEMAND_CODES, RATIONING_CODES
from sim.models._capacity_reference import play_period
from sim.models.capacity_pricing import CapacityPricing
from sim.models.capacity_repeated import CapacityStageMarket
from sim.models.capacity_stage import MIXED_PRICE, N_QUANTILES, quantile_table
from sim.models.stagecore import evaluate_py

KILNS = CapacityPricing([40.0, 30.0, 20.0, 20.0, 10.0], reservation_price=140.0, market_size=100.0, cost=60.0)


def _twin(spec, weights, prices, theta):
    n = spec.n_firms
    q, pi, order = [0.0] * n, [0.0] * n, [0] * n
    status = play_period([float(x) for x in prices], [float(x) for x in spec.capacity], [float(x) for x in weights],
                         spec.cost, DEMAND_CODES[spec.demand], spec.reservation_price, spec.market_size * theta,
                         RATIONING_CODES[spec.rationing], order, q, pi)
    assert status == 0
    return np.array(q), np.array(pi)


@pytest.mark.parametrize("demand", ["inelastic", "linear"])
@pytest.mark.parametrize("rationing", ["efficient", "proportional"])
@pytest.mark.parametrize("rule", ["proportional", "equal"])
def test_compiled_stage_equals_plain_python_twin_bit_for_bit(demand, rationing, rule):
    """Same prices, same bits: sales and profits of the compiled core equal the plain-Python one-period play
    (ties drawn from a coarse grid, where the water filling among tied firms matters; shocks scale the market)."""
    market = KILNS.clone(demand=demand, rationing=rationing)
    cm = CapacityStageMarket(market, rule)
    rng = np.random.default_rng(5)
    for _ in range(300):
        p = rng.choice([65.0, 80.0, 100.0, 120.0, 139.0, 140.0, 150.0], market.n_firms)
        theta = float(rng.choice([1.0, 0.7, 1.3]))
        q, _, pi, _, _ = evaluate_py(cm.arrays, p, theta)
        q2, pi2 = _twin(cm.spec, cm.weights, p, theta)
        np.testing.assert_array_equal(q, q2)
        np.testing.assert_array_equal(pi, pi2)


def test_consumer_surplus_and_market_price_by_hand():
    """Inelastic demand (every unit worth the reservation price 140): at prices (100, 120, 130, 140, 140) the
    cheapest firms fill the basin's 100 in order of price: A 40 at 100, B 30 at 120, C 20 at 130, D and E share the
    last 10 by capacity (20 : 10). Worked by hand from the rationing rule (Kreps and Scheinkman, 1983)."""
    cm = CapacityStageMarket(KILNS)
    q, _, pi, mp, cs = evaluate_py(cm.arrays, np.array([100.0, 120.0, 130.0, 140.0, 140.0]))
    np.testing.assert_allclose(q, [40.0, 30.0, 20.0, 20.0 / 3.0, 10.0 / 3.0], rtol=1e-15)
    np.testing.assert_allclose(pi, [1600.0, 1800.0, 1400.0, 80.0 * 20 / 3, 80.0 * 10 / 3], rtol=1e-14)
    spend = 40 * 100 + 30 * 120 + 20 * 130 + 10 * 140
    assert mp == pytest.approx(spend / 100.0, rel=1e-14)
    assert cs == pytest.approx(140.0 * 100.0 - spend, rel=1e-14)


def test_quantile_draws_match_the_closed_form_duopoly():
    """Capacities 60 and 40, inelastic demand 80, reservation price 10, no cost: the mixed equilibrium has support
    [20/3, 10], the larger firm earning its residual-monopoly profit 10 * (80 - 40) = 400 and the smaller
    (20/3) * 40 (Deneckere and Kovenock, 1996, Economic Theory 8; Compte, Jenny and Rey, 2002, section 3). The
    tabulated quantiles reproduce the equilibrium's expected profits when each is played against the other's
    tabulated levels (exact over all 4096 x 4096 pairs), within 0.2 % (the discretisation)."""
    m = CapacityPricing([60.0, 40.0], reservation_price=10.0, market_size=80.0)
    cm = CapacityStageMarket(m)
    eq = cm.equilibrium
    assert eq.method == "closed_form"
    np.testing.assert_allclose(eq.payoffs, [400.0, 800.0 / 3.0], rtol=1e-9)
    table = quantile_table(eq)
    assert table.shape == (2, N_QUANTILES)
    assert table.min() >= 20.0 / 3.0 - 1e-9 and table.max() <= 10.0 + 1e-12
    sub = table[:, ::8]  # 512 x 512 pairs keep the test fast; the levels are equally likely
    P = np.stack(np.meshgrid(sub[0], sub[1], indexing="ij"), axis=-1).reshape(-1, 2)
    mean = m.profits(P).mean(axis=0)
    np.testing.assert_allclose(mean, eq.payoffs, rtol=2e-3)
    assert np.all(cm.profiles["nash"] == MIXED_PRICE)
