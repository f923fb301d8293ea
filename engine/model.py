"""Moment models, and ordinary least squares as the first of them.

A moment model is anything fitted whose coefficients solve sample moment conditions
(1/T) sum_t g_t(beta) = 0 (exactly or, for over-identified GMM, after weighting). Every estimator
of S, every bandwidth rule, the sweep, the comparison, the flips and the score diagnostics take a
`MomentModel`; none of them knows which model produced the moments. A model supplies:

* `contributions`: g_t in the original basis (T x m; OLS: x_t e_t), named by `moment_names`;
* `working_contributions`: the same series in the working basis in which S is estimated (OLS: the
  orthonormal basis of X from its QR factor, q_t e_t, so that ill-conditioned designs keep their
  digits), with `to_original` / `to_working` mapping an S between the two;
* `influence_map` M (k x m): V = T M S M' with S of the working contributions. This is the
  sandwich D^-1 S D^-1' / T of an exactly identified model (D = X'X/T for OLS) or
  (D'WD)^-1 D'W S W D (D'WD)^-1 / T of an over-identified one, written in the working basis;
  `covariance_from_long_run` forms it (an estimator of S never does);
* `working_design` and `resid` when g_t = design_t * residual_t (linear models), which the
  classical and heteroskedasticity-robust estimators use; `leverage` where defined;
* the term names, the sample (`index`, `sample`), the horizon of an overlapping response, and
  `caches`, the model's explicit caches (autocovariances and the rest) with a byte count.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla

from .caches import Caches, nbytes_of
from .data import Table
from .errors import DataError, SpecificationError
from .moments import MomentCache
from ._threads import single_blas_thread

INTERCEPT = "intercept"
#: Columns whose norm-scaled pivoted-QR diagonal falls below this fraction of the largest are
#: treated as linear combinations of the others.
RANK_TOLERANCE = 1e-10
#: Above this condition number of the column-scaled design, least squares uses pivoted
#: Householder QR instead of the (much faster) two-pass Cholesky QR.
CHOLESKY_QR_MAX_CONDITION = 1e7
#: Columns whose largest absolute value exceeds this (or whose nonzero values are all below its
#: inverse) are refused: sums of their squares over the sample would overflow (underflow) double
#: precision, and every standard error built from them would be infinite (zero).
SAFE_MAGNITUDE = 1e120
#: Below this condition number one Cholesky QR pass suffices (see `_cholesky_qr2`).
ONE_PASS_MAX_CONDITION = 1e3


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


class MomentModel:
    """What every fitted model shares (see the module docstring for the protocol)."""

    kind = "moment model"
    response: str
    terms: list[str]
    beta: np.ndarray
    nobs: int
    k: int
    index: pd.Index
    sample: SampleInfo
    horizon: int | None = None
    leverage: np.ndarray | None = None

    def _init_model(self):
        self.caches = Caches()

    # ------------------------------------------------------------------ protocol pieces
    @property
    def moment_names(self) -> list[str]:
        return list(self.terms)

    @property
    def m(self) -> int:
        return len(self.moment_names)

    @property
    def constant_moments(self) -> np.ndarray:
        """True for moments formed with the constant (the intercept's): bandwidth rules weight
        them by zero, since their autocorrelation says nothing about the slopes."""
        return np.array([name == INTERCEPT for name in self.moment_names])

    @property
    def working_contributions(self) -> np.ndarray:
        """g_t in the working basis (T x m), cached."""
        return self.caches.get("working_contributions",
                               lambda: self.working_design * self.resid[:, None])

    @property
    def contributions(self) -> np.ndarray:
        """g_t in the original basis (T x m), one column per moment, cached."""
        return self.caches.get("contributions", self._original_contributions)

    def _original_contributions(self) -> np.ndarray:
        raise NotImplementedError

    def to_original(self, s_working: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def to_working(self, s_original: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    @property
    def influence_map(self) -> np.ndarray:
        raise NotImplementedError

    def covariance_from_long_run(self, s_working: np.ndarray) -> np.ndarray:
        """The coefficient covariance V = T M S M' for S of the working contributions."""
        m = self.influence_map
        return self.nobs * m @ s_working @ m.T

    def homoskedastic_long_run(self) -> np.ndarray:
        """S under uncorrelated, constant-variance errors: s^2 (1/T) sum_t w_t w_t' for the
        working design rows w_t, s^2 = e'e / (T - k)."""
        w = self.working_design
        return self.sigma2 * (w.T @ w) / self.nobs

    def covariance_form(self, lr) -> str:
        """Which sandwich V is for this estimate of S, in words ('' when there is one form)."""
        return ""

    def describe_method(self) -> str:
        """How the coefficients were estimated, in words ('' for least squares)."""
        return ""

    # ------------------------------------------------------------------ caches
    @property
    def moments(self) -> MomentCache:
        """Autocovariance cache of the working contributions (filled lazily, once)."""
        return self.caches.get("moments", lambda: MomentCache(self.working_contributions))

    @property
    def influence(self) -> MomentCache:
        """Own autocovariances of each coefficient's influence series z_t = M g_t (k series):
        the variances of a whole sweep of PSD kernels come from them."""
        return self.caches.get("influence", lambda: MomentCache(
            self.working_contributions @ self.influence_map.T, diagonal_only=True))

    @property
    def nbytes(self) -> int:
        """Bytes held by the model: its arrays and every cache filled so far."""
        seen: set = set()
        own = sum(nbytes_of(v, seen) for name, v in vars(self).items()
                  if name not in ("caches", "table"))
        return own + self.caches.own_nbytes(seen)

    # ------------------------------------------------------------------ summaries
    @property
    def term_index(self) -> pd.Index:
        """The terms as a pandas Index, built once (string Index construction is costly)."""
        return self.caches.get("term_index", lambda: pd.Index(self.terms, name="term"))

    @property
    def params(self) -> pd.Series:
        return pd.Series(self.beta, index=self.term_index, name="estimate")

    @property
    def residuals(self) -> pd.Series:
        return pd.Series(self.resid, index=self.index, name="residual")

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
    def small_sample_factor(self) -> float:
        """T / (T - k), the finite-sample inflation an estimator may apply to S."""
        return self.nobs / self.df_resid

    @property
    def has_intercept(self) -> bool:
        return INTERCEPT in self.terms

    # ------------------------------------------------------------------ the public verbs
    def infer(self, estimator, level: float = 0.95, reference: str = "auto"):
        """Coefficient table under one estimator of S and one reference law."""
        from .inference import infer
        return infer(self, estimator, level=level, reference=reference)

    def sweep(self, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
              repair: bool = True, prewhiten: bool = False):
        """Every (kernel, bandwidth) at once from the cache (see `engine.sweep.sweep`)."""
        from .sweep import sweep_kernels
        return sweep_kernels(self, kernels=kernels, bandwidths=bandwidths,
                             small_sample=small_sample, repair=repair, prewhiten=prewhiten)

    def sweep_axis(self, estimator, values=None):
        """One estimator along its family's tuning axis (b, B, VAR order)."""
        from .sweep import sweep
        return sweep(self, [estimator], values)

    def compare(self, level: float = 0.95, reference: str = "auto", **kwargs):
        from .compare import compare
        return compare(self, level=level, reference=reference, **kwargs)


class OLSFit(MomentModel):
    """A fitted linear regression y = X beta + e and everything estimators need from it.

    Least squares by two-pass Cholesky QR of the column-scaled design (pivoted Householder QR
    when the design is ill-conditioned or rank deficient), with one step of iterative
    refinement. X = Q C with Q orthonormal; the working basis of the moment contributions is
    q_t e_t, so S of x_t e_t is C' S_q C and V = T C^-1 S_q C^-1'.
    """

    kind = "least squares"

    def __init__(self, *, X, y, terms, index, response, sample, horizon=None, table=None):
        self._init_model()
        self.X = X
        self.y = y
        self.terms = list(terms)
        self.index = index
        self.response = response
        self.sample = sample
        self.horizon = horizon
        self.table = table
        self.nobs, self.k = X.shape
        self.one_period = None            # the one-period series behind an overlapping response
        self._solve()

    @single_blas_thread
    def _solve(self):
        X, y = self.X, self.y
        # scale columns by their largest absolute value (never underflows, unlike a 2-norm)
        lo, hi = column_ranges(X)
        norms = np.maximum(hi, -lo)
        factor = _cholesky_qr2(X, norms) if norms.min() > 0 else None
        if factor is None:
            q, r, piv = sla.qr(X / norms, mode="economic", pivoting=True, check_finite=False,
                               overwrite_a=True)
            r = np.array(r)          # a fresh copy: triangular solves on the raw factor are slow
            diag = np.abs(np.diag(r))
            rank = int(np.sum(diag > RANK_TOLERANCE * diag[0]))
            if rank < self.k:
                raise SpecificationError(_collinearity_message(r, piv, rank, self.terms))
            rinv = sla.solve_triangular(r, np.eye(self.k))
            self.factorization = "pivoted Householder QR"
        else:
            q, r, rinv = factor
            piv = np.arange(self.k)
            self.factorization = "Cholesky QR"
        beta = np.empty(self.k)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            beta[piv] = rinv @ (q.T @ y) / norms[piv]
        if not np.isfinite(beta).all():
            bad = [self.terms[i] for i in np.flatnonzero(~np.isfinite(beta))]
            raise SpecificationError(
                "the coefficients cannot be represented in floating point (overflow) for "
                + ", ".join(f"'{b}'" for b in bad) + "; rescale those columns (e.g. to "
                "thousands or percent) and fit again")
        # one step of iterative refinement on the residual system
        with np.errstate(over="ignore", invalid="ignore"):
            fitted = X @ beta
            step = np.empty(self.k)
            step[piv] = rinv @ (q.T @ (y - fitted)) / norms[piv]
        if np.isfinite(step).all():
            beta += step
            fitted = X @ beta
        # X = Q C with C = R diag(norms[piv]) P'; C^-1 = P diag(1/norms[piv]) R^-1
        inv_c = np.empty((self.k, self.k))
        inv_c[piv] = rinv / norms[piv][:, None]
        basis = np.empty((self.k, self.k))
        basis[:, piv] = r * norms[piv][None, :]
        self._q = q                                # orthonormal basis of the columns of X
        self._inv_c = inv_c                        # C^-1: x_t' = q_t' C
        self._basis = basis                        # C
        self.beta = beta
        self.fitted_values = fitted
        self.resid = y - fitted
        self.leverage = np.einsum("ij,ij->i", q, q)

    # ------------------------------------------------------------------ the protocol
    @property
    def working_design(self) -> np.ndarray:
        return self._q

    def _original_contributions(self) -> np.ndarray:
        return self.X * self.resid[:, None]

    def to_original(self, s_working):
        """S of x_t e_t from S of q_t e_t: C' S_q C."""
        return self._basis.T @ s_working @ self._basis

    def to_working(self, s_original):
        """S of q_t e_t from S of x_t e_t: C^-1' S C^-1."""
        return self._inv_c.T @ s_original @ self._inv_c

    @property
    def influence_map(self) -> np.ndarray:
        """M = C^-1, so that V = T M S_q M' = (X'X/T)^-1 S (X'X/T)^-1 / T."""
        return self._inv_c

    @property
    def xtx_inv(self) -> np.ndarray:
        """(X'X)^-1."""
        return self._inv_c @ self._inv_c.T

    # ------------------------------------------------------------------ summaries
    @property
    def fitted(self) -> pd.Series:
        return pd.Series(self.fitted_values, index=self.index, name="fitted")

    @property
    def r_squared(self) -> float:
        """Centred R^2 with an intercept, uncentred without one (NaN when the response does not
        vary about the centre)."""
        centre = self.y.mean() if self.has_intercept else 0.0
        tss = float(((self.y - centre) ** 2).sum())
        return 1.0 - self.ssr / tss if tss > 0 and np.isfinite(tss) else float("nan")

    def __repr__(self):
        return (f"OLSFit(response={self.response!r}, terms={self.terms}, T={self.nobs}, "
                f"R2={self.r_squared:.4f})")


def _cholesky_qr2(x: np.ndarray, norms: np.ndarray):
    """Cholesky QR of a well-conditioned matrix with its columns scaled by 1/norms, without
    forming the scaled copy: (Q, R, R^-1) with X D^-1 = QR to rounding, or None
    when the matrix is too ill-conditioned for it (the caller then uses pivoted Householder QR).

    One pass when the condition number of R is below `ONE_PASS_MAX_CONDITION`: Q is then
    orthonormal to about cond^2 x 1e-16 (at most about 1e-10), which the covariance does not
    depend on (S of x_t e_t = C' S_q C holds for any Q with X = QC) and the refinement step of the
    coefficients absorbs. Otherwise a second pass (CholeskyQR2), backward stable with Q
    orthonormal to rounding for condition numbers well below 1e8 (Yamamoto et al. 2015, ETNA
    44); the threshold used is `CHOLESKY_QR_MAX_CONDITION`."""
    k = x.shape[1]
    try:
        r1 = sla.cholesky((x.T @ x) / np.outer(norms, norms), lower=False, check_finite=False)
    except (np.linalg.LinAlgError, ValueError):
        return None
    d = np.abs(np.diag(r1))
    if not np.isfinite(r1).all() or d.min() <= 0:
        return None
    cond = np.linalg.cond(r1)
    if cond > CHOLESKY_QR_MAX_CONDITION:
        return None
    r1inv = sla.solve_triangular(r1, np.eye(k), check_finite=False)
    q1 = x @ (r1inv / norms[:, None])
    if cond <= ONE_PASS_MAX_CONDITION:
        return q1, r1, r1inv
    try:
        r2 = sla.cholesky(q1.T @ q1, lower=False, check_finite=False)
    except (np.linalg.LinAlgError, ValueError):
        return None
    r2inv = sla.solve_triangular(r2, np.eye(k), check_finite=False)
    q = q1 @ r2inv
    return q, r2 @ r1, r1inv @ r2inv


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


def column_ranges(values: np.ndarray):
    """(minimum, maximum) of each column. Column by column: numpy's axis-0 reductions of a
    tall C-ordered array with few columns are several times slower than one reduction per
    strided column."""
    lo = np.array([values[:, j].min() for j in range(values.shape[1])])
    hi = np.array([values[:, j].max() for j in range(values.shape[1])])
    return lo, hi


def check_magnitudes(cols, lo, hi, values, lead: int = 0) -> None:
    """Refuse columns whose squares over the sample cannot be represented (see SAFE_MAGNITUDE),
    naming the column and what to do."""
    big = np.maximum(np.abs(lo), np.abs(hi))[lead:]
    for col, m, j in zip(cols, big, range(lead, lead + len(cols))):
        if m > SAFE_MAGNITUDE:
            raise SpecificationError(f"column '{col}' holds values as large as {m:.3g}: sums of "
                                     "their squares overflow double precision. Rescale it (for "
                                     "example divide by a power of ten) and fit again.")
        if 0 < m < 1.0 / SAFE_MAGNITUDE:
            raise SpecificationError(f"column '{col}' holds values no larger than {m:.3g}: their "
                                     "squares underflow double precision. Rescale it (for "
                                     "example multiply by a power of ten) and fit again.")


def index_label(value):
    """Dates without a midnight time part, other labels as plain Python values."""
    if isinstance(value, pd.Timestamp) and value == value.normalize():
        return value.date().isoformat()
    if isinstance(value, np.generic):
        return value.item()
    return value


def as_list(names) -> list[str]:
    """Column names from a list or a comma-separated string. A comma followed by a space is part
    of a name (derived columns are named like 'x, lag 1'), so 'a,x, lag 1' is ['a', 'x, lag 1']."""
    if names is None:
        return []
    if isinstance(names, str):
        import re
        return [r.strip() for r in re.split(r",(?!\s)", names) if r.strip()]
    return [str(r) for r in names]


def _frame_and_meta(data):
    """(table or None, frame, non-numeric columns, horizons) for a Table or a DataFrame."""
    if isinstance(data, Table):
        return data, data.frame, data.report.non_numeric, data.horizons
    if isinstance(data, pd.DataFrame):
        return None, data, {}, {}
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")


def numeric_block(frame, cols, non_numeric, sample, what="column", ones: bool = False):
    """Validated float values of `cols` over the sample window, rows with a missing value
    dropped and counted. Returns (values, index, SampleInfo): values is T x len(cols), with a
    leading column of ones when `ones` (so a design matrix can be a view of it)."""
    for col in cols:
        if col not in non_numeric and col in frame.columns and (
                not pd.api.types.is_numeric_dtype(frame[col])
                or pd.api.types.is_bool_dtype(frame[col])):
            nonnull = frame[col].dropna()
            non_numeric = {**non_numeric, col: nonnull.iloc[0] if len(nonnull) else None}
        if col in non_numeric:
            example = non_numeric[col]
            example = example.item() if isinstance(example, np.generic) else example
            raise DataError(f"column '{col}' is not numeric (it holds values such as "
                            f"{example!r}); choose a numeric column or clean the file")
        if col not in frame.columns:
            raise SpecificationError(f"no {what} named '{col}'; available: "
                                     + ", ".join(map(str, list(frame.columns)[:20])))
    used = frame[cols]
    available = len(used)
    info = SampleInfo(rows_available=available, rows_used=0)
    if sample is not None:
        try:
            start, end = sample
            used = used.loc[start:end]
        except (TypeError, KeyError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the index: {exc}") \
                from None
        info.dropped_window = available - len(used)
    index = used.index
    lead = int(ones)
    values = np.empty((len(used), len(cols) + lead))
    if ones:
        values[:, 0] = 1.0
    for j, col in enumerate(cols):         # column by column: no interleaved temporary
        values[:, j + lead] = used[col].to_numpy(dtype=float)
    finite = np.isfinite(values)
    ok = True if finite.all() else finite.all(axis=1)
    if ok is not True:
        nan = np.isnan(values)
        empty = nan.all(axis=0)
        if empty.any():
            raise DataError(f"column '{cols[int(np.flatnonzero(empty)[0]) - lead]}' has no "
                            "values (every cell is missing"
                            + (" in the sample window)" if sample else ")"))
        if (~finite & ~nan).any():
            col = cols[int(np.flatnonzero((~finite & ~nan).any(axis=0))[0]) - lead]
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
    return values, index, info


def check_horizon(horizon):
    if horizon is not None and (isinstance(horizon, bool)
                                or not isinstance(horizon, (int, np.integer)) or horizon < 1):
        raise SpecificationError(f"horizon must be a whole number of periods >= 1, got {horizon!r}")
    return None if horizon is None else int(horizon)


def fit_ols(data, response: str, regressors=None, intercept: bool = True,
            sample: tuple | None = None, horizon: int | None = None,
            one_period: str | None = None) -> OLSFit:
    """Fit y = X beta + e by least squares.

    data: a `Table` or a DataFrame. regressors: list of column names (or "x1,x2").
    intercept: add a constant term named "intercept" (first). sample: optional (start, end)
    labels of the index (dates or row numbers), both inclusive; None keeps every row.
    horizon: the number of periods h an overlapping response sums (errors MA(h-1)); taken from
    the table when the response was made by the forward-sum transform. one_period: the column
    whose sum over the next h periods is the response (known automatically for a response made
    by the forward-sum transform); Hodrick (1992) standard errors and the predictive-regression
    tools need it.

    Rows with a missing value in any used column are dropped and counted in `fit.sample`.
    Raises DataError for unusable columns, SpecificationError for an impossible model.
    """
    table, frame, non_numeric, horizons = _frame_and_meta(data)
    regs = as_list(regressors)
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
    cols = [*regs, response]
    values, index, info = numeric_block(frame, cols, non_numeric, sample, ones=intercept)
    t_obs = len(values)
    k = len(regs) + int(intercept)
    if t_obs <= k:
        raise SpecificationError(f"{k} coefficients but only {t_obs} usable rows: the model needs "
                                 "more observations than coefficients (T > k)")
    lo, hi = column_ranges(values)
    check_magnitudes(cols, lo, hi, values, lead=int(intercept))
    spread, first = hi - lo, values[0]
    if spread[k] == 0:
        raise SpecificationError(f"response '{response}' is constant ({first[k]:g}): "
                                 "nothing to explain")
    lead = int(intercept)
    zero = [j for j in range(len(regs)) if spread[j + lead] == 0 and first[j + lead] == 0]
    if zero:
        raise SpecificationError(f"regressor '{regs[zero[0]]}' is all zeros in the sample; "
                                 "remove it")
    constant = [j for j in range(len(regs)) if spread[j + lead] == 0]
    if constant and (intercept or len(constant) > 1):
        j = constant[-1] if not intercept else constant[0]
        what = "it duplicates the intercept" if intercept else "it duplicates another constant"
        raise SpecificationError(f"regressor '{regs[j]}' is constant ({first[j + lead]:g}); "
                                 f"{what}. Remove it.")
    terms = ([INTERCEPT] if intercept else []) + regs
    X = values[:, :k]                       # a view: the design shares the validated block
    y = np.ascontiguousarray(values[:, k])
    info.rows_used = t_obs
    info.first, info.last = (index_label(index[0]), index_label(index[-1]))
    horizon = check_horizon(horizon)
    if horizon is None:
        horizon = horizons.get(response)
    fit = OLSFit(X=X, y=y, terms=terms, index=index, response=response, sample=info,
                 horizon=horizon, table=table)
    fit.one_period = one_period_source(table, frame, response, horizon, one_period)
    return fit


#: The named one-period series must sum to the response within this fraction of the response's
#: standard deviation (rounding in a file, e.g. four decimals per value, stays far below it).
ONE_PERIOD_TOLERANCE = 1e-3


def one_period_source(table, frame, response, horizon, one_period):
    """The one-period series whose forward sum over the next h periods is the response, as a
    Series over the whole table (named by its column), or None when not known."""
    if one_period is None and table is not None:
        from .data import transform_name
        for kind, column, p in table.transforms:
            if kind == "sum-next" and transform_name(kind, column, p) == response:
                one_period = column
    if one_period is None:
        return None
    if not isinstance(one_period, str) or one_period not in frame.columns:
        raise SpecificationError(f"no column named {one_period!r} for the one-period series")
    if not horizon or horizon < 1:
        raise SpecificationError("give the horizon h of the response with its one-period "
                                 "series (horizon=h)")
    x = frame[one_period].astype(float)
    ahead = x[::-1].rolling(horizon, min_periods=horizon).sum()[::-1].shift(-1)
    y = frame[response].astype(float)
    both = ahead.notna() & y.notna()
    if not both.any():
        raise SpecificationError(f"'{one_period}' and '{response}' have no rows in common")
    gap = float((ahead[both] - y[both]).abs().max())
    scale = float(y[both].std()) or 1.0
    if gap > ONE_PERIOD_TOLERANCE * scale:
        raise SpecificationError(
            f"'{response}' is not the sum of the next {horizon} values of '{one_period}' (they "
            f"differ by up to {gap:.3g}); name the one-period series whose forward sum is the "
            "response, or leave it out")
    return x.rename(one_period)


class SeriesModel(MomentModel):
    """A moment model given by its contributions directly: g_t (T x m), in their own basis,
    with an influence map M (k x m), so that V = T M S M'. Used for statistics that are means
    of a series (Fama-MacBeth slopes, first-stage systems); estimators that need a regression
    design (classical, HC2, HC3) say so."""

    kind = "series of moment contributions"

    def __init__(self, contributions, influence_map, *, terms, beta, index=None,
                 moment_names=None, sample=None, horizon=None, df_resid=None, response=""):
        self._init_model()
        g = np.asarray(contributions, dtype=float)
        if g.ndim != 2 or not np.isfinite(g).all():
            raise SpecificationError("moment contributions must be a finite T x m matrix")
        self.caches.put("working_contributions", g)
        self._m = np.asarray(influence_map, dtype=float)
        self.terms = list(terms)
        self.beta = np.asarray(beta, dtype=float)
        self.nobs, self.k = g.shape[0], len(self.terms)
        self._names = list(moment_names) if moment_names is not None else list(self.terms)
        self.index = index if index is not None else pd.RangeIndex(self.nobs)
        self.sample = sample if sample is not None else SampleInfo(self.nobs, self.nobs)
        self.horizon = horizon
        self.response = response
        self._df = df_resid
        self.resid = None

    @property
    def moment_names(self) -> list[str]:
        return self._names

    @property
    def working_design(self):
        raise SpecificationError("this estimator needs a regression design, which a series of "
                                 "moment contributions does not have; use HC0, a kernel, VAR "
                                 "or EWC")

    def homoskedastic_long_run(self):
        g = self.working_contributions
        return g.T @ g / self.nobs

    @property
    def sigma2(self) -> float:
        return float("nan")

    def _original_contributions(self):
        return self.working_contributions

    def to_original(self, s_working):
        return s_working

    def to_working(self, s_original):
        return s_original

    @property
    def influence_map(self):
        return self._m

    @property
    def df_resid(self) -> int:
        return self._df if self._df is not None else self.nobs - 1

    @property
    def small_sample_factor(self) -> float:
        return self.nobs / max(self.df_resid, 1)
