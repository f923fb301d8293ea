"""Property test: odd but numeric data (tiny samples, repeated values, near-collinearity, huge
scales) gives results or typed errors through the whole family - never another exception."""

import os

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise

values = st.one_of(st.floats(-1e6, 1e6, allow_nan=False), st.sampled_from([0.0, 1.0, np.nan]))


EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "120"))


@settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                    HealthCheck.filter_too_much])
@given(n=st.integers(2, 25), k=st.integers(1, 3), data=st.data(), intercept=st.booleans())
def test_family_returns_results_or_typed_errors(n, k, data, intercept):
    cols = {f"c{i}": data.draw(st.lists(values, min_size=n, max_size=n)) for i in range(k + 1)}
    frame = pd.DataFrame(cols)
    try:
        fit = lagwise.fit_ols(frame, "c0", [f"c{i}" for i in range(1, k + 1)],
                             intercept=intercept)
    except lagwise.LagwiseError:
        return
    comp = lagwise.compare(fit)
    assert set(comp.term) == set(fit.terms)
    sw = fit.sweep(kernels=list(lagwise.KERNELS),
                   bandwidths=[1.0, min(2.5, float(fit.nobs)), float(fit.nobs)])
    assert sw.std_error.shape == (len(lagwise.KERNELS), 3, fit.k)
    try:
        lagwise.diagnose(fit)
    except lagwise.LagwiseError:
        pass
