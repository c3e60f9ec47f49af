"""``supergame check / run / report / verify`` end to end: bad files, the kill test, verification."""

from __future__ import annotations

import json
import math
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from sim.cli import main
from sim.core.errors import InputError
from sim.evidence.report import write_report
from sim.runner.runs import open_run, run_experiment

ROOT = Path(__file__).resolve().parents[2]

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
    # cells counted from 1, every one with the experiment seed
    assert man["seeds"]["cells"] == [[1, 9], [2, 9], [3, 9], [4, 9]]
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
    """A forged store whose manifest was rewritten passes the hash check but not the re-run (nor the
    comparison of the exports with the store)."""
    from sim.runner.runs import write_manifest

    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    con = sqlite3.connect(s.folder / "results.sqlite")
    m = json.loads(con.execute("SELECT metrics FROM cells WHERE cell = 3").fetchone()[0])
    m["collusive_share"] = m["collusive_share"] * 1.01 + 0.001
    con.execute("UPDATE cells SET metrics = ? WHERE cell = 3", (json.dumps(m),))
    con.commit()
    con.close()
    # the manifest keeps its record of the store: the forger must remove it to write a new one
    with pytest.raises(InputError, match=r"results\.sqlite was altered after manifest\.json was written"):
        write_manifest(s.folder)
    (s.folder / "manifest.json").unlink()
    write_manifest(s.folder)
    assert main(["verify", str(s.folder), "--cells", "1,4"]) == 1
    out = capsys.readouterr().out
    assert "files match their SHA-256" in out and "FAILED  results.csv differs from what the store gives" in out
    assert "cell 4 (run.delta = 0.9, monitoring.perception_error = 0.02): 1 of" in out
    assert "collusive_share" in out and "do not reproduce" in out
    assert "cell 1 (run.delta = 0.6, monitoring.perception_error = 0.0): all" in out


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
        from sim.runner.kinds import CellResult, Kind, register_kind

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
    # cells counted from 1: x = 1 is the second cell
    assert "2 failed" in out and "cell 2: ArithmeticError: odd x = 1" in out and "cell 4:" in out
    summary = (tmp_path / "r" / "report" / "summary.md").read_text()
    assert "2 cells failed" in summary and "odd x = 3" in summary
    man = json.loads((tmp_path / "r" / "manifest.json").read_text())
    assert man["plugins"][0]["sha256"] and man["cells"]["failed"] == 2


def test_resume_of_a_folder_killed_while_being_created(good, tmp_path, capsys):
    from sim.runner.store import Store

    folder = tmp_path / "half"
    folder.mkdir()
    (folder / "experiment.toml").write_text(GOOD)
    Store(folder / "results.sqlite").close()  # the schema exists, the settings were never written
    assert main(["run", "--resume", str(folder)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--resume" in err and "start the run again" in err


# --------------------------------------------------------------------------------------------------
# A run folder is evidence: what was recorded stays recorded
# --------------------------------------------------------------------------------------------------


def _drop_cells(folder: Path, first: int) -> None:
    """Make a finished run look interrupted: rows from index ``first`` on and the exports removed."""
    con = sqlite3.connect(folder / "results.sqlite")
    con.execute("DELETE FROM cells WHERE cell >= ?", (first,))
    con.commit()
    con.close()
    for f in ("results.csv", "results.parquet", "arrays.json", "manifest.json"):
        (folder / f).unlink(missing_ok=True)


def test_an_altered_export_is_not_blessed_by_a_report_and_verify_compares_exports_with_the_store(good, tmp_path,
                                                                                                 capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    csv = s.folder / "results.csv"
    assert csv.read_text().splitlines()[1].startswith("1,ok,0.6,0.0,9,")  # cells counted from 1
    forged = csv.read_text().replace("1,ok,0.6,0.0,9,", "1,ok,0.6,0.0,9,0.123", 1)
    csv.write_text(forged)
    # the report refuses before writing anything: the manifest keeps its record of results.csv
    assert main(["report", str(s.folder)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "RUN_DIR: results.csv was altered after manifest.json was written" in err
    assert not (s.folder / "report").exists()
    assert main(["verify", str(s.folder), "--sample", "0"]) == 1
    out = capsys.readouterr().out
    assert "results.csv: SHA-256 differs" in out and "FAILED  results.csv differs from what the store gives" in out
    # even with a manifest written afresh over the forged file, the exports are rebuilt from the store
    (s.folder / "manifest.json").unlink()
    from sim.runner.runs import write_manifest

    write_manifest(s.folder)
    assert main(["verify", str(s.folder), "--sample", "0"]) == 1
    out = capsys.readouterr().out
    assert "files match their SHA-256" in out and "FAILED  results.csv differs from what the store gives" in out
    # resuming writes the exports again from the store: the forgery is gone and the run checks out
    assert main(["run", "--resume", str(s.folder)]) == 0
    capsys.readouterr()
    assert csv.read_text() != forged
    assert main(["verify", str(s.folder), "--sample", "1"]) == 0
    assert "results.csv is what the store gives, byte for byte" in capsys.readouterr().out


def test_a_report_file_altered_after_the_manifest_stops_a_resumption_until_the_report_is_written_again(
        good, tmp_path, capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, report=True, write_report=write_report, progress=False)
    md = s.folder / "report" / "summary.md"
    original = md.read_bytes()
    md.write_text(md.read_text().replace("0.5294", "0.1000"))
    assert main(["run", "--resume", str(s.folder)]) == 2
    assert "--resume: report/summary.md was altered after manifest.json was written" in capsys.readouterr().err
    assert main(["report", str(s.folder)]) == 0
    assert md.read_bytes() == original
    capsys.readouterr()
    assert main(["verify", str(s.folder), "--sample", "0"]) == 0
    out = capsys.readouterr().out
    assert "results.csv is what the store gives, byte for byte" in out and "report/ was written from these results" \
        in out


def test_resume_refuses_an_altered_copy_of_the_experiment(good, tmp_path, capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    _drop_cells(s.folder, 2)
    copy = s.folder / "experiment.toml"
    copy.write_text(copy.read_text().replace("seed = 9", "seed = 1234"))
    for argv in (["run", "--resume", str(s.folder)], ["run", str(good), "--resume", str(s.folder)]):
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "--resume:" in err and "experiment.toml was changed after the run started" \
            in err
    con = sqlite3.connect(s.folder / "results.sqlite")
    assert con.execute("SELECT COUNT(*) FROM cells").fetchone()[0] == 2  # nothing was computed
    assert con.execute("SELECT COUNT(*) FROM attempts").fetchone()[0] == 1
    con.close()
    assert main(["report", str(s.folder)]) == 2
    assert "RUN_DIR:" in capsys.readouterr().err
    assert main(["verify", str(s.folder)]) == 1
    out = capsys.readouterr().out
    assert "FAILED  experiment.toml was changed after the run started" in out and "no cell re-run" in out


def test_out_with_resume_is_refused_unless_it_names_the_same_folder(good, tmp_path, capsys):
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    assert main(["run", "--resume", str(s.folder), "--out", str(tmp_path / "elsewhere")]) == 2
    assert "--out: cannot be combined with resuming" in capsys.readouterr().err
    assert not (tmp_path / "elsewhere").exists()
    assert main(["run", "--resume", str(s.folder), "--out", str(s.folder)]) == 0


PLUGIN_KIND = textwrap.dedent("""
    from sim.runner.kinds import CellResult, Kind, register_kind
    FACTOR = {factor}
    def run(cfg, ctx):
        return CellResult({{"y": FACTOR * float(cfg["x"] ** 2)}})
    register_kind(Kind("sqkind", ("params",), lambda d: d["params"], run, seed_key=None), replace=True)
    """)


def test_resume_refuses_changed_plugin_code_and_other_package_versions(tmp_path):
    plugin = tmp_path / "sq_kind_plugin.py"
    plugin.write_text(PLUGIN_KIND.format(factor=1.0))
    exp = tmp_path / "sq.toml"
    exp.write_text('[experiment]\nname = "sq"\nkind = "sqkind"\n[params]\nx = 0\n[sweep]\n"params.x" = [0, 1, 2, 3]\n')
    folder = tmp_path / "run"

    def cli(*argv):
        return subprocess.run([sys.executable, "-m", "sim", *argv], capture_output=True, text=True, timeout=120)

    assert cli("run", str(exp), "--plugin", str(plugin), "--out", str(folder), "--workers", "1").returncode == 0
    man = json.loads((folder / "manifest.json").read_text())
    first = man["attempts"][0]
    assert first["packages"]["numpy"] and len(first["code_sha256"]) == 64 and first["plugins"][0]["sha256"]
    _drop_cells(folder, 2)
    plugin.write_text(PLUGIN_KIND.format(factor=100.0))
    r = cli("run", "--resume", str(folder), "--plugin", str(plugin))
    assert r.returncode == 2 and r.stderr.count("\n") == 1
    assert "--plugin:" in r.stderr and "has changed since the run started" in r.stderr
    r = cli("run", "--resume", str(folder))
    assert r.returncode == 2 and "give it again with --plugin" in r.stderr
    plugin.write_text(PLUGIN_KIND.format(factor=1.0))
    # another numpy computed the stored cells (the record is forged here): the run is not mixed
    con = sqlite3.connect(folder / "results.sqlite")
    info = json.loads(con.execute("SELECT info FROM attempts WHERE attempt = 1").fetchone()[0])
    real = info["packages"]["numpy"]
    info["packages"]["numpy"] = "0.0.1"
    con.execute("UPDATE attempts SET info = ? WHERE attempt = 1", (json.dumps(info),))
    con.commit()
    r = cli("run", "--resume", str(folder), "--plugin", str(plugin))
    assert r.returncode == 2 and f"numpy 0.0.1 then, {real} now" in r.stderr
    info["packages"]["numpy"] = real
    con.execute("UPDATE attempts SET info = ? WHERE attempt = 1", (json.dumps(info),))
    con.commit()
    con.close()
    r = cli("run", "--resume", str(folder), "--plugin", str(plugin))
    assert r.returncode == 0 and "2 computed now" in r.stdout
    assert (folder / "results.csv").read_text().splitlines()[1:] == ["1,ok,0,,0.0,", "2,ok,1,,1.0,", "3,ok,2,,4.0,",
                                                                      "4,ok,3,,9.0,"]


def test_a_report_stopped_part_way_is_written_again(good, tmp_path, capsys):
    """A report folder that an interrupted write left behind (no manifest, or the hidden folder of the
    bundle being written) does not stop the report; the error about a foreign folder names RUN_DIR."""
    s = run_experiment(good, tmp_path / "run", workers=1, progress=False)
    half = s.folder / "report"
    (half / "figures").mkdir(parents=True)
    (half / "figures" / "01-heatmap.png").write_bytes(b"\x89PNG half")
    staging = s.folder / ".report.partial-x1y2z3"
    (staging / "tables").mkdir(parents=True)
    (staging / "tables" / "summary.csv").write_text("cell\n")
    assert main(["run", "--resume", str(s.folder), "--report"]) == 0
    assert (half / "manifest.json").is_file() and not staging.exists()
    assert not (half / "figures" / "01-heatmap.png").exists()  # the stale folder was replaced as a whole
    capsys.readouterr()
    assert main(["verify", str(s.folder), "--sample", "0"]) == 0
    # a report stopped by hand or by an earlier version: no manifest of its own; written again as a whole
    (half / "manifest.json").unlink()
    (half / "summary.md").write_text("stopped")
    assert main(["report", str(s.folder)]) == 0 and (half / "manifest.json").is_file()
    assert (half / "summary.md").read_text() != "stopped"
    capsys.readouterr()
    assert main(["verify", str(s.folder), "--sample", "0"]) == 0
    other = tmp_path / "notes"
    other.mkdir()
    (other / "mine.txt").write_text("my notes")
    assert main(["report", str(s.folder), "--bundle", str(other)]) == 2
    assert "--bundle:" in capsys.readouterr().err and (other / "mine.txt").is_file()


def test_an_interrupted_bundle_leaves_the_earlier_one_whole(tmp_path):
    from sim.core.files import clear_leftovers, leftovers
    from sim.evidence.bundle import Bundle

    target = tmp_path / "b"
    first = Bundle(target, "First")
    first.table("t", ["a"], [[1]])
    first.write()
    before = {p.relative_to(target): p.read_bytes() for p in target.rglob("*") if p.is_file()}
    with pytest.raises(RuntimeError), Bundle(target, "Second") as b:
        b.table("t", ["a"], [[2]])
        raise RuntimeError("stopped while writing")
    assert {p.relative_to(target): p.read_bytes() for p in target.rglob("*") if p.is_file()} == before
    assert leftovers(target) == []
    killed = Bundle(target, "Killed")  # a process killed before write(): its staging folder stays
    killed.table("t", ["a"], [[3]])
    assert len(leftovers(target)) == 1
    assert {p.relative_to(target): p.read_bytes() for p in target.rglob("*") if p.is_file()} == before
    clear_leftovers(target)
    assert leftovers(target) == []
    second = Bundle(target, "Second")
    second.table("u", ["a"], [[2]])
    second.write()
    assert (target / "tables" / "u.csv").is_file() and not (target / "tables" / "t.csv").exists()


def _corrupt(folder: Path, case: str) -> None:
    db = folder / "results.sqlite"
    if case == "garbage store":
        db.write_bytes(b"garbage" * 100)
    elif case == "truncated store":
        data = db.read_bytes()
        db.write_bytes(data[: len(data) // 2])
    elif case == "bad row":
        con = sqlite3.connect(db)
        con.execute("UPDATE cells SET metrics = '{bad' WHERE cell = 2")
        con.commit()
        con.close()
    elif case == "stray row":
        con = sqlite3.connect(db)
        con.execute("UPDATE cells SET cell = 99 WHERE cell = 3")
        con.commit()
        con.close()
    elif case == "copy syntax error":
        (folder / "experiment.toml").write_text("[run\n")
    elif case == "garbage manifest":
        (folder / "manifest.json").write_text("{not json")
    elif case == "manifest not a table":
        (folder / "manifest.json").write_text("[]")


CORRUPT = ["garbage store", "truncated store", "bad row", "stray row", "copy syntax error", "garbage manifest",
           "manifest not a table"]


@pytest.fixture(scope="module")
def finished_small(tmp_path_factory):
    d = tmp_path_factory.mktemp("corrupt")
    p = d / "good.toml"
    p.write_text(GOOD)
    return run_experiment(p, d / "run", workers=1, progress=False).folder


@pytest.mark.parametrize("case", CORRUPT)
def test_a_damaged_run_folder_is_one_line_for_report_and_resume_and_failed_checks_for_verify(case, finished_small,
                                                                                            tmp_path, capsys):
    folder = tmp_path / "run"
    shutil.copytree(finished_small, folder)
    _corrupt(folder, case)
    for argv, key in ((["report", str(folder)], "RUN_DIR"), (["run", "--resume", str(folder)], "--resume")):
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and f": error: {key}:" in err and "internal error" not in err, err
    assert main(["verify", str(folder), "--sample", "4"]) == 1
    cap = capsys.readouterr()
    assert cap.err == "" and "FAILED  " in cap.out and "the run does NOT check out" in cap.out
    if case == "stray row":
        assert "a row for cell 100, outside the 4 cells" in cap.out and "1 of 4 cells have no result" in cap.out


def test_a_path_that_is_not_a_run_folder_is_bad_input(tmp_path, capsys):
    for argv in (["verify", str(tmp_path / "nope")], ["report", str(tmp_path / "nope")],
                 ["run", "--resume", str(tmp_path / "nope")]):
        assert main(argv) == 2
        assert "is not a run folder" in capsys.readouterr().err


FAILING_KIND = textwrap.dedent("""
    from sim.runner.kinds import CellResult, Kind, register_kind

    def run(cfg, ctx):
        raise ArithmeticError(f"x = {cfg['x']} cannot be computed")

    register_kind(Kind("allfail", ("params",), lambda d: d["params"], run, seed_key=None), replace=True)
    """)


def test_a_run_whose_cells_all_failed_is_not_complete_and_exits_1(tmp_path, capsys):
    plugin = tmp_path / "all_failing_kind.py"
    plugin.write_text(FAILING_KIND)
    exp = tmp_path / "fail.toml"
    exp.write_text('[experiment]\nname = "fail"\nkind = "allfail"\n[params]\nx = 0\n[sweep]\n"params.x" = [0, 1, 2]\n')
    out = tmp_path / "r"
    assert main(["run", str(exp), "--plugin", str(plugin), "--out", str(out), "--workers", "1", "--report",
                 "--json"]) == 1
    s = json.loads(capsys.readouterr().out)
    assert s["status"] == "failed" and not s["complete"] and s["failed"] == 3 and s["ok"] == 0
    assert not (out / "report").exists()
    man = json.loads((out / "manifest.json").read_text())
    assert man["attempts"][0]["outcome"] == "failed" and man["cells"]["failed"] == 3
    assert main(["run", "--resume", str(out), "--plugin", str(plugin)]) == 1
    assert "Failed: none of the 3 cells finished" in capsys.readouterr().out


def test_a_single_run_has_the_numbers_of_supergame_simulate_of_the_same_file(tmp_path, capsys):
    """A file without a sweep is cell 1, whose streams have the key (0,): the key every single-run
    command uses, so `supergame simulate FILE` and `supergame run FILE` agree to the last digit."""
    one = tmp_path / "one.toml"
    one.write_text(GOOD.split("[sweep]")[0])
    assert main(["simulate", str(one), "--json"]) == 0
    direct = json.loads(capsys.readouterr().out)["metrics"]
    s = run_experiment(one, tmp_path / "run", workers=1, progress=False)
    with open_run(s.folder) as rf:
        (row,) = rf.rows()
    assert row.cell == 0 and row.number == 1
    for k, est in direct.items():
        v = est["value"]
        assert (v is None and math.isnan(row.metrics[k])) or row.metrics[k] == v, k
