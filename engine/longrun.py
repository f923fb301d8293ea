"""Estimators of S, the long-run covariance of a model's moment contributions.

Basis: S is estimated for the working contributions of the model (`model.working_contributions`;
for OLS q_t e_t in the orthonormal basis of X); `model.to_original` maps it to the S of the
contributions as named (x_t e_t). Scale: S is per observation (the "Omega" scale),
S = lim Var(T^-1/2 sum g_t). Each function here returns S (a `LongRun`) only; the model forms the
sandwich (`model.covariance_from_long_run`). None of them knows which model produced the moments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from .errors import EstimationError, SpecificationError
from .kernels import Kernel
from .laws import EWCLaw, Law, StudentT

#: Leverage above 1 - LEVERAGE_TOL counts as 1 (the residual is zero by construction).
LEVERAGE_TOL = 1e-10
#: A kernel estimate whose diagonal is this small against Gamma_0's has collapsed to zero.
COLLAPSE_TOL = 1e-10


@dataclass
class LongRun:
    """One estimate of S and how it was obtained."""

    S: np.ndarray | None
    bandwidth: float | None = None          # kernel bandwidth b
    lags: int | None = None                 # autocovariance lags used (beyond lag 0)
    factor: float = 1.0                     # small-sample factor applied to S
    how: str | None = None                  # how the tuning value was chosen, in words
    notes: list[str] = field(default_factory=list)
    flags: set[str] = field(default_factory=set)
    law: Law | None = None                  # the law the estimator's theory gives (None: normal)
    tuning: float | None = None             # the value on the family's tuning axis
    span: int | None = None                 # periods b is relative to (default: the model's T)


def classical(model) -> LongRun:
    """S = s^2 (1/T) sum w_t w_t' (OLS: V = s^2 (X'X)^-1), t(T - k) reference."""
    law = StudentT(model.df_resid, getattr(model, "df_reason", "T - k"))
    return LongRun(S=model.homoskedastic_long_run(), law=law,
                   notes=["assumes errors uncorrelated with constant variance"])


def heteroskedasticity_robust(model, kind: str) -> LongRun:
    """White-type S = (1/T) sum omega_t w_t w_t' for HC0-HC3 (MacKinnon & White 1985); HC0 and
    HC1 are (1/T) sum g_t g_t' of the moment contributions, for any moment model."""
    factor = model.small_sample_factor if kind == "hc1" else 1.0
    if kind in ("hc0", "hc1"):
        outer = getattr(model, "outer", None)
        if outer is not None:
            gg = outer()
        else:
            g = model.working_contributions
            gg = g.T @ g
        return LongRun(S=gg / model.nobs * factor, factor=factor)
    h = getattr(model, "leverage", None)
    if kind in ("hc2", "hc3"):
        if h is None or getattr(model, "resid", None) is None:
            raise EstimationError(f"{kind.upper()} needs the leverage of each observation, which "
                                  f"is not defined for this model ({model.kind}); use HC0 or "
                                  "HC1")
        bad = np.flatnonzero(h > 1.0 - LEVERAGE_TOL)
        if bad.size:
            from .model import index_label
            rows = ", ".join(str(index_label(model.index[i])) for i in bad[:5])
            raise EstimationError(
                f"{kind.upper()} is undefined: {bad.size} observation(s) have leverage 1 "
                f"(rows {rows}); each is fitted exactly, e.g. by a dummy for one row. "
                "Use HC0/HC1 or drop those rows.")
        omega = model.resid**2 / (1.0 - h) ** (1 if kind == "hc2" else 2)
    w = model.working_design
    s = (w * omega[:, None]).T @ w / model.nobs * factor
    return LongRun(S=s, factor=factor)


def kernel_many(model, kernel: Kernel, bandwidths, *, small_sample: bool = False,
                repair: bool = True, cache=None):
    """Kernel estimates S(b) = Gamma_0 + sum_j k(j/b)(Gamma_j + Gamma_j') for many b at once,
    from the autocovariance cache only (`cache`, default `model.moments`).

    Returns (S (n, m, m), lags (n,), smallest eigenvalue before repair (n,; NaN for PSD kernels),
    status (n,) with "" for an ordinary estimate, "repaired" (negative eigenvalues set to zero),
    "not_psd" (negative eigenvalues kept: repair off) or "collapsed" (S is zero to rounding in
    some direction: with weights flat over every lag the autocovariances sum to zero; S is NaN
    there, never rounding noise))."""
    cache = model.moments if cache is None else cache
    b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
    lags = kernel.lags_many(b, cache.nobs)
    s = cache.unpack(cache.kernel_sums(kernel, b))
    if small_sample:
        s = s * model.small_sample_factor
    min_eig = np.full(len(b), np.nan)
    status = np.full(len(b), "", dtype=object)
    g0 = np.abs(np.diag(cache.gamma0()))
    collapsed = ((np.abs(np.diagonal(s, axis1=1, axis2=2)) <= COLLAPSE_TOL * g0)
                 & (g0 > 0)).any(axis=1)
    if not kernel.psd:
        vals, vecs = np.linalg.eigh(np.where(np.isfinite(s), s, 0.0))
        min_eig = vals[:, 0]
        scale = np.maximum(np.abs(vals).max(axis=1), np.finfo(float).tiny)
        neg = (vals[:, 0] < -1e-12 * scale) & ~collapsed
        if neg.any():
            if repair:
                clipped = np.clip(vals[neg], 0.0, None)
                s[neg] = np.einsum("nij,nj,nkj->nik", vecs[neg], clipped, vecs[neg])
                status[neg] = "repaired"
            else:
                status[neg] = "not_psd"
    s[collapsed] = np.nan
    status[collapsed] = "collapsed"
    return s, lags, min_eig, status


def kernel(model, kernel: Kernel, bandwidth: float, *, small_sample=False, repair=True,
           how: str | None = None, cache=None) -> LongRun:
    s, lags, min_eig, status = kernel_many(model, kernel, [bandwidth], small_sample=small_sample,
                                           repair=repair, cache=cache)
    if status[0] == "collapsed":
        raise EstimationError(
            f"the {kernel.label} estimate of S is zero at b = {bandwidth:g} (T = "
            f"{model.nobs}): with weights that stay flat over every lag the autocovariances of "
            "the moment contributions sum to zero. Choose a smaller bandwidth.")
    out = LongRun(S=s[0], bandwidth=float(bandwidth), lags=int(lags[0]),
                  factor=model.small_sample_factor if small_sample else 1.0, how=how,
                  tuning=float(bandwidth))
    if status[0] == "repaired":
        out.flags.add("psd_repaired")
        out.notes.append(f"the {kernel.label} estimate of S was not positive semi-definite "
                         f"(smallest eigenvalue {min_eig[0]:.3g}); negative eigenvalues were set "
                         "to zero (eigenvalue repair)")
        vals = np.linalg.eigvalsh(s[0])
        if vals[0] <= 1e-10 * max(vals[-1], np.finfo(float).tiny):
            out.flags.add("near_singular")
            out.notes.append("after the repair S is singular: the standard error of some "
                             "combination of coefficients is zero, and t statistics involving "
                             "it are not meaningful")
    elif status[0] == "not_psd":
        out.flags.add("not_psd")
        out.notes.append(f"the {kernel.label} estimate of S is not positive semi-definite "
                         f"(smallest eigenvalue {min_eig[0]:.3g}); some variances may be "
                         "negative. Turn the eigenvalue repair on.")
    return out


# --------------------------------------------------------------------------- parametric (VAR)

def var_order_limit(nobs: int, m: int) -> int:
    """The largest VAR order the sample supports for m moment series."""
    return max((nobs - 1) // (m + 1), 0)


#: The default largest VAR order is int(T^(1/3)), but at most this.
VAR_DEFAULT_MAX_ORDER = 24


def _lag_products(v: np.ndarray, p: int):
    """Cross products of a VAR(p) regression on the common sample t = p..T-1, without forming
    the T x mp matrix of lags: Z'Z, Z'Y and Y'Y accumulated over row chunks (bounded memory)."""
    t_obs, m = v.shape
    width = m * p
    zz, zy, yy = np.zeros((width, width)), np.zeros((width, m)), np.zeros((m, m))
    step = max(1, int(4_000_000 // max(width, 1)))
    for a in range(p, t_obs, step):
        b = min(a + step, t_obs)
        y = v[a:b]
        yy += y.T @ y
        if p:
            z = np.hstack([v[a - i: b - i] for i in range(1, p + 1)])
            zz += z.T @ z
            zy += z.T @ y
    return zz, zy, yy


def var_parametric(model, *, max_order=None, criterion="bic", selection="equation") -> LongRun:
    """VAR-HAC (den Haan & Levin 1997): fit a VAR to the moment contributions by least squares,
    order by AIC/BIC per equation (or jointly), and use S = (I - sum A_i)^-1 Sigma_e (I - sum
    A_i)^-1'.

    criterion: "bic" (ln T' penalty), "aic" (2), or "fixed" (exactly max_order lags; 1 is the
    simple VAR(1) parametric correction). Information criteria are
    ln(sigma_a^2(p)) + penalty * (m p) / T' on a common sample of T' = T - max_order rows. The
    regressions use the cross products of the lagged series (one Cholesky factor gives every
    nested order), so memory stays bounded for long series; the series are scaled to unit
    variance first. max_order defaults to int(T^(1/3)), at most VAR_DEFAULT_MAX_ORDER.
    """
    v = model.contributions
    t_obs, k = v.shape
    if max_order is None:
        max_order = min(int(t_obs ** (1.0 / 3.0)), VAR_DEFAULT_MAX_ORDER)
    max_order = int(max_order)
    limit = var_order_limit(t_obs, k)
    if max_order < 0 or max_order > limit:
        raise EstimationError(f"VAR order {max_order} is too long for T = {t_obs} and {k} "
                              f"moment series (at most {limit})")
    scale = np.sqrt((v**2).mean(axis=0))
    if not np.isfinite(scale).all() or (scale == 0).any():
        raise EstimationError("a moment contribution is zero or not finite throughout; "
                              "VAR-HAC is not available")
    vs = v / scale
    p = max_order
    t_eff = t_obs - p
    zz, zy, yy = _lag_products(vs, p)
    try:
        r = sla.cholesky(zz, lower=False) if p else np.zeros((0, 0))
    except (np.linalg.LinAlgError, ValueError):
        raise EstimationError("the lagged moment contributions are collinear, so the VAR cannot "
                              "be fitted; use a kernel estimator or EWC") from None
    c = sla.solve_triangular(r, zy, trans="T") if p else np.zeros((0, k))    # R^-T Z'Y
    orders = _var_orders(c, yy, k, p, t_eff, criterion, selection)
    coef = np.zeros((k * p, k))          # column a: equation a
    for a in range(k):
        q = int(orders[a]) * k
        if q:
            coef[:q, a] = sla.solve_triangular(r[:q, :q], c[:q, a])
    sigma = (yy - coef.T @ zy - zy.T @ coef + coef.T @ zz @ coef) / t_eff
    a_sum = sum(coef[k * i: k * (i + 1)].T for i in range(p)) if p else np.zeros((k, k))
    _check_var_stationary(coef, orders, k)
    try:
        inv = np.linalg.inv(np.eye(k) - a_sum)
    except np.linalg.LinAlgError:
        raise EstimationError("the VAR fitted to the moment contributions has a unit root "
                              "(I - sum A is singular); use a kernel estimator or EWC") from None
    s_scaled = inv @ sigma @ inv.T
    s_w = model.to_working(s_scaled * np.outer(scale, scale))
    names = model.moment_names
    if criterion == "fixed":
        how = f"VAR({max_order}), order fixed"
    elif selection == "equation":
        how = (f"VAR orders by {criterion.upper()} per equation: "
               + ", ".join(f"{t} {int(o)}" for t, o in zip(names, orders))
               + f" (largest order tried {max_order})")
    else:
        how = f"VAR order by {criterion.upper()} (joint): {int(orders[0])} (largest tried {max_order})"
    p_max = int(orders.max()) if k else 0
    return LongRun(S=0.5 * (s_w + s_w.T), how=how, notes=[how],
                   tuning=float(max_order if criterion == "fixed" else p_max))


def _var_orders(c, yy, k, p, t_eff, criterion, selection) -> np.ndarray:
    """The order of each equation: p when fixed, else the minimiser of the criterion over nested
    orders 0..p (residual sums of squares from the Cholesky-rotated cross products)."""
    if criterion == "fixed" or p == 0:
        return np.full(k, p)
    penalty = {"bic": np.log(t_eff), "aic": 2.0}[criterion]
    explained = np.vstack([np.zeros(k), np.cumsum(c**2, axis=0)])[::k]       # (p + 1, k)
    p_grid = np.arange(p + 1)
    if selection == "equation":
        rss = np.maximum(np.diag(yy)[None, :] - explained, 1e-300)
        ic = np.log(rss / t_eff) + penalty * k * p_grid[:, None] / t_eff
        return ic.argmin(axis=0)
    ic = np.empty(p + 1)
    for q in p_grid:
        cq = c[: k * q]
        resid = (yy - cq.T @ cq) / t_eff
        sign, logdet = np.linalg.slogdet(resid)
        ic[q] = (logdet if sign > 0 else np.inf) + penalty * k * k * q / t_eff
    return np.full(k, int(ic.argmin()))


def _check_var_stationary(coef, orders, k) -> None:
    p_max = int(orders.max()) if k else 0
    if not p_max:
        return
    companion = np.zeros((k * p_max, k * p_max))
    companion[:k] = coef[: k * p_max].T
    companion[k:, :-k] = np.eye(k * (p_max - 1))
    root = float(np.abs(np.linalg.eigvals(companion)).max())
    if root >= 0.999:
        raise EstimationError(f"the VAR fitted to the moment contributions has a root of "
                              f"modulus {root:.3f} (non-stationary); the parametric long-run "
                              "variance does not exist. Use a kernel estimator or EWC.")


# --------------------------------------------------------------------------- EWC

def ewc_cosines(nobs: int, cosines) -> tuple[int, str]:
    """B: a whole number, or "llsw" = floor(0.4 T^(2/3)) (Lazarus, Lewis, Stock & Watson 2018)."""
    if isinstance(cosines, str):
        if cosines != "llsw":
            raise SpecificationError(f"EWC cosine terms must be a whole number or 'llsw', "
                                     f"got {cosines!r}")
        b = max(int(np.floor(0.4 * nobs ** (2.0 / 3.0))), 1)
        return b, f"B = floor(0.4 T^(2/3)) = {b} cosine terms (LLSW 2018)"
    return int(cosines), f"B = {int(cosines)} cosine terms (fixed)"


def cosine_transform(model) -> np.ndarray:
    """Lambda_j = sqrt(2/T) sum_t g_t cos(pi j (t - 1/2) / T), j = 0..T-1 (row j), cached."""
    def build():
        from scipy.fft import dct
        return dct(model.working_contributions, type=2, axis=0) * 0.5 * np.sqrt(2.0 / model.nobs)
    return model.caches.get("cosines", build)


def ewc(model, *, cosines="llsw", small_sample=False) -> LongRun:
    """Equal-weighted cosine estimator: S = (1/B) sum_{j=1}^B Lambda_j Lambda_j'. With B terms,
    the t statistic is referred to t(B) and m restrictions to F(m, B - m + 1) (LLSW 2018)."""
    b, how = ewc_cosines(model.nobs, cosines)
    if b >= model.nobs:
        raise SpecificationError(f"EWC needs fewer cosine terms than observations (B = {b}, "
                                 f"T = {model.nobs})")
    lam = cosine_transform(model)[1: b + 1]
    s = lam.T @ lam / b
    factor = model.small_sample_factor if small_sample else 1.0
    return LongRun(S=s * factor, factor=factor, how=how, law=EWCLaw(b), tuning=float(b),
                   notes=[f"EWC with {how}; reference law t({b})"])


# --------------------------------------------------------------------------- panels

def _require_clusters(model, dim: str, groups: int) -> None:
    if groups < 2:
        raise EstimationError(f"clustering by {dim} needs at least two clusters; this sample has "
                              f"{groups}")
    if groups <= model.k:
        raise EstimationError(
            f"clustering by {dim} needs more clusters than coefficients: {groups} clusters, "
            f"{model.k} coefficients. The clustered S has rank below k, so some standard errors "
            "would be zero or undefined; cluster by the other dimension, use Driscoll-Kraay, or "
            "drop regressors")


def cluster_factor(model, groups: int, nested: bool = False) -> float:
    """G/(G-1) x (N-1)/(N-K), the usual small-sample factor of a one-way cluster estimate. K
    counts the coefficients and the effect parameters absorbed, except fixed effects nested in
    the clusters (entity effects with clusters by entity), which are not counted (the
    convention of Cameron & Miller 2015, J. Human Resources 50(2), and linearmodels): K is then
    the coefficients plus one for the overall level the effects absorb."""
    n, kk = model.nobs, model.nobs - model.df_resid
    if nested:
        kk = model.k + 1
    return groups / (groups - 1.0) * (n - 1.0) / (n - kk)


def _nested(model, dim: str) -> bool:
    """The model's only fixed effects are those of the clusters' dimension."""
    return tuple(getattr(getattr(model, "panel", None), "effects", ())) == (dim,)


def _one_way(model, dim: str, small_sample: bool, nested: bool = False):
    s = model.group_sums(dim)
    groups = s.shape[0]
    _require_clusters(model, dim, groups)
    factor = cluster_factor(model, groups, nested) if small_sample else 1.0
    return s.T @ s / model.nobs * factor, groups, factor


def clip_to_psd(s: np.ndarray, what: str, out: LongRun) -> np.ndarray:
    """Set negative eigenvalues of a symmetric estimate to zero, flagging and noting it."""
    s = 0.5 * (s + s.T)
    vals, vecs = np.linalg.eigh(s)
    scale = max(float(np.abs(vals).max()), np.finfo(float).tiny)
    if vals[0] < -1e-12 * scale:
        out.flags.add("psd_repaired")
        out.notes.append(f"the {what} estimate of S was not positive semi-definite (smallest "
                         f"eigenvalue {vals[0]:.3g}); negative eigenvalues were set to zero")
        s = (vecs * np.clip(vals, 0.0, None)) @ vecs.T
    return s


def cluster(model, by: str, small_sample: bool = True) -> LongRun:
    """Cluster-robust S: (1/N) sum_g s_g s_g' for the sums s_g of the moment contributions in each
    cluster (by entity or by period), with the factor G/(G-1)(N-1)/(N-K) when asked for. Two-way
    (Cameron, Gelbach & Miller 2011): S_entity + S_time - S_cell, each term with its own G (a
    cell is one row, so the last term is the heteroskedasticity-only S), repaired to PSD by
    eigenvalue clipping (flagged) when the difference is not PSD. Reference law t(G - 1), with
    the smaller G for two-way."""
    if by in ("entity", "time"):
        nested = _nested(model, by)
        s, groups, factor = _one_way(model, by, small_sample, nested)
        return LongRun(S=s, factor=factor, law=StudentT(groups - 1, f"G - 1, G = {groups} "
                                                        f"{'entities' if by == 'entity' else 'periods'}"),
                       notes=[f"clustered by {by}: {groups} clusters"
                              + (f", small-sample factor {factor:.4g}" if small_sample else
                                 ", no small-sample factor")
                              + ("; the {0} effects are nested in the clusters and not counted "
                                 "in K".format(by) if nested and small_sample else "")])
    se, ge, fe = _one_way(model, "entity", small_sample)
    st, gt, ft = _one_way(model, "time", small_sample)
    n = model.nobs
    fc = n / (n - (n - model.df_resid)) if small_sample else 1.0
    out = LongRun(S=None, factor=fe)
    s = se + st - model.outer() / n * fc
    out.S = clip_to_psd(s, "two-way clustered", out)
    g = min(ge, gt)
    out.law = StudentT(g - 1, f"G - 1 with the smaller dimension, G = {g}")
    out.notes.insert(0, f"clustered by entity ({ge} clusters) and by time ({gt} clusters): "
                        "entity + time - intersection"
                     + (", each term with its own small-sample factor" if small_sample else
                        ", no small-sample factor"))
    return out


def within_kernel(model, kernel: Kernel, bandwidth: float) -> np.ndarray:
    """(1/N) sum_i [W_0 + sum_j k(j/b) (W_j + W_j')] with W_j = sum_t g_it g_i,t-j' within each
    entity: a kernel over time inside each entity (the overlap of clustering by entity and a
    time kernel)."""
    w = model.within_lags()
    lags = kernel.lags_used(bandwidth, w.shape[0])
    weights = kernel.weights([bandwidth], lags + 1)[0]
    s = w[0].copy()
    if lags:
        part = np.tensordot(weights[1:], w[1:lags + 1], axes=(0, 0))
        s += part + part.T
    return s / model.nobs
