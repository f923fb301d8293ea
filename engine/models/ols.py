"""Ordinary least squares: the first moment model.

Least squares by two-pass Cholesky QR of the column-scaled design (pivoted Householder QR when
the design is ill-conditioned or rank deficient), with one step of iterative refinement.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..blas import single_blas_thread
from ..capabilities import Capabilities
from ..covariance.fewclusters import ClusterDesign
from ..data.columns import (INTERCEPT, as_list, check_horizon, check_magnitudes, column_ranges,
                            frame_and_meta, index_label, numeric_block)
from ..data.groupings import as_names, grouping_from
from ..data.table import Table
from ..data.transforms import transform_name
from ..errors import SpecificationError
from .base import MomentModel, residuals_vanish


#: Columns whose norm-scaled pivoted-QR diagonal falls below this fraction of the largest are
#: treated as linear combinations of the others.
RANK_TOLERANCE = 1e-10


#: Above this condition number of the column-scaled design, least squares uses pivoted
#: Householder QR instead of the (much faster) two-pass Cholesky QR.
CHOLESKY_QR_MAX_CONDITION = 1e7


#: Below this condition number one Cholesky QR pass suffices (see `cholesky_qr2`).
ONE_PASS_MAX_CONDITION = 1e3


#: Rows per chunk of the refinement pass (X beta and X'r while the chunk is in cache).
REFINE_CHUNK = 16384


class OLSFit(MomentModel):
    """A fitted linear regression y = X beta + e and everything estimators need from it.

    Least squares by two-pass Cholesky QR of the column-scaled design (pivoted Householder QR
    when the design is ill-conditioned or rank deficient), with one step of iterative
    refinement. X = Q C with Q orthonormal; the working basis of the moment contributions is
    q_t e_t, so S of x_t e_t is C' S_q C and V = T C^-1 S_q C^-1'.
    """

    kind = "least squares"

    def __init__(self, *, X, y, terms, index, response, sample, horizon=None, table=None,
                 scales=None, xy=None):
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
        self._solve(scales, xy)

    @property
    def capabilities(self) -> Capabilities:
        """A time series of rows with a design, leverage and (when known) the one-period series
        behind an overlapping response; the groupings named in `clusters=` to cluster by."""
        return Capabilities(time_ordered=True, design=True, leverage=True, least_squares=True,
                            one_period=self.one_period is not None,
                            clusters=tuple(self.groupings), cluster_leverage=True)

    def cluster_design(self) -> ClusterDesign:
        """The orthonormal basis of X and the residuals (CR2, CR3 and their df)."""
        return ClusterDesign(hat=self.working_design, resid=self.resid)

    def fits_exactly(self) -> bool:
        return residuals_vanish(self.resid, self.y)

    @single_blas_thread
    def _solve(self, scales=None, xy=None):
        """Coefficients, fitted values and residuals. `scales`: each column's largest absolute
        value, when the caller has it already (otherwise one pass over X finds it). `xy`: X and
        y side by side in one block (y last), when the caller holds them so: one product then
        gives X'X and X'y."""
        X, y = self.X, self.y
        gram = xy.T @ xy if xy is not None else None
        # scale columns by their largest absolute value (never underflows, unlike a 2-norm)
        if scales is None:
            lo, hi = column_ranges(X)
            scales = np.maximum(hi, -lo)
        norms = np.asarray(scales, dtype=float)
        factor = (cholesky_qr2(X, norms, form_q=False,
                               xtx=None if gram is None else gram[:self.k, :self.k])
                  if norms.min() > 0 else None)
        if factor is None:
            q, r, piv = sla.qr(X / norms, mode="economic", pivoting=True, check_finite=False,
                               overwrite_a=True)
            r = np.array(r)          # a fresh copy: triangular solves on the raw factor are slow
            diag = np.abs(np.diag(r))
            rank = int(np.sum(diag > RANK_TOLERANCE * diag[0]))
            if rank < self.k:
                raise SpecificationError(collinearity_message(r, piv, rank, self.terms))
            rinv = sla.solve_triangular(r, np.eye(self.k))
            self.factorization = "pivoted Householder QR"
        else:
            q, r, rinv = factor      # q is None when one Cholesky pass suffices (formed lazily)
            piv = np.arange(self.k)
            self.factorization = "Cholesky QR"

        def solve(v):
            """The least-squares coefficients of v on X: R^-1 Q'v, unscaled. Without Q formed,
            Q'v = R^-T D^-1 X'v (the semi-normal equations; the refinement step below makes
            them as accurate as the QR solution at these condition numbers)."""
            out = np.empty(self.k)
            qtv = q.T @ v if q is not None else rinv.T @ ((X.T @ v) / norms)
            out[piv] = rinv @ qtv / norms[piv]
            return out

        def seminormal(xtv):
            return rinv @ (rinv.T @ (xtv / norms)) / norms

        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            if q is None and gram is not None:
                beta = seminormal(gram[:self.k, self.k])
            else:
                beta = solve(y)
        if not np.isfinite(beta).all():
            bad = [self.terms[i] for i in np.flatnonzero(~np.isfinite(beta))]
            raise SpecificationError(
                "the coefficients cannot be represented in floating point (overflow) for "
                + ", ".join(f"'{b}'" for b in bad) + "; rescale those columns (e.g. to "
                "thousands or percent) and fit again")
        # one step of iterative refinement on the residual system
        with np.errstate(over="ignore", invalid="ignore"):
            if q is None:
                # X beta and X'(y - X beta) in one pass over X, a cache-sized chunk at a time
                fitted = np.empty(self.nobs)
                xtr = np.zeros(self.k)
                for start in range(0, self.nobs, REFINE_CHUNK):
                    rows = slice(start, start + REFINE_CHUNK)
                    part = np.matmul(X[rows], beta, out=fitted[rows])
                    xtr += X[rows].T @ (y[rows] - part)
                step = seminormal(xtr)
            else:
                fitted = X @ beta
                step = solve(y - fitted)
        if np.isfinite(step).all():
            beta += step
            fitted = X @ beta
        # X = Q C with C = R diag(norms[piv]) P'; C^-1 = P diag(1/norms[piv]) R^-1
        inv_c = np.empty((self.k, self.k))
        inv_c[piv] = rinv / norms[piv][:, None]
        basis = np.empty((self.k, self.k))
        basis[:, piv] = r * norms[piv][None, :]
        self._q = q                                # orthonormal basis of X (None: not formed)
        self._inv_c = inv_c                        # C^-1: x_t' = q_t' C
        self._basis = basis                        # C
        self._leverage = None
        self.beta = beta
        self.fitted_values = fitted
        self.resid = y - fitted

    @single_blas_thread
    def _orthonormal_basis(self) -> np.ndarray:
        """Q = X C^-1 (one pass over X), formed when an estimator first needs it."""
        return self.X @ self._inv_c

    @property
    def leverage(self) -> np.ndarray | None:
        """The diagonal of the hat matrix, h_t = |q_t|^2 (computed on first use)."""
        if self._leverage is None:
            self._leverage = self._compute_leverage()
        return self._leverage

    def _compute_leverage(self) -> np.ndarray | None:
        q = self.working_design
        return np.einsum("ij,ij->i", q, q)

    # ------------------------------------------------------------------ the protocol
    @property
    def working_design(self) -> np.ndarray:
        """Q, the orthonormal basis of the columns of X."""
        if self._q is None:
            self._q = self._orthonormal_basis()
        return self._q

    def _original_contributions(self) -> np.ndarray:
        return self.X * self.resid[:, None]

    @property
    def working_basis(self) -> np.ndarray:
        """C: x_t e_t = q_t e_t C (X = QC)."""
        return self._basis

    @property
    def working_basis_inverse(self) -> np.ndarray:
        return self._inv_c

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


def cholesky_qr2(x: np.ndarray, norms: np.ndarray, form_q: bool = True, xtx=None):
    """Cholesky QR of a well-conditioned matrix with its columns scaled by 1/norms, without
    forming the scaled copy: (Q, R, R^-1) with X D^-1 = QR to rounding, or None
    when the matrix is too ill-conditioned for it (the caller then uses pivoted Householder QR).

    One pass when the condition number of R is below `ONE_PASS_MAX_CONDITION`: Q is then
    orthonormal to about cond^2 x 1e-16 (at most about 1e-10), which the covariance does not
    depend on (S of x_t e_t = C' S_q C holds for any Q with X = QC) and the refinement step of the
    coefficients absorbs. Otherwise a second pass (CholeskyQR2), backward stable with Q
    orthonormal to rounding for condition numbers well below 1e8 (Yamamoto et al. 2015, ETNA
    44); the threshold used is `CHOLESKY_QR_MAX_CONDITION`. With `form_q` False, Q is returned
    as None when one pass suffices (the caller forms X D^-1 R^-1 when it needs it). `xtx`:
    X'X when the caller has it."""
    k = x.shape[1]
    try:
        r1 = sla.cholesky((x.T @ x if xtx is None else xtx) / np.outer(norms, norms),
                          lower=False, check_finite=False)
    except (np.linalg.LinAlgError, ValueError):
        return None
    d = np.abs(np.diag(r1))
    if not np.isfinite(r1).all() or d.min() <= 0:
        return None
    cond = np.linalg.cond(r1)
    if cond > CHOLESKY_QR_MAX_CONDITION:
        return None
    r1inv = sla.solve_triangular(r1, np.eye(k), check_finite=False)
    if cond <= ONE_PASS_MAX_CONDITION and not form_q:
        return None, r1, r1inv
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


def collinearity_message(r, piv, rank, terms) -> str:
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


def fit_ols(data, response: str, regressors=None, intercept: bool = True,
            sample: tuple | None = None, horizon: int | None = None,
            one_period: str | None = None, clusters=None) -> OLSFit:
    """Fit y = X beta + e by least squares.

    data: a `Table` or a DataFrame. regressors: list of column names (or "x1,x2").
    intercept: add a constant term named "intercept" (first). sample: optional (start, end)
    labels of the index (dates or row numbers), both inclusive; None keeps every row.
    horizon: the number of periods h an overlapping response sums (errors MA(h-1)); taken from
    the table when the response was made by the forward-sum transform. one_period: the column
    whose sum over the next h periods is the response (known automatically for a response made
    by the forward-sum transform); Hodrick (1992) standard errors and the predictive-regression
    tools need it. clusters: column name(s) whose labels group the rows (an industry, a
    country); the fit offers them to the cluster estimators (`estimator("cluster",
    by="industry")`), the wild cluster bootstrap and the cluster summary.

    Rows with a missing value in any used column are dropped and counted in `fit.sample`.
    Raises DataError for unusable columns, SpecificationError for an impossible model.
    """
    table, frame, non_numeric, horizons = frame_and_meta(data)
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
    values, index, info, (lo, hi) = numeric_block(frame, cols, non_numeric, sample,
                                                   ones=intercept)
    t_obs = len(values)
    k = len(regs) + int(intercept)
    if t_obs <= k:
        raise SpecificationError(f"{k} coefficients but only {t_obs} usable rows: the model needs "
                                 "more observations than coefficients (T > k)")
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
    y = values[:, k]                        # contiguous (the block is column-major)
    info.rows_used = t_obs
    info.first, info.last = (index_label(index[0]), index_label(index[-1]))
    horizon = check_horizon(horizon if horizon is not None else horizons.get(response), t_obs)
    fit = OLSFit(X=X, y=y, terms=terms, index=index, response=response, sample=info,
                 horizon=horizon, table=table, scales=np.maximum(hi[:k], -lo[:k]),
                 xy=values[:, :k + 1])
    fit.one_period = one_period_source(table, frame, response, horizon, one_period)
    offer_groupings(fit, data, frame, clusters, info.rows, [response, *regs])
    return fit


def offer_groupings(fit, data, frame, clusters, rows, used) -> None:
    """Read the grouping columns for the fit's rows (`rows`: positions in the frame)."""
    for name in as_names(clusters):
        if name in used:
            raise SpecificationError(f"'{name}' is a variable of the model; cluster by another "
                                     "column")
        fit.groupings[name] = grouping_from(label_column(data, frame, name), name, rows)


def label_column(data, frame, name):
    """A column of numbers or labels (a Table keeps text columns among its labels)."""
    if name in frame.columns:
        return frame[name]
    labels = data.labels if isinstance(data, Table) else None
    if labels is not None and name in labels.columns:
        return labels[name]
    return None


#: The named one-period series must sum to the response within this fraction of the response's
#: standard deviation (rounding in a file, e.g. four decimals per value, stays far below it).
ONE_PERIOD_TOLERANCE = 1e-3


def one_period_source(table, frame, response, horizon, one_period):
    """The one-period series whose forward sum over the next h periods is the response, as a
    Series over the whole table (named by its column), or None when not known."""
    if one_period is None and table is not None:
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
