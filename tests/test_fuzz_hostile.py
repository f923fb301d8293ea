"""The standing fuzz suite, grown to the defects of issue 21 (items 4-10): generators that would
have found them. Mixed number conventions, string-heavy Parquet files, repeated dates without an
identifier, tuning values and horizons across the whole numeric range (settings files with
1e400-like numbers included), hostile formula strings, hostile names through every export format
including the workbook, sparse panels. The only acceptable outcomes: a result whose non-finite
numbers are flagged, or a typed error; no example may run for more than 20 s, and no formula may
create a file or run code.

Default run: a small seeded slice (LAGWISE_FUZZ_EXAMPLES, default 40 per generator). The full
corpus, as the release check runs it:

    LAGWISE_FUZZ_EXAMPLES=10000 nice -n 10 python -m pytest tests/test_fuzz_*.py -q

With LAGWISE_FUZZ_TALLY=path the outcomes of every example are counted and written there (JSON)
when the module finishes.
"""

from __future__ import annotations

import builtins
import csv
import io
import json
import os
import re
import string
import sys
import time
from collections import Counter
from datetime import timedelta

import numpy as np
import openpyxl
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise
from lagwise.engine.io.settings import check_against_sample, load_settings, settings_json
from lagwise.engine.io.tables import FORMATS, render, to_csv
from lagwise.engine.studies.panel_diagnostics import diagnose_panel

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "40"))
SLOW_SECONDS = 20.0
TALLY: Counter = Counter()

fuzz = settings(max_examples=EXAMPLES, derandomize=True,
                deadline=timedelta(seconds=SLOW_SECONDS),
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                       HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])


@pytest.fixture(scope="module", autouse=True)
def tally():
    yield TALLY
    path = os.environ.get("LAGWISE_FUZZ_TALLY")
    if path:
        old = json.loads(open(path).read()) if os.path.exists(path) else {}
        for k, v in TALLY.items():
            old[k] = old.get(k, 0) + v
        with open(path, "w") as fh:
            json.dump(old, fh, indent=1, sort_keys=True)


def outcome(name, run):
    """Run one example: a result, or a typed error (anything else fails the test); counted,
    and timed against SLOW_SECONDS."""
    started = time.perf_counter()
    try:
        result = run()
        TALLY[f"{name}: result"] += 1
    except lagwise.LagwiseError as exc:
        TALLY[f"{name}: {type(exc).__name__}"] += 1
        result = exc
    elapsed = time.perf_counter() - started
    TALLY[f"{name}: examples"] += 1
    TALLY["slowest example (ms)"] = max(TALLY["slowest example (ms)"], int(1000 * elapsed))
    assert elapsed < SLOW_SECONDS, (name, elapsed)
    return result


def check_inference(res):
    """Non-finite numbers only where a note says why."""
    t = res.table
    notes = " ".join(res.notes)
    assert np.isfinite(t.estimate.to_numpy()).all()
    for col in ("std_error", "ci_low", "ci_high", "t_stat", "p_value"):
        bad = ~np.isfinite(t[col].to_numpy())
        if bad.any():
            assert "negative variance" in notes or "not defined" in notes \
                or "not available" in notes, (col, res.notes)
            TALLY["flagged non-finite results"] += 1
    p = t.p_value.to_numpy()
    assert ((p[np.isfinite(p)] >= 0) & (p[np.isfinite(p)] <= 1)).all()


# --------------------------------------------------------------------------- number conventions

def _plain(c):
    return float(c) if re.fullmatch(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", c) else None


def _us(c):
    if re.fullmatch(r"[+-]?[1-9]\d{0,2}(,\d{3})+(\.\d*)?", c):
        return float(c.replace(",", ""))
    return _plain(c)


def _eu(c):
    if re.fullmatch(r"[+-]?\d+", c) or re.fullmatch(r"[+-]?[1-9]\d{0,2}(\.\d{3})+(,\d*)?", c) \
            or re.fullmatch(r"[+-]?\d*,\d+", c):
        return float(c.replace(".", "").replace(",", "."))
    return None


CELL = st.one_of(
    st.floats(-1e7, 1e7, allow_nan=False).map(lambda v: f"{v:.3f}"),
    st.floats(-1e7, 1e7, allow_nan=False).map(lambda v: f"{v:,.2f}"),
    st.floats(-1e7, 1e7, allow_nan=False).map(
        lambda v: f"{v:,.2f}".replace(",", "_").replace(".", ",").replace("_", ".")),
    st.floats(-1, 1, allow_nan=False).map(lambda v: f"{v:.4f}".replace(".", ",")),
    st.integers(-10**6, 10**6).map(str),
    st.sampled_from(["0.5", "2,5", "0.125", "1.234,5", "1,234", "1.234", "", "NA", "-0,0"]))


@fuzz
@given(cells=st.lists(CELL, min_size=2, max_size=25), sep=st.sampled_from([",", ";"]))
def test_mixed_number_conventions_never_rescale(cells, sep):
    quote = (lambda c: f'"{c}"') if sep == "," else (lambda c: c)
    raw = ("i" + sep + "x\n" + "".join(f"{i}{sep}{quote(c)}\n" for i, c in enumerate(cells)))
    table = outcome("number conventions", lambda: lagwise.load_table(raw.encode()))
    if isinstance(table, Exception) or "x" not in table.frame:
        return
    got = table.frame["x"].to_numpy()
    cells = [c.replace(" ", "") for c in cells]
    present = [(c, g) for c, g in zip(cells, got) if c not in ("", "NA")]
    readings = [[f(c) for c, _ in present] for f in (_plain, _us, _eu)]
    ok = [all(r is not None and np.isclose(r, g, rtol=1e-12, atol=0)
              for r, (_, g) in zip(reading, present)) for reading in readings]
    assert any(ok), (cells, got)         # one convention read every cell, none rescaled


# --------------------------------------------------------------------------- string-heavy Parquet

@st.composite
def parquet_files(draw):
    rows = draw(st.integers(1, 300))
    cols = {}
    for i in range(draw(st.integers(0, 3))):
        cols[f"n{i}"] = np.random.default_rng(i).normal(size=rows)
    for i in range(draw(st.integers(1, 3))):
        length = draw(st.sampled_from([1, 10, 300, 5_000, 200_000, 1 << 20]))
        distinct = draw(st.integers(1, 4))
        values = [chr(65 + k % 26) * length + str(k) for k in range(distinct)]
        cols[f"s{i}"] = [values[r % distinct] for r in range(rows)]
    table = pa.table(cols)
    buf = io.BytesIO()
    pq.write_table(table, buf, use_dictionary=draw(st.booleans()),
                   compression=draw(st.sampled_from(["zstd", "snappy", "none"])),
                   row_group_size=draw(st.sampled_from([7, 64, 1 << 20])))
    return buf.getvalue()


@fuzz
@given(raw=parquet_files())
def test_string_heavy_parquet_is_bounded(raw):
    table = outcome("string-heavy Parquet", lambda: lagwise.load_table(raw, name="s.parquet"))
    if isinstance(table, Exception):
        assert len(str(table)) < 600
        return
    for line in table.report.lines():
        assert len(line) < 600, line[:120]
    kept = table.labels if table.labels is not None else pd.DataFrame()
    for col in kept.columns:
        longest = kept[col].astype(str).str.len().max()
        assert longest <= 200, (col, longest)


# --------------------------------------------------------------------------- repeated dates

@fuzz
@given(n=st.integers(6, 200), repeats=st.lists(st.integers(1, 10**6), min_size=1, max_size=6),
       whole=st.booleans(), seed=st.integers(0, 2**31 - 1), freq=st.sampled_from(["ME", "D"]))
def test_repeated_dates_without_an_identifier_stay_one_series(n, repeats, whole, seed, freq):
    rng = np.random.default_rng(seed)
    dates = pd.date_range("2000-01-31", periods=n, freq=freq).strftime("%Y-%m-%d").tolist()
    for r in repeats:
        i = 1 + r % (n - 1)
        dates[i] = dates[i - 1]
    count = (np.arange(n) * 3 + 100) if whole else rng.normal(size=n)
    frame = pd.DataFrame({"date": dates, "y": rng.normal(size=n), "count": count})
    raw = frame.to_csv(index=False).encode()
    table = outcome("repeated dates", lambda: lagwise.load_table(raw))
    if isinstance(table, Exception):
        return
    assert table.report.panel is None and len(table.frame) == n
    assert any("repeats the date" in note for note in table.report.notes)


# --------------------------------------------------------------------------- tuning values

HUGE = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                 st.integers(-10**400, 10**400), st.sampled_from([0, 1, 2, 419, 420, 421,
                                                                  10**12, 10**400, -1]))


@pytest.fixture(scope="module")
def demo():
    table = lagwise.load_table(lagwise.demo_file())
    return table, lagwise.fit_ols(table, "exret_1m", ["rate_capacity"])


@fuzz
@given(value=HUGE, name=st.sampled_from(["bandwidth", "lags", "cosines", "max_order",
                                         "horizon", "sum-next", "lead", "sweep"]))
def test_tuning_values_across_the_numeric_range(demo, value, name):
    table, fit = demo

    def run():
        if name == "bandwidth":
            return fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth=value))
        if name == "lags":
            return fit.infer(lagwise.estimator("kernel", lags=value))
        if name == "cosines":
            return fit.infer(lagwise.estimator("ewc", cosines=value))
        if name == "max_order":
            return fit.infer(lagwise.estimator("var", max_order=value))
        if name == "horizon":
            return lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=value)
        if name in ("sum-next", "lead"):
            return table.with_transform(name, "exret_1m", value)
        return lagwise.sweep(fit, [lagwise.estimator("kernel")], [1.0, value])
    res = outcome("tuning values", run)
    if isinstance(res, lagwise.engine.Inference):
        check_inference(res)


@fuzz
@given(field=st.sampled_from(["horizon", "value", "level", "bandwidth", "max_order", "lags",
                              "periods", "window"]),
       number=st.one_of(st.sampled_from(["1e400", "-1e400", "1" + "0" * 400, "NaN",
                                         "Infinity", "-0", "4e3", "0.5", "12"]),
                        st.integers(-10**50, 10**50).map(str),
                        st.floats(allow_nan=False).map(repr)))
def test_settings_files_with_any_number(field, number):
    body = {"horizon": f'"horizon": {number}', "value": f'"value": {number}',
            "level": f'"level": {number}',
            "bandwidth": f'"estimator": "kernel", "params": {{"bandwidth": {number}}}',
            "max_order": f'"estimator": "var", "params": {{"max_order": {number}}}',
            "lags": f'"estimator": "kernel", "params": {{"lags": {number}}}',
            "periods": f'"transforms": [["sum-next", "exret_1m", {number}]]',
            "window": f'"window": [0, {number}]'}[field]
    text = '{"lagwise_settings": 2, ' + body + "}"

    def run():
        try:
            record = load_settings(text)
        except ValueError as exc:                # json itself (not a settings problem)
            if isinstance(exc, lagwise.LagwiseError):
                raise
            raise lagwise.DataError("not JSON") from None
        check_against_sample(record, 408)
        return settings_json(record)
    outcome("settings numbers", run)


# --------------------------------------------------------------------------- hostile formulas

_EVENTS: list = []
_WATCH = {"on": False}


def _audit(event, args):
    if _WATCH["on"] and (event in {"os.system", "subprocess.Popen", "os.exec", "os.posix_spawn",
                                    "os.remove", "os.rename", "os.mkdir", "socket.connect",
                                    "shutil.rmtree"}
                         or (event == "open" and args and "canary" in str(args[0]))):
        _EVENTS.append(event)


sys.addaudithook(_audit)

TOKENS = ["y", "x", "z", "`a b`", "1", "2", "0.5", "1e400", "10**400", "+", "-", "*", "/", ":",
          "**", "^", "~", "|", "(", ")", "{", "}", "[", "]", ",", ".", "np.", "log", "exp",
          "save", "lag", "lead", "sum_next", "C", "I", "Q", "__import__", "'os'", "'canary'",
          ".system", "open", "exec", "eval", "lambda", "globals()", "__class__", "__builtins__",
          "getattr", "%in%", "\"", "'", "`", " ", "if", "else", "for", "in", "=", ";", "\\"]


@fuzz
@given(parts=st.lists(st.sampled_from(TOKENS), min_size=1, max_size=25),
       lhs=st.sampled_from(["y ~ ", "y~", "np.log(y) ~ ", "", "~ "]))
def test_hostile_formula_strings(parts, lhs, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    formula = lhs + " ".join(parts)
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"y": rng.normal(size=40), "x": rng.normal(size=40) + 3,
                          "z": rng.normal(size=40), "a b": rng.normal(size=40)})
    _EVENTS.clear()
    _WATCH["on"] = True
    try:
        res = outcome("hostile formulas", lambda: lagwise.fit(formula, frame))
    finally:
        _WATCH["on"] = False
    assert not _EVENTS, (formula, _EVENTS)
    assert not list(tmp_path.iterdir()), formula
    assert not hasattr(builtins, "LAGWISE_CANARY")
    if isinstance(res, Exception):
        assert len(str(res)) < 1000
    else:
        check_inference(res.infer("hc1"))


# --------------------------------------------------------------------------- hostile names

NAME = st.one_of(st.text(alphabet=string.printable + "é€<>&\"'\\{}$%_#^~|", min_size=1,
                         max_size=20),
                 st.sampled_from(['=HYPERLINK("http://x.invalid","x")', "+cmd", "-1+1",
                                  "@SUM(A1)", "\t=1", "\r=1", "<script>alert(1)</script>", "a|b",
                                  "\\end{table}", "$x$", "#", "intercept (column)", "`q`"]))


@fuzz
@given(names=st.lists(NAME, min_size=2, max_size=3, unique_by=lambda s: s.strip()),
       show=st.sampled_from(["se", "t", "p", "ci"]))
def test_hostile_names_through_every_export(names, show):
    names = [n for n in names if n.strip() and n != "intercept"]
    if len(names) < 2:
        return
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({n: rng.normal(size=50) for n in names})
    fit = outcome("hostile names: fit", lambda: lagwise.fit_ols(frame, names[0], names[1:]))
    if isinstance(fit, Exception):
        return
    res = fit.infer("hc1")
    check_inference(res)
    rob = lagwise.robustness_table({names[0]: fit}, {names[-1]: lagwise.estimator("hc1")},
                                   show=show)
    for text in (rob.to_latex(), rob.to_markdown(), rob.to_html()):
        assert "<script>" not in text
    buf = io.BytesIO()
    rob.to_excel(buf)
    wb = openpyxl.load_workbook(io.BytesIO(buf.getvalue()))
    formulas = [c.coordinate for ws in wb.worksheets for row in ws.iter_rows() for c in row
                if c.data_type == "f"]
    assert not formulas
    comp = lagwise.compare(fit, estimators=[lagwise.estimator("hc1"),
                                            lagwise.estimator("kernel", bandwidth=4.0)])
    for fmt in FORMATS:
        out = render(comp, fmt, index=False)
        if fmt == "html":
            assert "<script>" not in out
    for row in csv.reader(io.StringIO(to_csv(res.table))):
        for cell in row:
            assert not cell.startswith(("=", "+", "@", "\t", "\r")), row
    TALLY["hostile names: exported"] += 1


# --------------------------------------------------------------------------- sparse panels

@fuzz
@given(entities=st.integers(2, 400), periods=st.integers(2, 5000), per=st.integers(1, 4),
       seed=st.integers(0, 2**31 - 1))
def test_sparse_panels_are_computed_from_their_rows(entities, periods, per, seed):
    rng = np.random.default_rng(seed)
    per = min(per, periods)
    e = np.repeat(np.arange(entities), per)
    t = np.concatenate([rng.choice(periods, per, replace=False) for _ in range(entities)])
    frame = pd.DataFrame({"firm": e, "t": t, "x": rng.normal(size=e.size)})
    frame["y"] = frame.x + rng.normal(size=e.size)

    def run():
        fit = lagwise.fit_panel(frame, "y", ["x"], entity="firm", time="t")
        res = fit.infer(lagwise.estimator("cluster_kernel", bandwidth=3.0))
        check_inference(res)
        diagnose_panel(fit)
        return res
    outcome("sparse panels", run)
