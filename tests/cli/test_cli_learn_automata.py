"""``supergame learn`` with learners against automata: the report says in plain words why the sessions ended where they
did, the printed text is the stored result's, and the new columns follow every existing one.

Sources: grim trigger punishes forever (Friedman, 1971, Review of Economic Studies 38(1)); tit for tat punishes for
one period (Axelrod, 1984); a Q-learner facing grim trigger ends at the static Nash price, one facing tit for tat
colludes (common practice, no source: the behaviour this report explains, seen in this program's own runs).
"""

import csv

import pytest

from sim.cli import main
from sim.runner.analyses.learn import trigger_names
from tests.conftest import learn_text

FILE = learn_text("against-automata", "m = 7\nbeta = 1e-4\nconvergence = 5000", impulse=3, sessions=10, seed=3,
                 extra='\n[[strategies]]\nstrategy = "qlearning"\n\n[[strategies]]\nstrategy = "AUTOMATON"\n')


def _file(tmp_path, automaton):
    p = tmp_path / f"{automaton}.toml"
    p.write_text(FILE.replace("AUTOMATON", automaton))
    return p


def test_grim_trigger_is_explained_by_its_permanent_punishment(tmp_path, capsys):
    assert main(["learn", str(_file(tmp_path, "grim_trigger"))]) == 0
    out = capsys.readouterr().out
    assert "Why the sessions ended where they did" in out
    line = next(x for x in out.splitlines() if x.strip().startswith("Grim trigger (firm 2) was triggered"))
    # the learners explore at random in the first periods, so the punishment starts at once and never ends
    assert "when the learners explored with probability" in line and "it was triggered once per session" in line
    assert "In 100.0 % of sessions it was still punishing when learning ended" in line
    assert "to price at or near the static Nash level" in line


def test_tit_for_tat_is_explained_by_punishments_that_end(tmp_path, capsys):
    assert main(["learn", str(_file(tmp_path, "tit_for_tat"))]) == 0
    out = capsys.readouterr().out
    line = next(x for x in out.splitlines() if x.strip().startswith("Tit for tat (firm 2) was triggered"))
    assert "Its punishments ended" in line and "to keep to or near the joint-profit price" in line
    # the headline's mean profit gain is over both firms; the learner's own is given beside it, the automaton's not
    head = out.splitlines()[0]
    assert "the automata's profits included; the learners' own profit gains: firm 1 " in head
    assert "firm 2 " not in head.split("the learners' own profit gains:")[1]


def test_the_printed_report_is_the_stored_result_and_new_columns_come_last(tmp_path, capsys):
    from sim.evidence.learn import RENDERER
    from sim.runner.runs import open_run

    p = _file(tmp_path, "grim_trigger")
    assert main(["learn", str(p)]) == 0
    printed = capsys.readouterr().out
    folder = tmp_path / "run"
    assert main(["run", str(p), "--out", str(folder), "--quiet"]) == 0
    capsys.readouterr()
    assert RENDERER.console(open_run(folder).result(0)) == printed.rstrip("\n")
    with open(folder / "results.csv", newline="") as fh:
        header = next(csv.reader(fh))
    names = trigger_names(2)
    start = header.index("triggered.firm2")
    # the new columns follow the last column of a line-up without automata, together and in their order
    assert header[start - 1] == "analytic.collusive_profit.firm2" and header[start:start + len(names)] == names


@pytest.mark.parametrize("automaton", ["grim_trigger", "tit_for_tat"])
def test_every_new_column_has_a_catalogue_entry(tmp_path, automaton):
    from sim.evidence.catalogue import describe
    from sim.runner.experiment import load_experiment

    exp = load_experiment(_file(tmp_path, automaton))
    for m in trigger_names(2):
        assert m in exp.metric_names
        assert describe(m).entry.method
