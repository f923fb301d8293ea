"""Tuning values beyond the sample (issue 21, item 7): bandwidths beyond MAX_BANDWIDTH_OVER_T x T
and horizons that leave too few observations are refused, in the engine (every kernel family,
sweeps, the two-step GMM sweep, the fit's horizon, the look-ahead transforms, formulas, the
horizon sweep) and in settings validation, with messages naming the value and T. Values inside
the range keep their existing outcomes (a collapsed estimate is still the sweep's "collapsed").
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.engine.io.settings import load_settings

try:
    from lagwise.engine.io.settings import check_against_sample
except ImportError:                       # the code before the fix: nothing to check against
    check_against_sample = None


@pytest.fixture(scope="module")
def table():
    return lagwise.load_table(lagwise.demo_file())


@pytest.fixture(scope="module")
def fit(table):
    return lagwise.fit_ols(table, "exret_1m", ["rate_capacity"])


BEYOND = [dict(kernel="bartlett", bandwidth=1e6), dict(kernel="bartlett", lags=10**12),
          dict(kernel="quadratic_spectral", bandwidth=1e6),
          dict(kernel="parzen", bandwidth=5000.0, prewhiten=True),
          dict(kernel="truncated", bandwidth=421.0)]


@pytest.mark.parametrize("params", BEYOND)
def test_kernel_bandwidths_beyond_t_are_refused(fit, params):
    with pytest.raises(lagwise.SpecificationError, match=r"bandwidth b = .* T = 4(19|20)"):
        fit.infer(lagwise.estimator("kernel", **params))


def test_huge_integers_are_typed_errors(fit):
    for make in (lambda: lagwise.estimator("kernel", lags=10**400),
                 lambda: lagwise.estimator("kernel", bandwidth=10**400),
                 lambda: lagwise.estimator("var", max_order=10**400),
                 lambda: lagwise.estimator("ewc", cosines=10**400)):
        with pytest.raises(lagwise.SpecificationError, match="401 digits"):
            fit.infer(make())


def test_values_inside_the_range_are_unchanged(fit):
    t = fit.nobs
    assert np.isfinite(fit.infer(lagwise.estimator("kernel", bandwidth=float(t))).table
                       .std_error).all()
    sw = lagwise.sweep(fit, [lagwise.estimator("kernel", kernel="truncated", repair=False)],
                       [2.0, float(t)])
    assert sw.status[0, 1] == "collapsed"
    with pytest.raises(lagwise.SpecificationError, match=f"T = {t}"):
        lagwise.sweep(fit, [lagwise.estimator("kernel")], [2.0, t + 1.0])


def test_panel_and_gmm_kernels_are_refused_beyond_their_periods(table):
    panel = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    pfit = lagwise.fit_panel(panel, "exret", ["book_to_market"], entity="company",
                             time="month")
    periods = pfit.panel.n_periods
    for name in ("driscoll_kraay", "cluster_kernel"):
        with pytest.raises(lagwise.SpecificationError, match=f"T = {periods}"):
            pfit.infer(lagwise.estimator(name, bandwidth=1e6))
    iv = lagwise.fit_iv(table, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                        ["port_congestion", "scrap_rate"])
    with pytest.raises(lagwise.SpecificationError, match=f"T = {iv.nobs}"):
        iv.two_step(lagwise.estimator("kernel", bandwidth=1e6))
    gmm = iv.two_step(lagwise.estimator("kernel", bandwidth=4.0))
    with pytest.raises(lagwise.SpecificationError, match=f"T = {iv.nobs}"):
        gmm.sweep_axis(lagwise.estimator("kernel", bandwidth=4.0), [2.0, 1e6])


@pytest.mark.parametrize("h", [5000, 10**400, 205])
def test_horizons_leaving_too_few_observations_are_refused(table, h):
    with pytest.raises(lagwise.SpecificationError, match="horizon h = .* T = 408"):
        lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=h)
    with pytest.raises(lagwise.SpecificationError, match="horizon h = "):
        lagwise.fit_iv(table, "exret_12m", ["utilization_survey"], ["utilization_survey"],
                       ["port_congestion"], horizon=h)


def test_look_ahead_transforms_and_formulas_leave_enough_rows(table):
    n = len(table.frame)
    for kind in ("sum-next", "lead"):
        with pytest.raises(lagwise.SpecificationError, match=f"{n} rows"):
            table.with_transform(kind, "exret_1m", n // 2 + 1)
        table.with_transform(kind, "exret_1m", 12)
    frame = pd.DataFrame({"y": np.arange(40.0) % 7, "x": np.arange(40.0) % 5})
    with pytest.raises(lagwise.SpecificationError, match="40 rows"):
        lagwise.fit("sum_next(y, 25) ~ x", frame)
    with pytest.raises(lagwise.SpecificationError, match="40 rows"):
        lagwise.fit("y ~ lead(x, 10" + "0" * 400 + ")", frame)


def test_the_horizon_sweep_stops_where_observations_run_out(table):
    hs = lagwise.horizon_sweep(table, "exret_1m", ["rate_capacity"], horizons=[1, 12, 5000,
                                                                                10**400])
    assert sorted(hs.frame.h.unique()) == [1, 12]
    assert any("5000" in n and "too few" in n for n in hs.notes)


def record(**fields):
    return json.dumps({"lagwise_settings": 2, **fields})


@pytest.mark.parametrize("fields", [{"horizon": 10**400}, {"value": 1e400},
                                    {"value": float("nan")}, {"level": 10**400},
                                    {"estimator": "kernel", "params": {"lags": 10**400}},
                                    {"estimator": "var", "params": {"max_order": 10**400}},
                                    {"transforms": [["sum-next", "x", 10**400]]}])
def test_settings_files_refuse_values_no_sample_holds(fields):
    with pytest.raises(lagwise.DataError, match="settings"):
        load_settings(record(**fields))


def test_settings_are_checked_against_the_data_they_are_applied_to():
    assert check_against_sample is not None
    for fields, word in (({"horizon": 5000}, "horizon h = 5000"),
                         ({"value": 1e6}, "value = 1000000.0"),
                         ({"estimator": "kernel", "params": {"bandwidth": 1e6}},
                          "bandwidth = 1000000.0"),
                         ({"transforms": [["sum-next", "exret_1m", 300]]}, "sum-next of 300")):
        s = load_settings(record(**fields))
        with pytest.raises(lagwise.DataError, match=f"{word}.*T = 408"):
            check_against_sample(s, 408)
    check_against_sample(load_settings(record(horizon=12, value=20.0)), 408)
