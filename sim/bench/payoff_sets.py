"""Benchmarks of the equilibrium payoff sets (:mod:`sim.theory.payoff_sets`).

Targets (from the plan of this analysis): two firms with 30 actions each in under 10 s; three firms
with 12 actions each and 64 directions in under 60 s on one core. Each benchmark also times a
reference in the same run, so that the figure does not depend on the machine alone:

* two firms: QuantEcon's implementation of the Abreu and Sannikov (2014) algorithm
  (``quantecon.game_theory.RepeatedGame.equilibrium_payoffs(method="AS")``) on the same game, when
  QuantEcon is installed, with the Hausdorff distance between its set and ours;
* three firms: one step of the outer approximation written the direct way, one HiGHS linear
  programme per (profile, direction) pair (:func:`scipy.optimize.linprog`), timed on a sample of
  pairs and scaled to a whole step, with the largest difference between its values and ours.

The markets are invented (linear demand, constant costs).
"""

from __future__ import annotations

import math
import time

import numpy as np
from scipy.optimize import linprog

from ..models.demand import LinearDemand
from ..models.market import Market
from ..theory.discretize import discretize
from ..theory.payoff_sets import continuation_support, equilibrium_payoffs, hausdorff_distance

__all__ = ["bench_three_firms", "bench_two_firms", "payoff_sets_benchmark"]


def _market(n_firms: int):
    costs = {2: [10.0, 14.0], 3: [10.0, 12.0, 14.0]}[n_firms]
    return Market(LinearDemand(100.0, 1.0), cost=costs)


def _best_of(repeat, fn):
    best, out = math.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def _quantecon_set(game, delta):
    """QuantEcon's Abreu-Sannikov set for a two-player grid game (None if QuantEcon is missing)."""
    try:
        import quantecon.game_theory as gt
    except ImportError:
        return None
    P = game.payoffs
    g = gt.NormalFormGame((gt.Player(P[:, :, 0]), gt.Player(P[:, :, 1].T)))
    hull = gt.RepeatedGame(g, delta).equilibrium_payoffs(method="AS", options={"tol": 1e-10})
    return hull.points[hull.vertices]


def bench_two_firms(n_actions: int = 30, deltas=(0.5, 0.7, 0.9), repeat: int = 1) -> dict:
    """Time the exact two-firm payoff set of an invented Cournot duopoly.

    Parameters
    ----------
    n_actions : int
        Actions per firm.
    deltas : sequence of float
        Discount factors timed.
    repeat : int
        Best of this many runs.

    Returns
    -------
    dict
        Seconds, accuracy and iteration counts per discount factor, the reference's seconds and
        distance, and whether the target (every discount factor under 10 s) is met.
    """
    game = discretize(_market(2), n_actions)
    rows = {}
    for d in deltas:
        sec, res = _best_of(repeat, lambda d=d: equilibrium_payoffs(game, d))
        row = {"seconds": sec, "accuracy": res.accuracy, "outer_iterations": res.outer_iterations,
               "inner_iterations": res.inner_iterations, "vertices": int(res.outer_vertices.shape[0])}
        _quantecon_set(game, d)  # first call compiles QuantEcon's numba code; not timed
        ref_sec, ref = _best_of(repeat, lambda d=d: _quantecon_set(game, d))
        if ref is None:
            row["reference"] = "quantecon not installed"
        else:
            row["reference_seconds"] = ref_sec
            row["ratio_reference_to_ours"] = ref_sec / sec
            row["distance_to_reference"] = hausdorff_distance(ref, res.outer_vertices)
        rows[f"delta {d:g}"] = row
    slowest = max(r["seconds"] for r in rows.values())
    return {"workload": f"payoff set of a Cournot duopoly, {n_actions} actions per firm, exact method",
            **rows, "slowest seconds": slowest, "targets": {"every delta under 10 s": slowest < 10.0}}


def _lp_reference(game, delta, D, levels, P, sample: int, rng):
    """One HiGHS programme per sampled (profile, direction): max h.w over the outer set with the
    incentive constraints as lower bounds. Returns seconds per programme, the largest gap to the
    vectorised values on the same pairs and whether both find the same pairs feasible."""
    gains = game.deviation_gains
    u = P.min(axis=0)
    b = u[None, :] + (1 - delta) / delta * gains
    pairs = np.stack([rng.integers(0, gains.shape[0], sample), rng.integers(0, D.shape[0], sample)], axis=1)
    t0 = time.perf_counter()
    lp = np.full(sample, -np.inf)
    for q, (a, l) in enumerate(pairs):
        res = linprog(-D[l], A_ub=D, b_ub=levels, bounds=[(float(x), None) for x in b[a]], method="highs")
        if res.status == 0:
            lp[q] = float(D[l] @ res.x)
    per_lp = (time.perf_counter() - t0) / sample
    ours = continuation_support(game, delta, P, D, pairs[:, 0])[np.arange(sample), pairs[:, 1]]
    both = np.isfinite(lp) & np.isfinite(ours)
    gap = float(np.max(np.abs(lp[both] - ours[both]))) if both.any() else 0.0
    agree = bool(np.array_equal(np.isfinite(lp), np.isfinite(ours)))
    return per_lp, gap, agree


def bench_three_firms(n_actions: int = 12, n_directions: int = 64, delta: float = 0.6, repeat: int = 1,
                      sample: int = 400, seed: int = 20260101) -> dict:
    """Time the three-firm payoff set (outer approximation in ``n_directions`` directions and inner
    approximation) of an invented Cournot triopoly.

    Parameters
    ----------
    n_actions : int
    n_directions : int
    delta : float
    repeat : int
    sample : int
        (profile, direction) pairs solved one programme at a time for the reference.
    seed : int
        Seed of the sample.

    Returns
    -------
    dict
        Seconds, accuracy, iterations, the reference's seconds per programme and per step, the ratio
        of the reference step to ours, the largest value difference on the sample, and whether the
        target (under 60 s) is met.
    """
    game = discretize(_market(3), n_actions)
    sec, res = _best_of(repeat, lambda: equilibrium_payoffs(game, delta, method="directions",
                                                            directions=n_directions))
    steps = res.outer_iterations + res.inner_iterations
    per_lp, gap, agree = _lp_reference(game, delta, res.directions, res.outer_levels, res.outer_vertices, sample,
                                       np.random.default_rng(seed))
    ref_step = per_lp * game.n_profiles * n_directions
    return {
        "workload": f"payoff set of a Cournot triopoly, {n_actions} actions per firm, {n_directions} directions, "
                    f"delta {delta:g}",
        "seconds": sec, "accuracy": res.accuracy, "status": res.status,
        "outer_iterations": res.outer_iterations, "inner_iterations": res.inner_iterations,
        "seconds per step": sec / max(1, steps),
        "reference: seconds per linear programme": per_lp,
        "reference: seconds per outer step (one programme per profile and direction)": ref_step,
        "ratio_reference_step_to_ours": ref_step / (sec / max(1, steps)),
        "reference: largest value difference on the sample": gap,
        "reference: same feasible pairs": agree,
        "targets": {"under 60 s": sec < 60.0},
    }


def payoff_sets_benchmark(opts) -> dict:
    """Both benchmarks in the layout of a benchmark section.

    Parameters
    ----------
    opts : object
        With ``quick`` (bool: smaller grids) and ``repeat`` (int).

    Returns
    -------
    dict
    """
    repeat = 1 if opts.quick else opts.repeat
    if opts.quick:
        return {"two firms": bench_two_firms(12, (0.7,), repeat),
                "three firms": bench_three_firms(6, 16, 0.6, repeat, sample=50)}
    return {"two firms": bench_two_firms(30, (0.5, 0.7, 0.9), repeat),
            "three firms": bench_three_firms(12, 64, 0.6, repeat)}
