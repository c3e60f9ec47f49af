"""Concentration screens, pair thresholds and the maverick (sim.antitrust.screens).

Sources:
* HHI examples worked by hand (common practice, no source beyond the definition).
* EU Guidelines on the assessment of horizontal mergers (OJ C 31, 5.2.2004), paragraphs 19-21;
  US Merger Guidelines (2023), section 2.1 -- thresholds from memory, corroborated by the agencies'
  HHI page and a published summary of the EU guidelines (see the module notes).
* Compte, Jenny and Rey (2002), European Economic Review 46(1): with inelastic demand and the rivals
  of the largest firm unable to serve the market, the threshold is the largest capacity share.
"""

import json

import numpy as np
import pytest

from sim.antitrust.screens import (
    ConcentrationScreen,
    Maverick,
    PairTable,
    concentration_screen,
    hhi,
    hhi_change,
    maverick,
    pair_thresholds,
)
from sim.core.errors import InputError
from sim.models.capacity_pricing import CapacityPricing
from sim.models.demand import LinearDemand, LogitDemand
from sim.models.market import Market


def test_hhi_by_hand():
    """Shares 30, 30, 20, 20 %: 900 + 900 + 400 + 400 = 2600 (the agencies' own example). Merging
    the two 20 % firms: 2 * 20 * 20 = 800, post-merger 3400."""
    s = [0.3, 0.3, 0.2, 0.2]
    assert hhi(s) == pytest.approx(2600.0)
    assert hhi_change(s, [2, 3]) == pytest.approx(800.0)
    assert hhi([0.3, 0.3, 0.4]) == pytest.approx(3400.0)
    # three firms merging: 2 (s1 s2 + s1 s3 + s2 s3) = 2 (0.01 + 0.015 + 0.015) * 10000 = 800
    assert hhi_change([0.1, 0.1, 0.15, 0.65], [0, 1, 2]) == pytest.approx(800.0)


def test_eu_zones():
    """Paragraph 19: post-merger HHI below 1000. Paragraph 20: 1000-2000 with a change below 250;
    above 2000 with a change below 150. Shares of ten 10 % firms: HHI 1000; merging two: +200 ->
    1200, inside the second zone. Four 25 % firms: 2500, merging two: +1250, above the indicators."""
    ten = [0.1] * 10
    sc = concentration_screen(ten, [0, 1])
    assert sc.hhi_post == pytest.approx(1200.0) and sc.change == pytest.approx(200.0)
    assert sc.eu_zone == "1000-2000, change below 250" and sc.eu_safe_harbour
    twenty = [0.05] * 20
    assert concentration_screen(twenty, [0, 1]).eu_zone == "below 1000"
    big = concentration_screen([0.25] * 4, [0, 1])
    assert big.eu_zone == "above the indicators" and not big.eu_safe_harbour
    # above 2000 with a change of 2 * 0.08 * 0.08 * 10000 = 128 < 150 (pre 2824, post 2952)
    small = concentration_screen([0.4, 0.3, 0.08, 0.08, 0.14], [2, 3])
    assert small.hhi_post > 2000 and small.change == pytest.approx(128.0)
    assert small.eu_zone == "above 2000, change below 150"


def test_us_presumption():
    """Section 2.1: HHI above 1,800 and a change above 100; or a merged share above 30 % and a change
    above 100."""
    sc = concentration_screen([0.3, 0.3, 0.2, 0.2], [2, 3])
    assert sc.us_concentration == "highly concentrated" and sc.us_presumption
    # unconcentrated market, but a merged firm of 31 % with a change of 2 * 0.16 * 0.15 * 1e4 = 480
    spread = [0.16, 0.15] + [0.0345] * 20
    sc2 = concentration_screen(spread, [0, 1])
    assert sc2.hhi_post < 1800 and sc2.merged_share > 0.30 and sc2.us_presumption
    # a small change in a highly concentrated market: no presumption
    sc3 = concentration_screen([0.5, 0.45, 0.04, 0.01], [2, 3])
    assert sc3.change == pytest.approx(8.0) and not sc3.us_presumption
    back = ConcentrationScreen.from_dict(json.loads(json.dumps(sc.to_dict())))
    assert back == sc


def test_bad_shares():
    with pytest.raises(InputError) as err:
        hhi([0.6, 0.6])
    assert err.value.key == "shares"
    with pytest.raises(InputError) as err:
        hhi_change([0.5, 0.5], [0, 0])
    assert err.value.key == "merger.firms"


def test_pair_table_in_the_capacity_model():
    """Compte, Jenny and Rey (2002): four firms of 25, demand 70 at v = 10. Before: the rivals of any
    firm (75) cover the market, the static price is the cost and the threshold is 1 - M/K = 0.3.
    After any two merge, (50, 25, 25): the largest firm's rivals (50) no longer cover 70, and the
    threshold is its capacity share 50/100 = 0.5 -- worked by hand. (Tolerance 2e-3 after the merger:
    the static equilibrium of three unequal firms is computed on a price grid.)"""
    m = CapacityPricing([25.0] * 4, reservation_price=10.0, market_size=70.0)
    t = pair_thresholds(m)
    assert t.before == pytest.approx(0.3, abs=1e-12)
    off = ~np.eye(4, dtype=bool)
    np.testing.assert_allclose(t.after[off], 0.5, atol=2e-3)
    np.testing.assert_allclose(t.change[off], 0.2, atol=2e-3)
    assert t.binding_after[1][2] == "Firm 2 + Firm 3"
    assert np.all(np.isnan(np.diag(t.after)))
    back = PairTable.from_dict(json.loads(json.dumps(t.to_dict())))
    np.testing.assert_allclose(back.after, t.after, equal_nan=True)
    assert len(t.rows()) == 6


def test_pair_table_symmetric_cournot():
    """Symmetric linear Cournot: every merger of two of n firms leaves m = n - 1 symmetric firms,
    whose grim threshold is the textbook (m + 1)^2 / (m^2 + 6 m + 1) (e.g. Motta, 2004, ch. 4; from
    memory)."""
    n = 4
    t = pair_thresholds(Market(LinearDemand(10.0, 1.0), cost=1.0, n_firms=n))
    m_ = n - 1
    expected = (m_ + 1) ** 2 / (m_**2 + 6 * m_ + 1)
    off = ~np.eye(n, dtype=bool)
    np.testing.assert_allclose(t.after[off], expected, rtol=1e-9)
    assert t.before == pytest.approx((n + 1) ** 2 / (n**2 + 6 * n + 1), rel=1e-9)


def test_maverick_low_cost_firm():
    """Linear Cournot with one low-cost firm: without it the others are symmetric and collude more
    easily; its presence raises the threshold most, and the reason is its cost."""
    m = Market(LinearDemand(20.0, 1.0), cost=[1.0, 3.0, 3.0, 3.0])
    mv = maverick(m)
    assert mv.firm == 0
    assert "cost 1" in mv.reason and "lowest" in mv.reason
    back = Maverick.from_dict(json.loads(json.dumps(mv.to_dict())))
    assert back.firm == mv.firm and back.reason == mv.reason


def test_maverick_product_position_and_capacity():
    logit = Market(LogitDemand([2.0, 2.0, 2.6, 2.0], 0.0, 0.25), cost=1.0, model="bertrand")
    mv = maverick(logit)
    assert mv.firm == 2 and "product position" in mv.reason
    cap = CapacityPricing([60.0, 20.0, 20.0, 20.0], reservation_price=10.0, market_size=90.0)
    mv2 = maverick(cap)
    # without the large firm the three 20s do not cover demand: no collusion needed (threshold 0); without one of
    # the small firms the other three (100) still exceed demand (90), so the large firm alone stands out
    assert mv2.firm == 0 and "capacity 60" in mv2.reason
    assert mv2.without[0] == 0.0 and np.all(mv2.without[1:] > 0.0)


def test_identical_firms_have_no_maverick():
    """Three identical linear Cournot firms: removing any one gives the same duopoly (threshold 9/17 instead of 4/7,
    Friedman, 1971), so every firm's presence raises the threshold alike and none is named."""
    mv = maverick(Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3))
    assert mv.firm == -1 and "no firm stands out" in mv.reason
    assert np.allclose(mv.presence, 4 / 7 - 9 / 17, rtol=1e-9)
