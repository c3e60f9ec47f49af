"""Evidence bundles: the writing API, the report of a run folder, its figures, and the demo end to end."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")

import matplotlib.pyplot as plt

from sim.core.errors import InputError
from sim.core.text import CAUTION
from sim.evidence.bundle import Bundle, latex_table
from sim.evidence.report import write_report
from sim.runner.runs import open_run, run_experiment

ROOT = Path(__file__).resolve().parents[2]

SWEEP = textwrap.dedent("""
    # Report test: grim trigger over delta and noise.
    [experiment]
    name = "rep"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 3
    [monitoring]
    perception_error = 0.0
    [[strategies]]
    strategy = "grim_trigger"
    seats = 3
    [run]
    periods = 60
    replications = 20
    seed = 4
    [deviation]
    [sweep]
    "run.delta" = [0.6, 0.7, 0.8]
    "monitoring.perception_error" = [0.0, 0.003, 0.01]
    """)


def _bundle(folder):
    b = Bundle(folder, "A test bundle")
    b.heading("Numbers")
    b.paragraph("Some `code` and **bold** text.")
    b.table("t", ["name_x", "value"], [["a & b", 0.123456789], ["c%", 2]], caption="A 50% table")
    fig, ax = plt.subplots()
    ax.plot([0, 1], [0, 1])
    b.figure("line", fig, "A line")
    b.assumptions(["It is a test."])
    return b.write(manifest={"command": ["x"]})


def test_bundle_files_formats_and_manifest(tmp_path):
    files = _bundle(tmp_path / "b")
    d = tmp_path / "b"
    assert set(files) == {"summary.md", "summary.html", "tables/t.csv", "tables/t.tex", "figures/line.png",
                          "figures/line.pdf", "manifest.json"}
    md = (d / "summary.md").read_text()
    assert md.startswith("# A test bundle") and CAUTION in md and "| name_x | value |" in md
    html = (d / "summary.html").read_text()
    # self-contained: the only image is a data URI, no external resources; links lead to the bundle's own files
    assert html.count('src="data:image/png;base64,') == 1
    assert not re.search(r'src="(?!data:)', html)
    hrefs = re.findall(r'href="([^"]*)"', html)
    assert hrefs and all(h.startswith("#") or (d / h).is_file() for h in hrefs), hrefs
    assert "<code>code</code>" in html and "<strong>bold</strong>" in html and CAUTION in html
    tex = (d / "tables/t.tex").read_text()
    for token in (r"\toprule", r"\midrule", r"\bottomrule", r"name\_x", r"a \& b", r"c\%", r"A 50\% table"):
        assert token in tex
    assert (d / "tables/t.csv").read_text().splitlines()[1] == "a & b,0.123456789"
    man = json.loads((d / "manifest.json").read_text())
    assert man["command"] == ["x"] and man["packages"]["numpy"] and man["caution"] == CAUTION
    for rel, digest in man["files"].items():
        assert hashlib.sha256((d / rel).read_bytes()).hexdigest() == digest
    # the same content gives the same bytes (figures carry no timestamps)
    _bundle(tmp_path / "c")
    for rel in files:
        if rel != "manifest.json":
            assert (d / rel).read_bytes() == (tmp_path / "c" / rel).read_bytes(), rel


def test_bundle_refuses_duplicate_and_bad_names(tmp_path):
    b = Bundle(tmp_path, "x")
    b.table("t", ["a"], [[1]])
    with pytest.raises(ValueError):
        b.table("t", ["a"], [[1]])
    with pytest.raises(ValueError):
        b.table("../t", ["a"], [[1]])
    assert latex_table(["a"], [[float("nan")]]).count("-") >= 1


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    d = tmp_path_factory.mktemp("rep")
    p = d / "rep.toml"
    p.write_text(SWEEP)
    s = run_experiment(p, d / "run", workers=1, progress=False)
    assert s.complete
    return d / "run"


def test_report_reads_the_store_and_never_recomputes(finished, monkeypatch):
    import sim.runner.kinds as kinds

    kind = kinds.get_kind("simulate")

    def boom(cfg, ctx):
        raise AssertionError("the report must not run a cell")

    monkeypatch.setitem(kinds._KINDS, "simulate", dataclasses.replace(kind, run=boom))
    target = write_report(finished)
    files = {p.relative_to(target).as_posix() for p in target.rglob("*") if p.is_file()}
    for f in ("summary.md", "summary.html", "manifest.json", "experiment.toml", "tables/results.csv",
              "tables/results.tex", "tables/summary.csv", "tables/summary.tex", "tables/analytic-baseline.csv"):
        assert f in files, f
    pngs = [f for f in files if f.endswith(".png")]
    assert pngs and all(f[:-4] + ".pdf" in files for f in pngs)
    md = (target / "summary.md").read_text()
    assert "Assumptions and limitations" in md and CAUTION in md and "Failed cells" in md
    # the grim-trigger threshold of symmetric 3-firm Cournot, (n+1)^2 / (n^2 + 6n + 1) = 16/28, read from the store
    assert "0.5714" in md
    html = (target / "summary.html").read_text()
    assert html.count("data:image/png;base64,") == len(pngs)
    man = json.loads((target / "manifest.json").read_text())
    assert man["experiment"]["sha256"] == hashlib.sha256(SWEEP.encode()).hexdigest()
    assert set(man["run_data"]) >= {"../results.csv", "../results.sqlite"}
    with open_run(finished) as rf:
        header, _body = rf.table()
    assert (target / "tables/results.csv").read_text().splitlines()[0] == ",".join(header)


def test_the_first_page_answers_before_the_detail_and_the_bundle_closes_with_methods_and_glossary(finished):
    target = write_report(finished)
    md = (target / "summary.md").read_text()
    sections = re.findall(r"^## (.+)$", md, re.M)
    assert sections[0] == "In short" and sections[-2:] == ["Methods appendix", "Glossary"]
    assert sections.count("Assumptions and limitations") == 1
    front = md.split("\n## ")[1]
    assert "**Question.**" in front and "**Answer.**" in front and CAUTION in front
    # the answer quotes the grim-trigger threshold of symmetric 3-firm Cournot, 16/28, read from the store
    assert "0.571 under grim trigger" in front
    with open_run(finished) as rf:
        rows, exp = rf.rows(), rf.experiment
    # a key number: the lowest share of collusive periods of the sweep, with the interval of its cell
    low = min(rows, key=lambda r: r.metrics["collusive_share"])
    assert (f"lowest {low.metrics['collusive_share']:.4g} (95 % interval {low.metrics['collusive_share.low']:.4g} to "
            f"{low.metrics['collusive_share.high']:.4g})") in front
    # the glossary has every metric and swept parameter of the run, by its stored name (bounds folded)
    keys = [line.split(",")[0] for line in (target / "tables/glossary.csv").read_text().splitlines()[1:]]
    expected = {m for m in exp.metric_names if not m.endswith((".low", ".high", ".se"))}
    assert set(keys) == expected | {p.path for p in exp.parameters}
    # the methods appendix: the sources, the software that computed the numbers, the seed, the command
    appendix = md.split("## Methods appendix")[1].split("## Glossary")[0]
    for text in ("Friedman, 1971", "Kaplan and Meier, 1958", "numpy", "with seed 4", "Command: `"):
        assert text in appendix, text
    # the tables shown before the glossary are labelled from the catalogue: no stored name in a column header
    body = md.split("## Glossary")[0]
    headers = [ln for i, ln in enumerate(body.splitlines()[:-1])
               if ln.startswith("| ") and body.splitlines()[i + 1].startswith("| ---")]
    assert len(headers) >= 3
    for h in headers:
        assert "_" not in h and "run.delta" not in h and "perception_error" not in h, h


def test_the_headline_comes_first_whenever_it_is_added(tmp_path):
    b = Bundle(tmp_path / "b", "Order")
    b.heading("Detail")
    b.paragraph("The detail.")
    b.headline("What is asked?", ["The answer."], ["a number: 1 (95 % interval 0.5 to 1.5)"])
    b.write()
    html = (tmp_path / "b" / "summary.html").read_text()
    assert html.index('id="in-short"') < html.index("The detail.")
    assert re.search(r'<a href="#detail">Detail</a>', html) and 'id="detail"' in html
    md = (tmp_path / "b" / "summary.md").read_text()
    assert md.index("**Answer.** The answer.") < md.index("## Detail") and md.count(CAUTION) == 2


def test_heatmap_draws_the_analytic_threshold_where_it_belongs(finished):
    from sim.evidence.figures import SweepData, heatmap

    with open_run(finished) as rf:
        data = SweepData(list(rf.experiment.parameters), rf.rows())
    fig = heatmap(data, "run.delta", "monitoring.perception_error", "deviation.gain",
                  threshold="analytic.critical_delta", level=0.0)
    ax = fig.axes[0]
    # uneven noise levels: equal cells, ticks labelled with the values
    assert [t.get_text() for t in ax.get_yticklabels()] == ["0.0", "0.003", "0.01"]
    lines = [ln for ln in ax.get_lines() if ln.get_linestyle() == "--"]
    assert lines and lines[0].get_xdata()[0] == pytest.approx(16 / 28, rel=1e-9)
    plt.close(fig)


def test_report_of_an_unfinished_run_is_refused(finished, tmp_path):
    import shutil
    import sqlite3

    copy = tmp_path / "partial"
    shutil.copytree(finished, copy)
    con = sqlite3.connect(copy / "results.sqlite")
    con.execute("DELETE FROM cells WHERE cell = 4")
    con.commit()
    con.close()
    with pytest.raises(InputError) as e:
        write_report(copy)
    assert "1 of 9 cells" in e.value.message and "--resume" in e.value.message


def test_single_cell_report_has_a_metric_table_and_the_period_figure(tmp_path):
    p = tmp_path / "one.toml"
    p.write_text(SWEEP.split("[sweep]")[0].replace("perception_error = 0.0", "implementation_error = 0.01"))
    s = run_experiment(p, tmp_path / "run", workers=1, report=True, write_report=write_report, progress=False)
    md = (s.report / "summary.md").read_text()
    assert "| quantity [unit] | value | 95 % interval | analytic prediction |" in md
    assert "| share of collusive periods [0 to 1] |" in md and "| collusive_share |" not in md.split("## Glossary")[0]
    # the renderer's figures of the stored result (the ones supergame simulate --plot draws)
    assert (s.report / "figures" / "collusion-over-time.png").is_file()
    assert (s.report / "figures" / "spell-survival.png").is_file()


@pytest.mark.slow
def test_the_demo_runs_end_to_end_and_writes_the_bundle(tmp_path):
    """The README's main-job command on the shipped demo, as on a fresh machine: an empty numba cache, so
    that the kernels are compiled inside the worker processes (slow: the whole sweep)."""
    import os

    out = tmp_path / "demo"
    cache = tmp_path / "numba-cache"
    cache.mkdir()
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    res = subprocess.run([sys.executable, "-m", "sim", "run", str(ROOT / "experiments" / "demo.toml"), "--report",
                          "--out", str(out)], capture_output=True, text=True, timeout=900, env=env)
    assert res.returncode == 0, res.stderr
    assert "180 of 180 done (0 failed)" in res.stdout
    rep = out / "report"
    for f in ("summary.md", "summary.html", "manifest.json", "figures/deviation-gain.png",
              "figures/deviation-gain.pdf", "tables/summary.tex", "tables/results.csv"):
        assert (rep / f).is_file(), f
    md = (rep / "summary.md").read_text()
    assert "Tarnvale" in md and "0.5778" in md and CAUTION in md
    res = subprocess.run([sys.executable, "-m", "sim", "verify", str(out), "--sample", "2"], capture_output=True,
                         text=True, timeout=300, env=env)
    assert res.returncode == 0, res.stdout + res.stderr


def test_a_kind_writes_its_own_account_of_a_run_into_the_bundle(tmp_path):
    """``Kind.report``: a kind's sections replace the generic ones, read from the stored rows; the
    closing sections (results table, failed cells, reproducing, assumptions, caution) stay."""
    from sim.runner.kinds import CellResult, Kind, register_kind

    calls = []

    def report(run, b):
        rows = run.rows()
        calls.append(len(rows))
        b.heading("Squares")
        b.table("squares", ["x", "square"], [[r.params["params.x"], r.metrics["square"]] for r in rows],
                caption="Each x and its square, as stored")

    register_kind(Kind("squares-with-report", ("params",), lambda d: d["params"],
                       lambda c, ctx: CellResult({"square": float(c["x"] ** 2)}), seed_key=None, report=report,
                       assumptions=("Squares are exact.",)), replace=True)
    p = tmp_path / "sq.toml"
    p.write_text('[experiment]\nname = "sq"\nkind = "squares-with-report"\n[params]\nx = 0\n'
                 '[sweep]\n"params.x" = [1, 2, 3]\n')
    s = run_experiment(p, tmp_path / "run", workers=1, report=True, write_report=write_report, progress=False)
    md = (s.report / "summary.md").read_text()
    assert calls == [3] and "## Squares" in md and "Each x and its square, as stored" in md
    assert "## Sweep" not in md and "## Results" not in md
    for closing in ("## Failed cells", "## Reproducing these numbers", "Squares are exact.", CAUTION):
        assert closing in md
    assert (s.report / "tables" / "results.csv").read_text() == (s.folder / "results.csv").read_text()
