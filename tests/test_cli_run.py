"""``supergame check / run / report / verify`` end to end: bad files, the kill test, verification."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from sim.cli import main
from sim.runs import run_experiment

ROOT = Path(__file__).resolve().parents[1]

GOOD = textwrap.dedent("""
    # A small sweep for the command-line tests.
    [experiment]
    name = "small"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = 10.0
    n_firms = 2
    [monitoring]
    perception_error = 0.01
    [[strategies]]
    strategy = "grim_trigger"
    seats = 2
    [run]
    periods = 50
    replications = 20
    seed = 9
    [sweep]
    "run.delta" = [0.6, 0.9]
    "monitoring.perception_error" = [0.0, 0.02]
    """)

BAD = {
    "misspelt key": (GOOD.replace("perception_error = 0.01", "perception_eror = 0.01"),
                     "monitoring.perception_eror", "unknown key"),
    "value out of range": (GOOD.replace("replications = 20", "replications = -5"), "run.replications",
                           "an integer in [1, 1000000000], got -5"),
    "sweep value out of range": (GOOD.replace('[0.6, 0.9]', '[0.6, 1.9]'), "sweep.run.delta", "1.9"),
    "sweep path that does not exist": (GOOD.replace('"run.delta"', '"run.delat"'), "sweep.run.delat",
                                       "does not exist"),
    "sweep index that does not exist": (GOOD.replace('"run.delta"', '"strategies.2.length"'),
                                        "sweep.strategies.2.length", "does not exist"),
    "TOML syntax error": (GOOD.replace("[run]", "[run"), "TOML syntax error", "line"),
}


@pytest.fixture
def good(tmp_path):
    p = tmp_path / "good.toml"
    p.write_text(GOOD)
    return p


@pytest.mark.parametrize("case", list(BAD))
@pytest.mark.parametrize("command", ["check", "run"])
def test_bad_file_gets_one_line_status_2_and_no_run_folder(case, command, tmp_path, monkeypatch, capsys):
    text, key, fragment = BAD[case]
    p = tmp_path / "bad.toml"
    p.write_text(text)
    monkeypatch.chdir(tmp_path)
    assert main([command, str(p)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert err.startswith(f"supergame {command}: error: ")
    assert key in err and fragment in err
    assert not (tmp_path / "runs").exists()


def test_bad_flags_leave_no_run_folder(good, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(good), "--workers", "0"]) == 2
    assert "--workers" in capsys.readouterr().err
    assert main(["run", str(good), "--plugin", "nowhere.py"]) == 2
    assert not (tmp_path / "runs").exists()


def test_check_every_shipped_experiment(capsys):
    files = sorted(str(p) for p in (ROOT / "experiments").glob("*.toml"))
    assert main(["check", *files]) == 0
    out = capsys.readouterr().out.splitlines()
    assert len(out) == len(files) and all("valid" in line for line in out)


def test_run_report_verify(good, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(good), "--workers", "1", "--report", "--json"]) == 0
    s = json.loads(capsys.readouterr().out)
    folder = Path(s["folder"])
    assert folder.parent == Path("runs") and s["complete"] and s["ok"] == 4
    for f in ("experiment.toml", "results.sqlite", "results.csv", "manifest.json", "report/summary.md",
              "report/summary.html", "report/manifest.json"):
        assert (folder / f).is_file(), f
    assert (folder / "experiment.toml").read_text() == GOOD
    man = json.loads((folder / "manifest.json").read_text())
    assert man["experiment"]["sha256"] and "report/summary.html" in man["files"]
    assert man["seeds"]["cells"] == [[0, 9], [1, 9], [2, 9], [3, 9]]
    assert main(["verify", str(folder), "--sample", "2"]) == 0
    out = capsys.readouterr().out
    assert "reproduce identically" in out and "the run checks out" in out
    # the report is read from the store: writing it again gives the same bytes
    before = {p: p.read_bytes() for p in (folder / "report").rglob("*") if p.is_file()}
    assert main(["report", str(folder)]) == 0
    after = {p: p.read_bytes() for p in (folder / "report").rglob("*") if p.is_file()}
    assert before == after
    assert main(["verify", str(folder), "--sample", "0"]) == 0


def test_verify_fails_when_an_output_file_is_altered(good, tmp_path, capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    csv = s.folder / "results.csv"
    csv.write_text(csv.read_text().replace("ok,", "ok,0", 1))
    assert main(["verify", str(s.folder), "--sample", "0"]) == 1
    out = capsys.readouterr().out
    assert "results.csv: SHA-256 differs" in out and "does NOT check out" in out
    (s.folder / "extra.txt").write_text("added later")
    assert main(["verify", str(s.folder), "--sample", "0"]) == 1
    assert "extra.txt: in the folder but not in the manifest" in capsys.readouterr().out


def test_verify_fails_when_a_number_does_not_reproduce(good, tmp_path, capsys):
    """A forged store whose manifest was rewritten passes the hash check but not the re-run."""
    from sim.runs import write_manifest

    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    con = sqlite3.connect(s.folder / "results.sqlite")
    m = json.loads(con.execute("SELECT metrics FROM cells WHERE cell = 3").fetchone()[0])
    m["collusive_share"] = m["collusive_share"] * 1.01 + 0.001
    con.execute("UPDATE cells SET metrics = ? WHERE cell = 3", (json.dumps(m),))
    con.commit()
    con.close()
    write_manifest(s.folder)
    assert main(["verify", str(s.folder), "--cells", "0,3"]) == 1
    out = capsys.readouterr().out
    assert "cell 3" in out and "collusive_share" in out and "do not reproduce" in out
    assert "cell 0 (run.delta = 0.6, monitoring.perception_error = 0.0): all" in out


def test_resume_refuses_another_file_and_out_refuses_a_used_folder(good, tmp_path, capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    other = tmp_path / "other.toml"
    other.write_text(GOOD.replace("seed = 9", "seed = 10"))
    assert main(["run", str(other), "--resume", str(s.folder)]) == 2
    assert "--resume" in capsys.readouterr().err
    assert main(["run", str(good), "--out", str(s.folder)]) == 2
    assert "--resume" in capsys.readouterr().err
    # resuming a complete run computes nothing and leaves the exports as they were
    csv = (s.folder / "results.csv").read_bytes()
    assert main(["run", "--resume", str(s.folder)]) == 0
    assert "0 computed now" in capsys.readouterr().out
    assert (s.folder / "results.csv").read_bytes() == csv


KILL = textwrap.dedent("""
    # Cells of a tenth of a second or so, for the kill test.
    [experiment]
    name = "kill"
    kind = "simulate"
    [market]
    model = "cournot"
    demand = "linear"
    intercept = 100.0
    cost = [10.0, 10.0, 14.0]
    [monitoring]
    perception_error = 0.001
    [[strategies]]
    strategy = "forgiving_tit_for_tat"
    forgiveness = 0.3
    seats = 3
    [run]
    periods = 4000
    replications = 300
    seed = 31
    [sweep]
    "run.delta" = { start = 0.5, stop = 0.95, num = 10 }
    "monitoring.perception_error" = [0.0, 0.001, 0.002, 0.005]
    """)


def _stored(db: Path) -> int:
    if not db.exists():
        return 0
    try:
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1)
        try:
            return int(con.execute("SELECT COUNT(*) FROM cells").fetchone()[0])
        finally:
            con.close()
    except sqlite3.Error:
        return 0


def test_kill_and_resume_gives_the_exports_of_an_uninterrupted_run(tmp_path):
    exp = tmp_path / "kill.toml"
    exp.write_text(KILL)
    a = tmp_path / "killed"
    cmd = [sys.executable, "-m", "sim", "run", str(exp), "--out", str(a), "--workers", "2"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.time() + 120
    while _stored(a / "results.sqlite") < 6 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)
    # SIGKILL the command and its worker processes at once
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    n_before = _stored(a / "results.sqlite")
    assert proc.returncode == -signal.SIGKILL
    assert 6 <= n_before < 40, "the run must be killed part-way"
    assert not (a / "results.csv").exists() and not (a / "manifest.json").exists()

    res = subprocess.run([sys.executable, "-m", "sim", "run", "--resume", str(a), "--workers", "2"],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    assert f"{40 - n_before} computed now" in res.stdout

    con = sqlite3.connect(a / "results.sqlite")
    total, distinct = con.execute("SELECT COUNT(*), COUNT(DISTINCT cell) FROM cells").fetchone()
    per_attempt = dict(con.execute("SELECT attempt, COUNT(*) FROM cells GROUP BY attempt").fetchall())
    con.close()
    assert total == distinct == 40, "no cell lost, none duplicated"
    assert per_attempt == {1: n_before, 2: 40 - n_before}, "the resumed run computed only the missing cells"

    b = tmp_path / "whole"
    s = run_experiment(exp, b, workers=2, progress=False)
    assert s.complete
    for f in ("results.csv", "results.parquet", "arrays.json"):
        assert (a / f).read_bytes() == (b / f).read_bytes(), f
    man = json.loads((a / "manifest.json").read_text())
    assert len(man["attempts"]) == 2 and man["attempts"][0]["finished"] is None
    assert main(["verify", str(a), "--sample", "1"]) == 0


def test_failed_cells_are_listed_in_the_summary(tmp_path, capsys):
    plugin = tmp_path / "failing_strategy_kind.py"
    plugin.write_text(textwrap.dedent("""
        from sim.kinds import CellResult, Kind, register_kind

        def run(cfg, ctx):
            if cfg["x"] % 2:
                raise ArithmeticError(f"odd x = {cfg['x']}")
            return CellResult({"x": float(cfg["x"])})

        register_kind(Kind("oddfail", ("params",), lambda d: d["params"], run, seed_key=None), replace=True)
        """))
    exp = tmp_path / "odd.toml"
    exp.write_text('[experiment]\nname = "odd"\nkind = "oddfail"\n[params]\nx = 0\n'
                   '[sweep]\n"params.x" = [0, 1, 2, 3]\n')
    assert main(["run", str(exp), "--plugin", str(plugin), "--out", str(tmp_path / "r"), "--workers", "2",
                 "--report"]) == 0
    out = capsys.readouterr().out
    assert "2 failed" in out and "cell 1: ArithmeticError: odd x = 1" in out and "cell 3:" in out
    summary = (tmp_path / "r" / "report" / "summary.md").read_text()
    assert "2 cells failed" in summary and "odd x = 3" in summary
    man = json.loads((tmp_path / "r" / "manifest.json").read_text())
    assert man["plugins"][0]["sha256"] and man["cells"]["failed"] == 2


def test_resume_of_a_folder_killed_while_being_created(good, tmp_path, capsys):
    from sim.store import Store

    folder = tmp_path / "half"
    folder.mkdir()
    (folder / "experiment.toml").write_text(GOOD)
    Store(folder / "results.sqlite").close()  # the schema exists, the settings were never written
    assert main(["run", "--resume", str(folder)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--resume" in err and "start the run again" in err
