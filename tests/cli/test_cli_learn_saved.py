"""``supergame learn`` with saved learners and update rules: a run split in two halves equals the whole run, the
saved file is recorded in a run folder's manifest, and bad input gives one line naming the key and status 2."""

import json
import zipfile

import pytest

from sim.cli import main
from tests.conftest import learn_text

SMALL = learn_text("small", "m = 5\nbeta = 2e-4\nconvergence = 8000\nmax_periods = 24000", sessions=3)


@pytest.fixture
def small(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "small.toml").write_text(SMALL)
    return tmp_path / "small.toml"


def _run(capsys, *args):
    status = main(["learn", *args])
    return status, capsys.readouterr()


def test_a_run_split_in_two_halves_prints_the_json_of_the_whole_run(small, capsys):
    status, whole = _run(capsys, str(small), "--json")
    assert status == 0
    assert _run(capsys, str(small), "--json", "--max-periods", "12000", "--save-to", "half.npz")[0] == 0
    status, rest = _run(capsys, str(small), "--json", "--continue-from", "half.npz")
    assert status == 0
    # the same document, but for the record of where the continued sessions came from
    doc = json.loads(rest.out)
    cont = doc["settings"].pop("continued")
    assert doc == json.loads(whole.out)
    assert cont == {"saved_seed": json.loads(whole.out)["settings"]["seed"], "saved_cell": 0,
                    "periods_before": [12000, 12000], "changed": [],
                    "shock": {"saved": {"noise": "none", "sigma": 0.0}, "now": {"noise": "none", "sigma": 0.0}}}
    status, text = _run(capsys, str(small), "--continue-from", "half.npz", "--alpha", "0.3", "--seed", "5")
    assert status == 0
    assert "continued from saved learners, not new" in text.out and "seed (5)" in text.out
    assert "firm 1 alpha 0.15 -> 0.3; firm 2 alpha 0.15 -> 0.3" in text.out  # the default alpha, 0.15
    status, rest = _run(capsys, str(small), "--json", "--continue-from", "half.npz", "--update", "synchronous")
    assert status == 0 and json.loads(rest.out)["learners"][0]["update"] == "synchronous"


def _rewrite(src, dst, header_change=None, flip_q=False):
    with zipfile.ZipFile(src) as z, zipfile.ZipFile(dst, "w") as out:
        for name in z.namelist():
            data = z.read(name)
            if name == "header.json" and header_change:
                h = json.loads(data)
                h.update(header_change)
                data = json.dumps(h).encode()
            if name == "Q.npy" and flip_q:
                b = bytearray(data)
                b[-5] ^= 1
                data = bytes(b)
            out.writestr(name, data)


BAD = [
    (["--continue-from", "half.npz", "--cost", "1.1"], "--continue-from", "another market (market.cost"),
    (["--continue-from", "half.npz", "--m", "6"], "--continue-from", "grid differs"),
    (["--continue-from", "half.npz", "--sessions", "2"], "--continue-from", "3 saved sessions"),
    (["--continue-from", "version.npz"], "--continue-from", "format version 4"),
    (["--continue-from", "edited.npz"], "--continue-from", "the header (market, seats, run) does not match"),
    (["--continue-from", "damaged.npz"], "--continue-from", "do not match the SHA-256"),
    (["--continue-from", "cut.npz"], "--continue-from", "cannot be read"),
    (["--continue-from", "missing.npz"], "--continue-from", "no such file"),
    (["--update", "sideways"], "--update", "'asynchronous', 'synchronous', 'mixed'"),
    (["--update", "mixed"], "learning.counterfactual_share", "required"),
    (["--counterfactual-share", "0.5"], "--counterfactual-share", "only to update = 'mixed'"),
    (["--update", "mixed", "--counterfactual-share", "1"], "--counterfactual-share", "(0, 1)"),
    (["--save-to", "../out.npz"], "--save-to", "relative path"),
    (["--save-to", "out\x00.npz"], "--save-to", "NUL character"),
    (["--save-to", "x" * 300 + ".npz"], "--save-to", "too long"),
]


@pytest.mark.parametrize(("extra", "key", "text"), BAD, ids=[" ".join(b[0]) for b in BAD])
def test_bad_saved_learners_and_update_rules_give_one_line_and_status_2(small, capsys, extra, key, text):
    assert _run(capsys, str(small), "--max-periods", "3000", "--save-to", "half.npz")[0] == 0
    _rewrite("half.npz", "version.npz", {"version": 4})  # a version this program does not read
    _rewrite("half.npz", "edited.npz", {"seed": 8})  # the header edited, the arrays untouched
    _rewrite("half.npz", "damaged.npz", flip_q=True)
    (small.parent / "cut.npz").write_bytes((small.parent / "half.npz").read_bytes()[:200])
    status, cap = _run(capsys, str(small), *extra)
    assert status == 2
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(f"supergame learn: error: {key}")
    assert text in lines[0]


def test_in_a_run_folder_the_saved_learners_are_recorded_in_the_manifest(small, capsys):
    from sim.runner.folder import sha256_file

    doc = SMALL.replace("max_periods = 24000", 'max_periods = 24000\nsave_to = "learners.npz"')
    (small.parent / "save.toml").write_text(doc)
    assert main(["run", "save.toml", "--out", "run1", "--quiet"]) == 0
    saved = small.parent / "run1" / "learners-cell1.npz"
    manifest = json.loads((small.parent / "run1" / "manifest.json").read_text())
    assert manifest["files"]["learners-cell1.npz"] == sha256_file(saved)


@pytest.mark.parametrize(("target", "text"), [("folder.npz", "folder.npz is a folder, not a file"),
                                              ("plain/x.npz", "plain is a file, so plain/x.npz cannot be made")])
def test_a_file_that_cannot_be_saved_is_refused_before_any_work(small, capsys, target, text):
    (small.parent / "folder.npz").mkdir()
    (small.parent / "plain").write_text("not a folder")
    before = sorted(p.name for p in small.parent.iterdir())
    status, cap = _run(capsys, str(small), "--save-to", target)
    assert status == 2 and cap.out == ""
    assert cap.err.strip() == f"supergame learn: error: --save-to: {text}"
    assert sorted(p.name for p in small.parent.iterdir()) == before  # nothing written, no partial file


def test_the_learners_are_not_saved_over_a_file_the_run_reads(small, capsys):
    # the experiment file itself, and the saved learners it continues: saving there would replace an input whose
    # SHA-256 an earlier run's record holds; refused before any work, both files unchanged
    assert main(["learn", str(small), "--save-to", "first.npz"]) == 0
    capsys.readouterr()
    before = {p.name: p.read_bytes() for p in small.parent.iterdir()}
    status, cap = _run(capsys, str(small), "--save-to", "small.toml")
    assert status == 2 and cap.err.strip() == ("supergame learn: error: --save-to: small.toml is the experiment file, "
                                               "which this run reads; save the learners to another file")
    status, cap = _run(capsys, str(small), "--continue-from", "first.npz", "--save-to", "first.npz")
    assert status == 2 and cap.err.strip() == ("supergame learn: error: --save-to: first.npz is the file "
                                               "learning.continue_from names, which this run reads; save the learners "
                                               "to another file")
    assert {p.name: p.read_bytes() for p in small.parent.iterdir()} == before


def test_keeping_every_sessions_learners_is_sized_before_any_work(small, capsys, monkeypatch):
    # saving keeps each session's Q-values (2 learners x 10,000 states (100 x 100 price pairs, memory 1) x 100 prices
    # x 8 bytes = 16 MB a session, with greedy actions and statistics a little more): 1,000 sessions need about 16 GB;
    # with 0.1 GB available (80 % of it usable) the run is refused in one line naming run.sessions, and nothing is
    # written; the message gives the size, checked against that arithmetic below
    import sim.learning.tables as T

    monkeypatch.setattr(T, "available_memory", lambda: 100_000_000)
    doc = SMALL.replace("m = 5", "m = 100").replace("sessions = 3", "sessions = 1000")
    (small.parent / "many.toml").write_text(doc)
    before = sorted(p.name for p in small.parent.iterdir())
    status, cap = _run(capsys, "many.toml", "--save-to", "many.npz")
    assert status == 2 and cap.err.count("\n") == 1
    assert cap.err.startswith("supergame learn: error: run.sessions: 1000 sessions' learners kept to save them")
    need = float(cap.err.split(" need ")[1].split(" GB")[0])
    assert 16.0 <= need <= 16.5  # 16 GB of Q-values, 0.16 GB of greedy actions, bandit statistics and counters
    assert sorted(p.name for p in small.parent.iterdir()) == before
    # without saving nothing is kept beyond the sessions running at once: the same file passes the check
    assert main(["check", "many.toml"]) == 0


def test_a_continuation_says_whether_the_demand_shock_changed_since_the_save(small, capsys):
    # the saved file records the demand shock the learners learned under; the continuation's report compares it
    assert main(["learn", str(small), "--save-to", "first.npz"]) == 0
    capsys.readouterr()
    status, same = _run(capsys, str(small), "--continue-from", "first.npz")
    assert status == 0 and "; demand: no demand shock, as when they were saved" in same.out
    status, shocked = _run(capsys, str(small), "--continue-from", "first.npz", "--demand-sigma", "0.3")
    assert status == 0 and "; demand: no demand shock -> lognormal shock, sigma 0.3" in shocked.out
    assert "every learner's settings as when they were saved" in shocked.out
    # a file written before the shock was recorded: said so, not claimed unchanged
    from tests.learning.test_saved_contents import _read, _write

    header, arrays = _read(small.parent / "first.npz")
    header.pop("demand_shock")
    _write(small.parent / "old.npz", header, arrays)
    status, old = _run(capsys, str(small), "--continue-from", "old.npz")
    assert status == 0
    assert "the file does not record the demand shock of the run that saved them (now: no demand shock)" in old.out


def test_verify_re_runs_a_saving_cell_in_a_scratch_folder(small, capsys):
    # the re-run cell saves its learners where verify puts them, not over a file of the current folder (which may
    # be another run's input)
    doc = SMALL.replace("max_periods = 24000", 'max_periods = 24000\nsave_to = "learners.npz"')
    (small.parent / "save.toml").write_text(doc)
    assert main(["run", "save.toml", "--out", "run1", "--quiet"]) == 0
    (small.parent / "learners.npz").write_bytes(b"someone else's file")
    before = sorted(p.name for p in small.parent.iterdir())
    assert main(["verify", "run1", "--sample", "1"]) == 0
    assert "the run checks out" in capsys.readouterr().out
    assert (small.parent / "learners.npz").read_bytes() == b"someone else's file"
    assert sorted(p.name for p in small.parent.iterdir()) == before
