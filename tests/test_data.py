"""Loader, transforms and every bad-input path: typed error, message names the culprit."""

import io

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise import DataError, SpecificationError


def load(text, **kw):
    return lagwise.load_table(text.encode(), name="t.csv", **kw)


def test_semicolon_and_decimal_comma():
    t = load("date;y;x\n2020-01-31;1,5;2,25\n2020-02-29;-0,5;3,0\n2020-03-31;2,0;1,75\n")
    assert t.report.delimiter == ";" and t.report.decimal == ","
    np.testing.assert_allclose(t.frame["y"], [1.5, -0.5, 2.0])
    assert t.report.date_column == "date"
    assert isinstance(t.frame.index, pd.DatetimeIndex)


def test_thousands_separators():
    t = load('y,x\n"1,234.5",1\n"2,000",2\n15,3\n')
    np.testing.assert_allclose(t.frame["y"], [1234.5, 2000.0, 15.0])
    assert "thousands" in t.report.converted["y"]


def test_decimal_comma_with_dot_thousands():
    t = load("y;x\n1.234,5;1\n2,5;2\n")
    np.testing.assert_allclose(t.frame["y"], [1234.5, 2.5])


def test_tab_delimiter_missing_and_text_columns():
    t = load("y\tx\tname\n1\t2\ta\n2\tNA\tb\n3\t4\tc\n")
    assert t.report.delimiter == "\t"
    assert t.report.non_numeric == {"name": "a"}
    assert t.report.missing == {"x": 1}
    assert any("left out" in line for line in t.report.lines())


def test_unsorted_dates_are_sorted_and_reported():
    t = load("when,y\n2020-03-01,3\n2020-01-01,1\n2020-02-01,2\n")
    assert t.report.sorted_by_date
    np.testing.assert_allclose(t.frame["y"], [1, 2, 3])


def test_empty_rows_dropped_and_reported():
    t = load("y,x\n1,2\n,\n3,4\n")
    assert t.report.empty_rows_dropped == 1 and len(t.frame) == 2


def test_parquet_roundtrip(tmp_path):
    df = pd.DataFrame({"y": [1.0, 2.0, 4.0], "x": [1, 2, 3], "tag": ["a", "b", "c"]})
    path = tmp_path / "d.parquet"
    df.to_parquet(path)
    t = lagwise.load_table(path)
    assert t.report.file_format == "parquet"
    np.testing.assert_allclose(t.frame["y"], df["y"])
    assert "tag" in t.report.non_numeric


@pytest.mark.parametrize("raw,needle", [
    (b"", "empty"),
    (b"   \n  ", "empty"),
    (b"\x00\x01\x02binary", "binary"),
    (b"PK\x03\x04rest-of-zip", "spreadsheet"),
    (b"PAR1garbage", "Parquet"),
    (b"a,b\n", "no data rows"),
    (b"name,city\nx,y\nz,w\n", "no numeric columns"),
    (b"a,a\n1,2\n", "repeated column"),
])
def test_malformed_files_raise_data_error(raw, needle):
    with pytest.raises(DataError, match=needle):
        lagwise.load_table(raw, name="bad")


def test_huge_file_rejected():
    with pytest.raises(DataError, match="limit"):
        lagwise.load_table(b"y\n" + b"1\n" * 1000, max_bytes=100)


def test_missing_path():
    with pytest.raises(DataError, match="no such file"):
        lagwise.load_table("/nonexistent/file.csv")


def test_transforms_values_and_names():
    t = load("y,x\n1,1\n2,2\n4,4\n8,8\n16,16\n")
    t2, name = t.with_transform("sum-next", "y", 2)
    assert name == "y, sum of next 2" and t2.horizons[name] == 2
    np.testing.assert_allclose(t2.frame[name].to_numpy()[:3], [6, 12, 24])
    assert t2.frame[name].isna().sum() == 2
    _, lag = lagwise.transform(t.frame, "lag", "y", 1)[:2]
    np.testing.assert_allclose(lag.to_numpy()[1:], [1, 2, 4, 8])
    _, lead = lagwise.transform(t.frame, "lead", "y", 2)[:2]
    np.testing.assert_allclose(lead.to_numpy()[:3], [4, 8, 16])
    name, d = lagwise.transform(t.frame, "difference", "y")[:2]
    np.testing.assert_allclose(d.to_numpy()[1:], [1, 2, 4, 8])
    assert name == "y, difference"
    name, dl = lagwise.transform(t.frame, "log-difference", "y")[:2]
    np.testing.assert_allclose(dl.to_numpy()[1:], np.log(2))
    assert name == "y, log difference"
    name, lg = lagwise.transform(t.frame, "log", "y")[:2]
    np.testing.assert_allclose(lg.to_numpy(), np.log([1, 2, 4, 8, 16]))
    assert name == "log y"
    assert lagwise.transform(t.frame, "lag", "y", 3)[0] == "y, lag 3"


def test_old_transform_names_still_work():
    """Earlier versions named transforms diff, dlog, fsum and columns like fsum12(x): settings
    files and scripts using them keep working through a mapping."""
    from lagwise.engine.data.transforms import current_column_name
    t = load("y,x\n1,1\n2,2\n4,4\n8,8\n16,16\n")
    for old, new in (("diff", "difference"), ("dlog", "log-difference"), ("fsum", "sum-next")):
        a = lagwise.transform(t.frame, old, "y", 2)
        b = lagwise.transform(t.frame, new, "y", 2)
        assert a[0] == b[0]
        np.testing.assert_allclose(a[1].to_numpy(), b[1].to_numpy())
    assert current_column_name("fsum12(exret_1m)") == "exret_1m, sum of next 12"
    assert current_column_name("lag1(x)") == "x, lag 1"
    assert current_column_name("dlog(p)") == "p, log difference"
    assert current_column_name("plain") == "plain"


def test_transform_errors_name_the_problem():
    t = load("y,x\n1,-1\n2,2\n3,3\n")
    with pytest.raises(DataError, match="'x'.*positive"):
        t.with_transform("log", "x")
    with pytest.raises(SpecificationError, match="unknown transform"):
        t.with_transform("cube", "x")
    with pytest.raises(SpecificationError, match="no numeric column named 'z'"):
        t.with_transform("lag", "z")
    with pytest.raises(SpecificationError, match="not shorter than the sample"):
        t.with_transform("lag", "y", 5)


# --------------------------------------------------------------------------- model errors

@pytest.fixture
def table():
    rng = np.random.default_rng(0)
    n = 30
    x1 = rng.standard_normal(n)
    x2 = rng.standard_normal(n)
    csv = pd.DataFrame({"y": rng.standard_normal(n), "x1": x1, "x2": x2, "x3": x1 + 2 * x2,
                        "const": 5.0, "label": ["a"] * n, "empty": [np.nan] * n})
    buf = io.StringIO()
    csv.to_csv(buf, index=False)
    return lagwise.load_table(buf.getvalue().encode(), name="m.csv")


def test_collinear_regressors_named(table):
    with pytest.raises(SpecificationError) as err:
        lagwise.fit_ols(table, "y", ["x1", "x2", "x3"])
    msg = str(err.value)
    assert "collinear" in msg and "'x3'" in msg and "'x1'" in msg and "'x2'" in msg


def test_constant_regressor_named(table):
    with pytest.raises(SpecificationError, match="'const' is constant"):
        lagwise.fit_ols(table, "y", ["x1", "const"])


def test_non_numeric_column_named(table):
    with pytest.raises(DataError, match="'label' is not numeric.*'a'"):
        lagwise.fit_ols(table, "y", ["label"])


def test_all_missing_column_named(table):
    with pytest.raises(DataError, match="'empty' has no values"):
        lagwise.fit_ols(table, "y", ["x1", "empty"])


def test_unknown_column_named(table):
    with pytest.raises(SpecificationError, match="no column named 'nope'"):
        lagwise.fit_ols(table, "y", ["nope"])


def test_more_coefficients_than_rows():
    df = pd.DataFrame({"y": [1.0, 2.0, 3.0], "a": [1.0, 0.0, 2.0], "b": [0.0, 1.0, 5.0]})
    with pytest.raises(SpecificationError, match="3 coefficients but only 3 usable rows"):
        lagwise.fit_ols(df, "y", ["a", "b"])


def test_constant_response(table):
    with pytest.raises(SpecificationError, match="response 'const' is constant"):
        lagwise.fit_ols(table, "const", ["x1"])


def test_missing_rows_dropped_and_counted():
    df = pd.DataFrame({"y": [1.0, 2.0, np.nan, 4.0, 5.0, 3.0, 1.0],
                       "x": [np.nan, 1.0, 2.0, 3.0, 1.0, 2.0, 5.0]})
    fit = lagwise.fit_ols(df, "y", ["x"])
    assert fit.nobs == 5 and fit.sample.dropped_missing == 2
    assert fit.sample.dropped_interior == 1
    assert any("treated as consecutive" in n for n in fit.sample.notes)


def test_infinite_values_rejected():
    df = pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "x": [1.0, np.inf, 2.0, 0.0]})
    with pytest.raises(DataError, match="'x' contains infinite"):
        lagwise.fit_ols(df, "y", ["x"])


def test_sample_window():
    t = load("month,y,x\n" + "\n".join(f"2020-{m:02d}-01,{m * 1.5 + (m % 3)},{m}" for m in
                                        range(1, 13)) + "\n")
    fit = lagwise.fit_ols(t, "y", ["x"], sample=("2020-03-01", "2020-10-01"))
    assert fit.nobs == 8 and fit.sample.dropped_window == 4
    assert fit.sample.first == "2020-03-01"


def test_bad_estimator_settings_are_typed():
    with pytest.raises(SpecificationError, match="unknown estimator 'hc9'"):
        lagwise.estimator("hc9")
    with pytest.raises(SpecificationError, match="kernel='cosine'"):
        lagwise.estimator("kernel", kernel="cosine")
    with pytest.raises(SpecificationError, match="bandwidth must be a positive number"):
        lagwise.estimator("kernel", bandwidth=-2)
    with pytest.raises(SpecificationError, match="unknown bandwidth rule 'magic'"):
        lagwise.estimator("kernel", bandwidth="magic")
    with pytest.raises(SpecificationError, match="no parameter 'lag'"):
        lagwise.estimator("kernel", lag=3)
    with pytest.raises(SpecificationError, match="lags must be a whole number"):
        lagwise.estimator("kernel", lags=-1)
    with pytest.raises(SpecificationError, match="no parameter 'bandwidth'"):
        lagwise.estimator("hc0", bandwidth=3)
    with pytest.raises(SpecificationError, match="takes no parameters"):
        lagwise.estimator("classical", bandwidth=3)


def test_leverage_one_flagged_not_nan():
    df = pd.DataFrame({"y": [1.0, 2.0, 1.5, 3.0, 2.5, 9.0],
                       "x": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
                       "d": [0, 0, 0, 0, 0, 1.0]})
    fit = lagwise.fit_ols(df, "y", ["x", "d"])
    with pytest.raises(lagwise.EstimationError, match="leverage 1.*row"):
        fit.infer("hc3")
    from lagwise.engine.inference.compare import compare
    comp = compare(fit)
    hc3 = comp[comp.estimator == "HC3"]
    assert hc3.note.str.contains("leverage 1").all()


def test_transforms_are_recorded_and_replayable():
    t = load("y,x\n1,1\n2,2\n4,4\n8,8\n16,16\n")
    t2, _ = t.with_transform("lag", "x", 1)
    t3, name = t2.with_transform("fsum", "y", 2)
    assert t3.transforms == [("lag", "x", 1), ("sum-next", "y", 2)]
    other = load("y,x\n3,1\n1,2\n4,0\n1,5\n5,9\n")
    replayed = other.replay(t3.transforms)
    assert {"x, lag 1", "y, sum of next 2"} <= set(replayed.frame.columns)
    assert replayed.horizons == {"y, sum of next 2": 2}
    assert replayed.replay(t3.transforms).frame.shape == replayed.frame.shape   # idempotent
