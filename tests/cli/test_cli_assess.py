"""End-to-end tests of ``supergame assess``: bad input is one line with exit status 2 and no folder,
a run writes a run folder whose report/ is a complete evidence bundle with hashes matching its files,
``supergame verify`` checks it, ``supergame run`` of the same file gives the same numbers, the same
file gives the same bytes, and the assessment runs as an experiment kind under ``supergame run``."""

import csv
import hashlib
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = ROOT / "experiments" / "merger-assessment.toml"

SMALL = """
[experiment]
name = "small-merger"
kind = "assess"

[data]
demand = "logit"
prices = [4.2, 3.9, 4.6]
shares = [0.25, 0.2, 0.15]
size = 1000.0
margin = 0.4

[merger]
names = ["Firm A", "Firm B", "Firm C"]
firms = ["Firm B", "Firm C"]

[monitoring]
perception_error = 0.01

[run]
periods = 100
replications = 100
delta = 0.8
seed = 3

[assess]
punishments = [2]
deltas = [0.7, 0.9]

[assess.sensitivity]
size = [800.0, 2000.0]
delta = { start = 0.5, stop = 0.9, num = 3 }
noise = [0.0, 1.0]
"""


def _write(tmp_path: Path, text: str, name: str = "exp.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def _run(args, capsys):
    code = main(args)
    out, err = capsys.readouterr()
    return code, out, err


def test_bad_shares_one_line_exit_2_no_traceback_no_bundle(tmp_path):
    f = _write(tmp_path, SMALL.replace("shares = [0.25, 0.2, 0.15]", "shares = [0.55, 0.4, 0.15]"))
    out = tmp_path / "bundle"
    r = subprocess.run([sys.executable, "-m", "sim", "assess", str(f), "--out", str(out)], capture_output=True,
                       text=True, cwd=tmp_path)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr
    assert lines[0].startswith("supergame assess: error: data.shares: must sum to less than one")
    assert r.stdout == "" and not out.exists() and not list(tmp_path.glob(".bundle-*"))


@pytest.mark.parametrize("old, new, key", [
    ("margin = 0.4", "margin = 1.4", "data.margin"),
    ("margin = 0.4", "margin = 0.0", "data.margin"),
    ('firms = ["Firm B", "Firm C"]', "firms = [2, 5]", "merger.firms"),
    ("margin = 0.4", "elasticity = 2.5", "data.elasticity"),
    ("margin = 0.4", "market_elasticity = 1.1", "data.market_elasticity"),
    ("seed = 3", "seed = 3\nspeed = 2", "run.speed"),
    ("noise = [0.0, 1.0]", "noise = [0.0, -1.0]", "assess.sensitivity.noise[2]"),
])
def test_bad_input_names_the_field(tmp_path, capsys, old, new, key):
    assert old in SMALL
    f = _write(tmp_path, SMALL.replace(old, new))
    out = tmp_path / "bundle"
    code, stdout, err = _run(["assess", str(f), "--out", str(out)], capsys)
    assert code == 2 and stdout == ""
    assert err.count("\n") == 1 and err.startswith(f"supergame assess: error: {key}: ")
    assert not out.exists()


def test_syntax_error_and_missing_file(tmp_path, capsys):
    f = _write(tmp_path, "[data\nprices = 1")
    code, _, err = _run(["assess", str(f)], capsys)
    assert code == 2 and "TOML syntax error" in err and "line 1" in err
    code, _, err = _run(["assess", str(tmp_path / "nope.toml")], capsys)
    assert code == 2 and "no such file" in err


def test_existing_output_folder_is_refused(tmp_path, capsys):
    f = _write(tmp_path, SMALL)
    out = tmp_path / "bundle"
    out.mkdir()
    (out / "keep.txt").write_text("x")
    code, _, err = _run(["assess", str(f), "--out", str(out)], capsys)
    assert code == 2 and err.startswith("supergame assess: error: --out:")
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def test_bundle_is_complete_and_hashed(tmp_path, capsys):
    f = _write(tmp_path, SMALL)
    run_dir = tmp_path / "bundle"
    out = run_dir / "report"
    code, stdout, err = _run(["assess", str(f), "--out", str(run_dir), "--json"], capsys)
    assert code == 0, err
    d = json.loads(stdout)
    assert d["bundle"] == str(out) and d["run_folder"] == str(run_dir)
    assert d["calibration"]["reproduced"] and d["calibration"]["max_relative_residual"] < 1e-8
    assert "not proof of conduct" in d["caution"]
    assert d["conclusion"]["binding_after"] in ("Firm A", "Firm B + Firm C")
    for rel in ("summary.md", "summary.html", "manifest.json", "assessment.json", "experiment.toml",
                "figures/thresholds.png", "figures/thresholds.pdf", "figures/sensitivity_size.png",
                "figures/sensitivity_delta.pdf", "figures/sensitivity_noise.png", "figures/persistence.png",
                "tables/thresholds.csv", "tables/thresholds.tex", "tables/calibration.csv", "tables/factors.csv"):
        assert (out / rel).is_file(), rel
    assert (out / "experiment.toml").read_bytes() == f.read_bytes()
    man = json.loads((out / "manifest.json").read_text())
    assert man["experiment"]["sha256"] == _sha(f)
    assert man["seeds"]["run.seed"] == 3 and man["started"] and man["finished"]
    assert "numpy" in json.dumps(man["packages"]) and man["platform"]
    files = {str(p.relative_to(out)).replace("\\", "/") for p in out.rglob("*") if p.is_file()}
    assert set(man["files"]) == files - {"manifest.json"}
    for rel, h in man["files"].items():
        assert _sha(out / rel) == h, rel
    md = (out / "summary.md").read_text()
    assert "not proof of conduct" in md and "Ivaldi" in md and "Caution" in md
    html = (out / "summary.html").read_text()
    assert "data:image/png;base64," in html and "<img src=\"figures/" not in html
    tex = (out / "tables" / "thresholds.tex").read_text()
    assert "\\toprule" in tex and "\\bottomrule" in tex
    rows = list(csv.reader((out / "tables" / "thresholds.csv").open()))
    assert rows[0][0] == "scheme" and rows[1][0] == "grim trigger"
    assert float(rows[1][1]) == pytest.approx(d["conclusion"]["threshold_before"], rel=1e-15)


def test_same_file_same_bytes(tmp_path, capsys):
    f = _write(tmp_path, SMALL)
    a, b = tmp_path / "a", tmp_path / "b"
    assert _run(["assess", str(f), "--out", str(a)], capsys)[0] == 0
    assert _run(["assess", str(f), "--out", str(b)], capsys)[0] == 0
    ma = json.loads((a / "report" / "manifest.json").read_text())["files"]
    mb = json.loads((b / "report" / "manifest.json").read_text())["files"]
    # the summaries name their run (its folder, when it ran); everything else is the same bytes
    summaries = {"summary.md", "summary.html"}
    assert set(ma) == set(mb) and {k: v for k, v in ma.items() if k not in summaries} == {
        k: v for k, v in mb.items() if k not in summaries}

    def unnamed(folder, rel):
        text = (folder / "report" / rel).read_text().replace(str(folder), "RUN_DIR")
        for name in (f"`{folder.name}`", f"<code>{folder.name}</code>"):
            text = text.replace(f"run folder {name}", "run folder RUN_DIR")
        return re.sub(r"Started \S+, finished \S+ \(UTC\); cell compute time [0-9.]+ s", "", text)

    for rel in summaries:
        assert unnamed(a, rel) == unnamed(b, rel), rel
    assert (a / "results.csv").read_bytes() == (b / "results.csv").read_bytes()


def test_text_output(tmp_path, capsys):
    f = _write(tmp_path, SMALL.replace("[assess.sensitivity]", "[assess.ignored]").split("[assess.ignored]")[0])
    code, out, _ = _run(["assess", str(f), "--out", str(tmp_path / "o")], capsys)
    assert code == 0
    assert "Critical discount factors" in out and "grim trigger" in out and "Ivaldi et al. (2003)" in out
    assert "reproduces the observed prices and quantities" in out
    assert out.rstrip().endswith(f"Evidence bundle: {tmp_path / 'o' / 'report'}") and "not proof of conduct" in out
    assert f"Run folder: {tmp_path / 'o'}" in out


def test_assess_gives_the_numbers_of_run_and_its_folder_verifies(tmp_path, capsys):
    """supergame assess runs its file as supergame run does (same cell, same stream key (0,)): the same
    results table, the bundle's numbers equal the stored ones, and supergame verify checks the folder,
    the bundle's files included, and re-runs the assessment."""
    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0])
    a, r = tmp_path / "a", tmp_path / "r"
    assert _run(["assess", str(f), "--out", str(a)], capsys)[0] == 0
    assert _run(["run", str(f), "--out", str(r)], capsys)[0] == 0
    assert (a / "results.csv").read_bytes() == (r / "results.csv").read_bytes()
    row = next(csv.DictReader((a / "results.csv").open()))
    d = json.loads((a / "report" / "assessment.json").read_text())
    assert float(row["collusive_share.before"]) == d["before"]["simulation"]["collusive_share"]["value"]
    assert float(row["threshold.after"]) == d["conclusion"]["threshold_after"]
    man = json.loads((a / "manifest.json").read_text())
    assert "report/tables/factors.csv" in man["files"] and "report/manifest.json" in man["files"]
    code, out, _ = _run(["verify", str(a)], capsys)
    assert code == 0 and "metrics reproduce identically" in out
    table = a / "report" / "tables" / "factors.csv"
    table.write_text(table.read_text().replace("facilitates", "hinders", 1))
    code, out, _ = _run(["verify", str(a)], capsys)
    assert code == 1 and "report/tables/factors.csv: SHA-256 differs" in out


def test_a_failed_assessment_is_one_line_exit_1_and_recorded(tmp_path, capsys, monkeypatch):
    """A numerical failure inside the run (the cell fails, as a sweep cell would) is one line, exit
    status 1, naming the run folder that records it; no bundle is written."""
    import sim.runner.analyses.assess
    from sim.core.errors import SolverError

    def fail(*args, **kwargs):
        raise SolverError("the stage game could not be solved")

    # the assessment kind's cell runs run_assessment: make it fail there
    monkeypatch.setattr(sim.runner.analyses.assess, "run_assessment", fail)
    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0])
    out = tmp_path / "run"
    code, stdout, err = _run(["assess", str(f), "--out", str(out)], capsys)
    assert code == 1 and stdout == "" and err.count("\n") == 1
    assert "the stage game could not be solved" in err and str(out) in err
    assert (out / "results.sqlite").is_file() and not (out / "report").exists()
    # the run's report says so, read from the stored (failed) cell
    assert _run(["report", str(out)], capsys)[0] == 0
    md = (out / "report" / "summary.md").read_text()
    assert "The assessment failed: no results to report" in md and "the stage game could not be solved" in md


@pytest.mark.parametrize("monitoring, extra, key, words", [
    ('noise = "normal"\nsigma = 0.2', "", "assess.transparency_scale", "monitoring.sigma from 0.2 to 0.4"),
    ("perception_error = 0.4", "\n[assess.sensitivity]\nnoise = [1.0, 3.0]", "assess.sensitivity.noise[2]",
     "monitoring.perception_error from 0.4 to 1.2"),
])
def test_a_scale_out_of_range_is_refused_by_check_and_assess(tmp_path, capsys, monitoring, extra, key, words):
    """Scaled monitoring settings are validated with the file (supergame check) and before any work
    (supergame assess leaves no folder); scale 3 of a perception error of 0.4 is not clipped to one."""
    text = f"""
[experiment]
name = "scaled-noise"
kind = "assess"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
cost = [10.0, 10.0, 10.0, 10.0]
[merger]
firms = [1, 2]
[monitoring]
{monitoring}
[run]
periods = 50
replications = 20
[assess]
deltas = [0.8]
{extra}
"""
    f = _write(tmp_path, text)
    code, _, err = _run(["check", str(f)], capsys)
    assert code == 2 and err.startswith(f"supergame check: error: {key}: ") and words in err
    out = tmp_path / "run"
    code, stdout, err = _run(["assess", str(f), "--out", str(out)], capsys)
    assert code == 2 and stdout == "" and err.count("\n") == 1 and f"error: {key}: " in err
    assert not out.exists()


def test_factor_table_files_carry_the_legend_and_the_sources(tmp_path, capsys):
    """The factor table's CSV says in every row what its direction cells mean and the source of the literature's
    direction, structural rows leave 'agree' empty, and no cell is written as a numpy repr; the summary shows the
    legend once, as a note below the table, not in its (bold) caption; nothing in the bundle is recalled from
    memory."""
    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0])
    out = tmp_path / "o"
    assert _run(["assess", str(f), "--out", str(out)], capsys)[0] == 0
    rows = list(csv.DictReader((out / "report" / "tables" / "factors.csv").open()))
    assert [r["factor (the change considered)"] for r in rows] == [
        "fewer firms", "more symmetric firms", "more transparent (less noise)", "more frequent interaction",
        "growing demand"]
    for r in rows:
        assert r["reading"] and "in the literature" in r["reading"] and r["source"]
        if r["model: effect on collusion"] == "structural (by construction)":
            assert r["agree"] == "" and "not compared with the literature" in r["reading"]
        else:
            assert r["agree"] in ("yes", "no", "")
    # frequency is structural; growth is a computed row (the threshold with the stated growth against the one without)
    assert rows[3]["model: effect on collusion"] == "structural (by construction)"
    assert rows[4]["model: effect on collusion"] in ("facilitates", "not computed")
    legend = "'facilitates': in the model that change makes collusion easier"
    tex = (out / "report" / "tables" / "factors.tex").read_text()
    assert legend not in tex.split("\\label")[0]
    md = (out / "report" / "summary.md").read_text()
    assert md.count(legend) == 1 and f"*Each factor is named by the change it considers. {legend}" in md
    assert not re.search(r"\*\*[^*]*" + re.escape(legend), md)
    for p in (out / "report" / "tables").glob("*.csv"):
        assert "np." not in p.read_text(), p.name
    for p in (out / "report").rglob("*"):
        if p.suffix in (".md", ".html", ".json", ".csv", ".tex"):
            assert "from memory" not in p.read_text(), p.name


def test_console_and_bundle_speak_alike(tmp_path, capsys):
    """Price changes in percent with their sign on the console and in the bundle, under firm names (no 'product 1'
    on the console); the stick-and-carrot punishment level and the constraint that binds on both; the thresholds'
    formulas with their sources beside the thresholds table and in the methods appendix; one section of
    assumptions; money in the neutral unit when the experiment states none."""
    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0])
    out = tmp_path / "o"
    code, printed, _ = _run(["assess", str(f), "--out", str(out)], capsys)
    assert code == 0
    console = printed.split("\n\nRun folder: ")[0]
    assert not re.search(r"\bproduct \d", console)
    md = (out / "report" / "summary.md").read_text()
    prices = list(csv.DictReader((out / "report" / "tables" / "merger_prices.csv").open()))
    for r in prices:
        shown = f"{float(r['change (%)']) / 100:+.2%}"
        assert f"{r['product']} {shown}" in console
        assert f"| {r['product']} | {r['owner after']} |" in md and f"| {shown} |" in md
    assert [r["product"] for r in prices] == ["Firm A", "Firm B", "Firm C"]
    sc = list(csv.DictReader((out / "report" / "tables" / "stick_and_carrot.csv").open()))
    doc = json.loads((out / "report" / "assessment.json").read_text())
    for r, label in zip(sc, ("before", "after"), strict=True):
        stored = doc[label]["thresholds"]["stick_carrot"]
        assert float(r["punishment price (currency units), one period"]) == stored["punishment_action"]
        assert r["binding constraint"].startswith(stored["binding_constraint"])
        assert f"stick and carrot {label}: one period at a common price of" in console
        what = {"collusion": "agreement", "punishment": "punishment"}[stored["binding_constraint"]]
        assert f"{stored['binding_name']} binds, on not deviating from the {what}" in console
    for source in ("Friedman, 1971", "Green and Porter, 1984", "Abreu, 1986"):
        assert md.count(source) >= 2  # beside the thresholds and in the methods
    assert "## Methods" in md and "effective discount factor `delta (1 + g)`" in md
    assert md.count("## Assumptions") == 1 and "Assumptions and limitations of the assessment" not in md
    assert "currency units per period" in md and "(currency units)" in md
def test_shipped_experiment_passes_check(capsys):
    code, out, err = _run(["check", str(SHIPPED)], capsys)
    assert code == 0, err
    assert "valid assess experiment 'tarnvale-coach-merger'" in out


def test_assess_as_an_experiment_kind_in_a_sweep(tmp_path, capsys):
    """``supergame run`` sweeps an assessment cell by cell: four and five symmetric Cournot firms
    merging two into one give the n-firm thresholds before and after."""
    text = """
[experiment]
name = "kind-sweep"
kind = "assess"
[market]
model = "cournot"
demand = "linear"
intercept = 100.0
slope = 1.0
cost = 10.0
n_firms = 4
[merger]
firms = [1, 2]
[assess]
simulate = false
deltas = []
punishments = []
[sweep]
"market.n_firms" = [4, 5]
"""
    f = _write(tmp_path, text)
    out = tmp_path / "run"
    code, _, err = _run(["run", str(f), "--out", str(out), "--workers", "1", "--report"], capsys)
    assert code == 0, err
    rows = list(csv.DictReader((out / "results.csv").open()))
    assert [r["status"] for r in rows] == ["ok", "ok"]
    # the report: every cell's conclusion, read from the stored cells, and the thresholds along the sweep
    cells = list(csv.DictReader((out / "report" / "tables" / "cells.csv").open()))
    assert [c["cell"] for c in cells] == ["1", "2"] and {c["effect of the merger"] for c in cells} == {"easier"}
    for c, r in zip(cells, rows, strict=True):
        assert float(c["threshold before"]) == float(r["threshold.before"])
        assert float(c["threshold after"]) == float(r["threshold.after"])
    assert (out / "report" / "figures" / "thresholds-over-sweep.png").is_file()
    for r in rows:
        n = int(float(r["market.n_firms"]))
        assert float(r["threshold.before"]) == pytest.approx((n + 1) ** 2 / (n * n + 6 * n + 1), rel=1e-12)
        assert float(r["threshold.after"]) == pytest.approx(n ** 2 / ((n - 1) ** 2 + 6 * (n - 1) + 1), rel=1e-12)
        assert float(r["direction"]) == -1.0


def _shipped_grim_thresholds():
    """Grim-trigger thresholds of the shipped scenario, derived without the package: the logit
    calibration of Werden and Froeb (1994) -- mu = m_1 p_1 (1 - s_1), qualities a_i = p_i +
    mu (ln s_i - ln s_0), costs c_i = p_i - mu / (1 - s_i) --, static Nash and best deviations from
    the multi-product logit condition that a firm's products all carry the markup mu / (1 - S_f)
    (S_f its total share), the joint-profit maximum's common markup m = mu / s_0 (Anderson, de Palma
    and Thisse, 1992, ch. 7 -- from memory), each solved with scipy, and firm f's threshold
    (D_f - C_f) / (D_f - N_f) (Friedman, 1971). Returns per-firm thresholds before and after Firm B
    and Firm D merge (firms A, B + D, C)."""
    import numpy as np
    from scipy import optimize

    P, S, M1 = np.array([4.2, 3.9, 4.6, 3.7]), np.array([0.22, 0.18, 0.12, 0.10]), 0.35
    mu = M1 * P[0] * (1 - S[0])
    a = P + mu * (np.log(S) - np.log(1 - S.sum()))
    c = P - mu / (1 - S)

    def shares(p):
        e = np.exp((a - p) / mu)
        return e / (1 + e.sum())

    def thresholds(owner):
        F = owner.max() + 1

        def by_firm(x):
            return np.array([x[owner == f].sum() for f in range(F)])

        def profits(p):
            return by_firm((p - c) * shares(p))

        nash = optimize.fsolve(lambda p: p - c - mu / (1 - by_firm(shares(p))[owner]), P, xtol=1e-14)
        m = optimize.brentq(lambda m: m - mu / (1 - shares(c + m).sum()), 1e-9, 100, xtol=1e-15)
        coll = c + m
        dev = np.empty(F)
        for f in range(F):
            own = owner == f

            def at(mf, own=own):
                p = coll.copy()
                p[own] = c[own] + mf
                return p

            mf = optimize.brentq(lambda mf, own=own, at=at: mf - mu / (1 - shares(at(mf))[own].sum()), 1e-9, 100,
                                 xtol=1e-15)
            dev[f] = profits(at(mf))[f]
        return (dev - profits(coll)) / (dev - profits(nash))

    return thresholds(np.array([0, 1, 2, 3])), thresholds(np.array([0, 1, 2, 1]))


def test_shipped_scenario_thresholds_against_an_independent_logit_solution():
    """The shipped assessment's grim-trigger thresholds per firm, before and after, match the
    independent derivation to 1e-9 (the equilibria are solved to 1e-14): the merger raises the
    market threshold, and the smallest operator binds (Firm D before, Firm C after)."""
    import numpy as np

    from sim.antitrust.assess import run_assessment
    from sim.core.tomlfile import read_toml
    from sim.runner.analyses.assess import KIND

    doc = read_toml(SHIPPED)
    doc["assess"] = {**doc["assess"], "simulate": False, "deltas": [], "partial": []}
    doc["assess"].pop("sensitivity")
    a = run_assessment(KIND.prepare(doc))
    pre, post = _shipped_grim_thresholds()
    np.testing.assert_allclose(a.before.thresholds["grim"]["per_firm"], pre, rtol=1e-9)
    np.testing.assert_allclose(a.after.thresholds["grim"]["per_firm"], post, rtol=1e-9)
    assert a.before.names[int(np.argmax(pre))] == "Firm D" and a.after.names[int(np.argmax(post))] == "Firm C"
    assert post.max() > pre.max()


@pytest.mark.slow
def test_shipped_experiment_end_to_end(tmp_path, capsys):
    """The shipped assessment end to end, and every claim of its comment block against what it prints.
    The direction and the binding firms are not regression values: they are the independent logit
    derivation above (_shipped_grim_thresholds). Simulated persistence is checked through its 95%
    intervals (400 replications)."""
    import numpy as np

    out = tmp_path / "bundle"
    code, stdout, err = _run(["assess", str(SHIPPED), "--out", str(out), "--json"], capsys)
    assert code == 0, err
    d = json.loads(stdout)
    pre, post = _shipped_grim_thresholds()
    c = d["conclusion"]
    assert d["calibration"]["reproduced"]
    assert c["threshold_before"] == pytest.approx(pre.max(), rel=1e-9)
    assert c["threshold_after"] == pytest.approx(post.max(), rel=1e-9)
    assert c["direction"] == ("harder" if post.max() > pre.max() else "easier")
    names_pre = d["merger"]["names_pre"]
    names_post = d["merger"]["names_post"]
    assert c["binding_before"] == names_pre[int(np.argmax(pre))]
    assert c["binding_after"] == names_post[int(np.argmax(post))]
    comment = " ".join(line.lstrip("#").strip() for line in SHIPPED.read_text().split("[experiment]")[0].splitlines())
    # grim trigger rises, with the printed values and the binding firms named in the comment
    assert f"grim-trigger threshold ({c['threshold_before']:.4f} -> {c['threshold_after']:.4f};" in comment
    assert f"binds, {c['binding_before']} before and {c['binding_after']} after" in comment
    by = {s["scheme"]: s for s in c["schemes"]}
    for T in (2, 3, 5):
        assert by[f"Nash reversion, T={T}"]["direction"] == "harder"
    sc = by["stick and carrot"]
    assert sc["direction"] == "easier" and f"{sc['before']:.4f} -> {sc['after']:.4f}" in comment
    # persistence rises beyond its interval, about 0.17 -> 0.30
    p = c["persistence"]
    assert p["significant"] and p["difference_low"] > 0
    assert round(p["collusive_share_before"], 2) == 0.17 and round(p["collusive_share_after"], 1) == 0.3
    # sensitivity: the margin is flat, the size moves the thresholds but not the effect, delta flips at
    # the two thresholds, persistence higher after at every noise scale above zero
    sens = d["sensitivity"]
    assert set(sens) == {"margin", "size", "delta", "noise"}
    assert "do not depend on margin" in sens["margin"]["note"]
    assert np.ptp(sens["size"]["threshold_before"]) > 1e-3 and set(sens["size"]["direction"]) == {"harder"}
    assert sens["delta"]["flips"] == pytest.approx([pre.max(), post.max()], rel=1e-9)
    n = sens["noise"]
    for k, b, a in zip(n["scales"], n["collusive_share_before_ci"], n["collusive_share_after_ci"]):
        # without noise every period colludes: the share's interval is Wilson's at the replications, [n/(n+z^2), 1]
        # (sim.core.stats.share_estimate), the same before and after
        assert (a[0] > b[1]) if k > 0 else (a == b and a[1] == 1.0 and 0.98 < a[0] < 1.0)
    assert (out / "report" / "summary.html").is_file()
    assert (out / "report" / "figures" / "sensitivity_margin.png").is_file()


def _files(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_the_bundle_is_read_from_the_stored_cell(tmp_path, capsys):
    """The assessment's bundle is a function of its stored cell: supergame report RUN_DIR --bundle OTHER
    writes the bundle supergame assess wrote, every file with the same bytes (summary, tables, figures
    and assessment.json; the manifests differ only in the record of the run folder's data files, which
    a bundle outside the folder does not keep); supergame report RUN_DIR writes it again unchanged and
    the folder still verifies (the exports rebuilt from the store, nan and None included); supergame
    run FILE --report gives the same tables, figures and assessment.json."""
    f = _write(tmp_path, SMALL)
    run_dir, other = tmp_path / "run", tmp_path / "other"
    assert _run(["assess", str(f), "--out", str(run_dir)], capsys)[0] == 0
    first = _files(run_dir / "report")
    code, _, err = _run(["report", str(run_dir), "--bundle", str(other)], capsys)
    assert code == 0, err
    again = _files(other)
    assert set(again) == set(first)
    assert {rel for rel in first if rel.startswith("figures/")} >= {"figures/thresholds.png", "figures/persistence.png",
                                                                    "figures/sensitivity_size.pdf"}
    for rel in first:
        if rel != "manifest.json":
            assert again[rel] == first[rel], rel
    ma, mb = json.loads(first["manifest.json"]), json.loads(again["manifest.json"])
    assert set(ma.pop("run_data")) == {"../results.sqlite", "../results.csv", "../results.parquet", "../arrays.json"}
    assert mb.pop("run_data") == {} and ma == mb
    assert ma["title"] == "Coordinated effects of a merger: small-merger"
    assert ma["seeds"]["streams"]["simulation after"] == [0, 1]
    # the bundle's assessment.json is the stored result; arrays.json keeps its document (without the name and units)
    stored = json.loads((run_dir / "arrays.json").read_text())["cells"][0]["arrays"]["assessment"]
    full = json.loads(first["assessment.json"])
    assert full["name"] == "small-merger" and {k: v for k, v in full.items() if k not in (
        "name", "currency", "period")} == stored
    md = first["summary.md"].decode()
    assert md.count("## Reproducing these numbers") == 1 and "`supergame report RUN_DIR` this bundle again" in md
    # the caution once on the first page (before the conclusion) and once at the close
    assert md.index("**Caution.**") < md.index("## Conclusion under the stated assumptions")
    assert md.count("**Caution.**") == 2 and "Caution: " not in md

    assert _run(["report", str(run_dir)], capsys)[0] == 0
    assert _files(run_dir / "report") == first
    code, out, _ = _run(["verify", str(run_dir)], capsys)
    assert code == 0 and "arrays.json is what the store gives, byte for byte" in out
    assert "metrics reproduce identically" in out

    r = tmp_path / "r"
    assert _run(["run", str(f), "--out", str(r), "--workers", "1", "--quiet", "--report"], capsys)[0] == 0
    via_run = _files(r / "report")
    assert set(via_run) == set(first)
    for rel in first:
        if rel.startswith(("tables/", "figures/")) or rel == "assessment.json":
            assert via_run[rel] == first[rel], rel


def test_the_command_prints_and_plots_what_the_bundle_shows(tmp_path, capsys):
    """supergame assess prints the renderer's console text of the result stored in its run folder (the text
    supergame run FILE's folder gives as well), and its --plot PNGs are the bundle's figures byte for byte, as are
    those of supergame run FILE --report."""
    from sim.evidence.render import renderer_for
    from sim.runner.runs import open_run

    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0] + "[assess.sensitivity]\ndelta = [0.5, 0.9]\n")
    a, r, plots = tmp_path / "a", tmp_path / "r", tmp_path / "plots"
    code, out, err = _run(["assess", str(f), "--out", str(a), "--plot", str(plots)], capsys)
    assert code == 0, err
    printed = out.rstrip("\n").split("\n\nRun folder: ")[0]
    renderer = renderer_for("assess")
    with open_run(a) as rf:
        assert renderer.console(rf.result(0)) == printed
    assert _run(["run", str(f), "--out", str(r), "--workers", "1", "--quiet", "--report"], capsys)[0] == 0
    with open_run(r) as rf:
        assert renderer.console(rf.result(0)) == printed
    pngs = sorted(p.name for p in plots.glob("*.png"))
    assert pngs == sorted(p.name for p in (a / "report" / "figures").glob("*.png")) and "thresholds.png" in pngs
    assert "sensitivity_delta.png" in pngs and "persistence.png" in pngs
    for name in pngs:
        command = (plots / name).read_bytes()
        assert command == (a / "report" / "figures" / name).read_bytes(), name
        assert command == (r / "report" / "figures" / name).read_bytes(), name


def test_json_of_the_command_is_the_renderers_document(tmp_path, capsys):
    """--json prints the renderer's document of the stored result, with where the run folder and bundle are."""
    from sim.antitrust.result import Assessment

    f = _write(tmp_path, SMALL.split("[assess.sensitivity]")[0])
    code, out, err = _run(["assess", str(f), "--out", str(tmp_path / "a"), "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc.pop("run_folder") == str(tmp_path / "a") and doc.pop("bundle") == str(tmp_path / "a" / "report")
    assert Assessment.from_dict(doc).to_dict() == doc and doc["name"] == "small-merger"


@pytest.mark.parametrize("growth, ok", [(0.0, True), (-0.1, True), (0.02, True), (1.0, False), (-1.0, False)])
def test_growth_zero_and_decline_pass_the_check(tmp_path, capsys, growth, ok):
    """assess.growth takes no growth (0) and declining markets (negative rates) in (-1, 1)."""
    f = _write(tmp_path, SMALL.replace("deltas = [0.7, 0.9]", f"deltas = [0.7, 0.9]\ngrowth = {growth}"))
    code, _out, err = _run(["check", str(f)], capsys)
    if ok:
        assert code == 0, err
    else:
        assert code == 2 and err.startswith("supergame check: error: assess.growth: must be a number in (-1, 1)")


# Three symmetric linear Cournot firms: the grim-trigger threshold with n firms and the joint-profit agreement is
# (pi_D - pi_C) / (pi_D - pi_N) = 4/7 for n = 3 and 9/17 for n = 2 (Friedman, 1971; the Cournot, monopoly and
# best-deviation profits of linear demand, e.g. Tirole, 1988, ch. 6), so any two of them merging (no efficiency)
# changes it by 9/17 - 4/7 = -5/119; every firm's presence raises it by the same amount, so no firm stands out.
THREE_MILLS = """
[experiment]
name = "three-mills"
kind = "assess"

[market]
model = "cournot"
demand = "linear"
intercept = 10.0
slope = 1.0
cost = [1.0, 1.0, 1.0]

[merger]
names = ["Mill A", "Mill B", "Mill C"]
firms = ["Mill A", "Mill B"]

[run]
delta = 0.6
seed = 1

[assess]
punishments = [2]
deltas = [0.6]
simulate = false
pair_mergers = true
"""


def test_every_two_firm_merger_and_the_maverick_in_the_assessment(tmp_path, capsys):
    f = _write(tmp_path, THREE_MILLS)
    code, out, err = _run(["assess", str(f), "--out", str(tmp_path / "run")], capsys)
    assert code == 0, err
    assert "Every two-firm merger of the market before the merger" in out and "Mill A + Mill B" in out
    code, out, err = _run(["assess", str(f), "--json", "--out", str(tmp_path / "run2")], capsys)
    d = json.loads(out)
    pairs, mav = d["pair_mergers"]["pairs"], d["pair_mergers"]["maverick"]
    assert pairs["before"] == pytest.approx(4 / 7, rel=1e-9)
    for i, j in ((0, 1), (0, 2), (1, 2)):
        assert pairs["change"][i][j] == pytest.approx(-5 / 119, rel=1e-9)
    assert mav["presence"] == pytest.approx([5 / 119] * 3, rel=1e-9)
    assert mav["firm"] == -1 and "no firm stands out" in mav["reason"]
    figures = tmp_path / "run" / "report" / "figures"
    assert (figures / "pair-mergers.png").is_file()
    assert "Every two-firm merger and the maverick" in (tmp_path / "run" / "report" / "summary.md").read_text()


def test_pair_mergers_must_be_true_or_false(tmp_path, capsys):
    f = _write(tmp_path, THREE_MILLS.replace("pair_mergers = true", 'pair_mergers = "yes"'))
    code, _, err = _run(["assess", str(f), "--out", str(tmp_path / "run")], capsys)
    assert code == 2 and err.count("\n") == 1 and "assess.pair_mergers" in err and not (tmp_path / "run").exists()
