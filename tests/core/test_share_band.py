"""The pointwise band around a share of replications: the Wilson score interval of each point, against scipy's
``binomtest(k, n).proportion_ci(method="wilson")`` (Wilson, 1927, "Probable inference, the law of succession, and
statistical inference", JASA 22(158); scipy as the reference implementation)."""

import math

import numpy as np
import pytest
from scipy.stats import binomtest

from sim.core.stats import wilson_band


@pytest.mark.parametrize("n", [1, 7, 24, 400])
def test_each_point_is_the_wilson_interval_of_its_count(n):
    k = np.arange(n + 1)
    low, high = wilson_band(k / n, n)
    for j in range(n + 1):
        ref = binomtest(int(k[j]), n).proportion_ci(confidence_level=0.95, method="wilson")
        assert low[j] == pytest.approx(ref.low, abs=1e-12) and high[j] == pytest.approx(ref.high, abs=1e-12)
    # exact ends, in the domain everywhere
    assert low[0] == 0.0 and high[-1] == 1.0 and np.all((0 <= low) & (low <= k / n) & (k / n <= high) & (high <= 1))


def test_a_missing_share_has_no_interval():
    low, high = wilson_band([0.5, math.nan], 10)
    assert np.isfinite(low[0]) and math.isnan(low[1]) and math.isnan(high[1])
