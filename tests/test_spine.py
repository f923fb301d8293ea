"""The moment-model seam and findings from an independent implementation, each with a
regression test: bandwidths below 1, an unrepaired non-PSD truncated estimate, the AR cap flag,
the centring of the Newey-West (1994) rule; explicit caches counted honestly; laws as objects."""

import gc
import tracemalloc

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import lagwise
from lagwise.engine.laws.reference import EWCLaw, FixedB, Normal, StudentT, resolve
from tests.helpers import ar1, regression_frame


# ----------------------------------------------------------------- bandwidths below 1

def test_quadratic_spectral_uses_the_bandwidth_the_rule_chose():
    """An Andrews bandwidth below 1 is used as is by the Quadratic Spectral kernel (which
    weights every lag at any b > 0), and described exactly; finite kernels say lag 0 only."""
    for seed in range(500):                       # a sample whose lag-1 correlation is tiny
        y = np.random.default_rng(seed).standard_normal(500)
        yc = y - y.mean()
        if abs(yc[1:] @ yc[:-1] / (yc[:-1] @ yc[:-1])) < 0.01:
            break
    fit = lagwise.fit_ols(pd.DataFrame({"y": y}), "y", [])
    qs = lagwise.select_bandwidth(fit, "quadratic_spectral", "andrews")
    assert 0 < qs.b < 1 and "lag 0 only" not in qs.explanation
    res = fit.infer(lagwise.estimator("kernel", kernel="quadratic_spectral",
                                      bandwidth="andrews"))
    assert res.bandwidth == qs.b
    u = fit.contributions[:, 0]
    t = len(u)
    gam = np.array([u[j:] @ u[: t - j] for j in range(t)]) / t
    w = lagwise.get_kernel("quadratic_spectral").weight(np.arange(t) / qs.b)
    direct = gam[0] + 2 * (w[1:] @ gam[1:])
    assert fit.to_original(res.long_run.S)[0, 0] == pytest.approx(direct, rel=1e-9)
    one = fit.infer(lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=1.0))
    assert not np.isclose(one.table.std_error.iloc[0], res.table.std_error.iloc[0], rtol=1e-6)
    bart = lagwise.select_bandwidth(fit, "bartlett", "andrews")
    if bart.b < 1:
        assert "below 1: lag 0 only" in bart.explanation


def test_rule_finding_no_autocorrelation_gives_lag_zero_only():
    from lagwise.engine.covariance.bandwidth import choose
    u = np.tile([1.0, 0.0, -1.0, 0.0], 25)[:, None]   # lag-1 products sum to zero: rho = 0
    choice = choose(u, np.array([False]), lagwise.get_kernel("quadratic_spectral"), "andrews")
    assert choice.b == 0.0 and "lag 0 only" in choice.explanation
    w = lagwise.get_kernel("quadratic_spectral").weights([0.0], 5)
    np.testing.assert_array_equal(w, [[1, 0, 0, 0, 0]])


# ----------------------------------------------------------------- unrepaired truncated

def alternating_fit(n=200):
    rng = np.random.default_rng(1)
    y = np.where(np.arange(n) % 2 == 0, 1.0, -1.0) + 0.01 * rng.standard_normal(n)
    return lagwise.fit_ols(pd.DataFrame({"y": y}), "y", [])


def test_truncated_without_repair_returns_the_flagged_estimate():
    """gamma_1 is about -gamma_0, so the truncated kernel with one lag gives S < 0: the estimate
    is returned with its flag and a note (no standard error for a negative variance), not
    refused as 'collapsed to zero'."""
    fit = alternating_fit()
    res = fit.infer(lagwise.estimator("kernel", kernel="truncated", bandwidth=2, repair=False))
    assert "not_psd" in res.flags
    assert res.long_run.S[0, 0] < 0
    assert np.isnan(res.table.std_error.iloc[0])
    assert any("negative variance" in n for n in res.notes)
    repaired = fit.infer(lagwise.estimator("kernel", kernel="truncated", bandwidth=2))
    assert {"psd_repaired", "near_singular"} <= repaired.flags   # one moment, clipped to zero
    assert repaired.table.std_error.iloc[0] == 0 and np.isnan(repaired.table.t_stat.iloc[0])
    assert any("not meaningful" in n for n in repaired.notes)
    sw = fit.sweep(kernels=["truncated"], bandwidths=[1.0, 2.0, 3.0], repair=False)
    assert list(sw.status[0]) == ["", "not_psd", ""]
    assert np.isnan(sw.std_error[0, 1, 0]) and np.isfinite(sw.std_error[0, [0, 2], 0]).all()


def test_truncated_at_b_equal_t_is_refused_as_collapsed():
    fit = alternating_fit(60)
    with pytest.raises(lagwise.EstimationError, match="is zero"):
        fit.infer(lagwise.estimator("kernel", kernel="truncated", bandwidth=60.0, repair=False))
    sw = fit.sweep(kernels=["truncated"], bandwidths=[60.0], repair=False)
    assert sw.status[0, 0] == "collapsed"


# ----------------------------------------------------------------- the AR cap flag

def test_rho_cap_flag_only_when_a_weighted_moment_is_capped():
    rng = np.random.default_rng(9)
    n = 800
    x_iid = rng.standard_normal(n)
    e_persistent = ar1(rng, n, 0.995)
    quiet = lagwise.fit_ols(pd.DataFrame({"y": x_iid + e_persistent, "x": x_iid}), "y", ["x"])
    choice = lagwise.select_bandwidth(quiet, "bartlett", "andrews")
    # the intercept's moment (e_t itself) is near a unit root but has weight 0: no flag
    assert "rho_capped" not in choice.flags
    x_persistent = ar1(rng, n, 0.995)
    loud = lagwise.fit_ols(pd.DataFrame({"y": x_persistent + e_persistent,
                                         "x": x_persistent}), "y", ["x"])
    res = loud.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews"))
    assert "rho_capped" in res.flags
    assert any("capped" in n and "unit root" in n for n in res.notes)


def test_newey_west_rule_centres_the_weighted_series():
    """Documented behaviour (as in arch): adding a constant to the series leaves b unchanged."""
    from lagwise.engine.covariance.bandwidth import newey_west_1994
    rng = np.random.default_rng(3)
    v = ar1(rng, 400, 0.5)[:, None]
    k = lagwise.get_kernel("bartlett")
    assert newey_west_1994(v + 5.0, k, np.ones(1)) == pytest.approx(
        newey_west_1994(v, k, np.ones(1)), rel=1e-12)


# ----------------------------------------------------------------- the moment-model protocol

def test_ols_is_a_moment_model_and_the_sandwich_is_formed_by_the_model():
    fit = lagwise.fit_ols(regression_frame(seed=2, n=150), "y", ["x1", "x2"])
    assert isinstance(fit, lagwise.MomentModel)
    s_orig = fit.contributions.T @ fit.contributions / fit.nobs
    v = fit.covariance_from_long_run(fit.to_working(s_orig))
    xtx = fit.X.T @ fit.X
    np.testing.assert_allclose(v, np.linalg.solve(xtx, np.linalg.solve(xtx, s_orig * fit.nobs).T),
                               rtol=1e-9)
    np.testing.assert_allclose(fit.to_original(fit.to_working(s_orig)), s_orig, rtol=1e-10)
    assert fit.moment_names == fit.terms and list(fit.constant_moments) == [True, False, False]


def test_fit_uses_cholesky_qr_and_falls_back_on_ill_conditioned_data():
    fit = lagwise.fit_ols(regression_frame(seed=2, n=150), "y", ["x1", "x2"])
    assert fit.factorization.startswith("Cholesky")
    rng = np.random.default_rng(0)
    x = rng.standard_normal(200)
    df = pd.DataFrame({"y": rng.standard_normal(200), "x": x, "z": x + 1e-9 * rng.standard_normal(200)})
    nearly = lagwise.fit_ols(df, "y", ["x", "z"])
    assert nearly.factorization == "pivoted Householder QR"


# ----------------------------------------------------------------- caches

def test_model_nbytes_counts_what_its_caches_hold():
    """Fill every cache a fit has, then compare its byte count with the allocation measured by
    tracemalloc (numpy reports its buffers to it): within 20%."""
    df = regression_frame(seed=5, n=6000, k=3)
    gc.collect()
    tracemalloc.start()
    base = tracemalloc.get_traced_memory()[0]
    fit = lagwise.fit_ols(df, "y", ["x1", "x2", "x3"])
    for kernel in lagwise.KERNELS:
        fit.infer(lagwise.estimator("kernel", kernel=kernel, bandwidth="andrews"))
    fit.infer(lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=30.0,
                                prewhiten=True))
    fit.infer(lagwise.estimator("ewc"))
    fit.sweep(kernels=list(lagwise.KERNELS))
    fit.influence.ensure(fit.nobs - 1)
    fit.moments.ensure(fit.nobs - 1)
    gc.collect()
    held = tracemalloc.get_traced_memory()[0] - base
    tracemalloc.stop()
    assert {"moments", "influence", "prewhitened", "cosines", "bandwidths"} <= \
        set(fit.caches.names())
    assert fit.nbytes == pytest.approx(held, rel=0.20), (fit.nbytes, held, fit.caches)


# ----------------------------------------------------------------- laws

def test_laws_are_objects_with_their_own_numbers():
    assert Normal().critical_value(0.95) == pytest.approx(stats.norm.ppf(0.975))
    t = StudentT(20)
    assert t.critical_value(0.9) == pytest.approx(stats.t.ppf(0.95, 20))
    assert t.p_values([2.0])[0] == pytest.approx(2 * stats.t.sf(2.0, 20))
    w = t.wald(6.0, 2)
    assert w.f_df == (2, 20) and w.p_value == pytest.approx(stats.f.sf(3.0, 2, 20))
    e = EWCLaw(10)
    assert e.wald(4.0, 2).f_statistic == pytest.approx(9 / 20 * 4.0)
    fb = FixedB("bartlett", 0.1)
    assert fb.critical_value(0.95) > 1.96 and 0 < fb.mc_error(0.95) < 0.05
    assert "fixed-b" in fb.label and "Bartlett" in fb.describe()
    assert resolve("auto", None, None, 50) == Normal()
    assert resolve("t", EWCLaw(8), None, 50) == EWCLaw(8)
    assert resolve("t", None, None, 50).df == 50
    with pytest.raises(lagwise.SpecificationError, match="kernel estimators only"):
        resolve("fixed-b", None, None, 50)
    with pytest.raises(lagwise.SpecificationError, match="unknown reference law"):
        resolve("cauchy", None, None, 50)


def test_exact_fit_is_a_typed_error_not_an_infinite_t():
    x = np.arange(20.0)
    fit = lagwise.fit_ols(pd.DataFrame({"y": 1 + 2 * x, "x": x}), "y", ["x"])
    with pytest.raises(lagwise.EstimationError, match="fits the data exactly"):
        fit.infer("hc1")
    comp = lagwise.compare(fit)
    assert comp.std_error.isna().all() and comp.note.str.contains("exactly").all()


def test_no_switches_on_family_names_or_law_requests_outside_their_definitions():
    """Families and reference laws carry their own behaviour (fields of Family, methods of
    Law, `laws.row_suffix`): code elsewhere must not branch on a family's name or on a law
    request's string. Scans the engine and app sources."""
    import re
    from pathlib import Path
    from lagwise.engine.covariance.registry import FAMILIES
    from lagwise.engine.laws.reference import REQUESTS
    root = Path(__file__).resolve().parents[1]
    names = "|".join(re.escape(n) for n in FAMILIES)
    requests = "|".join(re.escape(r) for r in REQUESTS)
    family_switch = re.compile(r"\.name\s*(==|!=)\s*[\"'](" + names + r")[\"']"
                               r"|\.name\s+(not\s+)?in\s+\([^)]*[\"'](" + names + r")[\"']")
    law_switch = re.compile(r"\b(ref|reference|requested|law)\s*(==|!=)\s*[\"'](" + requests
                            + r")[\"']")
    found = []
    for path in sorted((root / "engine").rglob("*.py")) + sorted((root / "app").glob("*.py")):
        if path.relative_to(root).as_posix() == "engine/laws/reference.py":
            continue
        for n, line in enumerate(path.read_text().splitlines(), 1):
            if family_switch.search(line) or law_switch.search(line):
                found.append(f"{path.relative_to(root)}:{n}: {line.strip()}")
    assert not found, "\n".join(found)
