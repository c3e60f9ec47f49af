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


def test_a_single_ungrouped_line_draws_no_legend(along_delta):
    fig = figs.lines(along_delta, "run.delta", "collusive_share")
    try:
        assert len(fig.axes[0].get_lines()) == 1 and fig.legends == []
    finally:
        pyplot().close(fig)


def test_ungrouped_lines_title_their_legend_after_the_metric(along_delta):
    fig = figs.lines(along_delta, "run.delta", "deviation.gain", analytic="analytic.deviation.gain")
    try:
        (leg,) = fig.legends
        assert [t.get_text() for t in leg.get_texts()] == ["simulated", "analytic"]
        assert leg.get_title().get_text() == "gain from a one-shot deviation"
    finally:
        pyplot().close(fig)


def _contrast_on_white(hex_colour: str) -> float:
    """WCAG 2.1 contrast ratio against white, from the relative luminance of sRGB (W3C, 2018, "Web Content
    Accessibility Guidelines 2.1", definitions of relative luminance and contrast ratio)."""
    channels = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    lum = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 1.05 / (lum + 0.05)


def test_every_palette_colour_shows_on_white_paper():
    """At least 3:1 against white, the threshold WCAG 2.1 sets for graphical objects (success criterion 1.4.11):
    the Okabe-Ito yellow (#F0E442, 1.3:1) of the "compete" line could not be seen in print."""
    assert len(set(figs.PALETTE)) == len(figs.PALETTE) == 8
    for c in figs.PALETTE:
        assert _contrast_on_white(c) >= 3.0, c
    # the tournament's lines take the same colours
    assert [line_style(k)["color"] for k in range(8)] == list(figs.PALETTE)


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
