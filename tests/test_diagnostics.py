"""Residual diagnostics: statsmodels on shared conventions (rtol 1e-8), textbook formulas
recomputed by hand, the exact Durbin-Watson p-value against a Monte Carlo of the same design,
size and power sanity, and edge cases."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats import diagnostic as smd
from statsmodels.stats.stattools import durbin_watson

import lagwise
from lagwise.engine.studies.diagnostics import diagnose, durbin_watson_exact
from tests.helpers import ar1, regression_frame


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(regression_frame(seed=31, n=160, k=2, rho_e=0.3), "y", ["x1", "x2"])


@pytest.fixture(scope="module")
def report(fit):
    return diagnose(fit, lags=[1, 4, 8])


def stat(report, name):
    row = report.tests[report.tests.test == name]
    assert len(row) == 1, name
    return row.iloc[0]


def test_against_statsmodels(fit, report):
    res = sm.OLS(fit.y, fit.X).fit()
    e = res.resid
    lb = smd.acorr_ljungbox(e, lags=[1, 4, 8], boxpierce=True, return_df=True)
    for h in (1, 4, 8):
        assert stat(report, f"Ljung-Box Q({h})").statistic == pytest.approx(lb.lb_stat[h], rel=1e-8)
        assert stat(report, f"Box-Pierce Q({h})").p_value == pytest.approx(lb.bp_pvalue[h], rel=1e-8)
    bg = smd.acorr_breusch_godfrey(res, nlags=4, result_object=False)
    assert stat(report, "Breusch-Godfrey LM(4)").statistic == pytest.approx(bg[0], rel=1e-8)
    assert stat(report, "Breusch-Godfrey F(4)").p_value == pytest.approx(bg[3], rel=1e-8)
    assert stat(report, "Durbin-Watson").statistic == pytest.approx(durbin_watson(e), rel=1e-10)
    bp = smd.het_breuschpagan(e, fit.X, robust=True)
    assert stat(report, "Breusch-Pagan (Koenker)").statistic == pytest.approx(bp[0], rel=1e-8)
    bp0 = smd.het_breuschpagan(e, fit.X, robust=False)
    assert stat(report, "Breusch-Pagan (original)").statistic == pytest.approx(bp0[0], rel=1e-8)
    wh = smd.het_white(e, fit.X)
    assert stat(report, "White (with cross terms)").statistic == pytest.approx(wh[0], rel=1e-8)
    assert stat(report, "White (with cross terms)").p_value == pytest.approx(wh[1], rel=1e-8)
    arch = smd.het_arch(e, nlags=4, result_object=False)
    assert stat(report, "ARCH-LM(4)").statistic == pytest.approx(arch[0], rel=1e-8)


def _r2(y, z):
    coef, *_ = np.linalg.lstsq(z, y, rcond=None)
    r = y - z @ coef
    return 1 - r @ r / np.sum((y - y.mean()) ** 2)


def test_against_textbook_formulas(fit, report):
    """Ljung & Box (1978) Q = T(T+2) sum rho_k^2/(T-k); Koenker BP = T R^2 of e^2 on X; White
    without cross terms = T R^2 of e^2 on [1, x, x^2] (levels kept); Durbin-Watson formula."""
    e, t = fit.resid, fit.nobs
    ed = e - e.mean()
    rho = np.array([ed[k:] @ ed[:-k] for k in range(1, 5)]) / (ed @ ed)
    q4 = t * (t + 2) * np.sum(rho**2 / (t - np.arange(1, 5)))
    assert stat(report, "Ljung-Box Q(4)").statistic == pytest.approx(q4, rel=1e-10)
    assert stat(report, "Breusch-Pagan (Koenker)").statistic == pytest.approx(
        t * _r2(e**2, fit.X), rel=1e-9)
    z = np.column_stack([fit.X, fit.X[:, 1:] ** 2])
    white = stat(report, "White (no cross terms)")
    assert white.statistic == pytest.approx(t * _r2(e**2, z), rel=1e-9) and white.df == 4
    dw = np.sum(np.diff(e) ** 2) / (e @ e)
    assert stat(report, "Durbin-Watson").statistic == pytest.approx(dw, rel=1e-12)


def test_every_statistic_states_null_and_method(report):
    assert report.tests.null.str.len().min() > 5
    assert report.tests["method"].str.len().min() > 5
    for name in ("statsmodels", "acorr_", "het_", "robust=", "interaction_terms"):
        assert not report.tests["method"].str.contains(name).any(), name
    assert "Bartlett" in report.bands["acf"] and "1.96" in report.bands["pacf"]
    assert any("evidence" in line for line in report.reading)


def test_durbin_watson_exact_p_value_against_monte_carlo():
    """Same design (fixed X), i.i.d. normal errors, 20,000 draws of d: the Monte Carlo
    P(d <= d_obs) has s.e. <= 0.0036; tolerance 0.012."""
    rng = np.random.default_rng(4)
    df = regression_frame(seed=9, n=40, k=2, rho_e=0.4, het=False)
    fit = lagwise.fit_ols(df, "y", ["x1", "x2"])
    d_obs = float(np.sum(np.diff(fit.resid) ** 2) / (fit.resid @ fit.resid))
    exact = durbin_watson_exact(fit, d_obs)
    q, _ = np.linalg.qr(fit.X)
    e = rng.standard_normal((20_000, fit.nobs))
    r = e - (e @ q) @ q.T
    d = np.sum(np.diff(r, axis=1) ** 2, axis=1) / np.sum(r**2, axis=1)
    assert exact == pytest.approx(np.mean(d <= d_obs), abs=0.012)


def _rates(make, reps, names, seed):
    rng = np.random.default_rng(seed)
    hits = {n: 0 for n in names}
    for _ in range(reps):
        fit = make(rng)
        rep = diagnose(fit, lags=[4], exact_dw=False)
        for n in names:
            hits[n] += stat(rep, n).p_value < 0.05
    return {n: h / reps for n, h in hits.items()}


ALL = ["Ljung-Box Q(4)", "Box-Pierce Q(4)", "Breusch-Godfrey LM(4)", "Breusch-Pagan (Koenker)",
       "White (with cross terms)", "White (no cross terms)", "ARCH-LM(1)"]


@pytest.mark.slow
def test_size_under_iid_homoskedastic_errors():
    """300 reps, T = 200: each test rejects a true null at 5% within [1%, 10%] (binomial s.e.
    1.3 points; the bounds allow for finite-sample size distortion)."""
    def make(rng):
        x = rng.standard_normal(200)
        return lagwise.fit_ols(pd.DataFrame({"y": 1 + 0.5 * x + rng.standard_normal(200),
                                            "x": x}), "y", ["x"])
    rates = _rates(make, 300, ALL, 101)
    print("\nDIAG size", rates)
    for n, r in rates.items():
        assert 0.01 <= r <= 0.10, (n, r)


@pytest.mark.slow
def test_power_against_ar1_and_heteroskedastic_errors():
    def make_ar(rng):
        x = rng.standard_normal(500)
        return lagwise.fit_ols(pd.DataFrame({"y": x + ar1(rng, 500, 0.5), "x": x}), "y", ["x"])

    def make_het(rng):
        # variance proportional to x^2 with x > 0, so the variance also moves with x itself
        # (Breusch-Pagan regresses e^2 on the levels)
        x = rng.uniform(0.5, 3.0, 500)
        return lagwise.fit_ols(pd.DataFrame({"y": x + np.abs(x) * rng.standard_normal(500),
                                            "x": x}), "y", ["x"])
    ac = _rates(make_ar, 40, ["Ljung-Box Q(4)", "Box-Pierce Q(4)", "Breusch-Godfrey LM(4)"], 7)
    het = _rates(make_het, 40, ["Breusch-Pagan (Koenker)", "White (with cross terms)",
                                "White (no cross terms)"], 8)
    print("\nDIAG power", ac, het)
    assert min(ac.values()) >= 0.95 and min(het.values()) >= 0.95


def test_edge_cases():
    x = np.arange(1.0, 21.0)
    perfect = lagwise.fit_ols(pd.DataFrame({"y": 2 * x + 1, "x": x}), "y", ["x"])
    with pytest.raises(lagwise.EstimationError, match="perfectly"):
        diagnose(perfect)
    rng = np.random.default_rng(0)
    short = lagwise.fit_ols(pd.DataFrame({"y": rng.standard_normal(15), "x": x[:15]}), "y", ["x"])
    rep = diagnose(short, lags=[1, 12])
    assert any("capped" in n for n in rep.notes)
    assert rep.tests.test.str.contains("Ljung-Box Q\\(3\\)").any()
