"""``supergame simulate`` with an ``[enforcement]`` table: the report, the bundle and one-line errors."""

import json

import pytest

from sim.cli import main
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run

TEXT = """
[experiment]
kind = "simulate"
name = "harrowmere-enforced"
currency = "thousand crowns"
period = "quarter"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 2

[[strategies]]
strategy = "grim_trigger"
seats = 2

[run]
periods = 30
replications = 300
delta = 0.8
seed = 9
paths = 1

[enforcement]
detection = 0.05
fine = 200.0
"""


def test_the_command_prints_what_the_run_stores(tmp_path, capsys):
    f = tmp_path / "enforced.toml"
    f.write_text(TEXT)
    assert main(["simulate", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "Enforcement (simulated)" in printed and "convictions per replication [count]" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
        assert renderer_for("simulate").console(stored) == printed.rstrip("\n")
        row = rf.rows()[0]
    assert row.metrics["enforced.detections"] == stored.enforcement.detections.value
    assert row.metrics["enforced.fines.firm1"] == stored.enforcement.fines[0].value
    bundle = (tmp_path / "run" / "report" / "index.md")
    text = bundle.read_text() if bundle.exists() else "".join(
        p.read_text() for p in (tmp_path / "run" / "report").rglob("*.md"))
    assert "share of replications with a conviction" in text
    assert "Enforcement: detection rate 0.05" in text
    name = "collusion-under-enforcement.png"
    assert (tmp_path / "plots" / name).read_bytes() == (tmp_path / "run" / "report" / "figures" / name).read_bytes()


def test_json_has_the_enforcement_part(tmp_path, capsys):
    f = tmp_path / "enforced.toml"
    f.write_text(TEXT)
    assert main(["simulate", str(f), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["enforcement"]["conviction_rate"] == 0.05
    assert doc["enforcement"]["enforcement"]["fine"] == 200.0


@pytest.mark.parametrize("old, new, key", [
    ("detection = 0.05", "detection = 1.5", "enforcement.detection"),
    ("fine = 200.0", "fine = -1.0", "enforcement.fine"),
    ("fine = 200.0", "fine = 200.0\nafter_detection = 4\n[monitoring]\nimplementation_error = 0.01",
     "enforcement.after_detection"),
])
def test_bad_input_one_line_exit_2(tmp_path, capsys, old, new, key):
    p = tmp_path / "bad.toml"
    p.write_text(TEXT.replace(old, new))
    assert main(["simulate", str(p)]) == 2
    cap = capsys.readouterr()
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"supergame simulate: error: {key}:"), cap.err


STATES = """
[experiment]
kind = "simulate"
name = "brightwater-seasons"

[market]
model = "bertrand"
demand = "logit"
quality = 2.0
outside = 0.0
mu = 0.25
cost = 1.0
n_firms = 2
size = 1.0

[[strategies]]
strategy = "grim_trigger"
seats = 2

[run]
periods = 40
replications = 100
delta = 0.9

[demand_states]
kind = "iid"
probabilities = [0.7, 0.3]
labels = ["low", "high"]
parameter = "size"
values = [1.0, 1.5]
"""


def test_demand_states_in_the_report(tmp_path, capsys):
    p = tmp_path / "states.toml"
    p.write_text(STATES)
    assert main(["simulate", str(p)]) == 0
    out = capsys.readouterr().out
    assert "Demand states (simulated)" in out and "long-run share" in out


@pytest.mark.parametrize("old, new, key", [
    ("probabilities = [0.7, 0.3]", "probabilities = [0.7, 0.4]", "demand_states.probabilities"),
    ('parameter = "size"', 'parameter = "mu"', "demand_states.parameter"),
])
def test_bad_demand_states_one_line_exit_2(tmp_path, capsys, old, new, key):
    p = tmp_path / "bad.toml"
    p.write_text(STATES.replace(old, new))
    assert main(["simulate", str(p)]) == 2
    cap = capsys.readouterr()
    lines = cap.err.strip().splitlines()
    assert cap.out == "" and len(lines) == 1 and lines[0].startswith(f"supergame simulate: error: {key}:"), cap.err
