"""The pair-merger table and the maverick of a capacity market against the Compte-Jenny-Rey threshold worked by
hand."""

import numpy as np
import pytest

from sim.antitrust.screens import maverick, pair_thresholds
from sim.models.capacity_pricing import CapacityPricing


def test_merging_the_two_smallest_firms_leaves_the_threshold_where_it_was():
    """Compte, Jenny and Rey (2002), "Capacity constraints, mergers and collusion", European Economic Review 46(1):
    with inelastic demand M, total capacity K and the rivals of the largest firm unable to serve the market
    (K - k_1 < M), the grim-trigger threshold under shares proportional to capacity is the largest firm's share,
    delta* = k_1 / K (collusive alpha_i v M, deviation v k_i, static payoff p_low k_i with p_low = v (M - K + k_1)
    / k_1, so (pi_D - pi_C) / (pi_D - pi_N) = (1 - M / K) k_1 / (K - M) = k_1 / K).

    Capacities (50, 20, 15, 15), M = 80, v = 10: K = 100, K - k_1 = 50 < 80, so delta* = 0.5 before.
    * Firm 3 + Firm 4 (the two smallest, 30): the largest firm (50) and K are unchanged, K - k_1 = 50 < 80:
      delta* stays 0.5, a change of 0.
    * Firm 1 + Firm 2 (70): K - k_1 = 30 < 80, delta* = 0.7, a change of +0.2.
    * Firm 2 + Firm 3 (35 < 50): the largest firm is unchanged, delta* stays 0.5.
    Tolerance 5e-3: the static equilibria of three and four unequal firms are computed on a price grid.

    The maverick: without Firm 1 the others (50) cannot serve 80, every firm sells its capacity at the
    reservation price and no collusion is needed (threshold 0); without Firm 2 the others (50 + 15 + 15 = 80) do not
    exceed demand either (threshold 0). So Firms 1 and 2 raise the threshold by the same amount and the report names
    both, no single maverick; without Firm 3 (or 4) the others (85) exceed demand and collusion must be sustained."""
    m = CapacityPricing([50.0, 20.0, 15.0, 15.0], reservation_price=10.0, market_size=80.0,
                        names=["Firm 1", "Firm 2", "Firm 3", "Firm 4"])
    t = pair_thresholds(m)
    assert t.before == pytest.approx(0.5, abs=5e-3)
    assert t.after[2, 3] == pytest.approx(0.5, abs=5e-3)
    assert t.change[2, 3] == pytest.approx(0.0, abs=5e-3)
    assert t.after[0, 1] == pytest.approx(0.7, abs=5e-3)
    assert t.change[0, 1] == pytest.approx(0.2, abs=5e-3)
    assert t.after[1, 2] == pytest.approx(0.5, abs=5e-3)
    assert np.nanargmax(t.change) in (1, 4)  # the pair (Firm 1, Firm 2) either way round
    mv = maverick(m)
    assert mv.without[0] == mv.without[1] == 0.0 and mv.without[2] > 0.0
    assert "Firm 1 and Firm 2 each raise the threshold by the same" in mv.reason
