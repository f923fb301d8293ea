"""A repeated date is not a panel (issue 21, item 6): only an identifier-like column (text or
whole numbers, far fewer distinct values than rows, its entities seen at several dates) is
taken for a panel's entity; a series with a repeated date stays one series, and the report names
the repeated date and its rows."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "100"))


def monthly_csv(n, repeat_at, rng, extra_int=True):
    months = pd.date_range("2001-01-31", periods=n, freq="ME").strftime("%Y-%m-%d").tolist()
    for i in repeat_at:
        months[i] = months[i - 1]
    lines = ["month,ret,rate" + (",volume" if extra_int else "")]
    for i, m in enumerate(months):
        row = f"{m},{rng.normal():.5f},{rng.normal():.5f}"
        if extra_int:
            row += f",{1000 + 7 * i}"
        lines.append(row)
    return ("\n".join(lines) + "\n").encode(), months


def test_one_repeated_date_keeps_the_series_and_names_the_rows():
    raw, months = monthly_csv(48, [20], np.random.default_rng(1))
    table = lagwise.load_table(raw, name="monthly.csv")
    assert table.report.panel is None
    assert len(table.frame) == 48 and list(table.frame.columns) == ["ret", "rate", "volume"]
    note = [n for n in table.report.notes if "repeats the date" in n]
    assert note and months[20] in note[0] and "data rows 20, 21" in note[0]
    assert not any("stacked panel" in n for n in table.report.notes)
    fit = lagwise.fit_ols(table, "ret", ["rate"])        # a time series fit, not a panel
    assert fit.nobs == 48


def test_whole_number_entity_codes_are_still_a_panel():
    rng = np.random.default_rng(2)
    months = pd.date_range("2010-01-31", periods=6, freq="ME").strftime("%Y-%m-%d")
    rows = [f"{firm},{m},{rng.normal():.4f}" for m in months for firm in (101, 205, 377, 412)]
    table = lagwise.load_table(("firm,month,ret\n" + "\n".join(rows) + "\n").encode())
    assert table.report.panel == ("firm", "month")


@settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(n=st.integers(8, 120), repeats=st.lists(st.integers(1, 10**6), min_size=1, max_size=4),
       seed=st.integers(0, 2**31 - 1), extra_int=st.booleans())
def test_identifier_less_repeated_dates_are_never_a_panel(n, repeats, seed, extra_int):
    at = sorted({1 + r % (n - 1) for r in repeats})
    raw, months = monthly_csv(n, at, np.random.default_rng(seed), extra_int)
    table = lagwise.load_table(raw, name="monthly.csv")
    assert table.report.panel is None, table.report.notes
    assert len(table.frame) == n
    assert any("repeats the date" in note for note in table.report.notes)
