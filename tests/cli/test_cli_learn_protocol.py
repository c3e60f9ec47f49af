"""The shipped change-of-protocol experiment, in its two steps.

Source of the check: synchronous learners that give the future no weight price competitively (Asker, Fershtman and
Pakes, 2022, AEA Papers and Proceedings 112, abstract); the static Nash price of the logit market is the benchmark
the report prints beside the learned prices (Anderson, de Palma and Thisse, 1992, Discrete Choice Theory of Product
Differentiation, ch. 7, for the logit Bertrand equilibrium).
"""

import math
from pathlib import Path

import pytest
from scipy.optimize import brentq

from sim.cli import main


def _logit_nash(quality=2.0, mu=0.25, cost=1.0, n=2):
    """Symmetric static Nash price of logit Bertrand with an outside good of value 0: p - c = mu / (1 - s(p)) (the
    first-order condition, Anderson, de Palma and Thisse, 1992), solved with scipy's brentq."""
    def share(p):
        e = math.exp((quality - p) / mu)
        return e / (1.0 + n * e)
    return brentq(lambda p: p - cost - mu / (1.0 - share(p)), cost, cost + 10.0, xtol=1e-14)


@pytest.mark.slow
def test_the_shipped_protocol_experiment_in_its_two_steps(tmp_path, monkeypatch, capsys):
    """Step 1 of the entry experiment saves the Hollin Reach learners; step 2 switches them to synchronous updating
    (the direction of Asker, Fershtman and Pakes, 2022, abstract, read: synchronous learners that give the future no
    weight price competitively). Tolerance, in units of the grid's spacing (about 0.09; fixed seeds): with delta 0
    every session settles and the mean limit prices fall to within 0.1 of the static Nash price (1.473; observed
    1.506), about one step; with delta kept they stay more than 0.1 above it, more than a step (observed 1.694), so
    the two cells are told apart by more than the grid's resolution."""
    from sim.runner.runs import open_run

    root = Path(__file__).resolve().parents[2] / "experiments"
    monkeypatch.chdir(tmp_path)
    assert main(["learn", str(root / "learning-entry-before.toml")]) == 0
    assert main(["run", str(root / "learning-protocol.toml"), "--out", "protocol", "--quiet"]) == 0
    capsys.readouterr()
    run = open_run(tmp_path / "protocol")
    kept, myopic = run.result(0), run.result(1)
    for res in (kept, myopic):
        assert "firm 1 update asynchronous -> synchronous" in res.event["what"]
        assert res.event["settled"]["share"] == 1.0
    assert "firm 2 delta 0.95 -> 0" in myopic.event["what"] and "delta" not in kept.event["what"]
    nash = _logit_nash()
    for i in range(2):
        p_myopic = myopic.summary["limit_prices"][i]["mean"]
        p_kept = kept.summary["limit_prices"][i]["mean"]
        assert 0 <= p_myopic - nash < 0.1 and p_kept > nash + 0.1
        assert p_myopic < p_kept
