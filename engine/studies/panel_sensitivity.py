"""The panel's sensitivity chart: Driscoll-Kraay standard errors for every kernel along the
bandwidth in periods, with Fama-MacBeth's own estimate on the same grid."""

from __future__ import annotations

import numpy as np

from ..blas import single_blas_thread
from ..covariance.kernels import KERNELS, default_kernel, get_kernel
from ..errors import EstimationError, SpecificationError
from ..inference.sweep import SweepResult


@single_blas_thread
def panel_sweep(model, kernels=None, values=None, small_sample: bool = False,
                repair: bool = True, fama_macbeth: bool = True):
    """The panel sensitivity sweep: the panel's kernel estimators (its `kernel_family`:
    Driscoll-Kraay) with each kernel along the bandwidth b (in periods), and Fama-MacBeth's
    standard error from the first registered kernel over its slope series on the same grid (its
    own estimate; the time-series small-sample factor). One SweepResult; the curve groups are in
    `extras["curve_group"]`."""
    kernels = list(KERNELS) if kernels is None else (
        [kernels] if isinstance(kernels, str) else list(kernels))
    dk = model.sweep(kernels, values, small_sample=small_sample, repair=repair)
    groups = [dk.family.title.replace(" (panel)", "")] * len(kernels)
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
    fsw = fm.sweep([default_kernel()], dk.values, small_sample=True)
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
        labels=dk.labels + [f"Fama-MacBeth, {get_kernel(default_kernel()).label}"], estimators=dk.estimators + fsw.estimators,
        values=dk.values, terms=terms,
        estimate=np.concatenate([dk.estimate, pick(fsw.estimate, np.nan)]),
        std_error=np.concatenate([dk.std_error, pick(fsw.std_error, np.nan)]),
        t_stat=np.concatenate([dk.t_stat, pick(fsw.t_stat, np.nan)]),
        lags=np.concatenate([dk.lags, fsw.lags]), status=np.concatenate([dk.status, fsw.status]),
        reasons=np.concatenate([dk.reasons, fsw.reasons]),
        long_runs=dk.long_runs + fsw.long_runs, info=dk.info,
        extras={"curve_group": groups + ["Fama-MacBeth"]})
