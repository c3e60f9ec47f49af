"""Intervals that stay in their domain: shares in [0, 1], mean lengths in [1, the longest observation].

References: Wilson (1927), "Probable inference, the law of succession, and statistical inference", JASA 22(158)
(the score interval); Korn and Graubard (1998), "Confidence intervals for proportions with small expected number
of positive counts estimated from survey data", Survey Methodology 24(2) (Wilson at the effective sample size
p (1 - p) / se^2 of a complex-sample estimate); the log transformation of a Kaplan-Meier quantity (Klein and
Moeschberger, 2003, "Survival Analysis", chapter 4 -- from memory).
"""

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from sim.core.stats import kaplan_meier, ratio_estimate, share_estimate


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 50), st.integers(1, 50)), min_size=1, max_size=40),
       st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_a_share_interval_never_leaves_zero_one_and_holds_its_value(pairs, conf):
    y = np.array([b for _, b in pairs], dtype=float)
    x = np.array([min(a, b) for a, b in pairs], dtype=float)
    e = share_estimate(x, y, conf)
    assert 0.0 <= e.low <= e.value <= e.high <= 1.0
    r = ratio_estimate(x, y, conf)
    assert e.value == r.value and (e.se == r.se or (math.isnan(e.se) and math.isnan(r.se)))


def test_independent_periods_give_wilsons_interval():
    # one period per replication: the ratio is a plain proportion; the delta method gives se^2 = p (1 - p) / (n - 1),
    # so Korn and Graubard's effective size is n* = n - 1 and the interval is Wilson's formula at n*
    k, n = 37, 120
    x = np.r_[np.ones(k), np.zeros(n - k)]
    e = share_estimate(x, np.ones(n))
    p = k / n
    z = sps.norm.ppf(0.975)
    n_eff = n - 1
    den = 1 + z * z / n_eff
    mid = (p + z * z / (2 * n_eff)) / den
    h = z * math.sqrt(p * (1 - p) / n_eff + z * z / (4 * n_eff * n_eff)) / den
    assert abs(e.low - (mid - h)) < 1e-12 and abs(e.high - (mid + h)) < 1e-12


def test_a_share_at_the_end_has_an_interval_inside():
    # every replication colludes in every period: the normal interval has zero width at 1; the share's interval
    # is Wilson's at the number of replications: [n / (n + z^2), 1]
    n = 200
    e = share_estimate(np.full(n, 50.0), np.full(n, 50.0))
    z = sps.norm.ppf(0.975)
    assert e.value == 1.0 and e.high == 1.0 and abs(e.low - n / (n + z * z)) < 1e-12


def test_coverage_of_share_intervals_with_correlated_periods():
    # replications of 40 periods whose collusive share is itself random (Beta), so periods are correlated within
    # a replication; the nominal 95 % interval should cover the true mean share about 95 % of the time.
    # Tolerance: 1,000 repetitions give a binomial standard error of 0.7 points; +-2.5 points is over 3 SE.
    rng = np.random.default_rng(20261203)
    a, b, T, n, reps = 8.0, 2.0, 40, 30, 1000
    true = a / (a + b)
    cover = 0
    for _ in range(reps):
        p = rng.beta(a, b, n)
        x = rng.binomial(T, p).astype(float)
        e = share_estimate(x, np.full(n, float(T)))
        cover += e.low <= true <= e.high
    assert abs(cover / reps - 0.95) < 0.025


def test_mean_length_interval_stays_between_one_and_the_longest():
    # short spells, many censored: the normal interval of the restricted mean can fall below 1
    ended = np.zeros(6, dtype=np.int64)
    cens = np.zeros(6, dtype=np.int64)
    ended[1], ended[2], cens[5] = 5, 1, 1
    s = kaplan_meier(ended, cens)
    m = s.mean
    assert 1.0 <= m.low <= m.value <= m.high <= 5.0
    # on the log scale: the interval is the delta-method one for log(mean), exponentiated
    z = sps.norm.ppf(0.975)
    assert abs(m.low - max(1.0, m.value * math.exp(-z * m.se / m.value))) < 1e-12


@settings(max_examples=150, deadline=None)
@given(st.lists(st.integers(0, 20), min_size=2, max_size=12), st.lists(st.integers(0, 5), min_size=2, max_size=12))
def test_any_mean_length_interval_is_inside_its_range(ended, censored):
    L = max(len(ended), len(censored))
    d = np.zeros(L + 1, dtype=np.int64)
    c = np.zeros(L + 1, dtype=np.int64)
    d[1:len(ended) + 1] = ended
    c[1:len(censored) + 1] = censored
    s = kaplan_meier(d, c)
    m = s.mean
    if math.isfinite(m.low):
        assert 1.0 <= m.low <= m.value <= m.high <= s.lengths[-1]
