"""Verification of a run folder: hashes, rows, exports rebuilt from the store, cells re-run."""

from __future__ import annotations

import hashlib
import io
import json
import math
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sim.core.errors import InputError
from sim.core.files import symlinks_in
from sim.core.provenance import package_versions
from sim.core.values import canonical_json
from sim.runner.exports import export_bytes
from sim.runner.folder import (
    CSV_FILE,
    EXPERIMENT_COPY,
    EXPORTS,
    MANIFEST,
    PARQUET_FILE,
    REPORT_DIR,
    RunFolder,
    load_manifest,
    output_files,
    sha256_file,
)
from sim.runner.inputs import input_problems
from sim.runner.kinds import CellContext, clean_metrics
from sim.runner.lock import FolderLock
from sim.runner.manifest import PROVENANCE_FIELDS, manifest_digest, provenance
from sim.runner.store import STORE_FILE

# --------------------------------------------------------------------------------------------------
# Verification
# --------------------------------------------------------------------------------------------------


@dataclass
class VerifyResult:
    """Outcome of :func:`verify_run`: ``ok`` and the individual checks (``(passed, text)`` pairs).

    Attributes
    ----------
    ok : bool
        Whether every check passed.
    checks : list of (bool, str)
        Each check: whether it passed and what it checked, in words.
    cells : list of dict
        One entry per re-run cell: ``cell`` (its number, counted from 1), ``metrics`` (how many were compared),
        ``mismatched`` (names of the metrics outside the tolerance), ``max_relative_difference``,
        ``identical`` (every metric equal, bit for bit), ``not_computed`` (stored metrics this version does not
        compute: a run of another version) and ``not_stored`` (metrics this version adds, not compared).
    """

    ok: bool
    checks: list
    cells: list

    def to_dict(self) -> dict:
        """The outcome as plain JSON data, each check as ``{"passed", "check"}``.

        Returns
        -------
        dict
            ``ok``, ``checks`` and ``cells``.
        """
        return {"ok": self.ok, "checks": [{"passed": p, "check": t} for p, t in self.checks], "cells": self.cells}


def _same(a: float, b: float, rtol: float, atol: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= atol + rtol * abs(b)


#: every finished cell is re-run when there are at most this many; otherwise a sample of this size by default
ALL_CELLS_UP_TO = 12


def store_digest(rows: list) -> str:
    """SHA-256 of everything the store holds about its cells (status, values, seeds, metrics, arrays).

    Parameters
    ----------
    rows : list of CellRow

    Returns
    -------
    str
        Hexadecimal digest.
    """
    h = hashlib.sha256()
    for r in sorted(rows, key=lambda r: r.cell):
        h.update(canonical_json([r.cell, r.status, r.params, r.seed, r.metrics, r.arrays]).encode("utf-8"))
        h.update(b"\n")
    return h.hexdigest()


def sample_cells(ok_cells: list[int], n: int, digest: str) -> list[int]:
    """``n`` of the finished cells, drawn without replacement by a generator seeded with ``digest`` (the store's
    :func:`store_digest`): which cells are re-run depends on every stored number, so an edit of the store cannot
    know in advance which cells will be checked.

    Parameters
    ----------
    ok_cells : list of int
        Finished cells (indices counted from 0).
    n : int
    digest : str
        Hexadecimal digest seeding the draw.

    Returns
    -------
    list of int
        Sorted.
    """
    if n <= 0 or not ok_cells:
        return []
    if n >= len(ok_cells):
        return list(ok_cells)
    rng = np.random.default_rng(int(digest[:32], 16))
    return sorted(int(ok_cells[k]) for k in rng.choice(len(ok_cells), size=n, replace=False))


def _same_parquet(path: Path, data: bytes) -> bool:
    """The same table in two Parquet files written by different pyarrow versions."""

    import pyarrow.parquet as pq

    try:
        return pq.read_table(str(path)).equals(pq.read_table(io.BytesIO(data)))
    except Exception:  # a file that is not Parquet at all
        return False


def _check_files(folder: Path, checks: list) -> dict | None:
    """Hashes of the files against the manifest; returns the manifest (None when it is missing or
    unreadable, which is a failed check)."""
    p = folder / MANIFEST
    if not p.is_file():
        checks.append((False, f"{MANIFEST} is missing: the run did not finish or the file was removed"))
        return None
    try:
        man = load_manifest(p)
    except ValueError as exc:
        checks.append((False, f"{MANIFEST} cannot be read ({exc})"))
        return None
    listed = man["files"]
    n_bad = 0
    for rel, digest in sorted(listed.items()):
        f = folder / rel
        if not f.is_file():
            checks.append((False, f"{rel}: listed in the manifest but missing"))
            n_bad += 1
        elif sha256_file(f) != digest:
            checks.append((False, f"{rel}: SHA-256 differs from the manifest (the file was altered)"))
            n_bad += 1
    checks.append((n_bad == 0, f"{len(listed) - n_bad} of {len(listed)} files match their SHA-256"))
    for rel in output_files(folder):
        if rel not in listed:
            checks.append((False, f"{rel}: in the folder but not in the manifest"))
    return man


def _check_rows(exp, rows: list, problems: list, checks: list) -> None:
    """Every row is the cell it claims to be: the swept values, labels and seed of that cell."""
    for msg in problems:
        checks.append((False, f"results.sqlite: {msg}"))
    bad = 0
    for r in rows:
        cell = exp.cell(r.cell)
        seed = exp.seed(cell.doc)
        if r.params != cell.values or r.labels != cell.labels or r.seed != seed:
            what = ("swept values" if r.params != cell.values else "labels" if r.labels != cell.labels else "seed")
            checks.append((False, f"results.sqlite: the row of {cell.describe()} holds other {what} than the "
                                  "experiment file gives that cell (the store was edited)"))
            bad += 1
    n = exp.n_cells
    missing = n - len(rows)
    if missing > 0:
        checks.append((False, f"{missing} of {n} cells have no result (finish the run with supergame run --resume)"))
    elif not problems and not bad:
        checks.append((True, f"the store has one row for each of the {n} cells, with the cell's swept values and "
                             "seed"))


def _check_exports(folder: Path, rf: RunFolder, man: dict | None, checks: list) -> None:
    """The exports are what the store gives, byte for byte (Parquet: the same table when another pyarrow
    version wrote it); the report's tables and record of the run's data agree with them."""
    fresh = export_bytes(rf)
    for rel in EXPORTS:
        data, p = fresh[rel], folder / rel
        if data is None:
            if p.exists():
                checks.append((True, f"{rel}: not rebuilt (pyarrow is not installed here); its SHA-256 was checked"))
            continue
        if not p.is_file():
            checks.append((False, f"{rel}: missing (every cell has a row; the file should hold them)"))
        elif p.read_bytes() == data:
            checks.append((True, f"{rel} is what the store gives, byte for byte"))
        elif rel == PARQUET_FILE and _same_parquet(p, data):
            was = ((man or {}).get("packages") or {}).get("pyarrow")
            checks.append((True, f"{rel} holds the table the store gives (written by pyarrow {was}, here "
                                 f"{package_versions().get('pyarrow')})"))
        else:
            checks.append((False, f"{rel} differs from what the store gives: the file or the store was altered"))
    rep = folder / REPORT_DIR
    if (rep / MANIFEST).is_file():
        try:
            rman = json.loads((rep / MANIFEST).read_text(encoding="utf-8"))
            run_data = rman.get("run_data") or {}
        except (ValueError, AttributeError) as exc:
            checks.append((False, f"{REPORT_DIR}/{MANIFEST} cannot be read ({exc})"))
            return
        stale = [rel[3:] for rel, digest in sorted(run_data.items())
                 if rel.startswith("../") and (not (folder / rel[3:]).is_file()
                                               or sha256_file(folder / rel[3:]) != digest)]
        if stale:
            checks.append((False, f"{REPORT_DIR}/ was written from other run data ({', '.join(stale)} changed since); "
                                  "write it again with supergame report"))
        tab = rep / "tables" / CSV_FILE
        if tab.is_file() and tab.read_bytes() != fresh[CSV_FILE]:
            checks.append((False, f"{REPORT_DIR}/tables/{CSV_FILE} differs from what the store gives"))
        elif not stale:
            checks.append((True, f"{REPORT_DIR}/ was written from these results"))


def _without_hint(message: str) -> str:
    """An error message without its pointer to supergame verify (verify is what is running)."""
    return message.split("; supergame verify ")[0]


def _check_manifest_itself(folder: Path, rf: RunFolder, man: dict | None, checks: list) -> None:
    """The manifest's digest of itself, and its record of the run against what the store says."""
    if man is None:
        return
    if man.get("manifest_sha256") != manifest_digest(man):
        checks.append((False, f"{MANIFEST} was edited after it was written (its own SHA-256 does not match its "
                              "content)"))
        return
    now = provenance(rf)
    differ = [k for k in PROVENANCE_FIELDS if man.get(k) != now.get(k)]
    if differ:
        checks.append((False, f"{MANIFEST} records other {', '.join(differ)} than the store holds (the store or the "
                              "manifest was edited)"))
    else:
        checks.append((True, f"{MANIFEST} is whole (its own SHA-256 matches) and records the store's attempts, "
                             "cells and seeds"))


def _check_inputs(recorded: dict | None, chosen: list, checks: list) -> list:
    """The files the run read besides its experiment file, against the SHA-256 recorded when it started
    (:mod:`sim.runner.inputs`); returns the cells still to re-run (none when a file is missing or changed)."""
    if not recorded:
        return chosen
    problems = input_problems(recorded)
    if problems and not chosen:
        # nothing is re-run: the folder's own files are what is checked, and they do not depend on these
        for key, words in problems:
            checks.append((True, f"note: {key}: {words} (no cell is re-run, so this check does not need it)"))
        return []
    for key, words in problems:
        checks.append((False, f"{key}: {words}"))
    if problems:
        checks.append((False, "no cell re-run: a file the run read is missing or changed"))
        return []
    checks.append((True, f"the {len(recorded)} file{'s' if len(recorded) > 1 else ''} the run read besides the "
                         f"experiment file ({', '.join(sorted(recorded))}) {'have' if len(recorded) > 1 else 'has'} "
                         "the SHA-256 recorded when it started"))
    return chosen


def _rerun(exp, by_cell: dict, chosen: list, rtol: float, atol: float, threads: int, checks: list) -> list:
    """Re-run cells and compare every metric with the stored one; return one record per cell."""
    kind = exp.kind_spec()
    report = []
    for c in chosen:
        cell = exp.cell(c)
        # in a scratch folder of its own: a cell that saves files (saved learners) writes them there, never over a
        # file of the current folder (another run's input, say); they are not kept
        with tempfile.TemporaryDirectory(prefix="supergame-verify-") as scratch:
            res = kind.run(kind.prepare(cell.doc), CellContext(index=c, threads=threads, folder=scratch))
        fresh = clean_metrics(res.metrics)
        stored = by_cell[c].metrics
        gone = sorted(set(stored) - set(fresh))
        if gone:
            # a column this version no longer computes (renamed or redefined since the run): not a wrong number
            checks.append((False, f"{cell.describe()}: {len(gone)} stored metric{'s' if len(gone) > 1 else ''} this "
                                  f"version does not compute ({', '.join(gone[:3])}{', ...' if len(gone) > 3 else ''})"
                                  ": the run was made by another version of the code (see the manifest's notes)"))
        added = sorted(set(fresh) - set(stored))
        names = sorted(set(stored) & set(fresh))
        bad = [k for k in names if not _same(fresh.get(k, math.nan), stored.get(k, math.nan), rtol, atol)]
        worst = 0.0
        for k in names:
            a, b = fresh.get(k, math.nan), stored.get(k, math.nan)
            if math.isfinite(a) and math.isfinite(b) and b != 0:
                worst = max(worst, abs(a - b) / abs(b))
        exact = all((fresh.get(k) == stored.get(k)) or (math.isnan(fresh.get(k, math.nan)) and
                                                         math.isnan(stored.get(k, math.nan))) for k in names)
        report.append({"cell": cell.number, "metrics": len(names), "mismatched": bad,
                       "max_relative_difference": worst, "identical": exact, "not_computed": gone,
                       "not_stored": added})
        if bad:
            k = bad[0]
            checks.append((False, f"{cell.describe()}: {len(bad)} of {len(names)} metrics do not reproduce, e.g. "
                                  f"{k} = {fresh.get(k)!r} now, {stored.get(k)!r} stored"))
        else:
            how = "identically" if exact else f"within a relative {worst:.1e}"
            extra = (f" ({len(added)} metric{'s' if len(added) > 1 else ''} this version adds, not stored, are not "
                     f"compared: {', '.join(added[:3])}{', ...' if len(added) > 3 else ''})" if added else "")
            checks.append((True, f"{cell.describe()}: all {len(names)} stored metrics reproduce {how}{extra}"))
    return report


def _chosen_cells(folder: Path, exp, by_cell: dict, rows: list, sample, cells, checks: list) -> list:
    ok_cells = sorted(c for c, r in by_cell.items() if r.status == "ok")
    if cells is not None:
        chosen = []
        for c in cells:
            i = int(c) - 1
            if i not in by_cell:
                raise InputError("cells", f"cell {c} has no result in {folder} (cells 1 to {exp.n_cells})")
            if by_cell[i].status != "ok":
                raise InputError("cells", f"cell {c} failed in the run; there is no number to confirm")
            chosen.append(i)
        return chosen
    n = (len(ok_cells) if len(ok_cells) <= ALL_CELLS_UP_TO else ALL_CELLS_UP_TO) if sample is None else int(sample)
    chosen = sample_cells(ok_cells, n, store_digest(rows))
    if chosen:
        how = ("every finished cell" if len(chosen) == len(ok_cells) else
               f"{len(chosen)} of the {len(ok_cells)} finished cells, drawn with the SHA-256 of the store's contents "
               "as seed")
        checks.append((True, f"re-running {how}"))
    return chosen


def verify_run(folder, sample: int | None = None, cells=None, rtol: float = 1e-9, atol: float = 1e-12,
               threads: int = 1) -> VerifyResult:
    """Check a run folder: every file's SHA-256 against the manifest; every stored row against the cell
    it claims to be; the exports (and the report's copy of the results table) against what the store
    gives, byte for byte; then re-run a sample of cells and compare every metric with the store
    (relative tolerance ``rtol``; nan must stay nan). A damaged folder (an unreadable store, manifest or
    experiment copy) is a failed check, not an error.

    Parameters
    ----------
    folder : path-like
    sample : int, optional
        Cells to re-run, drawn from the finished ones with the store's digest as seed (:func:`sample_cells`);
        default: every finished cell when there are at most :data:`ALL_CELLS_UP_TO`, else that many. 0: no re-run.
    cells : sequence of int, optional
        Re-run these cells (numbers counted from 1, as in the exports) instead of a sample.
    rtol, atol : float
        Relative and absolute tolerance of the comparison of a re-run metric with the stored one.
    threads : int
        Threads of a re-run cell (the numbers do not depend on it).

    Returns
    -------
    VerifyResult

    Raises
    ------
    InputError
        ``folder`` when the folder is not a run folder at all or another process is writing it; ``cells`` for a
        cell without a result.
    """

    folder = Path(folder)
    if not folder.is_dir() or not any((folder / f).exists() for f in (STORE_FILE, EXPERIMENT_COPY, MANIFEST)):
        raise InputError("folder", f"{folder} is not a run folder (no {STORE_FILE}, {EXPERIMENT_COPY} or "
                                    f"{MANIFEST}); give a folder made by supergame run")
    checks: list = []
    links = symlinks_in(folder)
    if links:
        checks.append((False, f"{links[0]} is a symbolic link: a run folder holds none, and nothing behind it is "
                              "read"))
        return VerifyResult(False, checks, [])
    with FolderLock(folder, key="folder", shared=True):
        return _verify(folder, checks, sample, cells, rtol, atol, threads)


def _verify(folder: Path, checks: list, sample, cells, rtol: float, atol: float, threads: int) -> VerifyResult:
    man = _check_files(folder, checks)
    try:
        rf = RunFolder(folder, check_copy=False)
    except InputError as exc:
        checks.append((False, _without_hint(exc.message)))
        return VerifyResult(False, checks, [])
    with rf:
        same_copy = rf.copy_sha256 == rf.meta["sha256"]
        checks.append((same_copy, f"{EXPERIMENT_COPY} has the SHA-256 recorded when the run started "
                                  f"({rf.meta['sha256'][:12]}...)" if same_copy else
                                  f"{EXPERIMENT_COPY} was changed after the run started (SHA-256 "
                                  f"{rf.copy_sha256[:12]}..., recorded {rf.meta['sha256'][:12]}...)"))
        problems: list = []
        try:
            rows = rf.rows(problems=problems)
        except InputError as exc:
            checks.append((False, _without_hint(exc.message)))
            return VerifyResult(False, checks, [])
        exp = rf.experiment
        if same_copy:
            _check_rows(exp, rows, problems, checks)
        else:
            for msg in problems:
                checks.append((False, f"results.sqlite: {msg}"))
        if same_copy and not problems:
            _check_manifest_itself(folder, rf, man, checks)
        if same_copy and not problems and len(rows) == exp.n_cells:
            _check_exports(folder, rf, man, checks)
        by_cell = {r.cell: r for r in rows}
        chosen = _chosen_cells(folder, exp, by_cell, rows, sample, cells, checks)
        if chosen and not same_copy:
            checks.append((False, "no cell re-run: the experiment file is not the one the run started with"))
            chosen = []
        if same_copy:
            chosen = _check_inputs(rf.meta.get("inputs"), chosen, checks)
        report = _rerun(exp, by_cell, chosen, rtol, atol, threads, checks)
    return VerifyResult(all(ok for ok, _ in checks), checks, report)
