"""Sensitivity of an IV/GMM fit along a tuning axis: for a GMM fit the weighting follows the
estimator (the two-step estimate, its efficient-form standard error and Hansen's J at every
value); for 2SLS the ordinary sweep with J added.

Each point of a two-step sweep is the two-step fit weighted by the estimator at that value, with
the S behind its weighting (from the first-step residuals) giving the standard errors: the same
numbers as `fit.two_step(est).infer(est)` and the comparison's row for that setting
(`IVFit.long_run_for`). The sweep result says so in `extras["chart_note"]`; a chart drawn for an
iterated or continuously updated fit shows these two-step curves (the cheaper curve) and names
them as such (`TWO_STEP_NOTE`)."""

from __future__ import annotations

import numpy as np

from ..blas import single_blas_thread
from ..covariance import longrun
from ..covariance.kernels import get_kernel
from ..covariance.registry import ModelInfo
from ..inference.sweep import SweepResult
from ..laws.reference import chi_square_upper
from .gmm_common import TWO_STEP_NOTE, axis_sweep


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
              "j_p_value": chi_square_upper(jstat, df) if df > 0 else np.full_like(jstat, np.nan),
              "chart_note": TWO_STEP_NOTE}
    return SweepResult(labels=[fam.curve_label(e.params) for e in ests], estimators=ests,
                       values=b, terms=list(first.terms), estimate=est, std_error=se,
                       t_stat=t, lags=lags, status=status,
                       reasons=np.full(status.shape, "", dtype=object), long_runs=runs,
                       info=ModelInfo(first.nobs, first.df_resid), extras=extras)


@single_blas_thread
def gmm_curves(fit, estimators, values=None):
    """Two-step GMM along the axis of one family for each estimator: the family's vectorised
    GMM sweep when it has one, else one two-step fit per grid point (one estimator)."""
    family = estimators[0].family
    kernels = [family.kernel_of(e.params) for e in estimators]
    if all(kernels):
        return gmm_sweep(fit, estimators, values)
    return axis_sweep(fit, estimators, values)


