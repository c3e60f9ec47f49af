"""End-to-end tests of ``supergame assess``: bad input is one line with exit status 2 and no bundle,
a run writes a complete evidence bundle whose manifest hashes match its files, the same file gives
the same bytes, and the assessment runs as an experiment kind under ``supergame run``."""

import csv
import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[1]
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
    out = tmp_path / "bundle"
    code, stdout, err = _run(["assess", str(f), "--out", str(out), "--json"], capsys)
    assert code == 0, err
    d = json.loads(stdout)
    assert d["bundle"] == str(out)
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
    ma = json.loads((a / "manifest.json").read_text())["files"]
    mb = json.loads((b / "manifest.json").read_text())["files"]
    assert ma == mb


def test_text_output(tmp_path, capsys):
    f = _write(tmp_path, SMALL.replace("[assess.sensitivity]", "[assess.ignored]").split("[assess.ignored]")[0])
    code, out, _ = _run(["assess", str(f), "--out", str(tmp_path / "o")], capsys)
    assert code == 0
    assert "Critical discount factors" in out and "grim trigger" in out and "Ivaldi" in out
    assert "reproduces the observed prices and quantities" in out
    assert out.rstrip().endswith(str(tmp_path / "o")) and "not proof of conduct" in out


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
    code, _, err = _run(["run", str(f), "--out", str(out), "--workers", "1"], capsys)
    assert code == 0, err
    rows = list(csv.DictReader((out / "results.csv").open()))
    assert [r["status"] for r in rows] == ["ok", "ok"]
    for r in rows:
        n = int(float(r["market.n_firms"]))
        assert float(r["threshold.before"]) == pytest.approx((n + 1) ** 2 / (n * n + 6 * n + 1), rel=1e-12)
        assert float(r["threshold.after"]) == pytest.approx(n ** 2 / ((n - 1) ** 2 + 6 * (n - 1) + 1), rel=1e-12)
        assert float(r["direction"]) == -1.0


@pytest.mark.slow
def test_shipped_experiment_end_to_end(tmp_path, capsys):
    out = tmp_path / "bundle"
    code, stdout, err = _run(["assess", str(SHIPPED), "--out", str(out), "--json"], capsys)
    assert code == 0, err
    d = json.loads(stdout)
    assert d["calibration"]["reproduced"]
    assert d["conclusion"]["direction"] == "harder"
    assert d["conclusion"]["binding_before"] == "Firm D" and d["conclusion"]["binding_after"] == "Firm C"
    assert set(d["sensitivity"]) == {"margin", "size", "delta", "noise"}
    assert (out / "summary.html").is_file() and (out / "figures" / "sensitivity_margin.png").is_file()
