"""Reference laws: the distributions a t statistic or a Wald statistic is referred to.

Each law is an object that gives critical values, two-sided p-values for t statistics, the
p-value of a Wald statistic (in the form the law defines), a one-line description and a short
label. Estimator families say which law their theory gives (`LongRun.law`); `resolve` turns the
analyst's request ("auto", "normal", "t", "fixed-b") into a law, in this one place.

* `Normal`: large-sample standard normal; Wald statistics chi-square(m).
* `StudentT(df)`: t(df); Wald statistics as F(m, df) with F = W/m (classical OLS: df = T - k).
* `EWCLaw(B)`: LLSW (2018): t(B); F* = (B - m + 1)/(B m) W ~ F(m, B - m + 1).
* `FixedB(kernel, b/T)`: Kiefer & Vogelsang (2005) fixed-b law from the shipped simulation
  (engine/laws/tables/fixed_b.json), with the simulation's Monte Carlo error.
"""

from __future__ import annotations

import functools

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import LawUnavailable, SpecificationError
from .fixedb import (check, critical_value_mc_error, fixed_b_critical_value, fixed_b_p_value,
                     fixed_b_p_values)

#: The reference laws an analyst can ask for, with what each means (the app's picker uses these).
REQUESTS = {
    "auto": "the law the estimator's own theory gives (t(T-k) for classical, t(B) for EWC, "
            "normal otherwise)",
    "normal": "standard normal, a large-sample approximation",
    "t": "Student t (T - k degrees of freedom unless the estimator's theory gives its own)",
    "fixed-b": "fixed-b (Kiefer-Vogelsang) values for the kernel and b/T in use",
}


@dataclass(frozen=True)
class WaldForm:
    """A Wald statistic W of m restrictions as a law refers it: the reported form, its degrees
    of freedom (None for a non-standard law) and the p-value."""

    f_statistic: float
    f_df: tuple[float, float] | None
    p_value: float


class Law:
    """Base class. Subclasses define `critical_value`, `p_values`, `wald`, `describe`, `label`."""

    key = "law"
    df: float | None = None

    def critical_value(self, level: float, restrictions: int = 1) -> float:
        raise NotImplementedError

    def p_values(self, t) -> np.ndarray:
        """Two-sided p-values of t statistics (NaN where t is not finite)."""
        raise NotImplementedError

    def wald(self, w: float, m: int) -> WaldForm:
        raise NotImplementedError

    def describe(self) -> str:
        raise NotImplementedError

    @property
    def label(self) -> str:
        raise NotImplementedError

    def mc_error(self, level: float) -> float | None:
        """Monte Carlo standard error of the critical value at `level` (simulated laws only)."""
        return None

    def check_restrictions(self, m: int) -> None:
        """Raise SpecificationError if the law cannot refer a test of m restrictions."""

    def wald_text(self, m: int) -> str:
        raise NotImplementedError

    @property
    def per_coefficient(self) -> bool:
        """True when the law's values differ by coefficient (degrees of freedom per coefficient,
        as bias-reduced cluster errors or equations of unequal length give); its critical values
        and p-values are then arrays over the coefficients."""
        return False

    def restricted(self, involved) -> "Law":
        """The law that refers a joint test of the coefficients marked in `involved` (a boolean
        array over the coefficients): itself for a law with one value for every coefficient."""
        return self

    def for_restrictions(self, R) -> "Law":
        """The law that refers a Wald test of R beta = r (R: m x k): by default the law of the
        coefficients R involves (`restricted`); a law may refer the restrictions themselves."""
        return self.restricted(np.any(np.atleast_2d(np.asarray(R)) != 0, axis=0))

    def _key(self):
        return tuple(sorted((k, tuple(np.ravel(v)) if isinstance(v, np.ndarray) else v)
                            for k, v in self.__dict__.items()))

    def __eq__(self, other):
        return type(self) is type(other) and self._key() == other._key()

    def __hash__(self):
        return hash((type(self).__name__, self._key()))

    def __repr__(self):
        return f"<law {self.label}>"


def _finite_or_nan(t, p):
    t = np.asarray(t, dtype=float)
    return np.where(np.isfinite(t), p, np.nan)


# --------------------------------------------------------------------------- the tail functions
# Every p-value Lagwise shows is computed by one of these (through a Law, or directly by the
# specification tests: J, IVX, first-stage Wald, residual diagnostics); tests/test_p_values.py
# scans the sources for a distribution's tail function used anywhere else.

def _float_or_array(p):
    return float(p) if np.ndim(p) == 0 else p


def normal_two_sided(z):
    """Two-sided p-values of standard normal statistics, 2 P(Z > |z|) (NaN where z is not
    finite)."""
    a = np.abs(np.asarray(z, dtype=float))
    with np.errstate(invalid="ignore"):
        return _float_or_array(_finite_or_nan(a, 2 * stats.norm.sf(a)))


def normal_upper(z):
    """One-sided P(Z > z) of standard normal statistics (a test that rejects for large z)."""
    return _float_or_array(stats.norm.sf(np.asarray(z, dtype=float)))


def chi_square_upper(w, df):
    """P(chi-square(df) > w): a Wald, LM or J statistic referred to its large-sample law."""
    return _float_or_array(stats.chi2.sf(w, df))


def f_upper(f, df1, df2):
    """P(F(df1, df2) > f)."""
    return _float_or_array(stats.f.sf(f, df1, df2))


def t_two_sided(t, df):
    """Two-sided p-values of t statistics under Student t(df) (NaN where t is not finite)."""
    a = np.abs(np.asarray(t, dtype=float))
    with np.errstate(invalid="ignore"):
        return _float_or_array(_finite_or_nan(a, 2 * stats.t.sf(a, df)))


def normal_critical(level: float) -> float:
    """The two-sided standard normal critical value at `level` (e.g. 1.96 at 0.95)."""
    return _normal_critical(float(level), 1)


def t_critical(level: float, df: float) -> float:
    """The two-sided Student t(df) critical value at `level`."""
    return float(stats.t.ppf(0.5 + float(level) / 2, df))


@functools.lru_cache(maxsize=256)
def _normal_critical(level: float, restrictions: int) -> float:
    if restrictions == 1:
        return float(stats.norm.ppf(0.5 + level / 2))
    return float(stats.chi2.ppf(level, restrictions))


class Normal(Law):
    key = "normal"

    def critical_value(self, level, restrictions=1):
        return _normal_critical(float(level), int(restrictions))

    def p_values(self, t):
        return np.asarray(normal_two_sided(t), dtype=float)

    def wald(self, w, m):
        return WaldForm(w / m, None, float(chi_square_upper(w, m)))

    def describe(self):
        return "standard normal (large-sample)"

    @property
    def label(self):
        return "normal"

    def wald_text(self, m):
        return f"chi-square({m}), large-sample"


def _df_number(df: float) -> str:
    """Degrees of freedom as a reader wants them: whole numbers as they are, others to two
    decimals (8.99, 418.5)."""
    if float(df).is_integer():
        return f"{int(df)}"
    return f"{df:.2f}".rstrip("0").rstrip(".")


class StudentT(Law):
    """t(df); df may be one number or one per coefficient (an array), in which case critical
    values and p-values are arrays over the coefficients and a joint test is referred with the
    smallest df among the coefficients it restricts (conservative; stated in its description)."""

    key = "t"

    def __init__(self, df, why: str = ""):
        arr = np.asarray(df, dtype=float)
        if arr.ndim > 1 or arr.size == 0 or not np.all(arr > 0):
            raise SpecificationError(f"a Student t law needs positive degrees of freedom, got {df}")
        self.df = float(arr) if arr.ndim == 0 else arr.copy()
        self.why = why

    @property
    def per_coefficient(self) -> bool:
        return isinstance(self.df, np.ndarray) and bool(np.ptp(self.df) > 0)

    def restricted(self, involved) -> "StudentT":
        if not isinstance(self.df, np.ndarray):
            return self
        df = np.asarray(self.df)[np.asarray(involved, dtype=bool)]
        low = float(df.min()) if df.size else float(np.min(self.df))
        why = (self.why + "; " if self.why else "") + ("the smallest df among the restricted "
                                                       "coefficients" if np.ptp(df) > 0 else "")
        return StudentT(low, why.rstrip("; "))

    def critical_value(self, level, restrictions=1):
        if restrictions == 1:
            out = stats.t.ppf(0.5 + level / 2, self.df)
            return float(out) if np.ndim(out) == 0 else out
        if isinstance(self.df, np.ndarray):
            raise SpecificationError("a joint test under per-coefficient degrees of freedom "
                                     "needs the restricted coefficients (Law.restricted)")
        return float(stats.f.ppf(level, restrictions, self.df))

    def p_values(self, t):
        return np.asarray(t_two_sided(t, self.df), dtype=float)

    def wald(self, w, m):
        f = w / m
        return WaldForm(f, (m, self.df), float(f_upper(f, m, self.df)))

    def _df_text(self) -> str:
        if isinstance(self.df, np.ndarray):
            lo, hi = float(self.df.min()), float(self.df.max())
            return _df_number(lo) if lo == hi else f"{_df_number(lo)} to {_df_number(hi)}"
        return _df_number(self.df)

    def describe(self):
        per = " (per coefficient)" if self.per_coefficient else ""
        return f"Student t with {self._df_text()} df{per}" + (f" ({self.why})" if self.why else "")

    @property
    def label(self):
        return f"t({self._df_text()})"

    def wald_text(self, m):
        return f"F({m}, {self.df:g})"


class EWCLaw(StudentT):
    """t(B) for t statistics, F(m, B - m + 1) for the scaled Wald statistic (LLSW 2018)."""

    key = "ewc"

    def __init__(self, cosines: int):
        super().__init__(cosines)

    def critical_value(self, level, restrictions=1):
        if restrictions == 1:
            return super().critical_value(level)
        self.check_restrictions(restrictions)
        return float(stats.f.ppf(level, restrictions, self.df - restrictions + 1))

    def check_restrictions(self, m):
        if self.df < m:
            raise SpecificationError(f"EWC with B = {self.df:g} cosine terms cannot test {m} "
                                     "restrictions (needs B >= m)")

    def wald(self, w, m):
        self.check_restrictions(m)
        big_b = self.df
        f = (big_b - m + 1) / (big_b * m) * w
        df = (m, big_b - m + 1)
        return WaldForm(f, df, float(f_upper(f, *df)))

    def describe(self):
        return f"Student t with {self.df:g} df (EWC, B = {self.df:g})"

    @property
    def label(self):
        return f"t({self.df:g}), EWC"

    def wald_text(self, m):
        return f"F({m}, {self.df - m + 1:g}) of the scaled statistic (EWC)"


class FixedB(Law):
    """The Kiefer-Vogelsang fixed-b law for a kernel at b/T, from the shipped simulation."""

    key = "fixed-b"

    def __init__(self, kernel: str, b_over_t: float, kernel_label: str | None = None):
        check(kernel, b_over_t, 1)
        self.kernel = kernel
        self.b_over_t = float(b_over_t)
        self.kernel_label = kernel_label or kernel.replace("_", " ").capitalize()

    def critical_value(self, level, restrictions=1):
        return fixed_b_critical_value(self.kernel, self.b_over_t, level, restrictions)

    def p_values(self, t):
        a = np.abs(np.asarray(t, dtype=float))
        with np.errstate(over="ignore"):
            f = np.where(np.isfinite(a), a**2, np.nan)
        return fixed_b_p_values(self.kernel, self.b_over_t, f, 1)

    def check_restrictions(self, m):
        check(self.kernel, self.b_over_t, m)

    def wald(self, w, m):
        f = w / m
        return WaldForm(f, None, fixed_b_p_value(self.kernel, self.b_over_t, f, m))

    def mc_error(self, level):
        return critical_value_mc_error(self.kernel, self.b_over_t, level)

    def describe(self):
        return (f"fixed-b ({self.kernel_label} kernel, b/T = {self.b_over_t:.3g}; "
                "simulated values)")

    @property
    def label(self):
        return f"fixed-b, b/T = {self.b_over_t:.3g}"

    def wald_text(self, m):
        return f"fixed-b law of W/{m} (b/T = {self.b_over_t:.3g})"


#: Short names of the requests for pickers (REQUESTS holds the one-line descriptions).
REQUEST_LABELS = {"auto": "auto (the estimator's own law)", "normal": "normal (large sample)",
                  "t": "Student t", "fixed-b": "fixed-b (Kiefer-Vogelsang)"}

#: Requests whose law is named in a row's label (it changes the critical value, not S).
_NAMED_IN_ROWS = {"fixed-b": "fixed-b"}


def row_suffix(requested: str) -> str:
    """What a table row's estimator label gains under this request ('' for most)."""
    name = _NAMED_IN_ROWS.get(requested)
    return f", {name}" if name else ""


def resolve(requested: str, own: Law | None, fixed_b, df_resid: float) -> Law:
    """The law for a request. `own`: the law the estimator's theory gives (None: normal);
    `fixed_b`: a function returning the fixed-b law or raising SpecificationError with the
    reason, or None when the family has no fixed-b theory."""
    if requested not in REQUESTS:
        raise SpecificationError(f"unknown reference law {requested!r}; choose one of "
                                 f"{', '.join(REQUESTS)}")
    if requested == "auto":
        return own or Normal()
    if requested == "normal":
        return Normal()
    if requested == "t":
        return own if isinstance(own, StudentT) else StudentT(df_resid, "T - k")
    if fixed_b is None:
        raise LawUnavailable("fixed-b critical values exist for kernel estimators only; "
                             "choose another reference law for this estimator")
    try:
        return fixed_b()
    except LawUnavailable:
        raise
    except SpecificationError as exc:
        raise LawUnavailable(str(exc)) from None
