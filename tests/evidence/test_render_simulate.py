"""One pipeline for simulate: ``supergame simulate FILE`` and ``supergame run FILE --report`` run the same analysis,
print the same report and draw the same figures (byte for byte), and the result round-trips through JSON."""

import json

from sim.cli import main
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run
from sim.simulation.analysis import SimulateResult

TEXT = """
[experiment]
kind = "simulate"
name = "two-kilns"

[market]
model = "cournot"
demand = "linear"
intercept = 10.0
slope = 1.0
cost = [1.0, 1.0]

[monitoring]
perception_error = 0.02

[[strategies]]
strategy = "grim_trigger"
seats = 2

[run]
periods = 60
replications = 40
paths = 1
seed = 3

[deviation]
firm = 1
"""


def test_the_command_prints_and_plots_what_the_bundle_shows(tmp_path, capsys):
    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT)
    assert main(["simulate", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert "Deviation check: firm 1" in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    names = sorted(p.name for p in (tmp_path / "plots").iterdir())
    assert names == ["collusion-over-time.png", "price-path.png", "spell-survival.png"]
    for name in names:
        assert (tmp_path / "plots" / name).read_bytes() == (tmp_path / "run" / "report" / "figures" / name).read_bytes()
    with open_run(tmp_path / "run") as rf:
        stored = rf.result(0)
        assert renderer_for("simulate").console(stored) == printed.rstrip("\n")
        row = rf.rows()[0]
    assert isinstance(stored, SimulateResult) and stored.deviation is not None
    # the flat metrics of the run are the result's numbers (the same floats, flattened from the same summary)
    assert row.metrics["deviation.gain"] == stored.deviation.gain.value
    assert row.metrics["collusive_share"] == stored.simulation.metrics["collusive_share"].value


def test_result_round_trips_through_json(tmp_path, capsys):
    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT)
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    with open_run(tmp_path / "run") as rf:
        r = rf.result(0)
    doc = r.to_dict()
    again = SimulateResult.from_dict(json.loads(json.dumps(doc, allow_nan=False)))
    assert again.to_dict() == doc


def test_json_of_the_command_is_the_renderers(tmp_path, capsys):
    f = tmp_path / "two-kilns.toml"
    f.write_text(TEXT)
    assert main(["simulate", str(f), "--json", "--confidence", "0.9"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["settings"]["confidence"] == 0.9 and doc["market"]["cost"] == [1.0, 1.0]
    assert doc["deviation"]["firm"] == 1 and "caution" in doc
    g = doc["deviation"]["gain"]
    assert g["low"] <= g["value"] <= g["high"]
