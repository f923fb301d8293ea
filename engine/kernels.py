"""Kernel weight functions k(x) for long-run covariance estimation.

Convention (one meaning everywhere in Lagwise): a kernel estimator with real bandwidth b > 0 puts
weight w_j = k(j / b) on the lag-j autocovariance. Kernels supported on |x| < 1 use
L = ceil(b) - 1 lags, so "Newey-West with L lags" is the Bartlett kernel with b = L + 1
(weights 1 - j/(L+1)), and the truncated kernel with b = L + 1 weights lags 0..L by one.

Formulas, characteristic exponents q, k_q, the integral of k^2 and the Andrews (1991) constant
c_k = (q k_q^2 / int k^2)^(1/(2q+1)) follow Andrews (1991), Econometrica 59(3), 817-858.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .errors import SpecificationError


@dataclass(frozen=True)
class Kernel:
    name: str
    display_name: str
    function: Callable[[np.ndarray], np.ndarray]   # k(x) for x >= 0
    finite_support: bool                             # k(x) = 0 for |x| >= 1
    psd: bool                                        # PSD estimate guaranteed
    q: int | None                                    # characteristic exponent
    k_q: float | None
    integral_k2: float
    reference: str

    @property
    def andrews_constant(self) -> float | None:
        """c_k = (q k_q^2 / int k^2)^(1/(2q+1)) (Andrews 1991)."""
        if self.q is None:
            return None
        return (self.q * self.k_q ** 2 / self.integral_k2) ** (1.0 / (2 * self.q + 1))

    def lags_used(self, bandwidth: float, nobs: int) -> int:
        """Number of autocovariance lags (beyond lag 0) the estimator uses."""
        if self.finite_support:
            return int(min(max(math.ceil(bandwidth) - 1, 0), nobs - 1))
        return nobs - 1

    def weights(self, bandwidths, n_lags: int) -> np.ndarray:
        """Weights k(j/b) for j = 0..n_lags-1, one row per bandwidth (2-D array)."""
        b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
        if np.any(~np.isfinite(b)) or np.any(b <= 0):
            raise SpecificationError(f"bandwidth must be a positive number, got {bandwidths!r}")
        j = np.arange(n_lags, dtype=float)
        return self.function(j[None, :] / b[:, None])


def _bartlett(x):
    return np.clip(1.0 - np.abs(x), 0.0, None)


def _truncated(x):
    return (np.abs(x) < 1.0).astype(float)


def _parzen(x):
    a = np.abs(x)
    return np.where(a <= 0.5, 1.0 - 6.0 * a**2 + 6.0 * a**3,
                    np.where(a < 1.0, 2.0 * (1.0 - a) ** 3, 0.0))


def _tukey_hanning(x):
    a = np.abs(x)
    return np.where(a < 1.0, 0.5 * (1.0 + np.cos(np.pi * a)), 0.0)


def _quadratic_spectral(x):
    z = 6.0 * np.pi * np.abs(np.asarray(x, dtype=float)) / 5.0
    out = np.ones_like(z)
    nz = z > 1e-4
    zz = z[nz]
    out[nz] = 3.0 / zz**2 * (np.sin(zz) / zz - np.cos(zz))
    small = ~nz                      # Taylor series near 0: 1 - z^2/10 + z^4/280
    out[small] = 1.0 - z[small] ** 2 / 10.0 + z[small] ** 4 / 280.0
    return out


KERNELS: dict[str, Kernel] = {
    k.name: k for k in (
        Kernel("bartlett", "Bartlett (Newey-West)", _bartlett, True, True, 1, 1.0, 2.0 / 3.0,
               "Newey & West (1987), Econometrica 55(3); Andrews (1991)"),
        Kernel("parzen", "Parzen", _parzen, True, True, 2, 6.0, 151.0 / 280.0,
               "Gallant (1987); Andrews (1991), Econometrica 59(3)"),
        Kernel("quadratic_spectral", "Quadratic Spectral", _quadratic_spectral, False, True, 2,
               18.0 * np.pi**2 / 125.0, 1.0, "Andrews (1991), Econometrica 59(3)"),
        Kernel("tukey_hanning", "Tukey-Hanning", _tukey_hanning, True, False, 2,
               np.pi**2 / 4.0, 0.75, "Andrews (1991), Econometrica 59(3)"),
        Kernel("truncated", "Truncated (uniform)", _truncated, True, False, None, None, 2.0,
               "Hansen & Hodrick (1980), J. Political Economy 88(5)"),
    )
}


def get_kernel(name: str) -> Kernel:
    try:
        return KERNELS[name]
    except KeyError:
        raise SpecificationError(f"unknown kernel {name!r}; choose one of "
                                 f"{', '.join(KERNELS)}") from None
