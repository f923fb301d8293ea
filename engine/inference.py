"""t statistics, p-values, confidence intervals and Wald tests under a chosen reference law.

Reference laws:
* "normal": large-sample standard normal (chi-square for Wald);
* "t": Student t with T - k degrees of freedom (F(m, T-k) for Wald);
* "fixed-b": Kiefer-Vogelsang fixed-b law for the kernel and b/T in use (kernel estimators);
* "auto": what the estimator's own theory gives: t(T-k) for classical, t(B) / F(m, B-m+1)
  for EWC, the normal for the others.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .covariance import Estimator, estimator as make_estimator
from .errors import EstimationError, SpecificationError
from ._threads import single_blas_thread

REFERENCES = ("auto", "normal", "t", "fixed-b")
TABLE_COLUMNS = pd.Index(["estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high"])


@dataclass
class WaldTest:
    statistic: float            # chi-square form W
    df: int                     # number of restrictions m
    p_value: float              # under the reference law in use
    f_statistic: float          # F form (scaled as the reference law requires)
    f_df: tuple[float, float] | None
    f_p_value: float
    reference: str
    restrictions: list[str]

    def summary(self) -> str:
        return (f"Wald test of {self.df} restriction(s) ({'; '.join(self.restrictions)}): "
                f"W = {self.statistic:.4g}, p = {self.p_value:.4g} ({self.reference}); "
                f"F = {self.f_statistic:.4g}, p = {self.f_p_value:.4g}")


@dataclass
class Inference:
    """Coefficient table and covariance under one estimator and one reference law."""

    estimator: Estimator
    long_run: object
    params: pd.Series
    cov: pd.DataFrame
    level: float
    reference: str
    df: float | None
    critical_value: float
    table: pd.DataFrame
    nobs: int
    k: int
    notes: list[str] = field(default_factory=list)
    _fit: object = None

    @property
    def bandwidth(self):
        return self.long_run.bandwidth

    @property
    def lags(self):
        return self.long_run.lags

    @property
    def small_sample_factor(self) -> float:
        return self.long_run.factor

    @property
    def flags(self) -> set:
        return self.long_run.flags

    def describe(self) -> str:
        """One line: estimator, bandwidth and how it was chosen, factor, reference law."""
        lr = self.long_run
        if lr.bandwidth is not None:
            name = self.estimator.label.split(",")[0]
            if self.estimator.params.get("prewhiten"):
                name += " prewhitened"
            parts = [f"{name}, b = {lr.bandwidth:.4g} ({lr.lags} lags)"]
            if lr.rule and not lr.rule.startswith("fixed bandwidth"):
                parts.append(lr.rule)
        else:
            parts = [self.estimator.label]
        if self.estimator.name in ("hc1", "hc2", "hc3", "classical"):
            pass                                   # their own finite-sample form
        elif lr.factor != 1.0:
            parts.append("small-sample factor T/(T-k) applied")
        else:
            parts.append("no small-sample factor")
        parts.append(f"reference: {self.reference_text()}")
        return "; ".join(parts)

    def reference_text(self) -> str:
        if self.reference == "normal":
            return "standard normal (large-sample)"
        if self.reference == "t":
            return f"Student t with {self.df:g} df"
        if self.reference == "fixed-b":
            return f"fixed-b ({self.long_run.bandwidth / self.nobs:.3g} = b/T)"
        if self.reference == "ewc-t":
            return f"Student t with {self.df:g} df (EWC)"
        return self.reference

    def wald(self, R, r=None) -> WaldTest:
        """Joint test of R beta = r. R: matrix (m x k), a list of term names (each = 0) or a
        dict {term: value}. r defaults to zeros."""
        terms = list(self.params.index)
        if isinstance(R, dict):
            names = list(R)
            r = np.array([float(v) for v in R.values()])
            R = names
        if isinstance(R, (list, tuple)) and R and all(isinstance(x, str) for x in R):
            unknown = [x for x in R if x not in terms]
            if unknown:
                raise SpecificationError(f"no coefficient named {unknown[0]!r}; terms are "
                                         + ", ".join(terms))
            Rm = np.zeros((len(R), len(terms)))
            for i, name in enumerate(R):
                Rm[i, terms.index(name)] = 1.0
        else:
            Rm = np.atleast_2d(np.asarray(R, dtype=float))
        m = Rm.shape[0]
        if Rm.shape[1] != len(terms):
            raise SpecificationError(f"R must have {len(terms)} columns (one per coefficient)")
        rv = np.zeros(m) if r is None else np.atleast_1d(np.asarray(r, dtype=float))
        if rv.shape != (m,):
            raise SpecificationError(f"r must have {m} entries (one per restriction)")
        if np.linalg.matrix_rank(Rm) < m:
            raise SpecificationError("the restrictions in R are linearly dependent")
        if self.reference == "ewc-t" and self.df < m:
            raise SpecificationError(f"EWC with B = {self.df:g} cosine terms cannot test "
                                     f"{m} restrictions (needs B >= m)")
        diff = Rm @ self.params.to_numpy() - rv
        middle = Rm @ self.cov.to_numpy() @ Rm.T
        try:
            w = float(diff @ np.linalg.solve(middle, diff))
        except np.linalg.LinAlgError:
            raise EstimationError("R V R' is singular under this estimator; the Wald test "
                                  "is not available") from None
        labels = [" + ".join(f"{c:g}*{t}" for c, t in zip(row, terms) if c != 0) + f" = {v:g}"
                  for row, v in zip(Rm, rv)]
        ref = self.reference
        if ref == "ewc-t":
            big_b = self.df
            if big_b < m:
                raise SpecificationError(f"EWC with B = {big_b:g} cosine terms cannot test "
                                         f"{m} restrictions (needs B >= m)")
            f_stat = (big_b - m + 1) / (big_b * m) * w
            f_df = (m, big_b - m + 1)
            p = f_p = float(stats.f.sf(f_stat, *f_df))
        elif ref == "fixed-b":
            from .fixedb import fixed_b_p_value
            f_stat = w / m
            f_df = None
            p = f_p = fixed_b_p_value(self.estimator.params["kernel"],
                                      self.long_run.bandwidth / self.nobs, f_stat, m)
        elif ref == "t":
            f_stat = w / m
            f_df = (m, self.df)
            p = f_p = float(stats.f.sf(f_stat, *f_df))
        else:
            f_stat = w / m
            f_df = (m, self.nobs - self.k)
            p = float(stats.chi2.sf(w, m))
            f_p = float(stats.f.sf(f_stat, *f_df))
        if ref == "normal":
            law = f"chi-square({m}), large-sample"
        elif ref == "t":
            law = f"F({m}, {self.df:g})"
        else:
            law = self.reference_text()
        return WaldTest(w, m, p, f_stat, f_df, f_p, law, labels)


def _resolve_reference(est: Estimator, lr, reference: str, fit):
    if reference not in REFERENCES:
        raise SpecificationError(f"unknown reference law {reference!r}; choose one of "
                                 f"{', '.join(REFERENCES)}")
    if reference == "auto":
        if lr.reference == "ewc-t":
            return "ewc-t", lr.df
        if lr.reference == "t":
            return "t", float(fit.df_resid)
        return "normal", None
    if reference == "t":
        if lr.reference == "ewc-t":
            return "ewc-t", lr.df
        return "t", float(fit.df_resid)
    if reference == "fixed-b":
        from .fixedb import FIXED_B_KERNELS
        if not est.spec.has_bandwidth or est.params.get("kernel") not in FIXED_B_KERNELS:
            raise SpecificationError("fixed-b critical values exist for kernel estimators with "
                                     "the " + ", ".join(FIXED_B_KERNELS) + " kernels only")
        if est.params.get("prewhiten"):
            raise SpecificationError("fixed-b critical values here assume no prewhitening")
        return "fixed-b", None
    return "normal", None


def critical_value(reference: str, level: float, df, kernel=None, b_over_t=None) -> float:
    alpha = 1.0 - level
    if reference == "normal":
        return float(stats.norm.ppf(1 - alpha / 2))
    if reference in ("t", "ewc-t"):
        return float(stats.t.ppf(1 - alpha / 2, df))
    from .fixedb import fixed_b_critical_value
    return fixed_b_critical_value(kernel, b_over_t, level)


def p_values(reference: str, tstat: np.ndarray, df, kernel=None, b_over_t=None) -> np.ndarray:
    a = np.abs(tstat)
    if reference == "normal":
        return 2 * stats.norm.sf(a)
    if reference in ("t", "ewc-t"):
        return 2 * stats.t.sf(a, df)
    from .fixedb import fixed_b_p_value
    return np.array([fixed_b_p_value(kernel, b_over_t, x**2, 1) if np.isfinite(x) else np.nan
                     for x in np.atleast_1d(a)])


@single_blas_thread
def infer(fit, est, level: float = 0.95, reference: str = "auto") -> Inference:
    """Coefficient table for `fit` under estimator `est` (an Estimator or a registry name)."""
    if isinstance(est, str):
        est = make_estimator(est)
    if not isinstance(est, Estimator):
        raise SpecificationError("pass an estimator made by engine.estimator(...)")
    if not (isinstance(level, (int, float)) and 0.5 <= level < 1):
        raise SpecificationError(f"confidence level must be between 0.5 and 1, got {level!r}")
    lr = est.long_run(fit)
    ref, df = _resolve_reference(est, lr, reference, fit)
    cov = fit.covariance_from_long_run(lr.S)
    var = np.diag(cov).copy()
    notes = list(fit.sample.notes) + list(lr.notes)
    neg = var < 0
    if neg.any():
        notes.append("negative variance for " + ", ".join(np.array(fit.terms)[neg])
                     + ": standard error not available (the estimate of S is not PSD)")
    se = np.sqrt(np.where(neg, np.nan, var))
    beta = fit.beta
    with np.errstate(divide="ignore", invalid="ignore"):
        tstat = beta / se
    b_over_t = lr.bandwidth / fit.nobs if lr.bandwidth is not None else None
    kern = est.params.get("kernel")
    cv = critical_value(ref, level, df, kern, b_over_t)
    pv = p_values(ref, tstat, df, kern, b_over_t)
    table = pd.DataFrame(np.column_stack([beta, se, tstat, pv, beta - cv * se, beta + cv * se]),
                         index=fit.term_index, columns=TABLE_COLUMNS)
    return Inference(estimator=est, long_run=lr, params=fit.params,
                     cov=pd.DataFrame(cov, index=fit.term_index, columns=fit.term_index),
                     level=level,
                     reference=ref, df=df, critical_value=cv, table=table, nobs=fit.nobs,
                     k=fit.k, notes=notes, _fit=fit)
