"""``supergame learn`` with alternating moves (Klein, 2021, RAND Journal of Economics 52(3)): a bad timing is one
line naming the key with exit status 2, the command prints what ``supergame run`` stores, its figures are the
bundle's, and the shipped sequential-pricing experiment is valid."""

import json
from pathlib import Path

import pytest

from sim.cli import main

# a homogeneous good with demand 1 - p and prices k/6 on [0, 1]: the setting of Klein (2021), from memory
SEQUENTIAL = """
[experiment]
name = "two-in-turn"
kind = "learn"

[market]
model = "bertrand"
demand = "linear"
intercept = 1.0
slope = 1.0
cost = 0.0
n_firms = 2

[learning]
timing = "alternating"
alpha = 0.3
beta = 1e-3
grid = [0.0, 0.16666666666666666, 0.3333333333333333, 0.5, 0.6666666666666666, 0.8333333333333334, 1.0]
convergence = 2000
max_periods = 40000

[run]
sessions = 4
seed = 3
"""


def test_an_unknown_timing_is_one_line_naming_the_key_and_exit_2(tmp_path, capsys):
    p = tmp_path / "bad.toml"
    p.write_text(SEQUENTIAL.replace('"alternating"', '"staggered"'))
    assert main(["learn", str(p)]) == 2
    cap = capsys.readouterr()
    line = cap.err.strip()
    assert cap.out == "" and "\n" not in line
    assert line.startswith("supergame learn: error: learning.timing") and "'staggered'" in line
    assert main(["run", str(p), "--out", str(tmp_path / "run")]) == 2
    assert "learning.timing" in capsys.readouterr().err and not (tmp_path / "run").exists()
    # the flag is named when the value came from it
    p.write_text(SEQUENTIAL)
    assert main(["learn", str(p), "--timing", "staggered"]) == 2
    assert capsys.readouterr().err.strip().startswith("supergame learn: error: --timing")


def test_alternating_moves_refuse_a_line_up_with_an_automaton(tmp_path, capsys):
    p = tmp_path / "automaton.toml"
    p.write_text(SEQUENTIAL + '\n[[strategies]]\nstrategy = "qlearning"\n\n[[strategies]]\nstrategy = "grim_trigger"\n')
    assert main(["learn", str(p)]) == 2
    line = capsys.readouterr().err.strip()
    assert "\n" not in line and line.startswith("supergame learn: error: learning.timing") and "two Q-learners" in line


def test_the_command_prints_the_report_of_the_stored_result_for_alternating_moves(tmp_path, capsys):
    from sim.evidence.render import renderer_for
    from sim.runner.runs import open_run

    p = tmp_path / "turns.toml"
    p.write_text(SEQUENTIAL)
    assert main(["learn", str(p), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "Alternating moves: where the sessions end" in printed and "Impulse response" not in printed
    assert main(["run", str(p), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
        row = rf.rows()[0]
    assert renderer_for("learn").console(stored) == printed.split("\nwrote ")[0].rstrip("\n")
    alt = stored.summary["alternating"]
    assert row.metrics["fixed_price_share"] == alt["fixed_price"]["share"]
    assert row.metrics["cycle_share"] == alt["cycle"]["share"]
    pngs = sorted(x.name for x in (tmp_path / "plots").iterdir())
    assert "alternating_outcomes.png" in pngs and "impulse_response.png" not in pngs
    for name in pngs:
        assert (tmp_path / "plots" / name).read_bytes() == (tmp_path / "run" / "report" / "figures" / name).read_bytes()


def test_the_shipped_sequential_experiment_is_valid(capsys):
    path = Path(__file__).resolve().parents[2] / "experiments" / "learning-sequential.toml"
    assert main(["check", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc


@pytest.mark.slow
def test_the_shipped_sequential_experiment_shows_the_published_direction(tmp_path, capsys):
    """Klein (2021; the direction from the abstract, read; the setting from memory): on the coarse grid (7 prices)
    most sessions end at a fixed price pair that is not a static equilibrium of the grid (collusive: a firm would
    gain in the period by undercutting), on the finer grid (25 prices) most cycle. The file as shipped (40 sessions
    per cell, fixed seed); a share from 40 sessions has a standard error of at most sqrt(0.25 / 40) = 0.079, and the
    threshold of one half is more than three of them below the shares the file gives (0.75 at a fixed pair off the
    grid's equilibria on the coarse grid, 1.0 cycling on the finer one)."""
    from sim.runner.runs import open_run

    path = Path(__file__).resolve().parents[2] / "experiments" / "learning-sequential.toml"
    assert main(["run", str(path), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        coarse, fine = (row.metrics for row in rf.rows())
    assert coarse["fixed_not_stage_nash_share"] > 0.5 and fine["cycle_share"] > 0.5
    assert fine["cycle_share"] > coarse["cycle_share"]
    assert coarse["converged"] == 1.0 and fine["converged"] == 1.0
