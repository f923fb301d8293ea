"""Sensitivity sweep: every (kernel, bandwidth) at once from the autocovariance cache.

For each kernel the weights over lags form a matrix W (bandwidths x lags); the long-run
covariances are W @ C with C the cached symmetric autocovariances, and the standard errors
follow from the sandwich in one einsum. No pass over the data after the cache exists, and the
numbers are the same as one `fit.infer(estimator("kernel", ...))` per setting.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import longrun
from .errors import SpecificationError
from .kernels import get_kernel
from .moments import MomentCache
from ._threads import single_blas_thread


@dataclass
class SweepResult:
    kernels: list[str]
    bandwidths: np.ndarray        # (n_b,)
    terms: list[str]
    estimate: np.ndarray          # (k,)
    std_error: np.ndarray         # (n_kernels, n_b, k)
    t_stat: np.ndarray            # (n_kernels, n_b, k)
    lags: np.ndarray              # (n_kernels, n_b)
    repaired: np.ndarray          # (n_kernels, n_b) eigenvalue repair applied
    small_sample: bool
    nobs: int

    @property
    def frame(self) -> pd.DataFrame:
        """Long format: one row per (kernel, bandwidth, term)."""
        nk, nb, k = self.std_error.shape
        return pd.DataFrame({
            "kernel": np.repeat(self.kernels, nb * k),
            "bandwidth": np.tile(np.repeat(self.bandwidths, k), nk),
            "lags": np.repeat(self.lags.ravel(), k),
            "term": np.tile(self.terms, nk * nb),
            "estimate": np.tile(self.estimate, nk * nb),
            "std_error": self.std_error.ravel(),
            "t_stat": self.t_stat.ravel(),
            "repaired": np.repeat(self.repaired.ravel(), k),
        })

    def critical_values(self, level: float = 0.95, reference: str = "normal") -> np.ndarray:
        """Two-sided critical value of |t| for each (kernel, bandwidth): constant under the
        normal law, a function of b/T under fixed-b (kernels without fixed-b tables: NaN)."""
        from scipy import stats
        nk, nb = self.lags.shape
        if reference == "normal":
            return np.full((nk, nb), stats.norm.ppf(0.5 + level / 2))
        if reference == "t":
            return np.full((nk, nb), stats.t.ppf(0.5 + level / 2, self.nobs - len(self.terms)))
        if reference != "fixed-b":
            raise SpecificationError(f"unknown reference law {reference!r} for a sweep")
        from .fixedb import FIXED_B_KERNELS, fixed_b_critical_value
        out = np.full((nk, nb), np.nan)
        for i, kern in enumerate(self.kernels):
            if kern in FIXED_B_KERNELS:
                for j, b in enumerate(self.bandwidths):
                    if b / self.nobs <= 1:
                        out[i, j] = fixed_b_critical_value(kern, b / self.nobs, level)
        return out

    def series(self, kernel: str, term: str, what: str = "t_stat") -> pd.Series:
        i, j = self.kernels.index(kernel), self.terms.index(term)
        return pd.Series(getattr(self, what)[i, :, j], index=self.bandwidths, name=what)


def influence_cache(fit) -> MomentCache:
    """Autocovariances of each coefficient's influence series z_t = B u_t (diagonal only),
    cached on the fit: the variances of a whole sweep of PSD kernels come from them."""
    cache = fit.__dict__.get("_influence")
    if cache is None:
        cache = MomentCache(fit.scores @ fit.bread.T, diagonal_only=True)
        fit.__dict__["_influence"] = cache
    return cache


def default_bandwidths(nobs: int, upper: int | None = None) -> np.ndarray:
    top = min(nobs, upper or max(12, min(nobs // 4, 100)))
    return np.arange(1, top + 1, dtype=float)


@single_blas_thread
def sweep(fit, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
          repair: bool = True, prewhiten: bool = False) -> SweepResult:
    """Standard errors and t statistics for every (kernel, bandwidth, term) at once.

    prewhiten=True sweeps the Andrews-Monahan prewhitened-and-recoloured estimators (the VAR(1)
    is fitted once; each bandwidth reweights the residuals' cache)."""
    if isinstance(kernels, str):
        kernels = [kernels]
    kernels = list(kernels)
    if not kernels:
        raise SpecificationError("choose at least one kernel to sweep")
    b = default_bandwidths(fit.nobs) if bandwidths is None else \
        np.atleast_1d(np.asarray(bandwidths, dtype=float))
    if b.size == 0 or np.any(~np.isfinite(b)) or np.any(b <= 0):
        raise SpecificationError("bandwidths must be positive numbers")
    nk, nb, k = len(kernels), len(b), fit.k
    se = np.empty((nk, nb, k))
    lags = np.empty((nk, nb), dtype=int)
    repaired = np.zeros((nk, nb), dtype=bool)
    factor = fit.small_sample_factor if small_sample else 1.0
    if any(get_kernel(name).psd and not get_kernel(name).finite_support for name in kernels):
        influence_cache(fit).ensure(fit.nobs - 1)     # fill every lag once, for all kernels
    for i, name in enumerate(kernels):
        kern = get_kernel(name)
        if prewhiten:
            from .prewhiten import prepared
            pw = prepared(fit)
            s_star, lg, _, rep = longrun.kernel_many(pw["fit"], kern, b,
                                                     small_sample=small_sample, repair=repair)
            m = fit.bread.T @ np.linalg.inv(np.eye(fit.k) - pw["A"])   # raw -> orthonormal
            s_q = np.einsum("ia,nab,jb->nij", m, s_star, m)
            a = fit.bread
            var = fit.nobs * np.einsum("ia,nab,ib->ni", a, s_q, a)
        elif kern.psd:
            # V_ii = T sum_j w_j C_j(z)_ii with z_t = B u_t, the coefficients' influence series:
            # only k autocovariance series are needed, not k(k+1)/2 pairs
            var = fit.nobs * factor * influence_cache(fit).kernel_sums(kern, b)
            lg = np.array([kern.lags_used(x, fit.nobs) for x in b])
            rep = np.zeros(nb, dtype=bool)
        else:
            s, lg, _, rep = longrun.kernel_many(fit, kern, b, small_sample=small_sample,
                                                repair=repair)
            a = fit.bread
            var = fit.nobs * np.einsum("ia,nab,ib->ni", a, s, a)   # diagonal of T B S B'
        se[i] = np.sqrt(np.where(var < 0, np.nan, var))
        lags[i] = lg
        repaired[i] = rep
    with np.errstate(divide="ignore", invalid="ignore"):
        t = fit.beta[None, None, :] / se
    return SweepResult(kernels=kernels, bandwidths=b, terms=list(fit.terms), estimate=fit.beta,
                       std_error=se, t_stat=t, lags=lags, repaired=repaired,
                       small_sample=small_sample, nobs=fit.nobs)


@dataclass
class Flip:
    """Where a test's conclusion changes along the bandwidth axis."""

    term: str
    kernel: str
    level: float
    reference: str
    rejects_at_start: bool | None
    flip_bandwidth: float | None       # smallest b whose decision differs from b at the start
    holds_up_to: float | None          # largest b before that (the conclusion holds for b <= it)
    bandwidths: np.ndarray
    rejects: np.ndarray

    def sentence(self) -> str:
        verdict = "rejected" if self.rejects_at_start else "not rejected"
        from .kernels import KERNELS
        kname = KERNELS[self.kernel].display_name if self.kernel in KERNELS else self.kernel
        start = self.bandwidths[0]
        if self.rejects_at_start is None:
            return f"{self.term}: no usable standard error at b = {start:g}."
        if self.flip_bandwidth is None:
            return (f"{self.term}: beta = 0 is {verdict} at {100 * (1 - self.level):g}% for "
                    f"every b from {start:g} to {self.bandwidths[-1]:g} ({kname}, "
                    f"{self.reference} critical values).")
        return (f"{self.term}: beta = 0 is {verdict} at {100 * (1 - self.level):g}% for "
                f"b <= {self.holds_up_to:g}; the conclusion flips at b = {self.flip_bandwidth:g}"
                f" ({kname}, {self.reference} critical values).")


def significance_flip(fit, term: str, kernel: str = "bartlett", level: float = 0.95,
                      reference: str = "normal", bandwidths=None, sweep_result=None) -> Flip:
    """The smallest bandwidth at which the two-sided test of beta = 0 for `term` at `level`
    stops (or starts) rejecting, scanning `bandwidths` (default 1..min(T, 100)) upward."""
    if term not in fit.terms:
        raise SpecificationError(f"no coefficient named {term!r}; terms are {', '.join(fit.terms)}")
    sw = sweep_result if sweep_result is not None else \
        sweep(fit, kernels=[kernel], bandwidths=bandwidths if bandwidths is not None
              else default_bandwidths(fit.nobs, 100))
    i, j = sw.kernels.index(kernel), sw.terms.index(term)
    cv = sw.critical_values(level, reference)[i]
    t = np.abs(sw.t_stat[i, :, j])
    valid = np.isfinite(t) & np.isfinite(cv)
    rejects = np.where(valid, t > cv, False)
    if not valid.any():
        return Flip(term, kernel, level, reference, None, None, None, sw.bandwidths, rejects)
    first = int(np.flatnonzero(valid)[0])
    start = bool(rejects[first])
    change = np.flatnonzero(valid & (rejects != start) & (np.arange(len(t)) > first))
    if change.size == 0:
        return Flip(term, kernel, level, reference, start, None, float(sw.bandwidths[-1]),
                    sw.bandwidths[first:], rejects[first:])
    at = int(change[0])
    return Flip(term, kernel, level, reference, start, float(sw.bandwidths[at]),
                float(sw.bandwidths[at - 1]), sw.bandwidths[first:], rejects[first:])


def flip_summary(fit, kernel: str = "bartlett", level: float = 0.95) -> list[str]:
    """Lines for the CLI: where each slope's conclusion flips, normal and fixed-b references."""
    lines = ["", f"Where the conclusion flips ({kernel} kernel, b = 1..{min(fit.nobs, 100)})"]
    sw = sweep(fit, kernels=[kernel], bandwidths=default_bandwidths(fit.nobs, 100))
    refs = ["normal"]
    from .fixedb import FIXED_B_KERNELS
    if kernel in FIXED_B_KERNELS:
        refs.append("fixed-b")
    for term in fit.terms:
        if term == "intercept":
            continue
        for ref in refs:
            lines.append("  " + significance_flip(fit, term, kernel, level, ref,
                                                  sweep_result=sw).sentence())
    return lines
