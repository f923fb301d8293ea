"""Bootstrap intervals for a least-squares fit.

`bootstrap(fit, estimator, method)`: moving-block, stationary or circular block bootstrap of the
rows (the `arch` package's resampling and its Politis-White block-length rule), or a wild
bootstrap (Rademacher weights on the residuals) for heteroskedasticity; percentile-t intervals
and bootstrap p-values beside the analytic ones. Seeds make every result reproducible.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..covariance.registry import as_estimator, estimator as make
from ..capabilities import missing
from ..data.columns import INTERCEPT, SampleInfo
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..models.ols import OLSFit

BOOTSTRAP_METHODS = ("moving_block", "stationary", "circular", "wild")


@dataclass
class BootstrapResult:
    table: pd.DataFrame          # per term: estimate, std_error, t_stat, analytic interval and
    #                              p, bootstrap se, percentile-t interval and p
    method: str
    block: float | None
    reps: int
    seed: int
    estimator: str
    level: float
    failed: int = 0
    notes: list[str] = field(default_factory=list)
    draws: np.ndarray | None = None          # (reps, k) bootstrap coefficient draws


def block_length(fit, method: str = "moving_block") -> tuple[float, str]:
    """The Politis-White (2004; Patton, Politis & White 2009) block length from the `arch`
    package, for the moment contributions of the slopes (largest over columns), at least the
    overlap h of an h-period response."""
    from arch.bootstrap import optimal_block_length
    g = fit.contributions
    cols = [j for j, t in enumerate(fit.terms) if t != INTERCEPT] or list(range(g.shape[1]))
    table = optimal_block_length(g[:, cols])
    which = "stationary" if method == "stationary" else "circular"
    b = float(np.nanmax(table[which].to_numpy()))
    text = f"Politis-White block length {b:.1f} ({which} rule, arch)"
    h = fit.horizon or 1
    if not np.isfinite(b) or b < 1:
        b = 1.0
    if b < h:
        b = float(h)
        text += f", raised to the overlap h = {h}"
    return b, text


def resample_indices(method: str, nobs: int, block: float, reps: int, seed: int):
    """Row indices of each replicate from the `arch` package's block bootstraps."""
    from arch.bootstrap import (CircularBlockBootstrap, MovingBlockBootstrap,
                                StationaryBootstrap)
    cls = {"moving_block": MovingBlockBootstrap, "stationary": StationaryBootstrap,
           "circular": CircularBlockBootstrap}[method]
    size = block if method == "stationary" else max(int(round(block)), 1)
    bs = cls(size, np.arange(nobs), seed=seed)
    for pos, _ in bs.bootstrap(reps):
        yield np.asarray(pos[0])


def quick_fit(fit, X, y, one_period=None):
    m = OLSFit(X=X, y=y, terms=fit.terms, index=pd.RangeIndex(len(y)), response=fit.response,
               sample=SampleInfo(len(y), len(y)), horizon=fit.horizon)
    if one_period is not None:
        m.one_period = one_period
    return m


def bootstrap(fit, estimator=None, method: str = "moving_block", reps: int = 999,
              block: float | None = None, seed: int = 0, level: float = 0.95) -> BootstrapResult:
    """Percentile-t bootstrap of a least-squares fit under `estimator` (default Bartlett with
    the Andrews bandwidth). method: "moving_block", "stationary", "circular" (rows resampled in
    blocks, the block length from the Politis-White rule unless given) or "wild" (Rademacher
    weights on the residuals; for heteroskedasticity, not autocorrelation)."""
    if method not in BOOTSTRAP_METHODS:
        raise SpecificationError(f"bootstrap method must be one of {', '.join(BOOTSTRAP_METHODS)}")
    why = missing(fit.capabilities, ("time_ordered", "least_squares", "rows"))
    if why:
        raise SpecificationError(f"the bootstrap here is for least-squares time-series fits: {why}")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 99:
        raise SpecificationError("use at least 99 bootstrap replications")
    est = as_estimator(estimator) if estimator is not None else make("kernel")
    base = fit.infer(est, level=level)
    beta, se = base.table.estimate.to_numpy(), base.table.std_error.to_numpy()
    notes = []
    if method == "wild":
        block_used, how = None, "wild bootstrap, Rademacher weights on the residuals"
        rng = np.random.default_rng(seed)
        draws_iter = (("wild", rng.choice([-1.0, 1.0], size=fit.nobs)) for _ in range(reps))
        if fit.horizon and fit.horizon > 1:
            notes.append("the wild bootstrap keeps heteroskedasticity but not the "
                         "autocorrelation of an overlapping response; a block method keeps both")
    else:
        if block is None:
            block_used, how = block_length(fit, method)
        else:
            block_used, how = float(block), f"block length {float(block):g} (given)"
        draws_iter = (("rows", idx) for idx in resample_indices(method, fit.nobs, block_used,
                                                                 reps, seed))
    X, y, fitted, resid = fit.X, fit.y, fit.fitted_values, fit.resid
    b_star, t_star = [], []
    failed = 0
    for kind, d in draws_iter:
        if kind == "wild":
            xs, ys = X, fitted + resid * d
        else:
            xs, ys = X[d], y[d]
        try:
            m = quick_fit(fit, np.ascontiguousarray(xs), np.ascontiguousarray(ys))
            r = m.infer(est, level=level)
        except LagwiseError:
            failed += 1
            continue
        bs, ss = r.table.estimate.to_numpy(), r.table.std_error.to_numpy()
        if not np.isfinite(ss).all() or (ss <= 0).any():
            failed += 1
            continue
        b_star.append(bs)
        t_star.append((bs - beta) / ss)
    if len(b_star) < 0.9 * reps:
        raise EstimationError(f"only {len(b_star)} of {reps} bootstrap replicates could be "
                              "fitted (resamples with collinear regressors); use a longer "
                              "block or another method")
    b_star, t_star = np.array(b_star), np.array(t_star)
    alpha = 1.0 - level
    q_lo, q_hi = np.quantile(t_star, [alpha / 2, 1 - alpha / 2], axis=0)
    t_obs = beta / se
    p_boot = (np.abs(t_star - 0.0) >= np.abs(t_obs)[None, :]).mean(axis=0)
    table = pd.DataFrame({
        "estimate": beta, "std_error": se, "t_stat": t_obs,
        "ci_low": base.table.ci_low.to_numpy(), "ci_high": base.table.ci_high.to_numpy(),
        "p_value": base.table.p_value.to_numpy(),
        "boot_se": b_star.std(axis=0, ddof=1),
        "boot_ci_low": beta - q_hi * se, "boot_ci_high": beta - q_lo * se,
        "boot_p_value": p_boot}, index=base.table.index)
    if failed:
        notes.append(f"{failed} replicates could not be fitted and were left out")
    notes.insert(0, f"{how}; {len(b_star)} replicates, seed {seed}; percentile-t with the "
                    f"{base.label} standard error in each replicate")
    return BootstrapResult(table=table, method=method, block=block_used, reps=len(b_star),
                           seed=seed, estimator=base.label, level=level, failed=failed,
                           notes=notes, draws=b_star)
