"""Outside check: statsmodels 0.15 OLS covariances on shared conventions (rtol 1e-8 or better).

Conventions matched (../shared/REFERENCES.md sections 1, 2, 2.2): statsmodels `maxlags=L` is our
bandwidth b = L + 1; `use_correction=True` is our small_sample=True (T/(T-k)); statsmodels'
uniform kernel with L lags is our truncated kernel with b = L + 1.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats import sandwich_covariance as sw

import lagwise
from tests.helpers import regression_frame


@pytest.fixture(scope="module")
def data():
    return regression_frame(seed=7, n=300, k=3)


@pytest.fixture(scope="module")
def fit(data):
    return lagwise.fit_ols(data, "y", ["x1", "x2", "x3"])


@pytest.fixture(scope="module")
def sm_fit(data):
    return sm.OLS(data["y"], sm.add_constant(data[["x1", "x2", "x3"]])).fit()


def test_coefficients_match_statsmodels(fit, sm_fit):
    np.testing.assert_allclose(fit.params.to_numpy(), sm_fit.params.to_numpy(), rtol=1e-10)
    np.testing.assert_allclose(fit.leverage, sm_fit.get_influence().hat_matrix_diag, rtol=1e-9)


def test_classical_matches_statsmodels(fit, sm_fit):
    res = fit.infer("classical")
    np.testing.assert_allclose(res.cov.to_numpy(), sm_fit.cov_params().to_numpy(), rtol=1e-9)
    # classical uses t(T-k) by default, as statsmodels does for nonrobust OLS
    np.testing.assert_allclose(res.table.p_value.to_numpy(), sm_fit.pvalues.to_numpy(), rtol=1e-8)
    np.testing.assert_allclose(res.table.ci_low.to_numpy(), sm_fit.conf_int()[0].to_numpy(),
                               rtol=1e-9)


@pytest.mark.parametrize("kind", ["hc0", "hc1", "hc2", "hc3"])
def test_hc_matches_statsmodels(fit, sm_fit, kind):
    ours = fit.infer(kind).cov.to_numpy()
    theirs = getattr(sm_fit, f"cov_{kind.upper()}")
    np.testing.assert_allclose(ours, theirs, rtol=1e-9, atol=0)


@pytest.mark.parametrize("lags", [0, 1, 4, 12, 40])
@pytest.mark.parametrize("small_sample", [False, True])
def test_bartlett_matches_statsmodels(fit, sm_fit, lags, small_sample):
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=lags + 1.0,
                           small_sample=small_sample)
    ours = fit.infer(est, reference="normal")
    theirs = sm_fit.get_robustcov_results("HAC", maxlags=lags, use_correction=small_sample,
                                            use_t=False)
    np.testing.assert_allclose(ours.cov.to_numpy(), theirs.cov_params(), rtol=1e-9)
    # normal reference on both sides (statsmodels: use_t=False)
    np.testing.assert_allclose(ours.table.p_value.to_numpy(), theirs.pvalues, rtol=1e-8)


@pytest.mark.parametrize("lags", [1, 5, 11])
def test_truncated_matches_statsmodels_uniform(fit, sm_fit, lags):
    est = lagwise.estimator("kernel", kernel="truncated", lags=lags, repair=False)
    ours = fit.infer(est).cov.to_numpy()
    theirs = sw.cov_hac_simple(sm_fit, nlags=lags, weights_func=sw.weights_uniform,
                               use_correction=False)
    np.testing.assert_allclose(ours, theirs, rtol=1e-8)


def test_wald_matches_statsmodels(fit, sm_fit):
    res = fit.infer("hc1", reference="normal")
    ours = res.wald(["x1", "x2"])
    theirs = sm_fit.get_robustcov_results("HC1", use_t=False).wald_test("x1 = 0, x2 = 0", use_f=False,
                                                          scalar=True)
    assert ours.statistic == pytest.approx(float(theirs.statistic), rel=1e-9)
    assert ours.p_value == pytest.approx(float(theirs.pvalue), rel=1e-8)
    ours_f = fit.infer("classical").wald({"x1": 0.2, "x3": 0.0})
    theirs_f = sm_fit.f_test("x1 = 0.2, x3 = 0")
    assert ours_f.f_statistic == pytest.approx(float(theirs_f.fvalue), rel=1e-9)
    assert ours_f.f_p_value == pytest.approx(float(theirs_f.pvalue), rel=1e-8)
