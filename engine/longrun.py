"""Estimators of S, the long-run covariance of the moment contributions u_t.

Basis: S is estimated for the moment contributions expressed in the orthonormal basis of the
regressors (fit.scores = q_t e_t); fit.long_run_original_basis maps it back to x_t e_t.
Scale: S is per observation (the "Omega" scale), S = lim Var(T^-1/2 sum u_t); the sandwich is
V = (1/T) Q^-1 S Q^-1 with Q = X'X/T. Each function here returns S only; it never forms the
sandwich (see engine.covariance).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from .errors import EstimationError, SpecificationError
from .kernels import Kernel

#: Leverage above 1 - LEVERAGE_TOL counts as 1 (the residual is zero by construction).
LEVERAGE_TOL = 1e-10


@dataclass
class LongRun:
    """One estimate of S and how it was obtained."""

    S: np.ndarray
    bandwidth: float | None = None
    lags: int | None = None
    factor: float = 1.0                     # small-sample factor applied to S
    rule: str | None = None                 # how the bandwidth was chosen, in words
    notes: list[str] = field(default_factory=list)
    flags: set[str] = field(default_factory=set)
    reference: str = "normal"               # reference law its theory gives ("auto")
    df: float | None = None                 # degrees of freedom of a t / F reference


def classical(fit) -> LongRun:
    """S = s^2 X'X/T with s^2 = e'e/(T-k): V = s^2 (X'X)^-1 (orthonormal basis: Q'Q = I)."""
    s = fit.sigma2 * (fit.q.T @ fit.q) / fit.nobs
    return LongRun(S=s, reference="t", df=fit.df_resid,
                   notes=["assumes errors uncorrelated with constant variance"])


def heteroskedasticity_robust(fit, kind: str) -> LongRun:
    """White-type S = (1/T) sum omega_t x_t x_t' for HC0-HC3 (MacKinnon & White 1985)."""
    e2 = fit.resid**2
    factor = 1.0
    if kind in ("hc2", "hc3"):
        h = fit.leverage
        bad = np.flatnonzero(h > 1.0 - LEVERAGE_TOL)
        if bad.size:
            rows = ", ".join(str(fit.index[i]) for i in bad[:5])
            raise EstimationError(
                f"{kind.upper()} is undefined: {bad.size} observation(s) have leverage 1 "
                f"(rows {rows}); each is fitted exactly, e.g. by a dummy for one row. "
                "Use HC0/HC1 or drop those rows.")
        omega = e2 / (1.0 - h) ** (1 if kind == "hc2" else 2)
    else:
        omega = e2
        if kind == "hc1":
            factor = fit.small_sample_factor
    q = fit.q
    s = (q * omega[:, None]).T @ q / fit.nobs * factor
    return LongRun(S=s, factor=factor)


def kernel_many(fit, kernel: Kernel, bandwidths, *, small_sample: bool = False,
                repair: bool = True):
    """Kernel estimates S(b) = Gamma_0 + sum_j k(j/b)(Gamma_j + Gamma_j') for many b at once.

    Returns (S array (n, k, k), lags array (n,), min eigenvalue before repair (n,), repaired (n,)).
    Uses only the autocovariance cache of `fit.moments`.
    """
    b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
    lags = np.array([kernel.lags_used(x, fit.nobs) for x in b])
    s = fit.moments.unpack(fit.moments.kernel_sums(kernel, b))
    if small_sample:
        s = s * fit.small_sample_factor
    min_eig = np.full(len(b), np.nan)
    repaired = np.zeros(len(b), dtype=bool)
    if not kernel.psd:
        vals, vecs = np.linalg.eigh(s)
        min_eig = vals[:, 0]
        scale = np.maximum(np.abs(vals).max(axis=1), np.finfo(float).tiny)
        neg = vals[:, 0] < -1e-12 * scale
        if repair and neg.any():
            clipped = np.clip(vals[neg], 0.0, None)
            s[neg] = np.einsum("nij,nj,nkj->nik", vecs[neg], clipped, vecs[neg])
            repaired = neg
    # S collapses to (numerically) zero in some direction when the weights are flat over every
    # lag (truncated kernel with b >= T: the scores sum to zero). Never report rounding noise.
    g0 = np.diag(fit.moments.gamma0())
    collapsed = (np.diagonal(s, axis1=1, axis2=2) <= 1e-10 * g0).any(axis=1)
    s[collapsed] = np.nan
    return s, lags, min_eig, repaired


def kernel(fit, kernel: Kernel, bandwidth: float, *, small_sample=False, repair=True,
           rule: str | None = None) -> LongRun:
    s, lags, min_eig, repaired = kernel_many(fit, kernel, [bandwidth], small_sample=small_sample,
                                             repair=repair)
    if np.isnan(s[0]).any():
        raise EstimationError(
            f"the {kernel.display_name} estimate of S is zero at b = {bandwidth:g} (T = "
            f"{fit.nobs}): with weights that stay flat over every lag the autocovariances of "
            "the scores sum to zero. Choose a smaller bandwidth.")
    out = LongRun(S=s[0], bandwidth=float(bandwidth), lags=int(lags[0]),
                  factor=fit.small_sample_factor if small_sample else 1.0, rule=rule)
    if not kernel.psd and np.isfinite(min_eig[0]) and min_eig[0] < 0:
        if repaired[0]:
            out.flags.add("psd_repaired")
            out.notes.append(f"the {kernel.display_name} estimate of S was not positive "
                             f"semi-definite (smallest eigenvalue {min_eig[0]:.3g}); negative "
                             "eigenvalues were set to zero (eigenvalue repair)")
        else:
            out.flags.add("not_psd")
            out.notes.append(f"the {kernel.display_name} estimate of S is not positive "
                             f"semi-definite (smallest eigenvalue {min_eig[0]:.3g}); some "
                             "variances may be negative. Turn the eigenvalue repair on.")
    return out


# --------------------------------------------------------------------------- parametric (VAR)

def _var_design(v: np.ndarray, max_lag: int):
    """Common sample t = max_lag..T-1: Y and the stacked lags [v_{t-1}, ..., v_{t-p}]."""
    t_obs = v.shape[0]
    y = v[max_lag:]
    z = np.hstack([v[max_lag - i: t_obs - i] for i in range(1, max_lag + 1)]) if max_lag \
        else np.zeros((t_obs, 0))
    return y, z


def var_parametric(fit, *, max_lag=None, criterion="bic", selection="equation") -> LongRun:
    """VAR-HAC (den Haan & Levin 1997): fit a VAR to the scores, lag order by AIC/BIC per
    equation (or jointly), and use S = (I - sum A_i)^-1 Sigma_e (I - sum A_i)^-1'.

    criterion: "bic" (ln T' penalty), "aic" (2), or "fixed" (exactly max_lag lags; max_lag=1
    is the simple VAR(1) parametric correction). Information criteria are
    ln(sigma_a^2(p)) + penalty * (k p) / T' on a common sample of T' = T - max_lag rows.
    """
    v = fit.raw_scores
    t_obs, k = v.shape
    if max_lag is None:
        max_lag = int(t_obs ** (1.0 / 3.0))
    max_lag = int(max_lag)
    limit = (t_obs - 1) // (k + 1)
    if max_lag < 0 or max_lag > limit:
        raise EstimationError(f"VAR lag order {max_lag} is too long for T = {t_obs} and k = {k} "
                              f"scores (at most {limit})")
    y, z = _var_design(v, max_lag)
    t_eff = y.shape[0]
    penalty = {"bic": np.log(t_eff), "aic": 2.0}.get(criterion)
    orders = np.full(k, max_lag)
    if criterion != "fixed":
        # one QR of all lags: the residual sum of squares on the first k*p columns is
        # ||y||^2 - sum of the first k*p squared entries of Q'y (nested regressions)
        qty = sla.qr(z, mode="economic")[0].T @ y if max_lag else np.zeros((0, k))
        total = (y**2).sum(axis=0)
        explained = np.vstack([np.zeros(k), np.cumsum(qty**2, axis=0)])[:: k] \
            if max_lag else np.zeros((1, k))
        rss = np.maximum(total[None, :] - explained, 1e-300)          # (max_lag + 1, k)
        p_grid = np.arange(max_lag + 1)
        if selection == "equation":
            ic = np.log(rss / t_eff) + penalty * k * p_grid[:, None] / t_eff
            orders = ic.argmin(axis=0)
        else:
            ic = np.empty(max_lag + 1)
            for p in p_grid:
                zp = z[:, : k * p]
                resid = y - zp @ np.linalg.lstsq(zp, y, rcond=None)[0] if p else y
                ic[p] = np.linalg.slogdet(resid.T @ resid / t_eff)[1] + penalty * k * k * p / t_eff
            orders = np.full(k, int(ic.argmin()))
    coef = np.zeros((k * max_lag, k))          # column a: equation a
    resid = np.empty_like(y)
    for a in range(k):
        p = int(orders[a])
        if p:
            zp = z[:, : k * p]
            coef[: k * p, a] = np.linalg.lstsq(zp, y[:, a], rcond=None)[0]
        resid[:, a] = y[:, a] - z @ coef[:, a] if max_lag else y[:, a]
    sigma = resid.T @ resid / t_eff
    a_sum = sum(coef[k * i: k * (i + 1)].T for i in range(max_lag)) if max_lag else np.zeros((k, k))
    p_max = int(orders.max()) if k else 0
    if p_max:
        companion = np.zeros((k * p_max, k * p_max))
        companion[:k] = coef[: k * p_max].T
        companion[k:, :-k] = np.eye(k * (p_max - 1))
        root = float(np.abs(np.linalg.eigvals(companion)).max())
        if root >= 0.999:
            raise EstimationError(f"the VAR fitted to the scores has a root of modulus {root:.3f}"
                                  " (non-stationary); the parametric long-run variance does not "
                                  "exist. Use a kernel estimator or EWC.")
    inv = np.linalg.inv(np.eye(k) - a_sum)
    s_raw = inv @ sigma @ inv.T
    s_q = fit.bread.T @ s_raw @ fit.bread
    how = (f"VAR orders by {criterion.upper()} "
           + ("per equation: " + ", ".join(f"{t} {int(o)}" for t, o in zip(fit.terms, orders))
              if selection == "equation" else f"(joint): {int(orders[0])}")
           if criterion != "fixed" else f"VAR({max_lag}) fixed order")
    return LongRun(S=0.5 * (s_q + s_q.T), rule=how + f"; max order {max_lag}",
                   notes=[how])


# --------------------------------------------------------------------------- EWC

def ewc_terms(nobs: int, terms) -> tuple[int, str]:
    """B: a whole number, or "llsw" = floor(0.4 T^(2/3)) (Lazarus, Lewis, Stock & Watson 2018)."""
    if isinstance(terms, str):
        if terms != "llsw":
            raise SpecificationError(f"EWC terms must be a whole number or 'llsw', got {terms!r}")
        b = max(int(np.floor(0.4 * nobs ** (2.0 / 3.0))), 1)
        return b, f"B = floor(0.4 T^(2/3)) = {b} cosine terms (LLSW 2018)"
    return int(terms), f"B = {int(terms)} cosine terms (fixed)"


def cosine_transform(fit) -> np.ndarray:
    """Lambda_j = sqrt(2/T) sum_t u_t cos(pi j (t - 1/2) / T), j = 0..T-1 (row j), cached."""
    cache = fit.__dict__.get("_cosine")
    if cache is None:
        from scipy.fft import dct
        t_obs = fit.nobs
        cache = dct(fit.scores, type=2, axis=0) * 0.5 * np.sqrt(2.0 / t_obs)
        fit.__dict__["_cosine"] = cache
    return cache


def ewc(fit, *, terms="llsw", small_sample=False) -> LongRun:
    """Equal-weighted cosine estimator: S = (1/B) sum_{j=1}^B Lambda_j Lambda_j'. With B terms,
    the t statistic is referred to t(B) and m restrictions to F(m, B - m + 1) (LLSW 2018)."""
    b, how = ewc_terms(fit.nobs, terms)
    if b >= fit.nobs:
        raise SpecificationError(f"EWC needs fewer cosine terms than observations (B = {b}, "
                                 f"T = {fit.nobs})")
    lam = cosine_transform(fit)[1: b + 1]
    s = lam.T @ lam / b
    factor = fit.small_sample_factor if small_sample else 1.0
    return LongRun(S=s * factor, factor=factor, rule=how, reference="ewc-t", df=float(b),
                   notes=[f"EWC with {how}; reference law t({b})"])
