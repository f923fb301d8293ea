"""The validated table every fit reads: a numeric frame, the loader's report, the horizons of
forward-summed columns, identifier labels and the transforms applied so far."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import pandas as pd

from ..errors import DataError
from .transforms import current_column_name, transform, transform_kind, transform_name

#: An example value quoted in a report or a message shows at most this many characters.
EXAMPLE_CHARS = 40


def example_value(value, limit: int = EXAMPLE_CHARS) -> str:
    """A value as a report quotes it: one line of at most `limit` characters, a longer value cut
    and marked with an ellipsis (cutting again changes nothing)."""
    if value is None:
        return ""
    text = value if isinstance(value, str) else str(value)
    if len(text) > limit + 1 or (len(text) == limit + 1 and not text.endswith("\u2026")):
        text = text[:limit] + "\u2026"
    return " ".join(text.split()) if text.strip() else text


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
    spacing: str | None = None                                  # e.g. "regular (ME)"
    panel: tuple[str, str] | None = None                        # (entity, time) columns
    notes: list[str] = field(default_factory=list)
    #: SHA-256 of the file's bytes as read (hex), so exports can name the exact file
    sha256: str | None = None

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
            example = example_value(example)
            if self.panel and col in self.panel:
                what = "entity" if col == self.panel[0] else "time"
                out.append(f"column '{col}' kept as the panel's {what} labels (e.g. '{example}')")
                continue
            out.append(f"column '{col}' left out: not numeric (e.g. '{example}')")
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
    #: the non-numeric columns (identifiers, dates used as columns), aligned with `frame`
    labels: pd.DataFrame | None = None
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
                report.non_numeric[str(col)] = example_value(nonnull.iloc[0]) if len(nonnull) \
                    else None
        frame = pd.DataFrame(numeric, index=data.index)
        report.missing = {c: int(n) for c, n in frame.isna().sum().items() if n}
        return Table(frame=frame, report=report)
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")
