"""The manifest of a run folder: the record of every file it holds, of the attempts that wrote it and of the
software that computed it."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

from sim.core.errors import InputError
from sim.core.files import clear_leftovers, partial_path, write_atomic
from sim.core.provenance import package_versions, platform_info
from sim.runner.folder import (
    EXPERIMENT_COPY,
    MANIFEST,
    RUN_FORMAT,
    SEED_RULE,
    RunFolder,
    iso_time,
    load_manifest,
    output_files,
    sha256_file,
)

# --------------------------------------------------------------------------------------------------
# Manifest
# --------------------------------------------------------------------------------------------------


#: seeds of at most this many cells are listed one by one in the manifest
_MANIFEST_CELL_SEEDS = 10_000


def _covered(rel: str, rewritten) -> bool:
    return any(rel == r or (r.endswith("/") and rel.startswith(r)) for r in rewritten)


def check_manifest(folder, rewritten=(), key: str = "folder") -> dict | None:
    """Check that the run folder still holds what its manifest records, except the files about to be
    written again (``rewritten``: relative paths, or folders ending in ``/``); return the manifest (None
    when there is none yet).

    Parameters
    ----------
    folder : str or path-like
        The run folder.
    rewritten : iterable of str
        Relative paths (a folder as ``name/``) that the caller is about to write again; not compared.
    key : str
        Key path of the error (the command's argument).

    Returns
    -------
    dict or None
        The manifest as :func:`load_manifest` reads it.

    Raises
    ------
    InputError
        Naming ``key``, for a manifest that cannot be read or a file listed there that was altered or
        removed, or one that was added since.
    """
    folder = Path(folder)
    p = folder / MANIFEST
    if not p.exists():
        return None
    try:
        man = load_manifest(p)
    except ValueError as exc:
        raise InputError(key, f"{p} cannot be read ({exc}): the folder's record of its files is damaged; "
                              f"supergame verify {folder} lists what is wrong") from None
    if man.get("manifest_sha256") != manifest_digest(man):
        raise InputError(key, f"{p} was edited after it was written (its own SHA-256 does not match its content); "
                              f"supergame verify {folder} lists what is wrong")
    listed = man["files"]
    now = set(output_files(folder))
    hint = f"the folder no longer holds what its manifest records (supergame verify {folder})"
    for rel, digest in sorted(listed.items()):
        if _covered(rel, rewritten):
            continue
        if rel not in now:
            raise InputError(key, f"{rel} is listed in {MANIFEST} but missing: {hint}; restore it")
        if sha256_file(folder / rel) != digest:
            raise InputError(key, f"{rel} was altered after {MANIFEST} was written (its SHA-256 differs): {hint}; "
                                  "restore the file")
    for rel in sorted(now - set(listed)):
        if not _covered(rel, rewritten):
            raise InputError(key, f"{rel} was added after {MANIFEST} was written: {hint}; remove it")
    return man


def clear_run_leftovers(folder) -> None:
    """Remove what an interrupted write left in a run folder: a half-written manifest, the hidden
    folders of a report being written or replaced (:func:`sim.core.files.clear_leftovers`).

    Parameters
    ----------
    folder : str or path-like
        The run folder.
    """
    folder = Path(folder)
    partial_path(folder / MANIFEST).unlink(missing_ok=True)
    for p in folder.glob(".*.partial-*"):
        if p.is_dir():
            clear_leftovers(folder / p.name[1:].split(".partial-")[0])
    for p in folder.glob(".*.replaced-*"):
        if p.is_dir():
            clear_leftovers(folder / p.name[1:].split(".replaced-")[0])


def _attempt_record(a: dict) -> dict:
    return {"started": iso_time(a["started"]), "finished": iso_time(a["finished"]), "outcome": a["outcome"],
            "command": a.get("command"), "backend": a.get("backend"), "cells_run": a.get("cells_run"),
            "host": a.get("host"), "packages": a.get("packages"), "code_sha256": a.get("code"),
            "plugins": a.get("plugins")}


def code_notes(attempts: list[dict]) -> list[str]:
    """Notes for the manifest and the report when the attempts that computed cells ran different code.

    Parameters
    ----------
    attempts : list of dict
        The store's attempts (each with ``code``, the SHA-256 of the package's code, and ``cells_run``).

    Returns
    -------
    list of str
        Empty when every attempt that computed cells ran the same code; otherwise one note naming how many
        attempts and versions there were.
    """
    ran = [a for a in attempts if a.get("code") and (a.get("cells_run") or 0) > 0]
    codes = sorted({a["code"] for a in ran})
    if len(codes) <= 1:
        return []
    return [f"the cells were computed by {len(ran)} attempts running {len(codes)} different versions of the "
            f"package's code (SHA-256 {', '.join(c[:12] + '...' for c in codes)}); supergame verify re-runs cells "
            "with the code installed now"]


#: the fields of a manifest that the store determines (verify rebuilds them and compares)
PROVENANCE_FIELDS = ("format", "experiment", "inputs", "caution", "started", "finished", "attempts", "command",
                     "plugins", "seeds", "cells", "notes")


def provenance(rf: RunFolder) -> dict:
    """The part of a run folder's manifest that its store determines.

    Parameters
    ----------
    rf : RunFolder

    Returns
    -------
    dict
        The fields of :data:`PROVENANCE_FIELDS` (``inputs`` only when the run read files besides the experiment
        file).
    """
    meta, attempts, rows = rf.meta, rf.attempts(), rf.rows()
    n_cells = int(meta["n_cells"])
    ok = sum(r.status == "ok" for r in rows)
    failed = [{"cell": r.number, "error": r.error} for r in rows if r.status == "failed"]
    seeds = {"experiment_seed": meta.get("seed"),
             "rule": SEED_RULE.format(key=meta.get("seed_key") or "seed")}
    if meta.get("seed_key") is None:
        seeds["rule"] = "deterministic kind: no random numbers"
    elif n_cells <= _MANIFEST_CELL_SEEDS:
        seeds["cells"] = [[r.number, r.seed] for r in rows]
    out = {
        "format": RUN_FORMAT,
        "experiment": {"file": EXPERIMENT_COPY, "sha256": meta["sha256"], "source": meta.get("source"),
                       "name": meta["name"], "kind": meta["kind"]},
        "caution": meta.get("caution"),
        "started": iso_time(min((a["started"] for a in attempts), default=None)),
        "finished": iso_time(max((a["finished"] for a in attempts if a["finished"] is not None), default=None)),
        "attempts": [_attempt_record(a) for a in attempts],
        "command": attempts[0].get("command") if attempts else None,
        "plugins": meta.get("plugins", []),
        "seeds": seeds,
        "cells": {"total": n_cells, "ok": ok, "failed": len(failed), "missing": n_cells - ok - len(failed),
                  "failed_cells": failed},
        "notes": code_notes(attempts),
    }
    if meta.get("inputs"):
        # the files the cells read besides the experiment file (sim.runner.inputs), after it
        out = {**{k: out[k] for k in ("format", "experiment")}, "inputs": meta["inputs"],
               **{k: v for k, v in out.items() if k not in ("format", "experiment")}}
    return out


def manifest_digest(man: dict) -> str:
    """SHA-256 of a manifest's canonical content, its own digest left out: any edit of any field changes it.

    Parameters
    ----------
    man : dict

    Returns
    -------
    str
        Hexadecimal digest.
    """
    body = {k: v for k, v in man.items() if k != "manifest_sha256"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def write_manifest(folder, rewritten=(), key: str = "folder") -> dict:
    """Write ``manifest.json`` from the store and the files now in the folder; return it.

    An earlier manifest is kept as the record of every file not in ``rewritten`` (the files the caller
    has just written again from the store: relative paths, or folders ending in ``/``); such a file
    that was altered, removed or added since refuses the write (:func:`check_manifest`). The manifest
    ends with the SHA-256 of its own canonical content (:func:`manifest_digest`).

    Parameters
    ----------
    folder : path-like
    rewritten : sequence of str
    key : str
        Key path named in errors.

    Returns
    -------
    dict
    """
    folder = Path(folder)
    check_manifest(folder, rewritten, key)
    with RunFolder(folder, key=key) as rf:
        man = provenance(rf)
    man["packages"] = package_versions()
    man["platform"] = platform_info()
    man["files"] = {rel: sha256_file(folder / rel) for rel in output_files(folder)}
    man["manifest_sha256"] = manifest_digest(man)
    write_atomic(folder / MANIFEST, json.dumps(man, indent=2, sort_keys=False) + "\n")
    return man
