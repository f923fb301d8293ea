"""Panel estimators against outside references.

Outside sources: linearmodels 7.1 (PanelOLS with clustered, robust, unadjusted and kernel
covariances; FamaMacBeth) and statsmodels 0.15 (sandwich_covariance: cov_cluster,
cov_cluster_2groups, cov_nw_groupsum, cov_nw_panel) on matched conventions.

Convention knobs (ours <-> theirs):
* clustered: our small_sample=True (G/(G-1) x (N-1)/(N-K), each two-way term with its own G)
  <-> linearmodels debiased=True, group_debias=True; statsmodels use_correction=True;
  our small_sample=False <-> linearmodels debiased=False, group_debias=False.
* K counts the coefficients and the absorbed effect parameters <-> linearmodels' extra_df
  (count_effects=True, its default) plus the coefficients when debiased.
* Driscoll-Kraay: linearmodels' kernel `bandwidth=L` is the largest lag for Bartlett and Parzen
  (our b = L + 1) and b itself for Quadratic Spectral; its debiased=True is our
  small_sample=True (N/(N-K)); statsmodels' cov_nw_groupsum(nlags=L) is Bartlett with b = L + 1
  and no factor (use_correction=0).
* Fama-MacBeth: linearmodels' unadjusted covariance with debiased=True is our classical
  (s^2/T with divisor T - 1); its kernel covariance with debiased=True is our kernel estimator
  on the slope series with small_sample=True; periods it cannot fit (fewer rows than
  coefficients) are skipped by both.
* Two-way fixed effects on an unbalanced panel: linearmodels absorbs the effects by its own
  method; the slopes agree to the tolerance stated.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.stats.sandwich_covariance as sw
from linearmodels.panel import FamaMacBeth, PanelOLS

import lagwise
from tests.helpers import panel_frame

TERMS = ["intercept", "x1", "x2"]


@pytest.fixture(scope="module")
def balanced():
    return panel_frame(seed=3, entities=45, periods=36)


@pytest.fixture(scope="module")
def unbalanced():
    return panel_frame(seed=4, entities=60, periods=40, drop=0.25)


def lm(frame, const=True, **kw):
    data = frame.set_index(["firm", "month"])
    exog = data[["x1", "x2"]]
    if const:
        exog = exog.assign(const=1.0)[["const", "x1", "x2"]]
    return PanelOLS(data.y, exog, **kw)


def lm_names(terms):
    return ["const" if t == "intercept" else t for t in terms]


def ours(frame, **kw):
    return lagwise.fit_panel(frame, "y", ["x1", "x2"], entity="firm", time="month", **kw)


def cov_of(fit, est):
    return fit.infer(est).cov.to_numpy()


@pytest.mark.parametrize("which", ["balanced", "unbalanced"])
@pytest.mark.parametrize("by", ["entity", "time", "both"])
def test_clustered_matches_linearmodels(request, which, by):
    frame = request.getfixturevalue(which)
    fit = ours(frame)
    kw = {"cluster_entity": by in ("entity", "both"), "cluster_time": by in ("time", "both")}
    for debiased in (True, False):
        res = lm(frame).fit(cov_type="clustered", debiased=debiased, group_debias=debiased, **kw)
        np.testing.assert_allclose(fit.beta, res.params[lm_names(fit.terms)], rtol=1e-10)
        theirs = res.cov.loc[lm_names(fit.terms), lm_names(fit.terms)].to_numpy()
        mine = cov_of(fit, lagwise.estimator("cluster", by=by, small_sample=debiased))
        np.testing.assert_allclose(mine, theirs, rtol=1e-9, atol=1e-14)


@pytest.mark.parametrize("effects", [("entity",), ("time",), ("entity", "time")])
@pytest.mark.parametrize("which", ["balanced", "unbalanced"])
def test_fixed_effects_match_linearmodels(request, effects, which):
    """Slopes and the slopes' block of clustered, robust and classical covariances with fixed
    effects (linearmodels PanelOLS with a constant; its constant is the effects' average)."""
    frame = request.getfixturevalue(which)
    fit = ours(frame, effects=effects)
    assert fit.terms == ["x1", "x2"]
    model = lm(frame, entity_effects="entity" in effects, time_effects="time" in effects)
    res = model.fit(cov_type="clustered", cluster_entity=True, debiased=True, group_debias=True)
    np.testing.assert_allclose(fit.beta, res.params[["x1", "x2"]], rtol=1e-9)
    assert fit.df_resid == res.df_resid
    cases = [("clustered", {"cluster_entity": True, "group_debias": True},
              lagwise.estimator("cluster", by="entity")),
             ("clustered", {"cluster_time": True, "group_debias": True},
              lagwise.estimator("cluster", by="time")),
             ("robust", {}, lagwise.estimator("hc1")),
             ("unadjusted", {}, lagwise.estimator("classical"))]
    for cov_type, kw, est in cases:
        theirs = model.fit(cov_type=cov_type, debiased=True, **kw).cov.loc[["x1", "x2"],
                                                                          ["x1", "x2"]]
        np.testing.assert_allclose(cov_of(fit, est), theirs.to_numpy(), rtol=1e-7)


@pytest.mark.parametrize("kernel,lm_kernel,offset", [("bartlett", "bartlett", 1.0),
                                                     ("parzen", "parzen", 1.0),
                                                     ("quadratic_spectral", "qs", 0.0)])
@pytest.mark.parametrize("which", ["balanced", "unbalanced"])
def test_driscoll_kraay_matches_linearmodels(request, which, kernel, lm_kernel, offset):
    frame = request.getfixturevalue(which)
    fit = ours(frame)
    for bw in (0, 3, 7):
        for debiased in (False, True):
            res = lm(frame).fit(cov_type="kernel", kernel=lm_kernel, bandwidth=bw,
                                debiased=debiased)
            theirs = res.cov.loc[lm_names(fit.terms), lm_names(fit.terms)].to_numpy()
            if kernel == "quadratic_spectral" and bw == 0:
                continue          # theirs weights lag 0 only; ours reads b = 0 the same way
            est = lagwise.estimator("driscoll_kraay", kernel=kernel, bandwidth=bw + offset,
                                    small_sample=debiased)
            np.testing.assert_allclose(cov_of(fit, est), theirs, rtol=1e-9, atol=1e-14)


def test_driscoll_kraay_with_entity_effects_matches_linearmodels(unbalanced):
    fit = ours(unbalanced, effects="entity")
    res = lm(unbalanced, entity_effects=True).fit(cov_type="kernel", kernel="bartlett",
                                                  bandwidth=4, debiased=True)
    est = lagwise.estimator("driscoll_kraay", kernel="bartlett", lags=4, small_sample=True)
    np.testing.assert_allclose(cov_of(fit, est), res.cov.loc[["x1", "x2"], ["x1", "x2"]],
                               rtol=1e-7)


def sm_pooled(frame):
    X = sm.add_constant(frame[["x1", "x2"]].to_numpy())
    return sm.OLS(frame.y.to_numpy(), X).fit()


def test_clustered_matches_statsmodels(unbalanced):
    fit = ours(unbalanced)
    res = sm_pooled(unbalanced)
    firm = unbalanced.firm.to_numpy()
    month = unbalanced.month.to_numpy()
    np.testing.assert_allclose(cov_of(fit, lagwise.estimator("cluster", by="entity")),
                               sw.cov_cluster(res, firm), rtol=1e-9)
    np.testing.assert_allclose(cov_of(fit, lagwise.estimator("cluster", by="time")),
                               sw.cov_cluster(res, month), rtol=1e-9)
    both, _, _ = sw.cov_cluster_2groups(res, firm, month)
    np.testing.assert_allclose(cov_of(fit, lagwise.estimator("cluster", by="both")), both,
                               rtol=1e-9)


def test_group_sum_hac_matches_statsmodels(unbalanced):
    """statsmodels' cov_nw_groupsum (the Driscoll-Kraay estimator, no factor)."""
    fit = ours(unbalanced)
    res = sm_pooled(unbalanced)
    for lags in (0, 2, 5):
        theirs = sw.cov_nw_groupsum(res, lags, unbalanced.month.to_numpy())
        est = lagwise.estimator("driscoll_kraay", kernel="bartlett", lags=lags)
        np.testing.assert_allclose(cov_of(fit, est), theirs, rtol=1e-9)


def test_entity_clusters_plus_time_kernel_from_statsmodels_pieces(balanced):
    """Entity clusters + a time kernel = cov_cluster(entity) + cov_nw_groupsum (kernel over the
    per-period sums) - cov_nw_panel (the same kernel inside each entity), each from statsmodels
    without factors, on a balanced panel sorted by entity (cov_nw_panel lags by rows)."""
    frame = balanced.sort_values(["firm", "month"]).reset_index(drop=True)
    fit = ours(frame)
    res = sm_pooled(frame)
    starts = np.flatnonzero(np.r_[True, np.diff(frame.firm.to_numpy()) != 0])
    groupidx = list(zip(starts, np.r_[starts[1:], len(frame)]))
    compared = 0
    for lags in (0, 1, 4):
        theirs = (sw.cov_cluster(res, frame.firm.to_numpy(), use_correction=False)
                  + sw.cov_nw_groupsum(res, lags, frame.month.to_numpy())
                  - sw.cov_nw_panel(res, lags, groupidx, use_correction=False))
        est = lagwise.estimator("cluster_kernel", kernel="bartlett", lags=lags,
                                small_sample=False)
        mine = fit.infer(est)
        if "psd_repaired" not in mine.flags:
            np.testing.assert_allclose(mine.cov.to_numpy(), theirs, rtol=1e-8)
            compared += 1
    assert compared >= 2
    # lag 0 only: the two-way clustered estimate without factors
    two_way = cov_of(fit, lagwise.estimator("cluster", by="both", small_sample=False))
    zero = cov_of(fit, lagwise.estimator("cluster_kernel", bandwidth=0.5, small_sample=False))
    np.testing.assert_allclose(zero, two_way, rtol=1e-10)


@pytest.mark.parametrize("which", ["balanced", "unbalanced"])
def test_fama_macbeth_matches_linearmodels(request, which):
    frame = request.getfixturevalue(which)
    fm = lagwise.fit_fama_macbeth(frame, "y", ["x1", "x2"], entity="firm", time="month")
    data = frame.set_index(["firm", "month"])
    model = FamaMacBeth(data.y, data[["x1", "x2"]].assign(const=1.0)[["const", "x1", "x2"]])
    res = model.fit(cov_type="unadjusted", debiased=True)
    np.testing.assert_allclose(fm.beta, res.params[lm_names(fm.terms)], rtol=1e-10)
    np.testing.assert_allclose(fm.infer("classical").cov.to_numpy(),
                               res.cov.loc[lm_names(fm.terms), lm_names(fm.terms)], rtol=1e-9)
    assert fm.infer("classical").law.df == res.df_resid
    for lags in (1, 4):
        res = model.fit(cov_type="kernel", kernel="bartlett", bandwidth=lags, debiased=True)
        est = lagwise.estimator("kernel", kernel="bartlett", lags=lags, small_sample=True)
        np.testing.assert_allclose(fm.infer(est).cov.to_numpy(),
                                   res.cov.loc[lm_names(fm.terms), lm_names(fm.terms)],
                                   rtol=1e-9)


@pytest.mark.filterwarnings("ignore:2 of the cross-sectional regressions")
def test_fama_macbeth_skips_periods_like_linearmodels():
    """Periods with fewer rows than coefficients are skipped by both (and listed by ours)."""
    frame = panel_frame(seed=8, entities=30, periods=25)
    thin = frame[~((frame.month.isin([3, 17])) & (frame.firm > 101))]
    fm = lagwise.fit_fama_macbeth(thin, "y", ["x1", "x2"], entity="firm", time="month")
    assert sorted(fm.skipped) == [3, 17] and fm.nobs == 23
    data = thin.set_index(["firm", "month"])
    res = FamaMacBeth(data.y, data[["x1", "x2"]].assign(const=1.0)[["const", "x1", "x2"]]).fit(
        cov_type="unadjusted", debiased=True)
    np.testing.assert_allclose(fm.beta, res.params[lm_names(fm.terms)], rtol=1e-10)
    np.testing.assert_allclose(fm.infer("classical").table.std_error,
                               res.std_errors[lm_names(fm.terms)], rtol=1e-9)
