"""Factor models: alphas, the joint alpha test under every estimator and along the bandwidth, GRS,
the large-N test, and risk premia, against outside references.

Outside sources, named beside each check: linearmodels 7.1 (TradedFactorModel,
LinearFactorModel, LinearFactorModelGMM and its `datasets.french` portfolios), statsmodels
(per-asset OLS, HC0 and HAC), scipy (the F law of GRS), the published Sharpe-ratio form of GRS
(Gibbons, Ross & Shanken 1989), Shanken (1992) as written in Cochrane (2005, ch. 12), and
simulations with known truth (seeded).

Convention knobs (ours <-> linearmodels), each stated where it is used:
* alphas' covariance: HC0 <-> cov_type="robust", debiased=False; our HC1 (S times T/(T - K - 1),
  the stacked model's T/(T - k) with k = K + 1) <-> debiased=True (balanced data).
* kernels: linearmodels' `bandwidth=bw` is int(bw) lags for Bartlett and Parzen (our
  b = int(bw) + 1) and the bandwidth itself for Quadratic Spectral (our b = bw).
* its J statistic of TradedFactorModel is a' pinv(V_aa) a ~ chi2(N): our alpha_test under HC0 or
  a kernel with the normal (chi-square) reference.
* LinearFactorModel's premia covariance is the Kan-Robotti-Shanken misspecification-robust one
  (our correction="krs"); debiased=True multiplies it by T/(T - K - 1).
* LinearFactorModelGMM: center=False and debiased=False match our uncentred S and T divisor;
  its BFGS stops early, so estimates agree to about 1e-4.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats

import lagwise
from lagwise.engine.models.factors import FactorModel, grs_test, pesaran_yamagata
from lagwise.engine.models.joint import wald_statistic

sm = pytest.importorskip("statsmodels.api")
lm_ap = pytest.importorskip("linearmodels.asset_pricing")
from linearmodels.datasets import french  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
SV = ["S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1", "S5V3", "S5V5"]
SM = ["S1M1", "S1M3", "S1M5", "S3M1", "S3M3", "S3M5", "S5M1", "S5M3", "S5M5"]
FAC = ["MktRF", "SMB", "HML"]
DEMO_ASSETS = [f"P{i:02d}" for i in range(1, 26)]
DEMO_FACTORS = ["market", "carry", "defensive"]


@pytest.fixture(scope="module", autouse=True)
def one_blas_thread():
    """One BLAS thread on both sides: on 2 shared cores OpenBLAS threads oversubscribe."""
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1):
        yield


@pytest.fixture(scope="module")
def ff():
    """linearmodels.datasets.french: 819 months; portfolio returns are raw, excess = - RF."""
    return french.load()


def excess(d, ports):
    return d[ports].sub(d["RF"], axis=0)


def rel(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.abs(a - b).max() / max(np.abs(b).max(), 1e-300))


def lm_names(ports, factors):
    out = []
    for p in ports:
        out += [f"alpha-{p}"] + [f"beta-{p}-{f}" for f in factors]
    return out


def our_names(ports, factors):
    return [f"{p}:{t}" for p in ports for t in ["alpha"] + factors]


@pytest.fixture(scope="module")
def fm18(ff):
    return lagwise.fit_factor_model(ff, SV + SM, FAC, risk_free="RF")


def gappy(seed=11, t=120, n=5, k=2, rho=0.4):
    """Simulated returns with AR(1) errors and missing values of every kind."""
    rng = np.random.default_rng(seed)
    f = rng.standard_normal((t, k)) * 0.04
    u = rng.standard_normal((t, n)) * 0.02
    e = np.zeros((t, n))
    for s in range(1, t):
        e[s] = rho * e[s - 1] + u[s]
    r = 0.001 + f @ rng.uniform(0.5, 1.5, (n, k)).T + e
    if n >= 5 and t >= 120:
        r[:30, 1] = np.nan                 # starts late
        r[50:58, 2] = np.nan               # interior gap
        r[[5, 77, 78, 100], 3] = np.nan    # scattered
        r[100:, 4] = np.nan                # ends early
    cols = {f"a{i}": r[:, i] for i in range(n)}
    cols.update({f"f{j}": f[:, j] for j in range(k)})
    return pd.DataFrame(cols)


# =============================================================================================
# linearmodels TradedFactorModel (french data)
# =============================================================================================

def test_alphas_betas_and_names_match_traded_factor_model(ff, fm18):
    # source: linearmodels TradedFactorModel.fit().params (alpha and betas per portfolio)
    res = lm_ap.TradedFactorModel(excess(ff, SV + SM), ff[FAC]).fit()
    assert np.abs(res.params.to_numpy().ravel() - fm18.beta).max() < 1e-12
    assert fm18.terms[:4] == ["S1V1:alpha", "S1V1:MktRF", "S1V1:SMB", "S1V1:HML"]
    assert list(fm18.alpha.index) == SV + SM


@pytest.mark.parametrize("debiased,ours", [(False, "hc0"), (True, "hc1")])
def test_robust_covariance_and_j_match_traded_factor_model(ff, fm18, debiased, ours):
    # source: linearmodels TradedFactorModel.fit(cov_type="robust"): cov of alphas and betas,
    # and J = a' pinv(V_aa) a ~ chi2(N). debiased=True (T/(T-K-1)) <-> our HC1.
    res = lm_ap.TradedFactorModel(excess(ff, SV + SM), ff[FAC]).fit(cov_type="robust",
                                                                    debiased=debiased)
    ports = SV + SM
    cov = fm18.infer(ours).cov.loc[our_names(ports, FAC), our_names(ports, FAC)]
    assert rel(cov, res.cov.loc[lm_names(ports, FAC), lm_names(ports, FAC)]) < 1e-10
    jt = fm18.alpha_test(ours)
    assert abs(jt.statistic / res.j_statistic.stat - 1) < 1e-10
    assert abs(jt.p_value - res.j_statistic.pval) < 1e-10
    assert jt.df == res.j_statistic.df == 18


# Bartlett and Parzen: linearmodels' bw lags -> our b = int(bw) + 1; QS: b = bw.
LM_KERNELS = [("bartlett", "bartlett", lambda bw: int(bw) + 1),
              ("parzen", "parzen", lambda bw: int(bw) + 1),
              ("quadratic_spectral", "qs", lambda bw: bw)]


@pytest.mark.parametrize("ours,theirs,to_b,bw", [
    (*kern, bw) for kern in LM_KERNELS for bw in (3.0, 4.5, 12.0)
    if not (kern[1] == "qs" and bw == 12.0)])
def test_kernel_covariance_and_j_match_traded_factor_model(ff, fm18, ours, theirs, to_b, bw):
    # source: linearmodels TradedFactorModel.fit(cov_type="kernel", kernel=..., bandwidth=bw,
    # debiased=False): the covariance of (alpha, betas) and J.
    res = lm_ap.TradedFactorModel(excess(ff, SV + SM), ff[FAC]).fit(
        cov_type="kernel", kernel=theirs, bandwidth=bw, debiased=False)
    est = lagwise.estimator("kernel", kernel=ours, bandwidth=float(to_b(bw)))
    ports = SV + SM
    cov = fm18.infer(est).cov.loc[our_names(ports, FAC), our_names(ports, FAC)]
    assert rel(cov, res.cov.loc[lm_names(ports, FAC), lm_names(ports, FAC)]) < 1e-10
    assert abs(fm18.alpha_test(est).statistic / res.j_statistic.stat - 1) < 1e-9


def test_joint_sweep_matches_traded_factor_model_j_along_the_bandwidth(ff, fm18):
    # source: linearmodels TradedFactorModel J statistic for Bartlett bw = 0..8 (b = bw + 1)
    # and QS bw = 1, 2, 3; ours: one sweep per kernel from the alphas' influence cache.
    ests = [lagwise.estimator("kernel", kernel=k, bandwidth=1.0)
            for k in ("bartlett", "quadratic_spectral")]
    sw_b = fm18.joint_sweep(ests[:1], np.arange(1, 10))
    sw_q = fm18.joint_sweep(ests[1:], [1.0, 2.0, 3.0])
    for sweep, theirs, bws in ((sw_b, "bartlett", range(9)), (sw_q, "qs", (1, 2, 3))):
        for i, bw in enumerate(bws):
            res = lm_ap.TradedFactorModel(excess(ff, SV + SM), ff[FAC]).fit(
                cov_type="kernel", kernel=theirs, bandwidth=bw, debiased=False)
            assert sweep.status[0, i] == ""
            assert abs(sweep.statistic[0, i] / res.j_statistic.stat - 1) < 1e-9
            assert abs(sweep.p_value[0, i] - res.j_statistic.pval) < 1e-9


def test_traded_premia_are_factor_means(ff):
    # source: linearmodels TradedFactorModel risk_premia (the factor means) and risk_premia_se:
    # debiased=True is HC0 of f - mean times T/(T-1), our classical on the mean (divisor T-1);
    # with a Bartlett kernel of bw lags (debiased=False), our kernel with b = bw + 1.
    rp = lagwise.fit_risk_premia(ff, SV, FAC, risk_free="RF")
    res = lm_ap.TradedFactorModel(excess(ff, SV), ff[FAC]).fit(debiased=True)
    means = rp.factor_means("classical")
    assert rel(means.table.estimate, res.risk_premia) < 1e-12
    assert rel(means.table.std_error, res.risk_premia_se) < 1e-10
    res = lm_ap.TradedFactorModel(excess(ff, SV), ff[FAC]).fit(
        cov_type="kernel", kernel="bartlett", bandwidth=6, debiased=False)
    means = rp.factor_means(lagwise.estimator("kernel", kernel="bartlett", bandwidth=7.0))
    assert rel(means.table.std_error, res.risk_premia_se) < 1e-10
    assert "time-series mean" in means.notes[0]


# =============================================================================================
# linearmodels LinearFactorModel: two-pass premia, KRS covariance, pricing errors, J
# =============================================================================================

@pytest.mark.parametrize("zero_beta", [False, True])
@pytest.mark.parametrize("debiased", [False, True])
def test_two_pass_matches_linear_factor_model(ff, zero_beta, debiased):
    # source: linearmodels LinearFactorModel(risk_free=zero_beta).fit(cov_type="robust"): premia,
    # their covariance (Kan-Robotti-Shanken misspecification-robust: our correction="krs"),
    # pricing errors, their covariance and J. debiased: times T/(T-K-1).
    ports = SV + SM
    t_obs, k = len(ff), len(FAC)
    res = lm_ap.LinearFactorModel(excess(ff, ports), ff[FAC], risk_free=zero_beta).fit(
        debiased=debiased)
    rp = lagwise.fit_risk_premia(ff, ports, FAC, risk_free="RF", zero_beta=zero_beta)
    scale = t_obs / (t_obs - k - 1) if debiased else 1.0
    assert rel(rp.premia, res.risk_premia) < 1e-10
    krs = rp.infer("hc0", correction="krs")
    assert rel(krs.cov.to_numpy() * scale, res._rp_cov) < 1e-9
    assert rel(rp.pricing_errors, res.alphas) < 1e-10
    cov_a, _ = rp.pricing_error_cov("hc0", "krs")
    assert rel(cov_a * scale, res._alpha_vcv) < 1e-9
    if not debiased:
        jt = rp.pricing_error_test("hc0", "krs")
        assert abs(jt.statistic / res.j_statistic.stat - 1) < 1e-9
        assert jt.df == res.j_statistic.df == len(ports) - k - int(zero_beta)
        assert abs(jt.p_value - res.j_statistic.pval) < 1e-9


@pytest.mark.parametrize("bw", [2.0, 7.5])
def test_two_pass_kernel_matches_linear_factor_model(ff, bw):
    # source: linearmodels LinearFactorModel(cov_type="kernel", kernel="bartlett",
    # bandwidth=bw, debiased=False): the KRS covariance with a Bartlett long-run variance,
    # our b = int(bw) + 1.
    res = lm_ap.LinearFactorModel(excess(ff, SV + SM), ff[FAC], risk_free=True).fit(
        cov_type="kernel", kernel="bartlett", bandwidth=bw, debiased=False)
    rp = lagwise.fit_risk_premia(ff, SV + SM, FAC, risk_free="RF", zero_beta=True)
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=float(int(bw) + 1))
    assert rel(rp.infer(est, correction="krs").cov.to_numpy(), res._rp_cov) < 1e-9


def test_fama_macbeth_slopes_are_cross_sectional_ols(ff):
    # source: statsmodels OLS of one month's excess returns on the time-series betas (with and
    # without a constant) gives that month's Fama-MacBeth slopes; their mean is the premium.
    for zb in (False, True):
        rp = lagwise.fit_risk_premia(ff, SV + SM, FAC, risk_free="RF", zero_beta=zb)
        x = sm.add_constant(rp.betas.to_numpy()) if zb else rp.betas.to_numpy()
        slopes = rp.fama_macbeth.slopes.to_numpy()
        r = excess(ff, SV + SM).to_numpy()
        for t in (0, 400, 818):
            assert rel(slopes[t], sm.OLS(r[t], x).fit().params) < 1e-10
        assert rel(slopes.mean(axis=0), rp.premia) < 1e-12


@pytest.mark.parametrize("zero_beta", [False, True])
def test_shanken_correction_recomputed_independently(ff, zero_beta):
    # source: Shanken (1992, RFS 5(1)) as written in Cochrane (2005, ch. 12):
    # (1/T)[(1 + c) A Sigma A' + Sigma_f*], c = lambda' Sigma_f^-1 lambda, recomputed from
    # statsmodels' per-asset residuals and numpy covariances (divisor T); our correction
    # "shanken" under HC0. Check values (NOTES, french 18 portfolios, no zero-beta rate):
    # FM s.e. (0.001499, 0.001055, 0.001033), Shanken (0.001499, 0.001057, 0.001036).
    ports = SV + SM
    r = excess(ff, ports).to_numpy()
    f = ff[FAC].to_numpy()
    t_obs, k = f.shape
    fits = [sm.OLS(r[:, i], sm.add_constant(f)).fit() for i in range(r.shape[1])]
    betas = np.array([x.params[1:] for x in fits])
    e = np.column_stack([x.resid for x in fits])
    sigma = e.T @ e / t_obs
    sf = np.cov(f.T, ddof=0)
    x = np.column_stack([np.ones(len(betas)), betas]) if zero_beta else betas
    a = np.linalg.inv(x.T @ x) @ x.T
    lam = (a @ r.mean(axis=0))[int(zero_beta):]
    c = lam @ np.linalg.inv(sf) @ lam
    border = np.zeros((k + zero_beta, k + zero_beta))
    border[zero_beta:, zero_beta:] = sf
    expected = ((1 + c) * a @ sigma @ a.T + border) / t_obs
    rp = lagwise.fit_risk_premia(ff, ports, FAC, risk_free="RF", zero_beta=zero_beta)
    assert abs(rp.shanken_c - c) < 1e-10 * c
    assert rel(rp.infer("hc0", "shanken").cov.to_numpy(), expected) < 1e-10
    fm_cov = rp.infer("hc0").cov.to_numpy()
    assert rel((1 + c) * fm_cov - c * border / t_obs, expected) < 1e-10
    # Cochrane (2005, ch. 12): cov(alpha) = (1 + c) P Sigma P' / T, P = I - X A
    p = np.eye(len(betas)) - x @ a
    assert rel(rp.pricing_error_cov("hc0", "shanken")[0], (1 + c) * p @ sigma @ p.T / t_obs) \
        < 1e-10
    if not zero_beta:
        np.testing.assert_allclose(rp.infer("hc0").table.std_error,
                                   [0.001499, 0.001055, 0.001033], atol=6e-7)
        np.testing.assert_allclose(rp.infer("hc0", "shanken").table.std_error,
                                   [0.001499, 0.001057, 0.001036], atol=6e-7)


def test_corrections_side_by_side_and_their_order(ff):
    # Shanken's variance is never below Fama-MacBeth's (c >= 0): (1 + c) V(Ae) + V(f) >= V_FM
    # under HC0, where V_FM = V(Ae) + V(f) exactly (residuals orthogonal to the factors).
    rp = lagwise.fit_risk_premia(ff, SV + SM, FAC, risk_free="RF")
    tab = rp.corrections("hc0")
    wide = tab.pivot(index="premium", columns="correction", values="std_error")
    assert set(wide.columns) == {"none", "shanken", "krs", "mean"}
    assert (wide["shanken"] >= wide["none"] - 1e-15).all()
    assert rp.r_squared == pytest.approx(-0.2280, abs=5e-5)    # NOTES check value (no intercept)
    with pytest.raises(lagwise.SpecificationError, match="correction must be one of"):
        rp.infer("hc0", correction="eiv")


def test_joint_gmm_matches_linear_factor_model_gmm(ff):
    # source: linearmodels LinearFactorModelGMM.fit(center=False, debiased=False): two-step
    # efficient GMM from the two-pass start with the uncentred HC0 weight. Its BFGS stops early
    # ("precision loss"), so premia and betas agree to about 1e-4 and J to 1e-5.
    res = lm_ap.LinearFactorModelGMM(excess(ff, SV), ff[FAC]).fit(disp=0, center=False,
                                                                    debiased=False)
    g = lagwise.fit_risk_premia(ff, SV, FAC, risk_free="RF", method="gmm")
    assert rel(g.premia, res.risk_premia) < 1e-3
    n, k = len(SV), len(FAC)
    assert np.abs(g.fit.beta[: n * k] - res.betas.to_numpy().ravel()).max() < 1e-4
    assert abs(g.j_test().statistic / res.j_statistic.stat - 1) < 1e-5
    assert g.j_test().df == n - k
    assert rel(g.infer("hc0").table.std_error, res.risk_premia_se) < 1e-3
    with pytest.raises(lagwise.SpecificationError, match="no errors-in-variables correction"):
        g.infer("hc0", correction="shanken")
    # the weighting follows the estimator: another S, another estimate
    kern = g.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth=5.0))
    assert not np.allclose(kern.table.estimate, g.infer("hc0").table.estimate, rtol=1e-8)


# =============================================================================================
# statsmodels: equation-wise alphas, HC0 and HAC blocks, missing data
# =============================================================================================

def test_alphas_equal_statsmodels_ols_with_missing_data():
    # source: statsmodels OLS per asset on its own observed periods: alpha and betas to 1e-10.
    df = gappy()
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(5)], ["f0", "f1"])
    for i in range(5):
        ok = df[f"a{i}"].notna()
        r = sm.OLS(df.loc[ok, f"a{i}"], sm.add_constant(df.loc[ok, ["f0", "f1"]])).fit()
        assert np.abs(r.params.to_numpy() - fm.beta[3 * i: 3 * i + 3]).max() < 1e-10
        assert fm.nobs_per_asset[f"a{i}"] == ok.sum()
    notes = " ".join(fm.sample.notes)            # nothing dropped silently
    assert "unbalanced" in notes and "a1 90" in notes and "a3 116" in notes
    assert "a2" in notes and "calendar lags" in notes
    assert fm.nobs == 120


def test_demo_alphas_equal_statsmodels_ols():
    # source: statsmodels OLS of each demo portfolio's excess return (minus rf) on the factors.
    table = lagwise.load_table(lagwise.demo_file("strategy_portfolios.csv"))
    fm = lagwise.fit_factor_model(table, DEMO_ASSETS, DEMO_FACTORS, risk_free="rf")
    frame = table.frame
    for a in DEMO_ASSETS:
        y = (frame[a] - frame["rf"]).dropna()
        r = sm.OLS(y, sm.add_constant(frame.loc[y.index, DEMO_FACTORS])).fit()
        assert abs(r.params.iloc[0] - fm.alpha[a]) < 1e-10
        assert np.abs(r.params.iloc[1:].to_numpy() - fm.betas.loc[a].to_numpy()).max() < 1e-10


def test_diagonal_blocks_equal_statsmodels_hc0_and_hac():
    # source: statsmodels HC0 per asset on its own sample; statsmodels HAC (Bartlett, maxlags L,
    # use_correction=False) equals our Bartlett block at b = L + 1 for assets whose periods are
    # consecutive in the common index; with interior gaps our lags are calendar lags.
    df = gappy()
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(5)], ["f0", "f1"])
    v0 = fm.infer("hc0").cov.to_numpy()
    lags = 4
    vb = fm.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth=lags + 1.0)) \
        .cov.to_numpy()
    for i in range(5):
        ok = df[f"a{i}"].notna()
        mod = sm.OLS(df.loc[ok, f"a{i}"], sm.add_constant(df.loc[ok, ["f0", "f1"]]))
        blk = slice(3 * i, 3 * i + 3)
        assert rel(v0[blk, blk], mod.fit(cov_type="HC0").cov_params()) < 1e-10
        hac = mod.fit(cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False})
        if i in (0, 1, 4):
            assert rel(vb[blk, blk], hac.cov_params()) < 1e-10
        else:
            assert rel(vb[blk, blk], hac.cov_params()) > 1e-6


def test_joint_covariance_with_gaps_equals_a_direct_zero_padded_computation():
    # V_ij = A_i [sum_t sum_s w(|t - s|) x_t e_it e_js x_s'] A_j' with the contributions set to
    # zero where an asset is missing, computed by explicit loops (own OLS per asset).
    df = gappy(t=40, n=3, k=1)
    df.loc[:7, "a1"] = np.nan
    df.loc[20:22, "a2"] = np.nan
    fm = lagwise.fit_factor_model(df, ["a0", "a1", "a2"], ["f0"])
    t_obs = 40
    x = np.column_stack([np.ones(t_obs), df["f0"]])
    b = 3.5

    def parzen(j, bw=6.0):
        u = j / bw
        return 1 - 6 * u**2 + 6 * u**3 if u <= 0.5 else (2 * (1 - u) ** 3 if u < 1 else 0.0)
    for est, wfun in [(lagwise.estimator("kernel", kernel="bartlett", bandwidth=b),
                       lambda j: max(0.0, 1 - j / b)),
                      (lagwise.estimator("kernel", kernel="parzen", bandwidth=6.0), parzen),
                      (lagwise.estimator("hc0"), lambda j: float(j == 0))]:
        v = fm.infer(est).cov.to_numpy()
        direct = np.zeros_like(v)
        parts = []
        for i in range(3):
            o = df[f"a{i}"].notna().to_numpy()
            a_i = np.linalg.inv(x[o].T @ x[o])
            e_i = np.where(o, df[f"a{i}"].fillna(0).to_numpy()
                           - x @ (a_i @ x[o].T @ df.loc[o, f"a{i}"].to_numpy()), 0.0)
            parts.append((a_i, e_i))
        for i, (a_i, e_i) in enumerate(parts):
            for j, (a_j, e_j) in enumerate(parts):
                mid = np.zeros((2, 2))
                for t in range(t_obs):
                    for s in range(t_obs):
                        w = wfun(abs(t - s))
                        if w:
                            mid += w * np.outer(x[t] * e_i[t], x[s] * e_j[s])
                direct[2 * i: 2 * i + 2, 2 * j: 2 * j + 2] = a_i @ mid @ a_j.T
        assert rel(v, direct) < 1e-10
        # and the alpha block through the joint test's own path
        part = fm.alphas(est)
        assert rel(part.std_error.to_numpy() ** 2, np.diag(direct)[::2]) < 1e-10


# =============================================================================================
# The joint moment model with N = 1, and every family on the stack
# =============================================================================================

def test_one_asset_moment_model_equals_fit_ols_under_every_family():
    # The factor model is lagwise.stack of per-asset least squares: with one member it is that
    # regression, under every time-series family at fixed tuning values.
    df = gappy(n=2)
    ols = lagwise.fit_ols(df, "a0", ["f0", "f1"])
    fm2 = lagwise.fit_factor_model(df, ["a0", "a1"], ["f0", "f1"])
    one = FactorModel([fm2.members[0]], assets=["a0"], factors=["f0", "f1"], risk_free=None,
                      returns=fm2.returns[["a0"]], factor_values=fm2.factor_values,
                      intro_notes=[], balanced=False)
    ests = [lagwise.estimator("classical"), lagwise.estimator("hc0"), lagwise.estimator("hc1"),
            lagwise.estimator("ewc", cosines=12), lagwise.estimator("var", max_order=2,
                                                                    criterion="fixed"),
            lagwise.estimator("kernel", kernel="bartlett", bandwidth=5.0, prewhiten=True)]
    ests += [lagwise.estimator("kernel", kernel=k, bandwidth=6.0) for k in lagwise.KERNELS]
    for est in ests:
        a, b = one.infer(est), ols.infer(est)
        assert rel(a.cov.to_numpy(), b.cov.to_numpy()) < 1e-10, est
        assert np.allclose(a.table.p_value, b.table.p_value, atol=1e-10), est
    assert one.terms == ["a0:alpha", "a0:f0", "a0:f1"]
    # each block of a two-asset model is that asset's own regression (SUR classical included)
    for est in ests[:3]:
        v = fm2.infer(est).cov.to_numpy()[:3, :3]
        assert rel(v, ols.infer(est).cov.to_numpy()) < 1e-10


def test_families_that_apply_and_the_one_that_does_not(fm18):
    names = [f.name for f in lagwise.estimators() if f.applies(fm18) is None]
    assert {"classical", "hc", "kernel", "var", "ewc"} <= set(names)
    assert "cluster" not in names
    # Hodrick (1992) needs one overlapping least-squares response: the family says why not
    assert lagwise.FAMILIES["hodrick"].applies(fm18)
    sweep = fm18.sweep(["bartlett", "parzen"], np.arange(1, 6))
    flip = lagwise.significance_flip(fm18, "S1V1:alpha", "bartlett", sweep_result=sweep)
    assert flip.term == "S1V1:alpha" and sweep.std_error.shape == (2, 5, 72)
    comp = fm18.compare(kernel="bartlett", bandwidth=5.0)
    assert set(comp.term) == set(fm18.terms)
    assert fm18.across("alpha") == [f"{p}:alpha" for p in SV + SM]


# =============================================================================================
# The joint test along the bandwidth equals alpha_test at each setting
# =============================================================================================

SWEPT = [
    [lagwise.estimator("kernel", kernel=k, bandwidth=1.0) for k in lagwise.KERNELS],
    [lagwise.estimator("kernel", kernel=k, bandwidth=1.0, repair=False, small_sample=True)
     for k in ("tukey_hanning", "truncated", "parzen")],
    [lagwise.estimator("kernel", kernel="bartlett", bandwidth=1.0, prewhiten=True)],
    [lagwise.estimator("ewc", cosines=10)],
    [lagwise.estimator("var", max_order=1, criterion="fixed")],
]


@pytest.mark.parametrize("ests", SWEPT, ids=["kernels", "unrepaired", "prewhitened", "ewc",
                                             "var"])
def test_joint_sweep_equals_alpha_test_at_every_setting(ests):
    df = gappy(seed=5, t=150, n=6, k=2, rho=0.5)
    df.loc[:9, "a1"] = np.nan
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(6)], ["f0", "f1"])
    family = ests[0].family
    values = {"b": [1.0, 2.5, 4.0, 9.0, 20.0], "B": [6, 8, 12, 30], "p": [0, 1, 2]}[
        family.axis.symbol]
    for reference in ("auto", "normal"):
        sweep = fm.joint_sweep(ests, values, reference=reference)
        for c, est in enumerate(ests):
            for i, v in enumerate(values):
                point = est.at(v if family.axis.symbol == "b" else int(v))
                try:
                    jt = fm.alpha_test(point, reference=reference)
                except lagwise.LagwiseError as exc:
                    assert sweep.status[c, i] != "", (est, v, exc)
                    assert not np.isfinite(sweep.p_value[c, i])
                    continue
                assert sweep.status[c, i] == "", (est, v, sweep.reasons[c, i])
                assert abs(sweep.statistic[c, i] / jt.statistic - 1) < 1e-10, (est, v)
                assert abs(sweep.p_value[c, i] - jt.p_value) < 1e-10, (est, v)
                # and the statistic is the Wald of infer's own covariance block
                res = fm.infer(point, reference=reference)
                v_aa = res.cov.loc[fm.alpha_terms, fm.alpha_terms].to_numpy()
                w, status, _ = wald_statistic(fm.alpha.to_numpy(), v_aa)
                assert abs(w / jt.statistic - 1) < 1e-10


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(2, 6), b=st.floats(0.5, 15.0),
       kernel=st.sampled_from(sorted(lagwise.KERNELS)), scale=st.floats(0.01, 100.0))
def test_joint_statistic_properties(seed, n, b, kernel, scale):
    """Property: at any kernel and bandwidth the sweep's W equals alpha_test's, and W does not
    change when the assets are listed in another order or every return is rescaled."""
    df = gappy(seed=seed, t=80, n=n, k=1, rho=0.3)
    names = [f"a{i}" for i in range(n)]
    est = lagwise.estimator("kernel", kernel=kernel, bandwidth=b)
    fm = lagwise.fit_factor_model(df, names, ["f0"])
    try:
        jt = fm.alpha_test(est)
    except lagwise.EstimationError:
        return                                         # a singular covariance: no statistic
    sweep = fm.joint_sweep([est], [b])
    assert abs(sweep.statistic[0, 0] / jt.statistic - 1) < 1e-10
    perm = list(np.random.default_rng(seed).permutation(names))
    scaled = df.copy()
    scaled[names + ["f0"]] *= scale
    other = lagwise.fit_factor_model(scaled, perm, ["f0"]).alpha_test(est)
    assert abs(other.statistic / jt.statistic - 1) < 1e-8


def test_flips_rules_and_the_ewc_grid():
    table = lagwise.load_table(lagwise.demo_file("strategy_portfolios.csv"))
    fm = lagwise.fit_factor_model(table, DEMO_ASSETS, DEMO_FACTORS, risk_free="rf")
    ests = fm.kernel_estimators()
    sweep = fm.joint_sweep(ests, np.arange(1, 31))
    assert sweep.p_value.shape == (len(lagwise.KERNELS), 30)
    flip = sweep.flip("bartlett", level=0.95)
    assert flip.rejects_at_start is False          # b = 1: lag 0 only, the HC0 test
    first = flip.changes[0]                     # the first b where the test rejects at 5%
    assert fm.alpha_test(ests[0].at(first)).p_value < 0.05
    assert fm.alpha_test(ests[0].at(first - 1.0)).p_value >= 0.05
    assert "changes" in flip.sentence()
    landings = fm.rule_landings(ests)
    keys = {(c, key) for c, key, _, _ in landings}
    assert (0, "andrews") in keys and (0, "newey-west") in keys
    b = [v for c, key, _, v in landings if c == 0 and key == "andrews"][0]
    assert b == pytest.approx(lagwise.select_bandwidth(fm, "bartlett", "andrews").b)
    # EWC needs B >= N = 25 (LLSW 2018's F(N, B - N + 1)): below, no p-value and the reason
    ewc = fm.joint_sweep([lagwise.estimator("ewc")])
    below = ewc.values < 25
    assert (ewc.status[0, below] == "unavailable").all() and np.isfinite(ewc.p_value[0, ~below]).all()
    assert "needs B >= m" in ewc.reasons[0, 0]
    # when the family's whole grid is below N, the grid is moved to start at N
    rng = np.random.default_rng(0)
    f = rng.standard_normal((200, 1))
    wide = pd.DataFrame(f @ rng.uniform(0.5, 1.5, (1, 45)) + rng.standard_normal((200, 45)),
                        columns=[f"a{i}" for i in range(45)]).assign(f=f[:, 0])
    big = lagwise.fit_factor_model(wide, [f"a{i}" for i in range(45)], ["f"])
    moved = big.joint_sweep([lagwise.estimator("ewc")])
    assert moved.values[0] == 45 and np.isfinite(moved.p_value).all()
    assert len(moved.values) == len(lagwise.FAMILIES["ewc"].axis.grid(big))


def test_band_limited_kernel_singular_and_non_psd_statuses():
    # QS's spectral window vanishes beyond |w| = 6 pi / (5 b) [Andrews 1991, recalled]: an
    # N x N estimate from T periods has rank about 1.2 T / b, so with N = 40, T = 120 it is
    # singular once b is above ~3.6: "singular" and NaN, never a p-value of 0.
    rng = np.random.default_rng(2)
    t_obs, n = 120, 40
    f = rng.standard_normal(t_obs)
    r = np.outer(f, rng.uniform(0.5, 1.5, n)) + rng.standard_normal((t_obs, n))
    df = pd.DataFrame(r, columns=[f"a{i}" for i in range(n)]).assign(f=f)
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(n)], ["f"])
    sweep = fm.joint_sweep([lagwise.estimator("kernel", kernel="quadratic_spectral",
                                              bandwidth=1.0),
                            lagwise.estimator("kernel", kernel="tukey_hanning", bandwidth=1.0,
                                              repair=False)], [1.0, 2.0, 10.0, 20.0])
    assert list(sweep.status[0]) == ["", "", "singular", "singular"]
    assert np.isnan(sweep.p_value[0, 2:]).all() and np.isfinite(sweep.p_value[0, :2]).all()
    assert "not_psd" in set(sweep.status[1])
    with pytest.raises(lagwise.EstimationError, match="singular .* rank about 1.2 T / b"):
        fm.alpha_test(lagwise.estimator("kernel", kernel="quadratic_spectral", bandwidth=20.0))


def test_fixed_b_covers_five_alphas_and_refuses_more(fm18):
    # fixed-b tables hold 1-5 restrictions (engine/laws/fixedb.py): with 5 assets the joint test
    # equals Inference.wald under fixed-b; with 18 it is refused, naming the count.
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=20.0)
    with pytest.raises(lagwise.LawUnavailable, match="1 to 5 restrictions.*18 coefficients"):
        fm18.alpha_test(est, reference="fixed-b")
    small = lagwise.fit_factor_model(french.load(), SV[:5], FAC, risk_free="RF")
    jt = small.alpha_test(est, reference="fixed-b")
    wald = small.infer(est, reference="fixed-b").wald(small.alpha_terms)
    assert jt.p_value == pytest.approx(wald.p_value, abs=1e-12)
    assert "fixed-b" in jt.law
    sweep = fm18.joint_sweep([est], [5.0, 10.0], reference="fixed-b")
    assert (sweep.status == "unavailable").all()
    assert "1 to 5 restrictions" in sweep.reasons[0, 0]


# =============================================================================================
# GRS (Gibbons, Ross & Shanken 1989)
# =============================================================================================

def test_grs_worked_example_sharpe_ratio_form(ff):
    # Worked example computed independently here, by the Sharpe-ratio form of GRS (1989):
    # F = ((T-N-K)/N) [(1 + Sh_all^2)/(1 + Sh_f^2) - 1], Sh^2 = mu' Omega^-1 mu (divisor T) of
    # (factors + assets) and of the factors alone: means and covariances only, no regression.
    sub = ff.iloc[:240]
    fm = lagwise.fit_factor_model(sub, SV, FAC, risk_free="RF")
    g = fm.grs()
    r, f = excess(sub, SV).to_numpy(), sub[FAC].to_numpy()
    t_obs, n, k = r.shape[0], r.shape[1], f.shape[1]

    def sh2(x):
        mu = x.mean(axis=0)
        return mu @ np.linalg.solve(np.cov(x.T, ddof=0), mu)
    expected = (t_obs - n - k) / n * ((1 + sh2(np.column_stack([f, r]))) / (1 + sh2(f)) - 1)
    assert abs(g.statistic / expected - 1) < 1e-10
    assert g.df == (n, t_obs - n - k)
    assert abs(g.p_value - stats.f.sf(expected, n, t_obs - n - k)) < 1e-12
    assert "iid multivariate normal" in g.assumptions
    # check value (NOTES; 18 portfolios, 819 months): GRS = 8.614243, df (18, 798)
    g18 = lagwise.fit_factor_model(ff, SV + SM, FAC, risk_free="RF").grs()
    assert g18.statistic == pytest.approx(8.614243, rel=1e-6) and g18.df == (18, 798)


def test_grs_with_one_asset_is_the_classical_t_squared():
    # source: statsmodels classical t of the intercept: with N = 1, GRS = t^2 and
    # F(1, T-1-K) = t(T-K-1)^2 (this pins Omega's divisor T with Sigma's T-K-1).
    rng = np.random.default_rng(5)
    f = rng.standard_normal((50, 2)) + 0.3
    y = 0.2 + f @ np.array([1.0, -0.5]) + rng.standard_normal(50)
    r = sm.OLS(y, sm.add_constant(f)).fit()
    g = grs_test(y[:, None], f)
    assert abs(g.statistic / r.tvalues[0] ** 2 - 1) < 1e-10
    assert abs(g.p_value - r.pvalues[0]) < 1e-10


def test_grs_uses_the_balanced_subsample_and_says_so():
    df = gappy()
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(5)], ["f0", "f1"])
    g = fm.grs()
    rows = df[[f"a{i}" for i in range(5)]].notna().all(axis=1)
    bal = lagwise.fit_factor_model(df, [f"a{i}" for i in range(5)], ["f0", "f1"], balanced=True)
    assert bal.nobs == rows.sum() and "balanced subsample" in " ".join(bal.sample.notes)
    assert abs(bal.grs().statistic - g.statistic) < 1e-10 * g.statistic
    assert f"{rows.sum()} of 120 periods" in g.notes[0]
    r = sm.OLS(df.loc[rows, "a0"], sm.add_constant(df.loc[rows, ["f0", "f1"]])).fit()
    assert abs(r.params.iloc[0] - bal.alpha["a0"]) < 1e-10


@pytest.mark.slow
def test_grs_is_exact_f_by_simulation():
    # Under iid normal errors GRS ~ F(N, T-N-K) exactly (Gibbons, Ross & Shanken 1989). Seeded
    # Monte Carlo, 6000 samples, T = 30, N = 6, K = 2, cross-correlated errors: rejection at 5%
    # within 3 Monte Carlo standard errors, and a Kolmogorov-Smirnov test against scipy's F.
    rng = np.random.default_rng(20240601)
    t_obs, n, k, reps = 30, 6, 2, 6000
    b = rng.uniform(0.5, 1.5, (n, k))
    chol = np.linalg.cholesky(0.5 * np.eye(n) + 0.5)
    stat = np.empty(reps)
    for i in range(reps):
        f = 0.5 + rng.standard_normal((t_obs, k))
        r = f @ b.T + rng.standard_normal((t_obs, n)) @ chol.T
        stat[i] = grs_test(r, f).statistic
    rate = np.mean(stat > stats.f.ppf(0.95, n, t_obs - n - k))
    assert abs(rate - 0.05) < 3 * np.sqrt(0.05 * 0.95 / reps)
    assert stats.kstest(stat, stats.f(n, t_obs - n - k).cdf).pvalue > 0.01
    # the chi-square Wald of the same data (classical covariance) over-rejects here
    wald = n * stat * (t_obs - k - 1) / (t_obs - n - k)
    assert np.mean(wald > stats.chi2.ppf(0.95, n)) > 0.08


# =============================================================================================
# Many assets: N >= T - K, and the large-N test
# =============================================================================================

def test_more_assets_than_periods_refused_and_the_large_n_test():
    # source: statsmodels classical t of each alpha; Pesaran & Yamagata (2024) J from them.
    rng = np.random.default_rng(8)
    t_obs, n, k = 60, 150, 3
    f = rng.standard_normal((t_obs, k)) * 0.04
    r = f @ rng.uniform(0.5, 1.5, (n, k)).T + rng.standard_normal((t_obs, n)) * 0.03
    df = pd.DataFrame(r, columns=[f"a{i}" for i in range(n)])
    df[["f0", "f1", "f2"]] = f
    fm = lagwise.fit_factor_model(df, [f"a{i}" for i in range(n)], ["f0", "f1", "f2"])
    for call in (fm.grs, lambda: fm.alpha_test("hc0"), lambda: fm.joint_sweep()):
        with pytest.raises(lagwise.SpecificationError,
                           match="N = 150 assets, T = 60 periods, K = 3 factors.*subset"):
            call()
    res = fm.large_n_test()
    v = t_obs - k - 1
    t2 = np.array([sm.OLS(r[:, i], sm.add_constant(f)).fit().tvalues[0] ** 2 for i in range(n)])
    num = (t2 - v / (v - 2)).sum() / np.sqrt(n)
    den = v / (v - 2) * np.sqrt(2 * (v - 1) / (v - 4) * (1 + (n - 1) * res.rho2_bar))
    assert abs(res.statistic - num / den) < 1e-10
    assert res.p_value == pytest.approx(stats.norm.sf(num / den))
    # N = T - K - 1 is allowed: GRS with one denominator degree of freedom
    small = lagwise.fit_factor_model(df, [f"a{i}" for i in range(56)], ["f0", "f1", "f2"])
    assert small.grs().df == (56, 1)


@pytest.mark.slow
def test_large_n_test_size_by_simulation():
    # Pesaran & Yamagata (2024): J ~ N(0, 1) under the null with N >> T. Seeded Monte Carlo,
    # T = 60, N = 200, t(8) errors, 400 samples: one-sided 5% rejection within [2%, 9%]
    # (about 3 Monte Carlo standard errors around 5%; an asymptotic test).
    rng = np.random.default_rng(99)
    t_obs, n, k, reps = 60, 200, 3, 400
    b = rng.uniform(0.5, 1.5, (n, k))
    rejections = 0
    for _ in range(reps):
        f = rng.standard_normal((t_obs, k)) * 0.04
        r = f @ b.T + rng.standard_t(8, (t_obs, n)) * 0.03
        rejections += pesaran_yamagata(r, f).p_value < 0.05
    assert 0.02 <= rejections / reps <= 0.09


# =============================================================================================
# Bad input: typed errors naming the column or the counts
# =============================================================================================

def test_bad_inputs_are_typed_errors_naming_the_culprit():
    rng = np.random.default_rng(1)
    t_obs = 60
    df = pd.DataFrame(rng.standard_normal((t_obs, 4)), columns=list("ABCD"))
    df["Mkt"], df["SMB"] = rng.standard_normal(t_obs), rng.standard_normal(t_obs)
    fit = lagwise.fit_factor_model
    with pytest.raises(lagwise.SpecificationError, match=r"at least two assets; got 1 \('A'\)"):
        fit(df, ["A"], ["Mkt"])
    const = df.assign(SMB=0.5)
    with pytest.raises(lagwise.SpecificationError, match="factor 'SMB' is constant"):
        fit(const, list("ABCD"), ["Mkt", "SMB"])
    empty = df.assign(C=np.nan)
    with pytest.raises(lagwise.DataError, match="asset column 'C' has no values"):
        fit(empty, list("ABCD"), ["Mkt"])
    short = df.copy()
    short.loc[3:, "B"] = np.nan
    with pytest.raises(lagwise.SpecificationError, match="asset 'B' has 3 observed periods for "
                                                        "3 coefficients"):
        fit(short, list("ABCD"), ["Mkt", "SMB"])
    dated = df.assign(month=list(range(t_obs)))
    dated.loc[10, "month"], dated.loc[30, "month"] = 9, 29
    with pytest.raises(lagwise.DataError, match=r"2 duplicated period\(s\), e\.g\. 9, 29"):
        fit(dated, list("ABCD"), ["Mkt"], time="month")
    with pytest.raises(lagwise.DataError, match="duplicated period"):
        fit(dated.set_index("month"), list("ABCD"), ["Mkt"])
    coll = df.assign(HML=df.Mkt - 2 * df.SMB)
    with pytest.raises(lagwise.SpecificationError, match="factors are collinear.*'HML'"):
        fit(coll, list("ABCD"), ["Mkt", "SMB", "HML"])
    with pytest.raises(lagwise.SpecificationError, match="'Mkt' is both an asset and a factor"):
        fit(df, ["A", "Mkt"], ["Mkt"])
    with pytest.raises(lagwise.SpecificationError, match="no column named 'Z' for the asset"):
        fit(df, ["A", "Z"], ["Mkt"])
    text = df.assign(D=["x"] * t_obs)
    with pytest.raises(lagwise.DataError, match="asset column 'D' is not numeric"):
        fit(text, list("ABCD"), ["Mkt"])
    # a missing factor value drops the period for every asset, and the notes say so
    gap = df.copy()
    gap.loc[[0, 20], "Mkt"] = np.nan
    fm = fit(gap, list("ABCD"), ["Mkt"])
    assert fm.nobs == 58
    assert "2 periods with a missing value of a factor dropped" in fm.sample.notes[1]
    assert "1 of them inside the sample" in fm.sample.notes[1]
    # N >= T - K: GRS and every full-rank Wald refused, naming N, T and K
    wide = pd.DataFrame(rng.standard_normal((t_obs, 58)), columns=[f"p{i}" for i in range(58)])
    wide[["Mkt", "SMB"]] = df[["Mkt", "SMB"]]
    fm = fit(wide, [f"p{i}" for i in range(58)], ["Mkt", "SMB"])
    for call in (fm.grs, lambda: fm.alpha_test("hc0")):
        with pytest.raises(lagwise.SpecificationError, match="N = 58 assets, T = 60 periods, "
                                                             "K = 2 factors"):
            call()


# =============================================================================================
# The demo's statement in the README
# =============================================================================================

def test_readme_factor_example_runs(monkeypatch):
    block = [b for b in re.findall(r"```python\n(.*?)```", (ROOT / "README.md").read_text(),
                                   flags=re.S) if "fit_factor_model(" in b][0]
    monkeypatch.chdir(ROOT)
    namespace = {"lagwise": lagwise}
    exec(compile(block, "README.md", "exec"), namespace)   # noqa: S102 - our own docs
    fm, rp = namespace["fm"], namespace["rp"]
    assert fm.alpha_terms[0] == "P01:alpha" and rp.premia.index.tolist() == DEMO_FACTORS


def test_readme_demo_statement_holds():
    """README: on the factor demo the joint test of the 25 alphas does not reject at 5% under
    the classical, HC0 and HC1 estimators nor under GRS, and rejects under kernel HAC with every
    kernel at the Andrews bandwidth and at the Newey-West bandwidth (where that rule is
    defined)."""
    readme = (ROOT / "README.md").read_text()
    statement = re.search(r"On the factor demo .*?\n\n", readme, flags=re.S)
    assert statement, "the README states what the factor demo shows"
    text = " ".join(statement.group(0).split())
    for phrase in ("does not reject at 5% under the classical, HC0 and HC1", "nor under GRS",
                   "rejects under kernel HAC with every kernel at the Andrews",
                   "Newey-West bandwidth"):
        assert phrase in text, phrase
    table = lagwise.load_table(lagwise.demo_file("strategy_portfolios.csv"))
    fm = lagwise.fit_factor_model(table, DEMO_ASSETS, DEMO_FACTORS, risk_free="rf")
    for est in ("classical", "hc0", "hc1"):
        assert fm.alpha_test(est).p_value > 0.05, est
    assert fm.grs().p_value > 0.05
    checked = 0
    for kernel in lagwise.KERNELS:
        for rule in ("andrews", "newey-west"):
            est = lagwise.estimator("kernel", kernel=kernel, bandwidth=rule)
            try:
                jt = fm.alpha_test(est)
            except lagwise.SpecificationError as exc:
                assert rule == "newey-west" and "not defined" in str(exc)
                continue
            assert jt.p_value < 0.05, (kernel, rule)
            checked += 1
    assert checked >= len(lagwise.KERNELS) + 4
    # the numbers the paragraph quotes
    quoted = [round(fm.alpha_test(e).p_value, 2) for e in ("classical", "hc0", "hc1")]
    assert f"(p = {quoted[0]:.2f}, {quoted[1]:.2f}, {quoted[2]:.2f})" in text
    assert f"nor under GRS (p = {fm.grs().p_value:.2f})" in text
    sweep = fm.joint_sweep(fm.kernel_estimators())
    assert f"rejecting at b = {sweep.flip('bartlett').changes[0]:g}" in text
    ewc = fm.joint_sweep([lagwise.estimator("ewc")]).flip(0)
    (a, b, s1), (c, d, s2) = [seg for seg in ewc.segments if seg[2] is not None][:2]
    assert (s1, s2) == (False, True)
    assert f"does not reject for B = {a:g}..{b:g} and rejects from B = {c:g}" in text


@pytest.mark.slow
def test_demo_split_appears_in_most_simulated_samples():
    """The README: in seeded simulations of the demo's scenario the same split (classical,
    HC0, HC1 and GRS do not reject; every kernel at the Andrews bandwidth rejects) appears in
    most samples. Ten seeds of demo_data/make_factor_demo.py's generator."""
    import importlib.util
    spec = importlib.util.spec_from_file_location("make_factor_demo",
                                                  ROOT / "demo_data" / "make_factor_demo.py")
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    split = 0
    for seed in range(1, 11):
        frame = gen.simulate(seed).set_index("date")
        fm = lagwise.fit_factor_model(frame, DEMO_ASSETS, DEMO_FACTORS, risk_free="rf")
        iid = min(fm.alpha_test(e).p_value for e in ("classical", "hc0", "hc1"))
        iid = min(iid, fm.grs().p_value)
        hac = max(fm.alpha_test(lagwise.estimator("kernel", kernel=k, bandwidth="andrews"))
                  .p_value for k in lagwise.KERNELS)
        split += iid > 0.05 and hac < 0.05
    assert split >= 8
