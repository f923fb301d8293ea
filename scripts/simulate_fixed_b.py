"""Simulate the fixed-b (Kiefer-Vogelsang) laws over their whole range; write fixed_b.json.

What is simulated
-----------------
Location model, T observations of i.i.d. N(0, I_m) errors, demeaned (the fixed-b limit does not
depend on nuisance parameters: Kiefer & Vogelsang 2005, Econometric Theory 21(6), 1130-1164).
For a kernel k and b = M/T on a grid, the long-run covariance estimate is

    S(b) = Gamma_0 + sum_{j=1}^{T-1} k(j / (bT)) (Gamma_j + Gamma_j'),
    Gamma_j = T^-1 sum_t e_t e_{t-j}'   (e demeaned),

with the engine's own kernel weights (`Kernel.weights`), and the statistic is

    F = T e_bar' S(b)^-1 e_bar / m       (F = t^2 for m = 1).

Every kernel and every b is computed from the same draws (common random numbers), so the table
is smooth in b and across kernels, and interpolation error in b can be measured without Monte
Carlo noise (the check grid below).

Computing S(b) without autocovariances. With E_a the discrete Fourier transform of column a of
e (zero-padded to n >= 2T - 1 points, so no lag wraps around) and P_ab = Re(E_a conj(E_b)),
c_ab(j) = irfft(P_ab)[j] = (C_ab(j) + C_ba(j)) / 2 with C_ab(j) = sum_t e_{a,t+j} e_{b,t}.
Any linear functional sum_j omega_j c_ab(j) equals sum_f P_ab(f) K(f) with
K(f) = (c_f / n) Re(DFT(omega))(f), c_f = 1 at f = 0 and f = n/2, 2 otherwise; so
S(b)_ab = T^-1 sum_f P_ab(f) K_b(f) with omega_0 = 1, omega_j = 2 k(j/(bT)): one matrix product
for all kernels and all b, no inverse transforms.

What is stored
--------------
For every kernel with fixed-b theory (rule below), b/T on B_GRID, m = 1..5: the quantiles of F
at the cumulative probabilities PROBS (0.001 up to 0.9999, spaced about evenly on the logit
scale, with the conventional levels 0.90, 0.95, 0.975, 0.99, 0.995, 0.999 included exactly).
Values are rounded to 6 significant digits.

Monte Carlo error. With R replications the empirical CDF at a fixed point has standard error
sqrt(p (1 - p) / R); by the Bahadur representation (q_hat_p - q_p ~ (p - F_R(q_p)) / f(q_p)) a
p-value read off the interpolated quantiles has the same standard error to first order,
whatever the density. So R (`reps`) is the whole of the Monte Carlo information a p-value needs.
The quantile itself has s.e. sqrt(p(1-p)/R) / f(q_p); fixedb.py takes f from the derivative of
its interpolant. The script also measures and stores (in `checks`):
  * interpolation in probability: the grid and interpolant applied to exact laws of the same
    shapes (chi2(m)/m and F(m, nu)), error against the true CDF in units of the p-value s.e.;
  * interpolation in b: quantiles simulated at the midpoints of B_GRID (same draws) against the
    interpolated table (what remains is interpolation error plus the part of the Monte Carlo
    error that neighbouring b do not share);
  * sectioning: the R draws in 20 independent sections; the spread of the section quantiles
    gives a model-free s.e. of each quantile, compared with the density formula.

Which kernels get a table
-------------------------
Taken from the registry, not a list: every registered kernel whose `fixed_b` flag is true, the
flag defaulting to the kernel's `psd` flag when the registry does not set it (today's `Kernel`
has no such field). Reason: the fixed-b limit of S(b) is sigma^2 Q(b), a quadratic functional of
a Brownian bridge (Kiefer & Vogelsang 2005, Theorem 1); for a kernel whose estimate is positive
semi-definite by construction Q(b) > 0 almost surely and F is a proper random variable, while
for a kernel that is not PSD (truncated, Tukey-Hanning) Q(b) < 0 has positive probability at
moderate and large b, the statistic is undefined in that fraction of samples and a quantile
table of F is not a law of the test at all. A kernel registered later with psd=True is picked up
by the next run of this script; fixedb.check() names such a kernel (no table yet) instead of
silently falling back to another law.

Reproducibility. Replications are cut into chunks of CHUNK draws; chunk i of m has its own
generator, PCG64 seeded by SeedSequence(SEED, spawn_key=(m, i)), and chunks are reassembled in
order, so the output does not depend on the number of worker processes. BLAS runs on one thread
in every worker. Rerunning with the same arguments on the same machine and library versions
reproduces the file bit for bit; across CPUs the last bits of floating-point sums may differ,
which the 6-digit rounding almost always hides.

Usage: python simulate_fixed_b.py [--reps 400000] [--nobs 1000] [--workers 2] [--out PATH]
"""

from __future__ import annotations

import argparse
import json
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import scipy.fft as sfft
from scipy import stats

from lagwise.engine.covariance.kernels import fixed_b_kernels as registered_fixed_b_kernels
from lagwise.engine.covariance.kernels import get_kernel

SEED = 20261213
CHUNK = 2000
SECTIONS = 20
M_MAX = 5

B_GRID = [0.005, 0.0075, 0.01, 0.015, 0.02, 0.025, 0.03, 0.04, 0.05, 0.06, 0.07, 0.08, 0.09,
          0.10, 0.12, 0.14, 0.16, 0.18, 0.20, 0.225, 0.25, 0.275, 0.30, 0.35, 0.40, 0.45, 0.50,
          0.55, 0.60, 0.65, 0.70, 0.75, 0.80, 0.85, 0.90, 0.95, 1.00]

#: conventional levels kept exactly on the grid (critical values read without interpolation)
_LEVELS = [0.90, 0.95, 0.975, 0.99, 0.995, 0.999]


def probability_grid() -> list[float]:
    """Cumulative probabilities: logit(p) from logit(0.001) to logit(0.9999) in steps of about
    0.25 (65 points), with the conventional levels put exactly on the grid (each replaces its
    nearest grid point), rounded to 6 decimals."""
    lo, hi = np.log(0.001 / 0.999), np.log(0.9999 / 0.0001)
    x = np.linspace(lo, hi, int(round((hi - lo) / 0.25)) + 1)
    p = 1.0 / (1.0 + np.exp(-x))
    for level in _LEVELS:
        p[np.argmin(np.abs(np.log(p / (1 - p)) - np.log(level / (1 - level))))] = level
    p = np.unique(np.round(p, 6))
    return [float(v) for v in p]


PROBS = probability_grid()


def _b_check_grid() -> list[float]:
    """Midpoints of B_GRID: simulated with the same draws to measure interpolation in b."""
    g = np.array(B_GRID)
    return [float(v) for v in np.round(0.5 * (g[1:] + g[:-1]), 6)]


def fixed_b_kernels() -> list[str]:
    """Registered kernels that get a table, in registry order: those with a fixed-b law
    (`Kernel.has_fixed_b_theory`: the kernel's `fixed_b` flag, by default its `psd` flag)."""
    return list(registered_fixed_b_kernels())


def spectral_weights(kernels, b_values, nobs, n_fft):
    """K (n_fft//2 + 1, len(kernels) * len(b_values)): S(b)_ab = T^-1 sum_f P_ab(f) K(f)
    (module docstring), columns ordered kernel-major."""
    cols = []
    for name in kernels:
        w = get_kernel(name).weights(np.asarray(b_values) * nobs, nobs)   # k(j/(bT)), j < T
        omega = np.zeros((w.shape[0], n_fft))
        omega[:, :nobs] = 2.0 * w
        omega[:, 0] = 1.0
        spec = sfft.rfft(omega, axis=1).real
        c = np.full(spec.shape[1], 2.0)
        c[0] = 1.0
        if n_fft % 2 == 0:
            c[-1] = 1.0
        cols.append((spec * c / n_fft).T)
    return np.hstack(cols)


def simulate_chunk(args):
    """F for one chunk: array (reps, columns) of Wald/m, one column per (kernel, b)."""
    m, index, reps, nobs, kmat = args
    from threadpoolctl import threadpool_limits
    rng = np.random.default_rng(np.random.SeedSequence(SEED, spawn_key=(m, index)))
    n_fft = 2 * (kmat.shape[0] - 1)
    with threadpool_limits(1):
        e = rng.standard_normal((reps, m, nobs))
        mean = e.mean(axis=2)
        e -= mean[:, :, None]
        spec = sfft.rfft(e, n=n_fft, axis=2)
        iu = np.triu_indices(m)
        per = (spec[:, iu[0]] * np.conj(spec[:, iu[1]])).real          # (reps, pairs, freq)
        s = (per.reshape(-1, per.shape[2]) @ kmat) / nobs              # (reps*pairs, cols)
        s = s.reshape(reps, len(iu[0]), -1)
        x = np.sqrt(nobs) * mean                                        # (reps, m)
        if m == 1:
            with np.errstate(divide="ignore", invalid="ignore"):
                return x[:, :1] ** 2 / s[:, 0]
        mats = np.empty((reps, s.shape[2], m, m))
        mats[..., iu[0], iu[1]] = np.moveaxis(s, 1, 2)
        mats[..., iu[1], iu[0]] = np.moveaxis(s, 1, 2)
        rhs = np.broadcast_to(x[:, None, :, None], (reps, s.shape[2], m, 1))
        sol = np.linalg.solve(mats, rhs)[..., 0]
        return np.einsum("rk,rck->rc", x, sol) / m


def _interp_logq(logq, b_grid, b):
    """Table interpolation in b, the rule of fixedb._column: log q a PCHIP in b per
    probability (b = 0 row included), linear between neighbouring rows should the cubic make
    the column non-increasing."""
    from scipy.interpolate import PchipInterpolator
    col = PchipInterpolator(b_grid, logq, axis=0)(b)
    if not np.all(np.diff(col) > 0):
        i = int(np.clip(np.searchsorted(b_grid, b, side="right"), 1, len(b_grid) - 1))
        w = (b - b_grid[i - 1]) / (b_grid[i] - b_grid[i - 1])
        col = (1.0 - w) * logq[i - 1] + w * logq[i]
    return col


def _pchip_cdf(logq_col, logit_p, y):
    """The interpolant of fixedb.py: logit CDF as a monotone PCHIP in log q."""
    from scipy.interpolate import PchipInterpolator
    return PchipInterpolator(logq_col, logit_p, extrapolate=False)(y)


def run(reps, nobs, workers, progress=print):
    kernels = fixed_b_kernels()
    probs = np.array(PROBS)
    logit_p = np.log(probs / (1 - probs))
    b_all = B_GRID + _b_check_grid()
    nb = len(B_GRID)
    n_fft = sfft.next_fast_len(2 * nobs - 1, real=True)
    if n_fft % 2:
        n_fft += 1
    kmat = spectral_weights(kernels, b_all, nobs, n_fft)
    nchunks = -(-reps // CHUNK)
    sizes = [min(CHUNK, reps - i * CHUNK) for i in range(nchunks)]
    quant = {}
    checks = {"p_interp_exact_laws": check_probability_grid(reps), "b_interp": {},
              "sectioning": {}, "nonfinite": 0}
    pool = ProcessPoolExecutor(workers) if workers > 1 else None
    try:
        for m in range(1, M_MAX + 1):
            jobs = [(m, i, sizes[i], nobs, kmat) for i in range(nchunks)]
            parts = list(pool.map(simulate_chunk, jobs) if pool else map(simulate_chunk, jobs))
            f = np.concatenate(parts, axis=0)                    # (reps, kernels * b_all)
            checks["nonfinite"] += int((~np.isfinite(f)).sum())
            f = f.reshape(reps, len(kernels), len(b_all))
            sec = np.array_split(np.arange(reps), SECTIONS)
            for ki, name in enumerate(kernels):
                vals = np.sort(f[:, ki, :], axis=0)
                q = np.quantile(vals, probs, axis=0).T            # (b_all, probs)
                q = _round6(q)
                table_q = q[:nb]
                if np.any(np.diff(table_q, axis=1) <= 0):
                    raise RuntimeError(f"quantiles not strictly increasing: {name}, m = {m} "
                                       "(too few --reps for the extreme probabilities)")
                quant.setdefault(name, {})[str(m)] = table_q.tolist()
                checks["b_interp"].setdefault(name, {})[str(m)] = \
                    _check_b_interp(vals[:, nb:], table_q, probs, logit_p, m, reps)
                checks["sectioning"].setdefault(name, {})[str(m)] = \
                    _check_sections(f[:, ki, :nb], sec, table_q, probs, logit_p, reps)
            progress(f"m = {m} done")
    finally:
        if pool:
            pool.shutdown()
    return kernels, quant, checks


def _round6(a):
    """Round to 6 significant digits through the decimal text, so that the JSON holds the
    short decimal (float64 array in and out)."""
    a = np.asarray(a, dtype=float)
    return np.array([float(f"{v:.6g}") for v in a.ravel()]).reshape(a.shape)


def _se(p, reps):
    return np.sqrt(p * (1 - p) / reps)


def check_probability_grid(reps):
    """Interpolation error of the probability grid on exact laws of the same shapes: the b -> 0
    limit chi2(m)/m and F(m, nu) for nu in {1, 2, 3, 5, 10, 30} (heavier right tails than any
    tabulated fixed-b law, m = 1..5). Quantiles at PROBS, the interpolant of fixedb.py, and the
    true CDF on 20,001 points of log F between the first and last quantile; max |error| and max
    |error| / (s.e. of a p-value at R = reps)."""
    probs = np.array(PROBS)
    logit_p = np.log(probs / (1 - probs))
    worst, worst_z = 0.0, 0.0
    for m in range(1, M_MAX + 1):
        for nu in (None, 1, 2, 3, 5, 10, 30):
            law = stats.chi2(m, scale=1.0 / m) if nu is None else stats.f(m, nu)
            y = np.log(law.ppf(probs))
            yy = np.linspace(y[0], y[-1], 20_001)
            exact = law.cdf(np.exp(yy))
            approx = 1 / (1 + np.exp(-_pchip_cdf(y, logit_p, yy)))
            err = np.abs(approx - exact)
            worst = max(worst, float(np.nanmax(err)))
            worst_z = max(worst_z, float(np.nanmax(err / _se(exact, reps))))
    return {"max_abs": float(f"{worst:.3g}"), "max_in_se": float(f"{worst_z:.3g}")}


def _check_b_interp(sorted_mid, table_q, probs, logit_p, m, reps):
    """Interpolation error in b: at each midpoint of B_GRID, the p-value the table gives at
    the midpoint's own simulated quantiles (same draws) minus the nominal 1 - p."""
    grid = np.array([0.0] + B_GRID)
    zero = np.log(stats.chi2.ppf(probs, m) / m)
    logq = np.vstack([zero, np.log(table_q)])
    worst, worst_z, where = 0.0, 0.0, None
    for j, b in enumerate(_b_check_grid()):
        col = _interp_logq(logq, grid, b)
        sim = np.log(np.quantile(sorted_mid[:, j], probs))
        inner = slice(1, -1)                       # inside the table for both
        cdf = 1 / (1 + np.exp(-_pchip_cdf(col, logit_p, sim[inner])))
        ok = np.isfinite(cdf)
        err = np.abs(cdf[ok] - probs[inner][ok])
        z = err / _se(probs[inner][ok], reps)
        if err.size and err.max() > worst:
            worst, where = float(err.max()), b
        worst_z = max(worst_z, float(z.max()) if z.size else 0.0)
    return {"max_abs": round(worst, 6), "max_in_se": round(worst_z, 3), "worst_b": where}


def _check_sections(f, sections, table_q, probs, logit_p, reps):
    """Sectioning: p-value s.e. at each tabulated quantile from the spread of the exceedance
    rate across independent sections, against sqrt(p(1-p)/R); and the quantile s.e. from the
    section quantiles against the density formula sqrt(p(1-p)/R)/f(q) with f from the
    interpolant. Median and 90th percentile of the ratios over b and p in [0.01, 0.99]."""
    from scipy.interpolate import PchipInterpolator
    keep = (probs >= 0.01) & (probs <= 0.99)
    pr, qr = [], []
    for j in range(table_q.shape[0]):
        q = table_q[j]
        rates = np.array([(f[s, j][:, None] <= q[None, :]).mean(axis=0) for s in sections])
        se_sec = rates.std(axis=0, ddof=1) / np.sqrt(len(sections))
        pr.append((se_sec / _se(probs, reps))[keep])
        secq = np.array([np.quantile(f[s, j], probs) for s in sections])
        se_q_sec = secq.std(axis=0, ddof=1) / np.sqrt(len(sections))
        y = np.log(q)
        dx_dy = PchipInterpolator(y, logit_p).derivative()(y)     # d logit / d log q
        dens = dx_dy * probs * (1 - probs) / q                     # f(q)
        qr.append((se_q_sec * dens / _se(probs, reps))[keep])
    pr, qr = np.concatenate(pr), np.concatenate(qr)
    return {"p_se_ratio_median": round(float(np.median(pr)), 3),
            "p_se_ratio_p90": round(float(np.quantile(pr, 0.9)), 3),
            "q_se_ratio_median": round(float(np.median(qr)), 3),
            "q_se_ratio_p90": round(float(np.quantile(qr, 0.9)), 3)}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--reps", type=int, default=400_000)
    ap.add_argument("--nobs", type=int, default=1000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent.parent / "engine"
                                         / "laws" / "tables" / "fixed_b.json"))
    args = ap.parse_args(argv)
    if args.reps < 10 * SECTIONS or args.reps % SECTIONS:
        ap.error(f"--reps must be a multiple of {SECTIONS} and at least {10 * SECTIONS}")
    start = time.time()
    kernels, quant, checks = run(args.reps, args.nobs, args.workers)
    elapsed = time.time() - start
    table = {
        "description": "fixed-b quantiles of F = Wald/m (t^2 for m = 1), location model, i.i.d. "
                       "N(0, I_m) errors, demeaned, T = nobs; quantiles[kernel][m][i][j] at "
                       "b_grid[i] and probs[j] (cumulative probability), 6 significant digits; "
                       "generated by simulate_fixed_b.py",
        "seed": SEED, "chunk": CHUNK, "reps": args.reps, "nobs": args.nobs,
        "kernel_rule": "registered kernels whose fixed_b flag (default: psd) is true",
        "kernels": kernels, "b_grid": B_GRID, "probs": PROBS, "m": list(range(1, M_MAX + 1)),
        "mc_error": "a p-value p read off the table has Monte Carlo s.e. sqrt(p (1 - p) / reps); "
                    "a quantile q_p has s.e. sqrt(p (1 - p) / reps) / f(q_p)",
        "checks": checks,
        "quantiles": quant,
    }
    text = json.dumps(table, separators=(",", ":"))
    Path(args.out).write_text(text + "\n")
    print(f"{args.out}: {len(text) / 1e3:.0f} kB, {elapsed:.0f} s")


if __name__ == "__main__":
    main()
