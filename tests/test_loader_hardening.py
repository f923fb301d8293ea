"""Awkward files are read correctly or refused with a message naming the row or column: never a
shifted column, a lost date index, unbounded work or memory, or an internal exception."""

import io
import resource
import time

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import lagwise
from lagwise import DataError
from lagwise.engine.data.reading import MAX_CELLS, MAX_COLUMNS, MAX_LINE_CHARS


def load(text, **kw):
    return lagwise.load_table(text.encode() if isinstance(text, str) else text, name="t.csv", **kw)


def parquet_bytes(frame, **kw) -> bytes:
    buf = io.BytesIO()
    frame.to_parquet(buf, **kw)
    return buf.getvalue()


# ----------------------------------------------------------------- rows and delimiters

def test_trailing_delimiter_on_every_row_is_read_correctly():
    t = load("y,x\n1,2,\n3,4,\n5,7,\n")
    np.testing.assert_allclose(t.frame["y"], [1, 3, 5])
    np.testing.assert_allclose(t.frame["x"], [2, 4, 7])
    assert any("ended with the delimiter" in n for n in t.report.notes)
    t = load("y;x;\n1;2;\n3;4;\n")                   # the header ends with it too
    assert list(t.frame.columns) == ["y", "x"]
    np.testing.assert_allclose(t.frame["x"], [2, 4])


@pytest.mark.parametrize("text,row", [("y,x\n1,2\n3,4,5\n", 3),
                                      ("y,x\n1,2,7\n3,4,5\n", 2),
                                      ("# a comment\ny,x\n1,2\n1,2\n3,4,5,6\n", 5)])
def test_rows_longer_than_the_header_are_refused_with_their_row(text, row):
    with pytest.raises(DataError, match=f"row {row} has \\d+ fields but the header names 2"):
        load(text)


def test_short_rows_are_missing_values_not_shifted():
    t = load("y,x,z\n1,2,3\n4,5\n7,8,9\n")
    assert np.isnan(t.frame["z"].iloc[1]) and t.frame["x"].iloc[1] == 5


@pytest.mark.parametrize("length", [80_000, 1_000_000])
def test_very_long_rows_are_refused_before_parsing(length):
    fields = ",".join("1" for _ in range(length // 2))
    text = "y,x\n1,2\n" + fields + "\n3,4\n"
    t0 = time.perf_counter()
    if length > MAX_LINE_CHARS:
        with pytest.raises(DataError, match="row 3 is [0-9,]+ characters long"):
            load(text)
    else:
        with pytest.raises(DataError, match="row 3 has"):
            load(text)
    assert time.perf_counter() - t0 < 3.0


def test_too_many_columns_are_refused():
    header = ",".join(f"c{i}" for i in range(MAX_COLUMNS + 1))
    with pytest.raises(DataError, match=f"{MAX_COLUMNS + 1} columns; the limit is {MAX_COLUMNS}"):
        load(header + "\n" + ",".join("1" for _ in range(MAX_COLUMNS + 1)) + "\n")


def test_messages_show_plain_values():
    t = load("y,x\n1,2\n-3,4\n5,6\n")
    with pytest.raises(DataError) as info:
        t.with_transform("log", "y")
    assert "row 1 has -3" in str(info.value) and "np." not in str(info.value)
    df = pd.DataFrame({"y": [1.0, 2.0, 1.5, 3.0, 2.5, 9.0], "x": [1.0, 2, 3, 4, 5, 6],
                       "d": [0, 0, 0, 0, 0, 1.0]})
    fit = lagwise.fit_ols(df, "y", ["x", "d"])
    with pytest.raises(lagwise.EstimationError) as info:
        fit.infer("hc3")
    assert "rows 5" in str(info.value) and "np." not in str(info.value)
    with pytest.raises(DataError) as info:
        lagwise.fit_ols(pd.DataFrame({"y": [1.0, 2.0], "x": [np.int64(3), "a"]}), "y", ["x"])
    assert "np." not in str(info.value)


# ----------------------------------------------------------------- Parquet

def test_parquet_date_index_is_the_time_index_and_sorted():
    idx = pd.date_range("2001-01-31", periods=6, freq="ME")
    frame = pd.DataFrame({"y": np.arange(6.0), "x": np.arange(6.0) ** 2}, index=idx)
    frame.index.name = "month"
    shuffled = frame.iloc[[3, 0, 5, 1, 4, 2]]
    t = lagwise.load_table(parquet_bytes(shuffled), name="p.parquet")
    assert isinstance(t.frame.index, pd.DatetimeIndex) and t.frame.index.is_monotonic_increasing
    assert t.report.date_column == "month" and t.report.sorted_by_date
    np.testing.assert_allclose(t.frame["x"], np.arange(6.0) ** 2)
    assert any("date index ('month')" in n for n in t.report.notes)
    unnamed = frame.rename_axis(None)
    assert lagwise.load_table(parquet_bytes(unnamed)).report.date_column == "date"


def test_parquet_awkward_schemas_give_typed_errors_or_reasons():
    empty = pd.DataFrame({"y": pd.Series([], dtype=float)})
    with pytest.raises(DataError, match="no rows"):
        lagwise.load_table(parquet_bytes(empty), name="e.parquet")
    binary = pa.table({"y": [1.0, 2.0, 3.0], "blob": pa.array([b"a", b"bb", b"c"])})
    buf = io.BytesIO()
    pq.write_table(binary, buf)
    t = lagwise.load_table(buf.getvalue(), name="b.parquet")
    assert t.report.non_numeric == {"blob": "binary data"} and list(t.frame.columns) == ["y"]
    multi = pd.DataFrame(np.arange(6.0).reshape(3, 2),
                         columns=pd.MultiIndex.from_tuples([("a", "x"), ("a", "y")]))
    t = lagwise.load_table(parquet_bytes(multi), name="m.parquet")
    assert list(t.frame.columns) == ["a / x", "a / y"]
    dup = pa.Table.from_arrays([pa.array([1.0, 2.0]), pa.array([3.0, 4.0])], names=["x", "x"])
    buf = io.BytesIO()
    pq.write_table(dup, buf)
    with pytest.raises(DataError, match="repeated column names \\('x'\\)"):
        lagwise.load_table(buf.getvalue(), name="d.parquet")
    with pytest.raises(DataError, match="could not be read as Parquet"):
        lagwise.load_table(b"PAR1" + b"\x00" * 50, name="bad.parquet")


def test_parquet_that_decompresses_to_gigabytes_is_refused_from_its_metadata():
    """A few hundred KB of zstd-compressed zeros holding more cells than the limit: refused
    from the file's metadata, before any column is decompressed (memory stays flat)."""
    rows_per_group, groups, cols = 1_000_000, 6, 10
    chunk = pa.table({f"c{i}": pa.array(np.zeros(rows_per_group)) for i in range(cols)})
    buf = io.BytesIO()
    with pq.ParquetWriter(buf, chunk.schema, compression="zstd") as writer:
        for _ in range(groups):
            writer.write_table(chunk)
    raw = buf.getvalue()
    assert len(raw) < 2_000_000 and rows_per_group * groups * cols > MAX_CELLS
    del chunk
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    with pytest.raises(DataError, match="the limit is [0-9,]+ cells"):
        lagwise.load_table(raw, name="bomb.parquet")
    grown_mib = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before) / 1024
    assert grown_mib < 100


def test_cell_limit_applies_to_csv_too():
    with pytest.raises(DataError, match="cells"):
        load("y,x\n" + "1,2\n" * 600, max_cells=1000)


# ----------------------------------------------------------------- dates and panels

def test_gaps_in_a_monthly_index_are_reported():
    months = pd.date_range("2001-01-31", periods=24, freq="ME").delete([5, 6, 15])
    text = "month,y\n" + "\n".join(f"{d.date()},{i}" for i, d in enumerate(months)) + "\n"
    t = load(text)
    assert t.report.spacing == "monthly with gaps"
    note = [n for n in t.report.notes if "gap" in n][0]
    assert "2 gap(s)" in note and "3 missing period(s)" in note and "2001-05-31" in note
    regular = load("month,y\n" + "\n".join(f"{d.date()},{i}" for i, d in
                                         enumerate(pd.date_range("2001-01-31", periods=12,
                                                                 freq="ME"))) + "\n")
    assert regular.report.spacing.startswith("regular")
    odd = load("day,y\n2001-01-01,1\n2001-01-02,2\n2001-03-09,3\n2001-03-10,4\n2002-07-01,5\n")
    assert odd.report.spacing == "irregular"
    days = pd.bdate_range("2020-01-01", periods=40).delete([7, 20])     # two holidays
    bd = load("day,y\n" + "\n".join(f"{d.date()},{i}" for i, d in enumerate(days)) + "\n")
    assert bd.report.spacing == "business-daily with gaps"
    assert "2 missing period(s)" in [n for n in bd.report.notes if "gap" in n][0]


def test_a_stacked_panel_is_recognised():
    rows = [f"{firm},{d.date()},{i * 0.1 + j}" for i, d in
            enumerate(pd.date_range("2010-01-31", periods=5, freq="ME"))
            for j, firm in enumerate(["aa", "bb", "cc"])]
    t = load("firm,month,ret\n" + "\n".join(rows) + "\n")
    assert t.report.panel == ("firm", "month")
    assert t.report.date_column is None
    assert any("stacked panel" in n and "3 entities" in n and "5 periods" in n
               for n in t.report.notes)
    assert list(t.labels.columns) == ["firm", "month"] and len(t.labels) == 15
