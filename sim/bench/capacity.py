"""Benchmarks of the capacity, partial-cartel and global-sensitivity computations.

Targets (issue: merger practice):

* :func:`bench_partial_cartels`: every cartel of 2 to 8 firms of an 8-firm linear Cournot market
  (247 cartels with their stability) in under 10 s.
* :func:`bench_sensitivity`: Sobol indices from 4,096 base samples over 6 inputs (32,768 model
  evaluations, each the grim-trigger threshold of a 4-firm logit market before and after a merger of
  two firms) in under 2 minutes on 2 cores. The model is :func:`logit_merger_thresholds`, a
  vectorised computation of what :func:`sim.thresholds.critical_discount_factors` reports as the
  grim-trigger market threshold for these markets (the benchmark checks the two agree on a
  subsample and reports the per-evaluation time of the library path alongside).

Speed is never a timed test: these functions return the measured times and the targets, for the
benchmark report.
"""

from __future__ import annotations

import itertools
import math
import time

import numpy as np

from sim.antitrust.global_sensitivity import sobol_indices, uncertain_inputs
from sim.antitrust.merger import Merger, merge
from sim.models.demand import LinearDemand, LogitDemand
from sim.models.market import Market
from sim.theory.cartels import cartel_table
from sim.theory.thresholds import critical_discount_factors

__all__ = ["LOGIT_INPUTS", "bench_partial_cartels", "bench_sensitivity", "capacity_benchmark",
           "logit_merger_thresholds", "logit_reference_thresholds", "reference_cartel_thresholds"]

#: the six uncertain inputs of the 4-firm logit merger assessment
LOGIT_INPUTS = {
    "mu": (0.15, 0.4),  # horizontal differentiation
    "outside": (-0.5, 0.5),  # quality of the outside good
    "quality_1": (1.8, 2.2),  # quality of the merging firms' products
    "quality_2": (1.8, 2.2),
    "cost": (0.8, 1.2),  # common marginal cost
    "efficiency": (0.0, 0.1),  # proportional cost saving of the merged products
}
_OTHER_QUALITY = 2.0


def _shares(a, p, a0, mu):
    u = (a - p) / mu[:, None]
    top = np.maximum(u.max(axis=1), a0 / mu)
    e = np.exp(u - top[:, None])
    e0 = np.exp(a0 / mu - top)
    den = e.sum(axis=1) + e0
    return e / den[:, None], e0 / den


def _best_markup(a, c, p, a0, mu, own, start=None, iters=100):
    """Common markup of the products ``own`` (bool mask) solving ``g(m) = m (1 - S_own(m)) - mu = 0``
    against the other prices in ``p`` (the first-order condition of a multi-product logit firm;
    Anderson, de Palma and Thisse, 1992). ``g`` rises in m (``g' = (1 - S) + m S (1 - S) / mu``): Newton
    steps inside a shrinking bracket, with a bisection whenever a step leaves the bracket or does not
    halve the previous step (the safeguard of ``rtsafe``, Press et al., 2007, "Numerical Recipes",
    3rd ed., section 9.4)."""

    def g_and_slope(m):
        q = np.where(own[None, :], c + m[:, None], p)
        s, s0 = _shares(a, q, a0, mu)
        rest = np.where(own[None, :], 0.0, s).sum(axis=1) + s0  # 1 - S, without cancellation
        S = 1.0 - rest
        return m * rest - mu, rest + m * S * rest / mu, rest

    lo = np.zeros(a.shape[0])
    _, _, rest0 = g_and_slope(lo)
    hi = mu / rest0  # g(mu / rest(0)) >= 0 because rest rises with m
    m = np.clip(start, lo, hi) if start is not None else 0.5 * (lo + hi)
    dx_old = hi - lo
    for _ in range(iters):
        g, slope, _ = g_and_slope(m)
        lo = np.where(g < 0, m, lo)
        hi = np.where(g < 0, hi, m)
        step = m - g / slope
        newton = (step > lo) & (step < hi) & (np.abs(2.0 * g) <= np.abs(dx_old * slope))
        new = np.where(newton, step, 0.5 * (lo + hi))
        dx_old = np.abs(new - m)
        done = np.abs(new - m) <= 1e-15 * np.maximum(1.0, np.abs(m))
        m = new
        if np.all(done):
            break
    return m


def _firm_profits(a, c, p, a0, mu, owners):
    s, _ = _shares(a, p, a0, mu)
    per = (p - c) * s
    return np.stack([per[:, o].sum(axis=1) for o in owners], axis=1)


def _grim_market(a, c, a0, mu, owners, tol=1e-12):
    n = a.shape[1]
    masks = [np.isin(np.arange(n), o) for o in owners]
    p = c + mu[:, None] * 1.5
    for _ in range(500):  # Gauss-Seidel best responses (Nash)
        old = p.copy()
        for mk in masks:
            k = int(np.flatnonzero(mk)[0])
            p = np.where(mk[None, :], c + _best_markup(a, c, p, a0, mu, mk, p[:, k] - c[:, k])[:, None], p)
        if np.max(np.abs(p - old)) <= tol * np.max(np.abs(p)):
            break
    nash = _firm_profits(a, c, p, a0, mu, owners)
    m = _best_markup(a, c, np.zeros_like(a), a0, mu, np.ones(n, bool))  # joint profit: equal markups
    pc = c + m[:, None]
    col = _firm_profits(a, c, pc, a0, mu, owners)
    dev = np.empty_like(col)
    for f, mk in enumerate(masks):
        pd = np.where(mk[None, :], c + _best_markup(a, c, pc, a0, mu, mk)[:, None], pc)
        dev[:, f] = np.maximum(_firm_profits(a, c, pd, a0, mu, owners)[:, f], col[:, f])
    gain, loss = dev - col, col - nash
    scale = np.maximum(1.0, np.maximum(np.abs(col), np.abs(dev)))
    with np.errstate(divide="ignore", invalid="ignore"):
        per = np.where(loss < -1e-12 * scale, np.nan, np.where(gain <= 1e-12 * scale, 0.0,
                                                                np.where(loss <= 1e-12 * scale, np.nan,
                                                                         gain / (gain + loss))))
    out = per.max(axis=1)
    return np.where(np.isnan(per).any(axis=1), 1.0, out)  # not sustainable below one: reported as 1


def logit_merger_thresholds(X: dict) -> dict:
    """Grim-trigger critical discount factors of a 4-firm logit market before and after firms 1 and 2
    merge, vectorised over draws.

    The market: logit demand (unit size) with qualities ``quality_1``, ``quality_2``, 2, 2, outside
    quality ``outside`` and differentiation ``mu``; a common cost ``cost``; the joint-profit agreement
    (equal markups); after the merger the merged firm sets both products' prices and their costs fall
    by the share ``efficiency``. A threshold no discount factor below one reaches is reported as 1.

    Parameters
    ----------
    X : dict of ndarray of shape (n_draws,)
        The inputs of :data:`LOGIT_INPUTS`.

    Returns
    -------
    dict of ndarray of shape (n_draws,)
        ``before``, ``after`` and ``change`` (after minus before).
    """
    mu = np.asarray(X["mu"], float)
    N = mu.size
    a = np.column_stack([X["quality_1"], X["quality_2"], np.full(N, _OTHER_QUALITY), np.full(N, _OTHER_QUALITY)])
    c = np.repeat(np.asarray(X["cost"], float)[:, None], 4, axis=1)
    a0 = np.asarray(X["outside"], float)
    before = _grim_market(a, c, a0, mu, [[0], [1], [2], [3]])
    c_post = c.copy()
    c_post[:, :2] *= (1.0 - np.asarray(X["efficiency"], float))[:, None]
    after = _grim_market(a, c_post, a0, mu, [[0, 1], [2], [3]])
    return {"before": before, "after": after, "change": after - before}


def logit_reference_thresholds(x: dict) -> dict:
    """The same numbers for one draw by :func:`sim.thresholds.critical_discount_factors` on
    :class:`sim.market.Market` (and :func:`sim.merger.merge` for the post-merger market).

    Parameters
    ----------
    x : dict of float
        The inputs of :data:`LOGIT_INPUTS`.

    Returns
    -------
    dict of float
        ``before``, ``after``, ``change``.
    """
    m = Market(LogitDemand([x["quality_1"], x["quality_2"], _OTHER_QUALITY, _OTHER_QUALITY], x["outside"], x["mu"]),
               cost=x["cost"], n_firms=4, model="bertrand")
    post = merge(m, Merger(firms=[1, 2], efficiency=x["efficiency"])).post
    out = {}
    for key, mk in (("before", m), ("after", post)):
        g = critical_discount_factors(mk, punishments=(), deltas=()).grim.market
        out[key] = 1.0 if not np.isfinite(g) else float(g)
    out["change"] = out["after"] - out["before"]
    return out


def reference_cartel_thresholds(a: float, b: float, c: list) -> dict:
    """Grim-trigger thresholds of every cartel of a linear Cournot market in plain Python (loops, the
    closed forms of the cartel-fringe Cournot equilibrium, no numpy): the reference of the benchmark.

    Parameters
    ----------
    a, b : float
        Intercept and slope of inverse demand.
    c : list of float
        Marginal costs.

    Returns
    -------
    dict
        Cartel (tuple of 0-based members) -> list of the members' thresholds (nan when a member
        cannot be held).
    """
    n = len(c)

    def cournot(costs):
        active = [True] * len(costs)
        while True:
            k = sum(active)
            csum = sum(x for x, on in zip(costs, active) if on)
            q = [(a - (k + 1) * x + csum) / ((k + 1) * b) if on else 0.0 for x, on in zip(costs, active)]
            if all(v > 0 for v, on in zip(q, active) if on):
                return q
            active = [on and v > 0 for v, on in zip(q, active)]

    qn = cournot(c)
    pn = a - b * sum(qn)
    nash = [(pn - ci) * qi for ci, qi in zip(c, qn)]
    out = {}
    for size in range(2, n + 1):
        for S in itertools.combinations(range(n), size):
            cS = min(c[i] for i in S)
            cheap = [i for i in S if c[i] == cS]
            fringe = [i for i in range(n) if i not in S]
            q = cournot([cS] + [c[i] for i in fringe])
            prod = [0.0] * n
            for i in cheap:
                prod[i] = q[0] / len(cheap)
            for j, i in enumerate(fringe):
                prod[i] = q[j + 1]
            Q = sum(prod)
            P = max(0.0, a - b * Q)
            res = []
            for i in S:
                col = (P - c[i]) * prod[i]
                rest = Q - prod[i]
                qd = max(0.0, (a - c[i] - b * rest) / (2 * b))
                dev = max(max(0.0, a - b * (rest + qd)) * qd - c[i] * qd, col)
                gain, loss = dev - col, col - nash[i]
                tol = 1e-12 * max(1.0, abs(col), abs(dev))
                if loss < -tol or (gain > tol and loss <= tol):
                    res.append(math.nan)
                else:
                    res.append(0.0 if gain <= tol else gain / (gain + loss))
            out[S] = res
    return out


def bench_partial_cartels(n_firms: int = 8, repeats: int = 3) -> dict:
    """Time every partial cartel of an ``n_firms`` linear Cournot market (with stability at 0.8).

    Parameters
    ----------
    n_firms : int
    repeats : int
        Runs; the best time is reported.

    Returns
    -------
    dict
        ``seconds`` (best of ``repeats``), ``target_seconds`` (10), ``n_cartels``.
    """
    costs = np.linspace(10.0, 17.0, n_firms).tolist()
    m = Market(LinearDemand(100.0, 1.0), cost=costs)
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        table = cartel_table(m)
        table.stability(0.8)
        best = min(best, time.perf_counter() - t0)
    t0 = time.perf_counter()
    ref = reference_cartel_thresholds(100.0, 1.0, costs)
    ref_seconds = time.perf_counter() - t0
    agree = all(np.allclose(table.thresholds[table.row(S), list(S)], v, rtol=1e-9, equal_nan=True)
                for S, v in ref.items())
    return {"seconds": best, "target_seconds": 10.0, "n_cartels": int(table.requested.sum()),
            "reference_seconds": ref_seconds, "reference_agrees": bool(agree)}


def bench_sensitivity(n_base: int = 4096, workers: int = 2, seed: int = 2026, n_reference: int = 8) -> dict:
    """Time the Sobol indices of the 4-firm logit merger thresholds.

    Parameters
    ----------
    n_base : int
        Base samples (4,096 for the target).
    workers : int
        Processes (2 for the target).
    seed : int
    n_reference : int
        Draws on which the library path (:func:`logit_reference_thresholds`) is timed and compared.

    Returns
    -------
    dict
        ``seconds``, ``target_seconds`` (120), ``n_evaluations``, ``reference_seconds_per_draw``,
        ``reference_max_difference`` and the Sobol result's ``total`` indices of the change.
    """
    t0 = time.perf_counter()
    res = sobol_indices(_chunked_model, LOGIT_INPUTS, n_base=n_base, seed=seed, vectorized=True, workers=workers)
    seconds = time.perf_counter() - t0
    inp = uncertain_inputs(LOGIT_INPUTS)
    U = np.random.default_rng(seed).random((n_reference, len(inp)))
    X = np.column_stack([i.ppf(U[:, j]) for j, i in enumerate(inp)])
    fast = logit_merger_thresholds({i.name: X[:, j] for j, i in enumerate(inp)})
    t1 = time.perf_counter()
    ref = [logit_reference_thresholds({i.name: float(X[r, j]) for j, i in enumerate(inp)}) for r in range(n_reference)]
    per = (time.perf_counter() - t1) / n_reference
    diff = max(abs(ref[r][k] - fast[k][r]) for r in range(n_reference) for k in ("before", "after"))
    return {"seconds": seconds, "target_seconds": 120.0, "n_evaluations": res.n_evaluations,
            "reference_seconds_per_draw": per, "reference_max_difference": float(diff),
            "total_change": dict(zip(res.inputs, res.total["change"].tolist()))}


def _chunked_model(X):
    return logit_merger_thresholds(X)


def capacity_benchmark(opts) -> dict:
    """Benchmark section (the ``section(opts) -> dict`` form of :mod:`sim.bench`): the two targets with
    their references measured in the same run.

    Parameters
    ----------
    opts : sim.bench.BenchOptions
        ``quick`` shrinks the workloads (targets then not meaningful); ``threads`` sets the workers of
        the sensitivity run; ``repeat`` the timing repeats.

    Returns
    -------
    dict
        Measures, ``workload``, ``targets`` and ``notes``.
    """
    cart = bench_partial_cartels(4 if opts.quick else 8, 1 if opts.quick else opts.repeat)
    sens = bench_sensitivity(64 if opts.quick else 4096, max(1, int(opts.threads)), n_reference=2 if opts.quick else 8)
    per_fast = sens["seconds"] / sens["n_evaluations"]
    return {
        "workload": "every partial cartel of an 8-firm linear Cournot market; Sobol indices from 4,096 base samples "
                    "over 6 inputs of a 4-firm logit merger assessment (32,768 evaluations)",
        "partial cartels, seconds": cart["seconds"],
        "partial cartels, plain-Python reference, seconds": cart["reference_seconds"],
        "partial cartels, reference agrees": cart["reference_agrees"],
        "sensitivity, seconds": sens["seconds"],
        "sensitivity, seconds per evaluation": per_fast,
        "library path (critical_discount_factors), seconds per evaluation": sens["reference_seconds_per_draw"],
        "library path, largest difference": sens["reference_max_difference"],
        "targets": {"every 8-firm cartel under 10 s": cart["seconds"] < 10.0,
                    "Sobol indices under 2 minutes": sens["seconds"] < 120.0,
                    "vectorised thresholds agree with the library": sens["reference_max_difference"] < 1e-9},
        "notes": ["the sensitivity model is a vectorised computation of the grim-trigger market threshold that "
                  "critical_discount_factors reports; the library path (which also computes stick-and-carrot "
                  "punishments) is timed on a few draws and compared"],
    }
