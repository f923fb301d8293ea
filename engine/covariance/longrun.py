"""An estimate of S, the long-run covariance of a model's moment contributions, and the kernel
estimator every kernel-based family shares.

Basis: S is estimated for the working contributions of the model (`model.working_contributions`;
for OLS q_t e_t in the orthonormal basis of X); `model.to_original` maps it to the S of the
contributions as named (x_t e_t). Scale: S is per observation (the "Omega" scale),
S = lim Var(T^-1/2 sum g_t). Estimators return S (a `LongRun`) only; the model forms the
sandwich (`model.covariance_from_long_run`). None of them knows which model produced the moments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import EstimationError
from ..laws.reference import Law
from .kernels import Kernel


#: A kernel estimate whose diagonal is this small against Gamma_0's has collapsed to zero.
COLLAPSE_TOL = 1e-10


@dataclass
class LongRun:
    """One estimate of S and how it was obtained."""

    S: np.ndarray | None
    bandwidth: float | None = None          # kernel bandwidth b
    lags: int | None = None                 # autocovariance lags used (beyond lag 0)
    factor: float = 1.0                     # small-sample factor applied to S
    how: str | None = None                  # how the tuning value was chosen, in words
    notes: list[str] = field(default_factory=list)
    flags: set[str] = field(default_factory=set)
    law: Law | None = None                  # the law the estimator's theory gives (None: normal)
    tuning: float | None = None             # the value on the family's tuning axis
    span: int | None = None                 # periods b is relative to (default: the model's T)


def kernel_many(model, kernel: Kernel, bandwidths, *, small_sample: bool = False,
                repair: bool = True, cache=None):
    """Kernel estimates S(b) = Gamma_0 + sum_j k(j/b)(Gamma_j + Gamma_j') for many b at once,
    from the autocovariance cache only (`cache`, default `model.moments`).

    Returns (S (n, m, m), lags (n,), smallest eigenvalue before repair (n,; NaN for PSD kernels),
    status (n,) with "" for an ordinary estimate, "repaired" (negative eigenvalues set to zero),
    "not_psd" (negative eigenvalues kept: repair off) or "collapsed" (S is zero to rounding in
    some direction: with weights flat over every lag the autocovariances sum to zero; S is NaN
    there, never rounding noise))."""
    cache = model.moments if cache is None else cache
    b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
    lags = kernel.lags_many(b, cache.nobs)
    s = cache.unpack(cache.kernel_sums(kernel, b))
    if small_sample:
        s = s * model.small_sample_factor
    min_eig = np.full(len(b), np.nan)
    status = np.full(len(b), "", dtype=object)
    g0 = np.abs(np.diag(cache.gamma0()))
    collapsed = ((np.abs(np.diagonal(s, axis1=1, axis2=2)) <= COLLAPSE_TOL * g0)
                 & (g0 > 0)).any(axis=1)
    if not kernel.psd:
        vals, vecs = np.linalg.eigh(np.where(np.isfinite(s), s, 0.0))
        min_eig = vals[:, 0]
        scale = np.maximum(np.abs(vals).max(axis=1), np.finfo(float).tiny)
        neg = (vals[:, 0] < -1e-12 * scale) & ~collapsed
        if neg.any():
            if repair:
                clipped = np.clip(vals[neg], 0.0, None)
                v = vecs[neg]
                s[neg] = (v * clipped[:, None, :]) @ np.swapaxes(v, 1, 2)
                status[neg] = "repaired"
            else:
                status[neg] = "not_psd"
    s[collapsed] = np.nan
    status[collapsed] = "collapsed"
    return s, lags, min_eig, status


def kernel(model, kernel: Kernel, bandwidth: float, *, small_sample=False, repair=True,
           how: str | None = None, cache=None) -> LongRun:
    s, lags, min_eig, status = kernel_many(model, kernel, [bandwidth], small_sample=small_sample,
                                           repair=repair, cache=cache)
    if status[0] == "collapsed":
        raise EstimationError(
            f"the {kernel.label} estimate of S is zero at b = {bandwidth:g} (T = "
            f"{model.nobs}): with weights that stay flat over every lag the autocovariances of "
            "the moment contributions sum to zero. Choose a smaller bandwidth.")
    out = LongRun(S=s[0], bandwidth=float(bandwidth), lags=int(lags[0]),
                  factor=model.small_sample_factor if small_sample else 1.0, how=how,
                  tuning=float(bandwidth))
    if status[0] == "repaired":
        out.flags.add("psd_repaired")
        out.notes.append(f"the {kernel.label} estimate of S was not positive semi-definite "
                         f"(smallest eigenvalue {min_eig[0]:.3g}); negative eigenvalues were set "
                         "to zero (eigenvalue repair)")
        vals = np.linalg.eigvalsh(s[0])
        if vals[0] <= 1e-10 * max(vals[-1], np.finfo(float).tiny):
            out.flags.add("near_singular")
            out.notes.append("after the repair S is singular: the standard error of some "
                             "combination of coefficients is zero, and t statistics involving "
                             "it are not meaningful")
    elif status[0] == "not_psd":
        out.flags.add("not_psd")
        out.notes.append(f"the {kernel.label} estimate of S is not positive semi-definite "
                         f"(smallest eigenvalue {min_eig[0]:.3g}); some variances may be "
                         "negative. Turn the eigenvalue repair on.")
    return out


def clip_to_psd(s: np.ndarray, what: str, out: LongRun) -> np.ndarray:
    """Set negative eigenvalues of a symmetric estimate to zero, flagging and noting it."""
    s = 0.5 * (s + s.T)
    vals, vecs = np.linalg.eigh(s)
    scale = max(float(np.abs(vals).max()), np.finfo(float).tiny)
    if vals[0] < -1e-12 * scale:
        out.flags.add("psd_repaired")
        out.notes.append(f"the {what} estimate of S was not positive semi-definite (smallest "
                         f"eigenvalue {vals[0]:.3g}); negative eigenvalues were set to zero")
        s = (vecs * np.clip(vals, 0.0, None)) @ vecs.T
    return s
