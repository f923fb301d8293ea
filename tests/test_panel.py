"""Panel fits: structure, typed errors for bad input, and properties (hypothesis).

Outside checks are in test_reference_panel.py (linearmodels, statsmodels); here: statsmodels OLS
with entity dummies for the leverage-based HC2/HC3 under entity effects, direct sums for the
FFT route of the within-entity lag products, and invariances that must hold exactly."""


import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise
from lagwise.engine.models.panel import within_lag_products
from tests.helpers import panel_frame

common = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def fit(frame, regs=("x1", "x2"), **kw):
    return lagwise.fit_panel(frame, "y", list(regs), entity="firm", time="month", **kw)


# --------------------------------------------------------------------------- structure

def test_loader_recognises_the_panel_and_fit_panel_uses_its_report():
    frame = panel_frame(seed=1, entities=6, periods=12)
    frame["firm"] = "F" + frame.firm.astype(str)
    frame["month"] = pd.period_range("2020-01", periods=12, freq="M").to_timestamp(
        how="end").normalize()[frame.month - 1].strftime("%Y-%m-%d")
    table = lagwise.load_table(frame.to_csv(index=False).encode(), name="p.csv")
    assert table.report.panel == ("firm", "month")
    assert any("stacked panel" in line for line in table.report.lines())
    f = lagwise.fit_panel(table, "y", ["x1", "x2"])
    assert f.panel.entity == "firm" and f.panel.time == "month"
    assert isinstance(f.panel.periods, pd.DatetimeIndex) and f.panel.n_periods == 12
    assert f.residuals.index.names == ["firm", "month"]
    direct = fit(frame.assign(firm=frame.firm, month=pd.to_datetime(frame.month)))
    np.testing.assert_allclose(f.beta, direct.beta, rtol=1e-12)


def test_unbalanced_panel_with_gaps_is_reported():
    frame = panel_frame(seed=2, entities=20, periods=15, drop=0.2)
    f = fit(frame)
    assert not f.panel.balanced and f.panel.entities_with_gaps > 0
    text = " ".join(f.sample.notes)
    assert "unbalanced" in text and "skip periods" in text


def test_multiindex_frame_is_read_like_columns():
    frame = panel_frame(seed=3, entities=8, periods=10)
    a = fit(frame)
    b = lagwise.fit_panel(frame.set_index(["firm", "month"]), "y", ["x1", "x2"])
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-13)


def test_effects_description_states_the_degrees_of_freedom():
    frame = panel_frame(seed=4, entities=12, periods=10, drop=0.1)
    f = fit(frame, effects=("entity", "time"))
    text = f.describe_method()
    assert "entity fixed effects and time fixed effects" in text
    assert f"{f.panel.absorbed} degrees of freedom absorbed" in text
    assert f.df_resid == f.nobs - 2 - (12 + 10 - 1)
    assert "alternating projections" in text and f.panel.iterations > 0


# --------------------------------------------------------------------------- typed errors

def test_bad_panel_input_gives_typed_actionable_errors():
    frame = panel_frame(seed=5, entities=10, periods=8)
    with pytest.raises(lagwise.SpecificationError, match="no entity column named 'company'"):
        lagwise.fit_panel(frame, "y", ["x1"], entity="company", time="month")
    with pytest.raises(lagwise.SpecificationError, match="name the panel's entity"):
        lagwise.fit_panel(frame, "y", ["x1"])
    bad = frame.assign(firm=frame.firm + 0.5)
    with pytest.raises(lagwise.DataError, match="entity column 'firm' holds numbers with "
                                                "fractions .*row 1"):
        fit(bad)
    bad = frame.astype({"month": str})
    bad.loc[3, "month"] = "soon"
    with pytest.raises(lagwise.DataError, match="time column 'month' .*'soon' in row 4"):
        fit(bad)
    with pytest.raises(lagwise.SpecificationError, match="one entity only"):
        fit(frame[frame.firm == 100])
    with pytest.raises(lagwise.SpecificationError, match="one period only"):
        fit(frame[frame.month == 1])
    dup = pd.concat([frame, frame.iloc[[5]]], ignore_index=True)
    with pytest.raises(lagwise.DataError, match="entity 100 has two rows for period 6"):
        fit(dup)
    firm_level = frame.assign(size=frame.firm * 2.0)
    with pytest.raises(lagwise.SpecificationError, match="'size' does not vary within "
                                                         "entities: it is absorbed"):
        fit(firm_level, ["x1", "size"], effects="entity")
    with pytest.raises(lagwise.SpecificationError, match="effects must be"):
        fit(frame, effects="industry")


def test_too_few_clusters_are_typed_errors():
    frame = panel_frame(seed=6, entities=3, periods=30, k=4)
    f = fit(frame, ["x1", "x2", "x3", "x4"])
    with pytest.raises(lagwise.EstimationError, match="more clusters than coefficients: 3 "
                                                      "clusters, 5 coefficients"):
        f.infer(lagwise.estimator("cluster", by="entity"))
    # the comparison keeps the row with the reason instead of a number
    rows = f.compare()
    row = rows[(rows.estimator == "Clustered by entity") & (rows.term == "x1")].iloc[0]
    assert np.isnan(row.std_error) and "more clusters than coefficients" in row.note
    # time-series estimators refuse stacked rows, naming the panel alternatives
    with pytest.raises(lagwise.SpecificationError, match="not one time series"):
        f.infer(lagwise.estimator("kernel"))
    with pytest.raises(lagwise.SpecificationError, match="needs a panel fit"):
        lagwise.fit_ols(frame, "y", ["x1"]).infer(lagwise.estimator("driscoll_kraay"))


# --------------------------------------------------------------------------- outside checks

def test_hc2_hc3_with_entity_effects_match_statsmodels_dummies():
    """statsmodels OLS on entity dummies (the leverage includes the dummies: h = q'q + 1/T_i)."""
    frame = panel_frame(seed=7, entities=15, periods=12, drop=0.2)
    f = fit(frame, effects="entity")
    dummies = pd.get_dummies(frame.firm, dtype=float)
    X = np.column_stack([frame[["x1", "x2"]].to_numpy(), dummies.to_numpy()])
    for kind in ("HC1", "HC2", "HC3"):
        res = sm.OLS(frame.y.to_numpy(), X).fit(cov_type=kind)
        np.testing.assert_allclose(f.infer(kind.lower()).cov.to_numpy(),
                                   res.cov_params()[:2, :2], rtol=1e-8)
        np.testing.assert_allclose(f.beta, res.params[:2], rtol=1e-10)


def test_within_lag_products_equal_direct_sums():
    frame = panel_frame(seed=8, entities=9, periods=14, drop=0.3)
    f = fit(frame)
    g = f.working_contributions
    e, t = f.panel.entity_codes, f.panel.time_codes
    w = within_lag_products(g, e, t, f.panel.n_entities, f.panel.n_periods)
    direct = np.zeros_like(w)
    where = {(a, b): i for i, (a, b) in enumerate(zip(e, t))}
    for (a, b), i in where.items():
        for j in range(f.panel.n_periods):
            other = where.get((a, b - j))
            if other is not None:
                direct[j] += np.outer(g[i], g[other])
    np.testing.assert_allclose(w, direct, atol=1e-12 * np.abs(direct).max())


# --------------------------------------------------------------------------- properties

panel_args = dict(seed=st.integers(0, 10_000), entities=st.integers(4, 25),
                  periods=st.integers(6, 40), drop=st.sampled_from([0.0, 0.15]))
FAMILIES = [("cluster", {"by": "entity"}), ("cluster", {"by": "time"}),
            ("cluster", {"by": "both"}), ("hc1", {}), ("classical", {}),
            ("driscoll_kraay", {"kernel": "bartlett", "bandwidth": "andrews"}),
            ("driscoll_kraay", {"kernel": "quadratic_spectral", "bandwidth": 3.5}),
            ("cluster_kernel", {"kernel": "parzen", "bandwidth": 4.0})]


@common
@given(**panel_args, effects=st.sampled_from([(), ("entity",), ("time",)]))
def test_row_order_does_not_matter(seed, entities, periods, drop, effects):
    frame = panel_frame(seed=seed, entities=entities, periods=periods, drop=drop)
    shuffled = frame.sample(frac=1.0, random_state=seed)
    a, b = fit(frame, effects=effects), fit(shuffled, effects=effects)
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-9, atol=1e-12)
    for name, params in FAMILIES:
        est = lagwise.estimator(name, **params)
        try:
            ra = a.infer(est)
        except lagwise.LagwiseError as exc:
            with pytest.raises(type(exc)):
                b.infer(est)
            continue
        np.testing.assert_allclose(b.infer(est).table.std_error, ra.table.std_error,
                                   rtol=1e-8, err_msg=name)


@common
@given(**panel_args, kernel=st.sampled_from(list(lagwise.KERNELS)),
       small=st.booleans())
def test_driscoll_kraay_sweep_equals_infer(seed, entities, periods, drop, kernel, small):
    f = fit(panel_frame(seed=seed, entities=entities, periods=periods, drop=drop))
    values = [0.5, 2.0, 3.7, float(periods) / 2]
    sw = f.sweep(kernels=[kernel], bandwidths=values, small_sample=small)
    for i, b in enumerate(values):
        est = lagwise.estimator("driscoll_kraay", kernel=kernel, bandwidth=b, small_sample=small)
        if sw.status[0, i] == "collapsed":
            with pytest.raises(lagwise.EstimationError):
                f.infer(est)
            continue
        res = f.infer(est)
        np.testing.assert_allclose(sw.std_error[0, i], res.table.std_error, rtol=1e-9)
        fb = sw.critical_values(0.95, "fixed-b")[0, i]
        try:
            expected = f.infer(est, reference="fixed-b").critical_value
        except lagwise.LawUnavailable:
            assert np.isnan(fb)
            continue
        assert fb == pytest.approx(expected)


@common
@given(**panel_args)
def test_two_way_is_psd_after_repair_and_flags_it(seed, entities, periods, drop):
    f = fit(panel_frame(seed=seed, entities=entities, periods=periods, drop=drop, firm=0.0,
                        time=0.0))
    res = f.infer(lagwise.estimator("cluster", by="both"))
    s = res.long_run.S
    assert np.linalg.eigvalsh(s).min() >= -1e-12 * np.abs(s).max()
    raw = (f.group_sums("entity").T @ f.group_sums("entity")
           * lagwise.engine.covariance.cluster.cluster_factor(f, f.panel.n_entities)
           + f.group_sums("time").T @ f.group_sums("time")
           * lagwise.engine.covariance.cluster.cluster_factor(f, f.panel.n_periods)
           - f.outer() * f.nobs / f.df_resid) / f.nobs
    repaired = np.linalg.eigvalsh(raw).min() < -1e-12 * np.abs(raw).max()
    assert ("psd_repaired" in res.flags) == repaired


def test_fama_macbeth_sweep_moves_along_the_slope_series():
    frame = panel_frame(seed=9, entities=30, periods=60, rho=0.7)
    fm = lagwise.fit_fama_macbeth(frame, "y", ["x1", "x2"], entity="firm", time="month")
    assert fm.nobs == 60 and fm.slopes.shape == (60, 3)
    sw = fm.sweep(kernels=["bartlett"], bandwidths=[1, 4, 9])
    for i, b in enumerate([1, 4, 9]):
        res = fm.infer(lagwise.estimator("kernel", bandwidth=float(b)))
        np.testing.assert_allclose(sw.std_error[0, i], res.table.std_error, rtol=1e-10)
    # the classical variance is the slopes' sample variance over the number of periods
    np.testing.assert_allclose(fm.infer("classical").table.std_error,
                               fm.slopes.std(ddof=1) / np.sqrt(60), rtol=1e-12)
    assert fm.infer("classical").law.df == 59
    with pytest.raises(lagwise.EstimationError, match="HC3 needs the leverage"):
        fm.infer("hc3")


# --------------------------------------------------------------------------- diagnostics, sweep

def test_pesaran_cd_equals_its_definition_and_is_standard_normal_without_dependence():
    from lagwise.engine.studies.panel_diagnostics import pesaran_cd
    frame = panel_frame(seed=40, entities=12, periods=20, drop=0.2)
    f = fit(frame)
    p = f.panel
    cd, used, pairs = pesaran_cd(f.resid, p.entity_codes, p.time_codes, p.n_entities,
                                 p.n_periods)
    # the definition, pair by pair (Pesaran 2004): correlations over common periods of the
    # entity-demeaned residuals
    e = pd.Series(f.resid, index=f.index)
    e = e - e.groupby(level=0).transform("mean")
    wide = e.unstack(level=0)
    total, count = 0.0, 0
    cols = list(wide.columns)
    for a in range(len(cols)):
        for b in range(a + 1, len(cols)):
            both = wide[[cols[a], cols[b]]].dropna()
            if len(both) < 3:
                continue
            x, y = both.iloc[:, 0].to_numpy(), both.iloc[:, 1].to_numpy()
            total += np.sqrt(len(both)) * (x @ y) / np.sqrt((x @ x) * (y @ y))
            count += 1
    assert pairs == count
    assert cd == pytest.approx(np.sqrt(2.0 / (used * (used - 1))) * total, rel=1e-10)
    # simulation with known truth: independent entities give CD close to N(0,1)
    rng = np.random.default_rng(41)
    draws = []
    for _ in range(200):
        r = rng.standard_normal(30 * 25)
        draws.append(pesaran_cd(r, np.repeat(np.arange(30), 25), np.tile(np.arange(25), 30),
                                30, 25)[0])
    assert abs(np.mean(draws)) < 0.25 and 0.8 < np.std(draws) < 1.2


def test_wooldridge_test_rejects_serial_correlation_and_not_its_absence():
    rng = np.random.default_rng(42)
    rejections = {0.0: 0, 0.5: 0}
    for rho in rejections:
        for _ in range(60):
            n_e, n_t = 60, 10
            e = np.repeat(np.arange(n_e), n_t)
            t = np.tile(np.arange(n_t), n_e)
            u = np.zeros((n_e, n_t))
            shocks = rng.standard_normal((n_e, n_t))
            u[:, 0] = shocks[:, 0]
            for s in range(1, n_t):
                u[:, s] = rho * u[:, s - 1] + shocks[:, s]
            x = rng.standard_normal(n_e * n_t) + rng.standard_normal(n_e)[e]
            y = x + rng.standard_normal(n_e)[e] + u.ravel()
            frame = pd.DataFrame({"firm": e, "month": t, "x": x, "y": y})
            f = lagwise.fit_panel(frame, "y", ["x"], entity="firm", time="month",
                                  effects="entity")
            from lagwise.engine.studies.panel_diagnostics import wooldridge_serial
            rejections[rho] += wooldridge_serial(f)[3] < 0.05
    assert rejections[0.0] <= 9            # about 5% of 60 (3), Monte Carlo s.e. about 1.7
    assert rejections[0.5] >= 50


def test_panel_diagnostics_and_sweep_on_the_demo():
    from lagwise.engine.studies.panel_diagnostics import diagnose_panel
    from lagwise.engine.studies.panel_sensitivity import panel_sweep
    table = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    f = lagwise.fit_panel(table, "exret", ["book_to_market", "fleet_age", "charter_cover"])
    rep = diagnose_panel(f)
    assert set(rep.tests.test) >= {"Pesaran CD", "Wooldridge serial correlation",
                                   "Period means of residuals", "Entity means of residuals"}
    assert any("correlated across entities within a period" in s for s in rep.reading)
    sw = panel_sweep(f, values=[1.0, 3.0, 8.0])
    assert sw.extras["curve_group"][-1] == "Fama-MacBeth" and len(sw.labels) == \
        len(lagwise.KERNELS) + 1
    fm = f.fama_macbeth()
    for i, b in enumerate([1.0, 3.0, 8.0]):
        res = fm.infer(lagwise.estimator("kernel", bandwidth=b, small_sample=True))
        np.testing.assert_allclose(sw.std_error[-1, i], res.table.std_error[f.terms],
                                   rtol=1e-10)
        np.testing.assert_allclose(sw.estimate[-1, i], fm.beta, rtol=1e-12)
        dk = f.infer(lagwise.estimator("driscoll_kraay", kernel="parzen", bandwidth=b))
        np.testing.assert_allclose(sw.std_error[1, i], dk.table.std_error, rtol=1e-10)


def test_fama_macbeth_slopes_equal_per_period_least_squares_in_any_row_order():
    """The per-period slopes from all periods' cross-products at once (semi-normal equations
    with a refinement step) equal numpy's least squares period by period, whether the rows are
    a balanced grid in (entity, period) order, shuffled, or unbalanced; a nearly collinear
    period goes through QR, a period with too few rows is skipped."""
    frame = panel_frame(seed=11, entities=30, periods=12)
    near = frame.month == 3                      # nearly collinear regressors in one period
    frame.loc[near, "x2"] = frame.loc[near, "x1"] * 2.0 + 1e-6 * np.arange(near.sum())
    few = frame[(frame.month != 5) | (frame.firm < 102)]      # two rows in period 5
    for data in (frame, frame.sample(frac=1.0, random_state=1), few,
                 few.sample(frac=1.0, random_state=2)):
        fm = lagwise.fit_fama_macbeth(data, "y", ["x1", "x2"], entity="firm", time="month")
        for month, group in data.groupby("month"):
            X = np.column_stack([np.ones(len(group)), group[["x1", "x2"]].to_numpy()])
            if len(group) < 3:
                assert month not in fm.slopes.index
                continue
            expected = np.linalg.lstsq(X, group.y.to_numpy(), rcond=None)[0]
            np.testing.assert_allclose(fm.slopes.loc[month].to_numpy(), expected,
                                       rtol=1e-7 if month == 3 else 1e-10)


def test_duplicate_rows_are_found_in_any_row_order():
    frame = panel_frame(seed=5, entities=10, periods=8)
    dup = pd.concat([frame, frame.iloc[[5]]], ignore_index=True).sample(frac=1.0,
                                                                         random_state=3)
    second = int(np.flatnonzero((dup.firm == 100).to_numpy() & (dup.month == 6).to_numpy())[1])
    with pytest.raises(lagwise.DataError, match=f"entity 100 has two rows for period 6 "
                                                f"\\(second at row {second + 1}\\)"):
        fit(dup)
