"""Panel IV (`fit_panel_iv`): outside checks named beside each assertion.

* linearmodels 7.1 `IV2SLS` / `IVGMM` on the data demeaned by the same within transformation
  (its own demeaning is not used: the within transformation is ours, the IV fit and covariance
  are compared). Knobs: `cov_type="clustered"`, `clusters=` one or two columns,
  `debiased=False` against our `small_sample=False` (no G/(G-1)(N-1)/(N-K) factor on either side;
  with the factor the two differ only by K, which counts absorbed effects here), coefficients
  and standard errors to 1e-8;
* `fit_iv` on the same panel with no effects (the same rows, so everything must agree);
* the IV machinery's own checks (test_reference_iv.py) carry over to strength, J and AR."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.engine.models.iv_strength import RANK_F
from lagwise.engine.models.within import within

pytest.importorskip("linearmodels")


def panel_iv_frame(seed=0, G=40, T=12, drop=0.1):
    rng = np.random.default_rng(seed)
    e = np.repeat(np.arange(G), T)
    t = np.tile(np.arange(T), G)
    keep = rng.random(e.size) >= drop
    keep[::T] = True
    e, t = e[keep], t[keep]
    n = e.size
    a = rng.normal(size=G)[e]
    d = rng.normal(size=T)[t]
    z1 = rng.normal(size=n) + 0.5 * a
    z2 = rng.normal(size=n) + 0.3 * d
    u = rng.normal(size=n) + rng.normal(size=G)[e] + 0.5 * d
    x = 0.8 * z1 + 0.5 * z2 + 0.5 * u + a + rng.normal(size=n)
    w = rng.normal(size=n) + 0.2 * a
    y = 1.0 + 0.5 * x + 0.3 * w + a + d + u
    return pd.DataFrame({"firm": e, "year": t, "y": y, "x": x, "w": w, "z1": z1, "z2": z2,
                         "region": e % 7})


def demeaned(df, effects):
    cols = ["x", "w", "z1", "z2", "y"]
    codes_e = pd.factorize(df.firm, sort=True)[0]
    codes_t = pd.factorize(df.year, sort=True)[0]
    out = within(df[cols].to_numpy(), codes_e, codes_t, codes_e.max() + 1,
                 codes_t.max() + 1, effects).values
    return pd.DataFrame(out, columns=cols, index=df.index)


@pytest.mark.parametrize("effects", [("entity",), ("time",), ("entity", "time")])
def test_panel_iv_equals_linearmodels_on_demeaned_data(effects):
    # source: linearmodels 7.1 IV2SLS on the demeaned data; clustered by entity, by time, both
    from linearmodels.iv import IV2SLS
    df = panel_iv_frame(seed=1)
    fit = lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], entity="firm",
                               time="year", effects=effects)
    dm = demeaned(df, effects)
    clusters = {"entity": df[["firm"]], "time": df[["year"]], "both": df[["firm", "year"]]}
    for by, cl in clusters.items():
        lm = IV2SLS(dm.y, dm[["w"]], dm[["x"]], dm[["z1", "z2"]]).fit(
            cov_type="clustered", clusters=cl, debiased=False)
        res = fit.infer(lagwise.estimator("cluster", by=by, small_sample=False))
        np.testing.assert_allclose(fit.params[["x", "w"]], lm.params[["x", "w"]], rtol=1e-10)
        np.testing.assert_allclose(res.table.std_error[["x", "w"]], lm.std_errors[["x", "w"]],
                                   rtol=1e-8, err_msg=by)
    assert fit.df_resid == fit.nobs - 2 - fit.panel.absorbed


def test_panel_gmm_equals_linearmodels_ivgmm_with_clustered_weights():
    # source: linearmodels 7.1 IVGMM(weight_type="clustered", clusters=entity, debiased=False)
    # two-step on demeaned data: the weighting S is CR1 by entity without the factor (from the
    # 2SLS residuals); its clustered covariance is the GMM sandwich with S recomputed at the
    # two-step residuals
    from linearmodels.iv import IVGMM
    df = panel_iv_frame(seed=2)
    est = lagwise.estimator("cluster", by="entity", small_sample=False)
    fit = lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], entity="firm",
                               time="year", effects="entity", method="two-step", weight=est)
    dm = demeaned(df, ("entity",))
    lm = IVGMM(dm.y, dm[["w"]], dm[["x"]], dm[["z1", "z2"]], weight_type="clustered",
               clusters=df.firm).fit(cov_type="clustered", clusters=df.firm, debiased=False,
                                     iter_limit=2)
    np.testing.assert_allclose(fit.params[["x", "w"]], lm.params[["x", "w"]], rtol=1e-8)
    # linearmodels re-estimates S at the two-step residuals: our general sandwich with
    # `long_run=` (our own table under the weighting estimator uses the weighting's S)
    general = lagwise.infer(fit, est, long_run=est.long_run(fit))
    np.testing.assert_allclose(general.table.std_error[["x", "w"]],
                               lm.std_errors[["x", "w"]], rtol=1e-7)


def test_panel_iv_without_effects_equals_fit_iv():
    # source: fit_iv (checked against linearmodels in test_reference_iv.py) on the same rows
    df = panel_iv_frame(seed=3)
    a = lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], entity="firm",
                             time="year", clusters="region")
    b = lagwise.fit_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], clusters="region")
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-12)
    for est in ("classical", "hc1"):
        np.testing.assert_allclose(a.infer(est).table.std_error, b.infer(est).table.std_error,
                                   rtol=1e-10)
    for c in ("cr1", "cr2", "cr3"):
        e = lagwise.estimator("cluster", by="region", correction=c)
        np.testing.assert_allclose(a.infer(e).table.std_error, b.infer(e).table.std_error,
                                   rtol=1e-10)
    np.testing.assert_allclose(a.j_test("hc0").statistic, b.j_test("hc0").statistic,
                               rtol=1e-10)


def test_every_panel_estimator_strength_j_and_anderson_rubin_under_clustering():
    df = panel_iv_frame(seed=4)
    fit = lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], entity="firm",
                               time="year", effects="entity", clusters="region")
    comp = fit.compare()
    names = set(comp.estimator)
    for want in ("Clustered by entity", "Clustered by time", "Clustered by entity and time",
                 "Clustered by region, CR2", "Driscoll-Kraay, Bartlett, Andrews (1991) "
                 "bandwidth"):
        assert want in names, want
    assert any(n.startswith("Entity clusters + Bartlett") for n in names)
    assert comp[comp.family.isin(["cluster", "driscoll_kraay", "cluster_kernel"])] \
        .std_error.notna().all()
    est = lagwise.estimator("cluster", by="entity")
    fs = fit.first_stage(est)
    assert fs.estimator == "Clustered by entity"
    assert fs.strength["effective F"]["value"] > 10
    assert np.isfinite(fs.strength[RANK_F]["value"])
    # with one endogenous regressor the cluster-robust KP Wald F is the robust first-stage F
    np.testing.assert_allclose(fs.strength[RANK_F]["value"],
                               fs.table.loc["x", "robust_f"], rtol=1e-6)
    j = fit.j_test(est)
    assert j.df == 1 and "Clustered by entity" in j.s_from
    ar = fit.anderson_rubin("x", est)
    lo, hi = ar.intervals[0]
    assert lo < fit.params["x"] < hi and ar.estimator == "Clustered by entity"
    assert ar.p_value(lo - 1e-6 * (hi - lo)) < 0.05 < ar.p_value(0.5 * (lo + hi))
    # the GMM bandwidth sweep on the panel: two-step along the Driscoll-Kraay bandwidth
    gmm = fit.two_step(lagwise.estimator("driscoll_kraay", bandwidth=2.0))
    assert type(gmm) is type(fit) and gmm.panel is fit.panel
    sw = gmm.sweep_axis(lagwise.estimator("driscoll_kraay", bandwidth=2.0), [1.0, 2.0, 4.0])
    assert np.isfinite(sw.std_error).all() and np.isfinite(sw.extras["j_stat"]).all()
    mid = fit.two_step(lagwise.estimator("driscoll_kraay", bandwidth=2.0))
    np.testing.assert_allclose(sw.estimate[0, 1], mid.beta, rtol=1e-10)
    assert lagwise.kind_of(fit).name == "panel-iv"
    assert "df N - K" in lagwise.model_line(fit)


def test_panel_iv_bad_inputs_are_typed_errors():
    df = panel_iv_frame(seed=5)
    with pytest.raises(lagwise.SpecificationError, match="'z1' is also a regressor"):
        lagwise.fit_panel_iv(df, "y", ["x", "z1"], ["x"], ["z1"], entity="firm", time="year")
    with pytest.raises(lagwise.SpecificationError, match="absorbed"):
        lagwise.fit_panel_iv(df.assign(c=df.firm * 2.0), "y", ["x", "c"], ["x"], ["z1"],
                             entity="firm", time="year", effects="entity")
    with pytest.raises(lagwise.SpecificationError, match="at least as many excluded"):
        lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x", "w"], ["z1"], entity="firm",
                             time="year")
    fit = lagwise.fit_panel_iv(df, "y", ["x", "w"], ["x"], ["z1", "z2"], entity="firm",
                               time="year")
    with pytest.raises(lagwise.SpecificationError, match="Fama-MacBeth"):
        fit.fama_macbeth()
