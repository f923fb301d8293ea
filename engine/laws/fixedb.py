"""Fixed-b critical values and p-values over the whole range of the law.

Under fixed-b asymptotics (Kiefer, Vogelsang & Bunzel 2000, Econometrica 68(3); Kiefer &
Vogelsang 2005, Econometric Theory 21(6), 1130-1164) the ratio b = bandwidth / T is held fixed
and the Wald statistic divided by the number of restrictions m,

    F = T xbar' S(b)^-1 xbar / m            (F = t^2 when m = 1),

has a non-standard limit that depends on the kernel and b only. Lagwise ships quantiles of F
simulated by the seeded script simulate_fixed_b.py (tables/fixed_b.json: location model, i.i.d.
normal errors, T = 1000, R replications; kernels, b/T grid, probabilities and R are in the file).

How a p-value is read off the table
-----------------------------------
1. In b: log q_p(b) is a monotone cubic (PCHIP) in b through the grid points, separately for
   each tabulated probability p; the row b = 0 is the standard limit chi2(m)/m, and b = 0
   exactly uses that law in closed form. Should the cubic give a column that is not
   increasing in p, the column is linear in b between the neighbouring rows (always
   increasing). Linear alone is off by up to 0.003 in p for QS at m = 4, 5 (NOTES.md).
2. In F: on the column for b, the CDF is read from a monotone piecewise-cubic Hermite
   interpolant (PCHIP; Fritsch & Carlson 1980, SIAM J. Numer. Anal. 17(2), with the derivative
   rule of scipy's PchipInterpolator) of

        x = logit P(F <= f) = log(p / (1 - p))   against   y = log f.

   On this scale both tails are nearly straight: the lower tail of F is P(F <= f) ~ c f^(m/2)
   (F = Z'Q^-1 Z / m with Z ~ N(0, I_m) independent of the random matrix Q, so the CDF near 0 is
   that of chi2(m)/m times E[det Q^(1/2)]), i.e. x ~ (m/2) y; the upper tail of a scale mixture
   of chi2 laws falls off no faster than exponentially in f and no slower than a power, i.e. x
   between linear and exponential in y. Applied to exact laws of the same shapes (chi2(m)/m
   and F(m, nu), nu >= 1) the grid's interpolation error is below 3e-5 in probability, under
   0.06 Monte Carlo standard errors of the table (the script measures and stores this).
   The old interpolation, linear in F from (0, 0) to the median, overstated small-|t| p-values
   by up to 0.1 (Bartlett, b/T = 0.097, t = 0.147: 0.979 against about 0.89).
3. Tails beyond the table (probabilities 0.001 to 0.9999 are tabulated):
   * below the first quantile q_lo (p_lo = 0.001): P(F <= f) = p_lo (f / q_lo)^(m/2), the exact
     small-f behaviour above; the p-value tends to 1 as f -> 0.
   * above the last quantile q_hi (upper tail mass s_hi = 1e-4): a power (Pareto) tail through
     the last two conventional knots, P(F > f) = s_hi (f / q_hi)^(-alpha) with alpha the slope
     of log P(F > f) against log f between the 0.999 and 0.9999 quantiles. It is positive for
     every finite f (p = 0 only for f = inf) and conservative (never below the true value)
     whenever log P(F > f) is concave in log f beyond the 0.999 quantile, which holds for the
     chi2, F and Student laws and for the fixed-b laws checked against exact values (NOTES.md).
     Such p-values are flagged `beyond_table`: report them as "p < 1e-4" (the app's "<0.001").

Monte Carlo error of a p-value
------------------------------
The tabulated quantiles come from R replications. For a p-value p read inside the table the
Monte Carlo standard error is

    se(p) = sqrt(p (1 - p) / R)

(the Bahadur representation q_hat - q = (p - F_R(q)) / f(q) + o(R^-1/2) makes the interpolated
CDF at a fixed point behave like the empirical CDF there, whatever the density; sectioning the
simulation into 20 independent parts confirms it, see the table's `checks`). Between b = 0 and
the first simulated b the error is scaled by the weight on the simulated row; at b = 0 it is 0.
Beyond the table the reported "error" is p itself: the true value lies in (0, p]. The quantile
(critical value) error is se(q_p) = sqrt(p (1 - p) / R) / f(q_p), with the density f taken from
the derivative of the interpolant, and by the delta method se(|t|) = se(q) / (2 sqrt(q)).

Also provided: the Kiefer-Vogelsang (2005) cubic for the Bartlett t test, cv(b) = a0 + a1 b +
a2 b^2 + a3 b^3, and the Kiefer-Vogelsang (2002, Econometrica 70(5)) Bartlett b = 1 quantiles;
both recalled from the literature ([M] in the project references), checked against the table in
the tests.
"""

from __future__ import annotations

import json
import math
from functools import lru_cache
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy import optimize, stats

from scipy.interpolate import PchipInterpolator

from ..errors import SpecificationError

_HERE = Path(__file__).resolve().parent
#: where the table is looked for: tables/ beside the module (the package layout), then beside it
_TABLE_PATHS = (_HERE / "tables" / "fixed_b.json", _HERE / "fixed_b.json")

#: Kiefer-Vogelsang (2005) Bartlett cubic, one-sided quantile of t -> (a0, a1, a2, a3). [M]
KV_BARTLETT_CUBIC = {0.90: (1.2816, 1.3040, 0.5135, -0.3386),
                     0.95: (1.6449, 2.1859, 0.3142, -0.3427),
                     0.975: (1.9600, 2.9694, 0.4160, -0.5324)}

#: Kiefer-Vogelsang (2002) Bartlett kernel at b = 1, one-sided quantile of t -> value. [M]
#: (recalled from the literature, not re-derived; REFERENCES.md section 8)
KV2002_BARTLETT_B1 = {0.90: 2.740, 0.95: 3.764, 0.975: 4.771, 0.99: 6.090}


def kv_bartlett_cubic(b: float, quantile: float = 0.975) -> float:
    """KV (2005) cubic cv(b) = a0 + a1 b + a2 b^2 + a3 b^3 for the one-sided `quantile` of the
    Bartlett t statistic (0.975: the two-sided 5% critical value), 0 < b <= 1."""
    a0, a1, a2, a3 = KV_BARTLETT_CUBIC[quantile]
    return a0 + a1 * b + a2 * b**2 + a3 * b**3


# --------------------------------------------------------------------------- the table

#: smallest p-value returned for a finite statistic (the smallest positive normal double)
_P_FLOOR = float(np.finfo(float).tiny)


def _table_path() -> Path:
    for path in _TABLE_PATHS:
        if path.exists():
            return path
    raise FileNotFoundError(f"fixed-b table not found (looked for {', '.join(map(str, _TABLE_PATHS))})")


@lru_cache(maxsize=1)
def table():
    """(grid, probs, quantiles, data): grid = [0] + b_grid; quantiles[(kernel, m)] the array
    (len(grid), len(probs)) of F quantiles with the chi2(m)/m row for b = 0 on top; data the
    JSON as read."""
    data = json.loads(_table_path().read_text())
    grid = np.array([0.0] + list(data["b_grid"]))
    probs = np.array(data["probs"])
    out = {}
    for kernel, by_m in data["quantiles"].items():
        for m, rows in by_m.items():
            m = int(m)
            zero = stats.chi2.ppf(probs, m) / m          # b -> 0: the standard limit
            out[(kernel, m)] = np.vstack([zero, np.array(rows, dtype=float)])
    return grid, probs, out, data


@lru_cache(maxsize=None)
def _log_rows(kernel: str, m: int) -> np.ndarray:
    rows = np.log(table()[2][(kernel, m)])
    if np.any(np.diff(rows, axis=1) <= 0):
        raise SpecificationError(f"fixed-b table for {kernel}, m = {m} is not increasing")
    return rows


@lru_cache(maxsize=1)
def _logit_probs() -> np.ndarray:
    p = table()[1]
    return np.log(p / (1.0 - p))


def _reps() -> int:
    return int(table()[3]["reps"])


def kernels_with_tables() -> tuple[str, ...]:
    """Kernels the shipped simulation covers (a kernel registered later has none)."""
    return tuple(table()[3]["quantiles"])


def available(kernel: str) -> bool:
    return kernel in kernels_with_tables()


def check(kernel, b_over_t, m):
    """Raise SpecificationError unless the tables cover this kernel, every b/T given (a number
    or an array) and m restrictions."""
    if not available(kernel):
        raise SpecificationError(f"fixed-b values are available for the "
                                 f"{', '.join(kernels_with_tables())} kernels only, not "
                                 f"{kernel!r}")
    if isinstance(m, bool) or not isinstance(m, (int, np.integer)) or not 1 <= m <= 5:
        raise SpecificationError(f"fixed-b tables cover 1 to 5 restrictions, not {m!r}")
    b = np.asarray(b_over_t, dtype=float)
    if not np.all((b >= 0) & (b <= 1.0)):                 # NaN fails too
        bad = b[~((b >= 0) & (b <= 1.0))].ravel()[0]
        raise SpecificationError(f"fixed-b tables cover 0 < b/T <= 1; here b/T = {bad:.3g}. "
                                 "Use a smaller bandwidth.")


# --------------------------------------------------------------------------- interpolation

@lru_cache(maxsize=None)
def _b_interpolant(kernel: str, m: int):
    """For each tabulated probability, log q as a PCHIP in b through the grid (b = 0 row
    included): one interpolant evaluating whole columns."""
    return PchipInterpolator(table()[0], _log_rows(kernel, m), axis=0)


def _column(kernel: str, m: int, b: float) -> tuple[np.ndarray, float]:
    """log-quantile column at b and the weight the column puts on simulated rows (1 except
    between b = 0 and the first simulated b, where it is b / b_1).

    In b, each probability's log q is a monotone cubic (PCHIP) through the grid rows: log q is
    convex in b where the law spreads fast (QS, m = 5: the median of F grows twentyfold from
    b = 0.15 to 0.30), and linear interpolation there is off by up to 0.003 in p at the grid
    midpoints. Should the cubic ever make a column non-increasing in p, the column is the
    linear interpolation between the two neighbouring rows instead, which always increases."""
    grid = table()[0]
    rows = _log_rows(kernel, m)
    i = int(np.clip(np.searchsorted(grid, b, side="right"), 1, len(grid) - 1))
    w = (b - grid[i - 1]) / (grid[i] - grid[i - 1])
    col = _b_interpolant(kernel, m)(b)
    if not np.all(np.diff(col) > 0):
        col = (1.0 - w) * rows[i - 1] + w * rows[i]
    simulated = 1.0 if i > 1 else w
    return col, simulated


def _pchip_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Knot derivatives of the monotone PCHIP through (x, y), x and y strictly increasing
    (Fritsch & Carlson 1980; weighted harmonic mean inside, the shape-preserving three-point
    rule at the ends, as scipy.interpolate.PchipInterpolator)."""
    h = np.diff(x)
    s = np.diff(y) / h
    d = np.empty_like(x)
    w1 = 2.0 * h[1:] + h[:-1]
    w2 = h[1:] + 2.0 * h[:-1]
    d[1:-1] = (w1 + w2) / (w1 / s[:-1] + w2 / s[1:])

    def edge(h0, h1, s0, s1):
        e = ((2.0 * h0 + h1) * s0 - h0 * s1) / (h0 + h1)
        if np.sign(e) != np.sign(s0):
            return 0.0
        if np.sign(s0) != np.sign(s1) and abs(e) > 3.0 * abs(s0):
            return 3.0 * s0
        return e

    d[0] = edge(h[0], h[1], s[0], s[1])
    d[-1] = edge(h[-1], h[-2], s[-1], s[-2])
    return d


def _hermite(x, y, d, k, u):
    """Value and derivative of the cubic Hermite piece k at points u (arrays)."""
    h = x[k + 1] - x[k]
    t = (u - x[k]) / h
    t2, t3 = t * t, t * t * t
    val = ((2 * t3 - 3 * t2 + 1) * y[k] + (t3 - 2 * t2 + t) * h * d[k]
           + (-2 * t3 + 3 * t2) * y[k + 1] + (t3 - t2) * h * d[k + 1])
    der = ((6 * t2 - 6 * t) * (y[k] - y[k + 1]) / h + (3 * t2 - 4 * t + 1) * d[k]
           + (3 * t2 - 2 * t) * d[k + 1])
    return val, der


class PValues(NamedTuple):
    """Fixed-b p-values with their Monte Carlo standard errors.

    p: P(F > f) under the fixed-b law; mc_error: its Monte Carlo standard error
    (sqrt(p (1 - p) / R) inside the table; p itself beyond the table); beyond_table: f above the
    largest tabulated quantile, p from the conservative power tail (report as p < tail_mass);
    tail_mass: the upper-tail probability of the largest tabulated quantile (1e-4)."""
    p: np.ndarray
    mc_error: np.ndarray
    beyond_table: np.ndarray
    tail_mass: float


def _upper_tail_slope(col: np.ndarray, probs: np.ndarray) -> float:
    """alpha: minus the slope of log P(F > f) in log f between the 0.999 quantile (or the
    nearest tabulated one below 0.9999) and the last quantile."""
    j = int(np.argmin(np.abs(probs - 0.999)))
    if j >= len(probs) - 1:
        j = len(probs) - 2
    return float((np.log1p(-probs[j]) - np.log1p(-probs[-1])) / (col[-1] - col[j]))


def _p_on_column(col, simulated, y, m, reps):
    """p-values, s.e. and beyond-table flags for log f = y (finite) on one column."""
    probs = table()[1]
    lp = _logit_probs()
    p = np.empty_like(y)
    se = np.empty_like(y)
    beyond = np.zeros(y.shape, dtype=bool)
    lo = y < col[0]
    hi = y > col[-1]
    mid = ~(lo | hi)
    if mid.any():
        d = _pchip_slopes(col, lp)
        k = np.clip(np.searchsorted(col, y[mid], side="right") - 1, 0, len(col) - 2)
        x, _ = _hermite(col, lp, d, k, y[mid])
        p[mid] = 1.0 / (1.0 + np.exp(x))                  # 1 - expit(x), stable
    if lo.any():                                           # P(F <= f) = p_lo (f/q_lo)^(m/2)
        p[lo] = -np.expm1(np.log(probs[0]) + 0.5 * m * (y[lo] - col[0]))
    inside = lo | mid
    se[inside] = simulated * np.sqrt(p[inside] * (1.0 - p[inside]) / reps)
    if hi.any():                                           # power tail beyond q_hi
        alpha = _upper_tail_slope(col, probs)
        p[hi] = np.exp(np.log1p(-probs[-1]) - alpha * (y[hi] - col[-1]))
        se[hi] = p[hi]
        beyond[hi] = True
    return p, se, beyond


def fixed_b_p_values_detail(kernel: str, b_over_t, f, m: int = 1) -> PValues:
    """Vectorised P(F > f) under the fixed-b law with Monte Carlo errors and tail flags.

    kernel: a kernel with a table; b_over_t: bandwidth / T, a number or an array broadcast
    against f (one column is built per distinct b); f: F = Wald/m values (t^2 when m = 1);
    m: restrictions 1..5. NaN and negative f give NaN; f = 0 gives p = 1; f = inf gives p = 0,
    the only case of p = 0 (a finite f whose p underflows gets the smallest positive double,
    2.2e-308). b/T = 0 is the chi2(m)/m law in closed form."""
    check(kernel, b_over_t, m)
    f_arr, b_arr = np.broadcast_arrays(np.asarray(f, dtype=float),
                                       np.asarray(b_over_t, dtype=float))
    shape = f_arr.shape
    f_flat, b_flat = f_arr.ravel(), b_arr.ravel()
    p = np.full(f_flat.shape, np.nan)
    se = np.full(f_flat.shape, np.nan)
    beyond = np.zeros(f_flat.shape, dtype=bool)
    ok = np.isfinite(f_flat) & (f_flat >= 0)
    p[f_flat == np.inf] = 0.0
    se[f_flat == np.inf] = 0.0
    zero_f = ok & (f_flat == 0)
    p[zero_f], se[zero_f] = 1.0, 0.0
    pos = ok & (f_flat > 0)
    reps = _reps()
    for b in np.unique(b_flat[pos]):
        sel = pos & (b_flat == b)
        if b == 0:
            p[sel] = stats.chi2.sf(m * f_flat[sel], m)
            se[sel] = 0.0
            continue
        col, simulated = _column(kernel, m, float(b))
        p[sel], se[sel], beyond[sel] = _p_on_column(col, simulated, np.log(f_flat[sel]), m, reps)
    p[pos] = np.maximum(p[pos], _P_FLOOR)                  # finite f: never exactly 0
    probs = table()[1]
    return PValues(p.reshape(shape), se.reshape(shape), beyond.reshape(shape),
                   float(1.0 - probs[-1]))


def fixed_b_p_values(kernel: str, b_over_t, f, m: int = 1) -> np.ndarray:
    """Vectorised fixed-b p-values P(F > f), F = Wald/m (t^2 for one restriction); see
    fixed_b_p_values_detail for the rules. Returns an array of f's (broadcast) shape."""
    return fixed_b_p_values_detail(kernel, b_over_t, f, m).p


def fixed_b_p_value(kernel: str, b_over_t: float, f_statistic: float,
                    restrictions: int = 1) -> float:
    """P(F > f) under the fixed-b law (F = Wald/m; t^2 for one restriction), the scalar form of
    fixed_b_p_values (same function, same rules)."""
    return float(fixed_b_p_values(kernel, b_over_t, f_statistic, restrictions))


def p_value_mc_error(kernel: str, b_over_t, f, m: int = 1):
    """Monte Carlo standard error of fixed_b_p_value(kernel, b_over_t, f, m):
    sqrt(p (1 - p) / R) inside the table (scaled by the weight on simulated rows for
    0 < b/T < first grid b; 0 at b/T = 0), p itself beyond the largest tabulated quantile.
    A float for scalar input, else an array."""
    se = fixed_b_p_values_detail(kernel, b_over_t, f, m).mc_error
    return float(se) if np.ndim(se) == 0 else se


# --------------------------------------------------------------------------- critical values

def _quantile_on_column(col, level):
    """log q with interpolated CDF equal to `level` (inverse of the p-value interpolant), and
    d logit / d log q there."""
    lp = _logit_probs()
    x = math.log(level / (1.0 - level))
    d = _pchip_slopes(col, lp)
    k = int(np.clip(np.searchsorted(lp, x, side="right") - 1, 0, len(lp) - 2))
    if x == lp[k]:
        y = float(col[k])
    elif x == lp[k + 1]:
        y = float(col[k + 1])
    else:
        g = lambda u: float(_hermite(col, lp, d, k, np.array(u))[0]) - x  # noqa: E731
        y = optimize.brentq(g, col[k], col[k + 1], xtol=1e-14, rtol=4 * np.finfo(float).eps)
    deriv = float(_hermite(col, lp, d, min(k, len(col) - 2), np.array(y))[1])
    return y, deriv


def _level_ok(level):
    probs = table()[1]
    if not (isinstance(level, (float, int, np.floating)) and probs[0] <= level <= probs[-1]):
        raise SpecificationError(f"fixed-b levels between {probs[0]} and {probs[-1]} are "
                                 f"tabulated, not {level!r}")


def fixed_b_critical_value(kernel: str, b_over_t: float, level: float = 0.95,
                           restrictions: int = 1) -> float:
    """Critical value of |t| (m = 1) or of Wald/m (m > 1) for a test at size 1 - level: the
    q with P(F <= q) = level under the interpolated law, the exact inverse of fixed_b_p_value
    (so fixed_b_p_value(cv^2) = 1 - level to rounding). b/T = 0: chi2(m)/m in closed form."""
    check(kernel, b_over_t, restrictions)
    _level_ok(level)
    if b_over_t == 0:
        q = float(stats.chi2.ppf(level, restrictions) / restrictions)
    else:
        col, _ = _column(kernel, restrictions, float(b_over_t))
        q = math.exp(_quantile_on_column(col, level)[0])
    return math.sqrt(q) if restrictions == 1 else q


def critical_value_mc_error(kernel: str, b_over_t: float, level: float,
                            restrictions: int = 1) -> float:
    """Monte Carlo standard error of fixed_b_critical_value(kernel, b_over_t, level, m):
    se(q_p) = sqrt(p (1 - p) / R) / f(q_p) for the quantile q_p of F, with the density
    f(q) = (d logit / d log q) p (1 - p) / q from the interpolant; for m = 1 mapped to |t| =
    sqrt(F) by the delta method, se(|t|) = se(q) / (2 sqrt(q)). Scaled by the weight on
    simulated rows below the first grid b; 0 at b/T = 0."""
    check(kernel, b_over_t, restrictions)
    _level_ok(level)
    if b_over_t == 0:
        return 0.0
    col, simulated = _column(kernel, restrictions, float(b_over_t))
    y, deriv = _quantile_on_column(col, level)
    q = math.exp(y)
    se_q = simulated * q / (deriv * math.sqrt(level * (1.0 - level) * _reps()))
    return float(se_q / (2.0 * math.sqrt(q))) if restrictions == 1 else float(se_q)
