"""Saved learners whose hashes match but whose contents cannot be a saved run are refused in one line naming the key
(exit status 2, nothing written), by ``learn`` and ``run``, with or without an event: the file's SHA-256 values catch
damage, not a file written by other means, so the contents are checked too before any of them indexes an array.

The crafted files are written here with the project's own hashing (:func:`sim.learning.saved.arrays_digest`,
:func:`sim.learning.saved.header_digest`), as anyone could; each variant breaks one thing a kernel would read."""

import copy
import io
import json
import zipfile

import numpy as np
import pytest

from sim.cli import main
from sim.learning.saved import _ARRAYS, arrays_digest, header_digest
from tests.conftest import learn_text

STEP1 = learn_text("step1", 'm = 4\nbeta = 2e-3\nconvergence = 200\nmax_periods = 3000\nsave_to = "saved.npz"',
                   sessions=3, impulse=2)
GO_ON = learn_text("go-on", 'm = 4\nbeta = 2e-3\nconvergence = 200\nmax_periods = 3000\ncontinue_from = "c.npz"',
                   sessions=3, impulse=2)
SHOCK = (learn_text("shock", 'beta = 2e-3\nconvergence = 200\nmax_periods = 3000\ncontinue_from = "c.npz"',
                    sessions=3, impulse=2).replace("cost = 1.0", "cost = 1.1")
         + '\n[event]\nkind = "market"\nperiods = 50\n')


def _read(path):
    with zipfile.ZipFile(path) as zf:
        header = json.loads(zf.read("header.json"))
        arrays = {n: np.lib.format.read_array(io.BytesIO(zf.read(f"{n}.npy"))) for n in _ARRAYS}
    return header, arrays


def _write(path, header, arrays):
    header["arrays_sha256"] = arrays_digest(arrays)
    header["arrays"] = {k: {"dtype": a.dtype.str, "shape": list(a.shape)} for k, a in arrays.items()}
    header.pop("header_sha256", None)
    header["header_sha256"] = header_digest(header)
    with zipfile.ZipFile(path, "w") as zf:
        zf.writestr("header.json", json.dumps(header))
        for n, a in arrays.items():
            b = io.BytesIO()
            np.lib.format.write_array(b, a)
            zf.writestr(f"{n}.npy", b.getvalue())


def _set(name, value):
    return lambda h, a: a.__setitem__(name, value(a[name]))


VARIANTS = {
    "history far out of range": _set("history", lambda x: np.full_like(x, 10**9)),
    "negative history": _set("history", lambda x: np.full_like(x, -7)),
    "generator of three words": _set("rng", lambda x: x[:, :3].copy()),
    "clock of one column": _set("clock", lambda x: x[:, :1].copy()),
    "negative clock": _set("clock", lambda x: np.full_like(x, -5)),
    "Q not finite": _set("Q", lambda x: np.full_like(x, np.nan)),
    "counts of another shape": _set("counts", lambda x: np.zeros((3, 2, 2), dtype=np.int64)),
    "unknown status": _set("status", lambda x: np.full_like(x, 99)),
    "triggers of another shape": _set("triggers", lambda x: np.zeros((3, 2, 1), dtype=np.int64)),
    "greedy action out of range": _set("greedy", lambda x: np.full_like(x, 50)),
    "all-zero generator": _set("rng", lambda x: np.zeros_like(x)),
    "market not a table": lambda h, a: h.__setitem__("market", [1, 2]),
    "seats not a list": lambda h, a: h.__setitem__("seats", "abc"),
    "grid not numbers": lambda h, a: h["seats"][0].__setitem__("grid", "abc"),
    "demand shock not a record": lambda h, a: h.__setitem__("demand_shock", [0.3]),
    "a learner without its grid": lambda h, a: h["seats"][0].pop("grid"),
    "a seat more in the header": lambda h, a: h["seats"].append(dict(h["seats"][0])),
    "a grid shorter than the greedy actions": lambda h, a: h["seats"][1].__setitem__("grid", h["seats"][1]["grid"][:2]),
    "an extra automaton state column": _set("z", lambda x: np.zeros((x.shape[0], x.shape[1] + 1), dtype=np.int64)),
}


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    folder = tmp_path_factory.mktemp("saved")
    (folder / "step1.toml").write_text(STEP1)
    import os

    here = os.getcwd()
    os.chdir(folder)
    try:
        assert main(["learn", "step1.toml"]) == 0
    finally:
        os.chdir(here)
    return _read(folder / "saved.npz")


@pytest.mark.parametrize("variant", sorted(VARIANTS))
@pytest.mark.parametrize("text", [GO_ON, SHOCK], ids=["continued", "after an event"])
def test_a_crafted_file_with_matching_hashes_is_refused_in_one_line(variant, text, saved, tmp_path, monkeypatch,
                                                                    capsys):
    header, arrays = copy.deepcopy(saved[0]), {k: v.copy() for k, v in saved[1].items()}
    VARIANTS[variant](header, arrays)
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "c.npz", header, arrays)
    (tmp_path / "e.toml").write_text(text)
    capsys.readouterr()
    assert main(["learn", "e.toml", "--workers", "1"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("supergame learn: error: learning.continue_from: "), err
    assert main(["run", "e.toml", "--out", "out", "--quiet"]) == 2
    assert "learning.continue_from" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.npz", "e.toml"]


def test_the_untouched_file_rewritten_the_same_way_is_accepted(saved, tmp_path, monkeypatch, capsys):
    # the control: the writer above changes nothing by itself
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "c.npz", copy.deepcopy(saved[0]), {k: v.copy() for k, v in saved[1].items()})
    (tmp_path / "e.toml").write_text(SHOCK)
    assert main(["learn", "e.toml", "--workers", "1"]) == 0


def test_a_folder_named_as_the_saved_learners_is_named_as_a_folder(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "c.npz").mkdir()
    for text in (GO_ON, SHOCK):
        (tmp_path / "e.toml").write_text(text)
        capsys.readouterr()
        assert main(["learn", "e.toml"]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "learning.continue_from: c.npz is a folder, not a file of saved learners" in err
