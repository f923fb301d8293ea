"""Outside check: the `arch` package (8.0) kernel long-run covariances of the same score matrix.

Conventions (../shared/REFERENCES.md section 2.2): arch's Parzen and Tukey-Hanning `bandwidth=H`
weight lag j by k(j/(H+1)), so our b = H + 1; arch's Quadratic Spectral `bandwidth=H` weights by
k(j/H), so our b = H. center=False matches our uncentred scores; df_adjust=0 divides by T.
"""

import numpy as np
import pytest
from arch.covariance import kernel as ak

import lagwise
from tests.helpers import regression_frame


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(regression_frame(seed=3, n=400, k=2), "y", ["x1", "x2"])


def ours_long_run(fit, kernel, b):
    est = lagwise.estimator("kernel", kernel=kernel, bandwidth=b, repair=False)
    return fit.to_original(est.long_run(fit).S)


# integer H only: for a non-integer H arch stops at lag floor(H) although k(j/(H+1)) > 0 up to
# lag ceil(H); our estimator uses every lag with positive weight (j < b).
@pytest.mark.parametrize("h", [2.0, 5.0, 9.0, 30.0])
@pytest.mark.parametrize("name,cls,shift", [
    ("parzen", ak.Parzen, 1.0),
    ("tukey_hanning", ak.TukeyHanning, 1.0),
    ("bartlett", ak.Bartlett, 1.0),
    ("quadratic_spectral", ak.QuadraticSpectral, 0.0),
])
def test_long_run_matches_arch(fit, h, name, cls, shift):
    theirs = cls(fit.contributions, bandwidth=h, center=False, df_adjust=0).cov.long_run
    np.testing.assert_allclose(ours_long_run(fit, name, h + shift), theirs, rtol=1e-9,
                               atol=1e-12 * np.abs(theirs).max())


@pytest.mark.parametrize("name,cls", [("bartlett", ak.Bartlett), ("parzen", ak.Parzen),
                                      ("quadratic_spectral", ak.QuadraticSpectral)])
def test_newey_west_1994_bandwidth_matches_arch(name, cls):
    """arch computes the NW (1994) plug-in when bandwidth=None, from u = w'v (w = ones).
    On a single series the weights do not matter; we compare the bandwidth value m-hat."""
    rng = np.random.default_rng(11)
    x = np.empty(500)
    x[0] = 0
    for t in range(1, 500):
        x[t] = 0.6 * x[t - 1] + rng.standard_normal()
    theirs = cls(x, center=True).bandwidth
    from lagwise.engine.covariance.bandwidth import newey_west_1994
    ours = newey_west_1994(x[:, None], lagwise.get_kernel(name), np.ones(1))
    assert ours == pytest.approx(theirs, rel=1e-10)
