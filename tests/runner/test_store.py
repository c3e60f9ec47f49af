"""The SQLite store and the exports: committed rows, no duplicates, deterministic files."""

from __future__ import annotations

import math
import sqlite3
import sys

import numpy as np
import pytest

from sim.runner.experiment import Parameter
from sim.runner.store import CellRow, DamagedStore, Store
from sim.runner.tabular import csv_text, export_table, frame, write_csv, write_parquet


def row(i, status="ok", x=None):
    m = {"b": 1.0 / (i + 1), "a": float(i), "nan": math.nan} if status == "ok" else {}
    return CellRow(i, status, {"run.delta": x if x is not None else 0.5 + 0.1 * i},
                   {"run.delta": repr(0.5 + 0.1 * i)}, 7, None if status == "ok" else "ValueError: no", m,
                   {"curve": [1.0, math.nan]} if status == "ok" else {}, 1.0, 2.0, 0.5, "host:1")


def test_rows_round_trip_in_cell_order_and_first_result_wins(tmp_path):
    st = Store.create(tmp_path / "r.sqlite", {"name": "t", "n_cells": 3})
    for i in (2, 0, 1):
        st.record(row(i))
    dup = row(1)
    dup.metrics = {"a": 99.0}
    st.record(dup)  # a second result for a stored cell is ignored
    rows = st.rows()
    assert [r.cell for r in rows] == [0, 1, 2]
    assert rows[1].metrics["a"] == 1.0 and math.isnan(rows[1].metrics["nan"])
    assert rows[0].arrays["curve"][0] == 1.0 and rows[0].arrays["curve"][1] is None
    assert st.meta()["name"] == "t" and st.done() == {0, 1, 2}
    st.close()


def test_write_ahead_log_and_each_row_committed_at_once(tmp_path):
    st = Store.create(tmp_path / "r.sqlite", {"n_cells": 2})
    assert st.con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    st.record(row(0))
    # another connection sees the row before the writer closes: it is committed
    other = sqlite3.connect(tmp_path / "r.sqlite")
    assert other.execute("SELECT COUNT(*) FROM cells").fetchone()[0] == 1
    other.close()
    st.finalize()
    assert st.con.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
    st.close()
    assert not (tmp_path / "r.sqlite-wal").exists()
    ro = Store(tmp_path / "r.sqlite", readonly=True)
    with pytest.raises(sqlite3.OperationalError):
        ro.con.execute("DELETE FROM cells")
    ro.close()


def test_failed_cells_kept_and_forgotten_on_request(tmp_path):
    st = Store.create(tmp_path / "r.sqlite", {"n_cells": 3})
    st.record(row(0))
    st.record(row(1, "failed"))
    assert st.count() == {"ok": 1, "failed": 1}
    assert [r.error for r in st.failed()] == ["ValueError: no"]
    assert st.forget_failed() == 1 and st.done() == {0}
    st.close()


def test_exports_are_deterministic_and_hold_no_timings(tmp_path):
    params = [Parameter("run.delta", (0.5, 0.6), ("0.5", "0.6"))]
    rows = [row(0), row(1, "failed")]
    h, b = export_table(rows, params, declared_metrics=("b",))
    assert h == ["cell", "status", "run.delta", "seed", "b", "a", "nan", "error"]
    text = csv_text(h, b)
    # cells are counted from 1 in the export (the store keeps the index counted from 0, the stream key)
    assert text.splitlines()[1] == "1,ok,0.5,7,1.0,0.0,,"
    assert text.splitlines()[2].endswith("ValueError: no")
    # timings differ, the export does not
    later = [row(0), row(1, "failed")]
    later[0].started, later[0].seconds, later[0].worker = 99.0, 9.9, "other:2"
    assert csv_text(*export_table(later, params, ("b",))) == text
    write_csv(tmp_path / "a.csv", h, b)
    assert (tmp_path / "a.csv").read_text() == text


def test_csv_writes_numpy_scalars_as_the_numbers_they_hold():
    # numpy 2 spells repr(np.float64(0.5)) as "np.float64(0.5)"; an export must hold the bare number
    text = csv_text(["a", "b", "c", "d"], [[np.float64(0.5), np.int64(3), np.bool_(True), np.float32(np.nan)]])
    assert text.splitlines()[1] == "0.5,3,true,"


def test_parquet_and_dataframe(tmp_path):
    pytest.importorskip("pyarrow", reason="pyarrow is in the dev extras")
    import pyarrow.parquet as pq

    params = [Parameter("run.delta", (0.5, 0.6), ("0.5", "0.6"))]
    h, b = export_table([row(0), row(1)], params)
    assert write_parquet(tmp_path / "a.parquet", h, b)
    write_parquet(tmp_path / "b.parquet", h, b)
    assert (tmp_path / "a.parquet").read_bytes() == (tmp_path / "b.parquet").read_bytes()
    t = pq.read_table(tmp_path / "a.parquet")
    assert t.column("a").to_pylist() == [0.0, 1.0] and t.column("cell").type == "int64"
    df = frame(h, b)
    assert list(df.columns) == h and df["a"].tolist() == [0.0, 1.0] and math.isnan(df["nan"][0])


def test_dataframe_without_pandas_says_how_to_get_it(monkeypatch):
    monkeypatch.setitem(sys.modules, "pandas", None)
    with pytest.raises(ImportError, match="supergame\\[tables\\]"):
        frame(["cell"], [[0]])


def test_parquet_skipped_without_pyarrow(monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    assert write_parquet(tmp_path / "x.parquet", ["cell"], [[0]]) is False
    assert not (tmp_path / "x.parquet").exists()


def test_a_row_that_cannot_be_read_back_is_named_not_a_crash(tmp_path):
    st = Store.create(tmp_path / "r.sqlite", {"n_cells": 3})
    for i in range(3):
        st.record(row(i))
    st.con.execute("UPDATE cells SET metrics = '{bad' WHERE cell = 1")
    st.con.execute("UPDATE cells SET params = '[1, 2]' WHERE cell = 2")
    with pytest.raises(DamagedStore, match="cell 2, metrics: not valid JSON"):
        st.rows()
    problems = []
    assert [r.cell for r in st.rows(problems=problems)] == [0]
    assert problems[0].startswith("the row of cell 2, metrics: not valid JSON (Expecting property name")
    assert problems[1] == "the row of cell 3, parameters: not a JSON object"
    st.con.execute("UPDATE meta SET value = 'nope' WHERE key = 'n_cells'")
    with pytest.raises(DamagedStore, match="setting 'n_cells'"):
        st.meta()
    st.close()
