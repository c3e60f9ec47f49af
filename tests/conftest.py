"""Shared test configuration and fixtures: writing a small experiment, a finished run folder, invoking a command."""

from __future__ import annotations

import os
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

# plots in tests never need a display
os.environ.setdefault("MPLBACKEND", "Agg")

# property tests draw the same examples on every run (hypothesis's derandomize), so that a result does not depend
# on the day the suite runs; a draw that once failed is kept as a fixed case beside its property
from hypothesis import settings as _hypothesis_settings

_hypothesis_settings.register_profile("reproducible", derandomize=True)
_hypothesis_settings.load_profile("reproducible")

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(autouse=True)
def _close_figures():
    """Figures a test draws (a renderer's figures are returned open, for the caller to save) are closed after it,
    so that a long run never holds more than a test's worth of them."""
    yield
    import sys

    plt = sys.modules.get("matplotlib.pyplot")  # only when a test imported it: no import cost otherwise
    if plt is not None:
        plt.close("all")

def learn_text(name: str, learning: str, *, sessions: int = 4, seed: int = 7, impulse: int = 5,
               extra: str = "") -> str:
    """A small learning experiment in the logit duopoly of the learning tests (quality 2, outside good 0, mu 0.25,
    cost 1: Calvano, Calzolari, Denicolo and Pastorello's 2020 setting on a coarse grid): ``learning`` holds the
    ``[learning]`` keys, ``extra`` any tables that follow it (line-ups, events)."""
    return f"""
[experiment]
name = "{name}"
kind = "learn"

[market]
model = "bertrand"
demand = "logit"
quality = 2.0
outside = 0.0
mu = 0.25
cost = 1.0
n_firms = 2

[learning]
{learning}
{extra}
[impulse]
periods = {impulse}

[run]
sessions = {sessions}
seed = {seed}
workers = 2
"""


#: a deterministic two-cell experiment that runs in well under a second: the run folder of the runner's tests
TWO_MILLS = textwrap.dedent("""
    # Two invented mills; a sweep over one mill's cost (the runner's tests need a cheap, deterministic run).
    [experiment]
    name = "two-mills"
    kind = "thresholds"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 10.0
    slope = 1.0
    cost = [1.0, 1.5]
    [collusion]
    agreement = "proportional"
    [thresholds]
    punishments = [2]
    [sweep]
    "market.cost.2" = [1.5, 2.0]
    """)


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)


@pytest.fixture
def write_experiment(tmp_path):
    """``write_experiment(text, name="experiment.toml") -> Path``: an experiment file in the test's folder."""

    def write(text: str, name: str = "experiment.toml") -> Path:
        p = tmp_path / name
        p.write_text(textwrap.dedent(text))
        return p

    return write


@dataclass
class Command:
    """What a command printed and returned."""

    code: int
    out: str
    err: str


@pytest.fixture
def cli(capsys):
    """``cli("run", FILE, ...) -> Command``: run ``supergame`` in this process and capture what it printed."""
    from sim.cli import main

    def run(*args) -> Command:
        capsys.readouterr()
        code = main([str(a) for a in args])
        cap = capsys.readouterr()
        return Command(code, cap.out, cap.err)

    return run


@pytest.fixture
def finished_run(tmp_path, write_experiment):
    """A finished run folder of :data:`TWO_MILLS` (two cells, with its report), made fresh for the test."""
    from sim.evidence.report import write_report
    from sim.runner.runs import run_experiment

    f = write_experiment(TWO_MILLS, "two-mills.toml")
    s = run_experiment(f, tmp_path / "run", workers=1, report=True, write_report=write_report, progress=False)
    assert s.complete
    return s.folder
