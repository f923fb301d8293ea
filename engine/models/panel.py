"""Pooled and fixed-effects least squares on a stacked panel.

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
* `within_lags()`: sum_i sum_t g_it g_i,t-j' for every lag j in periods (from each entity's own
  rows: products of its pairs of rows, or an FFT of its row of a dense grid, whichever is
  cheaper), for a kernel over time within each entity.

Data too large for memory (a Dask DataFrame, a folder of Parquet files) is handed to the fit
functions registered for it (`register_large_data`; engine.distributed registers itself).
"""

from __future__ import annotations


import numpy as np
import pandas as pd
from scipy import fft as sfft

from ..capabilities import Capabilities
from ..covariance.fewclusters import ClusterDesign, nested_in
from ..data.columns import INTERCEPT, as_list
from ..data.groupings import Grouping, as_names, grouping_from
from ..data.dates import spacing_note
from ..data.panels import (PanelInfo, check_names, checked_panel, columns_of,
                           describe_effects, large_data_fit, panel_names)
from ..errors import EstimationError, SpecificationError
from ..inference.compare import compare
from .fama_macbeth import FamaMacBethFit, fama_macbeth_from_rows
from .ols import OLSFit
from .base import MomentModel
from .within import EFFECTS, within, effects_of


#: A regressor whose within-transformed norm falls below this fraction of its centred norm is
#: absorbed by the effects.
ABSORBED_TOL = 1e-9


#: Dense entity x period blocks for the within-entity lag products hold at most this many numbers.
DENSE_BLOCK = 4_000_000


class PanelRows:
    """What a fit on a stacked panel's rows offers the panel estimators (mixed into the least
    squares and the IV fits of panels): groupings by entity, by period, by their cells and by
    the columns named in `clusters=`; group sums; the per-period model; within-entity lag
    products; the absorbed effects. Needs `panel` (PanelInfo), `groupings` and the moment-model
    protocol."""

    PANEL_GROUPINGS = ("entity", "time")
    #: the intersection of entities and periods: one row per cell (two-way clustering)
    CELLS = "entity x time"

    def grouping(self, name: str) -> Grouping:
        if name in self.PANEL_GROUPINGS or name == self.CELLS:
            def build():
                p = self.panel
                if name == self.CELLS:
                    key = p.entity_codes * p.n_periods + p.time_codes
                    codes, uniq = pd.factorize(key, sort=True)
                    return Grouping(name, codes.astype(np.int64), pd.RangeIndex(len(uniq)))
                codes, labels = ((p.entity_codes, p.entities) if name == "entity"
                                 else (p.time_codes, p.periods))
                return Grouping(name, codes, labels)
            return self.caches.get(f"grouping_{name}", build)
        return super().grouping(name)

    def group_sums(self, dim: str) -> np.ndarray:
        """Sums of the working moment contributions within each entity, period or group."""
        if dim not in EFFECTS:
            return super().group_sums(dim)

        return self.caches.get(f"sums_{dim}", lambda: self._grouped(
            self.working_contributions, None, dim))

    def _grouped(self, values, weights, dim):
        """Sums of the columns of `values` (times `weights` per row, when given) within each
        entity or period: row or column sums of each column on a balanced panel in (entity,
        period) order, contiguous blocks for entities in entity order, counting otherwise."""
        p = self.panel
        codes, n = ((p.entity_codes, p.n_entities) if dim == "entity"
                    else (p.time_codes, p.n_periods))
        out = np.empty((n, values.shape[1]))
        grid = p.grid
        starts = None
        if grid is None and dim == "entity" and p.entity_major:
            starts = np.concatenate([[0], np.cumsum(p.counts)[:-1]])
        for j in range(values.shape[1]):
            col = values[:, j]
            if grid is not None:
                spec = "et,et->e" if dim == "entity" else "et,et->t"
                if weights is None:
                    out[:, j] = col.reshape(grid).sum(axis=1 if dim == "entity" else 0)
                else:
                    out[:, j] = np.einsum(spec, col.reshape(grid), weights.reshape(grid))
                continue
            w = col if weights is None else col * weights
            if starts is not None:
                out[:, j] = np.add.reduceat(w, starts)
            else:
                out[:, j] = np.bincount(codes, weights=w, minlength=n)
        return out

    def absorbed_factors(self) -> tuple:
        """((name, codes per row), ...) of the effects the within transformation absorbed."""
        p = self.panel
        return tuple((e, p.entity_codes if e == "entity" else p.time_codes) for e in p.effects)

    def effects_nested_in(self, name: str) -> bool:
        """Every absorbed effect lies inside one cluster of the grouping (entity effects with
        clusters by entity or by an industry containing the entities)."""
        eff = self.absorbed_factors()
        if not eff:
            return False
        if tuple(self.panel.effects) == (name,):
            return True
        codes = self.grouping(name).codes
        return all(nested_in(c, codes) for _, c in eff)

    @property
    def period_model(self) -> "PeriodSums":
        """The per-period sums as a time-series moment model on the T_p periods."""
        return self.caches.get("period_model", lambda: PeriodSums(self, self.group_sums("time")))

    def within_lags(self) -> np.ndarray:
        """W_j = sum_i sum_t g_it g_i,t-j' (working basis) for j = 0..T_p-1: (T_p, m, m)."""
        return self.caches.get("within_lags", lambda: within_lag_products(
            self.working_contributions, self.panel.entity_codes, self.panel.time_codes,
            self.panel.n_entities, self.panel.n_periods))


class PanelFit(PanelRows, OLSFit):
    """Least squares on a stacked panel, pooled or with fixed effects (see the module docstring).

    N (`nobs`) counts rows; K = k + the effect parameters absorbed; `df_resid` = N - K."""

    kind = "panel least squares"
    df_reason = "N - K"
    kernel_family = "driscoll_kraay"

    def __init__(self, *, X, y, terms, index, response, sample, panel: PanelInfo,
                 raw=None, table=None, horizon=None, scales=None, xy=None):
        self.panel = panel
        self._raw = raw                    # untransformed (regressors, y) for Fama-MacBeth
        super().__init__(X=X, y=y, terms=terms, index=index, response=response, sample=sample,
                         horizon=horizon, table=table, scales=scales, xy=xy)

    def _has_leverage(self) -> bool:
        p = self.panel
        return len(p.effects) < 2 or p.balanced

    def _compute_leverage(self):
        if not self._has_leverage():
            return None          # two-way on an unbalanced panel: not available in closed form
        base = super()._compute_leverage()
        p, eff = self.panel, self.panel.effects
        if not eff:
            return base
        if eff == ("entity",):
            return base + 1.0 / p.counts[p.entity_codes]
        if eff == ("time",):
            return base + 1.0 / p.period_counts[p.time_codes]
        return base + 1.0 / p.n_periods + 1.0 / p.n_entities - 1.0 / self.nobs

    @property
    def capabilities(self) -> Capabilities:
        """A stacked panel: entity and period codes, a design, leverage where it has a closed
        form, clusters by entity, by period and by the columns named in `clusters=`, the hat
        matrix within clusters; the rows are not one time series."""
        return Capabilities(panel=True, design=True, leverage=self._has_leverage(),
                            least_squares=True,
                            clusters=("entity", "time", *self.groupings), cluster_leverage=True)

    def cluster_design(self) -> ClusterDesign:
        """The basis of the within-transformed X, the residuals and the absorbed effects."""
        return ClusterDesign(hat=self.working_design, resid=self.resid,
                             absorbed=self.absorbed_factors())

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
        """Sums of the working moment contributions within each entity, period or group. While
        the orthonormal basis is not formed (a well-conditioned design), the entity and period
        sums are the sums of x_t e_t mapped by C^-1 (q_t = x_t C^-1), so no T x k array is built
        for them."""
        if dim in EFFECTS and self._q is None and "working_contributions" not in self.caches:
            return self.caches.get(f"sums_{dim}", lambda: self._grouped(
                self.X, self.resid, dim) @ self._inv_c)
        return super().group_sums(dim)

    # ------------------------------------------------------------------ descriptions
    def describe_method(self) -> str:
        p = self.panel
        return describe_effects(p.effects, p.absorbed, p.components, p.iterations, p.balanced)

    def raw_rows(self):
        """(regressors, response) of the rows before the within transformation (the intercept
        column left out)."""
        if self._raw is not None:
            return self._raw
        has = INTERCEPT in self.terms
        return (self.X[:, 1:] if has else self.X), self.y

    def fama_macbeth(self) -> "FamaMacBethFit":
        """Fama-MacBeth on the same rows and regressors (period-by-period slopes with an
        intercept each period), cached."""
        def build():
            Xr, yr = self.raw_rows()          # effects: the untransformed regressors
            Xr = np.column_stack([np.ones(len(yr)), Xr])
            terms = [INTERCEPT] + [t for t in self.terms if t != INTERCEPT]
            return fama_macbeth_from_rows(Xr, yr, self.panel.time_codes, self.panel.periods, terms,
                                          self.response, self.sample, self.panel,
                                          grid=self.panel.grid)
        return self.caches.get("fama_macbeth", build)

    def compare(self, level: float = 0.95, reference: str = "auto", fama_macbeth: bool = True,
                **kwargs):
        """Every panel estimator (presets of the registry) and, with `fama_macbeth`, the
        Fama-MacBeth rows (their own estimate; classical and kernel over the slope series)."""
        return compare_panel(self, level, reference, fama_macbeth, **kwargs)

    def __repr__(self):
        p = self.panel
        return (f"PanelFit(response={self.response!r}, terms={self.terms}, N={self.nobs}, "
                f"entities={p.n_entities}, periods={p.n_periods}, effects={p.effects})")


def compare_panel(model, level: float = 0.95, reference: str = "auto", fama_macbeth: bool = True,
                  **kwargs):
    """The comparison of a panel fit (in memory or from sufficient statistics): every panel
    estimator and, with `fama_macbeth`, the Fama-MacBeth rows."""
    out = compare(model, level=level, reference=reference, **kwargs)
    if not fama_macbeth or kwargs.get("estimators") is not None:
        return out
    try:
        fm = model.fama_macbeth()
    except (SpecificationError, EstimationError) as exc:
        extra = pd.DataFrame([{**{c: np.nan for c in out.columns}, "estimator":
                               "Fama-MacBeth", "family": "fama_macbeth", "term": t,
                               "note": str(exc), "rejects": None, "why": "", "flags": "",
                               "reference": "", "law": "",
                               "estimate": np.nan} for t in model.terms])
        return pd.concat([out, extra], ignore_index=True)
    rows = fm.compare(level=level, reference=reference, estimators=fm.comparison_presets())
    rows = rows[rows.term.isin(model.terms)].copy()
    rows["estimator"] = "Fama-MacBeth, " + rows["estimator"].astype(str)
    rows["family"] = "fama_macbeth"
    why = fm.comparison_note(model)
    rows["why"] = [("; ".join(x for x in (w, why) if x)) for w in rows["why"]]
    return pd.concat([out, rows], ignore_index=True)


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
    def capabilities(self) -> Capabilities:
        """The per-period sums are a time series (no design of their own)."""
        return Capabilities(time_ordered=True)

    @property
    def moment_names(self):
        return self.parent.moment_names

    def _original_contributions(self):
        return self.working_contributions @ self.parent.working_basis

    @property
    def working_basis(self) -> np.ndarray:
        return self.parent.working_basis

    @property
    def working_basis_inverse(self) -> np.ndarray:
        return self.parent.working_basis_inverse

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


def within_lag_products(g, e_codes, t_codes, n_entities, n_periods, method: str = "auto"
                        ) -> np.ndarray:
    """sum_i sum_t g_it g_i,t-j' for j = 0..T_p-1, (T_p, m, m), from each entity's own rows
    sorted by entity and period. Per entity the cheaper of two exact routes: the products of its
    pairs of rows (n_i (n_i - 1) / 2 of them: a short or sparse entity) or a zero-padded FFT of
    its row of a dense entity x period grid (a long entity; blocks of at most DENSE_BLOCK
    numbers). The estimated work is checked against WITHIN_LAGS_BUDGET before anything is
    allocated. method: "auto", or "pairs" / "fft" for every entity (tests)."""
    g = np.asarray(g, dtype=float)
    n, m = g.shape
    out = np.zeros((max(n_periods, 1), m, m))
    if n == 0:
        return out
    order = np.lexsort((t_codes, e_codes))
    e_sorted, t_sorted = e_codes[order], t_codes[order]
    counts = np.bincount(e_codes, minlength=n_entities)
    size = sfft.next_fast_len(2 * n_periods, real=True)
    fft_cost = size * (2.5 * m * np.log2(max(size, 2)) + 2.0 * m * (m + 1))
    pair_cost = counts * (counts - 1) / 2.0 * m * m
    if method == "pairs":
        by_pairs = np.ones(n_entities, dtype=bool)
    elif method == "fft":
        by_pairs = np.zeros(n_entities, dtype=bool)
    else:
        by_pairs = pair_cost <= fft_cost
    work = float(pair_cost[by_pairs].sum() + fft_cost * np.count_nonzero(~by_pairs & (counts > 0)))
    if work > WITHIN_LAGS_BUDGET:
        raise EstimationError(
            f"the within-entity lag products of this panel ({n_entities:,} entities, "
            f"{n_periods:,} periods, {n:,} rows) need about {work:.2g} operations, more than "
            f"the budget of {WITHIN_LAGS_BUDGET:.2g}; use Driscoll-Kraay or two-way "
            "clustering, or fewer periods")
    rows_pairs = by_pairs[e_sorted]
    if rows_pairs.any():
        _pair_lags(g[order[rows_pairs]], e_sorted[rows_pairs], t_sorted[rows_pairs], out)
    if (~rows_pairs).any():
        sel = order[~rows_pairs]
        keep = np.flatnonzero(~by_pairs & (counts > 0))
        remap = np.full(n_entities, -1)
        remap[keep] = np.arange(keep.size)
        out += _fft_lags(g[sel], remap[e_codes[sel]], t_codes[sel], keep.size, n_periods, size)
    # lag 0 exactly (the FFT route carries rounding of the order of the largest term)
    out[0] = g.T @ g
    return out


#: The within-entity lag products may take about this many floating-point operations (a few
#: seconds); beyond it the estimator is refused with the panel's size instead of running on.
WITHIN_LAGS_BUDGET = 2e10


def _pair_lags(g, e, t, out) -> None:
    """Add sum over pairs of rows of one entity (rows sorted by entity, then period) of
    g_later g_earlier' to out[lag]."""
    n, m = g.shape
    starts = np.r_[0, np.flatnonzero(e[1:] != e[:-1]) + 1]
    lengths = np.diff(np.r_[starts, n])
    pos = np.arange(n) - np.repeat(starts, lengths)
    periods = out.shape[0]
    for d in range(1, int(lengths.max())):
        later = np.flatnonzero(pos >= d)
        earlier = later - d
        lag = t[later] - t[earlier]
        for a in range(m):
            ga = g[later, a]
            for b in range(m):
                out[:, a, b] += np.bincount(lag, weights=ga * g[earlier, b],
                                            minlength=periods)[:periods]


def _fft_lags(g, e_codes, t_codes, n_entities, n_periods, size) -> np.ndarray:
    """The same sums by zero-padded FFTs over a dense entity x period grid, in blocks of
    entities of at most DENSE_BLOCK numbers."""
    n, m = g.shape
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
    return sfft.irfft(acc, n=size, axis=0)[:n_periods]


def fit_panel(data, response: str, regressors=None, entity: str | None = None,
              time: str | None = None, effects=(), intercept: bool = True, sample=None,
              client=None, clusters=None, **dask_options):
    """Least squares on a stacked panel (one row per entity and period).

    data: a Table (its loader report names the panel's columns), a DataFrame (columns, or a
    MultiIndex of (entity, time)), or, for panels larger than memory, a Dask DataFrame or a
    folder of Parquet files (then `client` may be a dask.distributed Client; see
    engine.distributed). effects: () pooled, "entity", "time" or ("entity", "time"): fixed
    effects removed by the within transformation (the intercept is then absorbed).
    sample: optional (first, last) period, inclusive. clusters: column name(s) whose labels
    group the rows (an industry, a region) beyond entities and periods; the fit offers them to
    the cluster estimators, the wild cluster bootstrap and the cluster summary.

    Rows missing a value or a label are dropped and counted. Raises DataError for unusable
    columns (ids with fractions, a time column that does not parse, duplicate rows of one
    entity and period) and SpecificationError for an impossible model (one entity or period,
    a regressor absorbed by the effects).
    """
    regs = as_list(regressors)
    entity, time = panel_names(data, entity, time)
    eff = effects_of(effects)
    if eff:
        intercept = False
    check_names(response, regs, entity, time, intercept or bool(eff))
    if not regs and eff:
        raise SpecificationError("with fixed effects the model needs at least one regressor")
    large = large_data_fit(data, "panel")
    if large is not None:
        if clusters:
            dask_options["clusters"] = clusters
        return large(data, response, regs, entity, time, effects=eff, intercept=intercept,
                     sample=sample, client=client, **dask_options)
    lead = int(intercept)
    pdata, values, lo, hi = checked_panel(data, response, regs, entity, time, sample,
                                          ones=intercept)
    if hi[-1] - lo[-1] == 0:
        raise SpecificationError(f"response '{response}' is constant ({values[0, -1]:g}): "
                                 "nothing to explain")
    for j, r in enumerate(regs):
        if hi[j + lead] - lo[j + lead] == 0 and (intercept or eff):
            raise SpecificationError(f"regressor '{r}' is constant ({values[0, j + lead]:g}); it "
                                     + ("is absorbed by the effects" if eff else
                                        "duplicates the intercept") + ". Remove it.")
    g, t = len(pdata.entities), len(pdata.periods)
    info = PanelInfo(entity=entity, time=time, entities=pdata.entities, periods=pdata.periods,
                     entity_codes=pdata.entity_codes, time_codes=pdata.time_codes, effects=eff,
                     entity_major=pdata.entity_major)
    res = within(values, pdata.entity_codes, pdata.time_codes, g, t, eff, grid=info.grid)
    transformed, absorbed, comps, iters = res.values, res.absorbed, res.components, res.iterations
    info.absorbed, info.components, info.iterations = absorbed, comps, iters
    if eff:
        after = np.sqrt(res.squares)
        before = np.sqrt(res.squares + res.between)       # total = within + between
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
    k = len(regs) + lead
    if n <= k + absorbed:
        raise SpecificationError(f"{n} rows are too few for {k} coefficients and {absorbed} "
                                 "effect parameters")
    X = transformed[:, :k]                    # views of the column-major block
    y = transformed[:, k]
    if eff:
        scales = np.maximum(res.hi[:k], -res.lo[:k])
        raw = (values[:, :len(regs)], values[:, -1])      # untransformed, for Fama-MacBeth
    else:
        scales = np.maximum(hi[:k], -lo[:k])
        raw = None
    note = spacing_note(pdata.periods)
    if note:
        info.notes.append(note)
    sample_info = pdata.sample
    sample_info.notes.extend(info.describe())
    terms = ([INTERCEPT] if intercept else []) + regs
    fit = PanelFit(X=X, y=y, terms=terms, index=pdata.index, response=response,
                   sample=sample_info, panel=info, raw=raw, table=pdata.table,
                   horizon=pdata.horizon, scales=scales, xy=transformed[:, :k + 1])
    if eff and k:
        fit.sample.notes.append(describe_effects(eff, absorbed, comps, iters, info.balanced))
    frame, get, _, _ = columns_of(data, [])
    for name in as_names(clusters):
        if name in (response, *regs, entity, time):
            raise SpecificationError(f"'{name}' is a variable or an identifier of the panel; "
                                     "cluster by entity or time with by='entity' or by='time', "
                                     "or name another column")
        fit.groupings[name] = grouping_from(get(name), name, pdata.rows)
    return fit


