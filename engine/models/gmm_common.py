"""What every GMM fit shares, linear IV and the analyst's own moment function alike: a weight
W = S^-1 from an estimator of S, which sandwich a covariance is, Hansen's J, inference with the
weighting's own S, and the sensitivity sweeps in which the weighting follows the estimator.

A fit using `WeightedGMM` provides: `W` (its weight in the working basis), `weight` (the
estimator behind W, None for a fixed weight), `weighting` (the LongRun W came from),
`first_step`, `two_step(estimator)`, `overidentification`, `mean_moment()` (gbar in the working
basis), `weighting_words()` and `j_subject` (what J's S is computed on, in words).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..covariance.longrun import LongRun
from ..covariance.registry import Estimator, ModelInfo, as_estimator
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..inference.infer import infer
from ..inference.sweep import SweepResult
from ..laws.reference import chi_square_upper

#: What a GMM sweep's curves are, for the chart.
TWO_STEP_NOTE = ("two-step GMM at each value: S from the first-step residuals weights the "
                 "moments and gives the standard errors (efficient form)")


@dataclass
class JTest:
    statistic: float
    df: int
    p_value: float
    s_from: str                      # which estimate of S the statistic uses
    description: str = ""

    def summary(self) -> str:
        if self.df == 0:
            return "J test: not defined (exactly identified: J = 0 with 0 degrees of freedom)"
        return (f"J = {self.statistic:.4g} with {self.df} df, p = {self.p_value:.4g} "
                f"(chi-square; S: {self.s_from})")


def inverse_weight(est: Estimator, model):
    """(W = S^-1 symmetrised, the LongRun) for `est` on `model`'s contributions."""
    lr = est.long_run(model)
    try:
        w = np.linalg.inv(lr.S)
    except np.linalg.LinAlgError:
        raise EstimationError(f"the {est.label} estimate of S is singular, so its inverse "
                              "cannot weight the moments") from None
    if not np.isfinite(w).all():
        raise EstimationError(f"the {est.label} estimate of S cannot be inverted")
    return 0.5 * (w + w.T), lr


def fixed_bandwidth(est: Estimator, model) -> Estimator:
    """The same estimator with a data-driven bandwidth replaced by its value on `model` (the
    continuously updated objective stays smooth)."""
    bw = est.params.get("bandwidth")
    if isinstance(bw, str):
        lr = est.long_run(model)
        return est.with_params(bandwidth=max(lr.bandwidth, 1e-6))
    return est


def j_statistic(nobs: int, g: np.ndarray, s: np.ndarray) -> float:
    """Hansen's J = T g' S^-1 g."""
    try:
        return float(nobs * g @ np.linalg.solve(s, g))
    except np.linalg.LinAlgError:
        raise EstimationError("S is singular: the J test is not defined") from None


class WeightedGMM:
    """The weighting-related behaviour of a GMM fit (see the module docstring)."""

    j_subject = "the residuals"

    def covariance_form(self, lr) -> str:
        """Which sandwich the covariance is: the efficient form when W = S^-1 for this S."""
        s = lr.S
        if s is None or not np.isfinite(s).all():
            return ""
        prod = self.W @ s
        scale = np.trace(prod) / len(prod)
        if scale > 0 and np.allclose(prod, scale * np.eye(len(prod)), rtol=1e-7,
                                     atol=1e-9 * abs(scale)):
            return ("efficient form V = (D'S^-1 D)^-1 / T: the weighting uses this same "
                    "estimate of S")
        return (f"general GMM sandwich (D'WD)^-1 D'W S W D (D'WD)^-1 / T, W from "
                f"{self.weighting_words()}")

    def long_run_for(self, estimator):
        """S for a table under `estimator`. Under the fit's own weighting estimator, the
        estimate of S behind the weighting (W = S^-1: from the first-step residuals for
        two-step GMM, at the final estimate for iterated GMM and CUE), so that the estimate, its
        covariance (the efficient form V = (D'S^-1 D)^-1 / T; Hansen 1982, Hayashi 2000 sec.
        3.5 [recalled]) and J all use one S; the coefficient table, the comparison's row and
        the GMM sweep's point for the same setting are then the same numbers. Any other
        estimator is applied to this fit's residuals (the general sandwich with W fixed).
        linearmodels' convention after two-step GMM (S re-estimated from the final residuals)
        is infer(fit, est, long_run=est.long_run(fit))."""
        if self.weighting is not None and estimator == self.weight:
            return self.weighting
        return estimator.long_run(self)

    def infer_weighting(self, level: float = 0.95, reference: str = "auto"):
        """Inference with the estimate of S behind the weighting (W = S^-1): the efficient form
        V = (D'S^-1 D)^-1 / T, as the GMM sweep reports it; the same as infer(self.weight)."""
        if self.weighting is None:
            raise SpecificationError("a fit with a fixed weight has no estimated weighting; use "
                                     "infer(estimator)")
        return infer(self, self.weight, level=level, reference=reference,
                     long_run=self.weighting)

    def j_test(self, est=None) -> JTest:
        """Hansen's J = T g' S^-1 g at the estimate, chi-square(m - k). S: the estimate behind
        the weighting (default; for a fixed weight, HC0 on this fit), or `est` on this fit."""
        df = self.overidentification
        if est is None and self.weighting is not None:
            s, s_from = self.weighting.S, f"the weighting estimate ({self.weight.label})"
        else:
            est = as_estimator(est if est is not None else "hc0")
            s, s_from = est.long_run(self).S, f"{est.label} on {self.j_subject}"
        if df == 0:
            return JTest(0.0, 0, float("nan"), s_from, "exactly identified: J = 0")
        j = j_statistic(self.nobs, self.mean_moment(), s)
        return JTest(j, df, float(chi_square_upper(j, df)), s_from,
                     f"H0: all {self.m} moment conditions hold")


def _axis_value(est, value):
    return float(value) if est.family.axis.param == "bandwidth" else int(value)


def with_j(fit, sweep: SweepResult) -> SweepResult:
    """Hansen's J at every point of a sweep of a fit whose estimate does not move (a fixed
    weight): J = T g' S^-1 g at the estimate, with the S of that point."""
    g = fit.mean_moment()
    df = fit.overidentification
    j = np.full(sweep.status.shape, np.nan)
    if df > 0:
        for c, est in enumerate(sweep.estimators):
            for i, v in enumerate(sweep.values):
                if sweep.status[c, i] in ("collapsed", "unavailable"):
                    continue
                try:
                    j[c, i] = j_statistic(fit.nobs, g, est.at(_axis_value(est, v))
                                          .long_run(fit).S)
                except LagwiseError:
                    continue
    sweep.extras.update({"j_stat": j, "j_df": df,
                         "j_p_value": chi_square_upper(j, df) if df > 0 else j})
    return sweep


def axis_sweep(fit, estimators, values=None) -> SweepResult:
    """Two-step GMM along the axis of one family: at each value the weighting is S^-1 of the
    first step with the estimator moved there; the estimate, its efficient-form standard error
    and J (one two-step fit per grid point)."""
    first = fit.first_step if fit.first_step is not None else fit
    family = estimators[0].family
    if family.axis is None:
        raise SpecificationError(f"{family.title} has no tuning parameter to sweep")
    v = family.axis.grid(first) if values is None else np.atleast_1d(np.asarray(values,
                                                                                dtype=float))
    nc, n, k = len(estimators), len(v), first.k
    beta = np.full((nc, n, k), np.nan)
    se = np.full((nc, n, k), np.nan)
    j = np.full((nc, n), np.nan)
    lags = np.full((nc, n), -1, dtype=int)
    status = np.full((nc, n), "", dtype=object)
    reasons = np.full((nc, n), "", dtype=object)
    runs = []
    for c, est in enumerate(estimators):
        row = []
        for i, value in enumerate(v):
            try:
                step = first.two_step(est.at(_axis_value(est, value)))
                res = step.infer_weighting()
                beta[c, i] = step.beta
                se[c, i] = res.table.std_error.to_numpy()
                j[c, i] = step.j_test().statistic
                lr = res.long_run
                if lr.lags is not None:
                    lags[c, i] = lr.lags
                row.append(LongRun(S=None, bandwidth=lr.bandwidth, lags=lr.lags, law=lr.law,
                                   tuning=float(value)))
            except LagwiseError as exc:
                status[c, i], reasons[c, i] = "unavailable", str(exc)
                row.append(LongRun(S=None, tuning=float(value)))
        runs.append(row)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, beta / se, np.nan)
    df = first.overidentification
    return SweepResult(labels=[family.curve_label(e.params) for e in estimators],
                       estimators=list(estimators), values=v, terms=list(first.terms),
                       estimate=beta, std_error=se, t_stat=t, lags=lags, status=status,
                       reasons=reasons, long_runs=runs,
                       info=ModelInfo(first.nobs, first.df_resid),
                       extras={"j_stat": j, "j_df": df,
                               "j_p_value": chi_square_upper(j, df) if df > 0 else j,
                               "chart_note": TWO_STEP_NOTE})
