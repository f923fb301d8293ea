"""Andrews-Monahan (1992) VAR(1) prewhitening with recolouring, for any kernel estimator.

1. Fit u_t = A u_{t-1} + u*_t by least squares without intercept (t = 2..T) on the scores
   x_t e_t. If the largest singular value of A exceeds 0.97, the singular values are capped at
   0.97 (common practice, a guard against a near-unit-root VAR; flagged in the result).
2. Estimate S* of the residuals u*_t with the kernel; an automatic bandwidth is chosen on u*_t.
   Autocovariances of the T - 1 residuals use the divisor T - 1.
3. Recolour: S = (I - A)^-1 S* (I - A)^-1'.

Reference: Andrews & Monahan (1992), Econometrica 60(4), 953-966.
"""

from __future__ import annotations

import numpy as np

from . import longrun
from .bandwidth import choose
from .moments import MomentCache

#: Cap on the singular values of the prewhitening VAR(1) matrix.
SINGULAR_CAP = 0.97


class _Residuals:
    """Just enough of a fit for longrun.kernel on prewhitened scores."""

    def __init__(self, resid_scores: np.ndarray, k: int, factor: float):
        self.moments = MomentCache(resid_scores)
        self.nobs = resid_scores.shape[0]
        self.k = k
        self.small_sample_factor = factor


def var1(scores: np.ndarray):
    """(A, residuals, largest singular value before the cap, capped?)."""
    x, y = scores[:-1], scores[1:]
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)       # y = x coef  =>  A = coef'
    a = coef.T
    u, sv, vt = np.linalg.svd(a)
    top = float(sv.max()) if sv.size else 0.0
    capped = top > SINGULAR_CAP
    if capped:
        a = (u * np.minimum(sv, SINGULAR_CAP)) @ vt
    return a, y - x @ a.T, top, capped


def prepared(fit):
    """VAR(1) on the raw scores, computed once per fit and cached on it."""
    cache = fit.__dict__.get("_prewhitened")
    if cache is None:
        a, resid, top, capped = var1(fit.raw_scores)
        cache = {"A": a, "resid": resid, "top": top, "capped": capped,
                 "fit": _Residuals(resid, fit.k, fit.small_sample_factor), "bandwidths": {}}
        fit.__dict__["_prewhitened"] = cache
    return cache


def prewhitened_kernel(fit, kernel, bandwidth, *, small_sample=False, repair=True) -> longrun.LongRun:
    pw = prepared(fit)
    key = (kernel.name, bandwidth)
    if key not in pw["bandwidths"]:
        pw["bandwidths"][key] = choose(pw["resid"], fit.terms, kernel, bandwidth)
    choice = pw["bandwidths"][key]
    star = longrun.kernel(pw["fit"], kernel, choice.b, small_sample=small_sample, repair=repair,
                          rule=choice.explanation + " (on prewhitened scores)")
    inv = np.linalg.inv(np.eye(fit.k) - pw["A"])
    s_raw = inv @ star.S @ inv.T
    s_q = fit.bread.T @ s_raw @ fit.bread                  # into the orthonormal basis
    star.S = 0.5 * (s_q + s_q.T)
    star.factor = fit.small_sample_factor if small_sample else 1.0
    star.notes.insert(0, "VAR(1) prewhitened and recoloured (Andrews-Monahan 1992)")
    if pw["capped"]:
        star.flags.add("prewhitening_capped")
        star.notes.append(f"prewhitening VAR(1) is close to a unit root (largest singular value "
                          f"{pw['top']:.3f}); singular values capped at {SINGULAR_CAP}")
    return star
