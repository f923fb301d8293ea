"""Moment contributions and the cache of their autocovariances.

For moment contributions u_t (T x k; OLS: u_t = x_t e_t) the lag-j autocovariance is
Gamma_j = (1/T) sum_{t=j+1}^{T} u_t u_{t-j}'  (divisor T at every lag, which keeps kernel
estimates with PSD kernels positive semi-definite; scores are not re-centred, as in statsmodels).

Every kernel estimate is S = Gamma_0 + sum_{j>=1} w_j (Gamma_j + Gamma_j'), so the cache stores
the symmetric matrices C_0 = Gamma_0 and C_j = Gamma_j + Gamma_j' (upper triangles packed), and a
whole grid of estimates is one matrix product W @ C. The cache is filled once per fit:

* a few lags (L small against T): overlap-save blocks of FFTs, accumulated in the frequency
  domain, cost about one pass over the data whatever L is;
* many lags (an infinite-support kernel needs all T-1): one zero-padded FFT of each column and
  one inverse FFT per pair of columns.
"""

from __future__ import annotations

import numpy as np
import scipy.fft as sfft

from .errors import SpecificationError


class MomentCache:
    """Autocovariances of the moment contributions, computed once and reused."""

    def __init__(self, scores: np.ndarray):
        u = np.asarray(scores, dtype=float)
        if u.ndim != 2:
            raise SpecificationError("moment contributions must be a T x k matrix")
        self.scores = u
        self.nobs, self.k = u.shape
        self._iu = np.triu_indices(self.k)
        self._packed: np.ndarray | None = None   # (n_lags, P)

    # ------------------------------------------------------------------ filling
    @property
    def max_lag_cached(self) -> int:
        return -1 if self._packed is None else self._packed.shape[0] - 1

    def ensure(self, max_lag: int) -> None:
        """Make sure lags 0..max_lag are cached (max_lag is capped at T-1)."""
        max_lag = int(min(max(max_lag, 0), self.nobs - 1))
        if max_lag <= self.max_lag_cached:
            return
        if 8 * (max_lag + 1) < self.nobs:
            full = _autocov_blocks(self.scores, max_lag)
        else:
            max_lag = self.nobs - 1
            full = None
        if full is not None:
            sym = full + np.transpose(full, (0, 2, 1))
            sym[0] = full[0]
            packed = sym[:, self._iu[0], self._iu[1]]
        else:
            packed = _autocov_all_pairs(self.scores, self._iu)
        self._packed = np.ascontiguousarray(packed)

    def packed(self, max_lag: int) -> np.ndarray:
        """C_0..C_L with upper triangles packed: shape (L+1, k(k+1)/2)."""
        self.ensure(max_lag)
        return self._packed[: int(min(max_lag, self.nobs - 1)) + 1]

    # ------------------------------------------------------------------ using
    def unpack(self, packed: np.ndarray) -> np.ndarray:
        """(..., P) packed upper triangles -> (..., k, k) symmetric matrices."""
        out = np.zeros(packed.shape[:-1] + (self.k, self.k))
        i, j = self._iu
        out[..., i, j] = packed
        out[..., j, i] = packed
        return out

    def gamma0(self) -> np.ndarray:
        return self.unpack(self.packed(0)[0])

    def symmetric_lag(self, j: int) -> np.ndarray:
        """C_j = Gamma_j + Gamma_j' (C_0 = Gamma_0)."""
        return self.unpack(self.packed(j)[j])

    def weighted(self, weights: np.ndarray) -> np.ndarray:
        """S = sum_j w_j C_j for each row of `weights` (w_0 should be 1). Returns (n, k, k)."""
        w = np.atleast_2d(np.asarray(weights, dtype=float))
        n_lags = w.shape[1]
        if n_lags > self.nobs:
            w = w[:, : self.nobs]
            n_lags = self.nobs
        c = self.packed(n_lags - 1)
        return self.unpack(w @ c)


def _autocov_blocks(u: np.ndarray, max_lag: int) -> np.ndarray:
    """Gamma_0..Gamma_L (full k x k each) by overlap-save FFT blocks, frequency-domain sum."""
    t_obs, k = u.shape
    lag = max_lag
    block = max(4 * (lag + 1), 256)
    n_fft = sfft.next_fast_len(block + lag, real=True)
    block = n_fft - lag                            # use the padding we pay for anyway
    n_blocks = -(-t_obs // block)
    padded = np.zeros((lag + n_blocks * block, k))
    padded[lag: lag + t_obs] = u
    current = padded[lag:].reshape(n_blocks, block, k)
    window = np.lib.stride_tricks.sliding_window_view(padded, (block + lag, k))[::block, 0]
    fa = sfft.rfft(current, n=n_fft, axis=1)      # (blocks, nf, k)
    fe = sfft.rfft(window, n=n_fft, axis=1)
    g = np.matmul(np.conj(fa).transpose(1, 2, 0), fe.transpose(1, 0, 2))   # (nf, k, k)
    corr = sfft.irfft(g, n=n_fft, axis=0)         # corr[s] = sum_t u_t u_{t-(L-s)}'
    return corr[lag::-1] / t_obs


def _autocov_all_pairs(u: np.ndarray, iu) -> np.ndarray:
    """C_0..C_{T-1} packed, by one padded FFT per column and one inverse FFT per pair."""
    t_obs, k = u.shape
    n_fft = sfft.next_fast_len(2 * t_obs - 1, real=True)
    f = sfft.rfft(u, n=n_fft, axis=0)
    out = np.empty((t_obs, len(iu[0])))
    for p, (a, b) in enumerate(zip(*iu)):
        cross = f[:, a] * np.conj(f[:, b])
        # r_ab(j) + r_ab(-j) = irfft(2 Re(F_a conj F_b))[j]
        col = sfft.irfft(2.0 * cross.real, n=n_fft)[:t_obs]
        col[0] *= 0.5
        out[:, p] = col / t_obs
    return out
