"""The merger bundle as a reader prints it, from a reduced copy of the shipped assessment (same sections, tables and
figures as the full run; fewer periods, replications and sensitivity points): the caution once on the first page,
numbers in the setup written as a reader writes them, firm names instead of product numbers, a titled legend of
legible size and a band around the simulated persistence curve."""

from __future__ import annotations

import re

import numpy as np
import pytest

from sim.core.text import CAUTION, plain_number, plain_values
from sim.evidence.assess import RENDERER
from sim.evidence.figures import PAGE_WIDTH, SMALL
from sim.evidence.render import pyplot
from sim.evidence.report import write_report
from sim.runner.folder import open_run
from sim.runner.runs import run_experiment
from tests.conftest import ROOT

#: the shipped file's sizes, shrunk (each change must apply: the file under test is the one shipped)
SHRINK = {"periods = 250": "periods = 40", "replications = 400": "replications = 16",
          "num = 7 }": "num = 2 }", "num = 9 }": "num = 2 }", "num = 24 }": "num = 4 }",
          "noise = [0.0, 0.25, 0.5, 1.0, 2.0, 4.0]": "noise = [0.0, 1.0]"}


@pytest.fixture(scope="module")
def merger_run(tmp_path_factory):
    """The run folder of the reduced shipped merger assessment, with its bundle."""
    text = (ROOT / "experiments" / "merger-assessment.toml").read_text(encoding="utf-8")
    for old, new in SHRINK.items():
        assert old in text, f"merger-assessment.toml no longer holds {old!r}: update the test's copy"
        text = text.replace(old, new)
    d = tmp_path_factory.mktemp("merger-bundle")
    (d / "experiment.toml").write_text(text, encoding="utf-8")
    run_experiment(d / "experiment.toml", d / "run", workers=1, report=True, write_report=write_report,
                   progress=False)
    return d / "run"


@pytest.fixture(scope="module")
def page(merger_run) -> str:
    return (merger_run / "report" / "summary.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def result(merger_run):
    with open_run(merger_run) as rf:
        return rf.result(rf.rows()[0].cell)


def _text(html: str) -> str:
    """The page's text (tags dropped), as a reader sees it."""
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", re.sub(r"<style.*?</style>", "", html, flags=re.S)))


def test_the_caution_shows_once_on_the_first_page_and_once_at_the_close(page):
    text = _text(page)
    first_section = text.index("Conclusion under the stated assumptions")
    assert text[:first_section].count(CAUTION) == 1
    assert text.count(CAUTION) == 2 and text.rstrip().endswith(CAUTION)


def test_the_setup_writes_numbers_as_a_reader_does(page):
    """The potential market of the shipped file is 50,000 commuters: no fixed six decimals ("50000.000000") in the
    setup or the calibrated parameters."""
    text = _text(page)
    start = text.index("Pre-merger market:")
    setup = text[start:text.index("Calibration", start)]
    assert "size 50,000" in setup and "outside 0;" in setup
    found = re.search(r".{40}\d\.\d*000000\b.{20}", text)
    assert found is None, found.group(0)


def test_plain_numbers():
    """Whole numbers without decimals, thousands separated, no trailing zeros; scientific notation only where fixed
    decimals would lose the number (common practice of style guides, no source)."""
    assert [plain_number(x) for x in (50000.0, 0.0, -0.0, 1.1466, 2.501707, 100.0, -12345.5, 1e-9, None)] == [
        "50,000", "0", "0", "1.1466", "2.501707", "100", "-12,345.5", "1e-09", "-"]
    assert plain_values([10.0, 14.0]) == "10, 14" and plain_values([10.0, 14.0], brackets=True) == "[10, 14]"


@pytest.fixture(scope="module")
def drawn(result):
    plt = pyplot()
    figs = {f.name: f for f in RENDERER.figures(result)}
    yield figs
    for f in figs.values():
        plt.close(f.figure)


def _legends(fig) -> list:
    return list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend() is not None]


def test_every_legend_of_the_assessment_has_a_title_and_legible_text(drawn):
    """Figures are drawn at the page's printed width, so text at SMALL points or more stays at least 8 pt on
    paper (the issue's print rule; common practice, no source)."""
    assert {"partial_collusion", "persistence", "thresholds"} <= set(drawn)
    for name, f in drawn.items():
        for leg in _legends(f.figure):
            assert leg.get_title().get_text().strip(), name
            sizes = [t.get_fontsize() for t in leg.get_texts()] + [leg.get_title().get_fontsize()]
            assert min(sizes) >= SMALL, (name, sizes)
    (leg,) = _legends(drawn["partial_collusion"].figure)
    assert leg.get_title().get_text() == "punishment scheme (colour) and market (line style)"
    assert drawn["partial_collusion"].figure.get_figwidth() == pytest.approx(PAGE_WIDTH)


def test_the_persistence_curve_has_its_band(drawn, result):
    """Each market's share of colluding replications is drawn with a filled band inside [0, 1] that contains the
    curve; the caption names the interval and its source."""
    from matplotlib.collections import PolyCollection

    f = drawn["persistence"]
    (ax,) = f.figure.axes
    bands = [c for c in ax.collections if isinstance(c, PolyCollection)]
    assert len(bands) == 2
    for band, line in zip(bands, ax.get_lines()):
        ys = np.concatenate([p.vertices[:, 1] for p in band.get_paths()])
        assert ys.min() >= 0.0 and ys.max() <= 1.0
        y = np.asarray(line.get_ydata(), dtype=float)
        assert ys.min() <= y.min() and y.max() <= ys.max() and ys.max() - ys.min() > y.max() - y.min()
    assert "Wilson score interval" in f.caption and "Wilson, 1927" in f.caption


def test_firms_are_named_on_the_console_and_everywhere_in_the_bundle(merger_run, page, result):
    """The price changes, the per-firm thresholds after the merger and the post-merger owners carry the firms' names
    (Firm A ... Firm D of the file; Firm B + Firm D after the merger), never "product 1" or "firm 2"."""
    console = RENDERER.console(result)
    md = (merger_run / "report" / "summary.md").read_text(encoding="utf-8")
    for text in (console, _text(page), md):
        found = re.search(r".{50}\b(product|firm) \d.{20}", text)
        assert found is None, found.group(0)
    assert "price change from the merger (Firm A)" in md
    assert "critical discount factor, grim trigger (Firm B + Firm D; after the merger)" in md
    assert "owner Firm A, Firm B + Firm D, Firm C, Firm B + Firm D" in md
