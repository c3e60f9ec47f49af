"""The command line on extreme but accepted markets: a report, no warning text on stderr.

Each case runs ``supergame thresholds`` in a fresh interpreter (as a user would), so that a numpy or scipy warning
printed by any part of the run would appear on stderr. The cases are the ones an audit found crashing or warning:
logit price competition with a small ``mu`` (3 firms, quality 2, cost 1), a dominant logit product, and a steep linear
market with asymmetric costs next to the choke price.
"""

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

CASES = [
    ["--demand", "logit", "--model", "bertrand", "--firms", "3", "--quality", "2", "--cost", "1", "--mu", "0.02"],
    ["--demand", "logit", "--model", "bertrand", "--firms", "3", "--quality", "2", "--cost", "1", "--mu", "0.001",
     "--agreement", "proportional"],
    ["--demand", "logit", "--model", "bertrand", "--firms", "2", "--quality", "5,-5", "--cost", "4.8,0", "--mu",
     "1e-6", "--size", "1e-6"],
    ["--demand", "linear", "--firms", "2", "--intercept", "147.91618905328272", "--slope", "197090024.80675894",
     "--cost", "147.82920840850474,147.91502331222912", "--agreement", "symmetric"],
]


@pytest.mark.parametrize("args", CASES)
def test_accepted_markets_print_a_report_and_no_warning(args):
    """Exit status 0, a JSON report whose schemes carry numbers or a stated reason, and an empty stderr."""
    r = subprocess.run([sys.executable, "-m", "sim", "thresholds", *args, "--punishment", "1", "--punishment", "3",
                        "--json"], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0, r.stderr
    assert r.stderr == ""
    th = json.loads(r.stdout)["thresholds"]
    for scheme in [th["grim"], *th["finite"], th["stick_carrot"]]:
        assert scheme["market"] is not None or scheme["not_sustainable"]["text"]


def test_isoelastic_output_beyond_floating_range_is_refused_in_one_line():
    """A steep isoelastic demand with a low cost would have a monopoly output (scale/cost)^elasticity beyond 1e100
    (here (0.137 / 4.9e-5)^100, about 1e344): the validator says so in one line naming the flag, exit status 2."""
    r = subprocess.run([sys.executable, "-m", "sim", "thresholds", "--demand", "isoelastic", "--firms", "2",
                        "--elasticity", "100", "--scale", "0.137", "--cost", "0.27,4.9e-5"],
                       capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 2 and r.stdout == ""
    assert len(r.stderr.strip().splitlines()) == 1 and "--cost" in r.stderr and "1e100" in r.stderr
