"""No silent rescaling of a number column (issue 21, item 5).

A convention (plain, thousands commas, decimal commas) is chosen only when every non-missing cell
is written in it. Property: a column written in one convention reads back equal; the same column
with one cell written in another convention is refused with a DataError naming two rows that
disagree and their values, never read as different numbers.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "150"))


def written(value: float, convention: str) -> str:
    us = f"{value:,.3f}"
    if convention == "plain":
        return f"{value:.3f}"
    if convention == "thousands comma":
        return us
    return us.replace(",", "_").replace(".", ",").replace("_", ".")


#: a cell only its own convention can read (a leading zero group is never a thousands group)
MARKER = {"plain": "0.500", "thousands comma": "1,234.500", "decimal comma": "0,500"}
MARKER_VALUE = {"plain": 0.5, "thousands comma": 1234.5, "decimal comma": 0.5}
#: cells of another convention, foreign to each
FOREIGN = {"plain": ["0,250", "1.234,5", "-2,75"],
           "thousands comma": ["0,250", "1.234,5", "-2,75"],
           "decimal comma": ["0.250", "1,234.5", "-2.75"]}


def csv_bytes(cells, convention):
    sep = ";" if convention == "decimal comma" else ","
    quote = (lambda c: f'"{c}"') if sep == "," else (lambda c: c)
    rows = [f"{i}{sep}{quote(c)}" for i, c in enumerate(cells)]
    return ("y" + sep + "x\n" + "\n".join(rows) + "\n").encode()


values = st.lists(st.one_of(st.floats(-1e7, 1e7, allow_nan=False),
                            st.integers(-10**6, 10**6).map(float),
                            st.floats(-1, 1, allow_nan=False)), min_size=2, max_size=30)
conventions = st.sampled_from(["plain", "thousands comma", "decimal comma"])


@settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(xs=values, convention=conventions, at=st.integers(0, 1000))
def test_one_convention_reads_back_equal(xs, convention, at):
    cells = [written(v, convention) for v in xs]
    want = [round(v, 3) for v in xs]
    pos = at % (len(cells) + 1)
    cells.insert(pos, MARKER[convention])
    want.insert(pos, MARKER_VALUE[convention])
    table = lagwise.load_table(csv_bytes(cells, convention), name="one.csv")
    got = table.frame["x"].to_numpy()
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-12)


@settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(xs=values, convention=conventions, at=st.integers(0, 1000), pick=st.integers(0, 2),
       where=st.integers(0, 1000))
def test_one_foreign_cell_is_refused_never_rescaled(xs, convention, at, pick, where):
    cells = [written(v, convention) for v in xs]
    cells.insert(at % (len(cells) + 1), MARKER[convention])
    foreign = FOREIGN[convention][pick]
    pos = where % (len(cells) + 1)
    cells.insert(pos, foreign)
    with pytest.raises(lagwise.DataError) as err:
        lagwise.load_table(csv_bytes(cells, convention), name="mixed.csv")
    text = str(err.value)
    assert "column 'x' mixes number conventions" in text
    assert f"'{foreign}'" in text and "data row" in text


@pytest.mark.parametrize("cells,convention", [
    (["0.5", "1.234,5", "7"], "decimal comma"),       # the issue: 0.5 read as 5
    (["2,5", "0.5", "1,234"], "plain"),               # 2,5 read as 25
    (["0.125", "1.234,5"], "decimal comma"),          # 0.125 read as 125
])
def test_the_issues_cases_are_refused(cells, convention):
    with pytest.raises(lagwise.DataError, match="mixes number conventions"):
        lagwise.load_table(csv_bytes(cells, convention), name="issue.csv")


def test_ambiguous_thousands_follow_the_files_decimal_mark():
    us = lagwise.load_table(b'y,x\n1,"1,234"\n2,"2,500"\n')
    assert us.frame.x.tolist() == [1234.0, 2500.0]
    eu = lagwise.load_table(b"y;x;z\n1;1,234;0,5\n2;2,500;1,5\n")
    assert eu.frame.x.tolist() == [1.234, 2.5]
    assert "decimal mark" in eu.report.converted["x"]
