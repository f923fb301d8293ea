"""Linear GMM properties and simulations with known truth: the sweep equals two-step GMM at each
point, instrument-strength statistics reduce to their textbook forms, J has its nominal size
under valid instruments, and the Anderson-Rubin test keeps its size under weak instruments
where the Wald test does not."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import lagwise
from lagwise.engine.models.iv_strength import RANK_F, partial_out as _partial_out, kleibergen_paap
from tests.helpers import ar1


def simulate(rng, n=300, strength=(0.8, 0.3, 0.1), rho=0.0, beta=0.5, corr=0.6):
    L = len(strength)
    z = rng.standard_normal((n, L))
    u = ar1(rng, n, rho) if rho else rng.standard_normal(n)
    v = corr * u + np.sqrt(1 - corr**2) * rng.standard_normal(n)
    x = z @ np.asarray(strength) + v
    y = 1 + beta * x + u
    cols = {f"z{i + 1}": z[:, i] for i in range(L)}
    return pd.DataFrame({"y": y, "x": x, **cols}), [f"z{i + 1}" for i in range(L)]


def test_gmm_sweep_equals_two_step_at_every_point():
    df, zs = simulate(np.random.default_rng(2), rho=0.5)
    fit = lagwise.fit_iv(df, "y", ["x"], ["x"], zs)
    bws = [1.0, 3.0, 7.5, 20.0]
    two = fit.two_step(lagwise.estimator("kernel", kernel="parzen", bandwidth=3.0))
    sw = two.sweep(kernels=["bartlett", "parzen"], bandwidths=bws)
    for c, kernel in enumerate(["bartlett", "parzen"]):
        for i, b in enumerate(bws):
            point = fit.two_step(lagwise.estimator("kernel", kernel=kernel, bandwidth=b))
            np.testing.assert_allclose(sw.estimate[c, i], point.beta, rtol=1e-10)
            res = point.infer_weighting()
            np.testing.assert_allclose(sw.std_error[c, i], res.table.std_error, rtol=1e-9)
            assert "efficient form" in res.form
            assert sw.extras["j_stat"][c, i] == pytest.approx(point.j_test().statistic,
                                                              rel=1e-9)


def test_strength_statistics_reduce_to_their_textbook_forms():
    """One endogenous regressor: the Kleibergen-Paap rank statistic is the robust first-stage Wald
    statistic, and with one instrument the effective F is that robust F. Two endogenous
    regressors with the homoskedastic covariance: rk / L is the Cragg-Donald minimum-eigenvalue
    statistic (derived in the test)."""
    df, zs = simulate(np.random.default_rng(3))
    fs = lagwise.fit_iv(df, "y", ["x"], ["x"], zs).first_stage("hc0")
    assert fs.strength[RANK_F]["value"] == \
        pytest.approx(fs.table.loc["x", "robust_f"], rel=1e-9)
    one = lagwise.fit_iv(df, "y", ["x"], ["x"], ["z1"]).first_stage("hc0")
    assert one.strength["effective F"]["value"] == pytest.approx(one.table.loc["x", "robust_f"],
                                                                 rel=1e-9)
    rng = np.random.default_rng(4)
    n = 400
    z = rng.standard_normal((n, 4))
    v = rng.standard_normal((n, 2))
    x = z @ np.array([[1.0, 0.2], [0.5, 0.3], [0.1, 0.9], [0.0, 0.4]]) + v
    pi = np.linalg.lstsq(z, x, rcond=None)[0]
    vt = x - z @ pi
    sigma = vt.T @ vt / n
    v_pi = np.kron(sigma, np.linalg.inv(z.T @ z))               # homoskedastic covariance
    rk = kleibergen_paap(pi, v_pi, z, vt)
    root = np.linalg.inv(np.linalg.cholesky(sigma)).T
    cd = np.linalg.eigvalsh(root.T @ pi.T @ z.T @ z @ pi @ root).min()
    assert rk == pytest.approx(cd, rel=1e-9)


def test_partialling_out_matches_the_frisch_waugh_regression():
    df, zs = simulate(np.random.default_rng(5))
    df = df.assign(w=np.random.default_rng(6).standard_normal(len(df)))
    fit = lagwise.fit_iv(df, "y", ["x", "w"], ["x"], zs)
    zt, xt, _, _ = _partial_out(fit.core)
    full = lagwise.fit_ols(df, "x", ["w", *zs])
    pi = np.linalg.lstsq(zt, xt, rcond=None)[0][:, 0]
    np.testing.assert_allclose(pi, full.params[zs].to_numpy(), rtol=1e-9)


@pytest.mark.slow
def test_j_test_has_its_size_under_valid_instruments():
    """Valid instruments, heteroskedasticity-robust two-step GMM, T = 400: J rejects at 5%
    within 3 binomial standard errors of 5% (800 replications: +-0.023)."""
    rng = np.random.default_rng(7)
    reps, rejects = 800, 0
    for _ in range(reps):
        df, zs = simulate(rng, n=400)
        fit = lagwise.fit_iv(df, "y", ["x"], ["x"], zs, method="two-step", weight="hc0")
        rejects += fit.j_test().p_value < 0.05
    rate = rejects / reps
    assert abs(rate - 0.05) < 3 * np.sqrt(0.05 * 0.95 / reps), rate


@pytest.mark.slow
def test_anderson_rubin_keeps_its_size_under_weak_instruments_where_wald_does_not():
    """Weak instruments (first-stage coefficients 0.05, 0.03), strong endogeneity (corr 0.9),
    T = 200: the 2SLS Wald test of the true beta over-rejects (the published pattern: Staiger &
    Stock 1997) while the AR test rejects within 3 binomial standard errors of 5% (300 reps)."""
    rng = np.random.default_rng(8)
    reps, wald_rej, ar_rej = 300, 0, 0
    for _ in range(reps):
        df, zs = simulate(rng, n=200, strength=(0.05, 0.03), corr=0.9)
        fit = lagwise.fit_iv(df, "y", ["x"], ["x"], zs)
        wald_rej += fit.infer("hc0").table.loc["x", "p_value"] < 0.05
        ar_rej += fit.anderson_rubin_test("x", 0.5, "hc0") < 0.05
    band = 3 * np.sqrt(0.05 * 0.95 / reps)
    assert abs(ar_rej / reps - 0.05) < band, ar_rej / reps
    assert wald_rej / reps > 0.15, wald_rej / reps


def test_anderson_rubin_set_shapes():
    """Strong instruments: a bounded interval containing the estimate; irrelevant instruments:
    an unbounded set (the first-stage Wald statistic is below the critical value)."""
    df, zs = simulate(np.random.default_rng(9), n=500)
    ar = lagwise.fit_iv(df, "y", ["x"], ["x"], zs).anderson_rubin("x", "hc0")
    assert ar.kind == "interval"
    (lo, hi), = ar.intervals
    assert lo < 0.5 < hi and ar.p_value(lo) == pytest.approx(0.05, abs=1e-6)
    fit = lagwise.fit_iv(df, "y", ["x"], ["x"], zs)
    assert ar.p_value(0.7) == pytest.approx(fit.anderson_rubin_test("x", 0.7, "hc0"))
    # the bilinear shortcut equals a direct evaluation (VAR-HAC is evaluated directly)
    k = lagwise.estimator("kernel", kernel="bartlett", bandwidth=4.0)
    direct = lagwise.estimator("kernel", kernel="truncated", bandwidth=4.0, repair=True)
    assert np.isfinite(fit.anderson_rubin_test("x", 0.7, direct))
    assert k.family.quadratic(k.params) and not direct.family.quadratic(direct.params)
    df, zs = simulate(np.random.default_rng(10), n=200, strength=(0.0, 0.0), corr=0.5)
    weak = lagwise.fit_iv(df, "y", ["x"], ["x"], zs).anderson_rubin("x", "hc0")
    if weak.kind == "unbounded":
        assert any(np.isinf(v) for iv in weak.intervals for v in iv)
        assert "unbounded" in weak.reading
    with pytest.raises(lagwise.SpecificationError, match="not the endogenous"):
        lagwise.fit_iv(df, "y", ["x"], ["x"], zs).anderson_rubin("intercept")
