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

    def series(self, kernel: str, term: str, what: str = "t_stat") -> pd.Series:
        i, j = self.kernels.index(kernel), self.terms.index(term)
        return pd.Series(getattr(self, what)[i, :, j], index=self.bandwidths, name=what)


def default_bandwidths(nobs: int, upper: int | None = None) -> np.ndarray:
    top = min(nobs, upper or max(12, min(nobs // 4, 100)))
    return np.arange(1, top + 1, dtype=float)


def sweep(fit, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
          repair: bool = True) -> SweepResult:
    if isinstance(kernels, str):
        kernels = [kernels]
    kernels = list(kernels)
    if not kernels:
        raise SpecificationError("choose at least one kernel to sweep")
    b = default_bandwidths(fit.nobs) if bandwidths is None else \
        np.atleast_1d(np.asarray(bandwidths, dtype=float))
    if b.size == 0 or np.any(~np.isfinite(b)) or np.any(b <= 0):
        raise SpecificationError("bandwidths must be positive numbers")
    a = fit.bread
    nk, nb, k = len(kernels), len(b), fit.k
    se = np.empty((nk, nb, k))
    lags = np.empty((nk, nb), dtype=int)
    repaired = np.zeros((nk, nb), dtype=bool)
    for i, name in enumerate(kernels):
        kern = get_kernel(name)
        s, lg, _, rep = longrun.kernel_many(fit, kern, b, small_sample=small_sample,
                                            repair=repair)
        var = fit.nobs * np.einsum("ia,nab,ib->ni", a, s, a)   # diagonal of T B S B'
        se[i] = np.sqrt(np.where(var < 0, np.nan, var))
        lags[i] = lg
        repaired[i] = rep
    with np.errstate(divide="ignore", invalid="ignore"):
        t = fit.beta[None, None, :] / se
    return SweepResult(kernels=kernels, bandwidths=b, terms=list(fit.terms), estimate=fit.beta,
                       std_error=se, t_stat=t, lags=lags, repaired=repaired,
                       small_sample=small_sample, nobs=fit.nobs)
