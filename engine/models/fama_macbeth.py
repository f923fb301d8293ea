"""Fama-MacBeth (1973): the response on the regressors (and an intercept) period by period, the
slopes averaged; standard errors from the slope series with any time-series estimator
(classical, kernel with bandwidth rules, EWC, VAR). The in-memory and the Dask paths assemble
their result here."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..covariance.kernels import default_kernel
from ..blas import single_blas_thread
from ..covariance.registry import estimator
from ..data.columns import INTERCEPT, SampleInfo, as_list, index_label
from ..data.panels import PanelInfo, check_names, checked_panel, large_data_fit, panel_names
from ..errors import SpecificationError
from .ols import ONE_PASS_MAX_CONDITION
from .series import SeriesModel


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
        kernel = default_kernel()
        return [estimator("classical"),
                estimator(self.kernel_family, kernel=kernel, bandwidth="andrews",
                          small_sample=True),
                estimator(self.kernel_family, kernel=kernel, bandwidth="rule-of-thumb",
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


class _PeriodGroups:
    """Per-period sums over the rows of a panel: column sums over the (entities, periods) grid
    of a balanced panel in (entity, period) order, counting otherwise."""

    def __init__(self, t_codes, n_periods, grid=None):
        self.codes, self.n, self.grid = t_codes, n_periods, grid
        self.counts = (np.full(n_periods, grid[0]) if grid is not None
                       else np.bincount(t_codes, minlength=n_periods))

    def dot(self, a, b):
        """sum over each period's rows of a * b."""
        if self.grid is not None:
            return np.einsum("ep,ep->p", a.reshape(self.grid), b.reshape(self.grid))
        return np.bincount(self.codes, weights=a * b, minlength=self.n)

    def residuals(self, cols, y, coef):
        """y - x_t' coef[period of t] for every row."""
        if self.grid is not None:
            r = np.array(y.reshape(self.grid))
            for a, col in enumerate(cols):
                r -= col.reshape(self.grid) * coef[:, a]
            return r.reshape(-1)
        r = np.array(y, dtype=float)
        for a, col in enumerate(cols):
            r -= col * coef[self.codes, a]
        return r


@single_blas_thread
def fama_macbeth_from_rows(X, y, t_codes, periods, terms, response, sample, panel=None,
                           grid=None):
    """The period-by-period least-squares slopes. Each period's cross-products come from one
    pass over each pair of columns for all periods at once (per-period sums); a period whose
    column-scaled cross-product matrix is well conditioned (the bound of a one-pass Cholesky QR)
    is solved by the semi-normal equations with one refinement step on its residuals, the others
    by pivot-free Householder QR of their rows as before. `grid`: (entities, periods) when the
    rows are a balanced panel in (entity, period) order."""
    k = X.shape[1]
    t_p = len(periods)
    groups = _PeriodGroups(t_codes, t_p, grid)
    cols = [X[:, a] for a in range(k)]
    gram = np.empty((t_p, k + 1, k + 1))
    for a, u in enumerate([*cols, y]):
        for b, v in enumerate([*cols, y][a:], start=a):
            gram[:, a, b] = gram[:, b, a] = groups.dot(u, v)
    counts = groups.counts
    xtx, xty = gram[:, :k, :k], gram[:, :k, k]
    d = np.sqrt(np.maximum(np.diagonal(xtx, axis1=1, axis2=2), 0.0))
    enough = counts >= k
    nonzero = (d > 0).all(axis=1)
    coef = np.zeros((t_p, k))
    solved = np.zeros(t_p, dtype=bool)
    cand = np.flatnonzero(enough & nonzero)
    if cand.size:
        ds = d[cand]
        scaled = xtx[cand] / (ds[:, :, None] * ds[:, None, :])
        try:                                   # all periods at once; one by one if any fails
            chol = np.linalg.cholesky(scaled)
            good = np.ones(cand.size, dtype=bool)
        except np.linalg.LinAlgError:
            good = np.zeros(cand.size, dtype=bool)
            chol = np.zeros_like(scaled)
            for i in range(cand.size):
                try:
                    chol[i] = np.linalg.cholesky(scaled[i])
                    good[i] = True
                except np.linalg.LinAlgError:
                    continue
        if good.any():
            cond = np.full(cand.size, np.inf)
            cond[good] = np.linalg.cond(chol[good])
            good &= np.isfinite(cond) & (cond <= ONE_PASS_MAX_CONDITION)
        which = cand[good]
        if which.size:
            sg, dg = scaled[good], ds[good]
            coef[which] = np.linalg.solve(sg, (xty[which] / dg)[..., None])[..., 0] / dg
            resid = groups.residuals(cols, y, coef)
            rhs = np.column_stack([groups.dot(col, resid) for col in cols])[which]
            step = np.linalg.solve(sg, (rhs / dg)[..., None])[..., 0] / dg
            ok = np.isfinite(step).all(axis=1)
            coef[which[ok]] += step[ok]
            solved[which] = True
    rows, labels, kept, skipped = [], [], [], {}
    order = bounds = None
    for p in range(t_p):
        label = index_label(periods[p])
        if counts[p] < k:
            skipped[label] = f"{counts[p]} rows for {k} coefficients"
            continue
        if not nonzero[p]:
            skipped[label] = "a regressor is zero throughout the period"
            continue
        if not solved[p]:
            if order is None:
                order = np.argsort(t_codes, kind="stable")
                bounds = np.searchsorted(t_codes[order], np.arange(t_p + 1))
            est = _qr_slopes(X, y, order[bounds[p]:bounds[p + 1]])
            if est is None:
                skipped[label] = "regressors are collinear within the period"
                continue
            coef[p] = est
        rows.append(coef[p])
        labels.append(periods[p])
        kept.append(int(counts[p]))
    return assemble_fama_macbeth(rows, labels, kept, skipped, periods, terms, response,
                                 sample, panel)


def _qr_slopes(X, y, idx):
    """One period's slopes by QR of its column-scaled rows with one refinement step (None when
    the regressors are collinear within the period)."""
    xs, ys = X[idx], y[idx]
    norms = np.abs(xs).max(axis=0)
    q, r = np.linalg.qr(xs / norms)
    d = np.abs(np.diag(r))
    if d.min() <= 1e-10 * d.max():
        return None
    coef = sla.solve_triangular(r, q.T @ ys) / norms
    resid = ys - xs @ coef
    coef += sla.solve_triangular(r, q.T @ resid) / norms      # one refinement step
    return coef


def assemble_fama_macbeth(rows, labels, counts, skipped, periods, terms, response, sample,
                          panel=None) -> "FamaMacBethFit":
    """The Fama-MacBeth result from the period-by-period slopes (in memory or from the Dask
    path's per-period sums): the slope table, the sample (with the skipped periods) and the
    fit."""
    k = len(terms)
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
    regs = as_list(regressors)
    entity, time = panel_names(data, entity, time)
    check_names(response, regs, entity, time, intercept)
    large = large_data_fit(data, "fama_macbeth")
    if large is not None:
        return large(data, response, regs, entity, time,
                                            intercept=intercept, sample=sample, client=client,
                                            **dask_options)
    pdata, values, _, _ = checked_panel(data, response, regs, entity, time, sample,
                                        ones=intercept)
    X = values[:, :len(regs) + int(intercept)]
    terms = ([INTERCEPT] if intercept else []) + regs
    info = PanelInfo(entity=entity, time=time, entities=pdata.entities, periods=pdata.periods,
                     entity_codes=pdata.entity_codes, time_codes=pdata.time_codes,
                     entity_major=pdata.entity_major)
    pdata.sample.notes.extend(info.describe())
    return fama_macbeth_from_rows(X, values[:, -1], pdata.time_codes, pdata.periods, terms,
                                  response, pdata.sample, grid=info.grid)
