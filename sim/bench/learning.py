"""Benchmark section ``learning`` of ``supergame bench``."""

from __future__ import annotations

from sim.learning.session import benchmark, time_sessions


def bench_section(opts) -> dict:
    """The ``learning`` section of ``supergame bench`` (``opts``: :class:`sim.bench.BenchOptions`).

    Throughput of the two-agent baseline on one core against the plain-Python reference, and the wall
    time of 1,000 baseline sessions with ``opts.threads`` workers in a fresh process with an empty numba
    cache (compilation included). Targets (issue acceptance): >= 8e6 periods/s, >= 100 x the
    reference, 1,000 sessions in under 3 minutes.
    """
    quick = bool(getattr(opts, "quick", False))
    workers = int(getattr(opts, "threads", 2))
    repeat = int(getattr(opts, "repeat", 1))
    if quick:
        b = benchmark(sessions=1, reference_periods=5_000, kernel_periods=500_000, repeat=1)
        t = time_sessions(sessions=8, workers=workers, cold=False)
    else:
        b = benchmark(sessions=4, reference_periods=100_000, kernel_periods=20_000_000, repeat=repeat)
        t = time_sessions(sessions=1000, workers=workers, cold=True)
    rate = min(b["kernel_session_periods_per_second"], b["kernel_periods_per_second"])
    out = dict(b)
    out["workload"] = ("two Q-learners, logit Bertrand baseline of Calvano et al. (2020): m = 15, k = 1, "
                       "alpha 0.15, beta 4e-6, delta 0.95")
    out["sessions_run"] = t
    out["targets"] = {
        "kernel >= 8e6 periods/s on one core": rate >= 8e6,
        "kernel >= 100 x reference": b["ratio"] >= 100,
        f"{t['sessions']} baseline sessions in < 180 s with {workers} workers, compile included":
            t["wall_seconds"] < 180 and t["sessions"] == 1000 and t["cold_cache"],
        "reference and kernel identical": b["reference_identical_to_kernel"],
    }
    out["notes"] = ["quick workload: the targets refer to the full workload"] if quick else []
    return out
