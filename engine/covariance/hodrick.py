"""Hodrick (1992) standard errors 1B for an overlapping h-period response."""

from __future__ import annotations

import numpy as np

from ..errors import SpecificationError
from .longrun import LongRun
from .registry import Family, estimator, register_family


def _hodrick_condition(model) -> str | None:
    if not model.horizon:
        return ("Hodrick (1992) standard errors are for a response summing the next h periods "
                "of a one-period series; declare the horizon")
    return None


def _hodrick_long_run(model):
    """Hodrick (1992) 1B: under no predictability the sum of the moment contributions
    sum_t x_t (eps_{t+1} + ... + eps_{t+h}) equals sum_s eps_s (x_{s-1} + ... + x_{s-h}), whose
    terms are serially uncorrelated: S = (1/T) sum_s eps_s^2 xbar_s xbar_s' with eps the
    demeaned one-period series (the null imposed) and xbar_s the sum of the regressors over the
    h rows before s (as many as the sample has at its ends)."""
    h = int(model.horizon)
    src = model.one_period
    pos = src.index.get_indexer(model.index)
    if (pos < 0).any() or (np.diff(pos) != 1).any():
        raise SpecificationError("Hodrick (1992) standard errors need consecutive rows (no "
                                 "missing values inside the sample)")
    t_obs = model.nobs
    first = int(pos[0])
    s_pos = np.arange(first + 1, first + t_obs + h)
    r = src.to_numpy(dtype=float)
    if s_pos[-1] >= len(r) or not np.isfinite(r[s_pos]).all():
        raise SpecificationError(f"the one-period series '{src.name}' does not cover the "
                                 f"{h} periods after the sample")
    eps = r[s_pos] - r[s_pos].mean()
    csum = np.vstack([np.zeros((1, model.k)), np.cumsum(model.X, axis=0)])
    k_idx = np.arange(len(s_pos))
    xbar = csum[np.minimum(k_idx + 1, t_obs)] - csum[np.maximum(k_idx + 1 - h, 0)]
    s = (xbar * (eps**2)[:, None]).T @ xbar / t_obs
    how = (f"Hodrick (1992) 1B with h = {h}: the one-period series '{src.name}' demeaned (no "
           "predictability imposed) times the sum of the regressors over the previous h periods")
    return LongRun(S=model.to_working(s), how=how,
                           notes=["Hodrick (1992): valid under the null that the predictors do "
                                  "not predict the one-period series; no kernel or bandwidth"])


register_family(Family(
    name="hodrick", title="Hodrick (1992), overlapping horizons",
    citation="Hodrick (1992), Review of Financial Studies 5(3), standard errors 1B",
    assumptions="For an h-period overlapping response built from a one-period series: under no "
                "predictability the one-period errors are serially uncorrelated, so summing "
                "the regressors backwards over h periods removes the overlap without a kernel. "
                "Valid under the null of no predictability; good size in long-horizon "
                "regressions where Newey-West over-rejects.",
    params=(), long_run=lambda model: _hodrick_long_run(model), psd=lambda p: True,
    label=lambda p, lr: "Hodrick (1992)", group="horizon", needs=("time_ordered", "least_squares", "one_period"),
    condition=_hodrick_condition,
    presets=lambda model, kernel, bandwidth: [estimator("hodrick")]))
