"""Standard errors of the coefficients along a family's tuning axis: the arrays a sweep is made
of. The kernel family's vectorised path reweights the cached autocovariances (for PSD kernels,
those of the coefficients' influence series: k series, not k(k+1)/2 pairs); every other family
makes one estimate of S per grid point. No pass over the data once the caches exist, and the
numbers equal one estimate per setting.
"""

from __future__ import annotations

import numpy as np

from ..errors import LagwiseError
from . import longrun
from .kernels import get_kernel
from .prewhiten import prepared, recoloured


def kernel_curves(model, estimators, values) -> dict:
    """The kernel family's vectorised sweep: arrays for `SweepResult`."""
    b = np.asarray(values, dtype=float)
    nc, nb, k = len(estimators), len(b), len(model.terms)
    se = np.empty((nc, nb, k))
    lags = np.empty((nc, nb), dtype=int)
    status = np.full((nc, nb), "", dtype=object)
    runs = []
    _fill_caches(model, estimators, b)
    for c, est in enumerate(estimators):
        p = est.params
        kern = get_kernel(p["kernel"])
        factor = model.small_sample_factor if p["small_sample"] else 1.0
        mmap = model.influence_map
        if p["prewhiten"]:
            pw = prepared(model)
            s_star, lg, _, st = longrun.kernel_many(model, kern, b, small_sample=p["small_sample"],
                                                    repair=p["repair"], cache=pw["moments"])
            s_w = recoloured(model, s_star)
            var = model.nobs * np.einsum("ia,nab,ib->ni", mmap, s_w, mmap)
        elif kern.psd:
            # V_ii = T sum_j w_j C_j(z)_ii with z_t = M g_t, the coefficients' influence series:
            # only k autocovariance series are needed, not m(m+1)/2 pairs
            var = model.nobs * factor * model.influence.kernel_sums(kern, b)
            lg = kern.lags_many(b, model.nobs)
            st = np.full(nb, "", dtype=object)
        else:
            s, lg, _, st = longrun.kernel_many(model, kern, b, small_sample=p["small_sample"],
                                               repair=p["repair"])
            var = model.nobs * np.einsum("ia,nab,ib->ni", mmap, s, mmap)   # diag of T M S M'
        with np.errstate(invalid="ignore"):
            se[c] = np.sqrt(np.where(var < 0, np.nan, var))
        st = np.where((st == "") & (var < 0).any(axis=1), "not_psd", st)
        lags[c] = lg
        status[c] = st
        runs.append([longrun.LongRun(S=None, bandwidth=float(x), lags=int(n_lags),
                                     tuning=float(x)) for x, n_lags in zip(b, lg)])
    return {"std_error": se, "lags": lags, "status": status, "long_runs": runs}


def _fill_caches(model, estimators, b) -> None:
    """A kernel weighting every lag needs the influence series' autocovariances at every lag:
    fill them first, once (the finite kernels then read the same cache)."""
    kernels = [get_kernel(e.params["kernel"]) for e in estimators if not e.params["prewhiten"]]
    if any(k.psd and not k.finite_support for k in kernels):
        model.influence.ensure(model.nobs - 1)


def loop_curves(model, estimators, values) -> dict:
    """The default sweep: one estimate of S per grid point."""
    nc, n, k = len(estimators), len(values), len(model.terms)
    se = np.full((nc, n, k), np.nan)
    lags = np.full((nc, n), -1, dtype=int)
    status = np.full((nc, n), "", dtype=object)
    reasons = np.full((nc, n), "", dtype=object)
    runs = []
    for c, est in enumerate(estimators):
        row = []
        for i, v in enumerate(values):
            try:
                point = est.at(int(v) if float(v).is_integer() else float(v))
                lr = point.long_run(model)
                var = np.diag(model.covariance_from_long_run(lr.S))
                with np.errstate(invalid="ignore"):
                    se[c, i] = np.sqrt(np.where(var < 0, np.nan, var))
                if (var < 0).any():
                    status[c, i] = "not_psd"
                if lr.lags is not None:
                    lags[c, i] = lr.lags
                row.append(_light(lr))
            except LagwiseError as exc:
                status[c, i] = "unavailable"
                reasons[c, i] = str(exc)
                row.append(longrun.LongRun(S=None, tuning=float(v)))
        runs.append(row)
    return {"std_error": se, "lags": lags, "status": status, "long_runs": runs,
            "reasons": reasons}


def _light(lr) -> longrun.LongRun:
    return longrun.LongRun(S=None, bandwidth=lr.bandwidth, lags=lr.lags, law=lr.law,
                           tuning=lr.tuning)
