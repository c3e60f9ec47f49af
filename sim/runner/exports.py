"""The exports of a run folder (results table as CSV and Parquet, small arrays as JSON), written from the store."""

from __future__ import annotations

from pathlib import Path

from sim.core.values import canonical_json
from sim.runner.folder import (
    ARRAYS_FILE,
    CSV_FILE,
    EXPORTS,
    PARQUET_FILE,
    RunFolder,
)
from sim.runner.tabular import csv_text, parquet_bytes


def export_bytes(rf: RunFolder) -> dict:
    """The exports of a finished run as the store gives them: file name -> bytes (``None`` for the
    Parquet file without pyarrow).

    Parameters
    ----------
    rf : RunFolder
        The run folder, open for reading.

    Returns
    -------
    dict of str to bytes or None
        The results table as CSV and as Parquet, and the arrays of the cells that have any as JSON
        (``{"cells": [{"cell": number, "arrays": ...}, ...]}``), keyed by file name.
    """
    header, body = rf.table()
    arrays = [{"cell": r.number, "arrays": r.arrays} for r in rf.rows() if r.arrays]
    return {CSV_FILE: csv_text(header, body).encode("utf-8"), PARQUET_FILE: parquet_bytes(header, body),
            ARRAYS_FILE: (canonical_json({"cells": arrays}) + "\n").encode("utf-8")}


def write_exports(folder) -> list[str]:
    """Write ``results.csv``, ``results.parquet`` (with pyarrow) and ``arrays.json`` from the store.

    Parameters
    ----------
    folder : str or path-like
        The run folder.

    Returns
    -------
    list of str
        The files written, relative to ``folder`` (without the Parquet file when pyarrow is missing).
    """
    folder = Path(folder)
    with RunFolder(folder, check_copy=False) as rf:
        data = export_bytes(rf)
    files = []
    for rel in EXPORTS:
        if data[rel] is not None:
            (folder / rel).write_bytes(data[rel])
            files.append(rel)
    return files
