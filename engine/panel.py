"""Panels: pooled and fixed-effects least squares on a stacked panel, and Fama-MacBeth.

A stacked panel has one row per (entity, period): firms by months, funds by days. `fit_panel`
fits y_it = x_it'beta + [a_i] + [d_t] + e_it by least squares, with entity and/or time fixed
effects removed by the within transformation (group demeaning; alternating projections for two
effects on an unbalanced panel). The result is a moment model like any other (g_it = x~_it e_it
in the orthonormal basis of the transformed design), and additionally offers what the panel
estimators of S need:

* `group_sums("entity" | "time")`: the sums of the moment contributions within each entity and
  within each period (G x m and T_p x m; periods in time order);
* `outer()`: sum_it g_it g_it' (the heteroskedasticity-only and intersection terms);
* `period_model`: the per-period sums h_t = sum_i g_it as a time-series moment model on the T_p
  periods, on which every kernel, bandwidth rule and fixed-b law of the time-series machinery
  runs (Driscoll & Kraay 1998): V = T_p M S_h M' equals the panel's (X'X)^-1 (sum_ts w h_t h_s')
  (X'X)^-1;
* `within_lags()`: sum_i sum_t g_it g_i,t-j' for every lag j in periods (by FFT over a dense
  entity x period grid), for a kernel over time within each entity.

Fama-MacBeth (1973): `fit_fama_macbeth` regresses the response on the regressors (and an
intercept) period by period and averages the slopes; its standard errors come from the slope
series with any time-series estimator (classical, kernel with bandwidth rules, EWC, VAR).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla

from .data import Table
from .errors import DataError, EstimationError, SpecificationError
from .model import (INTERCEPT, MomentModel, OLSFit, SampleInfo, SeriesModel, as_list,
                    check_magnitudes, column_ranges, index_label)

EFFECTS = ("entity", "time")
#: A regressor whose within-transformed norm falls below this fraction of its centred norm is
#: absorbed by the effects.
ABSORBED_TOL = 1e-9
#: Alternating projections stop when the largest change is below this fraction of the scale.
PROJECTION_TOL = 1e-13
PROJECTION_MAX_ITER = 10_000
#: Dense entity x period blocks for the within-entity lag products hold at most this many numbers.
DENSE_BLOCK = 4_000_000


# --------------------------------------------------------------------------- panel structure

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


def _describe_effects(effects, absorbed, components, iterations, balanced) -> str:
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


# --------------------------------------------------------------------------- reading the columns

def _id_values(series: pd.Series, name: str, what: str) -> pd.Series:
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


def _time_values(series: pd.Series, name: str) -> pd.Series:
    """Period labels: dates, or whole numbers (years, month numbers); text is parsed as dates."""
    s = series
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    if pd.api.types.is_datetime64_any_dtype(s) or isinstance(s.dtype, pd.PeriodDtype):
        return s
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"time column '{name}' holds true/false values, not periods")
    if pd.api.types.is_numeric_dtype(s):
        return _id_values(s, name, "time")
    text = s.astype("string").str.strip()
    present = text.notna()
    from .data import _parse_dates
    dates = _parse_dates(text[present]) if present.any() else None
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
    raise DataError(f"time column '{name}' holds {why} (e.g. {example!r} in row {row}); give "
                    "dates such as 2024-01-31 or whole period numbers")


def _columns_of(data, names):
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
    """Validated panel columns: values (N x (k + 1), regressors then response), ids, labels."""

    values: np.ndarray
    entity_codes: np.ndarray
    time_codes: np.ndarray
    entities: pd.Index
    periods: pd.Index
    index: pd.MultiIndex
    sample: SampleInfo
    table: object
    horizon: int | None


def _check_names(response, regs, entity, time, intercept=True):
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


def panel_data(data, response, regs, entity, time, sample=None) -> PanelData:
    frame, get, non_numeric, table = _columns_of(data, [response, *regs, entity, time])
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
                            f"{example!r}); choose a numeric column or clean the file")
    raw = {}
    for what, col in (("entity", entity), ("time", time)):
        s = get(col)
        if s is None:
            raise SpecificationError(f"no {what} column named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20]))
                                     + (f" and {', '.join(map(str, table.labels.columns))}"
                                        if table is not None and table.labels is not None
                                        and len(table.labels.columns) else ""))
        raw[what] = _id_values(s, col, "entity") if what == "entity" else _time_values(s, col)
    rows = len(frame)
    values = np.empty((rows, len(cols)))
    for j, col in enumerate(cols):
        values[:, j] = get(col).to_numpy(dtype=float, na_value=np.nan)
    ent, tim = raw["entity"].reset_index(drop=True), raw["time"].reset_index(drop=True)
    info = SampleInfo(rows_available=rows, rows_used=0)
    keep = np.ones(rows, dtype=bool)
    if sample is not None:
        try:
            start, end = sample
            tv = tim
            lo = tv >= _same_kind(start, tv) if start is not None else True
            hi = tv <= _same_kind(end, tv) if end is not None else True
            window = np.asarray(pd.Series(lo & hi).fillna(False), dtype=bool)
        except (TypeError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the time column "
                                     f"'{time}': {exc}") from None
        info.dropped_window = int((~window).sum())
        keep &= window
    finite = np.isfinite(values)
    inf = ~finite & ~np.isnan(values)
    if inf.any():
        j = int(np.flatnonzero(inf.any(axis=0))[0])
        raise DataError(f"column '{cols[j]}' contains infinite values")
    for j, col in enumerate(cols):
        if np.isnan(values[keep, j]).all():
            raise DataError(f"column '{col}' has no values (every cell is missing"
                            + (" in the sample window)" if sample else ")"))
    ok_ids = ent.notna().to_numpy() & tim.notna().to_numpy()
    missing_ids = int((keep & ~ok_ids).sum())
    keep_vals = keep & finite.all(axis=1)
    info.dropped_missing = int((keep & ok_ids & ~finite.all(axis=1)).sum())
    keep = keep_vals & ok_ids
    if missing_ids:
        info.notes.append(f"{missing_ids} rows without an entity or time label dropped")
    if info.dropped_missing:
        info.notes.append(f"{info.dropped_missing} rows with missing values dropped")
    idx = np.flatnonzero(keep)
    if idx.size == 0:
        raise DataError("no rows have every value of the model and both panel labels")
    values = values[idx]
    e_codes, entities = pd.factorize(ent.iloc[idx], sort=True)
    t_codes, periods = pd.factorize(tim.iloc[idx], sort=True)
    e_codes = e_codes.astype(np.int64)
    t_codes = t_codes.astype(np.int64)
    if len(entities) < 2:
        raise SpecificationError(f"the panel has one entity only ('{entities[0]}' in column "
                                 f"'{entity}'): panel estimators need several; for one unit's "
                                 "time series use a time-series fit")
    if len(periods) < 2:
        raise SpecificationError(f"the panel has one period only ({index_label(periods[0])} in "
                                 f"column '{time}'): use a cross-sectional fit, or a time column "
                                 "with several periods")
    key = e_codes * len(periods) + t_codes
    order = np.argsort(key, kind="stable")
    dup = np.flatnonzero(np.diff(key[order]) == 0)
    if dup.size:
        r = int(idx[order[dup[0] + 1]])
        raise DataError(f"entity {index_label(entities[e_codes[order[dup[0]]]])!r} has two rows "
                        f"for period {index_label(periods[t_codes[order[dup[0]]]])!s} (second "
                        f"at row {r + 1}); a panel needs one row per entity and period. "
                        "Aggregate or drop the duplicates.")
    index = pd.MultiIndex.from_arrays([entities[e_codes], periods[t_codes]], names=[entity, time])
    info.rows_used = int(idx.size)
    info.first, info.last = index_label(periods[0]), index_label(periods[-1])
    horizon = table.horizons.get(response) if table is not None else None
    return PanelData(values=values, entity_codes=e_codes, time_codes=t_codes,
                     entities=pd.Index(entities, name=entity), periods=pd.Index(periods,
                                                                                 name=time),
                     index=index, sample=info, table=table, horizon=horizon)


def periods_of(data, time: str) -> pd.Index:
    """The distinct periods of a panel's time column, parsed and in time order."""
    frame, get, _, _ = _columns_of(data, [time])
    s = get(time)
    if s is None:
        raise SpecificationError(f"no time column named '{time}'")
    values = _time_values(s, time).dropna()
    return pd.Index(np.sort(pd.unique(values)), name=time)


def _same_kind(value, series):
    if pd.api.types.is_datetime64_any_dtype(series):
        return pd.Timestamp(value)
    return value


def _spacing_note(periods: pd.Index) -> str | None:
    """Calendar gaps between the periods present (the kernel estimators over time treat the
    periods present as consecutive)."""
    if not isinstance(periods, pd.DatetimeIndex) or len(periods) < 3:
        return None
    from .data import LoadReport, _report_spacing
    rep = LoadReport()
    _report_spacing(periods, rep)
    if rep.spacing and ("gap" in rep.spacing or rep.spacing == "irregular"):
        return (f"the periods are {rep.spacing}; estimators with a kernel over time treat the "
                "periods present as consecutive")
    return None


# --------------------------------------------------------------------------- demeaning

def _group_means(values, codes, n_groups, counts):
    out = np.empty((n_groups, values.shape[1]))
    for j in range(values.shape[1]):
        out[:, j] = np.bincount(codes, weights=values[:, j], minlength=n_groups)
    return out / counts[:, None]


def _components(e_codes, t_codes, g, t) -> int:
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    n = e_codes.size
    graph = coo_matrix((np.ones(n), (e_codes, g + t_codes)), shape=(g + t, g + t))
    return int(connected_components(graph, directed=False)[0])


def within(values, e_codes, t_codes, g, t, effects):
    """The within transformation of every column; returns (transformed, absorbed df,
    components, sweeps of alternating projections)."""
    if not effects:
        return values, 0, 1, 0
    ce = np.bincount(e_codes, minlength=g).astype(float)
    ct = np.bincount(t_codes, minlength=t).astype(float)
    if effects == ("entity",):
        return values - _group_means(values, e_codes, g, ce)[e_codes], g, 1, 0
    if effects == ("time",):
        return values - _group_means(values, t_codes, t, ct)[t_codes], t, 1, 0
    comps = _components(e_codes, t_codes, g, t)
    absorbed = g + t - comps
    if values.shape[0] == g * t:                          # balanced: closed form
        out = values - _group_means(values, e_codes, g, ce)[e_codes]
        out -= _group_means(out, t_codes, t, ct)[t_codes]
        return out, absorbed, comps, 0
    out = values - _group_means(values, e_codes, g, ce)[e_codes]
    scale = np.maximum(np.abs(values).max(axis=0), np.finfo(float).tiny)
    for it in range(1, PROJECTION_MAX_ITER + 1):
        step = _group_means(out, t_codes, t, ct)
        out -= step[t_codes]
        step_e = _group_means(out, e_codes, g, ce)
        out -= step_e[e_codes]
        if np.all(np.abs(step).max(axis=0) <= PROJECTION_TOL * scale) and \
                np.all(np.abs(step_e).max(axis=0) <= PROJECTION_TOL * scale):
            return out, absorbed, comps, it
    raise EstimationError(f"demeaning by entity and period did not converge in "
                          f"{PROJECTION_MAX_ITER} sweeps of alternating projections (the panel "
                          "is very unbalanced or weakly connected); use one set of effects")


# --------------------------------------------------------------------------- the fitted panel

class PanelFit(OLSFit):
    """Least squares on a stacked panel, pooled or with fixed effects (see the module docstring).

    N (`nobs`) counts rows; K = k + the effect parameters absorbed; `df_resid` = N - K."""

    kind = "panel least squares"
    df_reason = "N - K"

    def __init__(self, *, X, y, terms, index, response, sample, panel: PanelInfo,
                 raw=None, table=None, horizon=None):
        self.panel = panel
        self._raw = raw                    # untransformed (regressors, y) for Fama-MacBeth
        super().__init__(X=X, y=y, terms=terms, index=index, response=response, sample=sample,
                         horizon=horizon, table=table)
        self.leverage = self._panel_leverage()

    def _panel_leverage(self):
        base = np.einsum("ij,ij->i", self._q, self._q)
        p, eff = self.panel, self.panel.effects
        if not eff:
            return base
        if eff == ("entity",):
            return base + 1.0 / p.counts[p.entity_codes]
        if eff == ("time",):
            return base + 1.0 / p.period_counts[p.time_codes]
        if p.balanced:
            return base + 1.0 / p.n_periods + 1.0 / p.n_entities - 1.0 / self.nobs
        return None          # two-way on an unbalanced panel: not available in closed form

    # ------------------------------------------------------------------ degrees of freedom
    @property
    def df_resid(self) -> int:
        return self.nobs - self.k - self.panel.absorbed

    @property
    def n_params(self) -> int:
        """K: coefficients plus effect parameters absorbed."""
        return self.k + self.panel.absorbed

    # ------------------------------------------------------------------ grouped statistics
    def group_sums(self, dim: str) -> np.ndarray:
        """Sums of the working moment contributions within each entity or each period."""
        def build():
            codes, n = ((self.panel.entity_codes, self.panel.n_entities) if dim == "entity"
                        else (self.panel.time_codes, self.panel.n_periods))
            g = self.working_contributions
            out = np.empty((n, g.shape[1]))
            for j in range(g.shape[1]):
                out[:, j] = np.bincount(codes, weights=g[:, j], minlength=n)
            return out
        if dim not in EFFECTS:
            raise SpecificationError(f"group by 'entity' or 'time', not {dim!r}")
        return self.caches.get(f"sums_{dim}", build)

    def outer(self) -> np.ndarray:
        """sum_it g_it g_it' of the working contributions."""
        return self.caches.get("outer", lambda: self.working_contributions.T
                               @ self.working_contributions)

    @property
    def period_model(self) -> "PeriodSums":
        """The per-period sums as a time-series moment model on the T_p periods."""
        return self.caches.get("period_model", lambda: PeriodSums(self, self.group_sums("time")))

    def within_lags(self) -> np.ndarray:
        """W_j = sum_i sum_t g_it g_i,t-j' (working basis) for j = 0..T_p-1: (T_p, m, m)."""
        return self.caches.get("within_lags", lambda: within_lag_products(
            self.working_contributions, self.panel.entity_codes, self.panel.time_codes,
            self.panel.n_entities, self.panel.n_periods))

    # ------------------------------------------------------------------ descriptions
    def describe_method(self) -> str:
        p = self.panel
        return _describe_effects(p.effects, p.absorbed, p.components, p.iterations, p.balanced)

    def fama_macbeth(self) -> "FamaMacBethFit":
        """Fama-MacBeth on the same rows and regressors (period-by-period slopes with an
        intercept each period), cached."""
        def build():
            if self._raw is not None:          # effects: the untransformed regressors
                Xr, yr = self._raw
            else:
                has = INTERCEPT in self.terms
                Xr, yr = (self.X[:, 1:] if has else self.X), self.y
            Xr = np.column_stack([np.ones(len(yr)), Xr])
            terms = [INTERCEPT] + [t for t in self.terms if t != INTERCEPT]
            return _fama_macbeth(Xr, yr, self.panel.time_codes, self.panel.periods, terms,
                                 self.response, self.sample, self.panel)
        return self.caches.get("fama_macbeth", build)

    def sweep(self, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
              repair: bool = True, prewhiten: bool = False):
        """Driscoll-Kraay standard errors for every (kernel, bandwidth in periods) at once."""
        from .covariance import estimator
        from .sweep import sweep
        if prewhiten:
            raise SpecificationError("prewhitening is not offered for Driscoll-Kraay")
        kernels = [kernels] if isinstance(kernels, str) else list(kernels)
        return sweep(self, [estimator("driscoll_kraay", kernel=k, bandwidth=1.0,
                                      small_sample=small_sample, repair=repair)
                            for k in kernels], bandwidths)

    def compare(self, level: float = 0.95, reference: str = "auto", fama_macbeth: bool = True,
                **kwargs):
        """Every panel estimator (presets of the registry) and, with `fama_macbeth`, the
        Fama-MacBeth rows (their own estimate; classical and kernel over the slope series)."""
        from .compare import compare
        out = compare(self, level=level, reference=reference, **kwargs)
        if not fama_macbeth or kwargs.get("estimators") is not None:
            return out
        try:
            fm = self.fama_macbeth()
        except (SpecificationError, EstimationError) as exc:
            extra = pd.DataFrame([{**{c: np.nan for c in out.columns}, "estimator":
                                   "Fama-MacBeth", "family": "fama_macbeth", "term": t,
                                   "note": str(exc), "rejects": None, "why": "", "flags": "",
                                   "reference": "", "law": "",
                                   "estimate": np.nan} for t in self.terms])
            return pd.concat([out, extra], ignore_index=True)
        rows = fm.compare(level=level, reference=reference, estimators=fm.comparison_presets())
        rows = rows[rows.term.isin(self.terms)].copy()
        rows["estimator"] = "Fama-MacBeth, " + rows["estimator"].astype(str)
        rows["family"] = "fama_macbeth"
        why = fm.comparison_note(self)
        rows["why"] = [("; ".join(x for x in (w, why) if x)) for w in rows["why"]]
        return pd.concat([out, rows], ignore_index=True)

    def __repr__(self):
        p = self.panel
        return (f"PanelFit(response={self.response!r}, terms={self.terms}, N={self.nobs}, "
                f"entities={p.n_entities}, periods={p.n_periods}, effects={p.effects})")


class PeriodSums(MomentModel):
    """The per-period sums h_t = sum_i g_it of a panel's moment contributions as a time-series
    moment model (T_p periods, time order). With the panel's influence map, V = T_p M S_h M' is
    the panel's Driscoll-Kraay covariance for S_h = (1/T_p) sum_ts w(|t - s|) h_t h_s'; the
    panel's own S is (T_p / N) S_h. Bandwidth rules see the sums in the original basis."""

    kind = "per-period sums of a panel's moment contributions"

    def __init__(self, panel_fit, sums_working):
        self._init_model()
        self.parent = panel_fit
        self.caches.put("working_contributions", sums_working)
        self.terms = list(panel_fit.terms)
        self.beta = panel_fit.beta
        self.nobs = sums_working.shape[0]
        self.k = panel_fit.k
        self.index = panel_fit.panel.periods
        self.sample = panel_fit.sample
        self.response = panel_fit.response
        self.horizon = None
        self.resid = None

    @property
    def moment_names(self):
        return self.parent.moment_names

    def _original_contributions(self):
        return self.working_contributions @ self.parent._basis

    def to_original(self, s_working):
        return self.parent.to_original(s_working)

    def to_working(self, s_original):
        return self.parent.to_working(s_original)

    @property
    def influence_map(self):
        return self.parent.influence_map

    @property
    def working_design(self):
        raise SpecificationError("per-period sums have no regression design")

    @property
    def small_sample_factor(self) -> float:
        """The panel's N / (N - K)."""
        return self.parent.small_sample_factor

    @property
    def df_resid(self) -> int:
        return self.nobs - 1

    @property
    def scale(self) -> float:
        """T_p / N: S of the panel = scale x S of the sums."""
        return self.nobs / self.parent.nobs


def within_lag_products(g, e_codes, t_codes, n_entities, n_periods) -> np.ndarray:
    """sum_i sum_t g_it g_i,t-j' for j = 0..T_p-1, (T_p, m, m), by zero-padded FFTs over a dense
    entity x period grid (missing cells are zero), in blocks of entities."""
    from scipy import fft as sfft
    n, m = g.shape
    size = sfft.next_fast_len(2 * n_periods, real=True)
    nf = size // 2 + 1
    acc = np.zeros((nf, m, m), dtype=complex)
    per_block = max(1, DENSE_BLOCK // max(n_periods * m, 1))
    order = np.argsort(e_codes, kind="stable")
    e_sorted = e_codes[order]
    bounds = np.searchsorted(e_sorted, np.arange(0, n_entities + per_block, per_block))
    for a, b in zip(bounds[:-1], bounds[1:]):
        if b <= a:
            continue
        rows = order[a:b]
        first = e_sorted[a]
        count = int(e_sorted[b - 1] - first + 1)
        dense = np.zeros((count, n_periods, m))
        dense[e_codes[rows] - first, t_codes[rows]] = g[rows]
        spec = sfft.rfft(dense, n=size, axis=1)
        for i in range(m):
            for j in range(i, m):
                acc[:, i, j] += np.einsum("cf,cf->f", spec[:, :, i], spec[:, :, j].conj())
    for i in range(m):
        for j in range(i):
            acc[:, i, j] = acc[:, j, i].conj()
    out = sfft.irfft(acc, n=size, axis=0)[:n_periods]
    # lag 0 exactly (the FFT route carries rounding of the order of the largest term)
    out[0] = g.T @ g
    return out


# --------------------------------------------------------------------------- fit_panel

def _effects(effects) -> tuple:
    if effects is None or effects == "none" or effects == ():
        return ()
    if isinstance(effects, str):
        effects = {"both": EFFECTS, "two-way": EFFECTS}.get(effects, (effects,))
    out = tuple(e for e in EFFECTS if e in set(effects))
    unknown = set(effects) - set(EFFECTS)
    if unknown:
        raise SpecificationError(f"effects must be 'entity', 'time' or both, not "
                                 + ", ".join(repr(u) for u in sorted(map(str, unknown))))
    return out


def fit_panel(data, response: str, regressors=None, entity: str | None = None,
              time: str | None = None, effects=(), intercept: bool = True, sample=None,
              client=None, **dask_options):
    """Least squares on a stacked panel (one row per entity and period).

    data: a Table (its loader report names the panel's columns), a DataFrame (columns, or a
    MultiIndex of (entity, time)), or, for panels larger than memory, a Dask DataFrame or a
    folder of Parquet files (then `client` may be a dask.distributed Client; see
    engine.distributed). effects: () pooled, "entity", "time" or ("entity", "time"): fixed
    effects removed by the within transformation (the intercept is then absorbed).
    sample: optional (first, last) period, inclusive.

    Rows missing a value or a label are dropped and counted. Raises DataError for unusable
    columns (ids with fractions, a time column that does not parse, duplicate rows of one
    entity and period) and SpecificationError for an impossible model (one entity or period,
    a regressor absorbed by the effects).
    """
    from .distributed import is_distributed
    regs = as_list(regressors)
    entity, time = _panel_names(data, entity, time)
    eff = _effects(effects)
    if eff:
        intercept = False
    _check_names(response, regs, entity, time, intercept or bool(eff))
    if not regs and eff:
        raise SpecificationError("with fixed effects the model needs at least one regressor")
    if is_distributed(data):
        from .distributed import fit_panel_distributed
        return fit_panel_distributed(data, response, regs, entity, time, effects=eff,
                                     intercept=intercept, sample=sample, client=client,
                                     **dask_options)
    pdata, values, lo, hi = _checked_panel(data, response, regs, entity, time, sample)
    if hi[-1] - lo[-1] == 0:
        raise SpecificationError(f"response '{response}' is constant ({values[0, -1]:g}): "
                                 "nothing to explain")
    for j, r in enumerate(regs):
        if hi[j] - lo[j] == 0 and (intercept or eff):
            raise SpecificationError(f"regressor '{r}' is constant ({values[0, j]:g}); it "
                                     + ("is absorbed by the effects" if eff else
                                        "duplicates the intercept") + ". Remove it.")
    g, t = len(pdata.entities), len(pdata.periods)
    transformed, absorbed, comps, iters = within(values, pdata.entity_codes, pdata.time_codes,
                                                 g, t, eff)
    if eff:
        centred = values - values.mean(axis=0)
        before = np.sqrt((centred ** 2).sum(axis=0))
        after = np.sqrt((transformed ** 2).sum(axis=0))
        gone = [j for j in range(len(regs)) if after[j] <= ABSORBED_TOL * max(before[j], 1e-300)]
        if gone:
            what = {("entity",): "within entities", ("time",): "within periods"}.get(
                eff, "within entities and periods")
            names = ", ".join(f"'{regs[j]}'" for j in gone)
            raise SpecificationError(f"regressor {names} does not vary {what}: it is absorbed by "
                                     f"the {' and '.join(eff)} fixed effects. Remove it, or drop "
                                     "those effects.")
        if after[-1] <= ABSORBED_TOL * max(before[-1], 1e-300):
            raise SpecificationError(f"response '{response}' is explained entirely by the "
                                     "fixed effects: nothing is left to explain")
    n = len(values)
    k = len(regs) + int(intercept)
    if n <= k + absorbed:
        raise SpecificationError(f"{n} rows are too few for {k} coefficients and {absorbed} "
                                 "effect parameters")
    X = np.empty((n, k))
    if intercept:
        X[:, 0] = 1.0
    X[:, int(intercept):] = transformed[:, :len(regs)]
    y = np.ascontiguousarray(transformed[:, -1])
    raw = None
    if eff:
        raw = (values[:, :len(regs)].copy(), values[:, -1].copy())
    info = PanelInfo(entity=entity, time=time, entities=pdata.entities, periods=pdata.periods,
                     entity_codes=pdata.entity_codes, time_codes=pdata.time_codes, effects=eff,
                     absorbed=absorbed, components=comps, iterations=iters)
    note = _spacing_note(pdata.periods)
    if note:
        info.notes.append(note)
    sample_info = pdata.sample
    sample_info.notes.extend(info.describe())
    terms = ([INTERCEPT] if intercept else []) + regs
    fit = PanelFit(X=X, y=y, terms=terms, index=pdata.index, response=response,
                   sample=sample_info, panel=info, raw=raw, table=pdata.table,
                   horizon=pdata.horizon)
    if eff and k:
        fit.sample.notes.append(_describe_effects(eff, absorbed, comps, iters, info.balanced))
    return fit


def _checked_panel(data, response, regs, entity, time, sample):
    """The validated panel block with its column ranges (magnitudes checked by column)."""
    pdata = panel_data(data, response, regs, entity, time, sample)
    values = pdata.values
    lo, hi = column_ranges(values)
    check_magnitudes([*regs, response], lo, hi, values)
    return pdata, values, lo, hi


def _panel_names(data, entity, time):
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


# --------------------------------------------------------------------------- Fama-MacBeth

class FamaMacBethFit(SeriesModel):
    """Fama-MacBeth (1973): the period-by-period cross-sectional slopes beta_t (T_p x k), their
    average, and the series g_t = beta_t - mean as moment contributions with influence map
    I / T_p, so V = S / T_p for S the long-run covariance of the slopes. The classical estimator
    is s^2 / T_p with s^2 the slopes' sample variance (divisor T_p - 1), referred to t(T_p - 1);
    a kernel over the slope series corrects for their autocorrelation (small-sample factor
    T_p / (T_p - 1) when asked for)."""

    kind = "Fama-MacBeth"
    df_reason = "periods - 1"

    def __init__(self, slopes: pd.DataFrame, *, response, sample, counts, skipped, panel=None):
        b = slopes.to_numpy()
        t_p, k = b.shape
        beta = b.mean(axis=0)
        super().__init__(b - beta, np.eye(k) / t_p, terms=list(slopes.columns), beta=beta,
                         index=slopes.index, sample=sample, df_resid=t_p - 1,
                         response=response)
        self.slopes = slopes
        self.cross_section_counts = counts          # rows in each period used
        self.skipped = skipped                      # {period label: reason}
        self.panel = None                           # a time series of slopes, not a panel
        self.source_panel = panel

    def homoskedastic_long_run(self):
        """s^2 = sum (beta_t - mean)^2 / (T_p - 1) per pair: the classical Fama-MacBeth
        variance s^2 / T_p."""
        g = self.working_contributions
        return g.T @ g / self.df_resid

    def describe_method(self) -> str:
        return (f"Fama-MacBeth: average of {self.nobs} period-by-period cross-sectional "
                "least-squares slopes"
                + (f" ({len(self.skipped)} periods skipped)" if self.skipped else ""))

    def comparison_presets(self) -> list:
        from .covariance import estimator
        return [estimator("classical"),
                estimator("kernel", kernel="bartlett", bandwidth="andrews", small_sample=True),
                estimator("kernel", kernel="bartlett", bandwidth="rule-of-thumb",
                          small_sample=True)]

    def comparison_note(self, panel_fit) -> str:
        text = "own estimate: the average of the period-by-period slopes"
        if panel_fit.panel.effects:
            text += ("; it does not use the entity effects (each period's intercept absorbs "
                     "time effects)")
        return text

    def __repr__(self):
        return (f"FamaMacBethFit(response={self.response!r}, terms={self.terms}, "
                f"periods={self.nobs})")


def _fama_macbeth(X, y, t_codes, periods, terms, response, sample, panel=None):
    k = X.shape[1]
    order = np.argsort(t_codes, kind="stable")
    bounds = np.searchsorted(t_codes[order], np.arange(len(periods) + 1))
    rows, labels, counts, skipped = [], [], [], {}
    for p in range(len(periods)):
        idx = order[bounds[p]:bounds[p + 1]]
        label = index_label(periods[p])
        if idx.size < k:
            skipped[label] = f"{idx.size} rows for {k} coefficients"
            continue
        xs, ys = X[idx], y[idx]
        norms = np.abs(xs).max(axis=0)
        if (norms == 0).any():
            skipped[label] = "a regressor is zero throughout the period"
            continue
        q, r = np.linalg.qr(xs / norms)
        d = np.abs(np.diag(r))
        if d.min() <= 1e-10 * d.max():
            skipped[label] = "regressors are collinear within the period"
            continue
        coef = sla.solve_triangular(r, q.T @ ys) / norms
        resid = ys - xs @ coef
        coef += sla.solve_triangular(r, q.T @ resid) / norms      # one refinement step
        rows.append(coef)
        labels.append(periods[p])
        counts.append(idx.size)
    if len(rows) < 2:
        raise SpecificationError(f"Fama-MacBeth needs at least two periods whose cross-section "
                                 f"can be fitted; {len(rows)} of {len(periods)} can "
                                 f"(each period needs at least {k} rows and regressors that "
                                 "vary)")
    slopes = pd.DataFrame(np.vstack(rows), index=pd.Index(labels, name=periods.name),
                          columns=pd.Index(terms, name="term"))
    info = SampleInfo(rows_available=sample.rows_available, rows_used=int(sum(counts)),
                      dropped_missing=sample.dropped_missing, dropped_window=sample.dropped_window,
                      first=index_label(labels[0]), last=index_label(labels[-1]),
                      notes=[n for n in sample.notes])
    if skipped:
        first = next(iter(skipped.items()))
        info.notes.append(f"{len(skipped)} periods skipped by Fama-MacBeth (e.g. {first[0]}: "
                          f"{first[1]}); the remaining periods are treated as consecutive")
    return FamaMacBethFit(slopes, response=response, sample=info, counts=np.array(counts),
                          skipped=skipped, panel=panel)


def fit_fama_macbeth(data, response: str, regressors=None, entity: str | None = None,
                     time: str | None = None, intercept: bool = True, sample=None, client=None,
                     **dask_options) -> FamaMacBethFit:
    """Fama-MacBeth: least squares period by period, slopes averaged; standard errors from the
    slope series with any time-series estimator (`fit.infer(lagwise.estimator(...))`).

    Periods with fewer rows than coefficients or collinear regressors are skipped and listed
    (`fit.skipped`); the remaining periods are treated as consecutive. Accepts the same data as
    `fit_panel`, including a Dask DataFrame or a folder of Parquet files."""
    from .distributed import is_distributed
    regs = as_list(regressors)
    entity, time = _panel_names(data, entity, time)
    _check_names(response, regs, entity, time, intercept)
    if is_distributed(data):
        from .distributed import fit_fama_macbeth_distributed
        return fit_fama_macbeth_distributed(data, response, regs, entity, time,
                                            intercept=intercept, sample=sample, client=client,
                                            **dask_options)
    pdata, values, _, _ = _checked_panel(data, response, regs, entity, time, sample)
    n = len(values)
    X = values[:, :len(regs)]
    if intercept:
        X = np.column_stack([np.ones(n), X])
    terms = ([INTERCEPT] if intercept else []) + regs
    pdata.sample.notes.extend(PanelInfo(entity=entity, time=time, entities=pdata.entities,
                                        periods=pdata.periods, entity_codes=pdata.entity_codes,
                                        time_codes=pdata.time_codes).describe())
    return _fama_macbeth(X, values[:, -1], pdata.time_codes, pdata.periods, terms, response,
                         pdata.sample)


# --------------------------------------------------------------------------- sensitivity

def panel_sweep(model, kernels=None, values=None, small_sample: bool = False,
                repair: bool = True, fama_macbeth: bool = True):
    """The panel sensitivity sweep: Driscoll-Kraay with each kernel along the bandwidth b (in
    periods), and Fama-MacBeth's standard error from a Bartlett kernel over its slope series on
    the same grid (its own estimate; the time-series small-sample factor). One SweepResult; the
    curve groups are in `extras["curve_group"]`."""
    from .covariance import estimator
    from .kernels import KERNELS
    from .sweep import SweepResult, sweep
    kernels = list(KERNELS) if kernels is None else (
        [kernels] if isinstance(kernels, str) else list(kernels))
    dk = sweep(model, [estimator("driscoll_kraay", kernel=k, bandwidth=1.0,
                                 small_sample=small_sample, repair=repair) for k in kernels],
               values)
    groups = ["Driscoll-Kraay"] * len(kernels)
    if not fama_macbeth:
        dk.extras["curve_group"] = groups
        return dk
    try:
        fm = model.fama_macbeth()
    except (SpecificationError, EstimationError) as exc:
        dk.extras["curve_group"] = groups
        dk.extras["fama_macbeth_note"] = str(exc)
        return dk
    terms = dk.terms
    cols = [fm.terms.index(t) if t in fm.terms else None for t in terms]
    fsw = sweep(fm, [estimator("kernel", kernel="bartlett", bandwidth=1.0, small_sample=True)],
                dk.values)
    n = len(dk.values)

    def pick(arr, fill):
        out = np.full((1, n, len(terms)), fill, dtype=arr.dtype)
        for j, c in enumerate(cols):
            if c is not None:
                out[0, :, j] = arr[0, :, c]
        return out
    for row in fsw.long_runs:
        for lr in row:
            lr.span = fm.nobs
    return SweepResult(
        labels=dk.labels + ["Fama-MacBeth, Bartlett"], estimators=dk.estimators + fsw.estimators,
        values=dk.values, terms=terms,
        estimate=np.concatenate([dk.estimate, pick(fsw.estimate, np.nan)]),
        std_error=np.concatenate([dk.std_error, pick(fsw.std_error, np.nan)]),
        t_stat=np.concatenate([dk.t_stat, pick(fsw.t_stat, np.nan)]),
        lags=np.concatenate([dk.lags, fsw.lags]), status=np.concatenate([dk.status, fsw.status]),
        reasons=np.concatenate([dk.reasons, fsw.reasons]),
        long_runs=dk.long_runs + fsw.long_runs, info=dk.info,
        extras={"curve_group": groups + ["Fama-MacBeth"]})


# --------------------------------------------------------------------------- diagnostics

#: Pesaran's CD uses every pair of entities up to this many entities (a random subset beyond).
CD_MAX_ENTITIES = 2000


def _dense(values, e_codes, t_codes, n_e, n_t):
    out = np.full((n_t, n_e), np.nan)
    out[t_codes, e_codes] = values
    return out


def pesaran_cd(resid, e_codes, t_codes, n_e, n_t, min_overlap: int = 3, seed: int = 0):
    """Pesaran's CD statistic of cross-sectional dependence: sqrt(2/(N(N-1))) sum_{i<j}
    sqrt(T_ij) rho_ij, with rho_ij the correlation of entities i and j over their T_ij common
    periods (each entity's residuals demeaned over its own rows), pairs with fewer than
    `min_overlap` common periods left out; N(0,1) under no cross-sectional dependence
    (Pesaran 2004, CESifo WP 1229; 2015, Econometric Reviews 34 [M: recalled]).
    Returns (CD, entities used, pairs used)."""
    used = np.arange(n_e)
    if n_e > CD_MAX_ENTITIES:
        used = np.sort(np.random.default_rng(seed).choice(n_e, CD_MAX_ENTITIES, replace=False))
        keep = np.isin(e_codes, used)
        remap = np.full(n_e, -1)
        remap[used] = np.arange(used.size)
        resid, e_codes, t_codes = resid[keep], remap[e_codes[keep]], t_codes[keep]
    n = used.size
    counts = np.bincount(e_codes, minlength=n)
    means = np.bincount(e_codes, weights=resid, minlength=n) / np.maximum(counts, 1)
    dense = _dense(resid - means[e_codes], e_codes, t_codes, n, n_t)
    present = np.isfinite(dense)
    e = np.where(present, dense, 0.0)
    m = present.astype(float)
    overlap = m.T @ m
    num = e.T @ e
    sq = (e**2).T @ m            # [i, j] = sum over common periods of e_i^2
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = num / np.sqrt(sq * sq.T)
    iu = np.triu_indices(n, 1)
    ok = (overlap[iu] >= min_overlap) & np.isfinite(rho[iu])
    pairs = int(ok.sum())
    if pairs == 0:
        return np.nan, n, 0
    cd = np.sqrt(2.0 / (n * (n - 1))) * np.sum(np.sqrt(overlap[iu][ok]) * rho[iu][ok])
    return float(cd), n, pairs


def wooldridge_serial(fit):
    """Wooldridge's test of first-order serial correlation within entities (Wooldridge 2010,
    Econometric Analysis of Cross Section and Panel Data, 10.6.3; Drukker 2003, Stata Journal
    3(2) [M: recalled]): least squares of the first-differenced model (consecutive periods of
    an entity), then the regression of its residuals on their own lag; with no serial
    correlation in the levels' errors the coefficient is -0.5. Returns (F, df1, df2, p) with the
    coefficient's standard error clustered by entity."""
    from scipy import stats
    p = fit.panel
    if fit._raw is not None:
        X, y = fit._raw
    else:
        has = INTERCEPT in fit.terms
        X, y = (fit.X[:, 1:] if has else fit.X), fit.y
    order = np.lexsort((p.time_codes, p.entity_codes))
    e, t = p.entity_codes[order], p.time_codes[order]
    consecutive = (e[1:] == e[:-1]) & (t[1:] == t[:-1] + 1)
    cur, prev = order[1:][consecutive], order[:-1][consecutive]
    if cur.size < 10 or X.shape[1] == 0:
        raise EstimationError("too few consecutive periods within entities for the serial "
                              "correlation test")
    dx, dy = X[cur] - X[prev], y[cur] - y[prev]
    coef, *_ = np.linalg.lstsq(dx, dy, rcond=None)
    u = dy - dx @ coef
    ent = e[1:][consecutive]
    tim = t[1:][consecutive]
    # pairs (u_t, u_{t-1}) within an entity: consecutive differences
    key = ent.astype(np.int64) * (p.n_periods + 1) + tim
    pos = {int(k): i for i, k in enumerate(key)}
    lagged = np.array([pos.get(int(k) - 1, -1) for k in key])
    ok = lagged >= 0
    if ok.sum() < 10:
        raise EstimationError("too few entities with three consecutive periods for the serial "
                              "correlation test")
    a, b, g = u[ok], u[lagged[ok]], ent[ok]
    rho = float(a @ b / (b @ b))
    resid = a - rho * b
    sums = np.bincount(g, weights=b * resid, minlength=p.n_entities)
    groups = int(np.count_nonzero(np.bincount(g, minlength=p.n_entities)))
    var = groups / (groups - 1.0) * float(sums @ sums) / float(b @ b) ** 2
    f = (rho + 0.5) ** 2 / var
    return f, 1, groups - 1, float(stats.f.sf(f, 1, groups - 1)), rho


def diagnose_panel(fit, progress=None):
    """Residual diagnostics for a panel: what the panel estimators correct for.

    Tests: Pesaran's CD (cross-sectional dependence of residuals), Wooldridge's first-order
    serial correlation within entities, and F tests of the period means and of the entity means
    of the residuals (what clustering by time or by entity allows for). Correlograms: the pooled
    autocorrelation of residuals within entities (lags in periods), of the period-average
    residual, and of each per-period sum of the moment contributions (what Driscoll-Kraay
    corrects for). progress(done, total, what) is called before each of four stages and at the
    end."""
    from scipy import stats
    step = progress or (lambda done, total, what: None)
    from .diagnostics import DiagnosticReport, _Section, _finite_rows, _row
    p = getattr(fit, "panel", None)
    if p is None or not hasattr(fit, "_raw"):
        raise EstimationError("panel diagnostics need the rows of an in-memory panel fit")
    resid = fit.resid
    if np.abs(resid).max() <= 1e-12 * (np.abs(fit.y).max() or 1.0):
        raise EstimationError("the regression fits perfectly (all residuals are zero): there "
                              "is nothing to diagnose")
    notes: list[str] = []
    rows: list[dict] = []
    n, g, t = fit.nobs, p.n_entities, p.n_periods
    with np.errstate(all="ignore"):
        step(0, 4, "cross-sectional dependence")
        with _Section("Pesaran CD", notes):
            cd, used, pairs = pesaran_cd(resid, p.entity_codes, p.time_codes, g, t)
            _row(rows, "Pesaran CD", cd, np.nan, 2 * stats.norm.sf(abs(cd)),
                 "no cross-sectional dependence of the residuals",
                 f"scaled sum of pairwise residual correlations over common periods, N(0,1) "
                 f"(Pesaran 2004); {pairs} pairs of {used} entities"
                 + (" (a random subset)" if used < g else ""))
        step(1, 4, "serial correlation within entities")
        with _Section("Wooldridge serial correlation", notes):
            f, d1, d2, pv, rho = wooldridge_serial(fit)
            _row(rows, "Wooldridge serial correlation", f, d1, pv,
                 "no first-order serial correlation within entities",
                 f"first differences: lag coefficient of the residuals {rho:.3f} against -0.5, "
                 "entity-clustered F (Wooldridge 2010)", df2=float(d2))
        step(2, 4, "period and entity means")
        for dim, codes, groups in (("period", p.time_codes, t), ("entity", p.entity_codes, g)):
            with _Section(f"{dim} means", notes):
                counts = np.bincount(codes, minlength=groups)
                sums = np.bincount(codes, weights=resid, minlength=groups)
                between = float(np.sum(sums**2 / np.maximum(counts, 1)) - resid.sum()**2 / n)
                within = float(resid @ resid) - float(np.sum(sums**2 / np.maximum(counts, 1)))
                d1, d2 = groups - 1, n - groups
                f = (between / d1) / (within / d2)
                _row(rows, f"{dim.capitalize()} means of residuals", f, d1,
                     float(stats.f.sf(f, d1, d2)),
                     f"residuals have the same mean in every {dim}",
                     f"one-way analysis of variance of the residuals by {dim} "
                     f"({between / (between + within):.1%} of their variance between "
                     f"{dim}s); assumes independent errors", df2=float(d2))
        tests = _finite_rows(rows, notes)
        step(3, 4, "autocorrelation functions")
        acf_df, score_acf, persistence, bands = _panel_correlograms(fit, notes)
    reading = _panel_reading(tests, acf_df, persistence, fit)
    step(4, 4, "")
    return DiagnosticReport(tests=tests, acf=acf_df, pacf=acf_df.iloc[:0], bands=bands,
                            score_acf=score_acf, persistence=persistence, reading=reading,
                            notes=notes)


def _panel_correlograms(fit, notes):
    p = fit.panel
    t = p.n_periods
    nl = int(min(12, max(1, t // 4)))
    lag_index = pd.RangeIndex(1, nl + 1, name="lag")
    dense = _dense(fit.resid, p.entity_codes, p.time_codes, p.n_entities, t)
    present = np.isfinite(dense)
    d = np.where(present, dense, 0.0)
    within = np.full(nl, np.nan)
    denom = float((d**2).sum())
    for j in range(1, nl + 1):
        both = present[j:] & present[:-j]
        within[j - 1] = float((d[j:] * d[:-j])[both].sum()) / denom if denom > 0 else np.nan
    avg = np.nanmean(dense, axis=1)
    avg = avg[np.isfinite(avg)] - np.nanmean(avg)
    from statsmodels.tsa.stattools import acf
    avg_acf = acf(avg, nlags=nl, fft=True)[1:] if np.ptp(avg) > 0 else np.full(nl, np.nan)
    acf_df = pd.DataFrame({"resid": within, "resid_sq": avg_acf,
                           "resid_band": np.full(nl, 1.96 / np.sqrt(fit.nobs)),
                           "resid_sq_band": np.full(nl, 1.96 / np.sqrt(t))}, index=lag_index)
    sums = fit.period_model.contributions
    score_acf = pd.DataFrame(
        {name: acf(sums[:, i], nlags=nl, fft=True)[1:] if np.ptp(sums[:, i]) > 0
         else np.full(nl, np.nan) for i, name in enumerate(fit.moment_names)}, index=lag_index)
    from .bandwidth import select_bandwidth
    andrews = select_bandwidth(fit.period_model, "bartlett", "andrews")
    persistence = pd.DataFrame({"rho1": score_acf.iloc[0]}).assign(andrews_bartlett_b=andrews.b)
    bands = {"acf": f"95% bands +-1.96/sqrt(N) within entities and +-1.96/sqrt(T_p) for the "
                    f"period average (T_p = {t})",
             "titles": ("Residual ACF within entities", "ACF of the period-average residual"),
             "score_title": "What Driscoll-Kraay corrects for: ACF of per-period sums",
             "score_axis": "autocorrelation of sum_i x_it e_it"}
    return acf_df, score_acf, persistence, bands


def _panel_reading(tests, acf_df, persistence, fit) -> list[str]:
    out = []
    row = lambda name: tests[tests.test == name]           # noqa: E731
    cd = row("Pesaran CD")
    if len(cd):
        r = cd.iloc[0]
        if r.p_value < 0.05:
            out.append(f"Residuals are correlated across entities within a period (Pesaran CD "
                       f"= {r.statistic:.1f}, p {_pw(r.p_value)}): evidence against standard "
                       "errors that treat entities as independent in a period (classical, HC, "
                       "clustering by entity alone); clustering by time, two-way clustering, "
                       "Driscoll-Kraay or Fama-MacBeth allow for it.")
        else:
            out.append("No significant cross-sectional dependence of the residuals at 5% "
                       "(Pesaran CD).")
    wd = row("Wooldridge serial correlation")
    if len(wd):
        r = wd.iloc[0]
        if r.p_value < 0.05:
            out.append("Residuals are serially correlated within entities (Wooldridge test "
                       f"p {_pw(r.p_value)}): evidence for clustering by entity (or a kernel "
                       "over time within entities).")
        else:
            out.append("No significant first-order serial correlation within entities at 5% "
                       "(Wooldridge test).")
    pm = row("Period means of residuals")
    if len(pm) and pm.iloc[0].p_value < 0.05:
        out.append("Residual means differ across periods: a common component that clustering by "
                   "time, Driscoll-Kraay or time fixed effects address.")
    em = row("Entity means of residuals")
    if len(em) and em.iloc[0].p_value < 0.05 and not fit.panel.effects:
        out.append("Residual means differ across entities: a persistent entity component that "
                   "clustering by entity or entity fixed effects address.")
    slopes = persistence.drop(index=INTERCEPT, errors="ignore").dropna()
    if len(slopes):
        worst = slopes.rho1.abs().idxmax()
        out.append(f"The per-period sum of the moment contribution of '{worst}' has first-order "
                   f"autocorrelation {slopes.rho1[worst]:.2f}; for reference the Andrews (1991) "
                   f"AR(1) plug-in for a Bartlett kernel over periods gives b = "
                   f"{float(persistence.andrews_bartlett_b.iloc[0]):.1f}.")
    out.append("These are tests of evidence, not verdicts; the F tests of means assume "
               "independent errors.")
    return out


def _pw(p: float) -> str:
    return "below 1e-16" if p < 1e-16 else (f"= {p:.2g}" if p >= 1e-4 else f"= {p:.1e}")
