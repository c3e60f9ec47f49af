"""Run folders that keep one writer, refuse symbolic links, and catch any edit of their record."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest

from sim.core.errors import InputError
from sim.runner.lock import FolderLock
from sim.runner.runs import open_run, run_experiment, verify_run
from sim.runner.verify import sample_cells, store_digest


def test_a_second_writer_is_refused_while_the_first_holds_the_folder(finished_run, cli):
    # another process holds the lock, as a run or a report in progress would
    code = textwrap.dedent(f"""
        import sys, time
        from sim.runner.lock import FolderLock
        with FolderLock({str(finished_run)!r}):
            print("locked", flush=True)
            time.sleep(30)
        """)
    holder = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        r = cli("report", finished_run)
        assert r.code == 2 and "RUN_DIR:" in r.err and f"process {holder.pid}" in r.err
        assert r.err.count("\n") == 1
        r = cli("run", "--resume", finished_run)
        assert r.code == 2 and "--resume:" in r.err and "being written" in r.err
        with pytest.raises(InputError) as e:
            verify_run(finished_run)  # a reader waits for no writer: it is refused too
        assert e.value.key == "folder"
    finally:
        holder.kill()
        holder.wait()
    # the kernel released the lock with the process: the folder is free again
    assert cli("report", finished_run).code == 0


def test_two_runs_into_one_folder_keep_apart(tmp_path, write_experiment):
    from tests.conftest import TWO_MILLS

    f = write_experiment(TWO_MILLS)
    out = tmp_path / "shared"
    out.mkdir()
    with FolderLock(out, key="out"):  # the other run got there first and holds the folder
        with pytest.raises(InputError) as e:
            run_experiment(f, out, workers=1, progress=False)
    assert e.value.key == "out"
    assert [p.name for p in out.iterdir()] == [".lock"]


def test_symbolic_links_in_a_run_folder_are_refused(finished_run, tmp_path, cli):
    outside = tmp_path / "elsewhere.txt"
    outside.write_text("not part of the run")
    os.symlink(outside, finished_run / "planted")
    r = cli("run", "--resume", finished_run)
    assert r.code == 2 and "symbolic link" in r.err
    res = verify_run(finished_run)
    assert not res.ok and "symbolic link" in res.checks[0][1]
    r = cli("report", finished_run)
    assert r.code == 2 and "symbolic link" in r.err
    assert outside.read_text() == "not part of the run"


@pytest.mark.parametrize("edit", ["started", "packages", "cells", "command"])
def test_any_edit_of_the_manifest_is_caught(finished_run, edit, cli):
    p = finished_run / "manifest.json"
    man = json.loads(p.read_text())
    if edit == "started":
        man["started"] = "2020-01-01T00:00:00+00:00"
    elif edit == "packages":
        man["packages"]["numpy"] = "0.0.1"
    elif edit == "cells":
        man["cells"]["failed"] = 1
    else:
        man["command"] = ["supergame", "run", "something-else.toml"]
    p.write_text(json.dumps(man, indent=2))
    res = verify_run(finished_run)
    assert not res.ok and any("edited after it was written" in t for ok, t in res.checks if not ok)
    r = cli("report", finished_run)
    assert r.code == 2 and "edited after it was written" in r.err


def test_a_manifest_rewritten_with_a_fresh_digest_is_checked_against_the_store(finished_run):
    from sim.runner.manifest import manifest_digest

    p = finished_run / "manifest.json"
    man = json.loads(p.read_text())
    man["cells"]["failed_cells"] = [{"cell": 1, "error": "invented"}]
    man["manifest_sha256"] = manifest_digest(man)
    p.write_text(json.dumps(man, indent=2))
    res = verify_run(finished_run)
    assert not res.ok and any("records other cells than the store holds" in t for ok, t in res.checks if not ok)


def test_the_cells_re_run_depend_on_every_stored_number(finished_run):
    with open_run(finished_run) as rf:
        rows = rf.rows()
    d = store_digest(rows)
    cells = list(range(100))
    first = sample_cells(cells, 12, d)
    assert len(first) == 12 and first == sorted(set(first)) and first == sample_cells(cells, 12, d)
    rows[0].metrics["threshold.grim"] += 1e-12  # the smallest edit of one number draws other cells
    assert store_digest(rows) != d and sample_cells(cells, 12, store_digest(rows)) != first
    # a small run re-runs every cell
    res = verify_run(finished_run)
    assert res.ok and len(res.cells) == 2 and any("every finished cell" in t for _, t in res.checks)


def test_report_bundle_refuses_another_runs_folder(finished_run, tmp_path, write_experiment, cli):
    from tests.conftest import TWO_MILLS

    other = run_experiment(write_experiment(TWO_MILLS, "b.toml"), tmp_path / "other", workers=1,
                           progress=False).folder
    before = sorted(p.name for p in other.rglob("*"))
    r = cli("report", finished_run, "--bundle", other / "report")
    assert r.code == 2 and "--bundle:" in r.err and "belongs to the run folder" in r.err
    assert sorted(p.name for p in other.rglob("*")) == before


def test_out_means_a_run_folder_in_every_command(finished_run, tmp_path, cli):
    """``--out`` names the run folder to create (run, simulate, learn, tournament, assess); the report's bundle
    folder is ``--bundle``, and ``report --out`` is refused in one line that names the flag to use, writing
    nothing."""
    target = tmp_path / "bundle-here"
    r = cli("report", finished_run, "--out", target)
    assert r.code == 2 and r.err.count("\n") == 1 and "--out:" in r.err and "--bundle DIR" in r.err
    assert not target.exists()
    from sim.cli import build_parser

    for command in ("run", "tournament", "assess"):
        helps = {a.dest: a.help for a in build_parser(command).commands[command]._actions}
        assert "run folder" in helps["out"], command


def test_text_cells_that_look_like_formulas_are_neutralised(tmp_path, write_experiment):
    # OWASP, "CSV Injection": a text cell starting with = + - @ tab or CR is prefixed with an apostrophe
    from sim.runner.tabular import csv_text

    text = csv_text(["label", "x"], [["=HYPERLINK(\"http://example.invalid\")", -1.5], ["@SUM(A1)", 2],
                                     ["-cmd", 3], ["plain", 4], ["\tx", 5]])
    import csv
    import io

    rows = list(csv.reader(io.StringIO(text)))
    assert rows[1] == ["'=HYPERLINK(\"http://example.invalid\")", "-1.5"]  # numbers stay numbers
    assert rows[2][0] == "'@SUM(A1)" and rows[3] == ["'-cmd", "3"] and rows[4] == ["plain", "4"]
    assert rows[5][0] == "'\tx"
    # end to end: a swept strategy labelled like a formula
    f = write_experiment("""
        [experiment]
        name = "labels"
        kind = "simulate"
        [market]
        model = "cournot"
        demand = "linear"
        intercept = 100.0
        cost = 10.0
        n_firms = 2
        [[strategies]]
        strategy = "grim_trigger"
        seats = 2
        [run]
        periods = 20
        replications = 5
        [sweep.strategies.1]
        values = [{ strategy = "grim_trigger", seats = 2 }, { strategy = "tit_for_tat", seats = 2 }]
        labels = ["=HYPERLINK(1)", "<script>x</script>"]
        """)
    s = run_experiment(f, tmp_path / "run", workers=1, progress=False)
    csv = (s.folder / "results.csv").read_text()
    assert "'=HYPERLINK(1)" in csv and "\n1,ok,=HYPERLINK" not in csv


def test_verify_tells_a_metric_this_version_no_longer_computes_from_one_that_does_not_reproduce(finished_run,
                                                                                                 monkeypatch):
    # a run made by another version of the code: a stored column this version does not compute is named as such, and
    # a column this version adds is not compared (neither is a wrong number); the columns both have are compared
    import sim.runner.verify as V

    real = V.clean_metrics

    def other_version(metrics):
        out = dict(real(metrics))
        name = sorted(out)[0]
        out["a_new_measure"] = 1.0
        del out[name]
        return out

    monkeypatch.setattr(V, "clean_metrics", other_version)
    res = verify_run(finished_run)
    failed = [t for ok, t in res.checks if not ok]
    assert failed and all("stored metric this version does not compute" in t for t in failed)
    assert "the run was made by another version of the code" in failed[0]
    passed = [t for ok, t in res.checks if ok and "stored metrics reproduce" in t]
    assert len(passed) == 2 and all("this version adds, not stored, are not compared: a_new_measure" in t
                                    for t in passed)
    assert all(r["not_computed"] and r["not_stored"] == ["a_new_measure"] for r in res.cells)
