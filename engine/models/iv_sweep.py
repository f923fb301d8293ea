"""Sensitivity of an IV/GMM fit along a tuning axis: for a GMM fit the weighting follows the
estimator (the two-step estimate, its efficient-form standard error and Hansen's J at every
value); for 2SLS the ordinary sweep with J added."""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..blas import single_blas_thread
from ..covariance import longrun
from ..covariance.kernels import get_kernel
from ..covariance.registry import ModelInfo, estimator as make_estimator
from ..errors import LagwiseError, SpecificationError
from ..inference.sweep import SweepResult


def gmm_sweep(fit, estimators, bandwidths=None):
    """Two-step GMM along the bandwidth for estimators whose S is a kernel weighting of the
    cached autocovariances (`Family.kernel_of`): at each (kernel, b), S(b) from the first step's
    cache weights the moments; the estimate, its standard error (efficient form with the same S)
    and J follow with no pass over the data."""
    first = fit.first_step if fit.first_step is not None else fit
    core = first.core
    ests = list(estimators)
    fam = ests[0].family
    kernels = [fam.kernel_of(e.params) for e in ests]
    small_sample = bool(ests[0].params.get("small_sample", False))
    repair = bool(ests[0].params.get("repair", True))
    b = fam.axis.grid(first) if bandwidths is None else np.atleast_1d(np.asarray(bandwidths,
                                                                                 dtype=float))
    nc, nb, k, L = len(kernels), len(b), first.k, len(core.z_names)
    est = np.full((nc, nb, k), np.nan)
    se = np.full((nc, nb, k), np.nan)
    jstat = np.full((nc, nb), np.nan)
    lags = np.zeros((nc, nb), dtype=int)
    status = np.full((nc, nb), "", dtype=object)
    runs = []
    for c, name in enumerate(kernels):
        kern = get_kernel(name)
        s, lg, _, st = longrun.kernel_many(first, kern, b, small_sample=small_sample,
                                           repair=repair)
        lags[c], status[c] = lg, st
        for i in range(nb):
            if st[i] == "collapsed" or not np.isfinite(s[i]).all():
                status[c, i] = status[c, i] or "unavailable"
                continue
            try:
                w = np.linalg.inv(s[i])
                aw = core.A.T @ w
                h = aw @ core.A
                beta = np.linalg.solve(h, aw @ core.b)
                cov = first.nobs * np.linalg.inv(h)
            except np.linalg.LinAlgError:
                status[c, i] = "unavailable"
                continue
            resid = core.b - core.A @ beta
            est[c, i] = beta
            var = np.diag(cov)
            se[c, i] = np.sqrt(np.where(var > 0, var, np.nan))
            jstat[c, i] = float(resid @ w @ resid) / first.nobs
        runs.append([longrun.LongRun(S=None, bandwidth=float(x), lags=int(n), tuning=float(x))
                     for x, n in zip(b, lg)])
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, est / se, np.nan)
    df = L - k
    extras = {"j_stat": jstat, "j_df": df,
              "j_p_value": stats.chi2.sf(jstat, df) if df > 0 else np.full_like(jstat, np.nan)}
    return SweepResult(labels=[fam.curve_label(e.params) for e in ests], estimators=ests,
                       values=b, terms=list(first.terms), estimate=est, std_error=se,
                       t_stat=t, lags=lags, status=status,
                       reasons=np.full(status.shape, "", dtype=object), long_runs=runs,
                       info=ModelInfo(first.nobs, first.df_resid), extras=extras)


def with_j(fit, sweep):
    """Add Hansen's J at every point of a sweep of a fixed-weight (2SLS) fit: J = T g' S^-1 g
    at the estimate, with the S of that point."""
    g = (fit.core.b - fit.core.A @ fit.beta) / fit.nobs
    df = fit.overidentification
    j = np.full(sweep.status.shape, np.nan)
    if df > 0:
        for c, est in enumerate(sweep.estimators):
            for i, v in enumerate(sweep.values):
                if sweep.status[c, i] in ("collapsed", "unavailable"):
                    continue
                try:
                    point = est.at(int(v) if est.family.axis.param != "bandwidth" else float(v))
                    s = point.long_run(fit).S
                    j[c, i] = float(fit.nobs * g @ np.linalg.solve(s, g))
                except (LagwiseError, np.linalg.LinAlgError):
                    continue
    sweep.extras.update({"j_stat": j, "j_df": df,
                         "j_p_value": stats.chi2.sf(j, df) if df > 0 else j})
    return sweep


@single_blas_thread
def gmm_curves(fit, estimators, values=None):
    """Two-step GMM along the axis of one family for each estimator: the family's vectorised
    GMM sweep when it has one, else one two-step fit per grid point (one estimator)."""
    family = estimators[0].family
    kernels = [family.kernel_of(e.params) for e in estimators]
    if all(kernels):
        return gmm_sweep(fit, estimators, values)
    if len(estimators) != 1:
        raise SpecificationError(f"a two-step sweep of {family.title} moves one estimator")
    return gmm_axis_sweep(fit, estimators[0], values)


def gmm_axis_sweep(fit, est, values=None):
    """Two-step GMM along any family's axis: at each value the weighting is S^-1 of the first
    step with the estimator moved to that value (one estimate of S per point)."""
    first = fit.first_step if fit.first_step is not None else fit
    family = est.family
    v = family.axis.grid(first) if values is None else np.atleast_1d(np.asarray(values,
                                                                                dtype=float))
    k, n = first.k, len(v)
    beta = np.full((1, n, k), np.nan)
    se = np.full((1, n, k), np.nan)
    j = np.full((1, n), np.nan)
    lags = np.full((1, n), -1, dtype=int)
    status = np.full((1, n), "", dtype=object)
    reasons = np.full((1, n), "", dtype=object)
    runs = []
    for i, value in enumerate(v):
        try:
            point = est.at(int(value) if family.axis.param != "bandwidth" else float(value))
            step = first.two_step(point)
            res = step.infer_weighting()
            beta[0, i] = step.beta
            se[0, i] = res.table.std_error.to_numpy()
            j[0, i] = step.j_test().statistic
            if res.long_run.lags is not None:
                lags[0, i] = res.long_run.lags
            runs.append(longrun.LongRun(S=None, bandwidth=res.long_run.bandwidth,
                                        lags=res.long_run.lags, law=res.long_run.law,
                                        tuning=float(value)))
        except LagwiseError as exc:
            status[0, i], reasons[0, i] = "unavailable", str(exc)
            runs.append(longrun.LongRun(S=None, tuning=float(value)))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, beta / se, np.nan)
    df = first.overidentification
    return SweepResult(labels=[family.curve_label(est.params)], estimators=[est], values=v,
                       terms=list(first.terms), estimate=beta, std_error=se, t_stat=t,
                       lags=lags, status=status, reasons=reasons, long_runs=[runs],
                       info=ModelInfo(first.nobs, first.df_resid),
                       extras={"j_stat": j, "j_df": df,
                               "j_p_value": stats.chi2.sf(j, df) if df > 0 else j})
