"""``supergame learn`` with bandit learners: the report names the rule, the command prints what ``supergame run``
stores, the plotted figures are the bundle's, and the shipped bandit experiment is valid."""

import json
from pathlib import Path

from sim.cli import main
from tests.conftest import learn_text

BANDITS = learn_text("two-bandits", 'family = "thompson"\nexploration = 0.5\nnoise = 0.05\nm = 5\nconvergence = 2000\n'
                                     "max_periods = 30000", sessions=3,
                     extra='\n[[strategies]]\nstrategy = "qlearning"\nfamily = "ucb"\n\n[[strategies]]\n'
                           'strategy = "qlearning"\n')


def test_the_command_prints_the_report_of_the_stored_result_for_bandits(tmp_path, capsys):
    from sim.evidence.render import renderer_for
    from sim.runner.runs import open_run

    p = tmp_path / "bandits.toml"
    p.write_text(BANDITS)
    assert main(["learn", str(p), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    # the entry's own family replaces the table's; its other parameters come from [learning]
    assert "Firm 1: upper confidence bound (UCB1 index, exploration c 0.5" in printed
    assert "Firm 2: Thompson sampling (Gaussian, posterior scale v 0.5" in printed and "noise 0.05" in printed
    assert main(["run", str(p), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
    report = printed.split("\nwrote ")[0]  # the lines after the report name the figures written
    assert renderer_for("learn").console(stored) == report.rstrip("\n")
    pngs = sorted((tmp_path / "plots").iterdir())
    assert len(pngs) == 3
    for png in pngs:
        assert png.read_bytes() == (tmp_path / "run" / "report" / "figures" / png.name).read_bytes()


def test_the_shipped_bandit_experiment_is_valid(capsys):
    path = Path(__file__).resolve().parents[2] / "experiments" / "learning-bandits.toml"
    assert main(["check", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc
