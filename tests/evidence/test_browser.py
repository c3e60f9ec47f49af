"""The evidence bundle in a real browser: headless Chromium, driven by selenium, opens ``summary.html`` of small run
folders from ``file://`` and checks what a reader would meet -- console errors, images that do not load, links and
anchors that lead nowhere, missing tables, a page wider than the screen (a desktop and a phone) -- and takes a
screenshot of the whole page into the test's folder.

The browser is the operating system's (Debian: ``apt-get install chromium chromium-driver``; ``.ci/run`` installs
them), never downloaded at run time. Without it the tests fail and say how to install it; set
``SUPERGAME_NO_BROWSER=1`` to skip them on purpose (the skip and its reason are printed in pytest's summary).
"""

from __future__ import annotations

import base64
import math
import os
import re
import shutil
import textwrap
from pathlib import Path
from urllib.parse import unquote, urlparse

import pytest

try:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    from selenium.webdriver.common.by import By
    from selenium.webdriver.common.print_page_options import PrintOptions
except ImportError:  # reported by the fixture below: the tests fail, they never skip silently
    webdriver = None

from sim.evidence.report import write_report
from sim.runner.runs import run_experiment
from tests.conftest import ROOT, TWO_MILLS

NO_BROWSER = os.environ.get("SUPERGAME_NO_BROWSER") == "1"
BROWSERS = ("chromium", "chromium-browser", "google-chrome")
DESKTOP, PHONE = (1280, 900), (390, 844)
#: where to copy the screenshots and printed PDFs as well (a folder to look at them; unset: the test's folder only)
SHOTS = os.environ.get("SUPERGAME_SCREENSHOTS")
#: A4 paper and the margins of the bundle's print stylesheet (``@page``), in mm; CSS pixels per mm (96 per inch)
A4, MARGIN_Y, MARGIN_X, PX_PER_MM = (210.0, 297.0), 15.0, 14.0, 96 / 25.4

#: a sweep over the discount factor and the noise, two schemes: heatmaps, lines and tables of every generic section
SWEEP = textwrap.dedent("""
    # Browser check: two quarries of an invented valley, grim trigger and Nash reversion over delta and noise.
    [experiment]
    name = "browser-sweep"
    kind = "simulate"
    description = "Can two invented quarries sustain collusion when they misread each other now and then?"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 12.0]
    [monitoring]
    perception_error = 0.0
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 40
    replications = 12
    seed = 7
    [deviation]
    firm = "binding"
    [sweep]
    "run.delta" = [0.5, 0.7, 0.9]
    "monitoring.perception_error" = [0.0, 0.02]
    "strategies.1" = { values = [
        { strategy = "grim_trigger", seats = 2 },
        { strategy = "finite_punishment", length = 3, seats = 2 },
    ], labels = ["grim trigger", "Nash reversion T=3"] }
    """)

ONE_CELL = textwrap.dedent("""
    # Browser check: one cell of the same market (a single run: the metric table and the renderer's figures).
    [experiment]
    name = "browser-one"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 12.0]
    [monitoring]
    perception_error = 0.01
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 40
    replications = 12
    delta = 0.8
    seed = 7
    """)

#: a tournament: the analysis's own account of the run (its answer promoted to the first page)
TOURNAMENT = textwrap.dedent("""
    # Browser check: three rules for two invented mills.
    [experiment]
    name = "browser-tournament"
    kind = "tournament"
    currency = "EUR"
    period = "month"
    description = "Which rule keeps the most of the collusive profit against the others?"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 2
    [[entrants]]
    label = "grim trigger"
    strategy = "grim_trigger"
    [[entrants]]
    label = "always compete"
    strategy = "always_compete"
    [[entrants]]
    label = "tit for tat"
    strategy = "tit_for_tat"
    [tournament]
    bootstrap = 20
    generations = 5
    population = 4
    moran_runs = 0
    [run]
    periods = 12
    replications = 4
    """)

EXPERIMENTS = ROOT / "experiments"


def _shrunk(name: str, changes: dict) -> str:
    """A shipped experiment file with its sizes shrunk (each change must apply: the file is the one shipped)."""
    text = (EXPERIMENTS / name).read_text(encoding="utf-8")
    for old, new in changes.items():
        assert old in text, f"{name} no longer holds {old!r}: update the test's copy"
        text = text.replace(old, new)
    return text


#: the shipped experiments whose bundles a reader prints, shrunk to run in seconds (the layout, not the numbers, is
#: under test: same tables, figures and sections as the full run)
SHIPPED = {
    "demo": lambda: _shrunk("demo-market.toml", {}),
    "merger": lambda: _shrunk("merger-assessment.toml", {
        "periods = 250": "periods = 60", "replications = 400": "replications = 24",
        "num = 7 }": "num = 3 }", "num = 9 }": "num = 3 }", "num = 24 }": "num = 6 }",
        "noise = [0.0, 0.25, 0.5, 1.0, 2.0, 4.0]": "noise = [0.0, 1.0, 4.0]"}),
    "tournament-shipped": lambda: _shrunk("tournament-punishments.toml", {
        "bootstrap = 1000": "bootstrap = 50", "generations = 300": "generations = 40",
        "population = 50": "population = 10", "moran_runs = 10000": "moran_runs = 20",
        "periods = 1000": "periods = 80", "replications = 500": "replications = 8"}),
}

RUNS = {"sweep": SWEEP, "one-cell": ONE_CELL, "thresholds": TWO_MILLS, "tournament": TOURNAMENT, **SHIPPED}


@pytest.fixture(scope="module")
def browser():
    """A headless Chromium driven by selenium (fails with the install command when it is missing)."""
    if NO_BROWSER:
        pytest.skip("SUPERGAME_NO_BROWSER=1: the browser tests of the evidence bundle are switched off")
    if webdriver is None:
        pytest.fail("selenium is not installed: pip install -e '.[dev]' (or set SUPERGAME_NO_BROWSER=1)")
    binary = next((shutil.which(b) for b in BROWSERS if shutil.which(b)), None)
    driver_path = shutil.which("chromedriver")
    if binary is None or driver_path is None:
        pytest.fail("no headless browser: install it with `apt-get install -y chromium chromium-driver` "
                    "(Debian), or set SUPERGAME_NO_BROWSER=1 to switch the browser tests off")
    opts = webdriver.ChromeOptions()
    opts.binary_location = binary
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--hide-scrollbars", f"--window-size={DESKTOP[0]},{DESKTOP[1]}"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(driver_path), options=opts)
    try:
        yield driver
    finally:
        driver.quit()


@pytest.fixture(scope="module", params=sorted(RUNS))
def bundle(request, tmp_path_factory):
    """``summary.html`` of the bundle of a small finished run folder."""
    d = tmp_path_factory.mktemp(f"browser-{request.param}")
    p = d / "experiment.toml"
    text = RUNS[request.param]
    p.write_text(text() if callable(text) else text)
    run_experiment(p, d / "run", workers=1, report=True, write_report=write_report, progress=False)
    page = d / "run" / "report" / "summary.html"
    assert page.is_file()
    return page


def _show(driver, width: int, height: int) -> None:
    """Lay the page out as a screen of this size (a phone: mobile metrics)."""
    driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {
        "width": width, "height": height, "deviceScaleFactor": 1, "mobile": width < 600})


def _open(driver, page: Path) -> list:
    """Open the page; the browser's log entries written while it loaded."""
    driver.get_log("browser")  # drop what an earlier page left
    _show(driver, *DESKTOP)
    driver.get(page.as_uri())
    driver.execute_script("return document.readyState")
    return driver.get_log("browser")


def test_the_page_loads_without_console_errors_and_every_image_shows(browser, bundle):
    log = _open(browser, bundle)
    severe = [e for e in log if e.get("level") == "SEVERE"]
    assert not severe, f"console errors: {severe}"
    images = browser.execute_script(
        "return Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.alt.slice(0, 60)])")
    assert images, "the bundle shows no figure"
    broken = [alt for complete, width, alt in images if not complete or width <= 0]
    assert not broken, f"images that did not load: {broken}"


def test_every_link_and_anchor_leads_somewhere(browser, bundle):
    _open(browser, bundle)
    hrefs = browser.execute_script("return Array.from(document.querySelectorAll('a[href]')).map(a => "
                                   "a.getAttribute('href'))")
    assert any(h.startswith("#") for h in hrefs), "no contents list with anchors"
    for h in hrefs:
        if h.startswith("#"):
            assert browser.execute_script("return document.getElementById(arguments[0]) !== null", h[1:]), h
        else:
            url = urlparse(h)
            assert not url.scheme and not url.netloc, f"a link leaves the bundle: {h}"
            assert (bundle.parent / unquote(url.path)).is_file(), f"a link to a missing file: {h}"


def test_the_first_page_answers_and_the_tables_are_there(browser, bundle):
    _open(browser, bundle)
    first = browser.find_element(By.CSS_SELECTOR, "body > :nth-child(2)")
    assert first.get_attribute("id") == "in-short", "the first section after the title is the answer"
    text = first.text
    assert "Question." in text and "Answer." in text and "not proof of conduct" in text
    tables = browser.find_elements(By.TAG_NAME, "table")
    assert len(tables) >= 3  # results, methods, glossary at least
    for t in tables:
        assert t.find_elements(By.TAG_NAME, "th"), "a table without column labels"
    headers = " | ".join(th.text for th in browser.find_elements(By.CSS_SELECTOR, "th"))
    glossary = browser.find_element(By.ID, "glossary")
    assert glossary is not None
    # stored names (a dot between words, or an underscore) appear only in the glossary's key column
    for th in browser.find_elements(By.CSS_SELECTOR, "th"):
        assert "_" not in th.text and ".low" not in th.text, headers


@pytest.mark.parametrize("size", [DESKTOP, PHONE], ids=["desktop", "phone"])
def test_nothing_overflows_the_page_width_and_a_screenshot_is_taken(browser, bundle, size, tmp_path):
    _open(browser, bundle)
    _show(browser, *size)
    widths = browser.execute_script("return [document.documentElement.scrollWidth, "
                                    "document.documentElement.clientWidth]")
    wide = browser.execute_script("""
        const w = document.documentElement.clientWidth, out = [];
        for (const e of document.body.querySelectorAll('*')) {
            if (e.closest('.table-wrap, pre')) continue;   // these scroll within themselves
            const r = e.getBoundingClientRect();
            if (r.right > w + 1) out.push(e.tagName + ' ' + (e.id || e.className) + ' ' + Math.round(r.right));
        }
        return out.slice(0, 10);""")
    assert widths[0] <= widths[1], f"the page is wider than the {size[0]} px screen: {widths}; {wide}"
    assert not wide, f"elements past the right edge at {size[0]} px: {wide}"
    height = min(browser.execute_script("return document.documentElement.scrollHeight"), 20000)
    _show(browser, size[0], height)
    shot = tmp_path / f"{bundle.parent.parent.parent.name}-{size[0]}px.png"
    assert browser.save_screenshot(str(shot))
    assert shot.stat().st_size > 10_000
    _keep(shot)


def _keep(path: Path) -> None:
    """Copy a screenshot or a printed PDF to the folder named by ``SUPERGAME_SCREENSHOTS`` (when set)."""
    if SHOTS:
        Path(SHOTS).mkdir(parents=True, exist_ok=True)
        shutil.copy(path, Path(SHOTS) / path.name)


def pdf_pages(pdf: bytes) -> int:
    """The number of pages of a PDF: its page objects (``/Type /Page``, not ``/Pages``), which Chromium writes
    uncompressed (PDF 1.7, ISO 32000-1:2008, section 7.7.3.3: a page object's ``/Type`` is ``/Page``)."""
    return len(re.findall(rb"/Type\s*/Page(?![A-Za-z])", pdf))


def _print_layout(driver) -> dict:
    """Lay the page out as printed on A4 (print media, the printable width) and measure what the page count
    depends on: the content's height, the heights of the blocks the stylesheet keeps whole, the sections that start
    a new page, and the styles the print stylesheet must give."""
    width = round((A4[0] - 2 * MARGIN_X) * PX_PER_MM)
    driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
    driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {
        "width": width, "height": 1000, "deviceScaleFactor": 1, "mobile": False})
    try:
        return driver.execute_script("""
            const st = (sel, prop) => Array.from(document.querySelectorAll(sel))
                .map(e => getComputedStyle(e)[prop]);
            const box = e => e.getBoundingClientRect();
            const head = document.getElementById('in-short');
            // the blocks a printed page holds, in reading order: those kept whole (figures, the answer box, table
            // rows), and the lines of text a page may end between (paragraphs, list items, headings, code)
            const whole = 'figure, .headline, tr', all = whole + ', h1, h2, h3, h4, p, li, pre, .caution';
            const blocks = [];
            for (const e of document.body.querySelectorAll(all)) {
                const outer = e.parentElement && e.parentElement.closest(whole);
                const r = box(e);
                if (outer || r.height === 0) continue;
                blocks.push([r.top + window.scrollY, r.bottom + window.scrollY,
                             e.matches('h2.appendix') ? 1 : 0, e.matches(whole) ? 1 : 0]);
            }
            return {
                blocks: blocks,
                height: document.documentElement.scrollHeight,
                whole: Array.from(document.querySelectorAll('figure, .headline, .caution, tr'))
                    .map(e => box(e).height),
                appendices: st('h2.appendix', 'breakBefore'),
                nav: st('nav', 'display'),
                rows: st('tr', 'breakInside'),
                images: Array.from(document.images).map(i => [box(i).right, getComputedStyle(i).maxWidth]),
                width: document.documentElement.clientWidth,
                answer: head ? box(head).bottom + window.scrollY : null,
                overflow: document.documentElement.scrollWidth - document.documentElement.clientWidth,
            };""")
    finally:
        driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})


def _paginate(blocks: list, page_h: float) -> int:
    """Pages that ``blocks`` (top, bottom, starts a page, kept whole; in CSS pixels, reading order) fill."""
    pages, start = 1, blocks[0][0] if blocks else 0.0
    for top, bottom, new_page, whole in blocks:
        if new_page and top > start:
            pages, start = pages + 1, top
        elif bottom - start > page_h:
            if whole and bottom - top <= page_h:
                pages, start = pages + 1, top
            else:  # text (or a block taller than a page) continues on the next pages
                extra = math.ceil((bottom - start) / page_h) - 1
                pages, start = pages + extra, start + extra * page_h
    return pages


def test_the_bundle_prints_to_the_expected_a4_pages(browser, bundle, tmp_path):
    _open(browser, bundle)
    css = browser.execute_script("return Array.from(document.querySelectorAll('style')).map(s => s.textContent)"
                                 ".join('\\n')")
    assert "@media print" in css, "the bundle has no print stylesheet"
    lay = _print_layout(browser)
    # what the print stylesheet hides and keeps
    assert all(d == "none" for d in lay["nav"]), f"navigation printed: {lay['nav']}"
    assert lay["appendices"], "no appendix section (methods, glossary) marked to start a new page"
    assert all(b == "page" for b in lay["appendices"]), lay["appendices"]
    assert all(b == "avoid" for b in lay["rows"]), "table rows may be split across pages"
    assert lay["images"] and all(m == "100%" for _, m in lay["images"])
    assert all(right <= lay["width"] + 1 for right, _ in lay["images"]), "a figure is wider than the printed page"
    assert lay["overflow"] <= 1, f"the printed page is {lay['overflow']} px wider than A4's printable width"
    page_h = (A4[1] - 2 * MARGIN_Y) * PX_PER_MM
    assert lay["answer"] is not None and lay["answer"] <= page_h, \
        f"the first page's answer ends {lay['answer']:.0f} px down, past the first printed page ({page_h:.0f} px)"

    opts = PrintOptions()
    opts.page_width, opts.page_height = A4[0] / 10, A4[1] / 10  # cm
    opts.margin_top = opts.margin_bottom = MARGIN_Y / 10
    opts.margin_left = opts.margin_right = MARGIN_X / 10
    opts.background = True
    pdf = base64.b64decode(browser.print_page(opts))
    assert pdf.startswith(b"%PDF-")
    out = tmp_path / f"{bundle.parent.parent.parent.name}-A4.pdf"
    out.write_bytes(pdf)
    _keep(out)
    n = pdf_pages(pdf)
    # The expected count: the blocks laid out at the printed width, filled into pages in reading order -- a new page
    # before an appendix, before a block kept whole that does not fit the rest of the page, and where a text block
    # runs past the page's end; 15 % either way for what the measured layout cannot know (margins collapsing at a
    # page's top, repeated table headers, headings kept with what follows).
    appendix, tallest = len(lay["appendices"]), max(lay["whole"], default=0.0)
    expected = _paginate(lay["blocks"], page_h)
    low, high = max(appendix + 1, math.floor(0.85 * expected)), math.ceil(1.15 * expected) + 1
    found = (f"{n} printed pages, expected {low} to {high} (laid out: {expected}) for {lay['height']} px of content, "
             f"its tallest block kept whole {tallest:.0f} px, and {appendix} sections that start a page")
    note = out.with_suffix(".txt")
    note.write_text(found + "\n")
    _keep(note)
    assert low <= n <= high, found
