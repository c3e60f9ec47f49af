"""Bandit pricing algorithms (UCB1 and Thompson sampling) as tournament entrants.

A bandit keeps no state and ignores its rival: facing a rival that plays one fixed action, its environment is
stationary, and with noiseless rewards it settles on the grid action that earns most against that action -- the
best response on its grid. UCB1 has logarithmic regret (Auer, Cesa-Bianchi and Fischer, 2002, "Finite-time
analysis of the multiarmed bandit problem", Machine Learning 47), so it plays the best arm in all but a vanishing
share of periods; Thompson sampling likewise (Agrawal and Goyal, 2012, COLT). The test market is the linear Cournot
duopoly P = 100 - Q with cost 10, whose static Nash output is 30 per firm (Cournot's closed form (a - c) / 3); the
rival ``always_compete`` plays it.
"""

import contextlib
import io
import json

import numpy as np
import pytest

from sim.cli import main

#: the bandits' outputs: 29 is the best response to 30 on this grid ((60 - q) q: 800, 884, 899, 896, 864)
GRID = [20.0, 26.0, 29.0, 32.0, 36.0]

TEXT = f"""
[experiment]
name = "bandit-entrants"
kind = "tournament"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 2

[[entrants]]
label = "grim"
strategy = "grim_trigger"

[[entrants]]
label = "ucb"
strategy = "qlearning"
family = "ucb"
grid = {GRID}

[[entrants]]
label = "thompson"
strategy = "qlearning"
family = "thompson"
grid = {GRID}

[[entrants]]
label = "compete"
strategy = "always_compete"

[tournament]
seats = 2
bootstrap = 0
generations = 50
population = 10
moran_runs = 50

[learning]
convergence = 2000
max_periods = 200000
sessions = 3

[run]
periods = 40
replications = 5
seed = 11
"""


@pytest.fixture(scope="module")
def doc(tmp_path_factory) -> dict:
    path = tmp_path_factory.mktemp("bandits") / "bandits.toml"
    path.write_text(TEXT)
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["tournament", str(path), "--json"]) == 0
    return json.loads(out.getvalue())


def _pair(doc, a, b) -> dict:
    return next(g for g in doc["groups"] if sorted(g["rules"]) == sorted([a, b]))


def test_bandits_enter_a_tournament_and_best_respond_to_a_fixed_rival(doc):
    rules = {r["label"]: r for r in doc["rules"]}
    assert rules["ucb"]["parameters"]["family"] == "ucb"
    assert rules["thompson"]["parameters"]["family"] == "thompson"
    kinds = {tuple(m["seats"]): m["kind"] for m in doc["matches"]}
    assert kinds[("ucb", "compete")] == "learning sessions" and kinds[("grim", "compete")] == "automata"
    for m in doc["matches"]:
        if m["kind"] == "learning sessions":
            assert m["converged"] == 1.0, m["seats"]
    best = max((60.0 - q) * q for q in GRID)  # 899 at q = 29: the grid's best response to the Nash output 30
    for label in ("ucb", "thompson"):
        pair = _pair(doc, label, "compete")
        # exact: rewards are noiseless, every session converged, and the limit play is read from the greedy action
        assert np.isclose(pair["each_rule"][label]["profit"]["value"], best, rtol=0, atol=1e-9), label
        # the fixed rival earns (90 - 29 - 30) * 30 against it
        assert np.isclose(pair["each_rule"]["compete"]["profit"]["value"], (90.0 - 29.0 - 30.0) * 30.0, atol=1e-9)


def test_a_bandit_facing_grim_trigger_trips_it_and_then_best_responds_to_nash(doc):
    """A bandit tries every output once (UCB) or at random (Thompson) at the start: the first output that is not
    the collusive one trips grim trigger's permanent punishment, after which the bandit best-responds to the
    rival's punishment output. Its profit is then the best response to the Nash output on its grid."""
    best = max((60.0 - q) * q for q in GRID)
    for label in ("ucb", "thompson"):
        pair = _pair(doc, label, "grim")
        # exact, as above: after the trip the rival plays the Nash output 30 for good
        assert np.isclose(pair["each_rule"][label]["profit"]["value"], best, rtol=0, atol=1e-9), label


def test_two_ucb_bandits_end_above_the_static_nash_profit(doc):
    """Two noiseless UCB bandits experiment in lockstep and each mistakes the joint effect of both outputs for the
    effect of its own (correlated experimentation): they end above the static Nash profit, 900 per firm here --
    the direction reported by Hansen, Misra and Pai (2021, "Frontiers: Algorithmic collusion: supra-competitive
    prices via independent algorithms", Marketing Science 40(1)) for a high signal-to-noise ratio."""
    pair = _pair(doc, "ucb", "ucb")
    assert pair["each_rule"]["ucb"]["profit"]["value"] > 900.0 + 1.0
