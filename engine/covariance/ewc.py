"""Equal-weighted cosine estimator (Lazarus, Lewis, Stock & Watson 2018; Mueller 2007): S from B
low-frequency cosine averages, t statistics referred to t(B)."""

from __future__ import annotations

import numpy as np
from scipy.fft import dct

from ..errors import SpecificationError
from ..laws.reference import EWCLaw
from .longrun import LongRun
from .registry import (SMALL_SAMPLE, Family, Param, TuningAxis, estimator, register_family,
                       small_sample_label)


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


def _ewc_label(p, lr) -> str:
    if lr is not None and lr.law is not None:
        return f"EWC, B = {lr.law.df:g}" + small_sample_label(p)
    b = p["cosines"]
    return ("EWC, B = floor(0.4 T^(2/3))" if isinstance(b, str) else f"EWC, B = {b}") \
        + small_sample_label(p)


def _ewc_grid(model) -> np.ndarray:
    llsw, _ = ewc_cosines(model.nobs, "llsw")
    top = int(min(model.nobs - 1, max(24, 3 * llsw), 120))
    return np.arange(1, top + 1, dtype=float)


register_family(Family(
    name="ewc", title="Equal-weighted cosine (EWC)",
    citation="Lazarus, Lewis, Stock & Watson (2018), JBES 36(4); Mueller (2007)",
    assumptions="Autocorrelation may be strong; B low-frequency cosine averages estimate S and "
                "the t statistic is referred to t(B), F(m, B-m+1) for m restrictions, which keeps "
                "tests close to their size at the cost of some power. Assumes stationarity.",
    params=(
        Param("cosines", "int_or_rule", "llsw", "number of cosine terms B, or 'llsw' = "
              "floor(0.4 T^(2/3))", choices=("llsw",), minimum=1, title="cosine terms B"),
        SMALL_SAMPLE,
    ),
    long_run=lambda model, **p: ewc(model, **p), psd=lambda p: True,
    label=_ewc_label, group="ewc", curve=lambda p: "EWC" + small_sample_label(p),
    quadratic=lambda p: True,
    axis=TuningAxis("cosines", "B", "cosine terms B", _ewc_grid,
                    help="S averages the first B cosine-weighted sums; the law is t(B)",
                    rules={"llsw": ("LLSW (2018), floor(0.4 T^(2/3))", {"cosines": "llsw"})}),
    presets=lambda model, kernel, bandwidth: [estimator("ewc")],
    needs=("time_ordered",)))
