"""One contract run over every registered estimator (a new estimator is tested the day it is
registered): PSD where it claims it, scale equivariance, regressor permutation, sweep = infer
for estimators with a bandwidth, clear errors for bad parameters, complete metadata."""

import numpy as np
import pytest

import lagwise
from lagwise.engine.covariance import ESTIMATORS
from tests.helpers import regression_frame

SPECS = list(ESTIMATORS.values())


@pytest.fixture(scope="module")
def df():
    return regression_frame(seed=21, n=180, k=3, rho_e=0.6)


def configs(spec):
    """Default configuration plus every choice of each choice parameter."""
    out = [lagwise.estimator(spec.name)]
    for p in spec.params:
        if p.kind == "choice":
            out += [lagwise.estimator(spec.name, **{p.name: c}) for c in p.choices]
    return out


@pytest.mark.parametrize("spec", SPECS, ids=lambda s: s.name)
def test_metadata_complete(spec):
    assert spec.display_name and spec.reference and spec.assumptions
    for p in spec.params:
        assert p.help, f"{spec.name}.{p.name} needs help text"
    assert spec.presets is not None, "every estimator shows up in the comparison"


@pytest.mark.parametrize("spec", SPECS, ids=lambda s: s.name)
def test_psd_where_claimed(spec, df):
    fit = lagwise.fit_ols(df, "y", ["x1", "x2", "x3"])
    for est in configs(spec):
        res = fit.infer(est)
        if est.psd:
            cov = res.cov.to_numpy()
            assert np.linalg.eigvalsh(cov).min() >= -1e-10 * np.abs(cov).max(), est


@pytest.mark.parametrize("spec", SPECS, ids=lambda s: s.name)
def test_scale_and_permutation(spec, df):
    regs = ["x1", "x2", "x3"]
    base = lagwise.fit_ols(df, "y", regs)
    scaled = lagwise.fit_ols(df.assign(y=-3.0 * df.y), "y", regs)
    permuted = lagwise.fit_ols(df, "y", ["x3", "x1", "x2"])
    for est in configs(spec):
        a = base.infer(est).table
        np.testing.assert_allclose(scaled.infer(est).table.std_error, 3.0 * a.std_error,
                                   rtol=1e-7)
        np.testing.assert_allclose(permuted.infer(est).table.loc[a.index, "std_error"],
                                   a.std_error, rtol=1e-7)


@pytest.mark.parametrize("spec", [s for s in SPECS if s.has_bandwidth], ids=lambda s: s.name)
def test_sweep_equals_infer(spec, df):
    fit = lagwise.fit_ols(df, "y", ["x1", "x2", "x3"])
    bws = [1.0, 3.5, 12.0]
    for kernel in lagwise.KERNELS:
        sw = fit.sweep(kernels=[kernel], bandwidths=bws)
        for i, b in enumerate(bws):
            res = fit.infer(lagwise.estimator(spec.name, kernel=kernel, bandwidth=b))
            np.testing.assert_allclose(sw.std_error[0, i], res.table.std_error, rtol=1e-9)


@pytest.mark.parametrize("spec", SPECS, ids=lambda s: s.name)
def test_bad_parameters_raise_clear_errors(spec):
    with pytest.raises(lagwise.SpecificationError, match="no parameter 'nonsense'"):
        lagwise.estimator(spec.name, nonsense=1)
    for p in spec.params:
        bad = {"choice": "no-such-choice", "bool": "yes", "int": "three", "float": "x",
               "bandwidth": -1.0, "int_or_rule": "three"}[p.kind]
        with pytest.raises(lagwise.SpecificationError, match=p.name if p.kind != "bandwidth"
                           else "bandwidth"):
            lagwise.estimator(spec.name, **{p.name: bad})
