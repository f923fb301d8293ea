"""Groupings of a fit's rows (clusters): integer codes per row and the label of each group.

A fit offers the groupings it can cluster by (`Capabilities.clusters`): a panel its entities and
periods, and any fit the columns named in `clusters=` (an industry, a country, a region), read
here for exactly the rows the fit used."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError, SpecificationError
from .columns import index_label


@dataclass(frozen=True)
class Grouping:
    """Rows grouped into clusters: `codes` (0..G-1 per row) and `labels` (one per cluster)."""

    name: str
    codes: np.ndarray
    labels: pd.Index

    @property
    def n_groups(self) -> int:
        return len(self.labels)

    @property
    def sizes(self) -> np.ndarray:
        return np.bincount(self.codes, minlength=self.n_groups)

    def label(self, g: int):
        return index_label(self.labels[int(g)])


def as_names(clusters) -> list[str]:
    """Grouping columns from a name, a comma-separated string or a list (None: none)."""
    if clusters is None:
        return []
    if isinstance(clusters, str):
        return [c.strip() for c in clusters.split(",") if c.strip()]
    if isinstance(clusters, (list, tuple)) and all(isinstance(c, str) for c in clusters):
        return [c for c in clusters]
    raise SpecificationError(f"clusters must be a column name or a list of names, got "
                             f"{clusters!r}")


def grouping_from(series: pd.Series | None, name: str, rows: np.ndarray,
                  reserved=("entity", "time", "both")) -> Grouping:
    """The grouping of the fit's rows (`rows`: positions in the series) by the column `name`:
    labels are text or whole numbers; a row of the fit without a label is an error naming it."""
    if name in reserved:
        raise SpecificationError(f"'{name}' names a built-in grouping of panels; rename the "
                                 "column to cluster by it")
    if series is None:
        raise SpecificationError(f"no column named '{name}' to cluster by")
    s = series
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"cluster column '{name}' holds true/false values, not group labels")
    if pd.api.types.is_numeric_dtype(s):
        v = s.to_numpy(dtype=float, na_value=np.nan)
        frac = np.isfinite(v) & (v != np.round(v))
        if frac.any():
            i = int(np.flatnonzero(frac)[0])
            raise DataError(f"cluster column '{name}' holds numbers with fractions (e.g. "
                            f"{v[i]:g} in row {i + 1}); group labels must be text or whole "
                            "numbers")
    values = s.iloc[rows]
    missing = values.isna().to_numpy()
    if missing.any():
        first = int(rows[np.flatnonzero(missing)[0]]) + 1
        raise DataError(f"cluster column '{name}' has no label in {int(missing.sum())} of the "
                        f"fit's rows (e.g. row {first}); fill them or drop those rows")
    if pd.api.types.is_numeric_dtype(values):
        values = values.astype("int64")
    codes, labels = pd.factorize(values, sort=True)
    return Grouping(name=name, codes=codes.astype(np.int64), labels=pd.Index(labels, name=name))


def combined(a: Grouping, b: Grouping) -> Grouping:
    """The intersection of two groupings (their cells)."""
    key = a.codes * b.n_groups + b.codes
    codes, uniq = pd.factorize(key, sort=True)
    return Grouping(name=f"{a.name} x {b.name}", codes=codes.astype(np.int64),
                    labels=pd.RangeIndex(len(uniq), name=f"{a.name} x {b.name}"))
