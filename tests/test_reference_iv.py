"""Linear IV and GMM against outside references.

Outside sources: linearmodels 7.1 (IV2SLS, IVGMM, IVGMMCUE) and statsmodels 0.15 on matched
conventions; Wooldridge, Introductory Econometrics, Examples 15.1 and 15.40 on the married women's
wage data that linearmodels ships (the published values are recalled, [M], and agree to the
printed digits).

Conventions matched with linearmodels: `debiased=False` (no small-sample factor, our default);
`center=False` (moment contributions not re-centred, as ours); its kernel `bandwidth=m` is the
maximum lag for Bartlett and Parzen, our b = m + 1, and b itself for Quadratic Spectral; its
covariance after two-step GMM uses S from the final residuals with the weighting from the first
step (our general sandwich: `infer(fit, est, long_run=est.long_run(fit))`; our own tables use
the weighting's S, IVFit.long_run_for); its J statistic uses the weighting S (our `j_test()`).
"""

import numpy as np
import pandas as pd
import pytest
from linearmodels.iv import IV2SLS, IVGMM, IVGMMCUE

import lagwise
from tests.helpers import ar1


@pytest.fixture(scope="module")
def data():
    """Simulated: one endogenous regressor with autocorrelated errors, one exogenous regressor,
    three excluded instruments of different strength."""
    rng = np.random.default_rng(11)
    n = 600
    z = np.column_stack([ar1(rng, n, 0.5) for _ in range(3)])
    w = ar1(rng, n, 0.3)
    u = ar1(rng, n, 0.5)
    v = 0.6 * u + 0.8 * rng.standard_normal(n)
    x = 0.8 * z[:, 0] + 0.3 * z[:, 1] + 0.1 * z[:, 2] + 0.5 * w + v
    y = 1 + 0.5 * x + 0.3 * w + u * (1 + 0.3 * np.abs(w))
    return pd.DataFrame({"y": y, "x": x, "w": w, "z1": z[:, 0], "z2": z[:, 1], "z3": z[:, 2]})


def lm_model(data, cls=IV2SLS, **kw):
    exog = data[["w"]].assign(const=1.0)[["const", "w"]]
    return cls(data.y, exog, data[["x"]], data[["z1", "z2", "z3"]], **kw)


def ours(data, **kw):
    return lagwise.fit_iv(data, "y", ["x", "w"], ["x"], ["z1", "z2", "z3"], **kw)


def ordered(lm_params):
    return lm_params[["const", "x", "w"]].to_numpy()


def test_2sls_estimate_and_covariances_match_linearmodels(data):
    fit = ours(data)
    lm = lm_model(data)
    np.testing.assert_allclose(fit.beta, ordered(lm.fit(cov_type="robust").params), rtol=1e-10)
    cov = fit.infer("hc0").cov.to_numpy()
    theirs = lm.fit(cov_type="robust").cov.loc[["const", "x", "w"], ["const", "x", "w"]]
    np.testing.assert_allclose(cov, theirs.to_numpy(), rtol=1e-9)
    for m in (2, 6):
        est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=m + 1.0)
        cov = fit.infer(est).cov.to_numpy()
        theirs = lm.fit(cov_type="kernel", kernel="bartlett", bandwidth=m).cov
        np.testing.assert_allclose(cov, theirs.loc[["const", "x", "w"], ["const", "x", "w"]]
                                   .to_numpy(), rtol=1e-9)
    cov = fit.infer(lagwise.estimator("kernel", kernel="quadratic_spectral",
                                      bandwidth=4.0)).cov.to_numpy()
    theirs = lm.fit(cov_type="kernel", kernel="qs", bandwidth=4).cov
    np.testing.assert_allclose(cov, theirs.loc[["const", "x", "w"], ["const", "x", "w"]]
                               .to_numpy(), rtol=1e-9)


def test_2sls_matches_statsmodels_homoskedastic(data):
    """statsmodels' IV2SLS: the 2SLS estimate and s^2 (X'P_Z X)^-1 with s^2 = e'e/(T-k)."""
    from statsmodels.sandbox.regression.gmm import IV2SLS as SMIV
    exog = np.column_stack([np.ones(len(data)), data.x, data.w])
    instr = np.column_stack([np.ones(len(data)), data.w, data.z1, data.z2, data.z3])
    sm = SMIV(data.y.to_numpy(), exog, instr).fit()
    fit = ours(data)
    np.testing.assert_allclose(fit.beta, sm.params, rtol=1e-10)
    np.testing.assert_allclose(fit.infer("classical").cov.to_numpy(), sm.cov_params(), rtol=1e-9)


@pytest.mark.parametrize("m", [0, 3, 8])
def test_two_step_gmm_matches_linearmodels(data, m):
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=m + 1.0)
    fit = ours(data, method="two-step", weight=est)
    lm = lm_model(data, IVGMM, weight_type="kernel", kernel="bartlett", bandwidth=m,
                  center=False).fit(cov_type="kernel", kernel="bartlett", bandwidth=m)
    np.testing.assert_allclose(fit.beta, ordered(lm.params), rtol=1e-9)
    general = lagwise.infer(fit, est, long_run=est.long_run(fit))
    np.testing.assert_allclose(general.cov.to_numpy(),
                               lm.cov.loc[["const", "x", "w"], ["const", "x", "w"]].to_numpy(),
                               rtol=1e-8)
    assert "efficient form" in fit.infer(est).form        # our tables: the weighting's S
    j = fit.j_test()
    assert j.df == 2 and j.statistic == pytest.approx(lm.j_stat.stat, rel=1e-8)
    assert j.p_value == pytest.approx(lm.j_stat.pval, rel=1e-7)


def test_iterated_and_cue_match_linearmodels(data):
    fit = ours(data, method="iterated", weight="hc0", tol=1e-12)
    lm = lm_model(data, IVGMM, weight_type="robust", center=False).fit(
        iter_limit=500, tol=1e-14, cov_type="robust")
    np.testing.assert_allclose(fit.beta, ordered(lm.params), rtol=1e-7)
    assert "efficient form" in fit.infer("hc0").describe()
    cue = ours(data, method="cue", weight="hc0")
    lmc = lm_model(data, IVGMMCUE, weight_type="robust", center=False).fit(cov_type="robust")
    np.testing.assert_allclose(cue.beta, ordered(lmc.params), rtol=1e-5)
    assert cue.j_test().statistic == pytest.approx(lmc.j_stat.stat, rel=1e-4)


def test_first_stage_matches_linearmodels(data):
    lm = lm_model(data).fit(cov_type="robust")
    diag = lm.first_stage.diagnostics.loc["x"]
    fs = ours(data).first_stage("hc0")
    row = fs.table.loc["x"]
    assert row.partial_r2 == pytest.approx(diag["partial.rsquared"], rel=1e-9)
    # linearmodels' f.stat is the robust Wald statistic W of the excluded instruments; ours is
    # reported as F = W / m
    assert row.robust_f * 3 == pytest.approx(diag["f.stat"], rel=1e-8)


def test_exactly_identified_iv_is_the_simple_iv_estimator_and_j_is_zero(data):
    fit = lagwise.fit_iv(data, "y", ["x", "w"], ["x"], ["z1"])
    z = np.column_stack([np.ones(len(data)), data.w, data.z1])
    x = np.column_stack([np.ones(len(data)), data.x, data.w])
    np.testing.assert_allclose(fit.beta, np.linalg.solve(z.T @ x, z.T @ data.y), rtol=1e-10)
    j = fit.j_test()
    assert j.df == 0 and j.statistic == 0.0 and np.isnan(j.p_value)


@pytest.mark.parametrize("est", ["classical", "hc1", ("kernel", {"bandwidth": 7.0}),
                                 ("ewc", {"cosines": 8})])
def test_iv_with_z_equal_x_is_ols(data, est):
    name, params = (est, {}) if isinstance(est, str) else est
    e = lagwise.estimator(name, **params)
    ols = lagwise.fit_ols(data, "y", ["x", "w"]).infer(e).table
    iv = lagwise.fit_iv(data, "y", ["x", "w"]).infer(e).table
    np.testing.assert_allclose(iv.to_numpy(), ols.to_numpy(), rtol=1e-12, atol=1e-14)


def test_textbook_example_married_womens_wages():
    """Wooldridge, Introductory Econometrics, Example 15.1 (IV with father's education) and
    Example 15.40 (2SLS with both parents' education, experience and its square); usual
    (homoskedastic) standard errors. Published values, recalled [M], checked to the printed
    digits: educ .059 (.035), constant .441 (.446); educ .061 (.031), exper .044 (.013),
    expersq -.0009 (.0004), constant .048 (.400)."""
    from linearmodels.datasets import mroz
    d = mroz.load().dropna(subset=["wage"])
    d = d.assign(lwage=np.log(d.wage), expersq=d.exper**2)
    t = lagwise.fit_iv(d, "lwage", ["educ"], ["educ"], ["fatheduc"]).infer("classical").table
    printed = {("educ", "estimate"): 0.059, ("educ", "std_error"): 0.035,
               ("intercept", "estimate"): 0.441, ("intercept", "std_error"): 0.446}
    for (term, col), value in printed.items():
        assert round(t.loc[term, col], 3) == pytest.approx(value, abs=1e-12), (term, col)
    t = lagwise.fit_iv(d, "lwage", ["educ", "exper", "expersq"], ["educ"],
                       ["motheduc", "fatheduc"]).infer("classical").table
    printed = {("educ", "estimate"): 0.061, ("educ", "std_error"): 0.031,
               ("exper", "estimate"): 0.044, ("exper", "std_error"): 0.013,
               ("intercept", "estimate"): 0.048, ("intercept", "std_error"): 0.400}
    for (term, col), value in printed.items():
        assert round(t.loc[term, col], 3) == pytest.approx(value, abs=1e-12), (term, col)
    assert round(t.loc["expersq", "estimate"], 4) == pytest.approx(-0.0009, abs=1e-12)
    assert round(t.loc["expersq", "std_error"], 4) == pytest.approx(0.0004, abs=1e-12)


def test_typed_errors_name_the_problem(data):
    with pytest.raises(lagwise.SpecificationError, match="2 endogenous regressor\\(s\\).*only 1"):
        lagwise.fit_iv(data, "y", ["x", "w"], ["x", "w"], ["z1"])
    with pytest.raises(lagwise.SpecificationError, match="instrument 'w' is also a regressor"):
        lagwise.fit_iv(data, "y", ["x", "w"], ["x"], ["w", "z1"])
    with pytest.raises(lagwise.SpecificationError, match="instruments are collinear: 'z2'"):
        lagwise.fit_iv(data.assign(z2=2 * data.z1), "y", ["x", "w"], ["x"], ["z1", "z2"])
    with pytest.raises(lagwise.SpecificationError, match="must also be listed"):
        lagwise.fit_iv(data, "y", ["w"], ["x"], ["z1"])
    with pytest.raises(lagwise.SpecificationError, match="rank deficient"):
        lagwise.fit_iv(data.assign(x=2.0 * data.w + 1.0 + 1e-14 * data.z1), "y", ["x", "w"],
                       ["x"], ["z1"])


def test_rescaling_instruments_changes_nothing(data):
    a = ours(data, method="two-step", weight="hc0").infer("hc0").table
    scaled = data.assign(z1=1000 * data.z1, z2=-0.01 * data.z2)
    b = ours(scaled, method="two-step", weight="hc0").infer("hc0").table
    np.testing.assert_allclose(b.to_numpy(), a.to_numpy(), rtol=1e-8)
