"""The enforcement, demand-state and contact parts of the thresholds report: the command and the bundle show the same
thing, every new column has a catalogue entry, and a sweep over fines and detection rates draws the boundary."""

import json
from pathlib import Path

from sim.cli import main
from sim.evidence.catalogue import describe
from sim.evidence.render import renderer_for
from sim.runner.runs import open_run

ROOT = Path(__file__).resolve().parents[2]

TEXT = """
[experiment]
kind = "thresholds"
name = "three-parts"

[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 2

[thresholds]
punishments = [2]
deltas = [0.5]

[enforcement]
detection = 0.1
fine = 100.0
leniency = 0.5

[enforcement.frontier]
detection = [0.0, 0.1]
fines = [0.0, 400.0]

[demand_states]
kind = "iid"
probabilities = [0.5, 0.5]
parameter = "intercept"
values = [80.0, 120.0]
labels = ["low", "high"]

[contact]
firms = ["Firm A", "Firm B"]

[[contact.markets]]
label = "north"
firms = ["Firm A", "Firm B"]

[[contact.markets]]
label = "south"
firms = ["Firm B", "Firm A"]

[contact.markets.market]
model = "cournot"
demand = "linear"
intercept = 80.0
slope = 1.0
cost = [10.0, 20.0]
"""


def test_command_and_bundle_show_the_same_parts(tmp_path, capsys):
    f = tmp_path / "three-parts.toml"
    f.write_text(TEXT)
    assert main(["thresholds", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    for words in ("Collusion under enforcement", "Deterrence frontier", "Demand states", "Best state-contingent path",
                  "Multimarket contact", "lends slack to", "not proof of conduct"):
        assert words in printed
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    for name in ("thresholds", "deterrence-frontier", "state-prices", "contact-thresholds"):
        command_png = (tmp_path / "plots" / f"{name}.png").read_bytes()
        assert command_png == (tmp_path / "run" / "report" / "figures" / f"{name}.png").read_bytes(), name
    with open_run(tmp_path / "run") as rf:
        assert renderer_for("thresholds").console(rf.result(0)) == printed.rstrip("\n")
    assert main(["thresholds", str(f), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc) >= {"enforcement", "demand_states", "contact", "thresholds", "caution"}
    assert doc["enforcement"]["overall"]["firms_report"] is True


def test_every_new_column_has_a_catalogue_entry(tmp_path, capsys):
    f = tmp_path / "three-parts.toml"
    f.write_text(TEXT)
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--quiet"]) == 0
    header = (tmp_path / "run" / "results.csv").read_text().splitlines()[0].split(",")
    new = [h for h in header if h.split(".")[0] in ("enforcement", "states", "contact")]
    assert len(new) > 40
    for name in new:
        d = describe(name)
        assert d.entry.method and d.entry.definition, name


def test_deterrence_sweep_draws_the_boundary_heatmap(tmp_path, capsys):
    """The shipped deterrence study, run small: the heatmap over fines and detection rates is in the bundle, and
    the slack changes sign exactly where the fine crosses the deterrence fine of its detection rate."""
    text = (ROOT / "experiments" / "deterrence.toml").read_text()
    text = text.replace('"enforcement.fine" = { start = 0.0, stop = 2000.0, step = 250.0 }',
                        '"enforcement.fine" = [0.0, 500.0, 1500.0]')
    text = text.replace('"enforcement.detection" = [0.0, 0.05, 0.1, 0.15, 0.2, 0.25]',
                        '"enforcement.detection" = [0.0, 0.1, 0.2]')
    f = tmp_path / "deterrence.toml"
    f.write_text(text)
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet", "--workers", "1"]) == 0
    assert (tmp_path / "run" / "report" / "figures" / "deterrence-boundary.png").stat().st_size > 10_000
    with open_run(tmp_path / "run") as rf:
        rows = rf.rows()
        assert len(rows) == 9
        for row in rows:
            m = row.metrics
            fine, limit = row.params["enforcement.fine"], m["enforcement.deterrence_fine[1]"]
            if limit == limit:  # defined where detection is positive
                assert (m["enforcement.slack[1]"] >= 0) == (fine <= limit)
            else:
                assert m["enforcement.slack[1]"] > 0
