"""The notice before numba kernels compile: shown on standard error, once, when the on-disk cache lacks the kernel
(an empty ``NUMBA_CACHE_DIR``), and not when the cache holds it; never on standard output.

Each check runs a fresh interpreter, so that nothing compiled by this test session is in memory; the Moran kernel is
used because it compiles in seconds.
"""

from __future__ import annotations

import io
import os
import pickle
import subprocess
import sys
from pathlib import Path

from sim.core.compiling import COMPILE_SECONDS, announce_compile, in_disk_cache, notice

ROOT = Path(__file__).resolve().parents[2]

#: a tiny Moran simulation (the kernel's first use), then whether the cache holds it, printed on stdout
SCRIPT = """
from sim.core.compiling import in_disk_cache
from sim.tournament.moran import moran_kernel, simulate_fixation
from sim.tournament.payoffs import PayoffTable

before = in_disk_cache(moran_kernel)
table = PayoffTable.from_matrix([[1.2, 1.2], [1.0, 1.0]], labels=["mutant", "resident"])
simulate_fixation(table, 5, selection=1.0, runs=20, seed=1)
print(before, in_disk_cache(moran_kernel))
"""


def _run(cache: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache), "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-c", SCRIPT], env=env, capture_output=True, text=True, timeout=600,
                          cwd=ROOT)


def test_notice_when_the_cache_is_empty_and_none_once_it_holds_the_kernel(tmp_path):
    first = _run(tmp_path)
    assert first.returncode == 0, first.stderr
    line = notice("Moran")
    # shown once, on standard error only, before the kernel compiled; afterwards the cache holds it
    assert first.stderr.count(line) == 1
    assert line not in first.stdout and first.stdout.split() == ["False", "True"]
    second = _run(tmp_path)
    assert second.returncode == 0, second.stderr
    assert line not in second.stderr and "compiling" not in second.stderr
    assert second.stdout.split() == ["True", "True"]


def test_a_stale_cache_counts_as_missing(tmp_path):
    """numba keys its index on the module's source stamp: an index written for another stamp is not used."""
    first = _run(tmp_path)
    assert first.returncode == 0, first.stderr
    for idx in tmp_path.rglob("*.nbi"):
        # the index as numba writes it: its version, then the source stamp and the entries; an older source's stamp
        with idx.open("rb") as f:
            version = pickle.load(f)
            _, overloads = pickle.loads(f.read())
        with idx.open("wb") as f:
            pickle.dump(version, f, protocol=-1)
            f.write(pickle.dumps(((0.0, 0), overloads), protocol=-1))
    again = _run(tmp_path)
    assert again.returncode == 0, again.stderr
    assert again.stderr.count(notice("Moran")) == 1


def test_the_notice_names_the_family_and_the_wait():
    for family, seconds in COMPILE_SECONDS.items():
        text = notice(family)
        assert f"compiling the {family} kernels on first use, about {seconds} s" in text and "\n" not in text


class _Unknown:
    """Not a numba dispatcher: whether it is cached cannot be told."""


def test_unknown_cache_state_shows_no_notice():
    out = io.StringIO()
    assert in_disk_cache(_Unknown()) is None
    assert not announce_compile("a family of this test", [_Unknown()], stream=out)
    assert out.getvalue() == ""
