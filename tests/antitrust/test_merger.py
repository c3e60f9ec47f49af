"""Post-merger markets: the n-firm Cournot threshold formula, logit merger simulation against the
Werden-Froeb equations solved independently with scipy, homogeneous-good mergers (costs,
capacities, shares), HHI arithmetic, and validation of the merger table."""

import numpy as np
import pytest
from scipy import optimize

import sim
from sim import InputError, IsoelasticDemand, LinearDemand, LogitDemand, Market
from sim.antitrust.calibration import MarketData, calibrate
from sim.antitrust.merger import Merger, hhi, merge, merger_from_dict


def _grim(m) -> float:
    return sim.critical_discount_factors(m, punishments=()).grim.market


@pytest.mark.parametrize("n", [3, 4, 6])
def test_symmetric_linear_cournot_merger_to_n_minus_one(n):
    """Four (n) symmetric Cournot firms with linear demand merging two into one, no efficiencies:
    the grim-trigger threshold moves from (n+1)^2/(n^2+6n+1) to the same formula at n-1, e.g. from
    25/41 to 4/7 for four firms (Friedman, 1971; the n-firm form as in Vives, 1999, Oligopoly
    Pricing, ch. 9 -- from memory)."""
    f = lambda k: (k + 1) ** 2 / (k * k + 6 * k + 1)  # noqa: E731
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=n)
    r = merge(m, Merger([1, 2]))
    assert r.post.spec().n_firms == n - 1
    assert _grim(m) == pytest.approx(f(n), rel=1e-12)
    assert _grim(r.post) == pytest.approx(f(n - 1), rel=1e-12)
    if n == 4:
        assert _grim(m) == pytest.approx(25 / 41, rel=1e-12) and _grim(r.post) == pytest.approx(4 / 7, rel=1e-12)
    # Cournot price with k symmetric firms: (a + k c) / (k + 1)
    assert r.price_changes()[0]["pre"] == pytest.approx((100 + n * 10) / (n + 1), rel=1e-12)
    assert r.price_changes()[0]["post"] == pytest.approx((100 + (n - 1) * 10) / n, rel=1e-12)


def _werden_froeb_prices(p0, s, cost, alpha, owner, size=1.0):
    """Independent logit merger simulation: qualities from the data (a_j = p_j + (ln s_j - ln s_0)
    / alpha), then the Bertrand first-order conditions with an ownership matrix Omega,
    s + (Omega * Delta)(p - c) = 0 with Delta_jk = ds_k / dp_j (logit: -alpha s_j (1 - s_j) on the
    diagonal, alpha s_j s_k off it), solved by scipy's hybrid Powell method (Werden and Froeb, 1994)."""
    s0 = 1 - s.sum()
    a = p0 + (np.log(s) - np.log(s0)) / alpha
    O = (owner[:, None] == owner[None, :]).astype(float)

    def shares(p):
        e = np.exp(alpha * (a - p))
        return e / (1.0 + e.sum())

    def foc(p):
        sh = shares(p)
        D = alpha * np.outer(sh, sh)
        D[np.diag_indices_from(D)] = -alpha * sh * (1 - sh)
        return sh + (O * D) @ (p - cost)

    res = optimize.root(foc, p0, method="hybr", tol=1e-14)
    assert res.success
    return res.x, shares(res.x)


@pytest.mark.parametrize("merging", [[2, 4], [1, 2], [1, 2, 3]])
def test_logit_merger_matches_independent_werden_froeb_solution(merging):
    """Calibrate from prices, shares and one margin, merge, and compare the post-merger static
    Nash prices and shares with the Werden-Froeb equations solved independently (scipy root finder,
    tolerance 1e-9)."""
    p = np.array([4.2, 3.9, 4.6, 3.7])
    s = np.array([0.22, 0.18, 0.12, 0.10])
    margin = 0.35
    cal = calibrate(MarketData("logit", prices=p.tolist(), shares=s.tolist(), size=50000.0, margin=margin))
    alpha = 1 / (margin * p[0] * (1 - s[0]))  # Werden and Froeb's calibration from one margin
    cost = p - 1 / (alpha * (1 - s))
    np.testing.assert_allclose(cal.costs, cost, rtol=1e-12)
    r = merge(cal.market, Merger(merging))
    owner = np.arange(4)
    owner[[f - 1 for f in merging]] = merging[0] - 1
    p1, s1 = _werden_froeb_prices(p, s, cost, alpha, owner)
    np.testing.assert_allclose(r.post_nash.prices, p1, rtol=1e-9)
    np.testing.assert_allclose(np.asarray(r.post_nash.quantities) / 50000.0, s1, rtol=1e-9)
    # the merging firms raise their prices the most (Werden and Froeb, 1994)
    ch = np.array([x["change"] for x in r.price_changes()])
    inside = np.isin(np.arange(4), [f - 1 for f in merging])
    assert ch[inside].min() > ch[~inside].max() > 0


def test_logit_merger_with_efficiency_scales_the_merged_costs():
    m = Market(LogitDemand(quality=[2.0, 2.2, 1.8], mu=0.25, size=10.0), cost=[1.0, 1.1, 0.9], model="bertrand")
    r = merge(m, Merger([1, 3], efficiency=0.1))
    np.testing.assert_allclose(r.post.spec().cost, [0.9, 1.1, 0.81])
    assert r.post.owner == [1, 2, 1] and r.names_post == ["Firm 1 + Firm 3", "Firm 2"]
    r2 = merge(m, Merger([1, 3], cost=[0.5, 0.6]))
    np.testing.assert_allclose(r2.post.spec().cost, [0.5, 1.1, 0.6])


def test_homogeneous_merger_lower_cost_summed_capacity_and_note():
    m = Market(LinearDemand(100, 1), cost=[10, 12, 14], capacity=[20, 30, 40])
    r = merge(m, Merger([1, 2], names=["A", "B", "C"]))
    ps = r.post.spec()
    np.testing.assert_allclose(ps.cost, [10, 14])
    np.testing.assert_allclose(ps.capacity, [50, 40])
    assert r.names_post == ["A + B", "C"] and r.firm_map.tolist() == [0, 0, 1] and r.merged == 0
    assert any("above the capacity 20" in n for n in r.notes)
    eff = merge(m, Merger(["B", "C"], efficiency=0.5, names=["A", "B", "C"]))
    np.testing.assert_allclose(eff.post.spec().cost, [10, 6])
    assert eff.names_post == ["A", "B + C"]


def test_homogeneous_bertrand_merger_sums_tie_weights():
    m = Market(LinearDemand(10, 1, split=[0.5, 0.3, 0.1, 0.1]), cost=2.0, n_firms=4, model="bertrand")
    r = merge(m, Merger([3, 4]))
    np.testing.assert_allclose(r.post.spec().demand.vector, [0.5, 0.3, 0.2])
    np.testing.assert_allclose(r.shares_post, [0.5, 0.3, 0.2])
    # HHI of the static-Nash shares and the change at pre-merger shares, 2 s_i s_j x 10^4 (U.S.
    # Horizontal Merger Guidelines, 2010, section 5.3 -- from memory)
    assert r.hhi_pre == pytest.approx(10_000 * (0.25 + 0.09 + 0.01 + 0.01))
    assert r.hhi_post == pytest.approx(10_000 * (0.25 + 0.09 + 0.04))
    assert r.naive_delta_hhi == pytest.approx(2 * 0.1 * 0.1 * 10_000) == pytest.approx(r.delta_hhi)


def test_isoelastic_merger_thresholds_are_computed():
    """A merged isoelastic Cournot market whose stick-and-carrot search meets a rival output that
    prices a firm exactly at its cost (a best-response bracket that rounding leaves empty)."""
    cal = calibrate(MarketData("isoelastic", prices=10.0, quantities=[30.0, 20.0, 10.0], market_elasticity=-1.5))
    r = merge(cal.market, Merger([2, 3]))
    rep = sim.critical_discount_factors(r.post, punishments=(2,))
    assert rep.stick_carrot.per_firm.shape == (2,)


def test_hhi():
    assert hhi([0.5, 0.5]) == 5000.0 and hhi([1.0]) == 10_000.0


@pytest.mark.parametrize("table, key, words", [
    ({"firms": [1, 5]}, "merger.firms", "firm 5 does not exist"),
    ({"firms": [1]}, "merger.firms", "two or more"),
    ({"firms": [1, 1]}, "merger.firms", "listed twice"),
    ({"firms": [1, 2, 3, 4]}, "merger.firms", "monopoly"),
    ({"firms": ["A", "Z"], "names": ["A", "B", "C", "D"]}, "merger.firms", "no firm is named 'Z'"),
    ({"firms": [1, 2], "names": ["A", "B"]}, "merger.names", "every firm (4)"),
    ({"firms": [1, 2], "efficiency": 1.0}, "merger.efficiency", "[0, 1)"),
    ({"firms": [1, 2], "efficiency": 0.1, "cost": 5.0}, "merger.cost", "not both"),
    ({"firms": [1, 2], "cost": [1.0, 2.0]}, "merger.cost", "one marginal cost"),
    ({"firms": [1, 2], "partner": 3}, "merger.partner", "unknown key"),
    ({}, "merger.firms", "missing"),
])
def test_bad_mergers_raise_naming_the_field(table, key, words):
    m = Market(LinearDemand(100, 1), cost=10.0, n_firms=4)
    with pytest.raises(InputError) as err:
        merge(m, merger_from_dict(table))
    assert err.value.key == key and words in err.value.message


def test_isoelastic_merger_keeps_demand():
    m = Market(IsoelasticDemand(50, 2.0), cost=[1.0, 1.5, 2.0])
    r = merge(m, Merger([2, 3]))
    assert r.post.demand == m.demand and r.post.demand is not m.demand
    np.testing.assert_allclose(r.post.spec().cost, [1.0, 1.5])


def test_merger_note_names_the_actions_of_the_model():
    """A merged firm sets the prices of its products under price competition and their quantities
    under quantity competition (differentiated Cournot)."""
    d = sim.DifferentiatedDemand(intercept=[100.0, 90.0, 95.0], slope=1.0, substitution=0.5)
    cournot = merge(Market(d, cost=10.0, model="cournot"), Merger([1, 2]))
    assert any("sets the quantities of its 2 products jointly" in n for n in cournot.notes)
    assert not any("prices" in n for n in cournot.notes)
    bertrand = merge(Market(d, cost=10.0, model="bertrand"), Merger([1, 2]))
    assert any("sets the prices of its 2 products jointly" in n for n in bertrand.notes)


def test_difference_reports_rounding_residue_as_zero():
    """Differences of computed numbers within a few thousand units in the last place of their
    magnitude are rounding, reported as 0 (-1.554e-15 = 0.9999999999999984 - 1 was printed as a
    change); real differences, however small against the numbers' own precision, are kept."""
    from sim.antitrust.merger import difference

    assert difference(0.9999999999999984, 1.0) == 0.0
    assert difference(1e6 + 1e-7, 1e6) == 0.0
    assert difference(1.0 + 1e-9, 1.0) == pytest.approx(1e-9)
    assert difference(0.3, 0.1) == pytest.approx(0.2)
    assert np.isnan(difference(np.nan, 1.0))
    # equal prices before and after: a price change of exactly 0
    m = Market(LinearDemand(10, 1, split=[0.5, 0.3, 0.1, 0.1]), cost=2.0, n_firms=4, model="bertrand")
    assert merge(m, Merger([3, 4])).price_changes()[0]["change"] == 0.0
