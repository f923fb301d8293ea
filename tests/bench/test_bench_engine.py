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

from .rounds import busy_neighbours, interleaved, ratio, report, spread

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


def test_ols_fit_against_normal_equations():
    """One fit at the memory floor: `fit_ols` at 1e6 x 10 (an intercept and nine regressors)
    against a normal-equations fit from the same frame (X with a column of ones, X'X, X'y, a
    Cholesky solve), interleaved rounds in one process; and the growth of our fit's time from
    1e5 to 1e6 rows. Also fit + one Newey-West infer (the orthonormal basis the working
    contributions need is formed there, not in the fit), without a peer."""
    import pandas as pd
    import scipy.linalg as sla
    regs = [f"x{i}" for i in range(1, 10)]
    frames = {}
    for n in (100_000, 1_000_000):
        X, y = make_data(n, 10, seed=1)
        frames[n] = pd.DataFrame(X[:, 1:], columns=regs).assign(y=y)
    del X, y

    def normal_equations(df):
        X = np.column_stack([np.ones(len(df)), df[regs].to_numpy()])
        return sla.cho_solve(sla.cho_factor(X.T @ X), X.T @ df["y"].to_numpy())

    def ours(df):
        return lagwise.fit_ols(df, "y", regs).beta

    nw = lagwise.estimator("kernel", kernel="bartlett", lags=11)
    for n, df in frames.items():             # the same numbers first
        np.testing.assert_allclose(ours(df), normal_equations(df), rtol=1e-9)
    big, small = frames[1_000_000], frames[100_000]
    times = interleaved({"normal_equations_1e6": lambda: normal_equations(big),
                         "fit_ols_1e6": lambda: ours(big),
                         "normal_equations_1e5": lambda: normal_equations(small),
                         "fit_ols_1e5": lambda: ours(small),
                         "fit_ols_plus_newey_west_infer_1e6":
                             lambda: lagwise.fit_ols(big, "y", regs).infer(nw)},
                        rounds=15)
    growth = np.asarray(times["fit_ols_1e6"]) / np.asarray(times["fit_ols_1e5"])
    out = {name: spread(t) for name, t in times.items()}
    out["normal_equations / fit_ols at 1e6 (target >= 0.5)"] = ratio(
        times, "normal_equations_1e6", "fit_ols_1e6")
    out["normal_equations / fit_ols at 1e5"] = ratio(times, "normal_equations_1e5",
                                                      "fit_ols_1e5")
    out["fit_ols growth 1e5 -> 1e6 (target <= 12)"] = {
        "of_medians": round(float(np.median(times["fit_ols_1e6"])
                                  / np.median(times["fit_ols_1e5"])), 2),
        "per_round_iqr": [round(float(v), 2) for v in np.percentile(growth, [25, 75])]}
    report("ols fit vs normal equations (ms)", out)
    assert out["normal_equations / fit_ols at 1e6 (target >= 0.5)"]["of_medians"] >= 0.5
    assert out["fit_ols growth 1e5 -> 1e6 (target <= 12)"]["of_medians"] <= 12


def test_qs_infer_with_busy_neighbour():
    """The Quadratic Spectral `infer` after the cache (T = 100,000, k = 5, bandwidth 12): quiet,
    and while two other processes each keep a core busy in a Python loop (this machine has
    two). Each call follows 20 ms of sleep, as a server idles between key presses (a process
    that never sleeps shares the cores with the neighbours in time slices, so a call that
    straddles a slice waits out theirs: reported too, as `back_to_back`). Target: under 5 ms
    with the neighbours."""
    import pandas as pd
    n, k = 100_000, 5
    X, y = make_data(n, k)
    regs = [f"x{i}" for i in range(1, k)]
    df = pd.DataFrame(X[:, 1:], columns=regs).assign(y=y)
    fit = lagwise.fit_ols(df, "y", regs)
    qs = lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=12.0)
    bartlett = lagwise.estimator("kernel", kernel="bartlett", bandwidth=12.0)
    fit.infer(qs)
    cases = {"qs_infer": lambda: fit.infer(qs), "bartlett_infer": lambda: fit.infer(bartlett)}
    quiet = interleaved(cases, rounds=51, gap=0.02)
    with busy_neighbours(2):
        busy = interleaved(cases, rounds=51, gap=0.02)
        back_to_back = interleaved(cases, rounds=51)
    out = {"quiet": {name: spread(t) for name, t in quiet.items()},
           "two busy-loop neighbour processes": {name: spread(t) for name, t in busy.items()},
           "two busy-loop neighbour processes, back_to_back":
               {name: spread(t) for name, t in back_to_back.items()}}
    report("qs infer under contention (ms)", out)
    assert out["two busy-loop neighbour processes"]["qs_infer"]["median"] < 5.0
