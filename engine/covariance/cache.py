"""Moment contributions and the cache of their autocovariances.

For moment contributions g_t (T x m; OLS: x_t e_t, in the model's working basis) the lag-j
autocovariance is Gamma_j = (1/T) sum_{t=j+1}^{T} g_t g_{t-j}'  (divisor T at every lag, which
keeps kernel estimates with PSD kernels positive semi-definite; the contributions are not
re-centred, as in statsmodels: with an intercept they sum to zero anyway).

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
from numpy.lib.stride_tricks import as_strided

from ..blas import single_blas_thread
from ..caches import nbytes_of
from ..errors import SpecificationError
from .bandwidth import check_bandwidth_range
from .kernels import get_kernel


#: Lags 0..L are direct lagged products (`_autocov_direct`) while (L + 1) k is at most this
#: (`DIRECT_LAG_WORK_LARGE` when the series is too large to stay in cache), otherwise
#: overlap-save FFT blocks (about one pass over the data whatever L is). Measured on one
#: thread: at T = 1e5 direct is cheaper up to about L = 24 for k = 3 and k = 6 and L = 11 for
#: k = 10 (k = 6, L = 11: 4.5 ms against 7.9 ms); at T = 1e6 up to about L = 20 for k = 3,
#: 15 for k = 6 and 9 for k = 10.
DIRECT_LAG_WORK = 120
DIRECT_LAG_WORK_LARGE = 96
CACHE_RESIDENT_BYTES = 16_000_000

#: Up to this many bandwidths at once the Quadratic Spectral far lags are weighted directly
#: (`_qs_far_weights`); more share one prepared tail (`_qs_prepare`, `_qs_far`).
FEW_BANDWIDTHS = 2

#: The prepared tail used by the fast Quadratic Spectral sums is cached only below this many
#: numbers (160 MB); beyond, it is rebuilt per call in column chunks or skipped for one bandwidth.
FAR_CACHE_LIMIT = 20_000_000


class MomentCache:
    """Autocovariances of the moment contributions, computed once and reused."""

    def __init__(self, series: np.ndarray, diagonal_only: bool = False):
        u = np.asarray(series, dtype=float)
        if u.ndim != 2:
            raise SpecificationError("moment contributions must be a T x m matrix")
        self.series = u
        self.nobs, self.k = u.shape
        self.diagonal_only = diagonal_only      # keep only each column's own autocovariances
        self._iu = (np.arange(self.k), np.arange(self.k)) if diagonal_only \
            else np.triu_indices(self.k)
        self._packed: np.ndarray | None = None   # pair-major (P, n_lags)
        self._far: dict = {}                     # prepared tails for infinite-support kernels
        self._powers: dict = {}                  # 1/j^3 and 1/j^2 of the far lags, by start

    # ------------------------------------------------------------------ filling
    def own_nbytes(self, seen=None) -> int:
        """Bytes of the cached autocovariances and prepared tails (the series itself belongs to
        the model and is counted there)."""
        seen = set() if seen is None else seen
        seen.add(id(self.series))
        return (nbytes_of(self._packed, seen) + nbytes_of(self._far, seen)
                + nbytes_of(self._powers, seen))

    @property
    def nbytes(self) -> int:
        return self.own_nbytes()

    @property
    def max_lag_cached(self) -> int:
        return -1 if self._packed is None else self._packed.shape[1] - 1

    @single_blas_thread
    def ensure(self, max_lag: int) -> None:
        """Make sure lags 0..max_lag are cached (max_lag is capped at T-1)."""
        max_lag = int(min(max(max_lag, 0), self.nobs - 1))
        if max_lag <= self.max_lag_cached:
            return
        if self.diagonal_only:
            self._packed = _autocov_diagonal(self.series, max_lag)
            self._far.clear()
            self._powers.clear()
            return
        if 8 * (max_lag + 1) < self.nobs:
            resident = self.series.nbytes <= CACHE_RESIDENT_BYTES
            if (max_lag + 1) * self.k <= (DIRECT_LAG_WORK if resident else DIRECT_LAG_WORK_LARGE):
                full = _autocov_direct(self.series, max_lag)
            else:
                full = _autocov_blocks(self.series, max_lag)
        else:
            max_lag = self.nobs - 1
            full = None
        if full is not None:
            sym = full + np.transpose(full, (0, 2, 1))
            sym[0] = full[0]
            pair_major = np.ascontiguousarray(sym[:, self._iu[0], self._iu[1]].T)
        else:
            pair_major = _autocov_all_pairs(self.series, self._iu)
        self._packed = pair_major                 # (P, n_lags): lag j of pair p at [p, j]
        self._far.clear()
        self._powers.clear()

    def packed(self, max_lag: int) -> np.ndarray:
        """C_0..C_L with upper triangles packed: shape (L+1, k(k+1)/2) (a transposed view)."""
        self.ensure(max_lag)
        return self._packed[:, : int(min(max_lag, self.nobs - 1)) + 1].T

    # ------------------------------------------------------------------ using
    @single_blas_thread
    def kernel_sums(self, kernel, bandwidths) -> np.ndarray:
        """sum_j k(j/b) C_j (packed) for each bandwidth: (n_b, P). Finite-support kernels use
        lags 0..ceil(b)-1 (one matrix product); infinite-support kernels use every lag 0..T-1,
        the far lags by a factorised trigonometric sum (see `_qs_sums`)."""
        b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
        check_bandwidth_range(b, self.nobs)
        if kernel.finite_support:
            n_lags = int(kernel.lags_many(b, self.nobs).max()) + 1
            return kernel.weights(b, n_lags) @ self.packed(n_lags - 1)
        c = self.packed(self.nobs - 1)
        fast = ALL_LAG_SUMS.get(kernel.name)
        if fast is None or self.nobs <= 4096:
            # direct weights, a bounded number of bandwidths at a time
            step = max(1, int(4e6 // self.nobs))
            return np.vstack([kernel.weights(b[i: i + step], self.nobs) @ c
                              for i in range(0, len(b), step)])
        return fast(self, b, c)

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


def _autocov_direct(u: np.ndarray, max_lag: int, chunk: int = 1024) -> np.ndarray:
    """Gamma_0..Gamma_L (full k x k each) as direct lagged products, all lags in one product
    per chunk of rows: the rows t of a chunk times the window of rows t-L..t laid side by side
    (an overlapping strided view of the series, copied into one cache-sized buffer), which
    keeps the product wide enough to run near the machine's speed."""
    t_obs, k = u.shape
    lag = max_lag
    u = np.ascontiguousarray(u)
    flat = u.reshape(-1)
    width = (lag + 1) * k
    chunk = max(chunk, lag)
    buf = np.empty((min(chunk, t_obs), width))
    acc = np.zeros((k, width))
    step = flat.itemsize
    # row i of `windows` holds rows i..i+L of the series: the window of time t = i + L
    windows = as_strided(flat, shape=(t_obs - lag, width), strides=(k * step, step),
                         writeable=False)
    for start in range(0, t_obs, chunk):
        rows = min(chunk, t_obs - start)
        if start < lag:                             # the first rows: zeros before the series
            head = np.zeros((lag + rows) * k)
            head[lag * k:] = flat[: rows * k]
            window = as_strided(head, shape=(rows, width), strides=(k * step, step),
                                writeable=False)
        else:
            window = windows[start - lag: start - lag + rows]
        np.copyto(buf[:rows], window)
        acc += u[start: start + rows].T @ buf[:rows]
    # acc[:, m k + b] = sum_t u_t u_{t-L+m}[b]: lag j = L - m
    out = np.ascontiguousarray(acc.reshape(k, lag + 1, k)[:, ::-1, :].transpose(1, 0, 2))
    out /= t_obs
    return out


def _autocov_blocks(u: np.ndarray, max_lag: int) -> np.ndarray:
    """Gamma_0..Gamma_L (full k x k each) by overlap-save FFT blocks, frequency-domain sum.

    One buffer holds every window (a block of the series and the L observations before it);
    its transform is taken, the first L rows of each window are then zeroed in place and the
    transform taken again (the block alone, at the same offset), so no padded copies are made."""
    t_obs, k = u.shape
    lag = max_lag
    block = max(4 * (lag + 1), 256)
    n_fft = sfft.next_fast_len(block + lag, real=True)
    block = n_fft - lag                            # use the padding we pay for anyway
    n_blocks = -(-t_obs // block)
    win = np.empty((n_blocks, n_fft, k))
    body = win[:, lag:]
    full = t_obs // block
    body[:full] = u[: full * block].reshape(full, block, k)
    if full < n_blocks:
        rest = t_obs - full * block
        body[full, :rest] = u[full * block:]
        body[full, rest:] = 0.0
    win[0, :lag] = 0.0
    if lag:
        win[1:, :lag] = body[:-1, block - lag:]
    fe = sfft.rfft(win, axis=1)                   # (blocks, nf, k): windows
    win[:, :lag] = 0.0
    fa = sfft.rfft(win, axis=1)                   # the blocks alone
    del win
    np.conjugate(fa, out=fa)
    g = np.matmul(fa.transpose(1, 2, 0), fe.transpose(1, 0, 2))   # (nf, k, k)
    corr = sfft.irfft(g, n=n_fft, axis=0)         # corr[s] = sum_t a_t u_{t+s}'
    out = np.empty((lag + 1, k, k))
    out[0] = corr[0]
    if lag:
        out[1:] = corr[: -lag - 1: -1]            # Gamma_j = corr[-j]
    out /= t_obs
    return out


def _autocov_diagonal(u: np.ndarray, max_lag: int) -> np.ndarray:
    """Each column's own C_0..C_L (pair-major (k, L+1)) from one FFT padded to an even length
    n >= T + L + 1. The power spectrum P is real and even, so its inverse transform is a type-I
    discrete cosine transform of P divided by n (no complex inverse needed). The padded input's
    memory is reused for the power spectrum (fresh multi-megabyte arrays cost page faults)."""
    t_obs, k = u.shape
    n_fft = sfft.next_fast_len(t_obs + max_lag + 1, real=True)
    while n_fft % 2:
        n_fft = sfft.next_fast_len(n_fft + 1, real=True)
    n_freq = n_fft // 2 + 1
    buf = np.zeros((k, n_fft))
    buf[:, :t_obs] = u.T
    f = sfft.rfft(buf, axis=-1, workers=-1)
    parts = f.view(float)                          # (k, 2 n_freq): real and imaginary parts
    np.square(parts, out=parts)
    power = buf.reshape(-1)[: k * n_freq].reshape(k, n_freq)
    np.add(parts[:, 0::2], parts[:, 1::2], out=power)
    del f, parts
    out = sfft.dct(power, type=1, axis=-1, workers=-1, overwrite_x=True)
    res = out[:, : max_lag + 1] * (2.0 / (t_obs * n_fft))
    res[:, 0] *= 0.5
    return res


def _autocov_all_pairs(u: np.ndarray, iu, chunk: int = 8) -> np.ndarray:
    """C_0..C_{T-1} packed, pair-major (P, T): one padded FFT per column and inverse FFTs of
    the pairs' cross spectra, a few pairs at a time (bounded memory, contiguous, both cores)."""
    t_obs, k = u.shape
    n_fft = sfft.next_fast_len(2 * t_obs - 1, real=True)
    while n_fft % 2:
        n_fft = sfft.next_fast_len(n_fft + 1, real=True)
    f = sfft.rfft(np.ascontiguousarray(u.T), n=n_fft, axis=-1, workers=-1)   # (k, nf)
    fr, fi = np.ascontiguousarray(f.real), np.ascontiguousarray(f.imag)
    del f
    a_idx, b_idx = np.asarray(iu[0]), np.asarray(iu[1])
    out = np.empty((len(a_idx), t_obs))
    spec = np.empty((min(chunk, len(a_idx)), fr.shape[1]))
    tmp = np.empty(fr.shape[1])
    for start in range(0, len(a_idx), chunk):
        n = min(chunk, len(a_idx) - start)
        for i in range(n):
            a, b = a_idx[start + i], b_idx[start + i]
            # r_ab(j) + r_ab(-j) = irfft(2 Re(F_a conj F_b))[j]; the spectrum is real and
            # even, so the inverse is a type-I cosine transform divided by n
            np.multiply(fr[a], fr[b], out=spec[i])
            np.multiply(fi[a], fi[b], out=tmp)
            spec[i] += tmp
        cols = sfft.dct(spec[:n], type=1, axis=-1, workers=-1)
        out[start: start + n] = cols[:, :t_obs]
    out *= 2.0 / (t_obs * n_fft)
    out[:, 0] *= 0.5
    return out


def _qs_sums(cache: "MomentCache", b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Quadratic Spectral sums over every lag without evaluating k(j/b) at every lag.

    k(x) = 3/z^2 (sin z / z - cos z) with z = j theta, theta = 6 pi / (5 b). Lags below j0 (where
    z < 1 for every b) use k directly. Beyond, sum_j k(j theta) C_j =
    3/theta^3 Im(sum_j e^{i j theta} C_j / j^3) - 3/theta^2 Re(sum_j e^{i j theta} C_j / j^2),
    and with j = j0 + m M + r each trigonometric sum factorises into an inner product over r
    (one real matrix product for all bandwidths) and a short outer sum over m: exact up to
    rounding, with exponentials evaluated only at M + (T - j0)/M points per bandwidth.
    """
    qs = get_kernel("quadratic_spectral")
    theta = 6.0 * np.pi / (5.0 * b)
    need = int(np.ceil(1.0 / theta.min())) + 1
    reusable = [j for j in (*cache._far, *cache._powers) if need <= j <= 4 * need]  # past z = 1
    j0 = min(reusable) if reusable else min(cache.nobs, 1 << max(need - 1, 1).bit_length())
    near = qs.weights(b, j0) @ c[:j0]
    if j0 >= cache.nobs:
        return near
    n_far = cache.nobs - j0
    block = int(min(1024, max(64, 2 ** round(np.log2(np.sqrt(n_far))))))
    n_blk = -(-n_far // block)
    if len(b) <= FEW_BANDWIDTHS:
        return near + _qs_far_weights(cache, theta, j0, block, n_blk, c)
    rows = c.T                                    # (P, T): each pair's lags, contiguous
    p_all = rows.shape[0]
    cacheable = 2 * n_far * p_all <= FAR_CACHE_LIMIT
    if cacheable and j0 in cache._far:
        return near + _qs_far(theta, j0, block, n_blk, cache._far[j0], p_all)
    out = np.empty((len(b), p_all))
    width = p_all if cacheable else max(1, FAR_CACHE_LIMIT // (2 * n_far))
    for start in range(0, p_all, width):
        stop = min(start + width, p_all)
        prepared = _qs_prepare(rows[start:stop], j0, block, n_blk)
        if cacheable:
            cache._far[j0] = prepared
        out[:, start:stop] = _qs_far(theta, j0, block, n_blk, prepared, stop - start)
    return near + out


def _qs_far_weights(cache, theta, j0, block, n_blk, c):
    """The far-lag sums for a few bandwidths: the weights k(j theta) of lags j0..T-1 from the
    same factorisation (cos and sin of j theta from outer products of M + (T - j0)/M values,
    times cached 1/j^3 and 1/j^2), then one pass over the cached lags per bandwidth. Half the
    memory traffic of the prepared tail, which pays off only for many bandwidths at once."""
    n_far = cache.nobs - j0
    if j0 not in cache._powers:
        j = np.arange(j0, j0 + n_blk * block, dtype=float)
        inv2 = 1.0 / j**2
        cache._powers[j0] = (inv2 / j, inv2)
    inv3, inv2 = cache._powers[j0]
    r = np.arange(block, dtype=float)
    a = j0 + block * np.arange(n_blk, dtype=float)
    tail = c[j0:]
    out = np.empty((len(theta), c.shape[1]))
    for i, th in enumerate(theta):
        cr, sr, ca, sa = np.cos(r * th), np.sin(r * th), np.cos(a * th), np.sin(a * th)
        sin_j = np.multiply.outer(sa, cr)                  # sin((a + r) theta)
        sin_j += np.multiply.outer(ca, sr)
        cos_j = np.multiply.outer(ca, cr)                  # cos((a + r) theta)
        cos_j -= np.multiply.outer(sa, sr)
        w = sin_j.reshape(-1)
        w *= inv3
        w *= 3.0 / th**3
        cos_j = cos_j.reshape(-1)
        cos_j *= inv2
        w -= (3.0 / th**2) * cos_j
        out[i] = w[:n_far] @ tail
    return out


def _qs_prepare(rows: np.ndarray, j0: int, block: int, n_blk: int) -> np.ndarray:
    """The far lags of each series divided by j^3 and by j^2, laid out for `_qs_far`:
    (p * 2 * n_blk, block), row (q, part, m) holding lags j0 + m block .. j0 + (m+1) block - 1
    of series q (zero past the last lag). Built by contiguous passes over the cache."""
    p, n_lags = rows.shape
    n_far = n_lags - j0
    prepared = np.empty((p, 2, n_blk * block))
    j = np.arange(j0, n_lags, dtype=float)
    inv2 = 1.0 / j**2
    inv3 = inv2 / j
    np.multiply(rows[:, j0:], inv3, out=prepared[:, 0, :n_far])
    np.multiply(rows[:, j0:], inv2, out=prepared[:, 1, :n_far])
    prepared[:, :, n_far:] = 0.0
    return prepared.reshape(p * 2 * n_blk, block)


def _qs_far(theta, j0, block, n_blk, prepared, p):
    """The far-lag part of the Quadratic Spectral sums from a prepared tail (see _qs_sums)."""
    n_b = len(theta)
    phase = theta[:, None] * np.arange(block, dtype=float)[None, :]
    trig = np.vstack([np.cos(phase), np.sin(phase)])              # (2 n_b, block)
    # one thread (the caller's limit): a memory-bound product that two threads speed up only on
    # an idle machine, and slow down several times when another process is running
    inner = (trig @ prepared.T).reshape(2, n_b, p, 2, n_blk)       # [cos|sin, b, q, part, m]
    cos_sums, sin_sums = inner[0], inner[1]
    angle = (j0 + block * np.arange(n_blk, dtype=float))[:, None] * theta[None, :]
    oc, os_ = np.cos(angle), np.sin(angle)                          # e^{i a_m theta}, (m, b)
    # sum_m e^{i a_m theta} (C_m + i S_m): real part sum oc C - os S, imaginary sum oc S + os C;
    # the j^-3 sums enter by their imaginary part, the j^-2 sums by their real part
    im3 = (np.einsum("mb,bqm->bq", oc, sin_sums[:, :, 0])
           + np.einsum("mb,bqm->bq", os_, cos_sums[:, :, 0]))
    re2 = (np.einsum("mb,bqm->bq", oc, cos_sums[:, :, 1])
           - np.einsum("mb,bqm->bq", os_, sin_sums[:, :, 1]))
    return (3.0 / theta**3)[:, None] * im3 - (3.0 / theta**2)[:, None] * re2


#: Kernels with a closed form that sums every lag faster than evaluating k(j/b) at each lag.
ALL_LAG_SUMS = {"quadratic_spectral": _qs_sums}
