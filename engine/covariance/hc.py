"""Heteroskedasticity-robust estimators of S: HC0-HC3 (White 1980; MacKinnon & White 1985)."""

from __future__ import annotations


from ..errors import EstimationError
from .longrun import LongRun
from .registry import Family, Param, estimator, register_family


#: Leverage above 1 - LEVERAGE_TOL counts as 1 (the residual is zero by construction).
LEVERAGE_TOL = 1e-10


def heteroskedasticity_robust(model, kind: str) -> LongRun:
    """White-type S = (1/T) sum omega_t w_t w_t' for HC0-HC3 (MacKinnon & White 1985); HC0 and
    HC1 are (1/T) sum g_t g_t' of the moment contributions, for any moment model."""
    factor = model.small_sample_factor if kind == "hc1" else 1.0
    if kind in ("hc0", "hc1"):
        return LongRun(S=model.outer() / model.nobs * factor, factor=factor)
    if not (model.capabilities.leverage and model.capabilities.design):
        raise EstimationError(f"{kind.upper()} needs the leverage of each observation, which "
                              f"is not defined for this model ({model.kind}); use HC0 or HC1")
    s = model.leverage_outer(1 if kind == "hc2" else 2) / model.nobs * factor
    return LongRun(S=s, factor=factor)

_HC_TEXT = {
    "hc0": "White (1980): squared residuals; biased downward in small samples",
    "hc1": "HC0 times T/(T-k), a simple small-sample inflation (MacKinnon & White 1985)",
    "hc2": "squared residuals over 1 - h_tt; unbiased under homoskedasticity",
    "hc3": "squared residuals over (1 - h_tt)^2 (Davidson-MacKinnon form); conservative when "
           "influential points exist"}


register_family(Family(
    name="hc", title="Heteroskedasticity-robust (HC)",
    citation="White (1980), Econometrica 48(4); MacKinnon & White (1985), J. Econometrics 29",
    assumptions="Errors uncorrelated over time; their variance may change with the regressors. "
                "Large-sample theory; HC2/HC3 adjust for leverage.",
    params=(Param("kind", "choice", "hc1", "; ".join(f"{k.upper()}: {v}" for k, v in
                                                      _HC_TEXT.items()),
                  choices=("hc0", "hc1", "hc2", "hc3"), title="variant"),),
    long_run=lambda model, kind: heteroskedasticity_robust(model, kind),
    psd=lambda p: True, label=lambda p, lr: p["kind"].upper(), group="hc",
    quadratic=lambda p: p["kind"] in ("hc0", "hc1"),     # HC2/HC3 divide by 1 - h_tt of X
    presets=lambda model, kernel, bandwidth: [
        estimator(k) for k in ("hc0", "hc1", "hc2", "hc3")
        if k in ("hc0", "hc1") or model.capabilities.leverage]),
    shorthands={k: {"kind": k} for k in ("hc0", "hc1", "hc2", "hc3")})
