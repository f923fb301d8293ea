"""The autocovariance cache against the textbook double loop (numpy), both fill paths."""

import numpy as np
from hypothesis import given, settings, strategies as st

from engine.moments import MomentCache


def direct(u, j):
    t = len(u)
    g = u[j:].T @ u[: t - j] / t
    return g if j == 0 else g + g.T


@settings(max_examples=40, deadline=None)
@given(t=st.integers(3, 300), k=st.integers(1, 4), lag=st.integers(0, 40),
       seed=st.integers(0, 10_000))
def test_cache_equals_direct_sums(t, k, lag, seed):
    u = np.random.default_rng(seed).standard_normal((t, k)) * np.array([1, 10, 0.1, 3])[:k]
    cache = MomentCache(u)
    lag = min(lag, t - 1)
    packed = cache.packed(lag)
    assert packed.shape[0] == lag + 1
    for j in range(lag + 1):
        np.testing.assert_allclose(cache.unpack(packed[j]), direct(u, j), rtol=1e-9,
                                   atol=1e-12 * np.abs(u).max() ** 2)


def test_cache_grows_and_all_lag_path():
    rng = np.random.default_rng(0)
    u = rng.standard_normal((2000, 3))
    cache = MomentCache(u)
    cache.ensure(5)            # block path
    assert cache.max_lag_cached == 5
    cache.ensure(1500)         # all-lag path fills every lag
    assert cache.max_lag_cached == 1999
    for j in (0, 1, 7, 1000, 1999):
        np.testing.assert_allclose(cache.symmetric_lag(j), direct(u, j), rtol=1e-8, atol=1e-12)


def test_weighted_sum_is_weighted_lags():
    rng = np.random.default_rng(1)
    u = rng.standard_normal((500, 2))
    cache = MomentCache(u)
    w = np.array([[1.0, 0.5, 0.25], [1.0, 0.0, 0.0]])
    s = cache.weighted(w)
    expect0 = direct(u, 0) + 0.5 * direct(u, 1) + 0.25 * direct(u, 2)
    np.testing.assert_allclose(s[0], expect0, rtol=1e-10)
    np.testing.assert_allclose(s[1], direct(u, 0), rtol=1e-10)
