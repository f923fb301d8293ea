"""Size-check benchmark (not in the default run): python -m pytest tests/bench -m bench -s -k size

1,000 replications x every default estimator of the comparison (20 for this fit: classical,
HC0-HC3, six kernels at the Andrews bandwidth, Newey-West and rule-of-thumb Bartlett, the overlap
rows, VAR-HAC, VAR(1), EWC, Hodrick) at T = 500, for a 12-period overlapping response with its
one-period series, simulated from a VAR (the default). Wall time on the machine's cores (two
worker processes), median of three runs in one process. Target: 60 s.
"""

import json
import time

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.engine.studies.size_check import size_check

pytestmark = pytest.mark.bench


def test_size_check_thousand_replications_at_t_500():
    rng = np.random.default_rng(0)
    n = 500 + 12
    x = np.zeros(n)
    for t in range(1, n):
        x[t] = 0.95 * x[t - 1] + rng.standard_normal()
    r = 0.5 + rng.standard_normal(n)
    table = lagwise.engine.data.Table(frame=pd.DataFrame({"r": r, "x": x,
                                                          "z": rng.standard_normal(n)}))
    table, y = table.with_transform("sum-next", "r", 12)
    fit = lagwise.fit_ols(table, y, ["x", "z"])
    assert fit.nobs == 500
    times, n_est = [], 0
    for _ in range(3):
        t0 = time.perf_counter()
        res = size_check(fit, reps=1000, seed=1, focus="x")
        times.append(time.perf_counter() - t0)
        n_est = len(res.frame)
    report = {"replications": 1000, "estimators": n_est, "T": fit.nobs,
              "wall_s_median": round(float(np.median(times)), 1),
              "wall_s_all": [round(t, 1) for t in times],
              "rejection_rates": dict(zip(res.frame.estimator,
                                          res.frame.rejection_rate.round(3)))}
    print("\nBENCH size check", json.dumps(report, indent=1))
    assert np.median(times) <= 60
