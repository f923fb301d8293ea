"""Fixed-b p-values over the whole range (issue 21, item 1).

The table's p-values are checked against (a) a FRESH simulation made here (another seed, another
T, another code path: autocovariances by inverse FFT, not the table script's spectral weights),
within the stated Monte Carlo error of both; (b) the EXACT finite-T law of the t statistic
(Imhof 1961, exact_m1.py; m = 1), which has no Monte Carlo error at all. Then range and
monotonicity properties (hypothesis), consistency of p-values with critical values, the
Kiefer-Vogelsang values, the kernel rule, and the regression case of the issue.

The outside checks: a fresh simulation and the exact law (Imhof 1961), both computed here.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import fft, stats

import lagwise
from lagwise.engine.errors import SpecificationError
from lagwise.engine.covariance.kernels import (KERNELS, fixed_b_kernels, fixed_b_unavailable,
                                              get_kernel, missing_fixed_b_tables,
                                              register_kernel)
from lagwise.engine.laws import fixedb as fb

_HERE = Path(__file__).resolve().parent


def _load(name, path):
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    spec.loader.exec_module(mod)
    return mod


SCRIPT = _HERE.parent / "scripts" / "simulate_fixed_b.py"
exact = _load("_fixedb_exact_m1", _HERE / "exact_m1.py")

R_TABLE = fb.table()[3]["reps"]
Z = 4.0          # tolerance in standard errors (about 60 comparisons: P(any false alarm) < 0.5%)


def table_se(p):
    return np.sqrt(p * (1 - p) / R_TABLE)


# --------------------------------------------------------------------------- fresh simulation

def fresh_t2(kernel, b_values, reps, nobs, seed):
    """t^2 for each b (columns): location model, i.i.d. N(0, 1), demeaned; S(b) = g_0 +
    2 sum_j k(j/(bT)) g_j from autocovariances by inverse FFT (not the table's code path)."""
    rng = np.random.default_rng(seed)
    w = get_kernel(kernel).weights(np.asarray(b_values) * nobs, nobs)     # (nb, T)
    out = []
    for start in range(0, reps, 5000):
        r = min(5000, reps - start)
        e = rng.standard_normal((r, nobs))
        mean = e.mean(axis=1)
        e -= mean[:, None]
        spec = fft.rfft(e, n=2 * nobs, axis=1)
        g = fft.irfft(np.abs(spec) ** 2, n=2 * nobs, axis=1)[:, :nobs] / nobs
        s = g[:, :1] + 2.0 * g[:, 1:] @ w[:, 1:].T
        out.append(nobs * mean[:, None] ** 2 / s)
    return np.concatenate(out)


FRESH_REPS, FRESH_T, FRESH_SEED = 20_000, 500, 90210
FRESH_B = (0.097, 0.3)


@pytest.fixture(scope="module", params=["bartlett", "quadratic_spectral"])
def fresh(request):
    kernel = request.param
    return kernel, fresh_t2(kernel, FRESH_B, FRESH_REPS, FRESH_T, FRESH_SEED)


def _points(kernel, b):
    """|t| at small, median and large values: the issue's 0.147 and 0.353, and the table's
    quantiles at CDF levels 0.25, 0.5, 0.75, 0.9, 0.95, 0.99, 0.998."""
    return [0.147, 0.353] + [fb.fixed_b_critical_value(kernel, b, lev)
                              for lev in (0.25, 0.5, 0.75, 0.9, 0.95, 0.99, 0.998)]


def test_p_values_agree_with_fresh_simulation(fresh):
    """Table p-value vs the fresh simulation's exceedance rate at the same |t|, within
    Z sqrt(se_fresh^2 + se_table^2) + 1e-4 (T = 500 against the table's T = 1000: the exact
    laws differ by at most 1e-5 at these points, exact_m1)."""
    kernel, t2 = fresh
    worst = 0.0
    for j, b in enumerate(FRESH_B):
        for t in _points(kernel, b):
            p_tab = fb.fixed_b_p_value(kernel, b, t * t)
            p_sim = float(np.mean(t2[:, j] > t * t))
            se = np.sqrt(p_tab * (1 - p_tab) / FRESH_REPS + table_se(p_tab) ** 2)
            assert abs(p_tab - p_sim) <= Z * se + 1e-4, (kernel, b, t, p_tab, p_sim, se)
            worst = max(worst, abs(p_tab - p_sim) / se)
    assert worst > 0


def test_fresh_simulation_also_confirms_the_mc_error_statement(fresh):
    """The spread of (table - fresh) over the points, in units of the stated s.e., is that of
    standard normal draws (root mean square below 2), so the stated error is not too small."""
    kernel, t2 = fresh
    z = []
    for j, b in enumerate(FRESH_B):
        for t in _points(kernel, b):
            p_tab = fb.fixed_b_p_value(kernel, b, t * t)
            p_sim = float(np.mean(t2[:, j] > t * t))
            z.append((p_tab - p_sim) / np.sqrt(p_tab * (1 - p_tab) / FRESH_REPS
                                               + fb.p_value_mc_error(kernel, b, t * t) ** 2))
    assert np.sqrt(np.mean(np.square(z))) < 2.0


def test_two_restrictions_against_fresh_simulation():
    """m = 2, Parzen, b = 0.2: Wald/2 from a fresh simulation (10,000 reps, T = 400)."""
    rng = np.random.default_rng(5150)
    reps, nobs, b, m = 10_000, 400, 0.2, 2
    w = get_kernel("parzen").weights([b * nobs], nobs)[0]
    e = rng.standard_normal((reps, m, nobs))
    mean = e.mean(axis=2)
    e -= mean[:, :, None]
    spec = fft.rfft(e, n=2 * nobs, axis=2)
    s = np.empty((reps, m, m))
    for a in range(m):
        for c in range(m):
            g = fft.irfft((spec[:, a] * np.conj(spec[:, c])).real, n=2 * nobs,
                          axis=1)[:, :nobs] / nobs              # (C_ac(j) + C_ca(j)) / 2
            s[:, a, c] = g[:, 0] + 2.0 * g[:, 1:] @ w[1:]
    x = np.sqrt(nobs) * mean
    f = np.einsum("ra,ra->r", x, np.linalg.solve(s, x[..., None])[..., 0]) / m
    for value in [0.02, 0.1] + [fb.fixed_b_critical_value("parzen", b, lev, m)
                                for lev in (0.5, 0.9, 0.95, 0.99)]:
        p_tab = fb.fixed_b_p_value("parzen", b, value, m)
        p_sim = float(np.mean(f > value))
        se = np.sqrt(p_tab * (1 - p_tab) / reps + table_se(p_tab) ** 2)
        assert abs(p_tab - p_sim) <= Z * se + 2e-4, (value, p_tab, p_sim)


# --------------------------------------------------------------------------- exact law (m = 1)

@pytest.mark.parametrize("kernel,b", [("bartlett", 0.097), ("quadratic_spectral", 0.5),
                                      ("bohman", 0.15), ("parzen", 0.8)])
def test_p_values_agree_with_exact_law(kernel, b):
    """Against the exact law at the table's own T (Imhof): only the table's Monte Carlo and
    interpolation error remain; within Z table s.e. + 5e-5 (interpolation)."""
    nobs = fb.table()[3]["nobs"]
    for t in _points(kernel, b):
        p_tab = fb.fixed_b_p_value(kernel, b, t * t)
        p_ex = exact.exact_p_value(kernel, b, t, nobs)
        assert abs(p_tab - p_ex) <= Z * table_se(p_ex) + 5e-5, (kernel, b, t, p_tab, p_ex)


def test_regression_case_of_the_issue():
    """Bartlett, b/T = 0.097: t = 0.147 gave 0.979 and t = 0.353 gave 0.882 (linear in F from 0
    to the median); the law gives about 0.89 and 0.74 (exact, T = 1000: 0.8905, 0.7413)."""
    for t, about in ((0.147, 0.8905), (0.353, 0.7413)):
        p = fb.fixed_b_p_value("bartlett", 0.097, t * t)
        assert abs(p - about) <= Z * table_se(about) + 5e-5, (t, p)
    assert fb.fixed_b_p_value("bartlett", 0.097, 0.147**2) < 0.9


# --------------------------------------------------------------------------- properties

KERNEL_ST = st.sampled_from(fb.kernels_with_tables())
B_ST = st.one_of(st.just(0.0), st.floats(1e-6, 1.0), st.sampled_from(list(fb.table()[0])))
M_ST = st.integers(1, 5)
F_ST = st.floats(0.0, 1e6)


@settings(max_examples=150, deadline=None)
@given(KERNEL_ST, B_ST, M_ST, st.lists(F_ST, min_size=2, max_size=30))
def test_p_values_are_a_survival_function(kernel, b, m, fs):
    """In [0, 1], 1 at f = 0, positive for every finite f, non-increasing in f; the vectorised
    function equals the scalar one."""
    f = np.sort(np.array(fs))
    p = fb.fixed_b_p_values(kernel, b, f, m)
    assert np.all((p > 0) & (p <= 1))
    assert np.all(np.diff(p) <= 1e-15)
    if f[0] == 0:
        assert p[0] == 1.0
    i = len(f) // 2
    assert fb.fixed_b_p_value(kernel, b, float(f[i]), m) == p[i]


@settings(max_examples=100, deadline=None)
@given(KERNEL_ST, B_ST, M_ST, st.floats(0.001, 0.9999))
def test_p_value_of_critical_value_is_the_size(kernel, b, m, level):
    """p(cv(level)) = 1 - level: one interpolant, inverted exactly."""
    cv = fb.fixed_b_critical_value(kernel, b, level, m)
    f = cv * cv if m == 1 else cv
    assert fb.fixed_b_p_value(kernel, b, f, m) == pytest.approx(1 - level, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(KERNEL_ST, st.floats(1e-4, 1.0), M_ST)
def test_continuous_at_the_table_edges(kernel, b, m):
    """The lower-tail and upper-tail rules meet the interpolant at the first and last
    quantile; beyond the last one p is flagged and below its tail mass."""
    grid, probs, _, _ = fb.table()
    lo = fb.fixed_b_critical_value(kernel, b, float(probs[0]), m)
    hi = fb.fixed_b_critical_value(kernel, b, float(probs[-1]), m)
    lo, hi = (lo * lo, hi * hi) if m == 1 else (lo, hi)
    p = fb.fixed_b_p_values_detail(kernel, b, np.array([lo * (1 - 1e-9), lo * (1 + 1e-9),
                                                        hi * (1 - 1e-9), hi * (1 + 1e-9),
                                                        hi * 1e3]), m)
    assert p.p[0] == pytest.approx(p.p[1], abs=1e-8)
    assert p.p[2] == pytest.approx(p.p[3], rel=1e-6)
    assert list(p.beyond_table) == [False, False, False, True, True]
    assert 0 < p.p[4] < p.tail_mass and p.mc_error[4] == p.p[4]


def test_limits_and_special_values():
    f = np.array([0.0, 0.5, 3.84, 1e300, np.inf, np.nan, -1.0])
    p = fb.fixed_b_p_values("parzen", 0.0, f, 1)
    np.testing.assert_allclose(p[:3], stats.chi2.sf(f[:3], 1), rtol=1e-12)
    assert p[3] > 0 and p[4] == 0.0 and np.isnan(p[5]) and np.isnan(p[6])
    # b -> 0 approaches the chi2(m)/m limit
    for m in (1, 3):
        x = np.array([0.05, 1.0, 3.0])
        np.testing.assert_allclose(fb.fixed_b_p_values("bartlett", 1e-7, x, m),
                                   stats.chi2.sf(m * x, m), atol=1e-4)
    assert fb.fixed_b_critical_value("parzen", 1e-6, 0.95) == pytest.approx(1.96, abs=0.01)
    # broadcasting over b (curve points) and f
    b = np.array([0.05, 0.1, 0.5])
    many = fb.fixed_b_p_values("bartlett", b[:, None], np.array([[1.0, 4.0]]), 1)
    assert many.shape == (3, 2)
    assert many[1, 1] == fb.fixed_b_p_value("bartlett", 0.1, 4.0)
    # more spread at larger b: larger p for a large statistic
    assert many[0, 1] < many[1, 1] < many[2, 1]


def test_mc_errors():
    for b, f in ((0.1, 0.02), (0.1, 4.0), (0.7, 30.0)):
        p = fb.fixed_b_p_value("quadratic_spectral", b, f)
        assert fb.p_value_mc_error("quadratic_spectral", b, f) == pytest.approx(
            np.sqrt(p * (1 - p) / R_TABLE))
    assert fb.p_value_mc_error("bartlett", 0.0, 4.0) == 0.0
    half = fb.p_value_mc_error("bartlett", 0.0025, 4.0)         # half way to the first b
    p = fb.fixed_b_p_value("bartlett", 0.0025, 4.0)
    assert half == pytest.approx(0.5 * np.sqrt(p * (1 - p) / R_TABLE))
    se = fb.critical_value_mc_error("bartlett", 0.1, 0.95)
    assert 0.001 < se < 0.02                                  # |t| cv at R = 400,000
    assert fb.critical_value_mc_error("quadratic_spectral", 1.0, 0.99) > se


def test_vectorised_is_fast():
    import time
    t = np.abs(np.random.default_rng(1).standard_normal(200_000)) * 3
    start = time.perf_counter()
    p = fb.fixed_b_p_values("bartlett", 0.1, t * t, 1)
    assert time.perf_counter() - start < 2.0 and p.shape == t.shape


# --------------------------------------------------------------------------- literature values

@pytest.mark.parametrize("b", [0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 0.7, 0.8, 1.0])
@pytest.mark.parametrize("one_sided", [0.90, 0.95, 0.975])
def test_bartlett_agrees_with_kv_cubic(b, one_sided):
    """KV (2005) cubic [coefficients recalled, M], one-sided quantile q of t, i.e. the table's
    CDF level 2q - 1 for |t|: within 3% (the cubic is a fit, slightly conservative at b = 1)."""
    ours = fb.fixed_b_critical_value("bartlett", b, 2 * one_sided - 1)
    assert ours == pytest.approx(fb.kv_bartlett_cubic(b, one_sided), rel=0.03)


@pytest.mark.parametrize("one_sided,value", sorted(fb.KV2002_BARTLETT_B1.items()))
def test_bartlett_b1_agrees_with_kv_2002(one_sided, value):
    """KV (2002) Bartlett b = 1 quantiles 2.740 / 3.764 / 4.771 / 6.090 [recalled, M]: within
    4 Monte Carlo s.e. of the table's critical value plus 0.5% (T = 1000 against the limit)."""
    level = 2 * one_sided - 1
    ours = fb.fixed_b_critical_value("bartlett", 1.0, level)
    se = fb.critical_value_mc_error("bartlett", 1.0, level)
    assert abs(ours - value) <= Z * se + 0.005 * value, (ours, value, se)


# --------------------------------------------------------------------------- kernels

_LOCATION = lagwise.fit_ols(
    __import__("pandas").DataFrame({"y": np.random.default_rng(3).standard_normal(200)}), "y",
    [])


def test_tables_cover_every_kernel_with_fixed_b_theory():
    """The table's kernels are the registry's kernels with fixed-b theory (flag `fixed_b`,
    default `psd`), the same rule in the module and the script; no shipped kernel is missing."""
    script = _load("_simulate_fixed_b", SCRIPT)
    assert set(fb.kernels_with_tables()) == set(fixed_b_kernels())
    assert script.fixed_b_kernels() == list(fixed_b_kernels())
    assert missing_fixed_b_tables() == ()
    assert {"bartlett", "parzen", "quadratic_spectral", "bohman"} <= set(fb.kernels_with_tables())
    for name in ("truncated", "tukey_hanning"):
        assert not get_kernel(name).psd and not fb.available(name)
        assert "not positive semi-definite" in fixed_b_unavailable(name)
        with pytest.raises(SpecificationError, match="available for the"):
            fb.fixed_b_p_value(name, 0.1, 4.0)
        est = lagwise.estimator("kernel", kernel=name, bandwidth=5)
        with pytest.raises(lagwise.LawUnavailable, match="not positive semi-definite"):
            _LOCATION.infer(est, reference="fixed-b")


def test_kernel_registered_later_is_named_not_skipped():
    name = "_fixedb_test_psd_kernel"
    register_kernel(name, lambda x: np.clip(1.0 - np.abs(x), 0.0, None) ** 2, label="test",
                    reference="test", psd=True, finite_support=True)
    try:
        assert name in missing_fixed_b_tables()
        assert "registered after the fixed-b table" in fixed_b_unavailable(name)
        with pytest.raises(SpecificationError, match="available for the"):
            fb.fixed_b_critical_value(name, 0.1)
    finally:
        KERNELS.pop(name, None)


def test_bad_arguments_are_refused():
    with pytest.raises(SpecificationError, match="b/T"):
        fb.fixed_b_critical_value("bartlett", 1.5)
    with pytest.raises(SpecificationError, match="b/T"):
        fb.fixed_b_p_values("bartlett", np.array([0.1, np.nan]), 1.0)
    with pytest.raises(SpecificationError, match="restrictions"):
        fb.fixed_b_p_value("bartlett", 0.1, 1.0, 6)
    with pytest.raises(SpecificationError, match="levels"):
        fb.fixed_b_critical_value("bartlett", 0.1, 0.99999)
    assert isinstance(lagwise.SpecificationError("x"), SpecificationError)
