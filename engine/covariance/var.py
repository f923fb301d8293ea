"""Parametric VAR-HAC (den Haan & Levin 1997): S as the spectrum at frequency zero of a VAR fitted
to the moment contributions."""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla

from ..errors import EstimationError
from .longrun import LongRun
from .registry import Family, Param, TuningAxis, estimator, register_family


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


def _var_label(p, lr) -> str:
    if p["criterion"] == "fixed":
        order = p["max_order"]
        return f"VAR({'int(T^(1/3))' if order is None else order}) correction"
    text = f"VAR-HAC, order by {p['criterion'].upper()}"
    if p["selection"] == "joint":
        text += " (joint)"
    return text + ("" if p["max_order"] is None else f", at most {p['max_order']}")


def _var_grid(model) -> np.ndarray:
    top = min(var_order_limit(model.nobs, model.m), 12)
    return np.arange(0, top + 1, dtype=float)


register_family(Family(
    name="var", title="Parametric VAR (VAR-HAC)",
    citation="den Haan & Levin (1997), Handbook of Statistics 15, ch. 12",
    assumptions="The moment contributions follow a finite-order stationary VAR; S is its "
                "implied spectrum at frequency zero. Positive semi-definite; can be far off if "
                "the VAR is misspecified or close to a unit root (refused when non-stationary).",
    params=(
        Param("max_order", "int", None, "largest VAR order tried (default int(T^(1/3)))",
              minimum=0, title="largest order"),
        Param("criterion", "choice", "bic", "order by BIC or AIC, or 'fixed' to use exactly "
              "the largest order (1: the VAR(1) parametric correction)",
              choices=("bic", "aic", "fixed"), title="order chosen by"),
        Param("selection", "choice", "equation", "choose the order per equation or jointly",
              choices=("equation", "joint"), title="order selection"),
    ),
    long_run=lambda model, **p: var_parametric(model, **p), psd=lambda p: True,
    label=_var_label, group="parametric", curve=lambda p: "VAR of fixed order",
    axis=TuningAxis("max_order", "p", "VAR order p", _var_grid, fixed={"criterion": "fixed"},
                    help="a VAR of exactly this order fitted to the moment contributions",
                    rules={"bic": ("order by BIC", {"criterion": "bic", "max_order": None}),
                           "aic": ("order by AIC", {"criterion": "aic", "max_order": None})}),
    presets=lambda model, kernel, bandwidth: [estimator("var"),
                                              estimator("var", max_order=1, criterion="fixed")],
    needs=("time_ordered",)))
