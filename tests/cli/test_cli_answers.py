"""Every command's report opens with its answer: the first line is the renderer's headline, whose numbers are the
result's numbers as the bundle writes them; ``supergame run`` prints a single cell's report, answer first; the
bundle of a single cell opens its answer with the same sentence."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sim.evidence.answers import number, percent
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run
from sim.theory.verdicts import firm_list
from tests.cli.test_cli_assess import SMALL as ASSESS
from tests.cli.test_cli_capacity import DUOPOLY
from tests.cli.test_cli_learn import SMALL as LEARN
from tests.cli.test_cli_simulate import SMALL as SIMULATE
from tests.cli.test_cli_tournament import BASE as TOURNAMENT

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "experiments" / "demo-market.toml"
# the assessment without its sensitivity ranges: the answer does not need them, and the test stays quick
ASSESS_QUICK = ASSESS.split("[assess.sensitivity]")[0]


def _stored(folder):
    with open_run(folder) as rf:
        return rf.experiment.kind, rf.result(0)


def _first(text: str) -> str:
    return text.splitlines()[0]


def test_thresholds_answer_first_on_the_shipped_demo(cli, tmp_path):
    """The demo market (three Cournot firms, proportional agreement): grim trigger's threshold with the two firms
    that bind equally, then the lowest threshold of the schemes; the same line as the stored result's headline."""
    c = cli("thresholds", DEMO)
    assert c.code == 0
    cli("run", DEMO, "--out", tmp_path / "run", "--quiet")
    kind, res = _stored(tmp_path / "run")
    assert _first(c.out) == renderer_for(kind).headline(res)
    assert _first(c.out).startswith("Collusion is sustainable for delta >= ")
    assert c.out.splitlines()[1] == ""  # the answer stands alone above the tables


def test_run_of_a_single_cell_prints_the_report_answer_first_and_its_numbers_are_the_results(cli, tmp_path):
    c = cli("run", DEMO, "--out", tmp_path / "run", "--quiet", "--report")
    assert c.code == 0
    kind, res = _stored(tmp_path / "run")
    head = renderer_for(kind).headline(res)
    assert _first(c.out) == head
    grim = res.scheme_rows()[0]
    best = res.report["thresholds"]["best"]
    assert f"delta >= {number(grim['market'])} under grim trigger" in head
    assert f"{firm_list(grim['tied_firms'])} bind equally" in head
    assert f"The lowest threshold is {number(best['market'])}, under stick and carrot." in head
    # the command's own report is the stored result's, and the run summary follows it
    assert c.out.startswith(renderer_for(kind).console(res))
    assert f"Run folder: {tmp_path / 'run'}" in c.out
    # the bundle's first page answers with the same sentence
    md = (tmp_path / "run" / "report" / "summary.md").read_text()
    answer = next(line for line in md.splitlines() if line.startswith("**Answer.**"))
    assert answer.startswith("**Answer.** " + head.replace(">=", "&gt;="))
    assert "Under the settings of the experiment file" not in answer


def test_run_of_a_sweep_prints_no_cell_report(cli, write_experiment, tmp_path):
    from tests.conftest import TWO_MILLS

    c = cli("run", write_experiment(TWO_MILLS), "--out", tmp_path / "run", "--quiet")
    assert c.code == 0 and c.out.startswith("Run folder:")


def test_simulate_answer_first(cli, write_experiment, tmp_path):
    f = write_experiment(SIMULATE)
    c = cli("simulate", f)
    assert c.code == 0
    s = cli("run", f, "--out", tmp_path / "run", "--quiet")
    kind, res = _stored(tmp_path / "run")
    head = renderer_for(kind).headline(res)
    assert _first(c.out) == head == _first(s.out)
    e = res.simulation.metrics["collusive_share"]
    assert head.startswith(f"Every firm colluded in {percent(e.value)} of the periods (95 % interval "
                           f"{percent(e.low)} to {percent(e.high)}).")
    bd = res.simulation.metrics["broken_down"].value
    # the trigger-price line-up under noise: wars start, so collusion breaks down somewhere
    assert 0 < bd
    assert ("did not keep collusion" in head) and (percent(bd) in head or bd == 1)


def test_learn_answer_first(cli, write_experiment, tmp_path):
    f = write_experiment(LEARN)
    c = cli("learn", f)
    assert c.code == 0
    cli("run", f, "--out", tmp_path / "run", "--quiet")
    kind, res = _stored(tmp_path / "run")
    head = renderer_for(kind).headline(res)
    assert _first(c.out) == head
    pg, conv = res.summary["profit_gain"], res.summary["converged"]
    assert f"mean profit gain of {number(pg['mean'])} (95 % interval {number(pg['low'])} to {number(pg['high'])})" \
        in head
    assert f"{conv['count']} of {conv['n']} sessions converged ({percent(conv['share'])})" in head


def test_tournament_answer_first(cli, write_experiment):
    f = write_experiment(TOURNAMENT)
    c = cli("tournament", f)
    j = cli("tournament", f, "--json")
    assert c.code == 0 and j.code == 0
    assert _first(c.out) == json.loads(j.out)["answer"]
    doc = json.loads(j.out)
    best = doc["rules"][0]
    assert _first(c.out).startswith(best["label"])
    assert f"profit gain {number(best['profit_gain']['value'])}" in _first(c.out)


@pytest.mark.parametrize("text", [ASSESS_QUICK])
def test_assess_answer_first_with_the_thresholds_before_and_after(cli, write_experiment, tmp_path, text):
    c = cli("assess", write_experiment(text), "--out", tmp_path / "o")
    assert c.code == 0
    kind, res = _stored(tmp_path / "o")
    head = renderer_for(kind).headline(res)
    assert _first(c.out) == head
    con = res.to_dict()["conclusion"]
    words = {"easier": "makes coordination easier", "harder": "makes coordination harder",
             "unchanged": "does not change how easily the firms coordinate"}[con["direction"]]
    assert head.startswith(f"The merger {words}: the critical discount factor under grim trigger is "
                           f"{number(con['threshold_before'])} before ({con['binding_before']} binds) and "
                           f"{number(con['threshold_after'])} after ({con['binding_after']} binds).")
    # firm names, never product numbers, wherever the tables use firm names
    assert "product 1" not in c.out and "Firm B + Firm C" in c.out


def test_capacity_answer_first(cli, write_experiment):
    """Kreps and Scheinkman (1983) with Compte, Jenny and Rey (2002): capacities 60 and 40 of a demand of 80, the
    threshold under both punishments is the largest capacity share, 0.6, and the larger firm binds."""
    c = cli("thresholds", write_experiment(DUOPOLY))
    assert c.code == 0
    first = _first(c.out)
    assert first.startswith("Collusion is sustainable for delta >= 0.600 under Nash reversion (")
    assert first.endswith("and for delta >= 0.600 under minmax punishments (Firm 1 binds).")


def test_json_output_stays_one_document(cli):
    c = cli("thresholds", DEMO, "--json")
    assert c.code == 0 and json.loads(c.out)["caution"]
