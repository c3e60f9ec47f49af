"""Intervals of the learning summary stay in their quantity's domain (:func:`sim.learning.results._mean_ci`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from sim.learning.results import _mean_ci


def test_a_mean_of_zero_one_values_is_a_share_with_the_wilson_interval():
    # Wilson (1927, JASA 22, "Probable inference, the law of succession, and statistical inference"): with no
    # successes in n trials the interval is [0, z^2 / (n + z^2)] (the closed form at k = 0).
    z = stats.norm.ppf(0.975)
    out = _mean_ci(np.zeros(40), 0.95, (0.0, 1.0))
    assert out["method"] == "wilson"
    assert out["low"] == 0.0
    assert math.isclose(out["high"], z * z / (40 + z * z), rel_tol=1e-12)
    # all ones: the mirror image
    out = _mean_ci(np.ones(40), 0.95, (0.0, 1.0))
    assert math.isclose(out["low"], 40 / (40 + z * z), rel_tol=1e-12) and out["high"] == 1.0
    # a mixture of 0 and 1: the general Wilson score interval, against its formula
    x = np.array([1.0] * 7 + [0.0] * 33)
    out = _mean_ci(x, 0.95, (0.0, 1.0))
    p, n = 7 / 40, 40
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    assert math.isclose(out["low"], centre - half, rel_tol=1e-10)
    assert math.isclose(out["high"], centre + half, rel_tol=1e-10)


def test_a_mean_of_fractions_keeps_student_t_within_zero_one():
    # per-session shares that are fractions: Student's t (scipy's t quantile), cut to [0, 1]
    x = np.array([0.0] * 38 + [0.5, 0.5])
    out = _mean_ci(x, 0.95, (0.0, 1.0))
    assert "method" not in out
    half = stats.t.ppf(0.975, 39) * x.std(ddof=1) / math.sqrt(40)
    assert out["low"] == 0.0 and x.mean() - half < 0.0
    assert math.isclose(out["high"], x.mean() + half, rel_tol=1e-10)


def test_a_mean_count_keeps_its_interval_at_or_above_zero():
    # periods to return: a count; the normal approximation alone would go below 0 (Student's t from scipy)
    x = np.array([0.0] * 37 + [1.0, 1.0, 2.0])
    half = stats.t.ppf(0.975, 39) * x.std(ddof=1) / math.sqrt(40)
    assert x.mean() - half < 0.0
    out = _mean_ci(x, 0.95, (0.0, math.inf))
    assert out["low"] == 0.0 and math.isclose(out["high"], x.mean() + half, rel_tol=1e-10)
