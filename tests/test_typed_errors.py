"""Typed errors where they leaked (issue 21, item 8): the Dask folder path checks every file's
footer and schema before any pass (a file that is not Parquet, a truncated file, a file missing a
column, a column of another kind), naming the file and the column; persistence_report on a tiny
sample; from_statsmodels after remove_data(), with a two-column response, on an object without a
design, and on a regularised fit (refused for what it is)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf

import lagwise


def panel_frame():
    rng = np.random.default_rng(0)
    f = pd.DataFrame({"firm": np.repeat(np.arange(20), 10), "month": np.tile(np.arange(10), 20),
                      "x1": rng.normal(size=200)})
    f["y"] = f.x1 + rng.normal(size=200)
    return f


def folder(tmp_path, tweak):
    f = panel_frame()
    f.iloc[:100].to_parquet(tmp_path / "a.parquet", index=False)
    f.iloc[100:].to_parquet(tmp_path / "b.parquet", index=False)
    tweak(tmp_path, f)
    return tmp_path


CASES = {
    "not Parquet": (lambda d, f: (d / "c.parquet").write_text("not a parquet file"),
                    r"'c\.parquet' .* not a readable Parquet file"),
    "another file": (lambda d, f: (d / "notes.txt").write_text("read me"),
                     r"'notes\.txt' .* not a readable Parquet file"),
    "truncated": (lambda d, f: (d / "b.parquet").write_bytes(
        (d / "b.parquet").read_bytes()[:-64]), r"'b\.parquet' .* footer"),
    "missing column": (lambda d, f: f.iloc[100:].drop(columns="x1").to_parquet(
        d / "b.parquet", index=False), r"'b\.parquet' .* has no column 'x1'"),
    "text values": (lambda d, f: f.iloc[100:].assign(x1=f.x1.iloc[100:].astype(str)).to_parquet(
        d / "b.parquet", index=False), r"column 'x1' of 'b\.parquet' .* not numbers"),
    "mixed kinds": (lambda d, f: f.iloc[100:].assign(month=f.month.iloc[100:].astype(str))
                    .to_parquet(d / "b.parquet", index=False),
                    r"column 'month' holds text values in 'b\.parquet' but number"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_a_bad_file_in_a_parquet_folder_is_named_up_front(tmp_path, case):
    tweak, message = CASES[case]
    path = folder(tmp_path, tweak)
    with pytest.raises(lagwise.DataError, match=message):
        lagwise.fit_panel(path, "y", ["x1"], entity="firm", time="month")


def test_a_good_folder_still_fits(tmp_path):
    path = folder(tmp_path, lambda d, f: None)
    fit = lagwise.fit_panel(path, "y", ["x1"], entity="firm", time="month")
    mem = lagwise.fit_panel(panel_frame(), "y", ["x1"], entity="firm", time="month")
    np.testing.assert_allclose(fit.beta, mem.beta, rtol=1e-10)


@pytest.mark.parametrize("rows", [3, 4, 5])
def test_persistence_report_on_a_tiny_sample_is_a_typed_error(rows):
    rng = np.random.default_rng(rows)
    frame = pd.DataFrame({"y": rng.normal(size=rows), "x": np.cumsum(rng.normal(size=rows))})
    fit = lagwise.fit_ols(frame, "y", ["x"])
    with pytest.raises(lagwise.SpecificationError, match=f"at least 6 rows.*has {rows}"):
        lagwise.persistence_report(fit)


def test_persistence_report_with_a_constant_predictor_is_a_typed_error():
    rng = np.random.default_rng(9)
    frame = pd.DataFrame({"y": rng.normal(size=30), "x": np.r_[np.ones(29), 2.0],
                          "z": rng.normal(size=30)})
    fit = lagwise.fit_ols(frame, "y", ["x", "z"])
    try:
        lagwise.persistence_report(fit, "x")
    except lagwise.LagwiseError:
        pass


@pytest.fixture
def ols_data():
    rng = np.random.default_rng(1)
    X = sm.add_constant(rng.normal(size=(60, 2)))
    y = X @ np.array([1.0, 2.0, -1.0]) + rng.normal(size=60)
    return X, y


def test_from_statsmodels_after_remove_data(ols_data):
    X, y = ols_data
    res = sm.OLS(y, X).fit()
    res.remove_data()
    with pytest.raises(lagwise.SpecificationError, match="remove_data"):
        lagwise.from_statsmodels(res)
    frame = pd.DataFrame({"y": y, "a": X[:, 1], "b": X[:, 2]})
    res = smf.ols("y ~ a + b", frame).fit()
    res.remove_data()
    with pytest.raises(lagwise.SpecificationError, match="carry no design"):
        lagwise.from_statsmodels(res)


def test_from_statsmodels_with_a_two_column_response(ols_data):
    X, y = ols_data
    res = sm.OLS(np.column_stack([y, 2 * y]), X).fit()
    with pytest.raises(lagwise.SpecificationError, match="response has 2 columns"):
        lagwise.from_statsmodels(res)


def test_from_statsmodels_on_an_object_without_a_design():
    class Results:
        model = type("OLS", (), {})()
        params = np.zeros(2)
    with pytest.raises(lagwise.SpecificationError, match="carry no design"):
        lagwise.from_statsmodels(Results())
    with pytest.raises(lagwise.SpecificationError, match="fitted statsmodels OLS"):
        lagwise.from_statsmodels(object())


@pytest.mark.parametrize("l1", [0.0, 1.0])
def test_a_regularised_fit_is_refused_for_what_it_is(ols_data, l1):
    X, y = ols_data
    res = sm.OLS(y, X).fit_regularized(alpha=0.3, L1_wt=l1)
    with pytest.raises(lagwise.SpecificationError, match="regularised"):
        lagwise.from_statsmodels(res)


def test_an_ordinary_fit_still_converts(ols_data):
    X, y = ols_data
    res = sm.OLS(y, X).fit()
    np.testing.assert_allclose(lagwise.from_statsmodels(res).beta, res.params, rtol=1e-10)
