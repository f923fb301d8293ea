"""Fuzzing as a standing test: generated files go through every stage (load, transforms, fit,
every estimator x every reference law, sweeps along every axis, flips, the comparison,
diagnostics, table exports). The only acceptable outcomes are finite results, typed errors, and
flagged results whose notes say what happened; no stage may hang.

Default run: a seeded slice (LAGWISE_FUZZ_EXAMPLES, default 600 examples). The full corpus:

    LAGWISE_FUZZ_EXAMPLES=10000 python -m pytest tests/test_fuzz_pipeline.py -q
"""

import os
import string
import time
from datetime import timedelta

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise
from lagwise.engine.covariance.registry import FAMILIES
from lagwise.engine.io.tables import FORMATS, render
from lagwise.engine.laws.reference import REQUESTS

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "600"))
SLOW_SECONDS = 20.0

number = st.one_of(st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False),
                   st.floats(-1e-3, 1e-3, allow_nan=False), st.integers(-5, 5).map(float),
                   st.sampled_from([0.0, 1.0, np.nan, 1e100, -1e100, 1e-200, 5e-324]))
token = st.one_of(number.map(lambda v: "" if np.isnan(v) else repr(v)),
                  st.sampled_from(["", "NA", ".", "n/a", "1,5", "1.234,5", "2020-01-31", "x",
                                   "1e999", "-0", "  7 "]),
                  st.text(alphabet=string.digits + ".,-e ", max_size=6))


@st.composite
def csv_bytes(draw):
    sep = draw(st.sampled_from([",", ";", "\t"]))
    ncol = draw(st.integers(1, 4))
    nrow = draw(st.integers(0, 40))
    names = [f"c{i}" for i in range(ncol)]
    if draw(st.booleans()):
        names = ["date"] + names
        dates = pd.date_range("2000-01-31", periods=nrow, freq="ME").strftime("%Y-%m-%d")
    rows = []
    for r in range(nrow):
        cells = [draw(token) for _ in range(ncol)]
        if names[0] == "date":
            cells = [dates[r]] + cells
        trailing = sep if draw(st.integers(0, 9)) == 0 else ""
        rows.append(sep.join(cells) + trailing)
    return ("\n".join([sep.join(names)] + rows) + "\n").encode()


@st.composite
def frames(draw):
    n = draw(st.integers(2, 40))
    k = draw(st.integers(1, 3))
    cols = {f"c{i}": draw(st.lists(number, min_size=n, max_size=n)) for i in range(k + 1)}
    return pd.DataFrame(cols)


def estimators_to_try():
    out = []
    for fam in FAMILIES.values():
        out.append(lagwise.estimator(fam.name))
        if fam.axis is not None:
            grid_value = {"b": 3.0, "B": 2, "p": 1}.get(fam.axis.symbol, 1)
            out.append(lagwise.estimator(fam.name).at(grid_value))
    out.append(lagwise.estimator("kernel", kernel="truncated", bandwidth=4.0, repair=False))
    out.append(lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=2.5,
                                 prewhiten=True))
    return out


ESTIMATORS = estimators_to_try()


def check_inference(res):
    t = res.table
    notes = " ".join(res.notes)
    for col in ("estimate", "std_error", "ci_low", "ci_high"):
        bad = ~np.isfinite(t[col].to_numpy())
        if col != "estimate" and bad.any():
            assert "negative variance" in notes or "not available" in notes, (col, res.notes)
        assert not (col == "estimate" and bad.any())
    p = t.p_value.to_numpy()
    finite = np.isfinite(p)
    assert ((p[finite] >= 0) & (p[finite] <= 1)).all()
    if (~finite).any():
        assert "standard error" in notes or "not defined" in notes, res.notes
    assert np.isfinite(res.critical_value)


def run_pipeline(table_or_frame):
    try:
        model = lagwise.fit_ols(table_or_frame, _response(table_or_frame),
                                _regressors(table_or_frame))
    except lagwise.LagwiseError:
        return
    for est in ESTIMATORS:
        for request in REQUESTS:
            try:
                res = model.infer(est, reference=request)
            except lagwise.LagwiseError:
                continue
            check_inference(res)
            try:
                res.wald(model.terms)
            except lagwise.LagwiseError:
                pass
    for fam in FAMILIES.values():
        if fam.axis is None:
            continue
        try:
            grid = fam.axis.grid(model)[:6]
            sw = lagwise.sweep(model, [lagwise.estimator(fam.name)], grid)
        except lagwise.LagwiseError:
            continue
        ok = np.isfinite(sw.std_error).all(axis=2) | (sw.status != "")
        assert ok.all(), (fam.name, sw.status, sw.std_error)
        for term in model.terms:
            lagwise.significance_flip(model, term, sweep_result=sw).sentence()
    comp = lagwise.compare(model)
    missing = comp.std_error.isna()
    assert (comp.note[missing].str.len() > 0).all()
    for fmt in FORMATS:
        render(comp, fmt, index=False)
    try:
        lagwise.diagnose(model)
    except lagwise.LagwiseError:
        pass


def _response(data):
    frame = data.frame if isinstance(data, lagwise.Table) else data
    return str(frame.columns[0])


def _regressors(data):
    frame = data.frame if isinstance(data, lagwise.Table) else data
    return [str(c) for c in frame.columns[1:3]]


fuzz = settings(max_examples=EXAMPLES, derandomize=True, deadline=timedelta(seconds=SLOW_SECONDS),
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                       HealthCheck.data_too_large])


@fuzz
@given(raw=csv_bytes(), transform=st.sampled_from([None, "lag", "difference", "sum-next",
                                                   "log"]))
def test_files_through_every_stage(raw, transform):
    started = time.perf_counter()
    try:
        table = lagwise.load_table(raw, name="fuzz.csv")
    except lagwise.DataError:
        return
    assert all(np.issubdtype(t, np.floating) for t in table.frame.dtypes)
    if transform:
        try:
            table, _ = table.with_transform(transform, table.columns[-1], 2)
        except lagwise.LagwiseError:
            pass
    run_pipeline(table)
    assert time.perf_counter() - started < SLOW_SECONDS


@settings(max_examples=max(EXAMPLES // 3, 50), derandomize=True,
          deadline=timedelta(seconds=SLOW_SECONDS),
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(frame=frames())
def test_odd_numeric_frames_through_every_stage(frame):
    run_pipeline(frame)
