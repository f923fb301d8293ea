"""Fama-MacBeth (1973): the response on the regressors (and an intercept) period by period, the
slopes averaged; standard errors from the slope series with any time-series estimator
(classical, kernel with bandwidth rules, EWC, VAR). The in-memory and the Dask paths assemble
their result here."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..covariance.kernels import default_kernel
from ..covariance.registry import estimator
from ..data.columns import INTERCEPT, SampleInfo, as_list, index_label
from ..data.panels import PanelInfo, check_names, checked_panel, large_data_fit, panel_names
from ..errors import SpecificationError
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


def fama_macbeth_from_rows(X, y, t_codes, periods, terms, response, sample, panel=None):
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
    return assemble_fama_macbeth(rows, labels, counts, skipped, periods, terms, response,
                                 sample, panel)


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
    pdata, values, _, _ = checked_panel(data, response, regs, entity, time, sample)
    n = len(values)
    X = values[:, :len(regs)]
    if intercept:
        X = np.column_stack([np.ones(n), X])
    terms = ([INTERCEPT] if intercept else []) + regs
    pdata.sample.notes.extend(PanelInfo(entity=entity, time=time, entities=pdata.entities,
                                        periods=pdata.periods, entity_codes=pdata.entity_codes,
                                        time_codes=pdata.time_codes).describe())
    return fama_macbeth_from_rows(X, values[:, -1], pdata.time_codes, pdata.periods, terms, response,
                         pdata.sample)
