"""The wild cluster bootstrap. Outside sources, named beside each check: brute-force loops that
refit the model for every sign vector (the definition of the restricted wild cluster bootstrap,
Cameron, Gelbach & Miller 2008; two-way: MacKinnon, Nielsen & Webb 2021; WRE: Davidson &
MacKinnon 2010), `wildboottest` 0.3.2 from PyPI, linearmodels 7.1 for the IV t statistic,
separate bootstrap runs at each null for the interval by inversion."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.engine.studies import wild_bootstrap as wb
from tests.test_few_clusters import dummies, make_panel, random_frame


def brute_force_tstars(X, y, cl, j, null, signs, kfac, cl2=None, boot_codes=None):
    """Refit for every sign vector: restricted fit (b_j = null) by least squares of
    y - null x_j on the other columns, y* = X b~ + u~ o v, refit, CR1 t (two-way: V1 + V2 - V12,
    each term its own G/(G-1)(N-1)/(N-K))."""
    n, k = X.shape
    others = [i for i in range(k) if i != j]
    g = np.linalg.lstsq(X[:, others], y - null * X[:, j], rcond=None)[0]
    bt = np.zeros(k)
    bt[others], bt[j] = g, null
    ut = y - X @ bt
    M = np.linalg.pinv(X.T @ X)
    codes = pd.factorize(cl)[0]
    dims = [(codes, 1.0)]
    if cl2 is not None:
        c2 = pd.factorize(cl2)[0]
        dims += [(c2, 1.0), (pd.factorize(codes * 10_000 + c2)[0], -1.0)]
    boot = codes if boot_codes is None else pd.factorize(boot_codes)[0]
    out = []
    for v in signs:
        ys = X @ bt + ut * np.asarray(v)[boot]
        bs = np.linalg.lstsq(X, ys, rcond=None)[0]
        h = (X @ M[:, j]) * (ys - X @ bs)
        var = 0.0
        for cd, sg in dims:
            G = cd.max() + 1
            sc = np.bincount(cd, weights=h, minlength=G)
            var += sg * G / (G - 1) * (n - 1) / (n - kfac) * (sc @ sc)
        out.append((bs[j] - null) / np.sqrt(var) if var > 0 else np.sign(bs[j] - null) * np.inf)
    return np.array(out)


def frame_fit(seed, G, sizes, k):
    frame, X, y, cl = random_frame(np.random.default_rng(seed), G, sizes, k)
    return frame, X, y, cl, lagwise.fit_ols(frame, "y", [f"x{j}" for j in range(1, k)],
                                            clusters="g")


def test_enumeration_equals_a_refit_loop_over_every_sign_vector():
    # source: definition of the WCR bootstrap (Cameron, Gelbach & Miller 2008), by refitting
    # the model for all 2^8 sign vectors
    frame, X, y, cl, fit = frame_fit(11, 8, [3, 5, 8, 10, 12, 20, 30, 40], 3)
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="g", null=0.2, reps=999, seed=5,
                                       keep_t=True)
    assert r.enumerated and r.reps == 256
    bf = brute_force_tstars(X, y, cl, 1, 0.2, wb.enumerate_signs(8, 0, 256).T, 3)
    np.testing.assert_allclose(r.t_star, bf, rtol=1e-9)
    np.testing.assert_allclose(r.t_stat, fit.infer(lagwise.estimator("cluster", by="g"))
                               .table.loc["x1", "t_stat"] - 0.2 / r.std_error, rtol=1e-10)
    # the share of |t*| >= |t|; the v = +-1 replications tie exactly and count
    assert r.p_value == np.mean(np.abs(bf) >= abs(r.t_stat) * (1 - 1e-9))
    assert np.sum(np.isclose(np.abs(bf), abs(r.t_stat), rtol=1e-12)) == 2


@pytest.mark.parametrize("effects,by", [(("entity",), "entity"), (("time",), "entity"),
                                        (("entity", "time"), "industry")])
def test_panels_equal_a_refit_loop_with_explicit_dummies(effects, by):
    # source: WCR bootstrap refitting the explicit-dummy model for every sign vector; the fast
    # algebra on within-transformed data (with the absorbed basis when not nested) agrees
    df = make_panel(seed=3, n_ent=8, T=6)
    fit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="t", effects=effects,
                            clusters="industry")
    codes = {"entity": df.firm.to_numpy(), "time": df.t.to_numpy()}
    cl = {"entity": df.firm, "industry": df.industry}[by].to_numpy()
    D = np.hstack([dummies(codes[f], drop_first=j > 0) for j, f in enumerate(effects)])
    Xfull = np.hstack([df[["x1", "x2"]].to_numpy(), D])
    G = len(np.unique(cl))
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by=by, null=0.1, reps=max(99, 2 ** G),
                                       keep_t=True, ci=False)
    assert r.enumerated
    # the small-sample factor follows the engine's CR1 (nested effects are not counted in K)
    kfac = fit.k + 1 if fit.effects_nested_in(by) else fit.nobs - fit.df_resid
    bf = brute_force_tstars(Xfull, df.y.to_numpy(), cl, 0, 0.1,
                            wb.enumerate_signs(G, 0, 2 ** G).T, kfac)
    np.testing.assert_allclose(r.t_star, bf, rtol=1e-8)


def test_two_way_enumeration_equals_a_refit_loop():
    # source: MacKinnon, Nielsen & Webb (2021): weights by one dimension (the one with fewer
    # clusters: 6 periods), t with the two-way CR1 variance; brute force refits every draw
    df = make_panel(seed=4, n_ent=12, T=6, drop=0.0)
    fit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="t")
    X = np.column_stack([np.ones(len(df)), df[["x1", "x2"]]])
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="both", null=-0.1, reps=999, keep_t=True)
    assert r.enumerated and r.boot_by == "time" and r.reps == 64
    bf = brute_force_tstars(X, df.y.to_numpy(), df.firm.to_numpy(), 1, -0.1,
                            wb.enumerate_signs(6, 0, 64).T, 3, cl2=df.t.to_numpy(),
                            boot_codes=df.t.to_numpy())
    np.testing.assert_allclose(r.t_star, bf, rtol=1e-8)
    two = fit.infer(lagwise.estimator("cluster", by="both")).table.loc["x1"]
    np.testing.assert_allclose(r.std_error, two.std_error, rtol=1e-10)
    a = lagwise.wild_cluster_bootstrap(fit, "x1", by="both", reps=999, weights="webb", seed=9)
    b = lagwise.wild_cluster_bootstrap(fit, "x1", by="both", reps=999, weights="webb", seed=9)
    assert a.p_value == b.p_value and a.ci == b.ci


def test_unrestricted_bootstrap_centres_on_the_estimate():
    # source: WCU definition, refitting y* = X b + e o v for every sign vector: t* =
    # (b*_j - b_j) / se*
    frame, X, y, cl, fit = frame_fit(13, 7, [4, 6, 9, 12, 15, 20, 30], 2)
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="g", reps=999, restricted=False,
                                       keep_t=True, null=0.3)
    n = len(y)
    b = np.linalg.lstsq(X, y, rcond=None)[0]
    e = y - X @ b
    M = np.linalg.inv(X.T @ X)
    out = []
    for v in wb.enumerate_signs(7, 0, 128).T:
        ys = X @ b + e * v[cl]
        bs = np.linalg.lstsq(X, ys, rcond=None)[0]
        sc = np.bincount(cl, weights=(X @ M[:, 1]) * (ys - X @ bs))
        out.append((bs[1] - b[1]) / np.sqrt(7 / 6 * (n - 1) / (n - 2) * sc @ sc))
    np.testing.assert_allclose(r.t_star, out, rtol=1e-9, atol=1e-12)   # v = +-1: t* = 0
    assert r.method == "WCU"


def test_interval_by_inversion_contains_exactly_the_nulls_not_rejected():
    # source: the interval by test inversion (Roodman, MacKinnon, Nielsen & Webb 2019, 3.5):
    # p(r) on a grid recomputed by separate bootstrap runs at each null
    frame, X, y, cl, fit = frame_fit(21, 12, np.random.default_rng(0).integers(5, 40, 12), 3)
    for weights, kind in (("webb", "symmetric"), ("rademacher", "equal-tailed")):
        r = lagwise.wild_cluster_bootstrap(fit, "x2", by="g", reps=999, weights=weights,
                                           seed=4, pvalue=kind, level=0.9)
        lo, hi = r.ci
        assert r.ci_is_interval and lo < r.estimate < hi
        w = hi - lo

        def p(null):
            return lagwise.wild_cluster_bootstrap(fit, "x2", by="g", null=null, reps=999,
                                                  weights=weights, seed=4, pvalue=kind,
                                                  ci=False).p_value
        for null in np.linspace(lo - 0.6 * w, hi + 0.6 * w, 31):
            if min(abs(null - lo), abs(null - hi)) < 1e-7 * w:
                continue
            assert (lo < null < hi) == (p(null) > 0.1), (null, lo, hi)
        eps = 1e-6 * w
        assert p(lo + eps) > 0.1 >= p(lo - eps)
        assert p(hi - eps) > 0.1 >= p(hi + eps)


def test_seeds_reproduce_and_enumeration_is_seed_free():
    frame, X, y, cl, fit = frame_fit(8, 14, np.random.default_rng(1).integers(5, 30, 14), 2)
    kw = dict(by="g", reps=999, weights="mammen", keep_t=True)
    a = lagwise.wild_cluster_bootstrap(fit, "x1", seed=3, **kw)
    b = lagwise.wild_cluster_bootstrap(fit, "x1", seed=3, **kw)
    c = lagwise.wild_cluster_bootstrap(fit, "x1", seed=4, **kw)
    assert a.p_value == b.p_value and a.ci == b.ci and np.array_equal(a.t_star, b.t_star)
    assert not np.array_equal(a.t_star, c.t_star)
    nine = lagwise.fit_ols(frame.assign(h=frame.g % 9), "y", ["x1"], clusters="h")
    runs = [lagwise.wild_cluster_bootstrap(nine, "x1", by="h", reps=999, seed=s)
            for s in (0, 1, 77)]
    assert all(r.enumerated and r.reps == 512 for r in runs)
    assert len({(r.p_value, r.ci) for r in runs}) == 1
    r = lagwise.wild_cluster_bootstrap(nine, "x1", by="h", reps=999, keep_t=True, ci=False)
    np.testing.assert_allclose(r.t_star, -r.t_star[::-1], rtol=1e-10)   # v and -v
    assert r.p_value == runs[0].p_value


def test_weights_have_mean_zero_and_variance_one():
    rng = np.random.default_rng(0)
    for kind in wb.WEIGHTS:
        v = wb.draw_weights(rng, kind, 50, 20_000)
        assert abs(v.mean()) < 0.01 and abs(v.var() - 1) < 0.01
    assert set(np.unique(wb.draw_weights(rng, "webb", 10, 1000)).round(6)) == \
        set(np.round([-np.sqrt(1.5), -1, -np.sqrt(.5), np.sqrt(.5), 1, np.sqrt(1.5)], 6))


def test_bad_inputs_are_typed_errors_naming_the_value():
    frame, X, y, cl, fit = frame_fit(0, 6, [5] * 6, 2)
    one = lagwise.fit_ols(frame.assign(c=1), "y", ["x1"], clusters="c")
    for reps in (98, 10 ** 7 + 1, 999.0, True):
        with pytest.raises(lagwise.SpecificationError, match=f"got {reps!r}"):
            lagwise.wild_cluster_bootstrap(fit, "x1", by="g", reps=reps)
    with pytest.raises(lagwise.SpecificationError, match="'gaussian'"):
        lagwise.wild_cluster_bootstrap(fit, "x1", by="g", weights="gaussian")
    with pytest.raises(lagwise.SpecificationError, match="no coefficient named 'z'"):
        lagwise.wild_cluster_bootstrap(fit, "z", by="g")
    with pytest.raises(lagwise.SpecificationError, match="at least two clusters"):
        lagwise.wild_cluster_bootstrap(one, "x1", by="c")
    with pytest.raises(lagwise.SpecificationError, match="no grouping 'region'"):
        lagwise.wild_cluster_bootstrap(fit, "x1", by="region")
    with pytest.raises(lagwise.SpecificationError, match="'sometimes'"):
        lagwise.wild_cluster_bootstrap(fit, "x1", by="g", pvalue="sometimes")
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="g", reps=99, ci=False)
    assert r.enumerated and r.reps == 64


def _wildboottest(X, y, cl, B, weights, seed):
    import statsmodels.api as sm
    from wildboottest.wildboottest import wildboottest
    Xdf = pd.DataFrame(X, columns=[f"x{j}" for j in range(X.shape[1])])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = wildboottest(sm.OLS(y, Xdf), B=B, cluster=cl, param="x1", weights_type=weights,
                           impose_null=True, bootstrap_type="11", seed=seed, adj=True,
                           cluster_adj=True, parallel=False, show=False)
    return float(np.asarray(res["statistic"].iloc[0]).ravel()[0]), float(res["p-value"].iloc[0])


@pytest.mark.slow
def test_against_wildboottest_when_both_enumerate():
    # source: wildboottest 0.3.2 (PyPI): WCR11 (bootstrap_type="11": CR1 t, residuals not
    # transformed), impose_null=True, adj and cluster_adj (the CR1 factor), rademacher; with
    # 2^G < B both enumerate every sign vector. It counts |t*| > |t| strictly, we count the two
    # exact ties (v = +-1): the p-values differ by 0, 1 or 2 out of 2^G, never more
    pytest.importorskip("wildboottest")
    frame, X, y, cl, fit = frame_fit(31, 12, np.random.default_rng(2).integers(10, 60, 12), 3)
    t_w, p_w = _wildboottest(X, y, cl, 9999, "rademacher", 1)
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="g", reps=9999, ci=False, keep_t=True)
    assert r.enumerated
    np.testing.assert_allclose(r.t_stat, t_w, rtol=1e-10)
    strict = np.mean(np.abs(r.t_star) > abs(r.t_stat) * (1 + 1e-9))
    assert r.p_value == strict + 2 / 4096
    assert min(abs(p_w - strict - j / 4096) for j in range(3)) < 1e-12


@pytest.mark.slow
@pytest.mark.parametrize("weights", ["rademacher", "webb"])
def test_against_wildboottest_within_monte_carlo_error(weights):
    # source: wildboottest 0.3.2 (PyPI), B = 99,999 each, same knobs as above; the two p-values
    # come from independent draws: sd of the difference sqrt(2 p (1 - p) / B); within 4.5 sd
    pytest.importorskip("wildboottest")
    rng = np.random.default_rng(41)
    frame, X, y, cl = random_frame(rng, 20, rng.integers(5, 80, 20), 3)
    fit0 = lagwise.fit_ols(frame, "y", ["x1", "x2"], clusters="g")
    se1 = fit0.infer(lagwise.estimator("cluster", by="g")).table.loc["x1", "std_error"]
    y = y - X[:, 1] * (fit0.beta[1] - 1.6 * se1)            # t about 1.6
    frame["y"] = y
    fit = lagwise.fit_ols(frame, "y", ["x1", "x2"], clusters="g")
    t_w, p_w = _wildboottest(X, y, cl, 99_999, weights, 2)
    r = lagwise.wild_cluster_bootstrap(fit, "x1", by="g", reps=99_999, weights=weights, seed=7,
                                       ci=False)
    assert not r.enumerated
    np.testing.assert_allclose(r.t_stat, t_w, rtol=1e-10)
    sd = np.sqrt(2 * max(p_w * (1 - p_w), 1e-4) / 99_999)
    print(f"\n{weights}: t = {r.t_stat:.6f} (wildboottest {t_w:.6f}); p = {r.p_value:.5f} "
          f"(wildboottest {p_w:.5f}), Monte Carlo sd of the difference {sd:.5f}")
    assert abs(r.p_value - p_w) < 4.5 * sd


# ----------------------------------------------------------------- IV: WRE

def iv_frame(seed, G=8, sizes=None):
    rng = np.random.default_rng(seed)
    sizes = np.array(sizes if sizes is not None else rng.integers(6, 30, G))
    cl = np.repeat(np.arange(G), sizes)
    n = cl.size
    z = rng.normal(size=n)
    Wx = rng.normal(size=(n, 2)) + rng.normal(size=(G, 2))[cl]
    e = rng.normal(size=G)[cl] + rng.normal(size=n)
    y2 = Wx @ [0.7, 0.4] + 0.1 + 0.2 * z + 0.6 * e + rng.normal(size=n)
    y1 = 0.5 * y2 + 1.0 - 0.5 * z + e
    return pd.DataFrame({"y1": y1, "y2": y2, "z": z, "w1": Wx[:, 0], "w2": Wx[:, 1], "g": cl})


def test_wre_t_equals_linearmodels_and_enumeration_equals_a_refit_loop():
    # source: linearmodels 7.1 IV2SLS(...).fit(cov_type="clustered", debiased=True) for t
    # (G/(G-1)(N-1)/(N-k)); Davidson & MacKinnon (2010) WRE by refitting 2SLS for every sign
    # vector (restricted structural fit, efficient reduced form with u1~)
    from linearmodels.iv import IV2SLS
    df = iv_frame(5)
    fit = lagwise.fit_iv(df, "y1", ["y2", "z"], ["y2"], ["w1", "w2"], clusters="g")
    null = 0.3
    r = lagwise.wild_cluster_bootstrap(fit, "y2", by="g", null=null, reps=999, keep_t=True,
                                       ci=False)
    lm = IV2SLS(df.y1, df[["z"]].assign(c=1.0), df[["y2"]], df[["w1", "w2"]]).fit(
        cov_type="clustered", clusters=df.g, debiased=True)
    np.testing.assert_allclose(r.estimate, lm.params["y2"], rtol=1e-10)
    np.testing.assert_allclose(r.t_stat + null / r.std_error, lm.tstats["y2"], rtol=1e-8)
    assert r.enumerated and r.reps == 256 and r.method == "WRE"
    y1, y2, cl = df.y1.to_numpy(), df.y2.to_numpy(), df.g.to_numpy()
    n = len(y1)
    Z = np.column_stack([np.ones(n), df.z])
    W = np.column_stack([Z, df[["w1", "w2"]]])
    gam = np.linalg.lstsq(Z, y1 - null * y2, rcond=None)[0]
    u1 = y1 - null * y2 - Z @ gam
    pi = np.linalg.lstsq(np.column_stack([W, u1]), y2, rcond=None)[0][:W.shape[1]]
    u2 = y2 - W @ pi
    out = []
    for v in wb.enumerate_signs(8, 0, 256).T:
        y2s = W @ pi + u2 * v[cl]
        y1s = null * y2s + Z @ gam + u1 * v[cl]
        X = np.column_stack([y2s, Z])
        Xh = W @ np.linalg.lstsq(W, X, rcond=None)[0]
        b = np.linalg.solve(Xh.T @ Xh, Xh.T @ y1s)
        u = y1s - X @ b
        sc = np.array([Xh[cl == g].T @ u[cl == g] for g in range(8)]) @ \
            np.linalg.inv(Xh.T @ Xh)[:, 0]
        out.append((b[0] - null) / np.sqrt(8 / 7 * (n - 1) / (n - 3) * sc @ sc))
    np.testing.assert_allclose(r.t_star, out, rtol=1e-8)
    assert r.p_value == np.mean(np.abs(out) >= abs(r.t_stat) * (1 - 1e-9))


def test_wre_interval_seeds_and_refusals():
    # source: test inversion (Davidson & MacKinnon 2010, sec. 5): p just inside each bound is
    # above alpha, just outside at or below; seeds reproduce
    df = iv_frame(9, G=14)
    fit = lagwise.fit_iv(df, "y1", ["y2", "z"], ["y2"], ["w1", "w2"], clusters="g")
    kw = dict(by="g", reps=399, weights="webb", seed=2)
    r = lagwise.wild_cluster_bootstrap(fit, "y2", **kw)
    lo, hi = r.ci
    assert lo < r.estimate < hi and r.ci_is_interval
    p = lambda nl: lagwise.wild_cluster_bootstrap(fit, "y2", null=nl, ci=False,  # noqa: E731
                                                  **kw).p_value
    eps = 1e-6 * (hi - lo)
    assert p(lo + eps) > 0.05 >= p(lo - eps) and p(hi - eps) > 0.05 >= p(hi + eps)
    with pytest.raises(lagwise.SpecificationError, match="endogenous regressor 'y2', not 'z'"):
        lagwise.wild_cluster_bootstrap(fit, "z", by="g")
    with pytest.raises(lagwise.SpecificationError, match="restricted"):
        lagwise.wild_cluster_bootstrap(fit, "y2", by="g", restricted=False)
    two = lagwise.fit_iv(df.assign(w3=df.w1 ** 2), "y1", ["y2", "z", "w1"], ["y2", "w1"],
                         ["w2", "w3"], clusters="g")
    with pytest.raises(lagwise.SpecificationError, match="one endogenous regressor"):
        lagwise.wild_cluster_bootstrap(two, "y2", by="g")


def test_wre_on_a_panel_with_effects_nested_in_the_clusters_equals_explicit_dummies():
    # source: WRE refitting 2SLS with the entity dummies among the exogenous columns for every
    # sign vector: with effects inside the clusters the demeaned-data bootstrap is the same
    df = iv_frame(17, G=8, sizes=[12] * 8)
    df["firm"] = np.arange(len(df)) // 4                       # 3 firms per cluster
    df["t"] = np.arange(len(df)) % 4
    fit = lagwise.fit_panel_iv(df, "y1", ["y2", "z"], ["y2"], ["w1", "w2"], entity="firm",
                               time="t", effects="entity", clusters="g")
    r = lagwise.wild_cluster_bootstrap(fit, "y2", by="g", null=0.4, reps=999, keep_t=True,
                                       ci=False)
    D = dummies(df.firm.to_numpy())
    y1, y2, cl = df.y1.to_numpy(), df.y2.to_numpy(), df.g.to_numpy()
    Z = np.column_stack([df.z, D])
    W = np.column_stack([Z, df[["w1", "w2"]]])
    null, n = 0.4, len(y1)
    gam = np.linalg.lstsq(Z, y1 - null * y2, rcond=None)[0]
    u1 = y1 - null * y2 - Z @ gam
    pi = np.linalg.lstsq(np.column_stack([W, u1]), y2, rcond=None)[0][:W.shape[1]]
    u2 = y2 - W @ pi
    kfac = fit.k + 1                                          # nested effects: K = k + 1
    out = []
    for v in wb.enumerate_signs(8, 0, 256).T:
        y2s = W @ pi + u2 * v[cl]
        y1s = null * y2s + Z @ gam + u1 * v[cl]
        X = np.column_stack([y2s, Z])
        Xh = W @ np.linalg.lstsq(W, X, rcond=None)[0]
        b = np.linalg.lstsq(Xh, y1s, rcond=None)[0]
        u = y1s - X @ b
        sc = np.array([Xh[cl == g].T @ u[cl == g] for g in range(8)]) @ \
            np.linalg.pinv(Xh.T @ Xh)[:, 0]
        out.append((b[0] - null) / np.sqrt(8 / 7 * (n - 1) / (n - kfac) * sc @ sc))
    np.testing.assert_allclose(r.t_star, out, rtol=1e-7)
    with pytest.raises(lagwise.SpecificationError, match="not nested"):
        lagwise.wild_cluster_bootstrap(fit, "y2", by="time")
