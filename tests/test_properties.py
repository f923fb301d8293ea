"""Property tests (hypothesis): PSD, sweep = infer, scale equivariance, regressor permutation."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st, HealthCheck

import lagwise
from tests.helpers import ar1

#: Every registered kernel (a kernel registered later is tested the day it is added), and those
#: positive semi-definite by construction.
KERNELS = list(lagwise.KERNELS)
PSD_KERNELS = [k for k, v in lagwise.KERNELS.items() if v.psd]


def frame(seed, n, k, rho):
    rng = np.random.default_rng(seed)
    cols = {f"x{i}": ar1(rng, n, rho) + rng.standard_normal() for i in range(k)}
    e = ar1(rng, n, rho) * (1 + np.abs(cols["x0"]))
    y = 1.0 + sum(0.3 * c for c in cols.values()) + e
    return pd.DataFrame({"y": y, **cols})


data_args = dict(seed=st.integers(0, 100_000), n=st.integers(20, 200), k=st.integers(1, 4),
                 rho=st.floats(-0.8, 0.95))
common = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@common
@given(**data_args, b=st.floats(0.5, 60.0),
       kernel=st.sampled_from(PSD_KERNELS))
def test_psd_kernels_give_psd_covariance(seed, n, k, rho, b, kernel):
    fit = lagwise.fit_ols(frame(seed, n, k, rho), "y", [f"x{i}" for i in range(k)])
    est = lagwise.estimator("kernel", kernel=kernel, bandwidth=b)
    if b > n:                            # beyond the sample (issue 21, item 7): refused
        with pytest.raises(lagwise.SpecificationError, match=f"T = {n}"):
            fit.infer(est)
        return
    res = fit.infer(est)
    s = res.long_run.S
    assert np.linalg.eigvalsh(s).min() >= -1e-10 * np.abs(s).max()
    cov = res.cov.to_numpy()
    assert np.linalg.eigvalsh(cov).min() >= -1e-9 * np.abs(cov).max()


@common
@given(**data_args, kernel=st.sampled_from(KERNELS), small=st.booleans(),
       bws=st.lists(st.floats(0.5, 80.0), min_size=1, max_size=6))
def test_sweep_equals_one_at_a_time_infer(seed, n, k, rho, kernel, small, bws):
    fit = lagwise.fit_ols(frame(seed, n, k, rho), "y", [f"x{i}" for i in range(k)])
    if max(bws) > n:                     # beyond the sample (issue 21, item 7): refused
        with pytest.raises(lagwise.SpecificationError, match=f"T = {n}"):
            fit.sweep(kernels=[kernel], bandwidths=bws, small_sample=small)
        bws = [b for b in bws if b <= n] or [float(n)]
    sw = fit.sweep(kernels=[kernel], bandwidths=bws, small_sample=small)
    for i, b in enumerate(bws):
        est = lagwise.estimator("kernel", kernel=kernel, bandwidth=b, small_sample=small)
        if np.isnan(sw.std_error[0, i]).all():
            # a collapsed S (truncated kernel, b >= T) is refused, never reported as noise
            with pytest.raises(lagwise.EstimationError, match="is zero"):
                fit.infer(est)
            continue
        res = fit.infer(est)
        np.testing.assert_allclose(sw.std_error[0, i], res.table.std_error.to_numpy(),
                                   rtol=1e-9)


ESTIMATOR_CHOICES = st.sampled_from([
    ("classical", {}), ("hc0", {}), ("hc1", {}), ("hc2", {}), ("hc3", {}),
    ("kernel", {"kernel": "bartlett", "bandwidth": 5.0}),
    ("kernel", {"kernel": "quadratic_spectral", "bandwidth": "andrews"}),
    ("kernel", {"kernel": "parzen", "bandwidth": "newey-west"}),
])


@common
@given(**data_args, c=st.floats(-1e3, 1e3).filter(lambda v: abs(v) > 1e-3),
       choice=ESTIMATOR_CHOICES)
def test_scaling_response_scales_estimates_and_errors(seed, n, k, rho, c, choice):
    df = frame(seed, n, k, rho)
    regs = [f"x{i}" for i in range(k)]
    base = lagwise.fit_ols(df, "y", regs)
    scaled = lagwise.fit_ols(df.assign(y=df.y * c), "y", regs)
    est = lagwise.estimator(choice[0], **choice[1])
    a, b = base.infer(est).table, scaled.infer(est).table
    np.testing.assert_allclose(b.estimate, a.estimate * c, rtol=1e-8, atol=1e-10 * abs(c))
    np.testing.assert_allclose(b.std_error, a.std_error * abs(c), rtol=1e-7)


@common
@given(**data_args, perm_seed=st.integers(0, 1000), choice=ESTIMATOR_CHOICES)
def test_permuting_regressors_permutes_results(seed, n, k, rho, perm_seed, choice):
    df = frame(seed, n, k, rho)
    regs = [f"x{i}" for i in range(k)]
    shuffled = list(np.random.default_rng(perm_seed).permutation(regs))
    est = lagwise.estimator(choice[0], **choice[1])
    a = lagwise.fit_ols(df, "y", regs).infer(est).table
    b = lagwise.fit_ols(df, "y", shuffled).infer(est).table
    np.testing.assert_allclose(b.loc[a.index, "std_error"], a.std_error, rtol=1e-7)
    np.testing.assert_allclose(b.loc[a.index, "estimate"], a.estimate, rtol=1e-7, atol=1e-10)
