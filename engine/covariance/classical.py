"""The classical (iid) estimator of S: s^2 (1/T) sum w_t w_t' (OLS: V = s^2 (X'X)^-1)."""

from __future__ import annotations

from ..laws.reference import StudentT
from .longrun import LongRun
from .registry import Family, estimator, register_family


def classical(model) -> LongRun:
    """S = s^2 (1/T) sum w_t w_t' (OLS: V = s^2 (X'X)^-1), t(T - k) reference."""
    law = StudentT(model.df_resid, model.df_reason)
    return LongRun(S=model.homoskedastic_long_run(), law=law,
                   notes=["assumes errors uncorrelated with constant variance"])


register_family(Family(
    name="classical", title="Classical (iid)",
    citation="Ordinary least squares textbook formula s^2 (X'X)^-1",
    assumptions="Errors are uncorrelated over time and have constant variance. Understates "
                "uncertainty when either fails.",
    params=(), long_run=lambda model: classical(model), psd=lambda p: True,
    label=lambda p, lr: "Classical (iid)", group="iid", fixed_weight=True,
    presets=lambda model, kernel, bandwidth: [estimator("classical")]))
