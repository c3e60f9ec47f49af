"""Estimators of sim.simulation.results against reference libraries and textbook examples."""

import math

import numpy as np
import pytest
from scipy import stats

from sim.core.stats import student_quantile
from sim.simulation.results import kaplan_meier, mean_estimate, normal_quantile, ratio_estimate, wilson_estimate

# Freireich et al. (1963) 6-MP arm, remission times in weeks ("+": cut off), the worked example of
# Klein and Moeschberger (2003), "Survival Analysis", section 4.2 (Table 4.1A).
SIX_MP = [(6, 1), (6, 1), (6, 1), (6, 0), (7, 1), (9, 0), (10, 1), (10, 0), (11, 0), (13, 1), (16, 1), (17, 0),
          (19, 0), (20, 0), (22, 1), (23, 1), (25, 0), (32, 0), (32, 0), (34, 0), (35, 0)]


def _hist(data, m=40):
    ended = np.zeros(m + 1, dtype=np.int64)
    cens = np.zeros(m + 1, dtype=np.int64)
    for t, event in data:
        (ended if event else cens)[t] += 1
    return ended, cens


def test_kaplan_meier_textbook_example():
    """Klein and Moeschberger (2003), Table 4.1A (from memory): S(6) = 0.857, S(7) = 0.807,
    S(10) = 0.753, S(13) = 0.690, S(16) = 0.627, S(22) = 0.538, S(23) = 0.448; Greenwood standard errors
    0.076, 0.087, 0.096, 0.107, 0.114, 0.128, 0.135."""
    sv = kaplan_meier(*_hist(SIX_MP))
    S = dict(zip(sv.lengths.tolist(), sv.survival.tolist()))
    for t, s in {6: 0.857, 7: 0.807, 10: 0.753, 13: 0.690, 16: 0.627, 22: 0.538, 23: 0.448}.items():
        assert S[t] == pytest.approx(s, abs=5e-4)
    se = dict(zip(sv.lengths.tolist(), sv.se.tolist()))
    for t, e in {6: 0.076, 7: 0.087, 10: 0.096, 13: 0.107, 16: 0.114, 22: 0.128, 23: 0.135}.items():
        assert se[t] == pytest.approx(e, abs=5e-4)


def test_kaplan_meier_matches_scipy(rng):
    """Survival curve and Greenwood band against scipy.stats.ecdf on censored data."""
    t = rng.geometric(0.1, 400)
    c = rng.integers(1, 40, 400)
    obs = np.minimum(t, c)
    event = t <= c
    ended = np.bincount(obs[event], minlength=41)
    cens = np.bincount(obs[~event], minlength=41)
    sv = kaplan_meier(ended, cens)
    res = stats.ecdf(stats.CensoredData(uncensored=obs[event], right=obs[~event]))
    ci = res.sf.confidence_interval(0.95, method="linear")
    lo = ci.low.evaluate(res.sf.quantiles)
    hi = ci.high.evaluate(res.sf.quantiles)
    for k, q in enumerate(res.sf.quantiles):
        i = int(q) - 1
        assert sv.survival[i] == pytest.approx(res.sf.probabilities[k], rel=1e-12)
        if 0 < res.sf.probabilities[k] < 1 and np.isfinite(lo[k]):
            assert sv.low[i] == pytest.approx(max(0.0, lo[k]), rel=1e-9, abs=1e-12)
            assert sv.high[i] == pytest.approx(min(1.0, hi[k]), rel=1e-9, abs=1e-12)


def test_restricted_mean_without_censoring_is_the_sample_mean(rng):
    """With nothing cut off the area under the Kaplan-Meier curve is the sample mean, and its
    Greenwood-type standard error is the usual s / sqrt(n) with the (n - 1) replaced by n
    (Klein and Moeschberger, 2003, section 4.5)."""
    x = rng.geometric(0.2, 500)
    sv = kaplan_meier(np.bincount(x), np.zeros(x.max() + 1, dtype=np.int64))
    assert sv.mean.value == pytest.approx(x.mean(), rel=1e-12)
    assert sv.mean.se == pytest.approx(x.std(ddof=0) / math.sqrt(x.size), rel=1e-9)
    assert sv.mean.note == "" and sv.survival[-1] == 0.0


@pytest.mark.parametrize("n", [2, 5, 50])
def test_mean_estimate_matches_scipy(rng, n):
    """Student's interval of a mean (Student, 1908, "The probable error of a mean", Biometrika 6) against
    scipy.stats.t.interval with n - 1 degrees of freedom."""
    x = rng.normal(3, 2, n)
    e = mean_estimate(x, 0.9)
    assert e.se == pytest.approx(stats.sem(x), rel=1e-12)
    lo, hi = stats.t.interval(0.9, n - 1, loc=x.mean(), scale=stats.sem(x))
    assert (e.low, e.high) == pytest.approx((lo, hi), rel=1e-12)


def test_student_quantile_table_values():
    """Two-sided 95 % quantiles of Student's t, as printed in any table of the distribution (e.g. Fisher and Yates,
    "Statistical Tables", from memory): 12.706 at 1 degree of freedom, 2.262 at 9, 2.010 at 49."""
    assert student_quantile(0.95, 2) == pytest.approx(12.706, abs=5e-4)
    assert student_quantile(0.95, 10) == pytest.approx(2.262, abs=5e-4)
    assert student_quantile(0.95, 50) == pytest.approx(2.010, abs=5e-4)
    assert student_quantile(0.95, 10**7) == pytest.approx(normal_quantile(0.95), rel=1e-6)


def test_mean_interval_coverage_with_few_values():
    """Fixed-seed coverage check with five normal values per mean: Student's 95 % interval covers the true mean in
    95 % of 4,000 repetitions (tolerance 3 binomial standard errors, about 1.0 percentage point), where the normal
    approximation +- z s / sqrt(n) would cover only about 88 % (P(|T_4| <= 1.96) = 0.879) -- the reason the package
    uses Student's t."""
    rng = np.random.default_rng(20261204)
    x = rng.normal(1.0, 3.0, (4000, 5))
    hits = 0
    for row in x:
        e = mean_estimate(row)
        hits += e.low <= 1.0 <= e.high
    assert abs(hits / 4000 - 0.95) < 3 * math.sqrt(0.95 * 0.05 / 4000)
    assert 2 * stats.t.cdf(normal_quantile(0.95), 4) - 1 < 0.9


def test_ratio_estimate_linearised_variance():
    """Ratio of totals with the linearised variance, Cochran (1977), "Sampling Techniques", (6.13):
    v(R) = sum (x_i - R y_i)^2 / (n (n - 1) ybar^2), on a small example worked by hand."""
    x = np.array([2.0, 3.0, 5.0, 6.0])
    y = np.array([4.0, 5.0, 9.0, 10.0])
    e = ratio_estimate(x, y)
    R = 16.0 / 28.0
    v = ((x - R * y) ** 2).sum() / (4 * 3 * 7.0**2)
    assert e.value == pytest.approx(R, rel=1e-15) and e.se == pytest.approx(math.sqrt(v), rel=1e-12)
    # equal denominators: the ratio is the mean of the per-replication shares
    y = np.full(4, 10.0)
    assert ratio_estimate(x, y).se == pytest.approx(stats.sem(x / 10.0), rel=1e-12)


@pytest.mark.slow
def test_ratio_interval_coverage(rng):
    """Fixed-seed coverage check: 95 % intervals of a ratio cover the true value in 95 % of 2,000
    repetitions, within 3 binomial standard errors (about 1.5 percentage points)."""
    hits = 0
    for _ in range(2000):
        y = rng.integers(50, 150, 200).astype(float)
        x = rng.binomial(y.astype(int), 0.3).astype(float)
        e = ratio_estimate(x, y)
        hits += e.low <= 0.3 <= e.high
    assert abs(hits / 2000 - 0.95) < 3 * math.sqrt(0.95 * 0.05 / 2000)


def test_no_interval_when_nothing_ended():
    """Every observation cut off by the horizon (a price war that never ends under grim trigger): the
    area under the curve is only a lower bound, so no interval is given (a zero-width one would read as
    certainty)."""
    ended = np.zeros(50, dtype=np.int64)
    cens = np.zeros(50, dtype=np.int64)
    cens[48] = 7
    sv = kaplan_meier(ended, cens)
    assert sv.mean.value == pytest.approx(48.0)
    assert math.isnan(sv.mean.se) and math.isnan(sv.mean.low) and math.isnan(sv.mean.high)
    assert sv.mean.note.startswith("at least")


def test_no_interval_for_a_war_that_never_ends():
    """Grim trigger after one cheat in period 0: one war of 50 periods per replication, all cut off by the
    horizon (so known to outlive 49)."""
    import strategies as S
    from sim import LinearDemand, Market
    from sim.simulation.engine import simulate

    m = Market(LinearDemand(100.0, 1.0), cost=10.0, n_firms=3)
    res = simulate(m, [S.Opportunist(), S.GrimTrigger(), S.GrimTrigger()], periods=50, replications=5, delta=0.9)
    w = res.metrics["war_length"]
    assert w.value == pytest.approx(49.0) and math.isnan(w.low) and w.note.startswith("at least")


@pytest.mark.parametrize("k, n", [(0, 20), (3, 20), (20, 20), (57, 100)])
@pytest.mark.parametrize("level", [0.9, 0.95])
def test_wilson_interval_matches_scipy(k, n, level):
    """Wilson (1927) score interval against scipy.stats.binomtest(...).proportion_ci(method="wilson")."""
    e = wilson_estimate(k, n, level)
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=level, method="wilson")
    assert e.value == k / n
    assert (e.low, e.high) == pytest.approx((ci.low, ci.high), rel=1e-12, abs=1e-15)


def test_normal_quantile():
    """z of a two-sided level: scipy.stats.norm.ppf(0.975) = 1.959963984540054 at 95 %."""
    assert normal_quantile(0.95) == pytest.approx(stats.norm.ppf(0.975), rel=1e-14)
    assert normal_quantile(0.9) == pytest.approx(stats.norm.ppf(0.95), rel=1e-14)
