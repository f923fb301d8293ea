"""Panel columns: entity identifiers and periods read and validated (whole numbers or text for
entities; dates or whole period numbers for periods), one row per entity and period, the rows
used over a window of periods."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import DataError, SpecificationError
from .columns import (INTERCEPT, SampleInfo, check_magnitudes, column_block, column_ranges,
                      index_label, take_rows)
from .dates import parse_dates
from .table import Table, example_value


def id_values(series: pd.Series, name: str, what: str) -> pd.Series:
    """Identifier labels: text, or whole numbers (never fractions)."""
    s = series
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"{what} column '{name}' holds true/false values, not identifiers")
    if pd.api.types.is_numeric_dtype(s):
        v = s.to_numpy(dtype=float, na_value=np.nan)
        ok = np.isfinite(v)
        frac = ok & (v != np.round(v))
        if frac.any():
            i = int(np.flatnonzero(frac)[0])
            raise DataError(f"{what} column '{name}' holds numbers with fractions (e.g. {v[i]:g} "
                            f"in row {i + 1}); identifiers must be labels or whole numbers")
        return pd.Series(np.where(ok, v, np.nan), index=s.index).astype("Int64")
    return s


def time_values(series: pd.Series, name: str) -> pd.Series:
    """Period labels: dates, or whole numbers (years, month numbers); text is parsed as dates."""
    s = series
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    if pd.api.types.is_datetime64_any_dtype(s) or isinstance(s.dtype, pd.PeriodDtype):
        return s
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"time column '{name}' holds true/false values, not periods")
    if pd.api.types.is_numeric_dtype(s):
        return id_values(s, name, "time")
    text = s.astype("string").str.strip()
    present = text.notna()
    dates = parse_dates(text[present]) if present.any() else None
    if dates is not None and dates.notna().all():
        out = pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns]")
        out[present] = dates.to_numpy()
        return out
    numbers = pd.to_numeric(text[present], errors="coerce")
    if numbers.notna().all():
        whole = numbers == numbers.round()
        if whole.all():
            out = pd.Series(pd.NA, index=s.index, dtype="Int64")
            out[present] = numbers.astype("int64").to_numpy()
            return out
        bad = text[present][~whole.to_numpy()]
        why = "numbers with fractions"
    else:
        bad = text[present][numbers.isna().to_numpy()]
        why = "values that are neither dates nor whole period numbers"
    example = bad.iloc[0]
    row = int(np.flatnonzero((text == example).fillna(False).to_numpy())[0]) + 1
    raise DataError(f"time column '{name}' holds {why} (e.g. '{example_value(example)}' in row "
                    f"{row}); give "
                    "dates such as 2024-01-31 or whole period numbers")


def columns_of(data, names):
    """(numeric frame, label getter, non-numeric map, table) for a Table or DataFrame."""
    if isinstance(data, Table):
        frame, labels = data.frame, data.labels
        non_numeric = data.report.non_numeric

        def get(col):
            if col in frame.columns:
                return frame[col]
            if labels is not None and col in labels.columns:
                return labels[col]
            if frame.index.name == col:
                return pd.Series(frame.index, index=frame.index)
            return None
        return frame, get, non_numeric, data
    if isinstance(data, pd.DataFrame):
        frame = data
        if isinstance(frame.index, pd.MultiIndex):
            frame = frame.reset_index()

        def get(col):
            if col in frame.columns:
                return frame[col]
            if frame.index.name == col:
                return pd.Series(frame.index, index=frame.index)
            return None
        return frame, get, {}, None
    raise DataError(f"expected a Table, a pandas DataFrame, a Dask DataFrame or a folder of "
                    f"Parquet files, got {type(data).__name__}")


@dataclass
class PanelData:
    """Validated panel columns: values (N x (k + 1), regressors then response, column-major; a
    leading column of ones when asked for), ids, labels, each column's range, and whether the
    rows are in (entity, period) order."""

    values: np.ndarray
    entity_codes: np.ndarray
    time_codes: np.ndarray
    entities: pd.Index
    periods: pd.Index
    index: pd.MultiIndex
    sample: SampleInfo
    table: object
    horizon: int | None
    lo: np.ndarray = None
    hi: np.ndarray = None
    entity_major: bool = False       # rows sorted by entity, then period (no duplicates)
    rows: np.ndarray | None = None   # positions of the rows used in the frame


def _plain_integers(series: pd.Series) -> bool:
    """Whole numbers in a numpy integer column: no missing values, no fractions to check."""
    return isinstance(series.dtype, np.dtype) and series.dtype.kind in "iu"


def _integer_codes(ids: np.ndarray):
    """Codes of integer labels in sorted order: by offset from the smallest when the labels
    span a range not much wider than the rows (ids numbered 1..G, years), by hashing
    otherwise."""
    if ids.size == 0:
        return np.zeros(0, dtype=np.int64), ids
    low, high = int(ids.min()), int(ids.max())
    span = high - low + 1
    if span > 2 * ids.size + 1024:
        codes, uniques = pd.factorize(ids, sort=True)
        return codes.astype(np.int64, copy=False), uniques
    shifted = ids.astype(np.int64)
    shifted -= low
    present = np.zeros(span, dtype=bool)
    present[shifted] = True
    if present.all():
        return shifted, np.arange(low, high + 1)
    rank = np.cumsum(present) - 1
    return rank[shifted], np.flatnonzero(present) + low


def _codes(labels, idx, n_rows):
    """Sorted-label codes of the rows kept: (codes as int64, labels as an Index)."""
    if isinstance(labels, np.ndarray):                    # plain integers
        kept = labels if idx is None else labels[idx]
        codes, uniques = _integer_codes(kept)
        return codes, pd.Index(pd.array(uniques, dtype="Int64"))
    kept = labels if idx is None else labels.iloc[idx]
    codes, uniques = pd.factorize(kept, sort=True)
    return codes.astype(np.int64, copy=False), uniques


def check_names(response, regs, entity, time, intercept=True):
    if not isinstance(response, str) or not response:
        raise SpecificationError("choose a response column")
    for what, col in (("entity", entity), ("time", time)):
        if not isinstance(col, str) or not col:
            raise SpecificationError(f"choose the {what} column of the panel (the identifier "
                                     f"of each {'firm or unit' if what == 'entity' else 'period'})")
    if entity == time:
        raise SpecificationError("the entity and time columns must differ")
    if not regs and not intercept:
        raise SpecificationError("the model has no regressors: add a column or the intercept")
    if len(set(regs)) != len(regs):
        dup = next(r for r in regs if regs.count(r) > 1)
        raise SpecificationError(f"regressor '{dup}' is listed twice")
    for col in (response, *regs):
        if col in (entity, time):
            raise SpecificationError(f"'{col}' is the panel's {'entity' if col == entity else 'time'}"
                                     " column; it cannot also be a variable of the model")
    if response in regs:
        raise SpecificationError(f"'{response}' is the response; it cannot also be a regressor")
    if INTERCEPT in regs:
        raise SpecificationError(f"'{INTERCEPT}' is reserved for the constant term; rename "
                                 "that column")


def panel_data(data, response, regs, entity, time, sample=None, ones: bool = False) -> PanelData:
    """The validated panel: one factorisation of each label column, the values as one
    column-major block (ranges taken while each column is in cache), rows with a missing value
    or label dropped and counted, and one duplicate check (none at all when the rows are already
    in (entity, period) order, the usual layout of a panel file)."""
    frame, get, non_numeric, table = columns_of(data, [response, *regs, entity, time])
    cols = [*regs, response]
    for col in cols:
        s = get(col)
        if s is None:
            raise SpecificationError(f"no column named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20])))
        if col in non_numeric or not pd.api.types.is_numeric_dtype(s) \
                or pd.api.types.is_bool_dtype(s):
            example = non_numeric.get(col)
            if example is None:
                nonnull = s.dropna()
                example = nonnull.iloc[0] if len(nonnull) else None
            example = example.item() if isinstance(example, np.generic) else example
            raise DataError(f"column '{col}' is not numeric (it holds values such as "
                            f"'{example_value(example)}'); choose a numeric column or clean "
                            "the file")
    raw = {}
    for what, col in (("entity", entity), ("time", time)):
        s = get(col)
        if s is None:
            raise SpecificationError(f"no {what} column named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20]))
                                     + (f" and {', '.join(map(str, table.labels.columns))}"
                                        if table is not None and table.labels is not None
                                        and len(table.labels.columns) else ""))
        if _plain_integers(s):
            raw[what] = s.to_numpy()
        else:
            raw[what] = (id_values(s, col, "entity") if what == "entity"
                         else time_values(s, col)).reset_index(drop=True)
    rows = len(frame)
    lead = int(ones)
    values, lo, hi = column_block([get(col).to_numpy(dtype=float, na_value=np.nan)
                                   for col in cols], ones=ones)
    ent, tim = raw["entity"], raw["time"]
    info = SampleInfo(rows_available=rows, rows_used=0)
    keep = None
    if sample is not None:
        try:
            start, end = sample
            tv = pd.Series(tim) if isinstance(tim, np.ndarray) else tim
            lo_ok = tv >= _same_kind(start, tv) if start is not None else True
            hi_ok = tv <= _same_kind(end, tv) if end is not None else True
            window = np.asarray(pd.Series(lo_ok & hi_ok).fillna(False), dtype=bool)
        except (TypeError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the time column "
                                     f"'{time}': {exc}") from None
        info.dropped_window = int((~window).sum())
        keep = window
    clean = np.isfinite(lo).all() and np.isfinite(hi).all()
    bad_values = None
    if not clean:
        suspect = [j for j in range(values.shape[1])
                   if not (np.isfinite(lo[j]) and np.isfinite(hi[j]))]
        for j in suspect:
            if np.isinf(values[:, j]).any():
                raise DataError(f"column '{cols[j - lead]}' contains infinite values")
        nan = {j: np.isnan(values[:, j]) for j in suspect}
        for j in suspect:
            if (nan[j] if keep is None else nan[j][keep]).all():
                raise DataError(f"column '{cols[j - lead]}' has no values (every cell is missing"
                                + (" in the sample window)" if sample else ")"))
        bad_values = np.zeros(rows, dtype=bool)
        for j in suspect:
            bad_values |= nan[j]
    ok_ids = None
    for labels in (ent, tim):
        if not isinstance(labels, np.ndarray):
            present = labels.notna().to_numpy()
            ok_ids = present if ok_ids is None else ok_ids & present
    in_window = np.ones(rows, dtype=bool) if keep is None else keep
    missing_ids = 0 if ok_ids is None else int((in_window & ~ok_ids).sum())
    if bad_values is not None:
        info.dropped_missing = int((in_window & (True if ok_ids is None else ok_ids)
                                    & bad_values).sum())
    if missing_ids:
        info.notes.append(f"{missing_ids} rows without an entity or time label dropped")
    if info.dropped_missing:
        info.notes.append(f"{info.dropped_missing} rows with missing values dropped")
    idx = None
    if keep is not None or bad_values is not None or missing_ids:
        kept = in_window.copy()
        if bad_values is not None:
            kept &= ~bad_values
        if ok_ids is not None:
            kept &= ok_ids
        idx = np.flatnonzero(kept)
        if idx.size == 0:
            raise DataError("no rows have every value of the model and both panel labels")
        if idx.size < rows:
            values = take_rows(values, idx)
            lo, hi = column_ranges(values)
        else:
            idx = None
    if rows == 0:
        raise DataError("no rows have every value of the model and both panel labels")
    e_codes, entities = _codes(ent, idx, rows)
    t_codes, periods = _codes(tim, idx, rows)
    if len(entities) < 2:
        raise SpecificationError(f"the panel has one entity only ('{entities[0]}' in column "
                                 f"'{entity}'): panel estimators need several; for one unit's "
                                 "time series use a time-series fit")
    if len(periods) < 2:
        raise SpecificationError(f"the panel has one period only ({index_label(periods[0])} in "
                                 f"column '{time}'): use a cross-sectional fit, or a time column "
                                 "with several periods")
    entity_major = _check_duplicates(e_codes, t_codes, entities, periods, idx)
    index = pd.MultiIndex(levels=[entities, periods], codes=[e_codes, t_codes],
                          names=[entity, time], verify_integrity=False)
    info.rows_used = int(len(e_codes))
    info.first, info.last = index_label(periods[0]), index_label(periods[-1])
    horizon = table.horizons.get(response) if table is not None else None
    return PanelData(values=values, entity_codes=e_codes, time_codes=t_codes,
                     entities=pd.Index(entities, name=entity), periods=pd.Index(periods,
                                                                                 name=time),
                     index=index, sample=info, table=table, horizon=horizon, lo=lo, hi=hi,
                     entity_major=entity_major, rows=np.arange(rows) if idx is None else idx)


def _check_duplicates(e_codes, t_codes, entities, periods, idx) -> bool:
    """Refuse a second row for one entity and period (naming them and the row); True when the
    rows are in (entity, period) order. Sorted rows need one comparison pass; otherwise the
    cells are counted (a sort only for a very sparse entity x period grid)."""
    n_p = len(periods)
    key = e_codes * n_p + t_codes
    if key.size < 2 or bool(np.all(key[1:] > key[:-1])):
        return True
    cells = len(entities) * n_p
    if cells <= 4 * key.size + 1_000_000:
        counts = np.bincount(key, minlength=cells)
        if counts.max() <= 1:
            return False
        cell = int(np.flatnonzero(counts > 1)[0])
        second = int(np.flatnonzero(key == cell)[1])
        e, t = divmod(cell, n_p)
    else:
        order = np.argsort(key, kind="stable")
        dup = np.flatnonzero(np.diff(key[order]) == 0)
        if not dup.size:
            return False
        second = int(order[dup[0] + 1])
        e, t = int(e_codes[second]), int(t_codes[second])
    r = second if idx is None else int(idx[second])
    raise DataError(f"entity {index_label(entities[e])!r} has two rows for period "
                    f"{index_label(periods[t])!s} (second at row {r + 1}); a panel needs one row "
                    "per entity and period. Aggregate or drop the duplicates.")


def periods_of(data, time: str) -> pd.Index:
    """The distinct periods of a panel's time column, parsed and in time order."""
    frame, get, _, _ = columns_of(data, [time])
    s = get(time)
    if s is None:
        raise SpecificationError(f"no time column named '{time}'")
    values = time_values(s, time).dropna()
    return pd.Index(np.sort(pd.unique(values)), name=time)


def _same_kind(value, series):
    if pd.api.types.is_datetime64_any_dtype(series):
        return pd.Timestamp(value)
    return value


@dataclass
class PanelInfo:
    """The panel's structure, as used by the estimators and stated in the description."""

    entity: str
    time: str
    entities: pd.Index               # entity labels in code order
    periods: pd.Index                # period labels in time order
    entity_codes: np.ndarray         # per row
    time_codes: np.ndarray           # per row
    effects: tuple = ()
    absorbed: int = 0                # effect parameters absorbed by the within transformation
    components: int = 1              # connected components of the entity-period graph
    iterations: int = 0              # alternating projections used (0: closed form)
    notes: list[str] = field(default_factory=list)
    entity_major: bool = False       # rows sorted by entity, then period

    @property
    def grid(self) -> tuple | None:
        """(entities, periods) when row r is entity r // periods in period r % periods (a
        balanced panel in (entity, period) order), so a column reshapes to that grid."""
        if self.entity_major and self.balanced:
            return self.n_entities, self.n_periods
        return None

    @property
    def n_entities(self) -> int:
        return len(self.entities)

    @property
    def n_periods(self) -> int:
        return len(self.periods)

    @property
    def counts(self) -> np.ndarray:
        """Rows per entity."""
        return np.bincount(self.entity_codes, minlength=self.n_entities)

    @property
    def period_counts(self) -> np.ndarray:
        return np.bincount(self.time_codes, minlength=self.n_periods)

    @property
    def balanced(self) -> bool:
        return int(self.entity_codes.size) == self.n_entities * self.n_periods

    @property
    def entities_with_gaps(self) -> int:
        """Entities whose rows skip a period between their first and last."""
        if self.balanced:
            return 0
        first = np.full(self.n_entities, np.iinfo(np.int64).max)
        last = np.full(self.n_entities, -1)
        np.minimum.at(first, self.entity_codes, self.time_codes)
        np.maximum.at(last, self.entity_codes, self.time_codes)
        return int(np.sum(last - first + 1 > self.counts))

    def describe(self) -> list[str]:
        c = self.counts
        out = [f"panel of {self.n_entities} entities ('{self.entity}') and {self.n_periods} "
               f"periods ('{self.time}'), {int(c.sum())} rows; "
               + ("balanced" if self.balanced else
                  f"unbalanced: {int(c.min())} to {int(c.max())} periods per entity "
                  f"(median {float(np.median(c)):g})")]
        gaps = self.entities_with_gaps
        if gaps:
            out.append(f"{gaps} entities skip periods between their first and last row; lags "
                       "within an entity are counted in periods, not rows")
        out.extend(self.notes)
        return out


def describe_effects(effects, absorbed, components, iterations, balanced) -> str:
    if not effects:
        return "pooled least squares (no fixed effects)"
    names = " and ".join(f"{e} fixed effects" for e in effects)
    how = ("within transformation (demeaning by " + " and ".join(effects) + ")")
    if len(effects) == 2 and not balanced:
        how = f"alternating projections ({iterations} sweeps) to demean by entity and period"
    text = (f"{names} removed by {how}; {absorbed} degrees of freedom absorbed by the effects"
            + (f" ({components} connected groups of entities and periods)" if components > 1
               else "") + ", counted in N - K; the intercept is absorbed by the effects")
    return text


def checked_panel(data, response, regs, entity, time, sample, ones: bool = False):
    """The validated panel block with its column ranges (magnitudes checked by column)."""
    pdata = panel_data(data, response, regs, entity, time, sample, ones=ones)
    values, lo, hi = pdata.values, pdata.lo, pdata.hi
    check_magnitudes([*regs, response], lo, hi, values, lead=int(ones))
    return pdata, values, lo, hi


def panel_names(data, entity, time):
    """Entity and time columns: as given, or from the loader's panel report / a MultiIndex."""
    if entity is None or time is None:
        guess = None
        if isinstance(data, Table) and data.report.panel:
            guess = data.report.panel
        elif isinstance(data, pd.DataFrame) and isinstance(data.index, pd.MultiIndex) \
                and data.index.nlevels == 2:
            guess = tuple(data.index.names)
        if guess is None:
            raise SpecificationError("name the panel's entity and time columns (entity=..., "
                                     "time=...)")
        entity = entity if entity is not None else guess[0]
        time = time if time is not None else guess[1]
    return entity, time


#: Fit functions for data too large for memory, registered by the layer that handles it
#: (engine.distributed): [(accepts(data) -> bool, {"panel": fit, "fama_macbeth": fit})].
LARGE_DATA: list = []


def register_large_data(accepts, fits: dict) -> None:
    """Let `fit_panel` and `fit_fama_macbeth` hand data that `accepts` recognises (a Dask
    DataFrame, a folder of Parquet files) to `fits[kind]`."""
    LARGE_DATA.append((accepts, dict(fits)))


def large_data_fit(data, kind: str):
    """The registered fit of `kind` for this data, or None when the data is in memory."""
    for accepts, fits in LARGE_DATA:
        if accepts(data):
            return fits[kind]
    return None
