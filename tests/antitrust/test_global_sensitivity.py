"""Global sensitivity (sim.antitrust.global_sensitivity).

Sources:
* Ishigami and Homma (1990), "An importance quantification technique in uncertainty analysis for
  computer models", ISUMA '90: the function sin x1 + a sin^2 x2 + b x3^4 sin x1 on [-pi, pi]^3 and
  its analytic variance decomposition (also tabulated in the SALib documentation and in Saltelli et
  al., 2008, "Global Sensitivity Analysis: The Primer"): with a = 7, b = 0.1,
  V = a^2/8 + b pi^4/5 + b^2 pi^8/18 + 1/2, V1 = (1 + b pi^4/5)^2 / 2, V2 = a^2/8, V3 = 0,
  V13 = b^2 pi^8 (1/18 - 1/50).
* Linear Cournot grim-trigger thresholds: profits scale with 1/slope, so the threshold does not
  depend on the slope at all (its total Sobol index is zero); with equal costs it is the textbook
  (n+1)^2 / (n^2 + 6n + 1).
* Morris (1991), Technometrics 33(2): for a linear function the elementary effects are the
  coefficients times the input ranges.
"""

import json
import math

import numpy as np
import pytest

from sim.antitrust.global_sensitivity import (
    MorrisResult,
    ShareResult,
    SobolResult,
    morris_screening,
    share_easier,
    sobol_indices,
    uncertain_inputs,
)
from sim.core.errors import InputError, SolverError
from sim.models.demand import LinearDemand
from sim.models.market import Market
from sim.theory.equilibrium import stage_game
from sim.theory.thresholds import grim_threshold

A, B = 7.0, 0.1
V = A**2 / 8 + B * math.pi**4 / 5 + B**2 * math.pi**8 / 18 + 0.5
V1 = 0.5 * (1 + B * math.pi**4 / 5) ** 2
V2 = A**2 / 8
V13 = B**2 * math.pi**8 * (1 / 18 - 1 / 50)
ISHIGAMI_FIRST = np.array([V1, V2, 0.0]) / V
ISHIGAMI_TOTAL = np.array([V1 + V13, V2, V13]) / V
PI_RANGE = {k: (-math.pi, math.pi) for k in ("x1", "x2", "x3")}


def ishigami(X):
    return {"y": np.sin(X["x1"]) + A * np.sin(X["x2"]) ** 2 + B * X["x3"] ** 4 * np.sin(X["x1"])}


def ishigami_scalar(x):
    return math.sin(x["x1"]) + A * math.sin(x["x2"]) ** 2 + B * x["x3"] ** 4 * math.sin(x["x1"])


def test_ishigami_sobol_indices():
    """Fixed seed, 4,096 base samples. Tolerance: the analytic values lie inside the reported 95 %
    bootstrap intervals widened by half (the intervals are normal approximations of a resampling
    distribution) and within 0.05 of the estimates (about three times the intervals' half-width at
    this sample size)."""
    r = sobol_indices(ishigami, PI_RANGE, n_base=4096, seed=11, vectorized=True)
    for est, lo, hi, truth in ((r.first["y"], r.first_low["y"], r.first_high["y"], ISHIGAMI_FIRST),
                               (r.total["y"], r.total_low["y"], r.total_high["y"], ISHIGAMI_TOTAL)):
        half = 1.5 * (hi - lo) / 2
        assert np.all(np.abs(est - truth) <= half)
        assert np.all(np.abs(est - truth) < 0.05)
    assert r.n_evaluations == 4096 * 5
    back = SobolResult.from_dict(json.loads(json.dumps(r.to_dict())))
    np.testing.assert_array_equal(back.total["y"], r.total["y"])


def test_same_seed_same_numbers_whatever_the_workers():
    a = sobol_indices(ishigami_scalar, PI_RANGE, n_base=256, seed=5, workers=1)
    b = sobol_indices(ishigami_scalar, PI_RANGE, n_base=256, seed=5, workers=2)
    c = sobol_indices(ishigami, PI_RANGE, n_base=256, seed=5, vectorized=True)
    for k in ("first", "total", "first_low", "total_high"):
        np.testing.assert_array_equal(getattr(a, k)["output"], getattr(b, k)["output"])
        np.testing.assert_allclose(getattr(a, k)["output"], getattr(c, k)["y"], rtol=1e-12, atol=1e-12)
    d = sobol_indices(ishigami, PI_RANGE, n_base=256, seed=6, vectorized=True)
    assert not np.array_equal(d.first["y"], c.first["y"])


def cournot_threshold(x):
    """Grim-trigger threshold of a three-firm linear Cournot market (quotas proportional to the
    static Nash quantities), by the library's stage game."""
    m = Market(LinearDemand(x["intercept"], x["slope"]), cost=[x["cost"], x["cost"] + x["gap"], x["cost"] + x["gap"]])
    st = stage_game(m, "proportional")
    per = grim_threshold(st.collusive.firm_profits, st.deviation_profits, st.nash.firm_profits)
    return {"threshold": 1.0 if np.isnan(per).any() else float(per.max())}


def test_cournot_threshold_does_not_depend_on_the_slope():
    inputs = {"intercept": (80.0, 120.0), "slope": (0.5, 2.0), "cost": (5.0, 15.0), "gap": (0.0, 10.0)}
    r = sobol_indices(cournot_threshold, inputs, n_base=64, seed=3, workers=2)
    slope = r.inputs.index("slope")
    assert abs(r.total["threshold"][slope]) < 1e-8
    assert abs(r.first["threshold"][slope]) < 1e-8
    gap = r.inputs.index("gap")
    assert r.total["threshold"][gap] > 0.3  # the cost gap drives the threshold
    # equal costs: the textbook symmetric threshold
    sym = cournot_threshold({"intercept": 100.0, "slope": 1.3, "cost": 10.0, "gap": 0.0})["threshold"]
    assert sym == pytest.approx(16 / 28, rel=1e-9)


def test_morris_on_a_linear_function():
    def f(X):
        return {"y": 3.0 * X["a"] + 1.0 * X["b"] + 0.0 * X["c"]}

    r = morris_screening(f, {"a": (0.0, 1.0), "b": (0.0, 1.0), "c": (0.0, 1.0)}, n_trajectories=10, seed=1,
                         vectorized=True)
    np.testing.assert_allclose(r.mu_star["y"], [3.0, 1.0, 0.0], atol=1e-9)
    np.testing.assert_allclose(r.sigma["y"], [0.0, 0.0, 0.0], atol=1e-9)
    assert r.ranking("y") == ["a", "b", "c"]
    back = MorrisResult.from_dict(json.loads(json.dumps(r.to_dict())))
    np.testing.assert_array_equal(back.mu_star["y"], r.mu_star["y"])


def test_share_easier():
    """before, after independent uniforms: P(after < before) = 1/2. Fixed seed, 4,000 draws; the
    95 % Wilson interval is about +-0.016 wide, so it must contain 0.5 (a failure here has a 5 %
    chance for an arbitrary seed; this seed is fixed)."""
    def f(X):
        return {"before": X["u"], "after": X["w"]}

    r = share_easier(f, {"u": (0.0, 1.0), "w": (0.0, 1.0)}, n_draws=4000, seed=2, vectorized=True)
    assert r.low <= 0.5 <= r.high and r.high - r.low < 0.04
    assert ShareResult.from_dict(json.loads(json.dumps(r.to_dict()))) == r
    always = share_easier(lambda X: {"before": X["u"] + 1.0, "after": X["u"]}, {"u": (0.0, 1.0)}, n_draws=50,
                          vectorized=True)
    assert always.share == 1.0 and always.high == 1.0


def test_distributions_map_the_unit_cube():
    """Means of 20,000 plain draws: triangular (0, 1, 4) has mean 5/3; a normal truncated to
    mean +- 2 sd keeps its mean; lognormal median 2 and sigma 0.5 has mean 2 exp(0.125). Tolerance:
    five standard errors of the mean."""
    inp = uncertain_inputs({"t": {"distribution": "triangular", "low": 0.0, "mode": 1.0, "high": 4.0},
                            "n": {"distribution": "normal", "mean": 3.0, "sd": 1.0, "low": 1.0, "high": 5.0},
                            "l": {"distribution": "lognormal", "median": 2.0, "sigma": 0.5}})
    u = np.random.default_rng(0).random(20_000)
    for i, mean in zip(inp, (5 / 3, 3.0, 2.0 * math.exp(0.125))):
        x = i.ppf(u)
        assert abs(x.mean() - mean) < 5 * x.std() / math.sqrt(u.size)
    assert inp[1].ppf(np.array([0.0, 1.0])).tolist() == [1.0, 5.0]


@pytest.mark.parametrize("inputs,key", [
    ({"margin": (0.4, 0.4)}, "sensitivity.margin"),
    ({"margin": (0.5, 0.2)}, "sensitivity.margin"),
    ({"margin": {"distribution": "beta", "low": 0.0, "high": 1.0}}, "sensitivity.margin.distribution"),
    ({"margin": {"distribution": "triangular", "low": 0.0, "mode": 2.0, "high": 1.0}}, "sensitivity.margin.mode"),
    ({"margin": {"distribution": "normal", "mean": 0.0, "sd": 0.0, "low": -1.0, "high": 1.0}},
     "sensitivity.margin.sd"),
    ({"margin": {"low": 0.0, "hi": 1.0}}, "sensitivity.margin.hi"),
    ({}, "sensitivity"),
])
def test_bad_inputs(inputs, key):
    with pytest.raises(InputError) as err:
        sobol_indices(ishigami, inputs, n_base=8)
    assert err.value.key == key


def test_bad_settings_and_outputs():
    with pytest.raises(InputError) as err:
        sobol_indices(ishigami, PI_RANGE, n_base=100)
    assert err.value.key == "sensitivity.n_base"
    with pytest.raises(InputError) as err:
        sobol_indices(ishigami, PI_RANGE, n_base=8, seed=-1)
    assert err.value.key == "sensitivity.seed"
    with pytest.raises(SolverError):
        sobol_indices(lambda X: {"y": np.full(X["x1"].size, np.nan)}, PI_RANGE, n_base=8, vectorized=True)
