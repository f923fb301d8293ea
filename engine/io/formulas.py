"""Formulas: `fit("y ~ x1 + x2", data, ...)` evaluated by formulaic (intercept handling,
categorical expansion, functions such as np.log), with Lagwise's transforms available inside
formulas under their plain names: lag(x, p), lead(x, p), difference(x), log_difference(x),
sum_next(x, h). A response written as sum_next(x, h) declares the horizon h and the one-period
series x."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from ..data.table import Table
from ..errors import DataError, SpecificationError
from ..models.iv import fit_iv
from ..models.ols import fit_ols
from ..models.panel import fit_panel

_SUM_NEXT = re.compile(r"^\s*sum_next\(\s*([^,()]+?)\s*,\s*(\d+)\s*\)\s*$")


def _shift(x, p):
    return pd.Series(np.asarray(x, dtype=float)).shift(p).to_numpy()


def formula_context() -> dict:
    """Functions a formula may call (besides formulaic's own and numpy as np)."""
    def lag(x, p=1):
        return _shift(x, int(p))

    def lead(x, p=1):
        return _shift(x, -int(p))

    def difference(x):
        return np.diff(np.asarray(x, dtype=float), prepend=np.nan)

    def log_difference(x):
        v = np.asarray(x, dtype=float)
        if (v[np.isfinite(v)] <= 0).any():
            raise DataError("log_difference needs positive values")
        return np.diff(np.log(v), prepend=np.nan)

    def sum_next(x, h):
        s = pd.Series(np.asarray(x, dtype=float))
        return s[::-1].rolling(int(h), min_periods=int(h)).sum()[::-1].shift(-1).to_numpy()
    return {"lag": lag, "lead": lead, "difference": difference,
            "log_difference": log_difference, "sum_next": sum_next, "np": np}


def _frame_of(data) -> pd.DataFrame:
    if isinstance(data, Table):
        frame = data.frame.copy()
        if data.labels is not None and len(data.labels.columns):
            for c in data.labels.columns:
                if c not in frame.columns:
                    frame[c] = data.labels[c].to_numpy()
        return frame
    if isinstance(data, pd.DataFrame):
        return data
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")


def design(formula: str, data):
    """(response Series, regressor DataFrame, has_intercept, horizon, one-period column) from a
    formula, evaluated by formulaic with missing values kept (the fit drops and counts them)."""
    from formulaic import model_matrix
    from formulaic.errors import FormulaicError
    if not isinstance(formula, str) or "~" not in formula:
        raise SpecificationError("a formula looks like 'y ~ x1 + x2'")
    if len(formula) > 2000:
        raise SpecificationError("the formula is too long")
    lhs_text = formula.split("~", 1)[0]
    frame = _frame_of(data)
    try:
        mm = model_matrix(formula, frame, context=formula_context(), na_action="ignore")
    except FormulaicError as exc:
        raise SpecificationError(f"the formula cannot be read: {exc}") from None
    except (NameError, KeyError) as exc:
        raise SpecificationError(f"the formula names something the data do not have: "
                                 f"{exc}") from None
    except Exception as exc:           # noqa: BLE001 - a term that fails to evaluate
        term = getattr(exc, "factor", None)
        raise SpecificationError("the formula could not be evaluated"
                                 + (f" (term {term})" if term else "") + f": "
                                 f"{' '.join(str(exc).split())[:300]}") from None
    lhs, rhs = mm.lhs, mm.rhs
    if lhs.shape[1] != 1:
        raise SpecificationError("the formula needs exactly one response on the left of ~")
    y = pd.Series(np.asarray(lhs.iloc[:, 0], dtype=float), index=frame.index,
                  name=str(lhs.columns[0]))
    X = pd.DataFrame(np.asarray(rhs, dtype=float), index=frame.index,
                     columns=[str(c) for c in rhs.columns])
    has_intercept = "Intercept" in X.columns
    if has_intercept:
        X = X.drop(columns="Intercept")
    horizon = one_period = None
    m = _SUM_NEXT.match(lhs_text)
    if m:
        one_period, horizon = m.group(1).strip(), int(m.group(2))
        if one_period not in frame.columns:
            one_period = None
    return y, X, has_intercept, horizon, one_period


def fit(formula: str, data, *, endogenous=None, instruments: str | None = None,
        entity: str | None = None, time: str | None = None, effects=(), sample=None,
        horizon: int | None = None, **kwargs):
    """Fit a model written as a formula: least squares, or with `instruments` (a formula of the
    excluded instruments, e.g. "z1 + z2") and `endogenous` (regressor names) linear IV/GMM, or
    with `entity` and `time` a panel. Transforms inside formulas: lag(x, p), lead(x, p),
    difference(x), log_difference(x), sum_next(x, h), np.log(x), C(group) for categories."""
    y, X, has_intercept, h, one = design(formula, data)
    if y.name in X.columns:
        raise SpecificationError(f"'{y.name}' is on both sides of the formula")
    frame = pd.concat([y, X], axis=1)
    regs = list(X.columns)
    if instruments is not None:
        if entity is not None:
            raise SpecificationError("instruments are not offered for panels")
        _, Z, _, _, _ = design("__lhs__ ~ " + instruments, _frame_of(data).assign(__lhs__=0.0))
        Z = Z.drop(columns=[c for c in Z.columns if c in X.columns])
        frame = pd.concat([frame, Z], axis=1)
        endog = [endogenous] if isinstance(endogenous, str) else list(endogenous or [])
        missing = [e for e in endog if e not in regs]
        if missing:
            raise SpecificationError(f"endogenous regressor '{missing[0]}' is not a term of the "
                                     f"formula; its terms are {', '.join(regs)}")
        return fit_iv(frame, y.name, regs, endog, list(Z.columns), intercept=has_intercept,
                      sample=sample, horizon=horizon or h, **kwargs)
    if entity is not None or time is not None:
        src = _frame_of(data)
        for col in (entity, time):
            if col is not None and col in src.columns:
                frame[col] = src[col].to_numpy()
        return fit_panel(frame, y.name, regs, entity=entity, time=time, effects=effects,
                         intercept=has_intercept, sample=sample, **kwargs)
    table = Table(frame=frame)
    if one is not None:
        src = _frame_of(data)
        table.frame[one] = np.asarray(src[one], dtype=float) if one not in frame else frame[one]
    return fit_ols(table, y.name, regs, intercept=has_intercept, sample=sample,
                   horizon=horizon or h, one_period=one if (horizon or h) else None)
