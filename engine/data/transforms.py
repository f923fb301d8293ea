"""Column transforms an analyst applies before fitting: lags, leads, differences, logs, forward
sums (an h-period response whose regression errors overlap). Each is named in plain words and
replayable on other data."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from ..errors import DataError, SpecificationError

TRANSFORMS = {
    "lag": "value p periods earlier",
    "lead": "value p periods later",
    "difference": "first difference x_t - x_{t-1}",
    "log": "natural log",
    "log-difference": "log difference log x_t - log x_{t-1}",
    "sum-next": "sum of the next h values x_{t+1} + ... + x_{t+h} (an overlapping h-period "
                "response)",
}


#: Transform names used by earlier versions (settings files keep loading).
OLD_TRANSFORM_NAMES = {"diff": "difference", "dlog": "log-difference", "fsum": "sum-next"}

_OLD_COLUMN = re.compile(r"^(lag|lead|fsum)(\d+)\((.+)\)$|^(diff|log|dlog)\((.+)\)$")


def transform_kind(kind: str) -> str:
    kind = OLD_TRANSFORM_NAMES.get(kind, kind)
    if kind not in TRANSFORMS:
        raise SpecificationError(f"unknown transform {kind!r}; choose one of {', '.join(TRANSFORMS)}")
    return kind


def transform_name(kind: str, column: str, p: int = 1) -> str:
    """The derived column's name, in words: 'x, lag 1', 'y, sum of next 12', 'log x'."""
    kind = transform_kind(kind)
    return {"lag": f"{column}, lag {p}", "lead": f"{column}, lead {p}",
            "difference": f"{column}, difference", "log": f"log {column}",
            "log-difference": f"{column}, log difference",
            "sum-next": f"{column}, sum of next {p}"}[kind]


def current_column_name(name: str) -> str:
    """A derived column named the old way ('fsum12(x)', 'lag1(x)', 'dlog(x)') in today's words;
    other names unchanged."""
    m = _OLD_COLUMN.match(name) if isinstance(name, str) else None
    if not m:
        return name
    if m.group(1):
        return transform_name(m.group(1), m.group(3), int(m.group(2)))
    return transform_name(m.group(4), m.group(5))


#: Transforms that look ahead (a horizon): they must leave at least as many rows as periods.
AHEAD = ("lead", "sum-next")


def check_periods(kind: str, p, n: int) -> int:
    """The periods p of a lag, lead or forward sum over n rows: a whole number >= 1, shorter
    than the sample, and for the look-ahead transforms at most n / 2 (a horizon that leaves
    fewer rows than it spans leaves too few observations)."""
    if isinstance(p, bool) or not isinstance(p, (int, np.integer)) or p < 1:
        text = repr(p) if len(repr(p)) <= 30 else f"a number of {len(repr(p))} digits"
        raise SpecificationError(f"{kind} needs a whole number of periods >= 1, got {text}")
    if p >= n:
        size = str(p) if len(str(p)) <= 30 else f"a number of {len(str(p))} digits"
        raise SpecificationError(f"{kind} of {size} periods is not shorter than the sample "
                                 f"({n} rows)")
    if kind in AHEAD and 2 * p > n:
        raise SpecificationError(f"{kind} of {p} periods leaves too few rows: {n} rows, and a "
                                 f"{kind} of p periods needs at least 2p rows")
    return int(p)


def transform(frame: pd.DataFrame, kind: str, column: str, p: int = 1):
    """Compute one transform. Returns (name, values, horizon or None)."""
    kind = transform_kind(kind)
    if column not in frame.columns:
        raise SpecificationError(f"no numeric column named {column!r} to transform")
    if kind in ("lag", "lead", "sum-next"):
        check_periods(kind, p, len(frame))
    x = frame[column].astype(float)
    name = transform_name(kind, column, p)
    horizon = None
    if kind in ("log", "log-difference"):
        bad = x[(x <= 0) & x.notna()]
        if len(bad):
            raise DataError(f"log of column {column!r} needs positive values; row "
                            f"{plain_label(bad.index[0])} has {float(bad.iloc[0]):g}")
    if kind == "lag":
        values = x.shift(p)
    elif kind == "lead":
        values = x.shift(-p)
    elif kind == "difference":
        values = x.diff()
    elif kind == "log":
        values = np.log(x)
    elif kind == "log-difference":
        values = np.log(x).diff()
    else:  # sum of x_{t+1} .. x_{t+h}
        values = x[::-1].rolling(p, min_periods=p).sum()[::-1].shift(-1)
        horizon = int(p)
    return name, values.rename(name), horizon


def plain_label(value) -> str:
    """A row label as a user reads it: 3, 2001-03-31, never a library repr."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, pd.Timestamp):
        return value.date().isoformat() if value == value.normalize() else str(value)
    return str(value)
