"""Validated numeric columns for a fit: the rows used over a sample window (missing values dropped
and counted), magnitude checks, labels of the index, and the names a model speaks in."""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import DataError, SpecificationError
from .table import Table, example_value

INTERCEPT = "intercept"


#: Columns whose largest absolute value exceeds this (or whose nonzero values are all below its
#: inverse) are refused: sums of their squares over the sample would overflow (underflow) double
#: precision, and every standard error built from them would be infinite (zero).
SAFE_MAGNITUDE = 1e120


@dataclass
class SampleInfo:
    """Which rows entered the fit, and why others did not."""

    rows_available: int
    rows_used: int
    dropped_missing: int = 0
    dropped_interior: int = 0
    dropped_window: int = 0
    first: object = None
    last: object = None
    notes: list[str] = field(default_factory=list)
    #: positions of the rows used in the frame they were read from (None: not recorded)
    rows: np.ndarray | None = field(default=None, repr=False)


def column_ranges(values: np.ndarray):
    """(minimum, maximum) of each column (NaN where a column holds one). One reduction per
    column: contiguous for a column-major block (the engine's layout, about 0.3 ms per million
    values); for a row-major block, numpy's axis-0 reductions of a tall array with few columns
    are several times slower than one reduction per strided column."""
    lo = np.array([values[:, j].min() for j in range(values.shape[1])])
    hi = np.array([values[:, j].max() for j in range(values.shape[1])])
    return lo, hi


def column_block(columns, ones: bool = False):
    """A column-major float block of `columns` (arrays or Series of one length; a leading column
    of ones when `ones`), with each column's minimum and maximum taken while the column is in
    cache: (values, lo, hi). A NaN or infinite value shows in lo or hi, so clean data needs no
    second scan."""
    columns = list(columns)
    lead = int(ones)
    n = len(columns[0]) if columns else 0
    values = np.empty((n, len(columns) + lead), order="F")
    lo, hi = np.empty(values.shape[1]), np.empty(values.shape[1])
    if not n:
        lo[:] = hi[:] = np.nan
    elif ones:
        values[:, 0] = 1.0
        lo[0] = hi[0] = 1.0
    for j, column in enumerate(columns):
        target = values[:, j + lead]
        target[...] = column.to_numpy(dtype=float) if hasattr(column, "to_numpy") else column
        if n:
            lo[j + lead], hi[j + lead] = target.min(), target.max()
    return values, lo, hi


def take_rows(values: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Rows `idx` of a column-major block, column-major."""
    kept = np.empty((idx.size, values.shape[1]), order="F")
    for j in range(values.shape[1]):
        np.take(values[:, j], idx, out=kept[:, j])
    return kept


def check_magnitudes(cols, lo, hi, values, lead: int = 0) -> None:
    """Refuse columns whose squares over the sample cannot be represented (see SAFE_MAGNITUDE),
    naming the column and what to do."""
    big = np.maximum(np.abs(lo), np.abs(hi))[lead:]
    for col, m, j in zip(cols, big, range(lead, lead + len(cols))):
        if m > SAFE_MAGNITUDE:
            raise SpecificationError(f"column '{col}' holds values as large as {m:.3g}: sums of "
                                     "their squares overflow double precision. Rescale it (for "
                                     "example divide by a power of ten) and fit again.")
        if 0 < m < 1.0 / SAFE_MAGNITUDE:
            raise SpecificationError(f"column '{col}' holds values no larger than {m:.3g}: their "
                                     "squares underflow double precision. Rescale it (for "
                                     "example multiply by a power of ten) and fit again.")


def index_label(value):
    """Dates without a midnight time part, other labels as plain Python values."""
    if isinstance(value, pd.Timestamp) and value == value.normalize():
        return value.date().isoformat()
    if isinstance(value, np.generic):
        return value.item()
    return value


def as_list(names) -> list[str]:
    """Column names from a list or a comma-separated string. A comma followed by a space is part
    of a name (derived columns are named like 'x, lag 1'), so 'a,x, lag 1' is ['a', 'x, lag 1']."""
    if names is None:
        return []
    if isinstance(names, str):
        return [r.strip() for r in re.split(r",(?!\s)", names) if r.strip()]
    return [str(r) for r in names]


def frame_and_meta(data):
    """(table or None, frame, non-numeric columns, horizons) for a Table or a DataFrame."""
    if isinstance(data, Table):
        return data, data.frame, data.report.non_numeric, data.horizons
    if isinstance(data, pd.DataFrame):
        return None, data, {}, {}
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")


def numeric_block(frame, cols, non_numeric, sample, what="column", ones: bool = False):
    """Validated float values of `cols` over the sample window, rows with a missing value
    dropped and counted. Returns (values, index, SampleInfo, (lo, hi)): values is T x len(cols)
    in column-major order (each column one contiguous copy of the frame's column; a design
    matrix can be a view of it), with a leading column of ones when `ones`; lo and hi are each
    column's minimum and maximum over the rows kept, taken while the column is in cache (they
    also show whether any value is missing or infinite, so clean data is not scanned again)."""
    series = {}
    for col in cols:
        if col in frame.columns:
            series[col] = frame[col]
        if col not in non_numeric and col in series and (
                not pd.api.types.is_numeric_dtype(series[col])
                or pd.api.types.is_bool_dtype(series[col])):
            nonnull = series[col].dropna()
            non_numeric = {**non_numeric, col: nonnull.iloc[0] if len(nonnull) else None}
        if col in non_numeric:
            example = non_numeric[col]
            example = example.item() if isinstance(example, np.generic) else example
            raise DataError(f"column '{col}' is not numeric (it holds values such as "
                            f"'{example_value(example)}'); choose a numeric column or clean "
                            "the file")
        if col not in frame.columns:
            raise SpecificationError(f"no {what} named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20])))
    index = frame.index
    available = len(index)
    info = SampleInfo(rows_available=available, rows_used=0)
    rows = np.arange(available)           # positions in the frame of the rows used
    window = None
    if sample is not None:
        try:
            start, end = sample
            window = index.slice_indexer(start, end)       # what .loc[start:end] selects
        except (TypeError, KeyError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the index: {exc}") \
                from None
        index = index[window]
        rows = rows[window]
        info.dropped_window = available - len(index)
    info.rows = rows
    lead = int(ones)
    n = len(index)
    values, lo, hi = column_block([series[col] if window is None else series[col].iloc[window]
                                   for col in cols], ones=ones)
    if not n or np.isfinite(lo).all() and np.isfinite(hi).all():
        return values, index, info, (lo, hi)
    # some value is missing or infinite: find the rows (only columns that hold one)
    suspect = [j for j in range(values.shape[1]) if not (np.isfinite(lo[j]) and np.isfinite(hi[j]))]
    nan = {j: np.isnan(values[:, j]) for j in suspect}
    for j in suspect:
        if nan[j].all():
            raise DataError(f"column '{cols[j - lead]}' has no values (every cell is missing"
                            + (" in the sample window)" if sample else ")"))
    for j in suspect:
        if np.isinf(values[:, j]).any():
            raise DataError(f"column '{cols[j - lead]}' contains infinite values")
    ok = np.ones(n, dtype=bool)
    for j in suspect:
        ok &= ~nan[j]
    idx = np.flatnonzero(ok)
    info.dropped_missing = int(n - idx.size)
    if idx.size:
        interior = int((~ok[idx[0]: idx[-1] + 1]).sum())
        info.dropped_interior = interior
        if interior:
            info.notes.append(
                f"{interior} rows inside the sample have missing values and were dropped; "
                "the remaining rows are treated as consecutive periods by the lag-based "
                "estimators")
    info.notes.insert(0, f"{info.dropped_missing} rows left out where a used column has no "
                         "value (leads, lags and forward sums leave such rows at the ends)")
    index = index[ok]
    info.rows = rows[ok]
    kept = take_rows(values, idx)
    if idx.size:
        lo, hi = column_ranges(kept)
    return kept, index, info, (lo, hi)


def shown_number(value) -> str:
    """A number as a message quotes it (an integer of hundreds of digits by its size)."""
    text = repr(value)
    return text if len(text) <= 30 else f"a number of {len(text)} digits"


def check_horizon(horizon, nobs: int | None = None):
    """A horizon h: a whole number >= 1 and, given the usable observations T, at most T / 2
    (an overlapping h-period response needs at least two non-overlapping h-period sums)."""
    if horizon is not None and (isinstance(horizon, bool)
                                or not isinstance(horizon, (int, np.integer)) or horizon < 1):
        raise SpecificationError(f"horizon must be a whole number of periods >= 1, got "
                                 f"{shown_number(horizon)}")
    if horizon is None:
        return None
    if nobs is not None and 2 * horizon > nobs:
        raise SpecificationError(
            f"horizon h = {shown_number(int(horizon))} leaves too few observations: T = {nobs}, "
            "and an overlapping h-period response needs T >= 2h (at least two non-overlapping "
            "h-period sums). Use a shorter horizon or more data.")
    return int(horizon)
