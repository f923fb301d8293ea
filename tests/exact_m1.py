"""Exact finite-T fixed-b p-values for one restriction (Imhof 1961), an independent check.

For the location model with i.i.d. N(0, 1) errors and T observations, Z = sqrt(T) e_bar is
N(0, 1) and independent of the demeaned errors M e (M = I - 11'/T), and the kernel estimate is
the quadratic form S(b) = T^-1 e' M W M e with W_ij = k(|i - j| / (bT)) (W_ii = 1). With
lambda_i the eigenvalues of M W M and xi_i i.i.d. N(0, 1),

    P(t^2 > f) = P(Z^2 - (f / T) sum_i lambda_i xi_i^2 > 0) = P(sum_i c_i chi2_1,i > 0),

c = (1, -f lambda_1 / T, ..., -f lambda_T / T), and Imhof (1961, Biometrika 48, 419-426) gives

    P(sum c_i chi2_1 > 0) = 1/2 + (1/pi) int_0^inf sin(theta(u)) / (u rho(u)) du,
    theta(u) = 1/2 sum arctan(c_i u),   rho(u) = prod (1 + c_i^2 u^2)^(1/4).

No simulation: this is the exact law of the statistic the table simulates (at the same T), so the
difference between the table's p-value and this one is the table's Monte Carlo plus
interpolation error. m = 1 only (for m > 1, S(b) is a random matrix and F is not a quadratic
form in normals).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import integrate, linalg


@lru_cache(maxsize=64)
def eigenvalues(kernel: str, b_over_t: float, nobs: int) -> np.ndarray:
    """Non-zero eigenvalues of M W M / T (W built with the engine's kernel weights)."""
    from lagwise.engine.covariance.kernels import get_kernel
    w = get_kernel(kernel).weights([b_over_t * nobs], nobs)[0]
    a = linalg.toeplitz(w)
    a -= a.mean(axis=0, keepdims=True)
    a -= a.mean(axis=1, keepdims=True)
    lam = linalg.eigvalsh(a) / nobs
    return lam[np.abs(lam) > 1e-13 * np.abs(lam).max()]


def _imhof_upper(c: np.ndarray) -> float:
    """P(sum c_i chi2_1 > 0) by Imhof's integral (adaptive quadrature)."""
    def integrand(u):
        cu = c * u
        theta = 0.5 * np.arctan(cu).sum()
        log_rho = 0.25 * np.log1p(cu * cu).sum()
        return np.sin(theta) * np.exp(-log_rho) / u

    # the integrand is smooth, ~ theta'(0) near 0 and decays like u^(-1 - n/2) far out
    scale = 1.0 / np.abs(c).max()
    total, breaks = 0.0, [0.0] + [scale * 10.0**k for k in range(-2, 9)]
    for lo, hi in zip(breaks[:-1], breaks[1:]):
        val, _ = integrate.quad(integrand, lo, hi, limit=400, epsabs=1e-13, epsrel=1e-10)
        total += val
    return 0.5 + total / np.pi


def exact_p_value(kernel: str, b_over_t: float, t_abs: float, nobs: int = 1000) -> float:
    """Exact P(|t| > t_abs) at sample size nobs (m = 1)."""
    lam = eigenvalues(kernel, float(b_over_t), int(nobs))
    c = np.concatenate([[1.0], -(t_abs**2) * lam])
    return float(_imhof_upper(c))
