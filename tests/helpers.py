"""Simulated data for tests (invented data is for simulations only; outside checks use
statsmodels, arch, NIST or published values, named beside each assertion)."""

import numpy as np
import pandas as pd


def ar1(rng, n, rho, scale=1.0):
    out = np.empty(n)
    out[0] = rng.standard_normal() * scale / np.sqrt(max(1 - rho**2, 1e-6))
    for t in range(1, n):
        out[t] = rho * out[t - 1] + scale * rng.standard_normal()
    return out


def regression_frame(seed=0, n=240, k=3, rho_x=0.6, rho_e=0.5, het=True):
    """AR(1) regressors and errors, errors heteroskedastic in the first regressor."""
    rng = np.random.default_rng(seed)
    xs = {f"x{i + 1}": ar1(rng, n, rho_x) for i in range(k)}
    e = ar1(rng, n, rho_e)
    if het:
        e = e * (1.0 + 0.5 * np.abs(xs["x1"]))
    y = 0.5 + sum((i + 1) * 0.2 * xs[f"x{i + 1}"] for i in range(k)) + e
    return pd.DataFrame({"y": y, **xs})
