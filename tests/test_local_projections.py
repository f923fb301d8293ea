"""Local projections: impulse responses, bands across horizons, sweeps, cumulative responses,
multipliers, bootstraps and bad input. The outside source of each check is named beside it:
statsmodels 0.15 (LocalProjections, OLS with HAC/HC covariances, its default lag rule), direct
double sums over dates, closed forms of the sup-t quantile, and the stacked model."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as hs
from scipy import stats

import lagwise
from lagwise.engine.models.lp_inference import (HorizonRule, lags_statsmodels, runs_text,
                                                stop_horizon)

sm = pytest.importorskip("statsmodels.api")
from statsmodels.tsa.api import LocalProjections  # noqa: E402


# ------------------------------------------------------------------------------  data

def macro_frame() -> pd.DataFrame:
    """statsmodels' macrodata (US quarterly 1959Q1-2009Q3): GDP growth (100 x log difference),
    the change in the 3-month T-bill rate (the shock), inflation; regular quarterly dates."""
    d = sm.datasets.macrodata.load_pandas().data
    idx = pd.period_range("1959Q1", periods=len(d), freq="Q").to_timestamp()
    df = pd.DataFrame({"gdp": 100 * np.log(d["realgdp"].to_numpy()),
                       "rate": d["tbilrate"].to_numpy(), "infl": d["infl"].to_numpy()},
                      index=idx)
    df["dgdp"] = df["gdp"].diff()
    df["drate"] = df["rate"].diff()
    return df.iloc[1:]


def sim_frame(T=300, rho=0.8, phi=0.5, seed=0) -> pd.DataFrame:
    """Simulated (seeded): a persistent shock x, a control c, a response y with
    heteroskedastic errors; monthly dates."""
    rng = np.random.default_rng(seed)
    n = T + 100
    eps, e, w = rng.standard_normal((3, n))
    x, y, c = np.zeros(n), np.zeros(n), np.zeros(n)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + eps[t]
        c[t] = 0.5 * c[t - 1] + 0.3 * x[t - 1] + w[t]
        y[t] = rho * y[t - 1] + x[t] + 0.2 * c[t - 1] + e[t] * (1 + 0.5 * abs(eps[t]))
    idx = pd.date_range("1990-01-01", periods=T, freq="MS")
    return pd.DataFrame({"x": x[100:], "y": y[100:], "c": c[100:]}, index=idx)


def shifted_design(df, response, shock, controls, p, h, cumulative=False):
    """The horizon-h regression built independently with pandas shifts (rows with a missing
    value dropped)."""
    cols = [shock, response, *controls]
    parts = {"const": pd.Series(1.0, index=df.index), shock: df[shock]}
    for lag in range(1, p + 1):
        for c in cols:
            parts[f"{c}, lag {lag}"] = df[c].shift(lag)
    X = pd.DataFrame(parts)
    y = df[response].shift(-h)
    if cumulative:
        y = y - df[response].shift(1)
    both = pd.concat([y.rename("yy"), X], axis=1).dropna()
    return both["yy"], both.drop(columns="yy")


NW = lagwise.estimator("kernel", kernel="bartlett", lags=4)


# ------------------------------------------------------------------------------  statsmodels LP

@pytest.mark.parametrize("p,H", [(1, 8), (2, 12), (4, 16)])
def test_statsmodels_localprojections_irf_and_newey_west(p, H):
    """Outside source: statsmodels 0.15 tsa.api.LocalProjections on its macrodata. Its
    conventions, matched here by common_sample=True: one sample t = p..T-1-H for every horizon
    (nobs = T - p - H); lags 1..p of every endog column (shock, responses) and a constant;
    Newey-West (Bartlett) weights 1 - l/(L+1), S with divisor T, no small-sample factor;
    L_h = max(h, ceil(4 (max(h,1)/100)^(2/9))) by default, or nw_lags at every horizon;
    normal critical values."""
    df = macro_frame()[["drate", "dgdp", "infl"]]
    for nw_lags, est in ((None, lagwise.horizon_rule("statsmodels")),
                         (3, lagwise.estimator("kernel", kernel="bartlett", lags=3))):
        res = LocalProjections(df, shock_idx=0, lags=p, horizons=H, nw_lags=nw_lags).fit()
        ci = res.conf_int(alpha=0.10)
        for i, (resp, ctrl) in enumerate([("dgdp", ["infl"]), ("infl", ["dgdp"])], start=1):
            lp = lagwise.fit_local_projections(df, resp, "drate", ctrl, lags=p, horizons=H,
                                               common_sample=True)
            assert (lp.nobs == res.nobs).all() and res.nobs == len(df) - p - H
            t = lp.irf(est, level=0.90)
            np.testing.assert_allclose(t["estimate"], res.irfs[:, i, 0], rtol=0, atol=1e-10)
            np.testing.assert_allclose(t["std_error"], res.stderr[:, i, 0], rtol=1e-10, atol=0)
            np.testing.assert_allclose(t["ci_low"], ci[:, i, 0, 0], rtol=0, atol=1e-10)
            np.testing.assert_allclose(t["ci_high"], ci[:, i, 0, 1], rtol=0, atol=1e-10)
            if nw_lags is None:
                assert list(t["lags"]) == [max(h, 2) for h in range(H + 1)]


def test_statsmodels_default_rule_values():
    """Outside source: statsmodels.tsa.vector_ar.local_proj._hac_bandwidth (its default rule)."""
    from statsmodels.tsa.vector_ar.local_proj import _hac_bandwidth
    for h in range(0, 120):
        assert lags_statsmodels(h, 0) == _hac_bandwidth(h)


# ------------------------------------------------------------------------------  per-horizon fits

@pytest.mark.parametrize("cumulative", [False, True])
def test_each_horizon_is_fit_ols_on_the_shifted_data(cumulative):
    """Outside sources: lagwise.fit_ols on the shifted data built with pandas (the horizon's
    fit is that fit: same coefficients, same standard errors under every estimator tried), and
    statsmodels OLS on the same data (coefficients; HC0-HC3; HAC Bartlett with maxlags = 4, with
    and without its small-sample correction n/(n-k))."""
    df = sim_frame()
    p, H = 2, 10
    lp = lagwise.fit_local_projections(df, "y", "x", ["c"], lags=p, horizons=H,
                                       cumulative=cumulative)
    tables = {k: lp.irf(lagwise.estimator(k)) for k in ("hc0", "hc1", "hc2", "hc3")}
    nw = lp.irf(NW)
    nw_ss = lp.irf(lagwise.estimator("kernel", kernel="bartlett", lags=4, small_sample=True))
    assert lp.terms == ["intercept", "x"] + [f"{c}, lag {l}" for l in range(1, p + 1)
                                             for c in ("x", "y", "c")]
    for h in range(H + 1):
        y, X = shifted_design(df, "y", "x", ["c"], p, h, cumulative)
        assert len(y) == lp.nobs[h] == len(df) - p - h
        frame = X.drop(columns="const").assign(yy=y)
        own = lagwise.fit_ols(frame, "yy", list(X.columns[1:]))
        fit = lp.horizon(h)
        assert list(fit.index) == list(y.index)
        np.testing.assert_allclose(fit.beta, own.beta, rtol=0, atol=1e-10)
        for est in (NW, lagwise.estimator("ewc"),
                    lagwise.estimator("kernel", kernel="parzen", bandwidth="andrews")):
            np.testing.assert_allclose(fit.infer(est).table.to_numpy(),
                                       own.infer(est).table.to_numpy(), rtol=1e-9, atol=1e-12)
        ols = sm.OLS(y.to_numpy(), X.to_numpy()).fit()
        np.testing.assert_allclose(fit.beta, ols.params, rtol=0, atol=1e-9)
        for k, t in tables.items():
            se = ols.get_robustcov_results(cov_type=k.upper()).bse[1]
            np.testing.assert_allclose(t["std_error"].iloc[h], se, rtol=1e-10)
        hac = ols.get_robustcov_results(cov_type="HAC", maxlags=4, use_correction=False)
        np.testing.assert_allclose(nw["std_error"].iloc[h], hac.bse[1], rtol=1e-10)
        hac = ols.get_robustcov_results(cov_type="HAC", maxlags=4, use_correction=True)
        np.testing.assert_allclose(nw_ss["std_error"].iloc[h], hac.bse[1], rtol=1e-10)


def test_long_difference_equals_levels_when_the_lagged_response_is_a_regressor():
    """Algebra: with y_{t-1} among the regressors (p >= 1), y_{t+h} - y_{t-1} and y_{t+h} give the
    same shock coefficient and errors (only y_{t-1}'s own coefficient moves by -1)."""
    df = sim_frame()
    a = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=6)
    b = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=6, cumulative=True)
    np.testing.assert_allclose(a.estimates, b.estimates, atol=1e-10)
    np.testing.assert_allclose(a.irf(NW)["std_error"], b.irf(NW)["std_error"], rtol=1e-9)
    assert b.horizon(3).response == "y, lead 3 less lag 1"


def test_samples_per_horizon_are_stated():
    df = sim_frame(T=120).reset_index(names="date")
    df.loc[0, "x"] = np.nan                       # a leading missing row is left out, said so
    lp = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=5, time="date")
    assert lp.T == 119 and any("leading" in n for n in lp.notes)
    s = lp.samples
    assert list(s["nobs"]) == [119 - 2 - h for h in range(6)]
    assert s.loc[0, "first"] == "1990-04-01" and s.loc[5, "last_response"] == "1999-12-01"
    assert s.loc[5, "last"] == "1999-07-01"
    common = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=5, time="date",
                                           common_sample=True)
    assert set(common.nobs) == {119 - 2 - 5}


# ------------------------------------------------------------------------------  joint covariance

def brute_joint(lp, kernel, b):
    """Double sum over actual dates of k((t-s)/b) z_{h,t} z_{h',s}, each horizon's influence
    series from its own fit (z = [(X'X)^-1 x_t u_t]_shock)."""
    w = lagwise.get_kernel(kernel)
    pos = {d: i for i, d in enumerate(lp.index)}
    zs, ts = [], []
    for f in lp.fits:
        xtx = np.linalg.inv(f.X.T @ f.X)
        zs.append((f.X @ xtx)[:, 1] * f.resid)
        ts.append(np.array([pos[d] for d in f.index]))
    n = len(zs)
    V = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            lag = ts[i][:, None] - ts[j][None, :]
            V[i, j] = zs[i] @ w.weight(np.abs(lag) / b) @ zs[j]
    return V


@pytest.mark.parametrize("kernel,b", [("bartlett", 5.0), ("parzen", 7.5),
                                      ("quadratic_spectral", 4.0), ("bohman", 150.0)])
def test_joint_covariance_is_the_double_sum_over_dates(kernel, b):
    """Definition: the stacked, zero-padded estimate equals the double sum over the pairs of
    dates both horizons have (unequal samples need no rescaling), and its diagonal equals each
    horizon's own variance. The stacked model (lagwise.stack of the fits) gives the same block
    for the shock coefficients."""
    df = sim_frame(T=160)
    lp = lagwise.fit_local_projections(df, "y", "x", ["c"], lags=2, horizons=8)
    est = lagwise.estimator("kernel", kernel=kernel, bandwidth=b)
    jc = lp.joint(est)
    np.testing.assert_allclose(jc.V, brute_joint(lp, kernel, b), rtol=1e-8, atol=1e-14)
    np.testing.assert_allclose(np.sqrt(np.diag(jc.V)), lp.irf(est)["std_error"], rtol=1e-9)
    st = lp.stacked.infer(est).cov
    names = [f"h{h}:x" for h in range(9)]
    np.testing.assert_allclose(st.loc[names, names].to_numpy(), jc.V, rtol=1e-8, atol=1e-14)


def test_joint_hc_and_ewc():
    """HC0/HC1/HC3 keep each horizon's own variance (HC1's per-horizon factors do not change
    the correlations); with a common sample the stacked EWC uses each horizon's n and B, so its
    diagonal is each horizon's own EWC variance."""
    df = sim_frame(T=200)
    lp = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=6)
    for k in ("hc0", "hc1", "hc3"):
        jc = lp.joint(lagwise.estimator(k))
        np.testing.assert_allclose(jc.std_error, lp.irf(lagwise.estimator(k))["std_error"],
                                   rtol=1e-12)
    zz = lp.shock_series.working_contributions
    v0 = zz.T @ zz
    jc = lp.joint(lagwise.estimator("hc0"))
    np.testing.assert_allclose(jc.V, v0, rtol=1e-10, atol=1e-16)
    r1 = lp.joint(lagwise.estimator("hc1")).R
    np.testing.assert_allclose(r1, jc.R, rtol=1e-10, atol=1e-14)
    lpc = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=6, common_sample=True)
    ewc = lagwise.estimator("ewc")
    jc = lpc.joint(ewc)
    series = lpc.shock_series
    direct = series.covariance_from_long_run(ewc.long_run(series).S)
    np.testing.assert_allclose(jc.V, direct, rtol=1e-9)
    assert jc.law.df == math.floor(0.4 * lpc.nobs[0] ** (2 / 3))


@pytest.mark.parametrize("est", [lagwise.estimator("kernel", kernel="bartlett", lags=3),
                                 lagwise.estimator("kernel", kernel="quadratic_spectral",
                                                   bandwidth=3.0),
                                 lagwise.estimator("hc0")])
def test_cumulative_response_equals_ols_on_the_summed_response(est):
    """Outside source: statsmodels OLS (HAC / HC0) of sum_{j<=h} y_{t+j} on the same regressors
    (common sample, so X is the same at every horizon): its coefficient is sum_j beta_j and its
    influence series is sum_j z_j, so its variance is 1'V1 from the joint covariance. QS has no
    statsmodels counterpart: its check is the kernel sum on the summed influence series."""
    df = sim_frame(T=250)
    p, H = 2, 8
    lp = lagwise.fit_local_projections(df, "y", "x", lags=p, horizons=H, common_sample=True)
    cum = lp.cumulative_irf(est)
    for h in (0, 3, 8):
        y = sum(df["y"].shift(-j) for j in range(h + 1))
        X = shifted_design(df, "y", "x", [], p, H)[1]
        y = y.loc[X.index]
        ols = sm.OLS(y.to_numpy(), X.to_numpy()).fit()
        if est.name == lagwise.estimator("hc0").name:
            se = ols.get_robustcov_results(cov_type="HC0").bse[1]
        elif est.params["kernel"] == "bartlett":
            se = ols.get_robustcov_results(cov_type="HAC", maxlags=3,
                                           use_correction=False).bse[1]
        else:
            x = X.to_numpy()
            z = np.linalg.solve(x.T @ x, x.T)[1] * ols.resid
            n = len(z)
            g = np.array([z[j:] @ z[: n - j] for j in range(n)])
            w = lagwise.get_kernel("quadratic_spectral").weight(np.arange(n) / 3.0)
            se = math.sqrt(g[0] + 2 * w[1:] @ g[1:])
        np.testing.assert_allclose(cum["estimate"].iloc[h], ols.params[1], atol=1e-10)
        np.testing.assert_allclose(cum["std_error"].iloc[h], se, rtol=1e-9)


def test_multiplier_delta_method_and_fieller():
    """Ratio of cumulative responses: an exact case (numerator = 2.5 x denominator: m = 2.5, zero
    delta-method error) and a random case against the delta formula by hand from the joint
    covariance of both projections (the stacked influence series of all their horizons)."""
    df = sim_frame(T=300)
    df["y2"] = 2.5 * df["y"]
    a = lagwise.fit_local_projections(df, "y2", "x", lags=2, horizons=6)
    b = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=6)
    m = lagwise.multiplier(a, b, lagwise.estimator("kernel", kernel="bartlett", lags=2))
    np.testing.assert_allclose(m["multiplier"], 2.5, rtol=1e-10)
    assert (m["std_error"] < 1e-6).all()
    c = lagwise.fit_local_projections(df, "c", "x", lags=2, horizons=6)
    hc0 = lagwise.estimator("hc0")
    m = lagwise.multiplier(b, c, hc0, level=0.90)
    zb = b.shock_series.working_contributions
    zc = c.shock_series.working_contributions
    z = np.hstack([zb, zc])
    V = z.T @ z
    low = np.tril(np.ones((7, 7)))
    h = 4
    cb, cc = (low @ b.estimates.to_numpy())[h], (low @ c.estimates.to_numpy())[h]
    g = np.zeros(14)
    g[: h + 1] = 1 / cc
    g[7: 7 + h + 1] = -cb / cc ** 2
    np.testing.assert_allclose(m["std_error"].iloc[h], math.sqrt(g @ V @ g), rtol=1e-9)
    for _, row in m.iterrows():
        if row["fieller_set"] == "bounded":
            assert row["fieller_low"] <= row["multiplier"] <= row["fieller_high"]
    with pytest.raises(lagwise.SpecificationError, match="same horizons"):
        lagwise.multiplier(b, lagwise.fit_local_projections(df, "c", "x", lags=2, horizons=5))


# ------------------------------------------------------------------------------  sup-t

def test_sup_t_closed_forms():
    """Closed forms: independent Z_h give c = Phi^-1((1 + level^(1/n))/2) (Sidak); perfectly
    correlated Z_h give the pointwise value; the EWC law with one horizon is Student t(B). The
    simulated quantile lies within 4 Monte Carlo standard errors of each."""
    n, level = 13, 0.90
    st = lagwise.sup_t_critical_value(np.eye(n), level, reps=100_000, seed=3)
    assert abs(st.raw - stats.norm.ppf(0.5 + 0.5 * level ** (1 / n))) < 4 * st.mc_se
    assert st.mc_se < 0.01
    st1 = lagwise.sup_t_critical_value(np.ones((n, n)), level, reps=100_000, seed=3)
    assert abs(st1.raw - stats.norm.ppf(0.95)) < 4 * st1.mc_se
    from lagwise.engine.laws.reference import EWCLaw
    st2 = lagwise.sup_t_critical_value(np.ones((1, 1)), level, reps=100_000, seed=3,
                                       law=EWCLaw(8))
    assert abs(st2.raw - stats.t.ppf(0.95, 8)) < 4 * st2.mc_se


@settings(max_examples=25, deadline=None)
@given(n=hs.integers(2, 20), k=hs.integers(1, 4), seed=hs.integers(0, 10_000),
       level=hs.sampled_from([0.68, 0.90, 0.95]))
def test_sup_t_between_pointwise_and_bonferroni(n, k, seed, level):
    """Property (Montiel Olea & Plagborg-Moller 2019): for any correlation matrix,
    pointwise <= sup-t <= Bonferroni (the raw simulated value up to 4 MC s.e.)."""
    rng = np.random.default_rng(seed)
    F = rng.standard_normal((n, k))
    C = F @ F.T + np.diag(rng.uniform(0.05, 1.0, n))
    d = np.sqrt(np.diag(C))
    st = lagwise.sup_t_critical_value(C / np.outer(d, d), level, reps=40_000, seed=seed)
    assert st.pointwise - 4 * st.mc_se <= st.raw <= st.bonferroni + 4 * st.mc_se
    assert st.pointwise <= st.value <= st.bonferroni


@pytest.mark.parametrize("est", [lagwise.estimator("kernel", kernel="bartlett", lags=2),
                                 lagwise.horizon_rule(), lagwise.estimator("hc1"),
                                 lagwise.estimator("ewc"), lagwise.lag_augmented(),
                                 lagwise.estimator("kernel", kernel="quadratic_spectral",
                                                   bandwidth="andrews")])
def test_sup_t_band_lies_between_pointwise_and_bonferroni_at_every_horizon(est):
    df = sim_frame(T=240)
    lp = lagwise.fit_local_projections(df, "y", "x", ["c"], lags=2, horizons=12)
    w = {k: lp.bands(est, 0.90, k, reps=20_000) for k in ("pointwise", "sup-t", "bonferroni")}
    lo = {k: v["estimate"] - v["ci_low"] for k, v in w.items()}
    assert (lo["pointwise"] <= lo["sup-t"] + 1e-12).all()
    assert (lo["sup-t"] <= lo["bonferroni"] + 1e-12).all()
    st = w["sup-t"].attrs["sup_t"]
    assert st.pointwise - 4 * st.mc_se <= st.raw <= st.bonferroni + 4 * st.mc_se
    assert st.raw > st.pointwise + 0.2       # 13 horizons, far from perfectly correlated
    for k in w:
        np.testing.assert_allclose(w[k]["estimate"], lp.irf(est)["estimate"])


# ------------------------------------------------------------------------------  estimators

def test_automatic_rules_and_ewc_are_each_horizons_own():
    """The Andrews (1991) bandwidth and EWC's B are chosen on each horizon's fit: the table
    equals lagwise.select_bandwidth / infer on lp.horizon(h)."""
    df = sim_frame()
    lp = lagwise.fit_local_projections(df, "y", "x", ["c"], lags=1, horizons=6)
    est = lagwise.estimator("kernel", kernel="parzen", bandwidth="andrews")
    t = lp.irf(est)
    for h in range(7):
        choice = lagwise.select_bandwidth(lp.horizon(h), "parzen", "andrews")
        assert t["bandwidth"].iloc[h] == pytest.approx(choice.b)
        assert t["std_error"].iloc[h] == pytest.approx(
            lp.horizon(h).infer(est).table.loc["x", "std_error"], rel=1e-12)
    e = lp.irf(lagwise.estimator("ewc"))
    assert list(e["df"]) == [math.floor(0.4 * n ** (2 / 3)) for n in lp.nobs]
    assert (e["critical_value"] == stats.t.ppf(0.95, e["df"])).all()


def test_horizon_rule_lags_and_lag_augmentation():
    """The lagwise rule uses max(h, floor(4 (n_h/100)^(2/9))) Bartlett lags; lag augmentation
    is the regression with one more lag of every variable with HC0 (outside source: statsmodels
    OLS HC0 on the shifted data with p + 1 lags)."""
    df = sim_frame()
    lp = lagwise.fit_local_projections(df, "y", "x", lags=1, horizons=8)
    t = lp.irf(lagwise.horizon_rule())
    assert list(t["lags"]) == [max(h, math.floor(4 * (n / 100) ** (2 / 9)))
                               for h, n in enumerate(lp.nobs)]
    la = lp.irf(lagwise.lag_augmented())
    for h in (0, 4, 8):
        y, X = shifted_design(df, "y", "x", [], 2, h)
        ols = sm.OLS(y.to_numpy(), X.to_numpy()).fit()
        assert la["estimate"].iloc[h] == pytest.approx(ols.params[1], abs=1e-10)
        assert la["std_error"].iloc[h] == pytest.approx(
            ols.get_robustcov_results(cov_type="HC0").bse[1], rel=1e-10)
    assert lp.augmented(1) is lp.augmented(1) and lp.augmented(0) is lp
    assert "Montiel Olea" in lagwise.lag_augmented().assumes


# ------------------------------------------------------------------------------  the sweep

def test_sweep_equals_each_horizons_own_sweep_and_statsmodels():
    """The sweep of the stacked shock series equals each horizon's own engine sweep (all six
    kernels, unrepaired) and, for Bartlett and the truncated (uniform) kernel, statsmodels
    OLS HAC at maxlags = b - 1 (outside source)."""
    df = sim_frame(T=400)
    lp = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=5)
    bw = np.arange(1, 21)
    sw = lp.sweep(bandwidths=bw)
    for h in (0, 3, 5):
        own = lp.horizon(h).sweep(kernels=sw.kernels, bandwidths=bw, repair=False)
        np.testing.assert_allclose(sw.std_error[:, :, h], own.std_error[:, :, 1], rtol=1e-9)
        y, X = shifted_design(df, "y", "x", [], 2, h)
        ols = sm.OLS(y.to_numpy(), X.to_numpy()).fit()
        for kernel, name in (("bartlett", "bartlett"), ("truncated", "uniform")):
            i = sw.kernels.index(kernel)
            for b in (1, 6, 13):
                hac = ols.get_robustcov_results(cov_type="HAC", maxlags=b - 1, kernel=name,
                                                use_correction=False)
                np.testing.assert_allclose(sw.std_error[i, b - 1, h], hac.bse[1], rtol=1e-9)
    t = lp.irf(lagwise.estimator("kernel", kernel="parzen", bandwidth=7.0))
    np.testing.assert_allclose(sw.std_error[sw.kernels.index("parzen"), 6], t["std_error"],
                               rtol=1e-9)


def test_flip_table_words_and_stop_horizons():
    b = np.arange(1.0, 7.0)
    sw = lagwise.LPSweep(kernels=["bartlett"], labels=["Bartlett"], bandwidths=b,
                         estimate=np.ones(4), std_error=np.ones((1, 6, 4)),
                         t_stat=np.array([[[3, 1, 3, 3], [3, 1, 1.9, 1], [3, 1, 1.5, 3],
                                           [3, 1, 1.5, 3], [1, 1, 1.5, 3], [1, 1, 1.5, 1]]],
                                         dtype=float),
                         status=np.full((1, 6), ""), nobs=np.array([100] * 4))
    ft = sw.flip_table(0.90)
    assert list(ft["Bartlett"]) == ["b < 5", "no b", "b < 3", "b in 1, 3-5"]
    assert sw.flips(0.90)[0].changes == [5.0]
    assert stop_horizon([True, True, False, True]) == (0, 2)
    assert stop_horizon([False, True, True]) == (1, None)
    assert stop_horizon([False, False]) == (None, None)
    assert runs_text([True, True, False, True], range(4)) == "0-1, 3"


def test_significance_table_reports_where_the_response_stops():
    df = sim_frame(T=300)
    lp = lagwise.fit_local_projections(df, "y", "x", lags=1, horizons=10)
    tab = lp.significance(level=0.90)
    assert len(tab) == 5 and set(tab.columns) >= {"estimator", "significant_at", "stops_at"}
    for _, row in tab.iterrows():
        est = [e for e in [lagwise.estimator("kernel", kernel="bartlett", lags=2),
                           lagwise.horizon_rule(),
                           lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews"),
                           lagwise.estimator("ewc"), lagwise.lag_augmented()]
               if (e.label if hasattr(e, "label") else "") == row["estimator"]]
        b = lp.bands(est[0], 0.90)
        sig = (b["ci_low"] > 0) | (b["ci_high"] < 0)
        assert row["horizons_significant"] == int(sig.sum())


# ------------------------------------------------------------------------------  bootstrap

def test_wild_bootstrap_matches_the_gaussian_sup_t_and_reports_progress():
    """The Rademacher multiplier bootstrap of the stacked HC0 influence series has covariance
    sum_t z_t z_t' (the HC0 joint covariance): at T = 2,000 its sup-t critical value is close
    to the Gaussian one (central limit theorem), within Monte Carlo error plus 0.05."""
    df = sim_frame(T=2000, seed=4)
    lp = lagwise.fit_local_projections(df, "y", "x", lags=2, horizons=8)
    calls = []
    hc0 = lagwise.estimator("hc0")
    bw = lp.bootstrap(hc0, 0.90, scheme="wild", reps=4000, seed=1,
                      progress=lambda d, t: calls.append((d, t)))
    st = lp.bands(hc0, 0.90, "sup-t").attrs["sup_t"]
    c = float(bw["sup_t_critical_value"].iloc[0])
    assert abs(c - st.raw) < 4 * (bw.attrs["sup_t_mc_se"] + st.mc_se) + 0.05
    assert calls[-1] == (4000, 4000) and len(calls) == 16
    assert (np.abs(bw["critical_value"] - stats.norm.ppf(0.95)) < 0.1).all()
    bb = lp.bootstrap(lagwise.estimator("kernel", kernel="bartlett", lags=4), 0.90,
                      scheme="block", reps=2000, seed=2)
    assert st.pointwise < float(bb["sup_t_critical_value"].iloc[0]) < st.bonferroni + 0.3
    assert (bb["sup_t_low"] < bb["ci_low"]).all()
    with pytest.raises(lagwise.SpecificationError, match="scheme"):
        lp.bootstrap(hc0, scheme="stationary")


# ------------------------------------------------------------------------------  bad input

def test_bad_inputs_raise_typed_errors_naming_the_culprit():
    df = sim_frame(T=100)
    with pytest.raises(lagwise.SpecificationError) as e:
        lagwise.fit_local_projections(df, "y", "x", lags=4, horizons=60)
    assert e.value.H == 60 and e.value.T == 100 and e.value.horizon == 60
    assert "H = 60" in str(e.value) and "T = 100" in str(e.value) and "use H <= 46" in str(e.value)
    lagwise.fit_local_projections(df, "y", "x", lags=4, horizons=46)     # the limit is accepted

    with pytest.raises(lagwise.SpecificationError) as e:
        lagwise.fit_local_projections(df.assign(s=3.0), "y", "s", lags=2, horizons=4)
    assert e.value.column == "s" and "'s'" in str(e.value) and "constant" in str(e.value)

    gap = df.drop(df.index[37])
    with pytest.raises(lagwise.DataError) as e:
        lagwise.fit_local_projections(gap, "y", "x", lags=2, horizons=4)
    assert "gaps" in str(e.value) and str(df.index[37].date()) in str(e.value)

    with pytest.raises(lagwise.SpecificationError) as e:
        lagwise.fit_local_projections(df, "y", "x", controls=["c", "y"], lags=2, horizons=4)
    assert e.value.column == "y" and "also a control" in str(e.value)

    with pytest.raises(lagwise.SpecificationError) as e:
        lagwise.fit_local_projections(df, "y", "y", lags=2, horizons=4)
    assert e.value.column == "y"

    hole = df.copy()
    hole.iloc[50, hole.columns.get_loc("c")] = np.nan
    with pytest.raises(lagwise.DataError) as e:
        lagwise.fit_local_projections(hole, "y", "x", ["c"], lags=2, horizons=4)
    assert e.value.column == "c" and "1994-03-01" in str(e.value)

    with pytest.raises(lagwise.SpecificationError) as e:
        lagwise.fit_local_projections(df, "y", "nope", lags=2, horizons=4)
    assert e.value.column == "nope"
    with pytest.raises(lagwise.SpecificationError, match="whole number"):
        lagwise.fit_local_projections(df, "y", "x", lags=1.5)
    with pytest.raises(lagwise.SpecificationError, match="no horizon"):
        lagwise.fit_local_projections(df, "y", "x", horizons=4).horizon(5)
    shuffled = df.iloc[::-1]
    with pytest.raises(lagwise.DataError, match="increasing order"):
        lagwise.fit_local_projections(shuffled, "y", "x")
    with pytest.raises(lagwise.SpecificationError, match="band kind"):
        lagwise.fit_local_projections(df, "y", "x").bands(kind="simultaneous")


@settings(max_examples=20, deadline=None)
@given(T=hs.integers(8, 60), H=hs.integers(0, 40), p=hs.integers(0, 4),
       seed=hs.integers(0, 1000), const=hs.booleans())
def test_any_input_gives_a_result_or_a_typed_error(T, H, p, seed, const):
    """Fuzz: odd sample sizes, horizons and lags give finite results or a typed error."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(rng.standard_normal((T, 2)), columns=["x", "y"],
                      index=pd.date_range("2000-01-31", periods=T, freq="ME"))
    if const:
        df["x"] = 1.0
    try:
        lp = lagwise.fit_local_projections(df, "y", "x", lags=p, horizons=H)
    except (lagwise.SpecificationError, lagwise.DataError):
        return
    assert 2 * (T - p - H) >= T
    t = lp.irf(lagwise.estimator("hc0"))
    assert np.isfinite(t["estimate"]).all() and (t["std_error"][np.isfinite(t["std_error"])]
                                                 >= 0).all()
