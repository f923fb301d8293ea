"""Model specification and ordinary least squares by pivoted QR.

`fit_ols` turns a table and a specification into an `OLSFit`: coefficients, residuals, fitted
values, leverage, the bread (X'X)^-1 and the moment contributions u_t = x_t e_t, whose
autocovariances are cached once (`fit.moments`) for every covariance estimator.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
import scipy.linalg as sla

from .data import Table
from .errors import DataError, SpecificationError
from .moments import MomentCache
from ._threads import single_blas_thread

INTERCEPT = "intercept"
#: Columns whose norm-scaled pivoted-QR diagonal falls below this fraction of the largest are
#: treated as linear combinations of the others.
RANK_TOLERANCE = 1e-10


@dataclass
class SampleInfo:
    """Which rows entered the fit, and why others did not."""

    rows_available: int
    rows_used: int
    dropped_missing: int = 0
    dropped_interior: int = 0
    dropped_window: int = 0
    first: object = None
    last: object = None
    notes: list[str] = field(default_factory=list)


class OLSFit:
    """A fitted linear regression y = X beta + e and everything estimators need from it."""

    def __init__(self, *, X, y, terms, index, response, sample, horizon=None, table=None):
        self.X = X
        self.y = y
        self.terms = list(terms)
        self.index = index
        self.response = response
        self.sample = sample
        self.horizon = horizon
        self.table = table
        self.nobs, self.k = X.shape
        self._solve()

    # ------------------------------------------------------------------ least squares
    @single_blas_thread
    def _solve(self):
        X, y = self.X, self.y
        # scale columns by their largest absolute value (never underflows, unlike a 2-norm)
        norms = np.abs(X).max(axis=0)
        xs = X / norms
        q, r, piv = sla.qr(xs, mode="economic", pivoting=True, check_finite=False,
                           overwrite_a=True)
        r = np.array(r)          # a fresh copy: triangular solves on the raw factor are slow
        diag = np.abs(np.diag(r))
        rank = int(np.sum(diag > RANK_TOLERANCE * diag[0]))
        if rank < self.k:
            raise SpecificationError(_collinearity_message(r, piv, rank, self.terms))
        beta = np.empty(self.k)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            beta[piv] = sla.solve_triangular(r, q.T @ y) / norms[piv]
        if not np.isfinite(beta).all():
            bad = [self.terms[i] for i in np.flatnonzero(~np.isfinite(beta))]
            raise SpecificationError(
                "the coefficients cannot be represented in floating point (overflow) for "
                + ", ".join(f"'{b}'" for b in bad) + "; rescale those columns (e.g. to "
                "thousands or percent) and fit again")
        # one step of iterative refinement on the residual system
        step = np.empty(self.k)
        step[piv] = sla.solve_triangular(r, q.T @ (y - X @ beta)) / norms[piv]
        beta += step
        # X = Q C with C = R diag(norms[piv]) P'; the bread is B = C^-1 = P diag(1/norms[piv]) R^-1
        rinv = sla.solve_triangular(r, np.eye(self.k))
        bread = np.empty((self.k, self.k))
        bread[piv] = rinv / norms[piv][:, None]
        basis = np.empty((self.k, self.k))
        basis[:, piv] = r * norms[piv][None, :]
        self.q = q
        self.bread = bread                       # B, with V = T B S B'
        self.basis = basis                       # C, with x_t' = q_t' C
        self.xtx_inv = bread @ bread.T           # (X'X)^-1, sum scale
        self.beta = beta
        self.fitted_values = X @ beta
        self.resid = y - self.fitted_values
        self.leverage = np.einsum("ij,ij->i", q, q)

    # ------------------------------------------------------------------ summaries
    @cached_property
    def term_index(self) -> pd.Index:
        """The terms as a pandas Index, built once (string Index construction is costly)."""
        return pd.Index(self.terms, name="term")

    @property
    def params(self) -> pd.Series:
        return pd.Series(self.beta, index=self.term_index, name="estimate")

    @property
    def residuals(self) -> pd.Series:
        return pd.Series(self.resid, index=self.index, name="residual")

    @property
    def fitted(self) -> pd.Series:
        return pd.Series(self.fitted_values, index=self.index, name="fitted")

    @property
    def df_resid(self) -> int:
        return self.nobs - self.k

    @property
    def ssr(self) -> float:
        return float(self.resid @ self.resid)

    @property
    def sigma2(self) -> float:
        """s^2 = e'e / (T - k)."""
        return self.ssr / self.df_resid

    @property
    def has_intercept(self) -> bool:
        return INTERCEPT in self.terms

    @property
    def r_squared(self) -> float:
        """Centred R^2 with an intercept, uncentred without one."""
        centre = self.y.mean() if self.has_intercept else 0.0
        tss = float(((self.y - centre) ** 2).sum())
        return 1.0 - self.ssr / tss

    @property
    def small_sample_factor(self) -> float:
        return self.nobs / self.df_resid

    @cached_property
    def scores(self) -> np.ndarray:
        """Moment contributions in the orthonormal basis of the regressors: q_t e_t (T x k).

        x_t e_t = C' q_t e_t, so every linear long-run estimate S of x_t e_t equals C' S_q C;
        estimating S_q and forming V = T B S_q B' (B = C^-1) never squares the condition number
        of X. Bandwidth rules and diagnostics use `raw_scores`.
        """
        return self.q * self.resid[:, None]

    @cached_property
    def raw_scores(self) -> np.ndarray:
        """Moment contributions u_t = x_t e_t (T x k), one column per term."""
        return self.X * self.resid[:, None]

    def long_run_original_basis(self, s_q: np.ndarray) -> np.ndarray:
        """S of x_t e_t from S of q_t e_t: C' S_q C."""
        return self.basis.T @ s_q @ self.basis

    @cached_property
    def moments(self) -> MomentCache:
        """Autocovariance cache of the moment contributions (filled lazily, once)."""
        return MomentCache(self.scores)

    def covariance_from_long_run(self, s: np.ndarray) -> np.ndarray:
        """Sandwich V = (1/T) Q^-1 S Q^-1 with Q = X'X/T, S in the orthonormal basis:
        V = T B S_q B'."""
        b = self.bread
        return self.nobs * b @ s @ b.T

    # the public inference entry points live in engine.inference / engine.sweep
    def infer(self, estimator, level: float = 0.95, reference: str = "auto"):
        from .inference import infer
        return infer(self, estimator, level=level, reference=reference)

    def sweep(self, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
              repair: bool = True, prewhiten: bool = False):
        from .sweep import sweep
        return sweep(self, kernels=kernels, bandwidths=bandwidths, small_sample=small_sample,
                     repair=repair, prewhiten=prewhiten)

    def __repr__(self):
        return (f"OLSFit(response={self.response!r}, terms={self.terms}, T={self.nobs}, "
                f"R2={self.r_squared:.4f})")


def _collinearity_message(r, piv, rank, terms) -> str:
    dropped = [terms[i] for i in piv[rank:]]
    kept = piv[:rank]
    parts = []
    r11 = r[:rank, :rank]
    for col in range(rank, len(piv)):
        coef = sla.solve_triangular(r11, r[:rank, col]) if rank else np.zeros(0)
        scale = np.abs(coef).max() if coef.size else 0.0
        involved = [terms[kept[i]] for i in range(rank) if scale and abs(coef[i]) > 1e-8 * scale]
        name = terms[piv[col]]
        if involved:
            parts.append(f"'{name}' is a linear combination of " + ", ".join(f"'{c}'" for c in involved))
        else:
            parts.append(f"'{name}' is all zeros")
    return ("regressors are collinear: " + "; ".join(parts)
            + f". Drop one of them (e.g. '{dropped[0]}') and fit again.")


def index_label(value):
    """Dates without a midnight time part, other labels as they are."""
    if isinstance(value, pd.Timestamp) and value == value.normalize():
        return value.date().isoformat()
    return value


def _as_list(regressors) -> list[str]:
    if regressors is None:
        return []
    if isinstance(regressors, str):
        return [r.strip() for r in regressors.split(",") if r.strip()]
    return [str(r) for r in regressors]


def fit_ols(data, response: str, regressors=None, intercept: bool = True,
            sample: tuple | None = None, horizon: int | None = None) -> OLSFit:
    """Fit y = X beta + e by least squares (pivoted QR).

    data: a `Table` or a DataFrame. regressors: list of column names (or "x1,x2").
    intercept: add a constant term named "intercept" (first). sample: optional (start, end)
    labels of the index (dates or row numbers), both inclusive; None keeps every row.
    horizon: the number of periods h an overlapping response sums (errors MA(h-1)); taken from
    the table when the response was made by the forward-sum transform.

    Rows with a missing value in any used column are dropped and counted in `fit.sample`.
    Raises DataError for unusable columns, SpecificationError for an impossible model.
    """
    if isinstance(data, Table):
        table, frame = data, data.frame
        non_numeric, horizons = table.report.non_numeric, table.horizons
    elif isinstance(data, pd.DataFrame):
        table, frame, horizons = None, data, {}
        non_numeric = {}
    else:
        raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")
    regs = _as_list(regressors)
    if not isinstance(response, str) or not response:
        raise SpecificationError("choose a response column")
    if not regs and not intercept:
        raise SpecificationError("the model has no regressors: add a column or the intercept")
    if len(set(regs)) != len(regs):
        dup = next(r for r in regs if regs.count(r) > 1)
        raise SpecificationError(f"regressor '{dup}' is listed twice")
    if response in regs:
        raise SpecificationError(f"'{response}' is the response; it cannot also be a regressor")
    if INTERCEPT in regs:
        raise SpecificationError(f"'{INTERCEPT}' is reserved for the constant term; "
                                 "rename that column")
    cols = [response, *regs]
    for col in cols:
        if col not in non_numeric and col in frame.columns and (
                not pd.api.types.is_numeric_dtype(frame[col])
                or pd.api.types.is_bool_dtype(frame[col])):
            nonnull = frame[col].dropna()
            non_numeric = {**non_numeric, col: nonnull.iloc[0] if len(nonnull) else None}
        if col in non_numeric:
            raise DataError(f"column '{col}' is not numeric (it holds values such as "
                            f"{non_numeric[col]!r}); choose a numeric column or clean the file")
        if col not in frame.columns:
            raise SpecificationError(f"no column named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20])))
    used = frame[cols]
    available = len(used)
    info = SampleInfo(rows_available=available, rows_used=0)
    if sample is not None:
        start, end = sample
        try:
            used = used.loc[start:end]
        except (TypeError, KeyError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the index: {exc}") \
                from None
        info.dropped_window = available - len(used)
    index = used.index
    values = used.to_numpy(dtype=float)
    finite = np.isfinite(values)
    ok = finite.all(axis=1)
    if not ok.all():
        nan = np.isnan(values)
        empty = nan.all(axis=0)
        if empty.any():
            raise DataError(f"column '{cols[int(np.flatnonzero(empty)[0])]}' has no values "
                            "(every cell is missing" + (" in the sample window)" if sample else ")"))
        if (~finite & ~nan).any():
            col = cols[int(np.flatnonzero((~finite & ~nan).any(axis=0))[0])]
            raise DataError(f"column '{col}' contains infinite values")
        idx = np.flatnonzero(ok)
        info.dropped_missing = int((~ok).sum())
        if idx.size:
            interior = int((~ok[idx[0]: idx[-1] + 1]).sum())
            info.dropped_interior = interior
            if interior:
                info.notes.append(
                    f"{interior} rows inside the sample have missing values and were dropped; "
                    "the remaining rows are treated as consecutive periods by the lag-based "
                    "estimators")
        info.notes.insert(0, f"{info.dropped_missing} rows with missing values dropped")
        index = index[ok]
        values = values[ok]
    t_obs = len(values)
    k = len(regs) + int(intercept)
    if t_obs <= k:
        raise SpecificationError(f"{k} coefficients but only {t_obs} usable rows: the model needs "
                                 "more observations than coefficients (T > k)")
    spread = np.ptp(values, axis=0)
    if spread[0] == 0:
        raise SpecificationError(f"response '{response}' is constant ({values[0, 0]!r}): "
                                 "nothing to explain")
    zero = [j for j in range(len(regs)) if spread[j + 1] == 0 and values[0, j + 1] == 0]
    if zero:
        raise SpecificationError(f"regressor '{regs[zero[0]]}' is all zeros in the sample; "
                                 "remove it")
    constant = [j for j in range(len(regs)) if spread[j + 1] == 0]
    if constant and (intercept or len(constant) > 1):
        j = constant[-1] if not intercept else constant[0]
        what = "it duplicates the intercept" if intercept else "it duplicates another constant"
        raise SpecificationError(f"regressor '{regs[j]}' is constant ({values[0, j + 1]!r}); "
                                 f"{what}. Remove it.")
    terms = ([INTERCEPT] if intercept else []) + regs
    X = np.empty((t_obs, k))
    if intercept:
        X[:, 0] = 1.0
    X[:, int(intercept):] = values[:, 1:]
    y = np.ascontiguousarray(values[:, 0])
    info.rows_used = t_obs
    info.first, info.last = (index_label(index[0]), index_label(index[-1]))
    if horizon is None:
        horizon = horizons.get(response)
    elif isinstance(horizon, bool) or not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise SpecificationError(f"horizon must be a whole number of periods >= 1, got {horizon!r}")
    return OLSFit(X=X, y=y, terms=terms, index=index, response=response, sample=info,
                  horizon=horizon, table=table)
