"""Property test: whatever bytes arrive, the loader returns a Table or raises DataError - never
another exception (which the app would turn into a silent failure)."""

import os
import string

import numpy as np
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise

#: LAGWISE_FUZZ_EXAMPLES raises every count (the full corpus: 10000).
EXAMPLES = os.environ.get("LAGWISE_FUZZ_EXAMPLES")


def count(default: int) -> int:
    return int(EXAMPLES) if EXAMPLES else default

cell = st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(str),
                 st.integers(-10**6, 10**6).map(str),
                 st.text(alphabet=string.ascii_letters + string.digits + " .,;-'\"#", max_size=8),
                 st.sampled_from(["", "NA", "nan", "1,5", "1.234,5", "2020-01-31", "N/A"]))


@st.composite
def csv_text(draw):
    sep = draw(st.sampled_from([",", ";", "\t", "|"]))
    ncol = draw(st.integers(1, 5))
    nrow = draw(st.integers(0, 12))
    header = [draw(st.text(alphabet=string.ascii_lowercase + "_ #", min_size=0, max_size=6))
              for _ in range(ncol)]
    rows = [[draw(cell) for _ in range(ncol)] for _ in range(nrow)]
    return "\n".join(sep.join(r) for r in [header] + rows)


@settings(max_examples=count(300), deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=csv_text())
def test_loader_only_raises_data_error_on_text(text):
    try:
        table = lagwise.load_table(text.encode(), name="fuzz.csv")
    except lagwise.DataError:
        return
    assert len(table.frame.columns) >= 1
    assert all(np.issubdtype(t, np.floating) for t in table.frame.dtypes)


@settings(max_examples=count(200), deadline=None)
@given(raw=st.binary(max_size=300))
def test_loader_only_raises_data_error_on_bytes(raw):
    try:
        lagwise.load_table(raw, name="fuzz.bin")
    except lagwise.DataError:
        pass
