"""t statistics, p-values, confidence intervals and Wald tests for any moment model, under any
estimator of S and the reference law the analyst asks for (see engine.laws)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

import html as _html

from ..blas import single_blas_thread
from ..covariance.bandwidth import bandwidth_text, lags_text
from ..covariance.registry import Estimator, as_estimator
from ..errors import EstimationError, SpecificationError
from ..laws.reference import Law

TABLE_COLUMNS = pd.Index(["estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high"])


@dataclass
class WaldTest:
    statistic: float            # chi-square form W
    df: int                     # number of restrictions m
    p_value: float              # under the reference law in use
    f_statistic: float          # the form the law refers (W/m, or EWC's scaled F*)
    f_df: tuple[float, float] | None
    f_p_value: float
    law: str                    # the law the statistic is referred to, in words
    restrictions: list[str]

    @property
    def reference(self) -> str:
        return self.law

    def summary(self) -> str:
        df = "" if self.f_df is None else f" with ({self.f_df[0]:g}, {self.f_df[1]:g}) df"
        return (f"Wald test of {self.df} restriction(s) ({'; '.join(self.restrictions)}): "
                f"W = {self.statistic:.4g}; F = {self.f_statistic:.4g}{df}; "
                f"p = {self.p_value:.4g} under {self.law}")


def split_outside_parentheses(text: str, sep: str = "; ") -> list[str]:
    """Split at `sep` only where no parenthesis or bracket is open, so a description such as
    "fixed-b (Bartlett kernel, b/T = 0.0966; simulated values)" stays on one line."""
    out, depth, start, i = [], 0, 0, 0
    while i < len(text):
        ch = text[i]
        if ch in "([":
            depth += 1
        elif ch in ")]":
            depth = max(0, depth - 1)
        elif depth == 0 and text.startswith(sep, i):
            out.append(text[start:i])
            i += len(sep)
            start = i
            continue
        i += 1
    out.append(text[start:])
    return out


@dataclass(repr=False)
class Inference:
    """Coefficient table and covariance under one estimator and one reference law."""

    estimator: Estimator
    long_run: object
    law: Law
    params: pd.Series
    cov: pd.DataFrame
    level: float
    critical_value: float
    table: pd.DataFrame
    nobs: int
    k: int
    notes: list[str] = field(default_factory=list)
    label: str = ""
    form: str = ""                      # which sandwich V is (GMM), in words
    method: str = ""                    # how the coefficients were estimated (GMM), in words

    @property
    def bandwidth(self):
        return self.long_run.bandwidth

    @property
    def lags(self):
        return self.long_run.lags

    @property
    def df(self):
        return self.law.df

    @property
    def small_sample_factor(self) -> float:
        return self.long_run.factor

    @property
    def flags(self) -> set:
        return self.long_run.flags

    def describe(self) -> str:
        """One line: estimator, tuning value and how it was chosen, factor, reference law."""
        lr = self.long_run
        parts = [self.label]
        if lr.bandwidth is not None:
            parts[0] += f" (b = {bandwidth_text(lr.bandwidth)}, {lags_text(lr.lags)})"
        if lr.how and not lr.how.startswith("fixed bandwidth"):
            parts.append(lr.how)
        small = [p for p in self.estimator.family.params if p.name == "small_sample"]
        if small:
            parts.append(f"{small[0].title} applied" if self.estimator.params.get("small_sample")
                         else "no small-sample factor")
        parts.append(f"reference law: {self.law.describe()}")
        if self.method:
            parts.append(f"coefficients by {self.method}")
        if self.form:
            parts.append(f"covariance: {self.form}")
        return "; ".join(parts)

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
        law = self.law.for_restrictions(Rm)
        law.check_restrictions(m)
        diff = Rm @ self.params.to_numpy() - rv
        middle = Rm @ self.cov.to_numpy() @ Rm.T
        try:
            w = float(diff @ np.linalg.solve(middle, diff))
        except np.linalg.LinAlgError:
            raise EstimationError("R V R' is singular under this estimator; the Wald test "
                                  "is not available") from None
        if not np.isfinite(w) or w < 0:
            raise EstimationError("the Wald statistic is not finite under this estimator "
                                  "(R V R' is not positive definite)")
        form = law.wald(w, m)
        labels = [" + ".join(f"{c:g}*{t}" for c, t in zip(row, terms) if c != 0) + f" = {v:g}"
                  for row, v in zip(Rm, rv)]
        return WaldTest(w, m, form.p_value, form.f_statistic, form.f_df, form.p_value,
                        law.wald_text(m), labels)

    def to_frame(self) -> pd.DataFrame:
        """A tidy frame: one row per coefficient with the estimator, its tuning value, the
        reference law and the level beside the numbers."""
        out = self.table.reset_index()
        lr = self.long_run
        out["estimator"] = self.label
        out["bandwidth"] = np.nan if lr.bandwidth is None else lr.bandwidth
        out["lags"] = np.nan if lr.lags is None else lr.lags
        out["reference"] = [law.describe() for law in self.term_laws()]
        out["df"] = [np.nan if law.df is None else float(law.df) for law in self.term_laws()]
        out["level"] = self.level
        return out

    def term_laws(self) -> list:
        """The reference law of each coefficient (differs by coefficient when the law has
        degrees of freedom per coefficient)."""
        k = len(self.table)
        if not self.law.per_coefficient:
            return [self.law] * k
        return [self.law.restricted(np.arange(k) == j) for j in range(k)]

    def summary(self) -> str:
        """The result in plain text, in our own layout: what was estimated and how, then one
        line per coefficient, then the notes."""
        pct = f"{self.level:.0%}"
        parts = split_outside_parentheses(self.describe())
        lines = [f"{parts[0]}  (N = {self.nobs}, {self.k} coefficients)"]
        lines += ["  " + part for part in parts[1:]]
        if self.flags:
            lines.append("  flags: " + ", ".join(sorted(self.flags)))
        width = max(len(str(t)) for t in self.table.index) + 2
        lines.append("")
        per = self.law.per_coefficient
        lines.append(f"  {'term':<{width}}{'estimate':>12}{'std error':>12}{'t':>9}{'p':>9}"
                     f"   {pct + ' interval':<28}" + ("df" if per else ""))
        for (term, r), law in zip(self.table.iterrows(), self.term_laws()):
            p = "n/a" if not np.isfinite(r.p_value) else (
                "<0.001" if r.p_value < 0.001 else f"{r.p_value:.3f}")
            ci = f"[{r.ci_low:.4g}, {r.ci_high:.4g}]" if np.isfinite(r.ci_low) else "n/a"
            lines.append(f"  {str(term):<{width}}{r.estimate:>12.5g}{r.std_error:>12.4g}"
                         f"{r.t_stat:>9.3f}{p:>9}   {ci:<28}"
                         + (f"{float(law.df):.4g}" if per else ""))
        if self.notes:
            lines.append("")
            lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def __repr__(self) -> str:
        return f"<Inference: {self.label}; {self.law.label} reference; N = {self.nobs}>"

    def _repr_html_(self) -> str:
        """Notebook display: the table and the conventions under it."""
        head = _html.escape(self.label)
        body = self.table.to_html(float_format=lambda v: f"{v:.4g}", border=0,
                                  classes="lagwise-table")
        notes = "".join(f"<li>{_html.escape(n)}</li>" for n in self.notes)
        return (f"<div><strong>{head}</strong><p style='margin:4px 0'>"
                f"{_html.escape(self.describe())}</p>{body}"
                + (f"<ul style='color:#6b7480;font-size:90%'>{notes}</ul>" if notes else "")
                + "</div>")


@single_blas_thread
def infer(model, est, level: float = 0.95, reference: str = "auto",
          long_run=None) -> Inference:
    """Coefficient table for `model` under estimator `est` (an Estimator or a registry name).
    long_run: an estimate of S already made with `est` (otherwise the model's own choice,
    `model.long_run_for(est)`: for a GMM fit under its weighting estimator, the estimate of S
    behind the weighting)."""
    est = as_estimator(est)
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.5 <= level < 1:
        raise SpecificationError(f"confidence level must be between 0.5 and 1, got {level!r}")
    if model.fits_exactly():
        raise EstimationError("the model fits the data exactly (every residual is zero): "
                              "standard errors are zero and t statistics are not defined")
    lr = model.long_run_for(est) if long_run is None else long_run
    law = est.family.law(reference, est.params, lr, model)
    cov = model.covariance_from_long_run(lr.S)
    var = np.diag(cov).copy()
    notes = list(model.sample.notes) + list(lr.notes)
    neg = var < 0
    if neg.any():
        notes.append("negative variance for " + ", ".join(np.array(model.terms)[neg])
                     + ": standard error not available (the estimate of S is not PSD)")
    with np.errstate(invalid="ignore", over="ignore"):
        se = np.sqrt(np.where(neg, np.nan, var))
    bad = ~np.isfinite(se) & ~neg
    if bad.any():
        raise EstimationError("the standard errors are not finite numbers under this estimator "
                              "(the data are too large or too close to degenerate); rescale "
                              "the columns and fit again")
    zero = se == 0
    if zero.any():
        notes.append("zero standard error for " + ", ".join(np.array(model.terms)[zero])
                     + ": the t statistic is not defined")
    beta = model.beta
    with np.errstate(divide="ignore", invalid="ignore"):
        tstat = np.where(zero | ~np.isfinite(se), np.nan, beta / se)
    cv = law.critical_value(level)
    pv = law.p_values(tstat)
    table = pd.DataFrame(np.column_stack([beta, se, tstat, pv, beta - cv * se, beta + cv * se]),
                         index=model.term_index, columns=TABLE_COLUMNS)
    return Inference(estimator=est, long_run=lr, law=law, params=model.params,
                     cov=pd.DataFrame(cov, index=model.term_index, columns=model.term_index),
                     level=level, critical_value=cv, table=table, nobs=model.nobs,
                     k=len(model.terms), notes=notes, label=est.label_for(lr),
                     form=model.covariance_form(lr), method=model.describe_method())
