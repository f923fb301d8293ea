"""Validated numeric columns for a fit: the rows used over a sample window (missing values dropped
and counted), magnitude checks, labels of the index, and the names a model speaks in."""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import DataError, SpecificationError
from .table import Table

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


def column_ranges(values: np.ndarray):
    """(minimum, maximum) of each column. Column by column: numpy's axis-0 reductions of a
    tall C-ordered array with few columns are several times slower than one reduction per
    strided column."""
    lo = np.array([values[:, j].min() for j in range(values.shape[1])])
    hi = np.array([values[:, j].max() for j in range(values.shape[1])])
    return lo, hi


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
    dropped and counted. Returns (values, index, SampleInfo): values is T x len(cols), with a
    leading column of ones when `ones` (so a design matrix can be a view of it)."""
    for col in cols:
        if col not in non_numeric and col in frame.columns and (
                not pd.api.types.is_numeric_dtype(frame[col])
                or pd.api.types.is_bool_dtype(frame[col])):
            nonnull = frame[col].dropna()
            non_numeric = {**non_numeric, col: nonnull.iloc[0] if len(nonnull) else None}
        if col in non_numeric:
            example = non_numeric[col]
            example = example.item() if isinstance(example, np.generic) else example
            raise DataError(f"column '{col}' is not numeric (it holds values such as "
                            f"{example!r}); choose a numeric column or clean the file")
        if col not in frame.columns:
            raise SpecificationError(f"no {what} named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20])))
    used = frame[cols]
    available = len(used)
    info = SampleInfo(rows_available=available, rows_used=0)
    if sample is not None:
        try:
            start, end = sample
            used = used.loc[start:end]
        except (TypeError, KeyError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the index: {exc}") \
                from None
        info.dropped_window = available - len(used)
    index = used.index
    lead = int(ones)
    values = np.empty((len(used), len(cols) + lead))
    if ones:
        values[:, 0] = 1.0
    for j, col in enumerate(cols):         # column by column: no interleaved temporary
        values[:, j + lead] = used[col].to_numpy(dtype=float)
    finite = np.isfinite(values)
    ok = True if finite.all() else finite.all(axis=1)
    if ok is not True:
        nan = np.isnan(values)
        empty = nan.all(axis=0)
        if empty.any():
            raise DataError(f"column '{cols[int(np.flatnonzero(empty)[0]) - lead]}' has no "
                            "values (every cell is missing"
                            + (" in the sample window)" if sample else ")"))
        if (~finite & ~nan).any():
            col = cols[int(np.flatnonzero((~finite & ~nan).any(axis=0))[0]) - lead]
            raise DataError(f"column '{col}' contains infinite values")
        idx = np.flatnonzero(ok)
        info.dropped_missing = int((~ok).sum())
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
        values = values[ok]
    return values, index, info


def check_horizon(horizon):
    if horizon is not None and (isinstance(horizon, bool)
                                or not isinstance(horizon, (int, np.integer)) or horizon < 1):
        raise SpecificationError(f"horizon must be a whole number of periods >= 1, got {horizon!r}")
    return None if horizon is None else int(horizon)
