"""Andrews-Monahan (1992) VAR(1) prewhitening with recolouring, for any kernel estimator.

1. Fit g_t = A g_{t-1} + g*_t by least squares without intercept (t = 2..T) on the moment
   contributions (original basis). If the largest singular value of A exceeds 0.97, the singular
   values are capped at 0.97 (common practice, a guard against a near-unit-root VAR; flagged).
2. Estimate S* of the residuals g*_t with the kernel; an automatic bandwidth is chosen on g*_t.
   Autocovariances of the T - 1 residuals use the divisor T - 1.
3. Recolour: S = (I - A)^-1 S* (I - A)^-1', then map to the model's working basis.

The VAR, its residuals, their autocovariance cache and the bandwidths chosen on them are kept in
the model's caches ("prewhitened").

Reference: Andrews & Monahan (1992), Econometrica 60(4), 953-966.
"""

from __future__ import annotations

import numpy as np

from ..errors import EstimationError
from . import longrun
from .bandwidth import choose
from .cache import MomentCache

#: Cap on the singular values of the prewhitening VAR(1) matrix.
SINGULAR_CAP = 0.97


def var1(series: np.ndarray):
    """(A, residuals, largest singular value before the cap, capped?)."""
    x, y = series[:-1], series[1:]
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)       # y = x coef  =>  A = coef'
    a = coef.T
    u, sv, vt = np.linalg.svd(a)
    top = float(sv.max()) if sv.size else 0.0
    capped = top > SINGULAR_CAP
    if capped:
        a = (u * np.minimum(sv, SINGULAR_CAP)) @ vt
    return a, y - x @ a.T, top, capped


def prepared(model) -> dict:
    """The VAR(1) on the moment contributions and its residuals' cache, built once per model."""
    def build():
        if model.nobs < 3:
            raise EstimationError("prewhitening needs at least 3 observations")
        a, resid, top, capped = var1(model.contributions)
        recolour = np.linalg.inv(np.eye(model.m) - a)
        return {"A": a, "recolour": recolour, "resid": resid, "top": top, "capped": capped,
                "moments": MomentCache(resid), "bandwidths": {}}
    return model.caches.get("prewhitened", build)


def recoloured(model, s_star: np.ndarray) -> np.ndarray:
    """S of the working contributions from S* of the prewhitened residuals (one or many)."""
    pw = prepared(model)
    s_raw = pw["recolour"] @ s_star @ pw["recolour"].T
    s_w = model.to_working(s_raw) if s_raw.ndim == 2 else \
        np.stack([model.to_working(s) for s in s_raw])
    return 0.5 * (s_w + np.swapaxes(s_w, -1, -2))


def prewhitened_kernel(model, kernel, bandwidth, *, small_sample=False, repair=True):
    pw = prepared(model)
    key = (kernel.name, bandwidth)
    if key not in pw["bandwidths"]:
        pw["bandwidths"][key] = choose(pw["resid"], model.constant_moments, kernel, bandwidth)
    choice = pw["bandwidths"][key]
    star = longrun.kernel(model, kernel, choice.b, small_sample=small_sample, repair=repair,
                          how=choice.explanation + " (on the prewhitened series)",
                          cache=pw["moments"])
    star.S = recoloured(model, star.S)
    star.notes.insert(0, "VAR(1) prewhitened and recoloured (Andrews-Monahan 1992)")
    star.flags |= choice.flags
    star.notes += choice.notes
    if pw["capped"]:
        star.flags.add("prewhitening_capped")
        star.notes.append(f"prewhitening VAR(1) is close to a unit root (largest singular value "
                          f"{pw['top']:.3f}); singular values capped at {SINGULAR_CAP}")
    return star
