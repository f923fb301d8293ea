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


def panel_frame(seed=0, entities=40, periods=30, k=2, firm=0.5, time=0.5, rho=0.3,
                drop=0.0, het=True, entity_name="firm", time_name="month"):
    """A simulated stacked panel: regressors and errors each with a firm component, a time
    component (common to all firms in a period, AR(1) over time with coefficient rho) and an
    idiosyncratic part; `drop` removes that share of rows at random (unbalanced, with gaps)."""
    rng = np.random.default_rng(seed)
    e = np.repeat(np.arange(entities), periods)
    t = np.tile(np.arange(periods), entities)
    def part():
        common = ar1(rng, periods, rho)
        return (firm * rng.standard_normal(entities)[e] + time * common[t]
                + rng.standard_normal(entities * periods))
    xs = {f"x{i + 1}": part() for i in range(k)}
    u = part()
    if het:
        u = u * (1.0 + 0.3 * np.abs(xs["x1"]))
    y = 1.0 + sum(0.3 * (i + 1) * xs[f"x{i + 1}"] for i in range(k)) + u
    frame = pd.DataFrame({entity_name: e + 100, time_name: t + 1, "y": y, **xs})
    if drop:
        frame = frame[rng.random(len(frame)) >= drop].reset_index(drop=True)
    return frame
