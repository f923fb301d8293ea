"""Estimators of S, the long-run covariance of the moment contributions u_t.

Basis: S is estimated for the moment contributions expressed in the orthonormal basis of the
regressors (fit.scores = q_t e_t); fit.long_run_original_basis maps it back to x_t e_t.
Scale: S is per observation (the "Omega" scale), S = lim Var(T^-1/2 sum u_t); the sandwich is
V = (1/T) Q^-1 S Q^-1 with Q = X'X/T. Each function here returns S only; it never forms the
sandwich (see engine.covariance).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import EstimationError
from .kernels import Kernel

#: Leverage above 1 - LEVERAGE_TOL counts as 1 (the residual is zero by construction).
LEVERAGE_TOL = 1e-10


@dataclass
class LongRun:
    """One estimate of S and how it was obtained."""

    S: np.ndarray
    bandwidth: float | None = None
    lags: int | None = None
    factor: float = 1.0                     # small-sample factor applied to S
    rule: str | None = None                 # how the bandwidth was chosen, in words
    notes: list[str] = field(default_factory=list)
    flags: set[str] = field(default_factory=set)
    reference: str = "normal"               # reference law its theory gives ("auto")
    df: float | None = None                 # degrees of freedom of a t / F reference


def classical(fit) -> LongRun:
    """S = s^2 X'X/T with s^2 = e'e/(T-k): V = s^2 (X'X)^-1 (orthonormal basis: Q'Q = I)."""
    s = fit.sigma2 * (fit.q.T @ fit.q) / fit.nobs
    return LongRun(S=s, reference="t", df=fit.df_resid,
                   notes=["assumes errors uncorrelated with constant variance"])


def heteroskedasticity_robust(fit, kind: str) -> LongRun:
    """White-type S = (1/T) sum omega_t x_t x_t' for HC0-HC3 (MacKinnon & White 1985)."""
    e2 = fit.resid**2
    factor = 1.0
    if kind in ("hc2", "hc3"):
        h = fit.leverage
        bad = np.flatnonzero(h > 1.0 - LEVERAGE_TOL)
        if bad.size:
            rows = ", ".join(str(fit.index[i]) for i in bad[:5])
            raise EstimationError(
                f"{kind.upper()} is undefined: {bad.size} observation(s) have leverage 1 "
                f"(rows {rows}); each is fitted exactly, e.g. by a dummy for one row. "
                "Use HC0/HC1 or drop those rows.")
        omega = e2 / (1.0 - h) ** (1 if kind == "hc2" else 2)
    else:
        omega = e2
        if kind == "hc1":
            factor = fit.small_sample_factor
    q = fit.q
    s = (q * omega[:, None]).T @ q / fit.nobs * factor
    return LongRun(S=s, factor=factor)


def kernel_many(fit, kernel: Kernel, bandwidths, *, small_sample: bool = False,
                repair: bool = True):
    """Kernel estimates S(b) = Gamma_0 + sum_j k(j/b)(Gamma_j + Gamma_j') for many b at once.

    Returns (S array (n, k, k), lags array (n,), min eigenvalue before repair (n,), repaired (n,)).
    Uses only the autocovariance cache of `fit.moments`.
    """
    b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
    lags = np.array([kernel.lags_used(x, fit.nobs) for x in b])
    n_lags = int(lags.max()) + 1
    w = kernel.weights(b, n_lags)
    s = fit.moments.weighted(w)
    if small_sample:
        s = s * fit.small_sample_factor
    min_eig = np.full(len(b), np.nan)
    repaired = np.zeros(len(b), dtype=bool)
    if not kernel.psd:
        vals, vecs = np.linalg.eigh(s)
        min_eig = vals[:, 0]
        scale = np.maximum(np.abs(vals).max(axis=1), np.finfo(float).tiny)
        neg = vals[:, 0] < -1e-12 * scale
        if repair and neg.any():
            clipped = np.clip(vals[neg], 0.0, None)
            s[neg] = np.einsum("nij,nj,nkj->nik", vecs[neg], clipped, vecs[neg])
            repaired = neg
    # S collapses to (numerically) zero in some direction when the weights are flat over every
    # lag (truncated kernel with b >= T: the scores sum to zero). Never report rounding noise.
    g0 = np.diag(fit.moments.gamma0())
    collapsed = (np.diagonal(s, axis1=1, axis2=2) <= 1e-10 * g0).any(axis=1)
    s[collapsed] = np.nan
    return s, lags, min_eig, repaired


def kernel(fit, kernel: Kernel, bandwidth: float, *, small_sample=False, repair=True,
           rule: str | None = None) -> LongRun:
    s, lags, min_eig, repaired = kernel_many(fit, kernel, [bandwidth], small_sample=small_sample,
                                             repair=repair)
    if np.isnan(s[0]).any():
        raise EstimationError(
            f"the {kernel.display_name} estimate of S is zero at b = {bandwidth:g} (T = "
            f"{fit.nobs}): with weights that stay flat over every lag the autocovariances of "
            "the scores sum to zero. Choose a smaller bandwidth.")
    out = LongRun(S=s[0], bandwidth=float(bandwidth), lags=int(lags[0]),
                  factor=fit.small_sample_factor if small_sample else 1.0, rule=rule)
    if not kernel.psd and np.isfinite(min_eig[0]) and min_eig[0] < 0:
        if repaired[0]:
            out.flags.add("psd_repaired")
            out.notes.append(f"the {kernel.display_name} estimate of S was not positive "
                             f"semi-definite (smallest eigenvalue {min_eig[0]:.3g}); negative "
                             "eigenvalues were set to zero (eigenvalue repair)")
        else:
            out.flags.add("not_psd")
            out.notes.append(f"the {kernel.display_name} estimate of S is not positive "
                             f"semi-definite (smallest eigenvalue {min_eig[0]:.3g}); some "
                             "variances may be negative. Turn the eigenvalue repair on.")
    return out
