"""Reading files: `load_table` accepts a path or raw bytes of a CSV (delimiter sniffed, thousands
separators and decimal commas handled) or Parquet file and returns a `Table`: a numeric DataFrame
plus a `LoadReport` that says what was left out and why. Nothing is dropped silently."""

from __future__ import annotations

import csv
import hashlib
import io
import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import DataError
from .dates import parse_dates, report_spacing
from .table import LoadReport, Table


#: Default upper bound on the size of a file the engine will parse (bytes).
MAX_BYTES = 200 * 1024 * 1024

_MISSING_TOKENS = {"", "na", "n/a", "nan", "null", "none", "#n/a", "."}

_THOUSANDS_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d*)?$")

_THOUSANDS_DOT_DECIMAL_COMMA = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d*)?$")

_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+$")

_DATE_NAME_HINT = re.compile(r"date|time|month|period|day|week|quarter", re.I)


#: Limits on what a file may hold, checked before the parsing work starts (stated in the README
#: and on screen): columns, characters in one row, and cells (rows x columns) after decompression.
MAX_COLUMNS = 500

MAX_LINE_CHARS = 100_000

MAX_CELLS = 50_000_000

_NA_VALUES = sorted({v for t in _MISSING_TOKENS for v in (t, t.upper(), t.title())})


def load_table(source, *, name: str | None = None, max_bytes: int = MAX_BYTES,
               max_cells: int = MAX_CELLS, progress=None) -> Table:
    """Load a CSV or Parquet file from a path or raw bytes into a validated `Table`.

    Raises `DataError` with a message naming the problem (and the row or column where there is
    one) for unreadable, empty, oversized or entirely non-numeric input. Values are never
    shifted between columns: a row with more fields than the header is read correctly (a
    trailing delimiter on every row) or refused with its row number. progress(done, total,
    what) is called before each stage (layout checks, parsing, column checks) and at the end.
    """
    step = progress or (lambda done, total, what: None)
    step(0, 3, "checking the file's layout")
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
    if raw[:4] == b"PK\x03\x04" or raw[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        raise DataError(f"{label} looks like a spreadsheet workbook; save it as CSV and load that")
    table = (_load_parquet if raw[:4] == b"PAR1" else _load_csv)(raw, label, max_cells, step)
    table.report.sha256 = hashlib.sha256(raw).hexdigest()
    step(3, 3, "")
    return table


def _load_parquet(raw: bytes, label: str, max_cells: int, step) -> Table:
    try:
        pf = pq.ParquetFile(io.BytesIO(raw))
        meta, schema = pf.metadata, pf.schema_arrow
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise DataError(f"{label} could not be read as Parquet: {_oneline(exc)}") from None
    n_rows, names = meta.num_rows, list(schema.names)
    if n_rows == 0:
        raise DataError(f"{label} has no rows")
    if len(names) > MAX_COLUMNS:
        raise DataError(f"{label} has {len(names)} columns; the limit is {MAX_COLUMNS}")
    if n_rows * max(len(names), 1) > max_cells:
        raise DataError(f"{label} holds {n_rows:,} rows x {len(names)} columns; the limit is "
                        f"{max_cells:,} cells (rows x columns). Load fewer rows or columns.")
    dup = [n for n in set(names) if names.count(n) > 1]
    if dup:
        raise DataError(f"{label} has repeated column names ('{sorted(dup)[0]}')")
    report = LoadReport(source=label, file_format="parquet", rows_read=n_rows)
    keep = []
    for fld in schema:
        if pa.types.is_binary(fld.type) or pa.types.is_large_binary(fld.type) \
                or pa.types.is_fixed_size_binary(fld.type):
            report.non_numeric[fld.name] = "binary data"
        elif pa.types.is_nested(fld.type):
            report.non_numeric[fld.name] = f"nested values ({fld.type})"
        else:
            keep.append(fld.name)
    if not keep:
        raise DataError(f"{label} has no columns that can hold numbers")
    step(1, 3, f"reading {n_rows:,} rows")
    try:
        frame = pf.read(columns=keep).to_pandas()
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise DataError(f"{label} could not be read as Parquet: {_oneline(exc)}") from None
    if isinstance(frame.columns, pd.MultiIndex):
        frame.columns = [" / ".join(str(x) for x in col if str(x)) for col in frame.columns]
        report.notes.append("the file's column names have several levels; joined with ' / '")
    frame.columns = [str(c) for c in frame.columns]
    if isinstance(frame.index, pd.DatetimeIndex):
        name = frame.index.name or "date"
        report.notes.append(f"the file's date index ('{name}') is used as the time index")
        frame = frame.reset_index(names=name if name not in frame.columns else f"{name} (index)")
    elif not isinstance(frame.index, pd.RangeIndex):
        frame = frame.reset_index()
        frame.columns = [str(c) for c in frame.columns]
    else:
        frame = frame.reset_index(drop=True)
    step(2, 3, "checking the columns")
    return _finish(frame, report)


def _decode(raw: bytes, label: str) -> str:
    if b"\x00" in raw[:4096]:
        raise DataError(f"{label} is not a text file (it contains binary data)")
    for enc in ("utf-8-sig", "cp1252"):
        try:
            return raw.decode(enc)
        except UnicodeDecodeError:
            continue
    raise DataError(f"{label} is not valid UTF-8 or Windows-1252 text")  # pragma: no cover


def _oneline(exc) -> str:
    return " ".join(str(exc).split())


def _check_line_lengths(text: str, label: str, first_row: int) -> None:
    """Refuse a row longer than MAX_LINE_CHARS before any parsing work, naming it."""
    codes = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)   # bytes: at least the chars
    ends = np.flatnonzero(codes == 10)
    bounds = np.concatenate([[-1], ends, [len(codes)]])
    lengths = np.diff(bounds) - 1
    longest = int(lengths.max()) if lengths.size else 0
    if longest > MAX_LINE_CHARS:
        row = int(np.argmax(lengths)) + first_row
        raise DataError(f"{label}: row {row} is {longest:,} characters long; rows are limited to "
                        f"{MAX_LINE_CHARS:,} characters (and files to {MAX_COLUMNS} columns)")


def _sniff(text: str) -> str:
    sample = "\n".join(text[:20_000].splitlines()[:20])
    try:
        return csv.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv.Error:
        counts = {d: sample.count(d) for d in ",;\t|"}
        best = max(counts, key=counts.get)
        return best if counts[best] else ","


def _strip_trailing_delimiters(text: str, delimiter: str, report: LoadReport) -> str:
    """A delimiter at the end of every data row (a common export habit) adds an empty last
    field; drop it instead of letting the values shift into the neighbouring columns."""
    lines = text.split("\n")
    body = [ln.rstrip("\r") for ln in lines[1:] if ln.strip()]
    if not body or not all(ln.endswith(delimiter) for ln in body):
        return text
    header = lines[0].rstrip("\r")
    n_header = len(next(csv.reader([header], delimiter=delimiter)))
    n_first = len(next(csv.reader([body[0]], delimiter=delimiter)))
    if n_first != n_header + 1 and not (header.endswith(delimiter) and n_first == n_header):
        return text
    fixed = [lines[0].rstrip("\r")[:-1] if header.endswith(delimiter) else lines[0]]
    fixed += [ln.rstrip("\r")[:-1] if ln.strip() else ln for ln in lines[1:]]
    report.notes.append(f"every row ended with the delimiter {delimiter!r}: the empty last "
                        "field was ignored")
    return "\n".join(fixed)


def _row_with_extra_fields(text: str, delimiter: str, n_header: int) -> tuple[int, int] | None:
    for i, row in enumerate(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)):
        if len(row) > n_header and any(cell.strip() for cell in row[n_header:]):
            return i + 1, len(row)
    return None


def _too_many_fields(label, row, fields, n_header) -> DataError:
    return DataError(f"{label}: row {row} has {fields} fields but the header names {n_header} "
                     "columns; reading it would shift values into other columns. Check the "
                     "delimiter, or quote the fields that contain it.")


def _load_csv(raw: bytes, label: str, max_cells: int, step) -> Table:
    text = _decode(raw, label)
    n_comment = 0
    pos = 0
    while True:
        nl = text.find("\n", pos)
        line = text[pos: nl if nl >= 0 else len(text)]
        if not line.lstrip().startswith("#"):
            break
        n_comment += 1
        if nl < 0:
            pos = len(text)
            break
        pos = nl + 1
    text = text[pos:]
    if not text.strip():
        raise DataError(f"{label} has no table after its comment lines")
    _check_line_lengths(text, label, n_comment + 1)
    delimiter = _sniff(text)
    try:
        header = next(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter), [])
    except csv.Error as exc:
        raise DataError(f"{label} could not be read as a table: {_oneline(exc)}") from None
    if len(header) > MAX_COLUMNS:
        raise DataError(f"{label} has {len(header)} columns; the limit is {MAX_COLUMNS}")
    names = [h.strip() for h in header]
    dup = [h for h in names if h and names.count(h) > 1]
    if dup:
        raise DataError(f"{label} has repeated column names ('{dup[0]}')")
    report = LoadReport(source=label, file_format="csv", delimiter=delimiter)
    text = _strip_trailing_delimiters(text, delimiter, report)
    step(1, 3, "parsing rows")
    frame = _read_csv_frame(text, delimiter, label, n_comment, len(header))
    frame.columns = [str(c).strip() for c in frame.columns]
    if len(frame.columns) < 1 or len(frame) == 0:
        raise DataError(f"{label} has a header but no data rows")
    if len(frame) * len(frame.columns) > max_cells:
        raise DataError(f"{label} holds {len(frame):,} rows x {len(frame.columns)} columns; the "
                        f"limit is {max_cells:,} cells (rows x columns)")
    report.rows_read = len(frame)
    if n_comment:
        report.notes.append(f"skipped {n_comment} comment line(s) starting with '#'")
    step(2, 3, f"checking {len(frame.columns)} columns of {len(frame):,} rows")
    return _finish(frame, report)


def _read_csv_frame(text, delimiter, label, n_comment, n_header) -> pd.DataFrame:
    """pandas' C parser with numbers inferred (clean numeric columns never pass through
    strings); a row longer than the header is an error naming it, never a shift."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return pd.read_csv(io.StringIO(text), sep=delimiter, header=0, index_col=False,
                               na_values=_NA_VALUES, keep_default_na=True,
                               skipinitialspace=True, low_memory=False, quotechar='"')
    except pd.errors.ParserWarning:
        found = _row_with_extra_fields(text, delimiter, n_header)
        row, fields = found if found else (None, None)
        if row is None:
            raise DataError(f"{label}: some rows have more fields than the header") from None
        raise _too_many_fields(label, row + n_comment, fields, n_header) from None
    except pd.errors.ParserError as exc:
        m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if m:
            raise _too_many_fields(label, int(m.group(2)) + n_comment, int(m.group(3)),
                                   int(m.group(1))) from None
        raise DataError(f"{label} could not be read as a table: {_oneline(exc)}") from None
    except (ValueError, csv.Error, UnicodeError) as exc:
        raise DataError(f"{label} could not be read as a table: {_oneline(exc)}") from None


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
        return None, None, str(bad.iloc[0])
    out = pd.Series(np.nan, index=s.index, dtype=float)
    out[~miss] = parsed.astype(float).to_numpy()
    return out, how, None


def _kind(s: pd.Series) -> str:
    if pd.api.types.is_bool_dtype(s):
        return "bool"
    if pd.api.types.is_numeric_dtype(s):
        return "number"
    if pd.api.types.is_datetime64_any_dtype(s):
        return "date"
    return "text"


def _finish(frame: pd.DataFrame, report: LoadReport) -> Table:
    """Numbers from a mixed frame (numeric columns as they are, text columns parsed), the date
    index, empty rows and unnamed empty columns dropped, every decision reported."""
    kinds = {c: _kind(frame[c]) for c in frame.columns}
    text = {c: frame[c].astype("string") for c, k in kinds.items() if k in ("text", "bool")}
    missing = {c: (frame[c].isna() if k in ("number", "date") else _is_missing(text[c]))
               for c, k in kinds.items()}
    empty = pd.concat(missing, axis=1).all(axis=1).to_numpy() if missing else \
        np.zeros(len(frame), dtype=bool)
    for col in [c for c in frame.columns if (not c or c.startswith("Unnamed: "))
                and missing[c].all()]:
        report.notes.append("an unnamed, empty column was left out")
        kinds.pop(col)
    if empty.any():
        report.empty_rows_dropped = int(empty.sum())
        frame = frame[~empty]
        text = {c: t[~empty] for c, t in text.items()}
    if len(frame) == 0:
        raise DataError(f"{report.source} has no non-empty rows")
    decimal_comma_file = report.delimiter in (";", "\t") and any(
        text[c].str.match(_DECIMAL_COMMA).mean() > 0.5 for c in text if kinds.get(c) == "text")
    if decimal_comma_file:
        report.decimal = ","
    numeric: dict[str, np.ndarray] = {}
    rejected: dict[str, str] = {}
    for col, kind in kinds.items():
        if kind == "number":
            numeric[col] = frame[col].to_numpy(dtype=float, na_value=np.nan)
        elif kind == "bool":
            rejected[col] = str(text[col].dropna().iloc[0]) if text[col].notna().any() else ""
        elif kind == "text":
            values, how, bad = _to_number(text[col], decimal_comma_file)
            if values is None:
                rejected[col] = bad
            else:
                numeric[col] = values.to_numpy()
                if how:
                    report.converted[col] = how
    dates, date_col = _date_index(frame, text, kinds, rejected, report)
    if not numeric:
        raise DataError(f"{report.source} has no numeric columns"
                        + (f" (e.g. column '{next(iter(rejected))}' holds "
                           f"{next(iter(rejected.values()))!r})" if rejected else ""))
    out = pd.DataFrame(numeric, index=pd.RangeIndex(len(frame), name="row"))
    labels = pd.DataFrame({c: text[c].astype("category") for c in rejected if c in text},
                          index=out.index)
    if date_col is not None:
        order = np.argsort(dates.to_numpy(), kind="stable")
        out.index = pd.DatetimeIndex(dates.to_numpy(), name=date_col)
        if not out.index.is_monotonic_increasing:
            out, labels = out.iloc[order], labels.iloc[order]
            report.sorted_by_date = True
        labels.index = out.index
        report_spacing(out.index, report)
    else:
        _report_panel(frame, kinds, text, rejected, report)
    report.non_numeric = {**report.non_numeric, **rejected}
    report.missing = {c: int(n) for c, n in out.isna().sum().items() if n}
    return Table(frame=out, report=report, labels=labels)


def _date_index(frame, text, kinds, rejected, report):
    """A text (or native date) column that parses entirely as distinct dates becomes the index."""
    candidates = [c for c, k in kinds.items() if k == "date"] + \
        sorted([c for c in rejected if c in text],
               key=lambda c: 0 if _DATE_NAME_HINT.search(c) else 1)
    for col in candidates:
        dates = frame[col] if kinds[col] == "date" else parse_dates(text[col])
        if dates is None or not dates.notna().all():
            continue
        if dates.duplicated().any():
            report.notes.append(f"column '{col}' holds dates with repeated values; it is not "
                                "used as the time index")
            continue
        rejected.pop(col, None)
        report.date_column = col
        return pd.Series(dates.to_numpy(), index=frame.index), col
    return None, None


def _report_panel(frame, kinds, text, rejected, report) -> None:
    """A date column with repeated dates next to an identifier column whose pairs with it are
    unique is a stacked panel: say so (the rows are not one time series)."""
    date_cols = [c for c in rejected if c in text and _DATE_NAME_HINT.search(c)]
    for dcol in date_cols:
        dates = parse_dates(text[dcol])
        if dates is None or not dates.notna().all() or not dates.duplicated().any():
            continue
        for icol in [c for c in frame.columns if c != dcol and kinds.get(c) in ("text", "number")]:
            ids = frame[icol]
            if ids.isna().any() or ids.nunique() < 2:
                continue
            pairs = pd.DataFrame({"i": ids.to_numpy(), "t": dates.to_numpy()})
            if not pairs.duplicated().any():
                report.panel = (icol, dcol)
                report.notes = [n for n in report.notes if not n.startswith(
                    f"column '{dcol}' holds dates with repeated values")]
                report.notes.append(
                    f"a stacked panel: entity '{icol}' ({ids.nunique()} entities) by time "
                    f"'{dcol}' ({dates.nunique()} periods); the rows are not one time series")
                return
