"""The results table of a run, read from its store: columns in a fixed order, and its CSV, Parquet and pandas forms.

The table (:func:`export_table`) reads the rows in cell order and contains no timings or timestamps, so the files
of an interrupted-and-resumed run are byte-identical to those of an uninterrupted one. Text cells are written so
that a spreadsheet shows them as text (:func:`safe_text`).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from sim.runner.store import CellRow

__all__ = ["csv_text", "export_table", "frame", "parquet_bytes", "parquet_table", "safe_text", "write_csv",
           "write_parquet"]

def _metric_order(rows: list[CellRow], declared=()) -> list[str]:
    seen = list(declared)
    have = set(seen)
    extra = set()
    for r in rows:
        for k in r.metrics:
            if k not in have:
                extra.add(k)
    return seen + sorted(extra)


def export_table(rows: list[CellRow], parameters: list, declared_metrics=()) -> tuple[list[str], list[list]]:
    """Columns and rows of the results table: cell (counted from 1), status, the swept parameters, seed, the
    metrics (the kind's order, then any others sorted), error. Numeric parameters stay numbers; others are
    labels.

    Parameters
    ----------
    rows : list of CellRow
        The stored cells, in cell order.
    parameters : list of Parameter
        The experiment's swept parameters.
    declared_metrics : sequence of str
        The metrics the kind declares, in its order; those no row has are left out (all kept without rows).

    Returns
    -------
    header : list of str
        The column names.
    body : list of list
        One list of values per row, in the order of ``header`` (nan for a missing metric, ``""`` for no error).
    """
    numeric = {p.path: p.numeric for p in parameters}
    paths = [p.path for p in parameters]
    metrics = _metric_order(rows, declared_metrics)
    used = {k for r in rows for k in r.metrics}
    metrics = [m for m in metrics if m in used or not rows]
    header = ["cell", "status", *paths, "seed", *metrics, "error"]
    body = []
    for r in rows:
        vals = [r.params[p] if numeric[p] else r.labels[p] for p in paths]
        body.append([r.number, r.status, *vals, r.seed, *[r.metrics.get(m, math.nan) for m in metrics], r.error or ""])
    return header, body


#: first characters that make a spreadsheet read a text cell as a formula (OWASP, "CSV Injection")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def safe_text(text: str) -> str:
    """A text cell that a spreadsheet shows as text: one that starts like a formula gets a leading apostrophe,
    as the OWASP guidance on CSV injection recommends (numbers are written as numbers and never changed).

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    return "'" + text if text.startswith(_FORMULA_START) else text


def _csv_value(v) -> str:
    # numpy scalars are written as the Python numbers they hold: repr(np.float64(x)) names the type.
    if v is None:
        return ""
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, (float, np.floating)):
        return "" if math.isnan(v) else repr(float(v))
    if isinstance(v, np.integer):
        return str(int(v))
    if isinstance(v, int | float):
        return str(v)
    return safe_text(str(v))


def csv_text(header: list[str], body: list[list]) -> str:
    """The results table as CSV text: nan and None as empty cells, floats as their shortest repr, booleans as
    true/false, and text that a spreadsheet would read as a formula guarded (:func:`safe_text`).

    Parameters
    ----------
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column (as :func:`export_table` gives them).

    Returns
    -------
    str
        The CSV text, lines ending in ``\\n``.
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for row in body:
        w.writerow([_csv_value(v) for v in row])
    return buf.getvalue()


def write_csv(path, header: list[str], body: list[list]) -> None:
    """Write the results table as a UTF-8 CSV file (:func:`csv_text`).

    Parameters
    ----------
    path : str or path-like
        The file to write.
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column.
    """
    Path(path).write_text(csv_text(header, body), encoding="utf-8")


def _column_type(values: list) -> str:
    vals = [v for v in values if v is not None and not (isinstance(v, float) and math.isnan(v))]
    if vals and all(isinstance(v, int) and not isinstance(v, bool) for v in vals):
        return "int"
    if all(isinstance(v, int | float) and not isinstance(v, bool) for v in vals):
        return "float"
    return "str"


def write_parquet(path, header: list[str], body: list[list]) -> bool:
    """Write a Parquet file when pyarrow is installed (returns False otherwise). The file depends only on
    the data and the pyarrow version.

    Parameters
    ----------
    path : str or path-like
        The file to write.
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column.

    Returns
    -------
    bool
        Whether the file was written.
    """
    data = parquet_bytes(header, body)
    if data is None:
        return False
    Path(path).write_bytes(data)
    return True


def parquet_table(header: list[str], body: list[list]):
    """The results table as a pyarrow Table (None without pyarrow).

    A column of integers becomes int64, of numbers float64, anything else (and always ``status`` and ``error``)
    strings; None is a missing value.

    Parameters
    ----------
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column (as :func:`export_table` gives them).

    Returns
    -------
    pyarrow.Table or None
    """
    try:
        import pyarrow as pa
    except ImportError:
        return None
    cols = {}
    for j, name in enumerate(header):
        vals = [row[j] for row in body]
        t = _column_type(vals) if name not in ("status", "error") else "str"
        if t == "int":
            cols[name] = pa.array([None if v is None else int(v) for v in vals], type=pa.int64())
        elif t == "float":
            cols[name] = pa.array([None if v is None else float(v) for v in vals], type=pa.float64())
        else:
            cols[name] = pa.array([None if v is None else str(v) for v in vals], type=pa.string())
    return pa.table(cols)


def parquet_bytes(header: list[str], body: list[list]) -> bytes | None:
    """The bytes of the Parquet export (None without pyarrow): they depend only on the data and the
    pyarrow version.

    Parameters
    ----------
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column (as :func:`export_table` gives them).

    Returns
    -------
    bytes or None
        A zstd-compressed Parquet file of :func:`parquet_table`, written without statistics.
    """
    table = parquet_table(header, body)
    if table is None:
        return None
    import pyarrow as pa
    import pyarrow.parquet as pq

    buf = pa.BufferOutputStream()
    pq.write_table(table, buf, compression="zstd", write_statistics=False)
    return buf.getvalue().to_pybytes()


def frame(header: list[str], body: list[list]):
    """A pandas DataFrame of the results table (pandas is optional: ``pip install 'supergame[tables]'``).

    Columns get the types of :func:`parquet_table`: nullable Int64 for integers, float64 (nan for missing) for
    numbers, objects for text.

    Parameters
    ----------
    header : list of str
        The column names.
    body : list of list
        The rows, one value per column (as :func:`export_table` gives them).

    Returns
    -------
    pandas.DataFrame

    Raises
    ------
    ImportError
        When pandas is not installed, with the command that installs it.
    """
    try:
        import pandas as pd
    except ImportError:
        raise ImportError("the DataFrame export needs pandas, which is not installed; install it with "
                          "pip install 'supergame[tables]' (or read results.csv)") from None
    data = {}
    for j, name in enumerate(header):
        vals = [row[j] for row in body]
        t = _column_type(vals) if name not in ("status", "error") else "str"
        if t == "int":
            data[name] = pd.array([None if v is None else int(v) for v in vals], dtype="Int64")
        elif t == "float":
            data[name] = pd.array([math.nan if v is None else float(v) for v in vals], dtype="float64")
        else:
            data[name] = [None if v is None else str(v) for v in vals]
    return pd.DataFrame(data, columns=header)
