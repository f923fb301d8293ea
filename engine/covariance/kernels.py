"""Kernel weight functions k(x) for long-run covariance estimation, and `register_kernel`.

Convention (one meaning everywhere in Lagwise): a kernel estimator with real bandwidth b > 0 puts
weight w_j = k(j / b) on the lag-j autocovariance. Kernels supported on |x| < 1 use
L = ceil(b) - 1 lags, so "Newey-West with L lags" is the Bartlett kernel with b = L + 1
(weights 1 - j/(L+1)), and the truncated kernel with b = L + 1 weights lags 0..L by one.
b = 0 (a bandwidth rule that finds no autocorrelation) weights lag 0 only, for every kernel.

A kernel is one definition: its weight function, whether it vanishes beyond |x| = 1, whether the
estimate is positive semi-definite by construction, its citation, its characteristic exponent q
and constant k_q = lim (1 - k(x)) / |x|^q (Andrews 1991; the Andrews rule needs them), its short
name and chart colour. `register_kernel` adds one at run time; every picker, sweep, comparison and
chart takes it from the registry. Formulas, q, k_q, the integral of k^2 and the Andrews constant
c_k = (q k_q^2 / int k^2)^(1/(2q+1)) follow Andrews (1991), Econometrica 59(3), 817-858.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import integrate

from ..errors import SpecificationError
from ..laws.fixedb import kernels_with_tables


#: Colours given, in turn, to kernels registered without one (our palette, see assets/).
PALETTE = ("#0e6e64", "#b4541a", "#3b5b92", "#8a6d1d", "#7a3b69", "#4d7c2a", "#a33b3b",
           "#2f7f9c", "#6b5ca5", "#5f6b3a")


@dataclass(frozen=True)
class Kernel:
    name: str
    label: str                                       # display name, e.g. "Quadratic Spectral"
    short: str                                       # chart legend, e.g. "QS"
    color: str                                       # chart colour
    weight: Callable[[np.ndarray], np.ndarray]       # k(x), vectorised, even in x
    finite_support: bool                             # k(x) = 0 for |x| >= 1
    psd: bool                                        # PSD estimate guaranteed
    citation: str
    q: float | None = None                           # characteristic exponent
    k_q: float | None = None
    integral_k2: float | None = None                 # int k(x)^2 dx over the real line
    nw94: tuple[float, float] | None = None          # Newey-West (1994) pilot rate r, c_gamma
    andrews: tuple[int, float] | None = field(default=None)   # (q, c_k) for the Andrews rule
    notes: str = ""
    #: the kernel has a fixed-b law to tabulate (default: its estimate is PSD; for a kernel
    #: that is not, S(b) is negative with positive probability and the statistic has no law)
    fixed_b: bool | None = None

    @property
    def has_fixed_b_theory(self) -> bool:
        return bool(self.psd if self.fixed_b is None else self.fixed_b)

    @property
    def andrews_constant(self) -> float | None:
        """c_k = (q k_q^2 / int k^2)^(1/(2q+1)) (Andrews 1991), or the constant given."""
        return None if self.andrews is None else self.andrews[1]

    def lags_used(self, bandwidth: float, nobs: int) -> int:
        """Number of autocovariance lags (beyond lag 0) the estimator uses."""
        if bandwidth <= 0:
            return 0
        if self.finite_support:
            return int(min(max(math.ceil(bandwidth) - 1, 0), nobs - 1))
        return nobs - 1

    def lags_many(self, bandwidths, nobs: int) -> np.ndarray:
        """`lags_used` for each bandwidth of an array (integer array of the same length)."""
        b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
        if not self.finite_support:
            return np.where(b > 0, nobs - 1, 0).astype(int)
        return np.where(b > 0, np.clip(np.ceil(b) - 1, 0, nobs - 1), 0).astype(int)

    def weights(self, bandwidths, count: int) -> np.ndarray:
        """Weights k(j/b) for j = 0..count-1, one row per bandwidth (2-D array); b = 0 weights
        lag 0 only."""
        b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
        if np.any(~np.isfinite(b)) or np.any(b < 0):
            raise SpecificationError(f"bandwidth must be a positive number, got {bandwidths!r}")
        j = np.arange(count, dtype=float)
        zero = b == 0
        with np.errstate(divide="ignore", invalid="ignore"):
            out = self.weight(j[None, :] / np.where(zero, 1.0, b)[:, None])
        out = np.asarray(out, dtype=float)
        if zero.any():
            out[zero] = 0.0
            out[zero, 0] = 1.0
        return out


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


def _bohman(x):
    a = np.abs(x)
    return np.where(a < 1.0, (1.0 - a) * np.cos(np.pi * a) + np.sin(np.pi * a) / np.pi, 0.0)


KERNELS: dict[str, Kernel] = {}


def _integral_k2(weight, finite_support: bool) -> float:
    """int k(x)^2 dx over the real line (k even), by adaptive quadrature."""
    if finite_support:
        f = lambda x: float(np.asarray(weight(np.array([x])), dtype=float)[0]) ** 2  # noqa: E731
        return 2.0 * integrate.quad(f, 0.0, 1.0, limit=400)[0]
    # an oscillating, slowly decaying integrand: 16-point Gauss-Legendre on each unit interval
    # up to X, and the tail beyond X from a decay at least as fast as 1/x^2 (whose integral
    # beyond X equals its integral over [X/2, X])
    top = 20_000
    nodes, wts = np.polynomial.legendre.leggauss(16)
    starts = np.arange(top, dtype=float)[:, None]
    x = starts + 0.5 * (nodes[None, :] + 1.0)
    values = np.asarray(weight(x.ravel()), dtype=float).reshape(x.shape) ** 2
    per_interval = 0.5 * values @ wts
    return 2.0 * (per_interval.sum() + per_interval[top // 2:].sum())


def register_kernel(name: str, weight: Callable, *, label: str, reference: str, psd: bool,
                    finite_support: bool, q: float | None = None, kq: float | None = None,
                    short: str | None = None, color: str | None = None,
                    nw94: tuple[float, float] | None = None,
                    andrews_constant: float | None = None, notes: str = "",
                    fixed_b: bool | None = None) -> Kernel:
    """Add a kernel to the registry and return it.

    weight: a vectorised function of x = j/b returning k(x) (k(0) = 1, even; zero beyond
    |x| = 1 when `finite_support`). q, kq: its characteristic exponent and constant; with them the
    Andrews (1991) rule works for the kernel (for q = 1 or 2; the integral of k^2 is computed).
    nw94: the Newey-West (1994) pilot rate and c_gamma, when published for this kernel. The kernel
    is then `estimator("kernel", kernel=name, bandwidth=b)` everywhere (infer, sweep, compare,
    the CLI and the app)."""
    if not isinstance(name, str) or not name.strip():
        raise SpecificationError("a kernel needs a name")
    if name in KERNELS:
        raise SpecificationError(f"a kernel named {name!r} is already registered")
    w0 = np.asarray(weight(np.array([0.0, 0.5, 1.0, 2.0])), dtype=float)
    if w0.shape != (4,) or not np.isfinite(w0).all() or abs(w0[0] - 1.0) > 1e-12:
        raise SpecificationError(f"kernel {name!r}: weight must be vectorised with k(0) = 1")
    if finite_support and (w0[2] != 0.0 or w0[3] != 0.0):
        raise SpecificationError(f"kernel {name!r}: a finite-support kernel must vanish at |x| >= 1")
    integral = _integral_k2(weight, finite_support)
    andrews = None
    if andrews_constant is not None:
        andrews = (int(q or 2), float(andrews_constant))
    elif q is not None and kq is not None:
        if q not in (1, 2):
            raise SpecificationError(f"kernel {name!r}: the Andrews rule covers q = 1 or 2")
        andrews = (int(q), (q * kq**2 / integral) ** (1.0 / (2 * q + 1)))
    kernel = Kernel(name=name, label=label, short=short or label, color=color or
                    PALETTE[len(KERNELS) % len(PALETTE)], weight=weight,
                    finite_support=finite_support, psd=psd, citation=reference, q=q, k_q=kq,
                    integral_k2=integral, nw94=nw94, andrews=andrews, notes=notes,
                    fixed_b=fixed_b)
    KERNELS[name] = kernel
    return kernel


def default_kernel() -> str:
    """The first registered kernel: the one used where a single kernel is drawn or reported
    beside other estimators (Bartlett as shipped)."""
    return next(iter(KERNELS))


def fixed_b_kernels() -> tuple[str, ...]:
    """Registered kernels with a fixed-b law (the ones scripts/simulate_fixed_b.py tabulates)."""
    return tuple(name for name, k in KERNELS.items() if k.has_fixed_b_theory)


def missing_fixed_b_tables() -> tuple[str, ...]:
    """Registered kernels with a fixed-b law that the shipped table does not cover."""
    have = set(kernels_with_tables())
    return tuple(k for k in fixed_b_kernels() if k not in have)


def fixed_b_unavailable(name: str) -> str | None:
    """Why the fixed-b law is not available for a kernel (None when it is)."""
    if name in kernels_with_tables():
        return None
    kernel = KERNELS.get(name)
    if kernel is not None and kernel.has_fixed_b_theory:
        return (f"the {kernel.label} kernel was registered after the fixed-b table was made; "
                "rerun scripts/simulate_fixed_b.py to add it")
    if kernel is not None:
        return (f"fixed-b critical values do not exist for the {kernel.label} kernel: its "
                "estimate is not positive semi-definite, so the statistic is undefined in a "
                "share of samples")
    return f"{name!r} is not a registered kernel"


def get_kernel(name: str) -> Kernel:
    try:
        return KERNELS[name]
    except KeyError:
        raise SpecificationError(f"unknown kernel {name!r}; choose one of "
                                 f"{', '.join(KERNELS)}") from None


# --------------------------------------------------------------------------- shipped kernels
# NW94 pilot rates and c_gamma: Newey & West (1994), RES 61(4), Table II (as in the arch package).

register_kernel("bartlett", _bartlett, label="Bartlett", short="Bartlett", color="#0e6e64",
                reference="Newey & West (1987), Econometrica 55(3); Andrews (1991)", psd=True,
                finite_support=True, q=1, kq=1.0, nw94=(2.0 / 9.0, 1.1447))
register_kernel("parzen", _parzen, label="Parzen", short="Parzen", color="#b4541a",
                reference="Gallant (1987); Andrews (1991), Econometrica 59(3)", psd=True,
                finite_support=True, q=2, kq=6.0, nw94=(4.0 / 25.0, 2.6614))
register_kernel("quadratic_spectral", _quadratic_spectral, label="Quadratic Spectral",
                short="QS", color="#3b5b92", reference="Andrews (1991), Econometrica 59(3)",
                psd=True, finite_support=False, q=2, kq=18.0 * np.pi**2 / 125.0,
                nw94=(2.0 / 25.0, 1.3221))
register_kernel("tukey_hanning", _tukey_hanning, label="Tukey-Hanning", short="Tukey-Hanning",
                color="#8a6d1d", reference="Andrews (1991), Econometrica 59(3)", psd=False,
                finite_support=True, q=2, kq=np.pi**2 / 4.0, nw94=(4.0 / 25.0, 1.7462))
register_kernel("truncated", _truncated, label="Truncated (uniform)", short="Truncated",
                color="#7a3b69", reference="Hansen & Hodrick (1980), J. Political Economy 88(5)",
                psd=False, finite_support=True, q=2, andrews_constant=0.6611,
                notes="its Andrews constant 0.6611 is recalled, not verified")
register_kernel("bohman", _bohman, label="Bohman", short="Bohman", color="#4d7c2a",
                reference="Bohman (1960), Arkiv for Matematik 4 (window); Andrews-style "
                          "constants derived here", psd=True, finite_support=True, q=2,
                kq=np.pi**2 / 2.0,
                notes="the autocorrelation of a half-cosine pulse: positive semi-definite")
