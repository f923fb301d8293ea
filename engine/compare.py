"""The estimator comparison: every registered estimator's presets for one fit, side by side.

Generated from the registry (engine.covariance.ESTIMATORS): a new estimator with presets
appears here, in the CLI and in the app without further edits.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .covariance import ESTIMATORS
from .errors import LagwiseError
from .inference import infer


def supports_fixed_b(est) -> bool:
    from .fixedb import FIXED_B_KERNELS
    return est.spec.has_bandwidth and est.params.get("kernel") in FIXED_B_KERNELS \
        and not est.params.get("prewhiten")


def family_presets(fit, kernel=None, bandwidth=None) -> list:
    out = []
    for spec in ESTIMATORS.values():
        if spec.presets is not None:
            out.extend(spec.presets(fit, kernel, bandwidth))
    return out


def compare(fit, level: float = 0.95, reference: str = "auto", kernel=None, bandwidth=None,
            estimators=None) -> pd.DataFrame:
    """One row per (estimator setting, term): std_error, t_stat, p_value, interval, b, lags,
    reference law, whether the zero null is rejected at 1 - level, and notes. An estimator that
    cannot be computed on this fit appears with its reason in `note` (never a silent NaN)."""
    rows = []
    for item in (estimators if estimators is not None else family_presets(fit, kernel, bandwidth)):
        est, ref, why = (item if isinstance(item, tuple) else (item, None, ""))
        wanted = ref or reference
        if wanted == "fixed-b" and not supports_fixed_b(est):
            # fixed-b values exist for some kernels only; the others keep their own law
            wanted = "auto"
            why = (why + "; " if why else "") + "fixed-b not defined for this estimator: its " \
                "own reference law is used"
        try:
            res = infer(fit, est, level=level, reference=wanted)
        except LagwiseError as exc:
            for term in fit.terms:
                rows.append({"estimator": est.label, "family": est.spec.family, "term": term,
                             "estimate": fit.params[term], "std_error": np.nan,
                             "t_stat": np.nan, "p_value": np.nan, "ci_low": np.nan,
                             "ci_high": np.nan, "bandwidth": np.nan, "lags": np.nan,
                             "reference": "", "rejects": None, "note": str(exc), "why": why})
            continue
        lr = res.long_run
        label = est.label if lr.bandwidth is None or not isinstance(
            est.params.get("bandwidth"), str) else f"{est.label.split(',')[0]}, " \
            f"{est.params['bandwidth']}"
        if ref == "fixed-b" and res.reference == "fixed-b":
            label += ", fixed-b"
        for term, row in res.table.iterrows():
            rows.append({"estimator": label, "family": est.spec.family, "term": term,
                         "estimate": row.estimate, "std_error": row.std_error,
                         "t_stat": row.t_stat, "p_value": row.p_value, "ci_low": row.ci_low,
                         "ci_high": row.ci_high,
                         "bandwidth": np.nan if lr.bandwidth is None else lr.bandwidth,
                         "lags": np.nan if lr.lags is None else lr.lags,
                         "reference": res.reference_text(),
                         "rejects": bool(row.p_value < 1 - level) if np.isfinite(row.p_value)
                         else None,
                         "note": "; ".join(lr.notes), "why": why})
    return pd.DataFrame(rows)
