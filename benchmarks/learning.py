"""Throughput of the Q-learning kernel against its plain-Python reference, and the wall time of 1,000
baseline sessions (Calvano et al., 2020) in a fresh process with an empty numba cache.

Usage: python benchmarks/learning.py [--quick] [--workers N]
The same figures appear in the ``learning`` section of ``supergame bench``.
"""

import argparse
import json
from types import SimpleNamespace

from sim.bench.learning import bench_section

if __name__ == "__main__":
    p = argparse.ArgumentParser()
    p.add_argument("--quick", action="store_true")
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--repeat", type=int, default=1)
    a = p.parse_args()
    print(json.dumps(bench_section(SimpleNamespace(quick=a.quick, threads=a.workers, repeat=a.repeat)), indent=2))
