"""Learning runs in which no session converged: the answer, the terminal headline and the bundle's table say that the
numbers are those of learners stopped at the cap, not of a converged outcome (the convergence rule of Calvano,
Calzolari, Denicolo and Pastorello, 2020: no greedy strategy changed for a number of periods)."""

from __future__ import annotations

from sim.cli import main
from tests.conftest import learn_text

# the cap (2,000 periods) lies below the convergence window (5,000): no session can converge; the second cell's
# window (200 periods) is met well before the cap
CAPPED = learn_text("capped", "m = 5\nbeta = 2e-3\nconvergence = 5000\nmax_periods = 2000", sessions=3)
SWEPT = CAPPED + "\n[sweep]\n\"learning.convergence\" = [5000, 200]\n"


def test_the_terminal_headline_says_no_session_converged(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "capped.toml").write_text(CAPPED)
    assert main(["learn", "capped.toml"]) == 0
    first = capsys.readouterr().out.splitlines()[0]
    assert first.startswith("No session converged (3 stopped at the cap): greedy play at the cap")
    assert first.endswith("not a converged outcome.")
    assert main(["learn", "capped.toml"]) == 0
    assert ("No session can converge: the cap (2000 periods) is shorter than the convergence window (5000 periods "
            "without a change)") in capsys.readouterr().out


def test_the_bundle_warns_in_its_answer_and_under_its_table(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "swept.toml").write_text(SWEPT)
    assert main(["run", "swept.toml", "--out", "run1", "--report", "--quiet"]) == 0
    text = (tmp_path / "run1" / "report" / "summary.md").read_text()
    answer = next(line for line in text.splitlines() if line.startswith("**Answer.**"))
    assert "In 1 of 2 cells (cell 1) no session converged" in answer
    assert "or over all its sessions in cell 1, where none converged" in text
    # the cell whose sessions converged is not named
    assert "cells 1, 2" not in text and "cell 2, where none" not in text
