"""Why rows were lost between the file and a fit: to leads and lags (a lag, a difference or a
forward sum leaves rows empty at the start or the end of the data, by construction) or to
missing values. The model line states both (`engine.kinds`)."""

from __future__ import annotations

from dataclasses import dataclass

from .table import Table
from .transforms import transform_name

#: Rows a transform leaves empty at the (start, end) of the data, per unit of its p.
_SHIFTS = {"lag": (1, 0), "lead": (0, 1), "difference": (1, 0), "log-difference": (1, 0),
           "sum-next": (0, 1), "log": (0, 0)}


@dataclass(frozen=True)
class Losses:
    to_shifts: int            # rows lost at the ends to leads, lags and forward sums
    to_missing: int           # rows lost to missing values (anywhere else)
    outside_window: int       # rows left out by a sample window

    def text(self) -> str:
        parts = []
        if self.to_shifts:
            parts.append(f"{self.to_shifts:,} lost to leads and lags")
        if self.to_missing:
            parts.append(f"{self.to_missing:,} to missing values")
        if self.outside_window:
            parts.append(f"{self.outside_window:,} outside the window")
        return ", ".join(parts)


def column_shift(table: Table | None, column: str, horizon: int | None = None) -> tuple[int, int]:
    """Rows a column is empty at the (start, end) of the data by construction: from the
    transforms that made it (followed back through the columns they were made from), or, for
    a response declared as a forward sum over h periods, h rows at the end."""
    head = tail = 0
    if table is not None:
        made = {}
        for kind, source, p in table.transforms:
            made[transform_name(kind, source, p)] = (kind, source, int(p))
        seen = set()
        name = column
        while name in made and name not in seen:
            seen.add(name)
            kind, source, p = made[name]
            h, t = _SHIFTS.get(kind, (0, 0))
            head, tail = head + h * p, tail + t * p
            name = source
        if not tail and table.horizons.get(column):
            tail = int(table.horizons[column])
    if not tail and horizon and horizon > 1:
        tail = int(horizon)
    return head, tail


def losses(sample, table: Table | None = None, columns=(), response: str | None = None,
           horizon: int | None = None) -> Losses:
    """Split the rows a fit dropped (its SampleInfo) into rows lost at the ends to leads and
    lags (at most what the columns' construction explains) and rows lost to missing values."""
    at_ends = max(0, sample.dropped_missing - sample.dropped_interior)
    head = tail = 0
    for col in columns:
        h, t = column_shift(table, col, horizon if col == response else None)
        head, tail = max(head, h), max(tail, t)
    shifts = min(at_ends, head + tail)
    return Losses(shifts, sample.dropped_missing - shifts, sample.dropped_window)
