"""NIST StRD Longley: certified coefficients and standard errors.

Source: NIST Statistical Reference Datasets, Longley (certified values; also listed in
../shared/REFERENCES.md section 14). Data from statsmodels.datasets.longley.
"""

import numpy as np
import pytest
from statsmodels.datasets import longley

import lagwise

CERTIFIED = {  # term: (beta, standard error), NIST certified values
    "intercept": (-3482258.63459582, 890420.383607373),
    "GNPDEFL": (15.0618722713733, 84.9149257747669),
    "GNP": (-0.0358191792925910, 0.0334910077722432),
    "UNEMP": (-2.02022980381683, 0.488399681651699),
    "ARMED": (-1.03322686717359, 0.214274163161675),
    "POP": (-0.0511041056535807, 0.226073200069370),
    "YEAR": (1829.15146461355, 455.478499142212),
}


@pytest.fixture(scope="module")
def fit():
    data = longley.load_pandas().data
    return lagwise.fit_ols(data, "TOTEMP", ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"])


def test_longley_coefficients_match_nist(fit):
    for term, (beta, _) in CERTIFIED.items():
        assert fit.params[term] == pytest.approx(beta, rel=1e-9), term


def test_longley_standard_errors_match_nist(fit):
    table = fit.infer(lagwise.estimator("classical")).table
    for term, (_, se) in CERTIFIED.items():
        assert table.loc[term, "std_error"] == pytest.approx(se, rel=1e-9), term


def test_longley_summary_statistics_match_nist(fit):
    # NIST certified: residual SD 304.854073561965, R^2 0.995479004577296, RSS 836424.055505915
    assert np.sqrt(fit.sigma2) == pytest.approx(304.854073561965, rel=1e-9)
    assert fit.r_squared == pytest.approx(0.995479004577296, rel=1e-9)
    assert fit.ssr == pytest.approx(836424.055505915, rel=1e-9)
    # certified overall F statistic 330.285339234588 (Wald test of all slopes under the
    # classical covariance, F form)
    slopes = [t for t in fit.terms if t != "intercept"]
    w = fit.infer("classical").wald(slopes)
    assert w.f_statistic == pytest.approx(330.285339234588, rel=1e-8)
