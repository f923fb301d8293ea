"""One contract over every registered estimator family and every option it has (generated from
the registry, so a new family, kernel or bandwidth rule is tested the day it is registered):
PSD where claimed, scale equivariance, regressor permutation, sweep = infer along the family's
tuning axis, every reference-law request answered by a law or a typed error, plain labels, clear
errors for bad parameters, complete metadata."""

import itertools

import numpy as np
import pytest

import lagwise
from lagwise.engine.covariance.bandwidth import RULES
from lagwise.engine.covariance.registry import FAMILIES, SHORTHANDS
from lagwise.engine.laws.reference import REQUESTS
from tests.helpers import panel_frame, regression_frame

FAMS = list(FAMILIES.values())


@pytest.fixture(scope="module")
def df():
    return regression_frame(seed=21, n=180, k=3, rho_e=0.6)


@pytest.fixture(scope="module")
def series_fits(df):
    regs = ["x1", "x2", "x3"]
    return {"base": lagwise.fit_ols(df, "y", regs),
            "scaled": lagwise.fit_ols(df.assign(y=-3.0 * df.y), "y", regs),
            "permuted": lagwise.fit_ols(df, "y", ["x3", "x1", "x2"])}


@pytest.fixture(scope="module")
def panel_fits():
    frame = panel_frame(seed=22, entities=30, periods=40, k=3, drop=0.1)

    def fit(data, regs, **kw):
        return lagwise.fit_panel(data, "y", regs, entity="firm", time="month", **kw)
    regs = ["x1", "x2", "x3"]
    return {"base": fit(frame, regs), "scaled": fit(frame.assign(y=-3.0 * frame.y), regs),
            "permuted": fit(frame, ["x3", "x1", "x2"])}


@pytest.fixture(scope="module")
def horizon_fits(df):
    """An overlapping 6-period response built from its one-period series (Hodrick needs it)."""
    regs = ["x1", "x2", "x3"]
    out = {}
    for name, frame, order in (("base", df, regs), ("scaled", df.assign(y=-3.0 * df.y), regs),
                               ("permuted", df, ["x3", "x1", "x2"])):
        table = lagwise.Table(frame=frame.copy())
        table, y = table.with_transform("sum-next", "y", 6)
        out[name] = lagwise.fit_ols(table, y, order)
    return out


@pytest.fixture
def fits(request, series_fits, panel_fits, horizon_fits):
    """The fits a family applies to: time series, panels, or overlapping responses with their
    one-period series."""
    family = request.node.callspec.params["family"]
    for kind in (series_fits, panel_fits, horizon_fits):
        if family.applies(kind["base"]) is None:
            return kind
    raise AssertionError(f"{family.name} applies to none of the test fits")


def test_every_family_applies_to_some_fit(series_fits, panel_fits, horizon_fits):
    for family in FAMS:
        assert any(family.applies(kind["base"]) is None
                   for kind in (series_fits, panel_fits, horizon_fits)), family.name


def options(p):
    """Every value worth trying for one parameter."""
    if p.kind in ("choice", "kernel", "grouping"):
        return list(p.options)
    if p.kind == "bool":
        return [False, True]
    if p.kind == "bandwidth":
        return [7.5] + list(RULES)
    if p.kind == "int_or_rule":
        return list(p.choices) + [5]
    if p.kind == "int":
        return [None, 2]
    return [p.default]


def configs(family):
    """The full product of options (kept small by the registry's own sizes)."""
    names = [p.name for p in family.params]
    out = []
    for values in itertools.product(*(options(p) for p in family.params)):
        try:
            out.append(lagwise.estimator(family.name, **dict(zip(names, values))))
        except lagwise.SpecificationError:       # e.g. a fixed VAR order with no order given
            continue
    return out or [lagwise.estimator(family.name)]


def computed(fit, est):
    try:
        return fit.infer(est, reference="normal")
    except lagwise.SpecificationError as exc:       # a rule not defined for this kernel
        assert "not defined" in str(exc) or "needs" in str(exc), exc
        return None


@pytest.mark.parametrize("family", FAMS, ids=lambda f: f.name)
def test_metadata_complete(family):
    assert family.title and family.citation and family.assumptions
    for p in family.params:
        assert p.help, f"{family.name}.{p.name} needs help text"
    assert family.presets is not None, "every family shows up in the comparison"
    if family.axis is not None:
        assert family.axis.param in {p.name for p in family.params}
        assert family.axis.symbol and family.axis.title


@pytest.mark.parametrize("family", FAMS, ids=lambda f: f.name)
def test_every_option_psd_scale_permutation_label(family, fits):
    for est in configs(family):
        res = computed(fits["base"], est)
        if res is None:
            continue
        assert isinstance(res.label, str) and res.label and "None" not in res.label
        assert res.label.split(",")[0] in est.label or est.label.startswith(res.label[:3])
        cov = res.cov.to_numpy()
        if est.psd:
            assert np.linalg.eigvalsh(cov).min() >= -1e-10 * np.abs(cov).max(), est
        a = res.table
        b = fits["scaled"].infer(est, reference="normal").table
        np.testing.assert_allclose(b.std_error, 3.0 * a.std_error, rtol=1e-7, err_msg=repr(est))
        c = fits["permuted"].infer(est, reference="normal").table
        np.testing.assert_allclose(c.loc[a.index, "std_error"], a.std_error, rtol=1e-7,
                                   err_msg=repr(est))


@pytest.mark.parametrize("family", FAMS, ids=lambda f: f.name)
def test_every_law_request_gives_a_law_or_a_typed_error(family, fits):
    for est in configs(family)[:12]:
        for request in REQUESTS:
            try:
                res = fits["base"].infer(est, reference=request)
            except lagwise.SpecificationError:
                continue
            law = res.law
            assert law.describe() and law.label
            cv = law.critical_value(0.95)
            assert np.all(np.isfinite(cv)) and np.all(np.asarray(cv) > 1.5)
            assert np.array_equal(res.critical_value, cv)
            if law.per_coefficient:        # degrees of freedom per coefficient: one cv each
                k = len(res.table)
                for row in np.stack([law.p_values(np.zeros(k)), law.p_values(cv),
                                     law.p_values(np.full(k, np.inf))], axis=1):
                    assert row[0] == pytest.approx(1.0, abs=1e-6)
                    assert row[1] == pytest.approx(0.05, abs=2e-3) and np.isnan(row[2])
                continue
            p = law.p_values(np.array([0.0, cv, np.inf]))
            assert p[0] == pytest.approx(1.0, abs=1e-6) and p[1] == pytest.approx(0.05, abs=2e-3)
            assert np.isnan(p[2])


@pytest.mark.parametrize("family", [f for f in FAMS if f.axis is not None], ids=lambda f: f.name)
def test_sweep_equals_infer_along_the_axis(family, fits):
    fit = fits["base"]
    grid = family.axis.grid(fit)
    values = [grid[0], grid[len(grid) // 3], grid[-1]]
    every = configs(family)
    for est in every[:: max(1, len(every) // 40)]:
        sw = lagwise.sweep(fit, [est], values)
        for i, v in enumerate(values):
            point = est.at(int(v) if float(v).is_integer() and family.axis.param != "bandwidth"
                           else float(v))
            if sw.status[0, i] in ("unavailable", "collapsed"):
                with pytest.raises(lagwise.LagwiseError):
                    fit.infer(point)
                continue
            res = fit.infer(point)
            np.testing.assert_allclose(sw.std_error[0, i], res.table.std_error, rtol=1e-9,
                                       err_msg=f"{est!r} at {v}")
            crit = sw.critical_values(0.95, "auto")[0, i]
            assert crit == pytest.approx(fit.infer(point, reference="auto").critical_value)


@pytest.mark.parametrize("family", FAMS, ids=lambda f: f.name)
def test_bad_parameters_raise_clear_errors(family):
    with pytest.raises(lagwise.SpecificationError, match="no parameter 'nonsense'"):
        lagwise.estimator(family.name, nonsense=1)
    for p in family.params:
        bad = {"choice": "no-such-choice", "kernel": "no-such-kernel", "bool": "yes",
               "int": "three", "float": "x", "bandwidth": -1.0, "int_or_rule": "three",
               "grouping": 3}[p.kind]
        with pytest.raises(lagwise.SpecificationError, match=p.name if p.kind != "bandwidth"
                           else "bandwidth"):
            lagwise.estimator(family.name, **{p.name: bad})


def test_shorthands_are_their_family():
    for short, (fam, fixed) in SHORTHANDS.items():
        est = lagwise.estimator(short)
        assert est.family is FAMILIES[fam] and all(est.params[k] == v for k, v in fixed.items())
