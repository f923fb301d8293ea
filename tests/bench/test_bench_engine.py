"""Engine benchmarks (not in the default run): python -m pytest tests/bench -m bench -s

Ratios of medians over several rounds, measured in one process against what a user would
otherwise run: a loop of statsmodels HAC fits, one per lag count. Best-of figures overstate on a
shared machine, so every figure here is a median.
"""

import json
import subprocess
import sys
import time

import numpy as np
import pytest

import lagwise

pytestmark = pytest.mark.bench
ROUNDS = 5


def make_data(n, k, seed=0):
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.standard_normal((n, k - 1))])
    for j in range(1, k):                                   # persistent regressors
        X[:, j] = _ar1(X[:, j], 0.5)
    e = _ar1(rng.standard_normal(n), 0.6) * (1 + 0.5 * np.abs(X[:, 1]))
    return X, X @ np.linspace(0.2, 1.0, k) + e


def _ar1(shocks, rho):
    from scipy.signal import lfilter
    return lfilter([1.0], [1.0, -rho], shocks)


def median_of(fn, rounds=ROUNDS):
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def test_sweep_against_statsmodels_loop():
    import pandas as pd
    import statsmodels.api as sm
    n, k, lmax = 100_000, 5, 100
    X, y = make_data(n, k)
    df = pd.DataFrame(X[:, 1:], columns=[f"x{i}" for i in range(1, k)]).assign(y=y)
    regs = [f"x{i}" for i in range(1, k)]
    lags = np.arange(lmax + 1)

    def baseline():
        return np.array([sm.OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": int(L)}).bse
                         for L in lags])

    def ours_bartlett():
        fit = lagwise.fit_ols(df, "y", regs)
        return fit.sweep(kernels=["bartlett"], bandwidths=lags + 1.0)

    kernels = list(lagwise.KERNELS)

    def ours_all():
        fit = lagwise.fit_ols(df, "y", regs)
        return fit.sweep(kernels=kernels, bandwidths=lags + 1.0)

    t_base, base_se = median_of(baseline)
    t_i, sw = median_of(ours_bartlett, rounds=15)
    t_ii, _ = median_of(ours_all, rounds=9)
    diff = np.max(np.abs(sw.std_error[0] / base_se - 1))
    fit = lagwise.fit_ols(df, "y", regs)
    fit.moments.ensure(n - 1)
    infer_ms = {}
    for kern in kernels:
        est = lagwise.estimator("kernel", kernel=kern, bandwidth=12.0)
        fit.infer(est)
        one, _ = median_of(lambda: fit.infer(est), rounds=51)
        infer_ms[kern] = one * 1e3
    report = {"statsmodels_loop_s_median": round(t_base, 3),
              "fit_plus_bartlett_sweep_s_median": round(t_i, 4),
              "ratio_bartlett": round(t_base / t_i, 1),
              f"fit_plus_{len(kernels)}_kernel_sweep_s_median": round(t_ii, 4),
              "ratio_all_kernels": round(t_base / t_ii, 1),
              "max_rel_diff_bartlett_se": float(diff),
              "one_infer_ms_after_cache_median": {k: round(v, 3) for k, v in infer_ms.items()}}
    print("\nBENCH sweep", json.dumps(report, indent=1))
    assert diff <= 1e-10
    assert t_base / t_i >= 300
    assert t_base / t_ii >= 100
    assert max(v for k, v in infer_ms.items() if k != "quadratic_spectral") < 1.0
    assert infer_ms["quadratic_spectral"] < 5.0


CHILD = r"""
import json, resource, sys, time
import numpy as np
sys.path.insert(0, ".")
from tests.bench.test_bench_engine import make_data
import lagwise
X, y = make_data(1_000_000, 10, seed=1)
import pandas as pd
df = pd.DataFrame(X[:, 1:], columns=[f"x{i}" for i in range(1, 10)]).assign(y=y)
del X, y
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
t0 = time.perf_counter()
fit = lagwise.fit_ols(df, "y", [f"x{i}" for i in range(1, 10)])
t_fit = time.perf_counter() - t0
t1 = time.perf_counter()
fit.moments.ensure(100)                    # what finite kernels up to b = 101 need
t_cache100 = time.perf_counter() - t1
from lagwise.engine.covariance.cache import MomentCache
t2 = time.perf_counter()
every = MomentCache(fit.working_contributions)   # what an infinite-support kernel needs, anew
every.ensure(fit.nobs - 1)
t_all = time.perf_counter() - t2
fit.caches.put("moments", every)
del df
res = fit.infer(lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=20.0))
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"fit_s": t_fit, "fit_cache_100_lags_s": t_fit + t_cache100,
                  "fit_cache_all_lags_s": t_fit + t_all, "peak_rss_gib": peak / 2**20,
                  "data_rss_gib": before / 2**20, "model_nbytes_gib": fit.nbytes / 2**30}))
"""


def test_million_rows_fit_and_cache():
    out = subprocess.run([sys.executable, "-c", CHILD], capture_output=True, text=True,
                         timeout=600)
    assert out.returncode == 0, out.stderr
    report = json.loads(out.stdout.strip().splitlines()[-1])
    print("\nBENCH 1e6 x 10", json.dumps({k: round(v, 3) for k, v in report.items()}))
    assert report["fit_cache_all_lags_s"] < 5
    assert report["peak_rss_gib"] < 2
