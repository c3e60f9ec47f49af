"""The bundle of a learn run with a sweep: the cells side by side and every cell's own figures, drawn from the stored
results by the renderer that `supergame learn --plot` uses (byte for byte)."""

from pathlib import Path

from sim.cli import main
from sim.evidence.learn import RENDERER
from sim.evidence.render import write_figures
from sim.runner.runs import open_run

ROOT = Path(__file__).resolve().parents[2]


def test_a_swept_learn_run_sets_its_cells_side_by_side_and_draws_each_cell(tmp_path, capsys):
    text = (ROOT / "experiments" / "learning-update-rules.toml").read_text()
    small = text.replace("sessions = 40", "sessions = 3").replace("convergence = 10000", "convergence = 1000")
    p = tmp_path / "rules.toml"
    p.write_text(small)
    assert main(["run", str(p), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    figs = tmp_path / "run" / "report" / "figures"
    assert (figs / "cells-side-by-side.png").is_file()
    run = open_run(tmp_path / "run")
    for cell in (0, 1):
        for f in write_figures(RENDERER.figures(run.result(cell)), tmp_path / f"plots{cell}"):
            assert (figs / f"cell{cell + 1}-{f.name}").read_bytes() == f.read_bytes()
    md = (tmp_path / "run" / "report" / "summary.md").read_text()
    assert "Limit outcomes of every finished cell" in md and "| 2 | synchronous |" in md


def test_an_experiment_files_own_account_keeps_its_commands_as_code(tmp_path):
    # the leading comment's paragraphs are joined, its indented commands kept as written (a two-step run must not
    # read as one sentence), and an indented line that goes on with a numbered item stays text
    from sim.evidence.bundle import Bundle
    from sim.evidence.front import describe_experiment

    b = Bundle(tmp_path / "b", "t")
    describe_experiment(b, "Run it in two steps:\n    supergame learn a.toml   # step 1\n"
                           "    supergame run b.toml     # step 2\n"
                           "(well under a minute).\n\nWhat it shows:\n 1. one thing\n    that goes on\n 2. another")
    kinds = [(x.kind, x.data["text"]) for x in b.blocks]
    assert kinds == [("paragraph", "Run it in two steps:"),
                     ("code", "supergame learn a.toml   # step 1\nsupergame run b.toml     # step 2"),
                     ("paragraph", "(well under a minute)."),
                     ("paragraph", "What it shows: 1. one thing that goes on 2. another")]
