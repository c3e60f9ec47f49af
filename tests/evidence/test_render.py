"""One renderer per analysis: the command and the bundle of a run folder show the same thing."""

import json

from sim.cli import main
from sim.evidence.render import renderer_for

TEXT = """
[experiment]
kind = "thresholds"
name = "two-mills"

[market]
model = "cournot"
demand = "linear"
intercept = 10.0
slope = 1.0
cost = [1.0, 1.5]

[thresholds]
punishments = [2]
"""


def test_the_command_plots_the_figure_the_bundle_shows(tmp_path, capsys):
    f = tmp_path / "two-mills.toml"
    f.write_text(TEXT)
    assert main(["thresholds", str(f), "--plot", str(tmp_path / "plots")]) == 0
    printed = capsys.readouterr().out
    assert main(["run", str(f), "--out", str(tmp_path / "run"), "--report", "--quiet"]) == 0
    capsys.readouterr()
    command_png = (tmp_path / "plots" / "thresholds.png").read_bytes()
    bundle_png = (tmp_path / "run" / "report" / "figures" / "thresholds.png").read_bytes()
    assert command_png == bundle_png
    # the terminal report of the stored result is the command's
    from sim.runner.runs import open_run

    with open_run(tmp_path / "run") as rf:
        assert renderer_for("thresholds").console(rf.result(0)) == printed.rstrip("\n")


def test_json_of_the_command_is_the_renderers(tmp_path, capsys):
    f = tmp_path / "two-mills.toml"
    f.write_text(TEXT)
    assert main(["thresholds", str(f), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["thresholds"]["finite"][0]["T"] == 2 and "caution" in doc and doc["market"]["cost"] == [1.0, 1.5]


def test_markdown_of_a_bundle_shows_html_as_text(tmp_path):
    from sim.evidence.bundle import Bundle

    with Bundle(tmp_path / "b", "A <b>title</b>") as b:
        b.paragraph("a label <script>alert(1)</script> from a file")
        b.table("t", ["value <i>"], [["<img src=x>"]], caption="<em>caption</em>")
        b.write()
    md = (tmp_path / "b" / "summary.md").read_text()
    html = (tmp_path / "b" / "summary.html").read_text()
    assert "<script>" not in md and "&lt;script&gt;" in md and "<img" not in md and "<em>" not in md
    assert "<script>" not in html and "<img src=x>" not in html
