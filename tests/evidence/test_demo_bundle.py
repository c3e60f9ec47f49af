"""The demo bundles as a reader meets them: the shipped thresholds demo (``demo-market.toml``, analytic, seconds) and
a reduced copy of the shipped simulation demo (``demo.toml``): a bar chart no taller than the page allows, whole
numbers (counts, firm numbers, yes/no) without decimals, and only the assumptions of the parts the run computed."""

from __future__ import annotations

import re

import pytest

from sim.evidence.figure_sizes import MAX_BARS_HEIGHT
from sim.evidence.figures import PAGE_WIDTH
from sim.evidence.render import pyplot
from sim.evidence.report import write_report
from sim.evidence.thresholds import RENDERER
from sim.runner.folder import open_run
from sim.runner.runs import run_experiment
from tests.conftest import ROOT

#: the simulation demo, shrunk (each change must apply: the file under test is the one shipped)
SHRINK_SIMULATION = {"periods = 600": "periods = 30", "replications = 400": "replications = 8",
                     "step = 0.05 }": "step = 0.15 }", "[0.0, 0.0025, 0.005, 0.01, 0.02, 0.04]": "[0.0, 0.02]"}


def _run(tmp_path_factory, name: str, changes: dict):
    text = (ROOT / "experiments" / name).read_text(encoding="utf-8")
    for old, new in changes.items():
        assert old in text, f"{name} no longer holds {old!r}: update the test's copy"
        text = text.replace(old, new)
    d = tmp_path_factory.mktemp(name.removesuffix(".toml"))
    (d / "experiment.toml").write_text(text, encoding="utf-8")
    run_experiment(d / "experiment.toml", d / "run", workers=1, report=True, write_report=write_report,
                   progress=False)
    return d / "run"


@pytest.fixture(scope="module")
def market_run(tmp_path_factory):
    return _run(tmp_path_factory, "demo-market.toml", {})


@pytest.fixture(scope="module")
def simulation_run(tmp_path_factory):
    return _run(tmp_path_factory, "demo.toml", SHRINK_SIMULATION)


def _text(path) -> str:
    html = path.read_text(encoding="utf-8")
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", re.sub(r"<style.*?</style>", "", html, flags=re.S)))


def _section(text: str, heading: str, end: str) -> str:
    start = text.index(heading, text.index("run folder"))  # past the contents
    return text[start:text.index(end, start)]


def test_the_bar_chart_of_thresholds_keeps_to_the_page(market_run):
    """Seven schemes of three firms (21 bars) made a figure 10.65 inches tall; it now stays within four fifths of
    the page's width, at the page's width."""
    with open_run(market_run) as rf:
        res = rf.result(rf.rows()[0].cell)
    (bars,) = [f for f in RENDERER.figures(res) if f.name == "thresholds"]
    try:
        w, h = bars.figure.get_size_inches()
        assert w == pytest.approx(PAGE_WIDTH) and 2.4 <= h <= MAX_BARS_HEIGHT
    finally:
        pyplot().close(bars.figure)


def test_whole_numbers_show_without_decimals(market_run, simulation_run):
    text = _text(market_run / "report" / "summary.html")
    results = _section(text, "Results", "Failed cells")
    assert " number of firms 3 " in results and "3.0000" not in results
    assert re.search(r"binding firm, grim trigger \[firm number\] 1 ", results)
    assert re.search(r"punishment length T \(item 5\) \[periods\] 10 ", results)
    assert re.search(r"critical discount factor, grim trigger 0\.5778 ", results)  # not a whole number: decimals
    # the deviation-pays column (yes 1 / no 0) of every cell of the sweep's table
    html = (simulation_run / "report" / "summary.html").read_text(encoding="utf-8")
    table = html[html.index("Headline results per cell"):]
    table = table[:table.index("</table>")]
    heads = [re.sub(r"<[^>]+>", "", h) for h in re.findall(r"<th>(.*?)</th>", table)]
    col = next(j for j, h in enumerate(heads) if h.startswith("deviation pays"))
    cells = [re.findall(r"<td[^>]*>(.*?)</td>", row)[col] for row in re.findall(r"<tr>(.*?)</tr>", table)[1:]]
    assert len(cells) == 4 * 2 * 3 and set(cells) == {"0", "1"}, cells
    # the swept values as the experiment file writes them, not padded to four decimals
    col = next(j for j, h in enumerate(heads) if h.startswith("discount factor delta"))
    deltas = [re.findall(r"<td[^>]*>(.*?)</td>", row)[col] for row in re.findall(r"<tr>(.*?)</tr>", table)[1:]]
    assert deltas and all(re.fullmatch(r"0\.\d\d?", d) for d in deltas), deltas


def test_only_the_assumptions_of_the_parts_computed_are_stated(market_run, simulation_run):
    """The thresholds demo computes no trigger-price equilibrium and no any-punishment threshold, but partial
    collusion (``thresholds.deltas``); the simulation demo runs the deviation check."""
    market = _section(_text(market_run / "report" / "summary.html"), "Assumptions and limitations",
                      "Methods appendix")
    assert "trigger-price" not in market and "any-punishment" not in market
    assert "Partial collusion is searched" in market and "Critical discount factors assume" in market
    sim = _section(_text(simulation_run / "report" / "summary.html"), "Assumptions and limitations",
                   "Methods appendix")
    assert "The deviation check tests one unilateral deviation" in sim
