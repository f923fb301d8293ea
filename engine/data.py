"""Loading and validating tables, and the transforms an analyst applies to columns.

`load_table` accepts a path or raw bytes of a CSV (delimiter sniffed, thousands separators and
decimal commas handled) or Parquet file and returns a `Table`: a numeric DataFrame plus a
`LoadReport` that says what was left out and why. Nothing is dropped silently.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import DataError, SpecificationError

#: Default upper bound on the size of a file the engine will parse (bytes).
MAX_BYTES = 200 * 1024 * 1024

_MISSING_TOKENS = {"", "na", "n/a", "nan", "null", "none", "#n/a", "."}
_THOUSANDS_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d*)?$")
_THOUSANDS_DOT_DECIMAL_COMMA = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d*)?$")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+$")
_DATE_NAME_HINT = re.compile(r"date|time|month|period|day|week|quarter", re.I)


@dataclass
class LoadReport:
    """What the loader did to the raw file, in words a user can check."""

    source: str = ""
    file_format: str = "csv"
    delimiter: str | None = None
    decimal: str = "."
    rows_read: int = 0
    empty_rows_dropped: int = 0
    non_numeric: dict[str, str] = field(default_factory=dict)   # column -> example bad value
    converted: dict[str, str] = field(default_factory=dict)     # column -> how it was parsed
    missing: dict[str, int] = field(default_factory=dict)       # column -> missing cells
    date_column: str | None = None
    sorted_by_date: bool = False
    notes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        """The report as short sentences, for the CLI and the app."""
        out = [f"read {self.rows_read} rows from {self.source or 'upload'} ({self.file_format}"
               + (f", delimiter {self.delimiter!r}" if self.delimiter else "")
               + (", decimal comma" if self.decimal == "," else "") + ")"]
        if self.empty_rows_dropped:
            out.append(f"dropped {self.empty_rows_dropped} empty rows")
        for col, how in self.converted.items():
            out.append(f"column '{col}' read as numbers after {how}")
        for col, example in self.non_numeric.items():
            out.append(f"column '{col}' left out: not numeric (e.g. {example!r})")
        for col, n in self.missing.items():
            if n:
                out.append(f"column '{col}' has {n} missing values (rows with them are dropped "
                           "when the column is used)")
        if self.date_column:
            out.append(f"column '{self.date_column}' used as the date index"
                       + (" (rows sorted by date)" if self.sorted_by_date else ""))
        out.extend(self.notes)
        return out


@dataclass
class Table:
    """A validated numeric table.

    `frame` holds only numeric columns (float64), indexed by the detected date column when there
    is one (else by row number). `horizons` records, for each column made by a forward sum, the
    number of periods h it sums: its regression errors overlap (MA(h-1)).
    """

    frame: pd.DataFrame
    report: LoadReport = field(default_factory=LoadReport)
    horizons: dict[str, int] = field(default_factory=dict)
    #: transforms applied so far, in order, as (kind, column, p): replayable on other data
    transforms: list[tuple[str, str, int]] = field(default_factory=list)

    @property
    def columns(self) -> list[str]:
        return list(self.frame.columns)

    def summary(self) -> pd.DataFrame:
        """Per-column count, missing, mean and standard deviation."""
        f = self.frame
        return pd.DataFrame({"count": f.count(), "missing": f.isna().sum(),
                             "mean": f.mean(), "sd": f.std()})

    def with_transform(self, kind: str, column: str, p: int = 1) -> tuple["Table", str]:
        """Return a new Table with one transformed column added, and that column's name."""
        kind = transform_kind(kind)
        name, values, horizon = transform(self.frame, kind, column, p)
        frame = self.frame.copy()
        frame[name] = values
        horizons = dict(self.horizons)
        if horizon:
            horizons[name] = horizon
        steps = list(self.transforms) + [(kind, column, int(p))]
        return replace(self, frame=frame, horizons=horizons, transforms=steps), name

    def replay(self, steps) -> "Table":
        """Apply saved transforms [(kind, column, p), ...], skipping columns already present."""
        table = self
        for kind, column, p in steps:
            column = current_column_name(column)
            if transform_name(kind, column, int(p)) not in table.frame.columns:
                table, _ = table.with_transform(kind, column, int(p))
        return table


# --------------------------------------------------------------------------- transforms

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


def transform(frame: pd.DataFrame, kind: str, column: str, p: int = 1):
    """Compute one transform. Returns (name, values, horizon or None)."""
    kind = transform_kind(kind)
    if column not in frame.columns:
        raise SpecificationError(f"no numeric column named {column!r} to transform")
    if kind in ("lag", "lead", "sum-next"):
        if isinstance(p, bool) or not isinstance(p, (int, np.integer)) or p < 1:
            raise SpecificationError(f"{kind} needs a whole number of periods >= 1, got {p!r}")
        if p >= len(frame):
            raise SpecificationError(f"{kind} of {p} periods is not shorter than the sample "
                                     f"({len(frame)} rows)")
    x = frame[column].astype(float)
    name = transform_name(kind, column, p)
    horizon = None
    if kind in ("log", "log-difference"):
        bad = x[(x <= 0) & x.notna()]
        if len(bad):
            raise DataError(f"log of column {column!r} needs positive values; row "
                            f"{_plain(bad.index[0])} has {float(bad.iloc[0]):g}")
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


def _plain(value) -> str:
    """A row label as a user reads it: 3, 2001-03-31, never a library repr."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, pd.Timestamp):
        return value.date().isoformat() if value == value.normalize() else str(value)
    return str(value)


# --------------------------------------------------------------------------- loading

def load_table(source, *, name: str | None = None, max_bytes: int = MAX_BYTES) -> Table:
    """Load a CSV or Parquet file from a path or raw bytes into a validated `Table`.

    Raises `DataError` with a message naming the problem for unreadable, empty, oversized or
    entirely non-numeric input.
    """
    if isinstance(source, (bytes, bytearray, memoryview)):
        raw = bytes(source)
        label = name or "upload"
    else:
        path = Path(source)
        label = name or path.name
        if not path.is_file():
            raise DataError(f"no such file: {path}")
        size = path.stat().st_size
        if size > max_bytes:
            raise DataError(f"{label} is {size / 2**20:.1f} MiB; the limit is "
                            f"{max_bytes / 2**20:.0f} MiB")
        raw = path.read_bytes()
    if len(raw) > max_bytes:
        raise DataError(f"{label} is {len(raw) / 2**20:.1f} MiB; the limit is "
                        f"{max_bytes / 2**20:.0f} MiB")
    if not raw.strip():
        raise DataError(f"{label} is empty")
    if raw[:4] == b"PAR1":
        return _load_parquet(raw, label)
    if raw[:4] == b"PK\x03\x04" or raw[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        raise DataError(f"{label} looks like a spreadsheet workbook; save it as CSV and load that")
    return _load_csv(raw, label)


def _load_parquet(raw: bytes, label: str) -> Table:
    try:
        frame = pd.read_parquet(io.BytesIO(raw))
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise DataError(f"{label} could not be read as Parquet: {exc}") from None
    report = LoadReport(source=label, file_format="parquet", rows_read=len(frame))
    text = frame.astype("string")
    return _finish(text.reset_index(drop=True), report, native=frame.reset_index(drop=True))


def _decode(raw: bytes, label: str) -> str:
    if b"\x00" in raw[:4096]:
        raise DataError(f"{label} is not a text file (it contains binary data)")
    for enc in ("utf-8-sig", "cp1252"):
        try:
            return raw.decode(enc)
        except UnicodeDecodeError:
            continue
    raise DataError(f"{label} is not valid UTF-8 or Windows-1252 text")  # pragma: no cover


def _load_csv(raw: bytes, label: str) -> Table:
    text = _decode(raw, label)
    lines = text.splitlines()
    n_comment = 0
    while n_comment < len(lines) and lines[n_comment].lstrip().startswith("#"):
        n_comment += 1
    if n_comment:
        text = "\n".join(lines[n_comment:])
    if not text.strip():
        raise DataError(f"{label} has no table after its comment lines")
    sample = "\n".join(text.splitlines()[:50])
    try:
        delimiter = csv.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv.Error:
        delimiter = ","
    try:
        header = next(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter), [])
    except csv.Error as exc:
        raise DataError(f"{label} could not be read as a table: {exc}") from None
    names = [h.strip() for h in header]
    if len(set(names)) != len(names):
        dup = next(h for h in names if names.count(h) > 1)
        raise DataError(f"{label} has repeated column names ('{dup}')")
    try:
        frame = pd.read_csv(io.StringIO(text), sep=delimiter, dtype=str, keep_default_na=False,
                            skipinitialspace=True)
    except Exception as exc:  # pandas.errors.ParserError and friends
        raise DataError(f"{label} could not be read as a table: {exc}") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    if len(frame.columns) < 1 or len(frame) == 0:
        raise DataError(f"{label} has a header but no data rows")
    if len(set(frame.columns)) != len(frame.columns):
        raise DataError(f"{label} has repeated column names")
    report = LoadReport(source=label, file_format="csv", delimiter=delimiter, rows_read=len(frame))
    if n_comment:
        report.notes.append(f"skipped {n_comment} comment line(s) starting with '#'")
    return _finish(frame, report)


def _is_missing(s: pd.Series) -> pd.Series:
    return s.isna() | s.str.strip().str.lower().isin(_MISSING_TOKENS)


def _to_number(s: pd.Series, decimal_comma_file: bool):
    """Parse a string column as floats. Returns (values or None, how, example bad value)."""
    miss = _is_missing(s)
    vals = s[~miss].str.strip().str.replace(r"[\s\u00a0\u202f]", "", regex=True)
    if vals.empty:
        return pd.Series(np.nan, index=s.index), None, None
    parsed = pd.to_numeric(vals, errors="coerce")
    how = None
    if parsed.isna().any():
        attempts = []
        if vals.str.match(_THOUSANDS_COMMA).any() and not decimal_comma_file:
            attempts.append(("removing thousands separators ','", vals.str.replace(",", "")))
        attempts.append(("reading ',' as the decimal mark",
                         vals.str.replace(".", "", regex=False).str.replace(",", ".")
                         if vals.str.match(_THOUSANDS_DOT_DECIMAL_COMMA).any()
                         else vals.str.replace(",", ".")))
        if vals.str.match(_THOUSANDS_COMMA).any() and decimal_comma_file:
            attempts.append(("removing thousands separators ','", vals.str.replace(",", "")))
        for label, candidate in attempts:
            trial = pd.to_numeric(candidate, errors="coerce")
            if trial.notna().all():
                parsed, how = trial, label
                break
    if parsed.isna().any():
        bad = vals[parsed.isna()]
        return None, None, bad.iloc[0]
    out = pd.Series(np.nan, index=s.index, dtype=float)
    out[~miss] = parsed.astype(float).to_numpy()
    return out, how, None


def _finish(text: pd.DataFrame, report: LoadReport, native: pd.DataFrame | None = None) -> Table:
    empty = text.apply(_is_missing).all(axis=1)
    if empty.any():
        report.empty_rows_dropped = int(empty.sum())
        text = text[~empty]
        if native is not None:
            native = native[~empty]
    if len(text) == 0:
        raise DataError(f"{report.source} has no non-empty rows")
    decimal_comma_file = report.delimiter in (";", "\t") and bool(
        text.apply(lambda c: c.str.match(_DECIMAL_COMMA).mean()).max() > 0.5)
    if decimal_comma_file:
        report.decimal = ","
    numeric: dict[str, pd.Series] = {}
    rejected: dict[str, str] = {}
    for col in text.columns:
        if native is not None and pd.api.types.is_numeric_dtype(native[col]) \
                and not pd.api.types.is_bool_dtype(native[col]):
            numeric[col] = native[col].astype(float)
            continue
        values, how, bad = _to_number(text[col], decimal_comma_file)
        if values is None:
            rejected[col] = bad
        else:
            numeric[col] = values
            if how:
                report.converted[col] = how
    # a date column: a rejected (text) column that parses entirely as dates
    date_col = None
    candidates = sorted(rejected, key=lambda c: 0 if _DATE_NAME_HINT.search(c) else 1)
    for col in candidates:
        raw = text[col]
        if native is not None and pd.api.types.is_datetime64_any_dtype(native[col]):
            dates = native[col]
        else:
            dates = _parse_dates(raw)
        if dates is not None and dates.notna().all():
            if dates.duplicated().any():
                report.notes.append(f"column '{col}' looks like dates but has repeated values; "
                                    "not used as the time index")
                continue
            date_col = col
            break
    if date_col is not None:
        rejected.pop(date_col)
        report.date_column = date_col
    if not numeric:
        raise DataError(f"{report.source} has no numeric columns"
                        + (f" (e.g. column '{next(iter(rejected))}' holds "
                           f"{next(iter(rejected.values()))!r})" if rejected else ""))
    frame = pd.DataFrame(numeric, index=text.index)
    if date_col is not None:
        frame.index = pd.DatetimeIndex(dates.to_numpy(), name=date_col)
        if not frame.index.is_monotonic_increasing:
            frame = frame.sort_index()
            report.sorted_by_date = True
    else:
        frame.index = pd.RangeIndex(len(frame), name="row")
    report.non_numeric = rejected
    report.missing = {c: int(n) for c, n in frame.isna().sum().items() if n}
    return Table(frame=frame, report=report)


def _parse_dates(raw: pd.Series):
    s = raw.str.strip()
    if not s.str.contains(r"\d").all():
        return None
    for kwargs in ({"format": "ISO8601"}, {"format": "mixed", "dayfirst": False}):
        try:
            return pd.to_datetime(s, errors="raise", **kwargs)
        except (ValueError, TypeError, OverflowError):
            continue
    return None


def as_table(data) -> Table:
    """Accept a Table or a DataFrame (numeric columns are used as they are)."""
    if isinstance(data, Table):
        return data
    if isinstance(data, pd.DataFrame):
        report = LoadReport(source="DataFrame", file_format="frame", rows_read=len(data))
        numeric = {}
        for col in data.columns:
            s = data[col]
            if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
                numeric[str(col)] = s.astype(float)
            else:
                nonnull = s.dropna()
                report.non_numeric[str(col)] = nonnull.iloc[0] if len(nonnull) else None
        frame = pd.DataFrame(numeric, index=data.index)
        report.missing = {c: int(n) for c, n in frame.isna().sum().items() if n}
        return Table(frame=frame, report=report)
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")
