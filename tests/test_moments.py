"""The autocovariance cache against the textbook double loop (numpy), both fill paths."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from lagwise.engine.covariance.cache import MomentCache


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


@pytest.mark.parametrize("limit", [None, 1000])
def test_fast_quadratic_spectral_sums_equal_direct_weights(monkeypatch, limit):
    """The factorised trigonometric evaluation over every lag equals the direct weighted sum
    (k(j/b) evaluated at each of the T lags) to rounding, cached or rebuilt in column chunks."""
    import lagwise
    import lagwise.engine.covariance.cache as moments
    if limit:
        monkeypatch.setattr(moments, "FAR_CACHE_LIMIT", limit)
    rng = np.random.default_rng(3)
    t = 6000
    u = rng.standard_normal((t, 3))
    u[:, 1] = np.convolve(u[:, 1], np.ones(25) / 5, "same")
    cache = MomentCache(u)
    qs = lagwise.get_kernel("quadratic_spectral")
    b = np.array([0.7, 1.0, 3.3, 12.0, 57.0, 240.0])
    direct = qs.weights(b, t) @ cache.packed(t - 1)
    np.testing.assert_allclose(cache.kernel_sums(qs, b), direct, rtol=1e-11, atol=1e-14)
    np.testing.assert_allclose(cache.kernel_sums(qs, b[3:4]), direct[3:4], rtol=1e-11)


@pytest.mark.parametrize("lag", [0, 3, 40, 399])
def test_diagonal_cache_equals_direct(lag):
    rng = np.random.default_rng(lag)
    u = rng.standard_normal((400, 3))
    cache = MomentCache(u, diagonal_only=True)
    packed = cache.packed(lag)
    for j in range(lag + 1):
        np.testing.assert_allclose(packed[j], np.diag(direct(u, j)), rtol=1e-9, atol=1e-13)
