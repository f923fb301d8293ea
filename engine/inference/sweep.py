"""Sensitivity sweeps: estimators moved along their family's tuning axis, and where the
conclusion of a test changes.

`sweep(model, estimators, values)` moves each estimator (all of one family) along the family's
axis (kernel bandwidth b, EWC's B, the VAR order). The kernel family has a vectorised path: for
each kernel the weights over lags form a matrix W (bandwidths x lags) and the long-run covariances
are W @ C with C the cached autocovariances; no pass over the data once the cache exists, and the
numbers equal one `infer` per setting. Other families run one estimate per grid point.
`model.sweep(kernels, bandwidths)` is the common case of several kernels over b.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..blas import single_blas_thread
from ..caches import nbytes_of
from ..covariance.curves import loop_curves
from ..covariance.kernels import KERNELS, get_kernel
from ..covariance.registry import Estimator, ModelInfo, as_estimator, estimator as make_estimator
from ..errors import LagwiseError, SpecificationError
from ..laws.fixedb import available

#: Point status codes and what they mean (the app marks such points on the chart).
STATUS_TEXT = {
    "repaired": "the estimate of S was not positive semi-definite; negative eigenvalues were set "
                "to zero (eigenvalue repair)",
    "not_psd": "the estimate of S is not positive semi-definite; a negative variance has no "
               "standard error",
    "collapsed": "the estimate of S is zero to rounding (flat weights over every lag)",
    "unavailable": "the estimator cannot be computed here",
}


@dataclass
class SweepResult:
    """Standard errors and t statistics of every curve (one estimator each) at every value of
    the family's tuning axis. Arrays are (curves, values, terms)."""

    labels: list[str]
    estimators: list[Estimator]
    values: np.ndarray
    terms: list[str]
    estimate: np.ndarray          # (n_c, n, k)
    std_error: np.ndarray         # (n_c, n, k)
    t_stat: np.ndarray            # (n_c, n, k)
    lags: np.ndarray              # (n_c, n); -1 where the family has no lag count
    status: np.ndarray            # (n_c, n) "" or a key of STATUS_TEXT
    reasons: np.ndarray           # (n_c, n) why a point is unavailable ("" otherwise)
    long_runs: list               # (n_c, n) light LongRun records for the reference laws
    info: ModelInfo
    extras: dict = field(default_factory=dict)     # e.g. J statistics of a GMM sweep
    _critical: dict = field(default_factory=dict, repr=False)

    # ------------------------------------------------------------------ views
    @property
    def family(self):
        return self.estimators[0].family

    @property
    def axis(self):
        return self.family.axis

    @property
    def kernels(self) -> list[str]:
        """For kernel sweeps: the kernel of each curve."""
        return [e.params.get("kernel", e.name) for e in self.estimators]

    @property
    def bandwidths(self) -> np.ndarray:
        return self.values

    @property
    def repaired(self) -> np.ndarray:
        return self.status == "repaired"

    @property
    def nobs(self) -> int:
        return self.info.nobs

    def curve_index(self, curve) -> int:
        """A curve by position, label or (for kernel sweeps) kernel name."""
        if isinstance(curve, (int, np.integer)):
            return int(curve)
        for names in (self.labels, self.kernels):
            if curve in names:
                return names.index(curve)
        raise SpecificationError(f"no curve {curve!r} in this sweep; curves are "
                                 + ", ".join(self.labels))

    def law(self, curve: int, point: int, reference: str):
        est = self.estimators[curve]
        return est.family.law(reference, est.params, self.long_runs[curve][point], self.info)

    def critical_values(self, level: float = 0.95, reference: str = "normal",
                        term: str | None = None) -> np.ndarray:
        """Two-sided critical value of |t| at each point (curves x values) under the requested
        law (NaN where the law is not defined there, e.g. fixed-b beyond b/T = 1 or for a family
        without one). A law whose values differ by coefficient needs the `term`."""
        key = (level, reference)
        if key not in self._critical:
            out = np.full((*self.status.shape, len(self.terms)), np.nan)
            for c in range(len(self.estimators)):
                for i in range(len(self.values)):
                    try:
                        out[c, i] = self.law(c, i, reference).critical_value(level)
                    except LagwiseError:
                        continue
            self._critical[key] = out
        every = self._critical[key]
        if term is not None:
            return every[:, :, self.terms.index(term)]
        same = np.all((every == every[:, :, :1]) | np.isnan(every), axis=2)
        if not same.all():
            raise SpecificationError("the reference law differs by coefficient here: name the "
                                     "term whose critical values you want")
        return every[:, :, 0]

    def series(self, curve, term: str, what: str = "t_stat") -> pd.Series:
        c, j = self.curve_index(curve), self.terms.index(term)
        return pd.Series(getattr(self, what)[c, :, j], index=self.values, name=what)

    @property
    def frame(self) -> pd.DataFrame:
        """Long format: one row per (curve, value, term)."""
        nc, n, k = self.std_error.shape
        return pd.DataFrame({
            "curve": np.repeat(self.labels, n * k),
            self.axis.param: np.tile(np.repeat(self.values, k), nc),
            "lags": np.repeat(self.lags.ravel(), k),
            "term": np.tile(self.terms, nc * n),
            "estimate": self.estimate.ravel(),
            "std_error": self.std_error.ravel(),
            "t_stat": self.t_stat.ravel(),
            "status": np.repeat(self.status.ravel(), k),
        })

    def own_nbytes(self, seen=None) -> int:
        seen = set() if seen is None else seen
        return sum(nbytes_of(a, seen) for a in (self.values, self.estimate, self.std_error,
                                                self.t_stat, self.lags)) \
            + 64 * self.status.size * 3

    @property
    def nbytes(self) -> int:
        return self.own_nbytes()


# --------------------------------------------------------------------------- kernels, vectorised


@single_blas_thread
def sweep(model, estimators, values=None) -> SweepResult:
    """Move each estimator (all of one family) along the family's tuning axis.

    values: the grid (default: the family's own grid for this model)."""
    ests = [as_estimator(e) for e in (estimators if isinstance(estimators, (list, tuple))
                                      else [estimators])]
    if not ests:
        raise SpecificationError("choose at least one estimator to sweep")
    family = ests[0].family
    if any(e.family is not family for e in ests):
        raise SpecificationError("a sweep moves estimators of one family along one axis")
    if family.axis is None:
        raise SpecificationError(f"{family.title} has no tuning parameter to sweep")
    v = family.axis.grid(model) if values is None else \
        np.atleast_1d(np.asarray(values, dtype=float))
    if v.size == 0 or np.any(~np.isfinite(v)):
        raise SpecificationError("the values to sweep must be finite numbers")
    if family.axis.param == "bandwidth" and np.any(v <= 0):
        raise SpecificationError("bandwidths must be positive numbers")
    parts = (family.sweep or loop_curves)(model, ests, v)
    se = parts["std_error"]
    est = np.broadcast_to(model.beta, se.shape).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, est / se, np.nan)
    return SweepResult(labels=[family.curve_label(e.params) for e in ests], estimators=ests,
                       values=v,
                       terms=list(model.terms), estimate=est, std_error=se, t_stat=t,
                       lags=parts["lags"], status=parts["status"],
                       reasons=parts.get("reasons", np.full(parts["status"].shape, "",
                                                            dtype=object)),
                       long_runs=parts["long_runs"],
                       info=ModelInfo(model.nobs, model.df_resid))


# --------------------------------------------------------------------------- flips

@dataclass
class Flip:
    """Where the conclusion of the two-sided test of beta = 0 changes along a tuning axis."""

    term: str
    curve: str                    # the estimator moved (its label)
    symbol: str                   # the axis symbol, e.g. "b"
    level: float
    reference: str                # the law requested
    values: np.ndarray
    rejects: np.ndarray           # bool per value (False where unavailable)
    valid: np.ndarray             # a standard error and a critical value exist

    @property
    def segments(self) -> list[tuple[float, float, bool | None]]:
        """Runs of equal conclusions: (first value, last value, rejects; None = unavailable)."""
        out = []
        state = [None if not ok else bool(r) for ok, r in zip(self.valid, self.rejects)]
        start = 0
        for i in range(1, len(state) + 1):
            if i == len(state) or state[i] != state[start]:
                out.append((float(self.values[start]), float(self.values[i - 1]), state[start]))
                start = i
        return out

    @property
    def changes(self) -> list[float]:
        """Values at which the decision differs from the previous available value."""
        seen = [(v, s) for v, _, s in self.segments if s is not None]
        return [v for (v, s), (_, prev) in zip(seen[1:], seen[:-1]) if s != prev]

    @property
    def rejects_at_start(self) -> bool | None:
        first = [s for _, _, s in self.segments if s is not None]
        return first[0] if first else None

    @property
    def flip_bandwidth(self) -> float | None:
        """The first value whose decision differs from the start's."""
        return self.changes[0] if self.changes else None

    @property
    def holds_up_to(self) -> float | None:
        """The last value before the first change (the conclusion holds up to it)."""
        if self.rejects_at_start is None:
            return None
        if not self.changes:
            return float(self.values[self.valid][-1])
        before = self.values[self.valid & (self.values < self.changes[0])]
        return float(before[-1])

    def sentence(self) -> str:
        pct = f"{100 * (1 - self.level):g}%"
        tail = f" ({self.curve}, {self.reference} critical values)"
        if self.rejects_at_start is None:
            return f"{self.term}: no usable standard error for any {self.symbol} shown."
        words = {True: "rejected", False: "not rejected", None: "not available"}
        segs = self.segments
        if len([s for s in segs if s[2] is not None]) == 1 and len(segs) == 1:
            a, b, s = segs[0]
            return (f"{self.term}: beta = 0 is {words[s]} at {pct} for every {self.symbol} from "
                    f"{a:g} to {b:g}" + tail + ".")
        parts = [(f"{words[s]} for {self.symbol} = {a:g}" if a == b else
                  f"{words[s]} for {self.symbol} from {a:g} to {b:g}") for a, b, s in segs]
        return (f"{self.term}: beta = 0 at {pct} is " + "; ".join(parts)
                + f"; the conclusion changes {times(len(self.changes))}" + tail + ".")


def times(n: int) -> str:
    return {1: "once", 2: "twice"}.get(n, f"{n} times")


def significance_flip(model, term: str, estimator=None, level: float = 0.95,
                      reference: str = "normal", values=None, sweep_result=None,
                      curve=0) -> Flip:
    """Every change of the two-sided test of beta = 0 for `term` along the tuning axis of
    `estimator` (a kernel name means a kernel estimator over the bandwidth; default Bartlett),
    under `reference`. Reuses `sweep_result` (its curve `curve`, or the curve of the kernel
    named by `estimator`) when given."""
    if term not in model.terms:
        raise SpecificationError(f"no coefficient named {term!r}; terms are "
                                 + ", ".join(model.terms))
    if estimator is None and sweep_result is None:
        estimator = "bartlett"
    by_kernel = isinstance(estimator, str) and _is_kernel(estimator)
    if sweep_result is None:
        est = make_estimator("kernel", kernel=estimator, bandwidth=1.0) if by_kernel \
            else as_estimator(estimator)
        sweep_result = sweep(model, [est], values)
        curve = 0
    elif by_kernel:
        curve = sweep_result.curve_index(estimator)
    c, j = sweep_result.curve_index(curve), sweep_result.terms.index(term)
    cv = sweep_result.critical_values(level, reference, term)[c]
    t = np.abs(sweep_result.t_stat[c, :, j])
    valid = np.isfinite(t) & np.isfinite(cv)
    rejects = np.where(valid, t > np.where(valid, cv, 0.0), False)
    return Flip(term, sweep_result.labels[c], sweep_result.axis.symbol, level, reference,
                sweep_result.values, rejects, valid)


def _is_kernel(name: str) -> bool:
    return name in KERNELS


def flip_summary(model, kernel: str = "bartlett", level: float = 0.95) -> list[str]:
    """Lines for the CLI: where each slope's conclusion changes, normal and fixed-b references."""
    sw = model.sweep([kernel])
    lines = ["", f"Where the conclusion changes ({get_kernel(kernel).label} kernel, "
                 f"b = {sw.values[0]:g}..{sw.values[-1]:g})"]
    refs = ["normal"]
    if available(kernel):
        refs.append("fixed-b")
    for term in model.terms:
        if term == "intercept":
            continue
        for ref in refs:
            lines.append("  " + significance_flip(model, term, kernel, level, ref,
                                                  sweep_result=sw).sentence())
    return lines
