"""``supergame simulate`` end to end: table, JSON, paths, figures, and one-line errors for bad input."""

import json
import subprocess
import sys

import pytest

from sim.cli import main
from sim.core.text import CAUTION

SMALL = """
[experiment]
name = "tarnvale-trigger"
kind = "simulate"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 3

[monitoring]
signal = "price"
noise = "lognormal"
sigma = 0.1

[[strategies]]
strategy = "trigger_price"
trigger = 50.0
length = 2
seats = 3

[run]
periods = 200
replications = 200
delta = 0.9
seed = 5
"""


@pytest.fixture
def small(tmp_path):
    p = tmp_path / "small.toml"
    p.write_text(SMALL)
    return p


def test_table_output(small, capsys):
    assert main(["simulate", str(small)]) == 0
    out = capsys.readouterr().out
    assert "share of periods in which all firms collude" in out
    assert "Green and Porter (1984)" in out
    assert CAUTION in out


def test_json_paths_and_plots(small, tmp_path, capsys):
    figs = tmp_path / "figs"
    assert main(["simulate", str(small), "--json", "--paths", "2", "--plot", str(figs)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["caution"] == CAUTION
    assert doc["settings"]["run"]["paths"] == 2
    assert len(doc["paths"]["actions"]) == 2 and len(doc["paths"]["actions"][0]) == 200
    assert doc["baseline"]["trigger_price"]["war_length"] == 2
    m = doc["metrics"]["collusive_share"]
    assert m["low"] <= m["value"] <= m["high"]
    assert sorted(p.name for p in figs.iterdir()) == ["collusion-over-time.png", "price-path.png", "spell-survival.png"]


def test_flags_without_a_file(capsys):
    assert main(["simulate", "--intercept", "100", "--cost", "10", "--firms", "2", "--strategy",
                 "finite_punishment:length=2", "--implementation-error", "0.02", "--periods", "50",
                 "--replications", "40", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [s["strategy"] for s in doc["settings"]["lineup"]] == ["finite_punishment"] * 2
    assert doc["baseline"]["thresholds"][0]["scheme"] == "Nash reversion, T=2"


def test_same_numbers_with_one_and_two_threads(small, capsys):
    main(["simulate", str(small), "--json", "--threads", "1"])
    a = json.loads(capsys.readouterr().out)
    main(["simulate", str(small), "--json", "--threads", "2"])
    b = json.loads(capsys.readouterr().out)
    assert a["metrics"] == b["metrics"] and a["firms"] == b["firms"]


BAD_AUTOMATON = SMALL.replace('''[[strategies]]
strategy = "trigger_price"
trigger = 50.0
length = 2
seats = 3''', '''[[strategies]]
strategy = "automaton"
seats = 3
states.collude = { action = "collusive", watch = "price", threshold = 50.0, bad = "war" }
states.punish = { action = "nash", next = "collude" }''')


@pytest.mark.parametrize("text, args, key", [
    (BAD_AUTOMATON, [], "strategies[1].states.collude.bad"),
    (SMALL, ["--implementation-error", "1.5"], "--implementation-error"),
    (SMALL.replace("sigma = 0.1", "sigma = 0.1\nperception_error = -0.2"), [], "monitoring.perception_error"),
    (SMALL.replace("seats = 3", "seats = 2"), [], "strategies"),
    (SMALL.replace('strategy = "trigger_price"', 'strategy = "trigger_prize"'), [], "strategies[1].strategy"),
    (SMALL.replace("seed = 5", "seed = 5\nwarmup = 3"), [], "run.warmup"),
    (SMALL + "\n[thresholds]\npunishments = [1]\n", [], "thresholds"),
    (SMALL, ["--delta", "1.5"], "--delta"),
    (SMALL, ["--strategy", "grim_trigger"], "--strategy[1].strategy"),
    (SMALL, ["--strategy", "finite_punishment:length=0"], "--strategy[1].length"),
    (SMALL, ["--periods", "ten"], "--periods"),
    (SMALL, ["--noise", "normal", "--sigma", "2"], "--sigma"),
    (SMALL.replace('noise = "lognormal"', 'noise = "normal"').replace("sigma = 0.1", "sigma = 0.5"), [],
     "monitoring.sigma"),
])
def test_bad_input_one_line_exit_2(tmp_path, capsys, text, args, key):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    assert main(["simulate", str(p), *args]) == 2
    cap = capsys.readouterr()
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"supergame simulate: error: {key}:"), cap.err


def test_flags_only_name_the_missing_flag(capsys):
    # no FILE: the market comes from flags alone, so a missing setting is named by its flag
    assert main(["simulate", "--firms", "2", "--strategy", "grim_trigger", "--delta", "0.9"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("supergame simulate: error: --cost: missing"), err


def test_no_traceback_from_the_installed_command(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text(SMALL.replace("seats = 3", "seats = 4"))
    out = subprocess.run([sys.executable, "-m", "sim", "simulate", str(p)], capture_output=True, text=True)
    assert out.returncode == 2 and out.stdout == ""
    assert out.stderr.strip() == ("supergame simulate: error: strategies: the line-up has 4 seats but the market "
                                  "has 3 firms; give one strategy per firm (use seats to repeat one)")


def test_thresholds_at_the_collusive_level_played(capsys):
    """Three Cournot firms (P = 100 - Q, cost 10) colluding at q = 20: grim trigger's threshold is
    (625 - 600) / (625 - 506.25) = 4/19 (Friedman, 1971, profits by hand), which delta = 0.5 clears."""
    assert main(["simulate", "--cost", "10", "--intercept", "100", "--firms", "3", "--strategy",
                 "grim_trigger:collude=20", "--delta", "0.5", "--periods", "20", "--replications", "5",
                 "--json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)["baseline"]["thresholds"]
    assert row["market"] == pytest.approx(4 / 19, rel=1e-12) and row["clears"] is True


def test_labels_say_what_wars_and_thresholds_mean(small, capsys):
    """Price wars count their deviation period, punishment phases are reported apart, and with a fixed
    horizon the threshold comparison is labelled the infinite-horizon benchmark."""
    assert main(["simulate", "--cost", "10", "--intercept", "100", "--firms", "3", "--strategy",
                 "finite_punishment:length=3", "--implementation-error", "0.01", "--periods", "300",
                 "--replications", "20"]) == 0
    out = capsys.readouterr().out
    assert "mean length of a price war (periods, its deviation period included)" in out
    row = next(line for line in out.splitlines() if line.startswith("mean length of a punishment phase"))
    values = row[len("mean length of a punishment phase (periods)"):].split()
    assert values[0] == "3.0000" and "3.0000" in values[1:4]  # simulated, then the analytic T
    assert row.endswith("T-period Nash reversion: T = 3")
    assert "clears (infinite horizon)" in out and "infinite-horizon benchmark" in out
    assert main(["simulate", str(small), "--horizon", "random", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["survival"]["punishments"]["mean"]["value"] == pytest.approx(2.0)
    assert "deviation" in doc["definitions"]["price war"] and "T + 1" in doc["definitions"]["price war"]
    assert not any("fixed horizon" in x for x in doc["baseline"]["notes"])
