"""Fixtures of the learning tests."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from sim.learning.session import learn
from sim.learning.tables import learning_from_dict

#: the shipped experiment of learned price wars after bad demand draws
PROFIT_SIGNAL = Path(__file__).parents[2] / "experiments" / "learning-profit-signal.toml"


@pytest.fixture(scope="session")
def profit_signal_run():
    """The shipped profit-signal experiment's first cell learned under a given protocol (``"own_profit"`` or
    ``"prices"``), sessions kept; each protocol is learned once for the whole test run (the analyses that read a
    result work on copies of its saved sessions)."""
    runs = {}

    def run(observe: str = "own_profit"):
        if observe not in runs:
            doc = tomllib.loads(PROFIT_SIGNAL.read_text())
            doc.pop("sweep"), doc.pop("report")
            doc["learning"]["observe"] = observe
            cfg = learning_from_dict(doc)
            runs[observe] = learn(cfg["market"], cfg["learner"], **{**cfg["settings"], "workers": 2}, progress=False,
                                  keep=True)
        return runs[observe]

    return run
