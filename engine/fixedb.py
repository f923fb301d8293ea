"""Fixed-b critical values and p-values (Kiefer & Vogelsang 2005, Econometric Theory 21(6)).

Under fixed-b asymptotics (b = bandwidth / T held fixed) the t and Wald statistics built with a
kernel estimator have non-standard limits that depend on the kernel and b only. Lagwise ships
simulated quantiles of F = Wald/m (t^2 when m = 1) for the Bartlett, Parzen and Quadratic
Spectral kernels over b in [0.005, 1] and m = 1..5 (engine/tables/fixed_b.json, made by the
seeded script scripts/simulate_fixed_b.py; its Monte Carlo error is stated in the file), and
interpolates linearly in b between grid points, with b = 0 the standard chi-square(m)/m limit.

Also provided: the Kiefer-Vogelsang (2005) cubic for the Bartlett t test, cv(b) = a0 + a1 b +
a2 b^2 + a3 b^3 (coefficients recalled from the literature, [M] in the project references; a test
checks them against the shipped simulation).
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy import stats

from .errors import SpecificationError

_TABLE = Path(__file__).with_name("tables") / "fixed_b.json"

#: Kiefer-Vogelsang (2005) Bartlett cubic, one-sided quantile -> (a0, a1, a2, a3). [M]
KV_BARTLETT_CUBIC = {0.90: (1.2816, 1.3040, 0.5135, -0.3386),
                     0.95: (1.6449, 2.1859, 0.3142, -0.3427),
                     0.975: (1.9600, 2.9694, 0.4160, -0.5324)}


def kv_bartlett_cubic(b: float, quantile: float = 0.975) -> float:
    a0, a1, a2, a3 = KV_BARTLETT_CUBIC[quantile]
    return a0 + a1 * b + a2 * b**2 + a3 * b**3


@lru_cache(maxsize=1)
def table():
    data = json.loads(_TABLE.read_text())
    grid = np.array([0.0] + data["b_grid"])
    probs = np.array(data["probs"])
    out = {}
    for kernel, by_m in data["quantiles"].items():
        for m, rows in by_m.items():
            m = int(m)
            zero = stats.chi2.ppf(probs, m) / m          # b -> 0: the standard limit
            out[(kernel, m)] = np.vstack([zero, np.array(rows)])
    return grid, probs, out, data


def kernels_with_tables() -> tuple[str, ...]:
    """Kernels the shipped simulation covers (a kernel registered later has none)."""
    return tuple(table()[3]["quantiles"])


def available(kernel: str) -> bool:
    return kernel in kernels_with_tables()


def check(kernel, b_over_t, m):
    """Raise SpecificationError unless the tables cover this kernel, b/T and m."""
    if not available(kernel):
        raise SpecificationError(f"fixed-b values are available for the "
                                 f"{', '.join(kernels_with_tables())} kernels, not {kernel!r}")
    if not 1 <= m <= 5:
        raise SpecificationError(f"fixed-b tables cover 1 to 5 restrictions, not {m}")
    if not (0 <= b_over_t <= 1.0):
        raise SpecificationError(f"fixed-b tables cover 0 < b/T <= 1; here b/T = {b_over_t:.3g}. "
                                 "Use a smaller bandwidth.")


def _quantiles_at(kernel, b_over_t, m):
    grid, probs, q, _ = table()
    rows = q[(kernel, m)]
    col = np.array([np.interp(b_over_t, grid, rows[:, i]) for i in range(rows.shape[1])])
    return probs, col


def fixed_b_critical_value(kernel: str, b_over_t: float, level: float = 0.95,
                           restrictions: int = 1) -> float:
    """Critical value of |t| (m = 1) or of Wald/m (m > 1) for a test at size 1 - level."""
    check(kernel, b_over_t, restrictions)
    probs, col = _quantiles_at(kernel, b_over_t, restrictions)
    if not probs[0] <= level <= probs[-1]:
        raise SpecificationError(f"fixed-b levels between {probs[0]} and {probs[-1]} are "
                                 f"tabulated, not {level}")
    value = float(np.interp(level, probs, col))
    return float(np.sqrt(value)) if restrictions == 1 else value


def fixed_b_p_value(kernel: str, b_over_t: float, f_statistic: float,
                    restrictions: int = 1) -> float:
    """P(F > f) under the fixed-b law (F = Wald/m; t^2 for one restriction), interpolated between
    tabulated quantiles (and linearly from F = 0, p = 1 up to the median). Beyond the largest
    tabulated quantile (0.999) the returned 0.001 is an upper bound: report it as p <= 0.001."""
    check(kernel, b_over_t, restrictions)
    probs, col = _quantiles_at(kernel, b_over_t, restrictions)
    cdf = float(np.interp(f_statistic, np.r_[0.0, col], np.r_[0.0, probs], right=probs[-1]))
    return 1.0 - cdf


def critical_value_mc_error(kernel: str, b_over_t: float, level: float) -> float:
    """Monte Carlo standard error of the |t| critical value at `level` (one restriction):
    sqrt(p (1 - p) / R) / f(q_p) for the quantile q_p of F = t^2, the density f(q_p) estimated
    from the spacing of the neighbouring tabulated quantiles, mapped to |t| = sqrt(F) by the
    delta method."""
    check(kernel, b_over_t, 1)
    probs, col = _quantiles_at(kernel, b_over_t, 1)
    reps = table()[3]["reps"]
    i = int(np.clip(np.searchsorted(probs, level), 1, len(probs) - 1))
    density = (probs[i] - probs[i - 1]) / max(col[i] - col[i - 1], 1e-12)
    q = float(np.interp(level, probs, col))
    se_f = np.sqrt(level * (1 - level) / reps) / density
    return float(se_f / (2 * np.sqrt(q)))
