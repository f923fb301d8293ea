"""The estimator comparison: every registered family's presets for one model, side by side.

Generated from the registry (engine.covariance.FAMILIES): a new family with presets appears here,
in the CLI and in the app without further edits.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..blas import single_blas_thread
from ..covariance.registry import FAMILIES
from ..errors import LagwiseError, LawUnavailable
from ..laws.reference import row_suffix
from .infer import infer

COLUMNS = ["estimator", "family", "term", "estimate", "std_error", "t_stat", "p_value", "ci_low",
           "ci_high", "bandwidth", "lags", "reference", "law", "rejects", "note", "why", "flags"]


def family_presets(model, kernel=None, bandwidth=None) -> list:
    out = []
    for family in FAMILIES.values():
        if family.presets is not None and family.applies(model) is None:
            out.extend(family.presets(model, kernel, bandwidth))
    return out


@single_blas_thread
def compare(model, level: float = 0.95, reference: str = "auto", kernel=None, bandwidth=None,
            estimators=None, progress=None) -> pd.DataFrame:
    """One row per (estimator setting, term): std_error, t_stat, p_value, interval, b, lags,
    reference law (in words, and as a short label), whether the zero null is rejected at
    1 - level, notes and flags. An estimator that cannot be computed on this model appears with
    its reason in `note` (never a silent NaN). Items of `estimators` are estimators or
    (estimator, law request or None, why) tuples. progress(done, total, what) is called before
    each estimator and once at the end."""
    rows = []
    items = list(estimators if estimators is not None else family_presets(model, kernel,
                                                                          bandwidth))
    for i, item in enumerate(items):
        est, ref, why = (item if isinstance(item, tuple) else (item, None, ""))
        if progress:
            progress(i, len(items), est.label)
        wanted = ref or reference
        label = est.label
        try:
            try:
                res = infer(model, est, level=level, reference=wanted)
            except LawUnavailable as exc:
                # the law asked for exists for some estimators only; the others keep their own
                res = infer(model, est, level=level, reference="auto")
                why = (why + "; " if why else "") + f"{exc}: its own reference law is used"
        except LagwiseError as exc:
            for term in model.terms:
                rows.append({"estimator": label, "family": est.family.name, "term": term,
                             "estimate": model.params[term], "std_error": np.nan,
                             "t_stat": np.nan, "p_value": np.nan, "ci_low": np.nan,
                             "ci_high": np.nan, "bandwidth": np.nan, "lags": np.nan,
                             "reference": "", "law": "", "rejects": None, "note": str(exc),
                             "why": why, "flags": ""})
            continue
        lr = res.long_run
        label = res.label
        short = lags_short_of_horizon(model, lr)
        if short:
            why = (why + "; " if why else "") + short
        label += row_suffix(ref)
        mc = res.law.mc_error(level)
        if mc is not None:
            why = (why + "; " if why else "") + \
                f"simulated critical value {res.critical_value:.3f} (Monte Carlo s.e. {mc:.3f})"
        per_term = res.law.per_coefficient
        for i, (term, row) in enumerate(res.table.iterrows()):
            ok = np.isfinite(row.p_value)
            law = res.law.restricted(np.arange(len(res.table)) == i) if per_term else res.law
            rows.append({"estimator": label, "family": est.family.name, "term": term,
                         "estimate": row.estimate, "std_error": row.std_error,
                         "t_stat": row.t_stat, "p_value": row.p_value, "ci_low": row.ci_low,
                         "ci_high": row.ci_high,
                         "bandwidth": np.nan if lr.bandwidth is None else lr.bandwidth,
                         "lags": np.nan if lr.lags is None else lr.lags,
                         "reference": law.describe(), "law": law.label,
                         "rejects": bool(row.p_value < 1 - level) if ok else None,
                         "note": "; ".join(res.notes[len(model.sample.notes):]), "why": why,
                         "flags": ",".join(sorted(lr.flags))})
    if progress:
        progress(len(items), len(items), "")
    return pd.DataFrame(rows, columns=COLUMNS)


def lags_short_of_horizon(model, lr) -> str | None:
    """Under an overlapping h-period response the errors are MA(h-1) by construction: a kernel
    estimate using fewer than h - 1 lags cannot capture that. Returns the warning, or None."""
    h = model.horizon
    if h and h > 1 and lr.bandwidth is not None and lr.lags is not None and lr.lags < h - 1:
        return (f"uses {lr.lags} lags, fewer than h - 1 = {h - 1}: the overlapping {h}-period "
                f"response has MA({h - 1}) errors by construction, which these lags cannot "
                "fully capture")
    return None
