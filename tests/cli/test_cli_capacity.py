"""Price competition with capacities from the command line: ``supergame thresholds FILE`` on a ``model =
"capacity"`` market, the same numbers as ``supergame run``, and bad input refused in one line naming the key."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sim.cli import main
from sim.evidence.capacity import RENDERER
from sim.runner.runs import open_run

ROOT = Path(__file__).resolve().parents[2]

# Kreps and Scheinkman (1983), Bell Journal of Economics 14(2), and Osborne and Pitchik (1986), Journal of Economic
# Theory 38(2), for inelastic demand: capacities 60 and 40, demand 80 up to v = 10, cost 0. The larger firm earns its
# residual monopoly v (M - k_2) = 400, the lowest price of both supports is 400 / 60, the smaller earns 40 * 400 / 60;
# Compte, Jenny and Rey (2002): the threshold is the largest capacity share, 0.6 (its rivals cannot serve M).
DUOPOLY = """
[experiment]
name = "duopoly"
kind = "capacity"

[market]
model = "capacity"
capacity = [60.0, 40.0]
reservation_price = 10.0
market_size = 80.0
cost = 0.0
"""


def write(tmp_path, text, name="m.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_thresholds_of_a_capacity_duopoly_against_the_closed_forms(tmp_path, capsys):
    assert main(["thresholds", str(write(tmp_path, DUOPOLY)), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    th = d["thresholds"]
    eq, c = th["equilibrium"], th["collusion"]
    assert eq["kind"] == "mixed"
    assert eq["payoffs"] == pytest.approx([400.0, 40 * 400 / 60])
    assert eq["support_low"] == pytest.approx([400 / 60, 400 / 60])
    assert eq["support_high"] == pytest.approx([10.0, 10.0])
    assert c["grim_market"] == pytest.approx(0.6) and c["harshest_market"] == pytest.approx(0.6)
    assert c["names"][c["harshest_binding"]] == "Firm 1"
    assert c["minmax_profits"] == pytest.approx([400.0, 0.0 + 10 * max(0.0, 80 - 60)])
    assert d["merger"] is None and "caution" in d


def test_thresholds_prints_what_run_stores_and_plots_the_bundle_figure(tmp_path, capsys, monkeypatch):
    f = write(tmp_path, DUOPOLY)
    monkeypatch.chdir(tmp_path)
    assert main(["thresholds", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "Critical discount factor, minmax punishment: 0.6000; binding: Firm 1" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        assert printed.rstrip("\n") == RENDERER.console(rf.result(0))
    for name in ("capacity-thresholds", "capacity-static-equilibrium"):
        assert (tmp_path / "plots" / f"{name}.png").read_bytes() == \
            (tmp_path / "run" / "report" / "figures" / f"{name}.png").read_bytes()


BAD = {
    "capacities that do not cover demand": (
        {"capacity": "[30.0, 30.0]"}, "market.capacity", "must exceed the demand"),
    "a reservation price at cost": ({"cost": "10.0"}, "market.reservation_price", "above the marginal cost"),
    "a reservation price below cost": (
        {"reservation_price": "5.0", "cost": "6.0"}, "market.reservation_price", "above the marginal cost"),
    "an unknown rationing rule": ({"rationing": '"random"'}, "market.rationing", "random"),
    "a cost per firm": ({"cost": "[1.0, 2.0]"}, "market.cost", "one marginal cost"),
}


@pytest.mark.parametrize("case", list(BAD), ids=list(BAD))
def test_bad_market_is_refused_in_one_line_naming_the_key(case, tmp_path, capsys):
    changes, key, words = BAD[case]
    lines = []
    for line in DUOPOLY.splitlines():
        k = line.split(" = ")[0]
        lines.append(f"{k} = {changes.pop(k)}" if k in changes else line)
    text = "\n".join(lines) + "".join(f"\n{k} = {v}" for k, v in changes.items())
    for cmd in (["thresholds"], ["run"]):
        code = main([*cmd, str(write(tmp_path, text))])
        err = capsys.readouterr().err.strip()
        assert code == 2, err
        assert len(err.splitlines()) == 1 and f"{key}:" in err and words in err, err
    assert not (tmp_path / "runs").exists()


KILN_TEXT = (ROOT / "experiments" / "kiln-merger.toml").read_text()


@pytest.mark.parametrize("old, new, key", [
    ("move_1 = [2.0, 12.0]", "move_1 = [12.0, 12.0]", "assess.global_sensitivity.inputs.move_1"),
    ("cost = [50.0, 70.0]", "cost = [70.0, 50.0]", "assess.global_sensitivity.inputs.cost"),
    ("move_1 = [2.0, 12.0]", "move_1 = [2.0, 45.0]", "assess.global_sensitivity.inputs"),
    ("move_1 = [2.0, 12.0]", "kilns = [1.0, 2.0]", "assess.global_sensitivity.inputs.kilns"),
    ('source = "Firm A"', 'source = "Firm Z"', "merger.capacity_moves[1].source"),
    ("amount = 8.0", "amount = 40.0", "merger.capacity_moves[1].amount"),
    ('rationing = "efficient"', 'rationing = "lottery"', "market.rationing"),
])
def test_bad_merger_or_sensitivity_input_exits_2_naming_the_key(old, new, key, tmp_path, capsys):
    assert old in KILN_TEXT
    f = write(tmp_path, KILN_TEXT.replace(old, new))
    assert main(["check", str(f)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and f"{key}:" in err, err
    assert main(["assess", str(f), "--out", str(tmp_path / "run")]) == 2
    assert not (tmp_path / "run").exists()


def test_empty_range_names_low_and_high(tmp_path, capsys):
    f = write(tmp_path, KILN_TEXT.replace("market_size = [90.0, 105.0]", "market_size = [95.0, 95.0]"))
    assert main(["check", str(f)]) == 2
    err = capsys.readouterr().err
    assert "assess.global_sensitivity.inputs.market_size: empty range" in err and "[95, 95]" in err


def test_a_capacity_market_in_another_kind_names_the_kind_to_use(tmp_path, capsys):
    # the simulate kind plays capacity markets; learning (a Q-learner's price grid) does not
    text = DUOPOLY.replace('kind = "capacity"', 'kind = "learn"')
    assert main(["check", str(write(tmp_path, text))]) == 2
    assert "market.model:" in capsys.readouterr().err


# Compte, Jenny and Rey (2002), as worked in tests/antitrust/test_capacity_screens.py: capacities (50, 20, 15, 15),
# M = 80, v = 10; the Nash-reversion threshold with shares proportional to capacity is k_1 / K = 0.5 before, 0.7
# after Firm 1 and Firm 2 merge, unchanged after Firm 3 and Firm 4 merge; Firms 1 and 2 tie as mavericks.
PAIRS = """
[experiment]
name = "four-kilns"
kind = "capacity"

[market]
model = "capacity"
names = ["Firm 1", "Firm 2", "Firm 3", "Firm 4"]
capacity = [50.0, 20.0, 15.0, 15.0]
reservation_price = 10.0
market_size = 80.0
cost = 0.0

[assess]
pair_mergers = true
"""


def test_the_pair_merger_table_and_the_maverick_in_the_report(tmp_path, capsys):
    """``assess.pair_mergers`` adds the threshold after every two-firm merger and the maverick to the capacity
    report (terminal, JSON, bundle figure); tolerance 5e-3: mixed equilibria of unequal firms on a price grid."""
    f = write(tmp_path, PAIRS)
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    with open_run(tmp_path / "run") as rf:
        res = rf.result(0)
    d = RENDERER.as_json(res)
    pairs = d["pairs"]
    assert pairs["before"] == pytest.approx(0.5, abs=5e-3)
    assert pairs["change"][0][1] == pytest.approx(0.2, abs=5e-3)
    assert pairs["change"][2][3] == pytest.approx(0.0, abs=5e-3)
    # without Firm 1 or without Firm 2 the rest (50, 80) do not exceed demand: both raise the threshold alike
    assert "Firm 1 and Firm 2 each raise the threshold by the same" in d["maverick"]["reason"]
    text = RENDERER.console(res)
    assert "Every two-firm merger and the maverick" in text and "Firm 1 + Firm 2" in text
    assert "Maverick: Firm 1 and Firm 2 each raise the threshold by the same" in text
    assert (tmp_path / "run" / "report" / "figures" / "capacity-pair-mergers.png").is_file()


@pytest.mark.parametrize(("text", "message"), [
    (PAIRS.replace("pair_mergers = true", 'pair_mergers = "yes"'), "must be true or false"),
    (PAIRS.replace('names = ["Firm 1", "Firm 2", "Firm 3", "Firm 4"]\n', "")
          .replace("[50.0, 20.0, 15.0, 15.0]", "[50.0, 40.0]"), "needs three or more"),
])
def test_bad_pair_merger_settings_are_refused_in_one_line(tmp_path, capsys, text, message):
    out = tmp_path / "run"
    assert main(["run", str(write(tmp_path, text)), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "assess.pair_mergers" in err and message in err and not out.exists()
