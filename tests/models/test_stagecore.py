"""The numba stage core against the numpy definitions of sim.models.demand / sim.models.market, for every
(demand, model) code, with and without multi-product firms; and the effective Bertrand tick."""

import numpy as np
import pytest

from sim import DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand, Market
from sim.models.codes import (
    CODE_DIFF_BERTRAND,
    CODE_DIFF_COURNOT,
    CODE_ISO_COURNOT,
    CODE_LINEAR_BERTRAND,
    CODE_LINEAR_COURNOT,
    CODE_LOGIT_BERTRAND,
)
from sim.models.stagecore import EFFECTIVE_TICK, effective_tick, evaluate_py, market_arrays

MARKETS = {
    "linear cournot": (Market(LinearDemand(100, 1.5), cost=[10, 12, 14], capacity=[40, 25, 60]), CODE_LINEAR_COURNOT),
    "linear bertrand": (Market(LinearDemand(100, 1.0, split=[1.0, 2.0, 1.0]), cost=[10, 10, 12], model="bertrand"),
                        CODE_LINEAR_BERTRAND),
    "differentiated cournot": (Market(DifferentiatedDemand([90, 100, 80], 1.0, 0.6), cost=[5, 10, 8]),
                               CODE_DIFF_COURNOT),
    "differentiated bertrand": (Market(DifferentiatedDemand([90, 100, 80], 1.0, 0.6), cost=[5, 10, 8],
                                       model="bertrand"), CODE_DIFF_BERTRAND),
    "logit bertrand": (Market(LogitDemand([2.0, 1.5, 1.0], 0.0, 0.25, 3.0), cost=1.0, model="bertrand", n_firms=3),
                       CODE_LOGIT_BERTRAND),
    "isoelastic cournot": (Market(IsoelasticDemand(50.0, 1.8), cost=[1.0, 1.5, 2.0], capacity=[30, 30, 5]),
                           CODE_ISO_COURNOT),
    "differentiated bertrand, owner map": (
        Market(DifferentiatedDemand([90, 100, 80, 95], 1.0, 0.5), cost=[5, 10, 8, 6], model="bertrand",
               owner=[1, 1, 2, 3]), CODE_DIFF_BERTRAND),
    "logit bertrand, owner map": (
        Market(LogitDemand([2.0, 1.5, 1.0], 0.0, 0.25, 1.0), cost=1.0, model="bertrand", owner=[1, 2, 2]),
        CODE_LOGIT_BERTRAND),
    "differentiated cournot, owner map": (
        Market(DifferentiatedDemand([90, 100, 80], 1.0, 0.6), cost=[5, 10, 8], owner=[1, 2, 1]), CODE_DIFF_COURNOT),
}


def _profiles(ms, rng, n=300):
    _lo, hi = ms.action_bounds()
    hi = np.where(np.isfinite(hi), hi, 100.0)
    A = rng.uniform(0, 1, (n, ms.n_products)) * (1.3 * hi)
    if ms.homogeneous_bertrand:
        # ties at the lowest price are where the sharing rule matters: draw from a coarse grid
        A = rng.choice(np.array([9.0, 11.0, 12.0, 30.0, 55.0, 101.0]), (n, ms.n_products))
    A[:5] = 0.0 if ms.quantity_setting else A[:5]
    return A


@pytest.mark.parametrize("name", list(MARKETS))
def test_evaluate_matches_market_spec(name, rng):
    """Same quantities, prices, firm profits and consumer surplus as MarketSpec.evaluate and
    sim.models.demand.consumer_surplus (the readable numpy definitions), on random profiles and shocks."""
    market, code = MARKETS[name]
    ms = market.spec()
    assert ms.code == code
    arr = market_arrays(ms)
    for a in _profiles(ms, rng):
        theta = float(rng.uniform(0.5, 1.5))
        q, p, pi, mp, cs = evaluate_py(arr, a, theta)
        q0, p0, pi0 = ms.evaluate(a[None, :], theta)
        np.testing.assert_allclose(q, q0[0], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(p, p0[0], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(pi, ms.firm_sum(pi0)[0], rtol=1e-11, atol=1e-9)
        cs0 = theta * float(ms.consumer_surplus(a[None, :])[0])
        np.testing.assert_allclose(cs, cs0, rtol=1e-11, atol=1e-9)
        assert np.isfinite(mp) or (code == CODE_ISO_COURNOT and q.sum() == 0)  # P(0) is infinite


def test_market_price_definitions():
    """Homogeneous goods: the trading price; differentiated products: the quantity-weighted mean."""
    ms = MARKETS["linear bertrand"][0].spec()
    _, _, _, mp, _ = evaluate_py(market_arrays(ms), [30.0, 20.0, 25.0])
    assert mp == 20.0
    ms = MARKETS["differentiated cournot"][0].spec()
    q, p, _, mp, _ = evaluate_py(market_arrays(ms), [10.0, 20.0, 5.0], 1.2)
    assert mp == pytest.approx(float((p * q).sum() / q.sum()), rel=1e-14)


def test_effective_tick_deviation_matches_analytic_supremum():
    """Homogeneous Bertrand with continuous prices: the analytic deviation profit is the supremum
    (p_C - c) D(p_C) of undercutting by an arbitrarily small amount (sim.models.market notes). The engine
    undercuts by the effective tick eps = 1e-9 x choke price, so the simulated deviation profit must
    fall short of the supremum by about eps * |D(p) - (p - c)/b| and no more than the order of the tick,
    while taking the whole market (a tie would halve it)."""
    from sim.simulation.engine import simulate
    from strategies import GrimTrigger, Opportunist

    a, b, c = 100.0, 1.0, 10.0
    m = Market(LinearDemand(a, b), cost=c, model="bertrand", n_firms=2)
    ms = m.spec()
    eps = effective_tick(ms)
    assert eps == EFFECTIVE_TICK * a
    res = simulate(m, [Opportunist(probability=1.0, start=0), GrimTrigger()], periods=3, replications=1,
                   delta=0.9, paths=1, baseline=False)
    sim_dev = float(res.paths["profits"][0, 0, 0])
    pc = (a + c) / 2.0  # joint-profit (monopoly) price
    analytic = (pc - c) * (a - pc) / b
    assert res.reference["deviation_profit"][0] == pytest.approx(analytic, rel=1e-12)
    expected_gap = eps * abs((a - pc) / b - (pc - c) / b) + eps * eps / b
    assert abs(analytic - sim_dev) <= expected_gap + 1e-9 * eps * analytic
    assert abs(analytic - sim_dev) <= 2 * eps * (a - pc) / b
    assert res.paths["profits"][0, 0, 1] == 0.0  # the undercut takes the whole market
