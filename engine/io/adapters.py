"""Fits made elsewhere: `from_statsmodels(results)` turns a fitted statsmodels OLS into a Lagwise
fit with the same coefficients."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..data.columns import INTERCEPT
from ..data.table import Table
from ..errors import SpecificationError
from ..models.ols import fit_ols


def from_statsmodels(results):
    """A Lagwise least-squares fit from a fitted statsmodels OLS results object (from
    `sm.OLS(...).fit()` or `smf.ols(...).fit()`): the same rows, columns and coefficients (any
    covariance type the results carry is ignored; choose a Lagwise estimator). Weighted, GLS
    and other models are refused: their moment conditions differ."""
    model = getattr(results, "model", None)
    name = type(model).__name__ if model is not None else type(results).__name__
    if name != "OLS":
        raise SpecificationError(f"from_statsmodels takes a fitted statsmodels OLS; got {name} "
                                 "(WLS, GLS, GLM and discrete models have other moment "
                                 "conditions)")
    kinds = {type(results).__name__, type(getattr(results, "_results", results)).__name__}
    if any("Regularized" in k for k in kinds):
        raise SpecificationError("from_statsmodels takes a least-squares fit: this is a "
                                 "regularised (penalised) fit, whose coefficients solve other "
                                 "moment conditions; fit with .fit() instead of "
                                 ".fit_regularized()")
    exog, endog = getattr(model, "exog", None), getattr(model, "endog", None)
    if exog is None or endog is None:
        raise SpecificationError("the statsmodels results carry no design (remove_data() was "
                                 "called, or the model was built without one): Lagwise needs "
                                 "the rows; pass results that keep their data")
    try:
        exog = np.asarray(exog, dtype=float)
        endog = np.asarray(endog, dtype=float)
    except (TypeError, ValueError):
        raise SpecificationError("the statsmodels design or response is not numeric") from None
    if endog.ndim == 2 and endog.shape[1] == 1:
        endog = endog[:, 0]
    if endog.ndim != 1:
        raise SpecificationError(f"the statsmodels response has {endog.shape[1]} columns; "
                                 "Lagwise fits one response at a time (fit each column "
                                 "separately)")
    if exog.ndim != 2 or exog.shape[0] != endog.shape[0] or exog.shape[1] == 0:
        raise SpecificationError(f"the statsmodels design has shape {exog.shape}, which does "
                                 f"not match a response of {endog.shape[0]} rows")
    names = list(getattr(model, "exog_names", None) or
                 [f"x{i}" for i in range(exog.shape[1])])
    yname = str(getattr(model, "endog_names", None) or "y")
    data = getattr(model, "data", None)
    index = getattr(data, "row_labels", None)
    index = pd.Index(index) if index is not None else pd.RangeIndex(len(endog))
    const = [i for i in range(exog.shape[1])
             if np.all(exog[:, i] == 1.0)]
    renamed = [INTERCEPT if i in const[:1] else (n if n != INTERCEPT else f"{n} (column)")
               for i, n in enumerate(names)]
    frame = pd.DataFrame(exog, index=index, columns=renamed)
    frame[yname] = endog
    regs = [n for i, n in enumerate(renamed) if i not in const[:1]]
    out = fit_ols(Table(frame=frame.drop(columns=[INTERCEPT], errors="ignore")), yname, regs,
                  intercept=bool(const))
    order = [renamed.index(t) for t in out.terms]
    params = np.asarray(getattr(results, "params", np.full(len(renamed), np.nan)), dtype=float)
    if params.shape != (len(renamed),):
        raise SpecificationError("the statsmodels results' coefficients do not match its "
                                 "design")
    diff = np.max(np.abs(out.beta - params[order])
                  / np.maximum(np.abs(out.beta), 1e-300))
    if not np.isfinite(diff) or diff > 1e-8:
        raise SpecificationError("the statsmodels coefficients could not be reproduced (the "
                                 "design is too ill-conditioned); fit with lagwise.fit_ols")
    return out
