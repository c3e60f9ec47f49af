"""A run that is killed or terminated leaves no worker behind and loses nothing that had finished."""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

#: four cells of a few seconds each on two workers: there is always a worker busy when the parent is stopped
SLOW = """
[experiment]
name = "slow"
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
periods = 200000
replications = 100
[sweep]
"run.seed" = [1, 2, 3, 4]
"""


def _children(pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                stat = (d / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                out.append(int(d.name))
    return out


def _alive(pid: int) -> bool:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def _start(tmp_path):
    exp = tmp_path / "slow.toml"
    exp.write_text(SLOW)
    proc = subprocess.Popen([sys.executable, "-m", "sim", "run", str(exp), "--out", str(tmp_path / "run"),
                             "--workers", "2"], cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)
    deadline = time.time() + 120
    workers: list[int] = []
    while time.time() < deadline and len(workers) < 2:
        time.sleep(0.2)
        workers = [c for c in _children(proc.pid) if _alive(c)]
    assert len(workers) >= 2, "the run never started its workers"
    time.sleep(1.0)  # the workers are computing
    return proc, workers


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc to find the workers")
@pytest.mark.parametrize("how", [signal.SIGKILL, signal.SIGTERM])
def test_no_worker_survives_its_parent(tmp_path, how):
    proc, workers = _start(tmp_path)
    proc.send_signal(how)
    proc.wait(timeout=60)
    time.sleep(5)  # the promise: workers are gone within 5 seconds of their parent's death
    assert [w for w in workers if _alive(w)] == []
    if how == signal.SIGTERM:
        err = proc.stderr.read()
        assert proc.returncode == 143
        # the workers' one-line notice that kernels compile (when numba's cache is cold) is not about the signal
        lines = [ln for ln in err.strip().splitlines() if not ln.startswith("supergame: compiling the ")]
        assert len(lines) == 1 and lines[0].startswith("supergame run: terminated (SIGTERM); finished cells are stored")
        con = sqlite3.connect(tmp_path / "run" / "results.sqlite")
        outcomes = [o for (o,) in con.execute("SELECT outcome FROM attempts")]
        assert outcomes == ["interrupted"]
    else:
        assert proc.returncode == -signal.SIGKILL


WRITER = """
import sys
from sim.runner.store import CellRow, Store
s = Store.create(sys.argv[1], {"name": "x"})
for i in range(100000):
    s.record(CellRow(i, "ok", {"p": i}, {"p": str(i)}, 0, None, {"m": float(i)}, {"a": [float(i)] * 50}),
             {"doc": "x" * 2000})
    print(i, flush=True)
"""


@pytest.mark.parametrize("wait", [0.3, 0.7, 1.1])
def test_a_writer_killed_during_commits_loses_at_most_the_cell_being_committed(tmp_path, wait):
    db = tmp_path / "results.sqlite"
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(db)], cwd=ROOT, stdout=subprocess.PIPE, text=True)
    seen = -1
    deadline = time.time() + 60
    while seen < 5 and time.time() < deadline:  # it commits, one row after another
        seen = int(proc.stdout.readline())
    time.sleep(wait)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    last = seen
    for line in proc.stdout.read().split():
        last = int(line)  # every row whose commit returned (and was reported) before the kill
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    cells = [c for (c,) in con.execute("SELECT cell FROM cells ORDER BY cell")]
    docs = [c for (c,) in con.execute("SELECT cell FROM documents ORDER BY cell")]
    assert cells == list(range(len(cells))) and docs == cells  # no row without its document, no gap
    assert len(cells) - 1 >= last  # nothing reported committed is lost; at most the one under way is missing


@pytest.mark.slow
@pytest.mark.parametrize("how, status", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
@pytest.mark.parametrize("workers", ["1", "2"])
def test_a_learn_command_stops_in_the_middle_of_a_session(tmp_path, how, status, workers):
    """Learning sessions run in numba kernels that Python cannot interrupt: the command waits for them in another
    thread, so a signal stops it at once, whatever the sessions' length, and no thread keeps the process alive."""
    src = (ROOT / "experiments" / "qlearning-baseline.toml").read_text()
    exp = tmp_path / "long.toml"
    exp.write_text(src)
    # a shell that starts a job in the background sets it to ignore SIGINT, and Python then keeps ignoring it (as
    # programs should): the child gets the default disposition back, as in a terminal
    proc = subprocess.Popen([sys.executable, "-m", "sim", "learn", str(exp), "--sessions", "4", "--workers", workers,
                             "--max-periods", "1e12", "--convergence", "1e11"], cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    time.sleep(15.0)  # past start-up and compiling (cached by then in a test run): the sessions are learning
    assert proc.poll() is None, proc.communicate()
    proc.send_signal(how)
    try:
        _, err = proc.communicate(timeout=20)
    except subprocess.TimeoutExpired:
        proc.kill()
        raise AssertionError("the learn command did not stop within 20 s of the signal") from None
    assert proc.returncode == status, err
    assert len(err.strip().splitlines()) == 1 and ("terminated" in err or "interrupted" in err)
