"""Legends and colours of the figures: a line plot without groups titles its legend after the metric or, with one
line, draws none; the palette shows on white paper; a tournament's captions speak of learning firms only when one was
entered."""

from __future__ import annotations

import textwrap
import tomllib

import pytest

import sim.evidence.figures as figs
from sim.evidence.render import pyplot
from sim.evidence.tournament import RENDERER as TOURNAMENT
from sim.evidence.tournament_figures import line_style
from sim.runner.runs import open_run, run_experiment
from sim.runner.single import run_single

ALONG_DELTA = textwrap.dedent("""
    # Two invented quarries, grim trigger, along the discount factor only (no group).
    [experiment]
    name = "legend-lines"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 12.0]
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 20
    replications = 4
    seed = 5
    [deviation]
    firm = "binding"
    [sweep]
    "run.delta" = [0.5, 0.9]
    """)

RULES = textwrap.dedent("""
    # Three rules for two invented mills; no learning firm.
    [experiment]
    name = "legend-tournament"
    kind = "tournament"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 2
    [[entrants]]
    label = "grim trigger"
    strategy = "grim_trigger"
    [[entrants]]
    label = "always compete"
    strategy = "always_compete"
    [[entrants]]
    label = "tit for tat"
    strategy = "tit_for_tat"
    [tournament]
    bootstrap = 10
    generations = 5
    population = 4
    moran_runs = 0
    [run]
    periods = 12
    replications = 4
    """)


@pytest.fixture(scope="module")
def along_delta(tmp_path_factory):
    d = tmp_path_factory.mktemp("legend-lines")
    (d / "sweep.toml").write_text(ALONG_DELTA)
    s = run_experiment(d / "sweep.toml", d / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        return figs.SweepData(list(rf.experiment.parameters), rf.rows())


def test_a_tournament_without_a_learner_does_not_speak_of_one():
    run = run_single(tomllib.loads(RULES))
    drawn = TOURNAMENT.figures(run.cell.result)
    try:
        (duration,) = [d for d in drawn if d.name == "collusion-duration"]
        assert "Kaplan-Meier" in duration.caption
        assert all("learning" not in d.caption for d in drawn)
    finally:
        for d in drawn:
            pyplot().close(d.figure)
