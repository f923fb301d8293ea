"""Parquet files bounded in bytes, not only cells (issue 21, item 4).

The issue's file: a small Parquet file whose dictionary-encoded text column holds one 1 MiB
string repeated on every row. It passes the cell bound; read naively it expands to hundreds of
MiB of text. Now the text column is read as a dictionary (each distinct value once), left out
because no date, identifier or number is that long, and the report quotes a short prefix. The
byte budget refuses a file from its metadata before anything is read; every report and message
quotes example values cut to a short prefix.
"""

from __future__ import annotations

import io
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import lagwise
from lagwise.engine.data import reading
from lagwise.engine.data import table as table_module
from lagwise.engine.data.table import as_table

EXAMPLE_CHARS = getattr(table_module, "EXAMPLE_CHARS", 40)

BIG = "A" * (1 << 20)


def parquet_bytes(table: pa.Table, **kw) -> bytes:
    buf = io.BytesIO()
    pq.write_table(table, buf, **kw)
    return buf.getvalue()


def hostile(rows=290):
    rng = np.random.default_rng(0)
    return parquet_bytes(pa.table({"y": rng.normal(size=rows), "x": rng.normal(size=rows),
                                   "note": [BIG] * rows}), compression="zstd",
                         use_dictionary=True)


def test_the_issues_file_is_small_and_holds_a_mebibyte_string():
    raw = hostile()
    assert len(raw) < 10_000
    meta = pq.ParquetFile(io.BytesIO(raw)).metadata
    assert meta.num_rows * meta.num_columns < reading.MAX_CELLS


def test_the_issues_file_loads_its_numbers_in_bounded_memory(tmp_path):
    path = tmp_path / "hostile.parquet"
    path.write_bytes(hostile())
    script = f"""
import json, tracemalloc
import pyarrow as pa
import lagwise
tracemalloc.start()
t = lagwise.load_table({str(path)!r})
py_peak = tracemalloc.get_traced_memory()[1]
print(json.dumps({{"columns": list(t.frame.columns), "lines": t.report.lines(),
                  "python_peak": py_peak, "arrow_peak": pa.default_memory_pool().max_memory()}}))
"""
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    res = json.loads(out.stdout.strip().splitlines()[-1])
    assert res["columns"] == ["y", "x"]
    # about 290 MiB of text if expanded; bounded to a few times the one distinct value
    assert res["python_peak"] < 24 * 2**20, res["python_peak"]
    assert res["arrow_peak"] < 24 * 2**20, res["arrow_peak"]
    for line in res["lines"]:
        assert len(line) < 400, line[:100]
    assert any("1,048,576 characters" in line and "left out" in line for line in res["lines"])


def test_the_byte_budget_refuses_from_the_metadata(monkeypatch):
    rng = np.random.default_rng(1)
    raw = parquet_bytes(pa.table({"a": rng.normal(size=5000), "b": rng.normal(size=5000)}),
                        compression="zstd")
    assert len(lagwise.load_table(raw, name="ok.parquet").frame) == 5000
    monkeypatch.setattr(reading, "MAX_PARQUET_BYTES", 30_000, raising=False)
    read = []
    monkeypatch.setattr(pq.ParquetFile, "read", lambda *a, **k: read.append(1))
    with pytest.raises(lagwise.DataError, match=r"uncompressed in the columns to be read.*'a'"):
        lagwise.load_table(raw, name="big.parquet")
    assert not read                                     # refused before reading any column


def test_a_text_column_beyond_the_text_budget_is_not_read(monkeypatch):
    rng = np.random.default_rng(2)
    ids = [f"firm-{i:06d}" for i in range(4000)]
    raw = parquet_bytes(pa.table({"id": ids, "y": rng.normal(size=4000)}),
                        use_dictionary=False)
    assert "id" in lagwise.load_table(raw).labels.columns
    monkeypatch.setattr(reading, "MAX_TEXT_BYTES", 10_000, raising=False)
    table = lagwise.load_table(raw, name="ids.parquet")
    assert list(table.frame.columns) == ["y"] and "id" not in table.labels.columns
    assert any("'id'" in n and "not read" in n for n in table.report.notes)


def test_identifier_and_date_text_columns_are_still_read():
    rng = np.random.default_rng(3)
    months = pd.date_range("2001-01-31", periods=24, freq="ME").strftime("%Y-%m-%d")
    raw = parquet_bytes(pa.table({"month": list(months), "y": rng.normal(size=24),
                                  "rate": [f"{v:.3f}" for v in rng.normal(size=24)]}))
    table = lagwise.load_table(raw, name="m.parquet")
    assert table.report.date_column == "month"
    assert list(table.frame.columns) == ["y", "rate"]


def _short(text):
    return len(text) <= EXAMPLE_CHARS + 1


def test_every_report_quotes_a_short_prefix():
    long_text = "Z" * 5000
    csv = "y,x,label\n" + "".join(f"{i},{i * 2 % 7},{long_text}{i}\n" for i in range(30))
    table = lagwise.load_table(csv.encode(), name="long.csv")
    assert _short(table.report.non_numeric["label"])
    assert all(len(line) < 200 for line in table.report.lines())
    with pytest.raises(lagwise.DataError) as err:
        lagwise.fit_ols(table, "y", ["label"])
    assert len(str(err.value)) < 200
    frame = pd.DataFrame({"y": np.arange(30.0), "x": np.arange(30.0) % 4, "s": [long_text] * 30})
    report = as_table(frame).report
    assert _short(report.non_numeric["s"])
    with pytest.raises(lagwise.DataError) as err:
        lagwise.fit_ols(frame, "y", ["s"])
    assert len(str(err.value)) < 200
    panel = pd.DataFrame({"firm": ["a", "b"] * 15, "when": [long_text] * 30,
                          "y": np.arange(30.0), "x": np.arange(30.0) % 5})
    with pytest.raises(lagwise.DataError) as err:
        lagwise.fit_panel(panel, "y", ["x"], entity="firm", time="when")
    assert len(str(err.value)) < 300
