"""The chart and the table are the same estimator (issue 21, item 11): every point of every
sweep equals the coefficient table (and the comparison's row) for the same setting to 1e-10,
on a grid for each model kind: least squares (every kernel, small-sample factor, prewhitening,
EWC's B, the VAR order), IV by 2SLS, two-step GMM (kernel and EWC axes), panels (Driscoll-Kraay
for every kernel, Fama-MacBeth's curve, entity clusters + time kernel) and Fama-MacBeth fits.
A chart drawn for iterated GMM shows two-step curves, named as such, and says which S they use.
"""

from __future__ import annotations

import numpy as np
import pytest

import lagwise
from lagwise.app import derived as callbacks, figures
from lagwise.app.state import STORE
from lagwise.engine.inference.compare import compare
from lagwise.engine.studies.panel_sensitivity import panel_sweep

RTOL = 1e-10


def same(point_se, point_t, res, what):
    table = res.table
    np.testing.assert_allclose(point_se, table.std_error.to_numpy(), rtol=RTOL, atol=0,
                               err_msg=what)
    np.testing.assert_allclose(point_t, table.t_stat.to_numpy(), rtol=RTOL, atol=0,
                               err_msg=what)


def check_sweep(model, sweep, table_for, what):
    """Every available point of `sweep` against the table `table_for(curve, value)`."""
    checked = 0
    for c, est in enumerate(sweep.estimators):
        for i, v in enumerate(sweep.values):
            if sweep.status[c, i] in ("collapsed", "unavailable"):
                continue
            res = table_for(c, est, v)
            same(sweep.std_error[c, i], sweep.t_stat[c, i], res, f"{what}, curve {c}, {v}")
            np.testing.assert_allclose(sweep.estimate[c, i], res.table.estimate.to_numpy(),
                                       rtol=RTOL, err_msg=what)
            checked += 1
    assert checked >= len(sweep.estimators)


@pytest.fixture(scope="module")
def table():
    return lagwise.load_table(lagwise.demo_file())


@pytest.fixture(scope="module")
def ols(table):
    return lagwise.fit_ols(table, "exret_1m", ["rate_capacity", "credit_spread"])


B_GRID = [1.0, 2.5, 7.0, 30.0, 120.0, 420.0]


@pytest.mark.parametrize("options", [{}, {"small_sample": True}, {"prewhiten": True},
                                     {"repair": False}])
def test_ols_kernel_sweeps_equal_the_table(ols, options):
    grid = [b for b in B_GRID if b < 420] if options.get("prewhiten") else B_GRID
    ests = [lagwise.estimator("kernel", kernel=k, bandwidth=1.0, **options)
            for k in lagwise.KERNELS]
    sw = lagwise.sweep(ols, ests, grid)
    check_sweep(ols, sw, lambda c, e, v: ols.infer(e.at(float(v))), f"OLS kernel {options}")


@pytest.mark.parametrize("name", ["ewc", "var"])
def test_ols_sweeps_along_other_axes_equal_the_table(ols, name):
    est = lagwise.estimator(name)
    grid = est.family.axis.grid(ols)[:8]
    sw = lagwise.sweep(ols, [est], grid)
    check_sweep(ols, sw, lambda c, e, v: ols.infer(e.at(int(v))), f"OLS {name}")


@pytest.fixture(scope="module")
def iv(table):
    return lagwise.fit_iv(table, "rate_growth", ["utilization_survey", "credit_spread"],
                          ["utilization_survey"], ["port_congestion", "scrap_rate"])


def test_2sls_sweep_equals_the_table(iv):
    ests = [lagwise.estimator("kernel", kernel=k, bandwidth=1.0) for k in lagwise.KERNELS]
    sw = iv.sweep_axis(ests, B_GRID[:-1])
    check_sweep(iv, sw, lambda c, e, v: iv.infer(e.at(float(v))), "2SLS")


def test_two_step_gmm_sweep_equals_the_table_and_the_comparison(iv):
    start = lagwise.estimator("kernel", kernel="parzen", bandwidth=5.0)
    ests = [lagwise.estimator("kernel", kernel=k, bandwidth=1.0) for k in lagwise.KERNELS]
    sw = iv.two_step(start).sweep_axis(ests, [1.0, 3.0, 7.5, 20.0, 60.0])

    def table_for(c, e, v):
        point = e.at(float(v))
        shown = iv.two_step(point)
        res = shown.infer(point)
        # the weighting's own S, the same as infer_weighting and the comparison's row
        same(res.table.std_error.to_numpy(), res.table.t_stat.to_numpy(),
             shown.infer_weighting(), "infer_weighting")
        row = compare(shown, estimators=[point])
        np.testing.assert_allclose(row.std_error.to_numpy(), res.table.std_error.to_numpy(),
                                   rtol=RTOL)
        return res
    check_sweep(iv, sw, table_for, "two-step GMM, kernels")


def test_two_step_gmm_sweep_along_ewc_equals_the_table(iv):
    est = lagwise.estimator("ewc", cosines=8)
    sw = iv.two_step(est).sweep_axis(est, [4, 8, 16])
    check_sweep(iv, sw, lambda c, e, v: iv.two_step(e.at(int(v))).infer(e.at(int(v))),
                "two-step GMM, EWC")


def test_the_apps_gmm_table_chart_and_comparison_agree(iv):
    session = STORE.open_session()
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=9.0)
    sw = callbacks.sweep_for(session, "fit:iv-test", iv, est, "two-step")
    shown, res = callbacks.view_inference(session, "fit:iv-test", iv, "two-step", est, 0.95,
                                          "auto")
    c, i = sw.kernels.index("bartlett"), list(sw.values).index(9.0)
    same(sw.std_error[c, i], sw.t_stat[c, i], res, "app two-step")
    row = compare(shown, estimators=[est])
    np.testing.assert_allclose(row.std_error.to_numpy(), res.table.std_error.to_numpy(),
                               rtol=RTOL)
    assert "first-step residuals" in sw.extras["chart_note"]


def test_an_iterated_fits_chart_names_its_cheaper_curve(iv):
    session = STORE.open_session()
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth=9.0)
    sw = callbacks.sweep_for(session, "fit:iv-test-it", iv, est, "iterated")
    assert sw.extras["curve_suffix"] == ", two-step"
    assert "two-step GMM" in sw.extras["chart_note"]
    assert "the table shows iterated GMM" in sw.extras["chart_note"]
    fig = figures.sensitivity_figure(sw, "utilization_survey", "t", 0.95, "normal", 9.0, 0)
    assert "two-step GMM" in fig.layout.title.text
    assert any(str(tr.name).startswith("Bartlett, two-step") for tr in fig.data)


@pytest.fixture(scope="module")
def panel():
    data = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    return lagwise.fit_panel(data, "exret", ["book_to_market", "fleet_age"], entity="company",
                             time="month")


@pytest.mark.parametrize("small", [False, True])
def test_panel_sweep_equals_the_tables(panel, small):
    grid = [1.0, 2.5, 6.0, 15.0, 40.0]
    sw = panel_sweep(panel, values=grid, small_sample=small)
    fm = panel.fama_macbeth()
    groups = sw.extras["curve_group"]

    def table_for(c, e, v):
        if groups[c] == "Fama-MacBeth":
            return fm.infer(e.at(float(v)))
        return panel.infer(e.at(float(v)))

    def check(c, e, v, i):
        res = table_for(c, e, v)
        for j, term in enumerate(sw.terms):
            if term in res.table.index and np.isfinite(sw.std_error[c, i, j]):
                got = res.table.loc[term]
                assert sw.std_error[c, i, j] == pytest.approx(got.std_error, rel=RTOL)
                assert sw.t_stat[c, i, j] == pytest.approx(got.t_stat, rel=RTOL)
    for c, e in enumerate(sw.estimators):
        for i, v in enumerate(sw.values):
            if sw.status[c, i] not in ("collapsed", "unavailable"):
                check(c, e, v, i)


def test_panel_cluster_kernel_sweep_equals_the_table(panel):
    est = lagwise.estimator("cluster_kernel")
    sw = lagwise.sweep(panel, [est], [1.0, 3.0, 8.0, 20.0])
    check_sweep(panel, sw, lambda c, e, v: panel.infer(e.at(float(v))), "cluster + kernel")


def test_fama_macbeth_fit_sweep_equals_the_table():
    data = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    fm = lagwise.fit_fama_macbeth(data, "exret", ["book_to_market"], entity="company",
                                  time="month")
    ests = [lagwise.estimator("kernel", kernel=k, bandwidth=1.0, small_sample=True)
            for k in lagwise.KERNELS]
    sw = lagwise.sweep(fm, ests, [1.0, 4.0, 12.0])
    check_sweep(fm, sw, lambda c, e, v: fm.infer(e.at(float(v))), "Fama-MacBeth")
