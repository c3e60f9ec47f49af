"""Per-cell overhead of the sweep machinery and the speed-up of 2 local workers over 1.

Usage: python benchmarks/sweep.py [--quick] [--repeat N]
The same figures appear in the ``sweep`` section of ``supergame bench``.
"""

import argparse
import json
from types import SimpleNamespace

from sim.runner.sweep import bench_section

if __name__ == "__main__":
    p = argparse.ArgumentParser()
    p.add_argument("--quick", action="store_true")
    p.add_argument("--repeat", type=int, default=1)
    a = p.parse_args()
    print(json.dumps(bench_section(SimpleNamespace(quick=a.quick, threads=2, repeat=a.repeat)), indent=2))
