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
    exog = np.asarray(model.exog, dtype=float)
    endog = np.asarray(model.endog, dtype=float)
    names = list(model.exog_names)
    yname = str(model.endog_names)
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
    diff = np.max(np.abs(out.beta - np.asarray(results.params)[order])
                  / np.maximum(np.abs(out.beta), 1e-300))
    if not np.isfinite(diff) or diff > 1e-8:
        raise SpecificationError("the statsmodels coefficients could not be reproduced (the "
                                 "design is too ill-conditioned); fit with lagwise.fit_ols")
    return out
