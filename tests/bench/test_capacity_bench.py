"""The benchmark's vectorised logit model against the library path it stands for.

Reference: sim.theory.thresholds.critical_discount_factors on sim.models.market.Market with LogitDemand (and
sim.antitrust.merger.merge for the post-merger market) -- the library's own computation, itself tested against
published logit results; the fast path must give the same grim-trigger market thresholds.
"""

import numpy as np

from sim.bench.capacity import LOGIT_INPUTS, bench_partial_cartels, logit_merger_thresholds, logit_reference_thresholds


def test_vectorised_logit_thresholds_match_the_library():
    rng = np.random.default_rng(7)
    X = {k: rng.uniform(lo, hi, 3) for k, (lo, hi) in LOGIT_INPUTS.items()}
    fast = logit_merger_thresholds(X)
    for r in range(3):
        ref = logit_reference_thresholds({k: float(v[r]) for k, v in X.items()})
        for k in ("before", "after"):
            assert abs(fast[k][r] - ref[k]) < 1e-9


def test_partial_cartel_benchmark_runs():
    out = bench_partial_cartels(n_firms=4, repeats=1)
    assert out["n_cartels"] == 11 and out["seconds"] > 0


def test_partial_cartel_benchmark_agrees_with_its_plain_python_reference():
    out = bench_partial_cartels(n_firms=5, repeats=1)
    assert out["reference_agrees"] and out["n_cartels"] == 26
