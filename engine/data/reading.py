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
import pyarrow.compute as pc
import pyarrow.parquet as pq

from ..errors import DataError
from .dates import parse_dates, report_spacing
from .table import LoadReport, Table, example_value


#: Default upper bound on the size of a file the engine will parse (bytes).
MAX_BYTES = 200 * 1024 * 1024

_MISSING_TOKENS = {"", "na", "n/a", "nan", "null", "none", "#n/a", "."}

# Number conventions. A thousands group never starts with a zero group ("0.125" is not
# 125 with a thousands dot, "0,125" not 125 with a thousands comma).
_THOUSANDS_COMMA = re.compile(r"^[+-]?[1-9]\d{0,2}(,\d{3})+(\.\d*)?$")

_THOUSANDS_DOT_DECIMAL_COMMA = re.compile(r"^[+-]?[1-9]\d{0,2}(\.\d{3})+(,\d*)?$")

_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+$")

_WHOLE = re.compile(r"^[+-]?\d+$")

_DATE_NAME_HINT = re.compile(r"date|time|month|period|day|week|quarter", re.I)


#: Limits on what a file may hold, checked before the parsing work starts (stated in the README
#: and on screen): columns, characters in one row, and cells (rows x columns) after decompression.
MAX_COLUMNS = 500

MAX_LINE_CHARS = 100_000

MAX_CELLS = 50_000_000

#: Parquet files are bounded in bytes as well as cells, from the file's own metadata before
#: anything is read: the uncompressed size of the columns a load reads, all together. (A
#: column's metadata size is what its pages hold; a dictionary-encoded text column holds each
#: distinct value once, so the text bounds below apply to what it expands to.)
MAX_PARQUET_BYTES = 512 * 1024**2

#: Text columns are needed only as dates, identifiers or numbers written as text, all short:
#: a Parquet text column is read as a dictionary (each distinct value once) only while its
#: metadata size and then its text expanded over the rows fit this budget (all text columns
#: together), and only when no value is longer than MAX_TEXT_VALUE characters. Other text
#: columns are left out and the report says why.
MAX_TEXT_BYTES = 64 * 1024**2

MAX_TEXT_VALUE = 200

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


def _is_text_type(t) -> bool:
    if pa.types.is_dictionary(t):
        return _is_text_type(t.value_type)
    return pa.types.is_string(t) or pa.types.is_large_string(t) or (
        hasattr(pa.types, "is_string_view") and pa.types.is_string_view(t))


def _column_bytes(meta, names) -> dict[str, int]:
    """Uncompressed bytes of each top-level column over every row group, from the metadata."""
    out = dict.fromkeys(names, 0)
    for rg in range(meta.num_row_groups):
        group = meta.row_group(rg)
        for c in range(group.num_columns):
            col = group.column(c)
            top = col.path_in_schema.split(".", 1)[0]
            if top in out:
                out[top] += max(int(col.total_uncompressed_size), 0)
    return out


def _mib(n: int) -> str:
    return f"{n / 2**20:,.1f} MiB"


def _text_extent(column) -> tuple[int, int, str]:
    """(longest value in characters, characters over every row, the longest value) of a text
    column read as a dictionary: from the distinct values and their counts, never expanded."""
    longest, total, sample = 0, 0, ""
    for chunk in column.chunks:
        if not pa.types.is_dictionary(chunk.type):
            chunk = chunk.dictionary_encode()
        values = chunk.dictionary
        if len(values) == 0:
            continue
        lengths = pc.utf8_length(values).to_numpy(zero_copy_only=False).astype(np.int64)
        idx = chunk.indices.drop_null().to_numpy(zero_copy_only=False)
        total += int(np.bincount(idx, minlength=len(values)) @ lengths) if idx.size else 0
        j = int(np.argmax(lengths))
        if lengths[j] > longest:
            longest, sample = int(lengths[j]), values[j].as_py()[:80]
    return longest, total, sample


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
    sizes = _column_bytes(meta, names)
    keep, text = [], []
    text_budget = MAX_TEXT_BYTES
    for fld in schema:
        if pa.types.is_binary(fld.type) or pa.types.is_large_binary(fld.type) \
                or pa.types.is_fixed_size_binary(fld.type):
            report.non_numeric[fld.name] = "binary data"
        elif pa.types.is_nested(fld.type):
            report.non_numeric[fld.name] = f"nested values ({fld.type})"
        elif _is_text_type(fld.type):
            if sizes[fld.name] > text_budget:
                report.non_numeric[fld.name] = "text, not read"
                report.notes.append(f"column '{fld.name}' holds {_mib(sizes[fld.name])} of "
                                    f"text; it was not read (text columns are read within "
                                    f"{_mib(MAX_TEXT_BYTES)} in all)")
                continue
            text_budget -= sizes[fld.name]
            keep.append(fld.name)
            text.append(fld.name)
        else:
            keep.append(fld.name)
    if not keep:
        raise DataError(f"{label} has no columns that can hold numbers")
    total = sum(sizes[c] for c in keep)
    if total > MAX_PARQUET_BYTES:
        big = sorted(keep, key=lambda c: -sizes[c])[:3]
        raise DataError(f"{label} holds {_mib(total)} uncompressed in the columns to be read; "
                        f"the limit is {_mib(MAX_PARQUET_BYTES)} (largest: "
                        + ", ".join(f"'{c}' {_mib(sizes[c])}" for c in big)
                        + "). Load fewer rows or columns.")
    step(1, 3, f"reading {n_rows:,} rows")
    try:
        pf = pq.ParquetFile(io.BytesIO(raw), read_dictionary=text)
        arrow = pf.read(columns=keep)
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise DataError(f"{label} could not be read as Parquet: {_oneline(exc)}") from None
    expanded = 0
    for col in text:
        try:
            longest, chars, sample = _text_extent(arrow.column(col))
        except (pa.ArrowException, ValueError) as exc:
            raise DataError(f"{label}: column '{col}' could not be read: "
                            f"{_oneline(exc)}") from None
        why = None
        if longest > MAX_TEXT_VALUE:
            why = (f"column '{col}' holds text values up to {longest:,} characters long (e.g. "
                   f"'{example_value(sample)}'); a date, an identifier or a number is at most "
                   f"{MAX_TEXT_VALUE} characters, so it was left out")
        elif expanded + chars > MAX_TEXT_BYTES:
            why = (f"column '{col}' holds {chars:,} characters of text over its rows; it was "
                   f"left out (text columns are kept within {MAX_TEXT_BYTES:,} characters in "
                   "all)")
        if why:
            arrow = arrow.drop_columns([col])
            report.non_numeric[col] = example_value(sample)
            report.notes.append(why)
        else:
            expanded += chars
    if arrow.num_columns == 0:
        raise DataError(f"{label} has no columns that can hold numbers")
    try:
        frame = arrow.to_pandas()
    except Exception as exc:  # pyarrow raises several types for odd logical types
        raise DataError(f"{label} could not be read as Parquet: {_oneline(exc)}") from None
    for col in frame.columns:
        if isinstance(frame[col].dtype, pd.CategoricalDtype):
            frame[col] = frame[col].astype(object)
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


#: The conventions a text column of numbers may be written in: name -> what the report says.
CONVENTIONS = {"plain": None,
               "thousands comma": "removing thousands separators ','",
               "decimal comma": "reading ',' as the decimal mark (and '.' as a thousands "
                                "separator)"}


def _to_number(s: pd.Series, decimal_comma_file: bool, column: str = ""):
    """Parse a string column as floats. Returns (values or None, how, example bad value).

    A convention is chosen only when EVERY non-missing cell is written in it: plain (a decimal
    point, no commas), thousands commas (1,234.5; plain cells fit too) or decimal commas (2,5
    and 1.234,5; whole numbers fit too). When both separator conventions fit every cell (1,234
    alone), the file's own decimal mark decides. A column whose cells each fit some convention
    but no convention fits them all is refused with a DataError naming two rows that disagree;
    a cell that fits none makes the column non-numeric (returned as the example)."""
    miss = _is_missing(s)
    vals = s[~miss].str.strip().str.replace(r"[\s\u00a0\u202f]", "", regex=True)
    if vals.empty:
        return pd.Series(np.nan, index=s.index), None, None
    plain = pd.to_numeric(vals, errors="coerce")
    plain_ok = plain.notna() & ~vals.str.contains(",", regex=False)
    if plain_ok.all():
        return _placed(s.index, miss, plain), None, None
    fits = {"thousands comma": plain_ok | vals.str.match(_THOUSANDS_COMMA),
            "decimal comma": vals.str.match(_WHOLE) | vals.str.match(_THOUSANDS_DOT_DECIMAL_COMMA)
            | vals.str.match(_DECIMAL_COMMA)}
    every = [name for name, ok in fits.items() if ok.all()]
    if len(every) == 2:
        every = ["decimal comma" if decimal_comma_file else "thousands comma"]
    if every:
        name = every[0]
        text = vals.str.replace(",", "", regex=False) if name == "thousands comma" else \
            vals.str.replace(".", "", regex=False).str.replace(",", ".", regex=False)
        values = pd.to_numeric(text, errors="coerce")
        if values.notna().all():
            return _placed(s.index, miss, values), CONVENTIONS[name], None
    neither = ~(plain_ok | fits["thousands comma"] | fits["decimal comma"])
    if neither.any():
        return None, None, str(vals[neither].iloc[0])
    point = vals[(plain_ok | fits["thousands comma"]) & ~fits["decimal comma"]]
    comma = vals[fits["decimal comma"] & ~fits["thousands comma"]]
    if len(point) and len(comma):
        first, second = sorted([(_row(s, point.index[0]), point.iloc[0], "a decimal point"),
                                (_row(s, comma.index[0]), comma.iloc[0], "a decimal comma")])
        raise DataError(
            f"column '{column}' mixes number conventions: data row {first[0]} holds "
            f"'{example_value(first[1])}' ({first[2]}) and data row {second[0]} holds "
            f"'{example_value(second[1])}' ({second[2]}); reading either way would change "
            "some values. Write every value of the column in one convention.")
    return None, None, str(vals.iloc[0])                         # pragma: no cover


def _row(s: pd.Series, label) -> int:
    """A row label of the read frame as a data row number (1 = the first row below the
    header; rows dropped as empty keep their numbers)."""
    if isinstance(label, (int, np.integer)):
        return int(label) + 1
    return int(s.index.get_loc(label)) + 1


def _placed(index, miss, parsed) -> pd.Series:
    out = pd.Series(np.nan, index=index, dtype=float)
    out[~miss] = parsed.astype(float).to_numpy()
    return out


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
            rejected[col] = example_value(text[col].dropna().iloc[0]) \
                if text[col].notna().any() else ""
        elif kind == "text":
            values, how, bad = _to_number(text[col], decimal_comma_file, col)
            if values is None:
                rejected[col] = example_value(bad)
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
            report.notes.append(_repeated_dates_note(col, dates))
            continue
        rejected.pop(col, None)
        report.date_column = col
        return pd.Series(dates.to_numpy(), index=frame.index), col
    return None, None


def _repeated_dates_note(col, dates) -> str:
    """Which date repeats, in which data rows, and what the loader did about it."""
    dup = dates[dates.duplicated(keep=False)]
    first = dup.iloc[0]
    rows = [_row(dates, label) for label in dates.index[(dates == first).to_numpy()]]
    shown = ", ".join(map(str, rows[:5])) + (", ..." if len(rows) > 5 else "")
    others = int(dup.nunique()) - 1
    when = str(first)
    if first == first.normalize():
        when = when.split(" ")[0]          # the day alone (any year pandas holds)
    return (f"column '{col}' repeats the date {when} (data rows {shown})"
            + (f" and {others} other date(s)" if others else "")
            + "; it is not used as the time index: the rows are kept in file order as one "
            "series. Remove or merge the repeated rows to use the dates.")


#: An entity column of a stacked panel has at most this share of distinct values per row, and
#: at least this share of its entities appear at two or more dates.
ENTITY_MAX_DISTINCT = 0.5

ENTITY_MIN_REPEATED = 0.5


def _identifier_like(values: pd.Series, kind: str) -> bool:
    """Text, or whole numbers, with far fewer distinct values than rows and none missing."""
    if values.isna().any():
        return False
    if kind == "number":
        v = values.to_numpy(dtype=float)
        if not (np.isfinite(v).all() and np.all(v == np.round(v))):
            return False
    elif kind != "text":
        return False
    distinct = values.nunique()
    return 2 <= distinct <= ENTITY_MAX_DISTINCT * len(values)


def _report_panel(frame, kinds, text, rejected, report) -> None:
    """A date column with repeated dates next to an identifier column (text or whole numbers,
    far fewer distinct values than rows, its entities repeated across dates) whose pairs with
    it are unique is a stacked panel: say so (the rows are not one time series). Any other
    column, such as a response with one repeated date, is never taken for an entity."""
    date_cols = [c for c in rejected if c in text and _DATE_NAME_HINT.search(c)]
    for dcol in date_cols:
        dates = parse_dates(text[dcol])
        if dates is None or not dates.notna().all() or not dates.duplicated().any():
            continue
        for icol in [c for c in frame.columns if c != dcol and kinds.get(c) in ("text", "number")]:
            ids = frame[icol]
            if not _identifier_like(ids, kinds[icol]):
                continue
            pairs = pd.DataFrame({"i": ids.to_numpy(), "t": dates.to_numpy()})
            if pairs.duplicated().any():
                continue
            seen = pairs.groupby("i", sort=False)["t"].nunique()
            if (seen >= 2).mean() < ENTITY_MIN_REPEATED:
                continue
            report.panel = (icol, dcol)
            report.notes = [n for n in report.notes if not n.startswith(
                f"column '{dcol}' repeats the date")]
            report.notes.append(
                f"a stacked panel: entity '{icol}' ({ids.nunique()} entities) by time "
                f"'{dcol}' ({dates.nunique()} periods); the rows are not one time series")
            return
