"""Benchmark of the analytic baseline: every threshold of a 10-firm asymmetric market.

Target (foundation): all thresholds of a 10-firm asymmetric market in well under a second, for every
shipped demand system. The linear Cournot case is also computed by a plain-Python reference (loops,
closed forms and a golden-section search, no numpy) in the same run; the two must agree, and the
ratio of their times is reported.
"""

from __future__ import annotations

import math
import time

import numpy as np

from sim.models.demand import DifferentiatedDemand, IsoelasticDemand, LinearDemand, LogitDemand
from sim.models.market import Market
from sim.theory.thresholds import critical_discount_factors


def _markets():

    n = 10
    costs = np.linspace(10.0, 19.0, n)
    return {
        "linear cournot, capacities": (Market(LinearDemand(200.0, 1.0), cost=costs,
                                              capacity=np.linspace(15.0, 30.0, n)), "proportional"),
        "linear cournot": (Market(LinearDemand(200.0, 1.0), cost=costs), "proportional"),
        "homogeneous bertrand": (Market(LinearDemand(200.0, 1.0), cost=10.0, n_firms=n, model="bertrand"),
                                 "joint"),
        "differentiated bertrand": (Market(DifferentiatedDemand(np.linspace(90.0, 100.0, n), 1.0, 0.6),
                                           cost=costs, model="bertrand"), "symmetric"),
        "logit bertrand": (Market(LogitDemand(np.linspace(1.5, 2.5, n), 0.0, 0.25), cost=np.linspace(1.0, 1.5, n),
                                  model="bertrand"), "joint"),
        "isoelastic cournot": (Market(IsoelasticDemand(100.0, 1.5), cost=np.linspace(1.0, 1.4, n)), "proportional"),
    }


def _reference_linear_cournot(a: float, b: float, c: list[float]) -> list[float]:
    """Grim-trigger thresholds of linear Cournot with proportional quotas, in plain Python."""
    n = len(c)
    active = [True] * n
    while True:  # Nash with exits
        k = sum(active)
        csum = sum(ci for ci, on in zip(c, active) if on)
        q = [(a - (k + 1) * ci + csum) / ((k + 1) * b) if on else 0.0 for ci, on in zip(c, active)]
        if all(x > 0 for x, on in zip(q, active) if on):
            break
        active = [on and x > 0 for x, on in zip(q, active)]

    def profit(i, prof):
        return prof[i] * (max(0.0, a - b * sum(prof)) - c[i])

    def joint(lam):
        prof = [lam * x for x in q]
        return sum(profit(i, prof) for i in range(n))

    lo, hi = 1e-9, 1.0  # golden section on the common scale factor
    g = (math.sqrt(5) - 1) / 2
    x1, x2 = hi - g * (hi - lo), lo + g * (hi - lo)
    f1, f2 = joint(x1), joint(x2)
    for _ in range(200):
        if f1 < f2:
            lo, x1, f1 = x1, x2, f2
            x2 = lo + g * (hi - lo)
            f2 = joint(x2)
        else:
            hi, x2, f2 = x2, x1, f1
            x1 = hi - g * (hi - lo)
            f1 = joint(x1)
    lam = 0.5 * (lo + hi)
    qc = [lam * x for x in q]
    out = []
    for i in range(n):
        rest = sum(qc) - qc[i]
        qd = max(0.0, (a - c[i] - b * rest) / (2 * b))
        dev = list(qc)
        dev[i] = qd
        pd, pc, pn = profit(i, dev), profit(i, qc), profit(i, q)
        out.append((pd - pc) / (pd - pn))
    return out


def theory_benchmark(opts) -> dict:
    """Every threshold of a 10-firm asymmetric market, one per demand system, against the plain-Python reference
    for the linear Cournot case (see the module notes).

    Parameters
    ----------
    opts : BenchOptions
        Each market is timed as the best of ``repeat`` runs, or once when ``quick``.

    Returns
    -------
    dict
        ``workload``; the best time per market; the slowest of them; the time of the reference; whether the
        reference's grim-trigger thresholds agree with the library's (relative tolerance 1e-9); ``targets``
        and ``notes``.
    """
    repeat = 1 if opts.quick else opts.repeat
    timings = {}
    for name, (market, agreement) in _markets().items():
        best = math.inf
        for _ in range(repeat):
            m = market.clone()
            t0 = time.perf_counter()
            rep = critical_discount_factors(m, punishments=(1, 2, 3, 5, 10), agreement=agreement)
            best = min(best, time.perf_counter() - t0)
        timings[name] = best
        if name == "linear cournot":
            ours = rep.grim.per_firm
    a, b, c = 200.0, 1.0, list(np.linspace(10.0, 19.0, 10))
    ref_best = math.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        ref = _reference_linear_cournot(a, b, c)
        ref_best = min(ref_best, time.perf_counter() - t0)
    agree = bool(np.allclose(ours, ref, rtol=1e-9))
    slowest = max(timings.values())
    return {
        "workload": "every threshold (grim, T = 1, 2, 3, 5, 10, stick and carrot, sensitivity) of 10-firm "
                    "asymmetric markets, one per demand system",
        **{f"seconds: {k}": v for k, v in timings.items()},
        "slowest market, seconds": slowest,
        "plain-Python reference (grim only, linear cournot), seconds": ref_best,
        "reference agrees with the library": agree,
        "targets": {"every market under 1 second": slowest < 1.0, "reference agrees": agree},
        "notes": ["the reference computes only grim-trigger thresholds of the linear market; the library "
                  "computes every scheme for every market"],
    }
