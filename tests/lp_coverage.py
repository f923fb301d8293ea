"""Coverage of 90% local-projection bands in simulations with known impulse responses, with the
Lagwise engine (used by tests/test_lp_coverage.py and scripts/lp_coverage_study.py).

DGP "iid shock":        x_t iid N(0,1);                y_t = rho y_{t-1} + x_t + e_t
DGP "persistent shock": x_t = phi x_{t-1} + eps_t;     y_t = rho y_{t-1} + x_t + e_t
(e_t, eps_t iid N(0,1), independent; burn-in 200 periods; rho = 0.9, phi = 0.8). (x, y) is a
VAR(1), so p0 = 1; the response of y_{t+h} to a unit x_t (ordered first) is
theta_h = sum_{j=0..h} rho^(h-j) phi^j.

Methods (90% pointwise bands, horizons 0..H):
  NW L=2      p = 1, Bartlett b = 3 at every horizon, normal critical values
  NW rule     p = 1, Bartlett with max(h, floor(4 (n_h/100)^(2/9))) lags (lagwise.horizon_rule())
  HC0 p=1     p = 1, heteroskedasticity-robust, no extra lag (for contrast)
  LA-HC0      lag-augmented: p = 1 + 1 lags, HC0 (lagwise.lag_augmented())
  EWC         p = 1, B = floor(0.4 n_h^(2/3)), t(B) critical values
Simultaneous coverage of the sup-t band (every horizon covered at once) for LA-HC0 and the NW
rule, its critical value from one pool of N(0, I) draws transformed by each sample's R.

"No lags" (where HAC matters): the persistent-shock DGP with p = 0, so x_t is not an innovation
and the score x_t u_{t+h} keeps the autocorrelation of both series; the estimand is the
projection coefficient pi_h = sum_{k<=h} rho^k phi^(h-k) + rho^(h+1) phi / (1 - rho phi); the
lag-augmented column (p = 0 + 1, HC0) answers its own question, theta_h.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

import lagwise

LEVEL = 0.90
METHODS = ["NW L=2", "NW rule", "HC0 p=1", "LA-HC0", "EWC"]
NO_LAG_METHODS = ["NW L=2", "NW rule", "HC0", "EWC", "LA-HC0 (theta_h)"]


def estimators():
    return {"NW L=2": lagwise.estimator("kernel", kernel="bartlett", lags=2),
            "NW rule": lagwise.horizon_rule(), "HC0 p=1": lagwise.estimator("hc0"),
            "HC0": lagwise.estimator("hc0"), "LA-HC0": lagwise.lag_augmented(),
            "LA-HC0 (theta_h)": lagwise.lag_augmented(), "EWC": lagwise.estimator("ewc")}


def true_irf(rho: float, phi: float, H: int) -> np.ndarray:
    return np.array([sum(rho ** (h - j) * phi ** j for j in range(h + 1)) for h in range(H + 1)])


def projection_coefficient(rho: float, phi: float, H: int) -> np.ndarray:
    return np.array([sum(rho ** k * phi ** (h - k) for k in range(h + 1))
                     + rho ** (h + 1) * phi / (1 - rho * phi) for h in range(H + 1)])


def simulate(T: int, rho: float, phi: float, rng, burn: int = 200) -> pd.DataFrame:
    n = T + burn
    eps, e = rng.standard_normal(n), rng.standard_normal(n)
    x, y = np.empty(n), np.empty(n)
    x[0], y[0] = eps[0], e[0]
    for t in range(1, n):
        x[t] = phi * x[t - 1] + eps[t]
        y[t] = rho * y[t - 1] + x[t] + e[t]
    return pd.DataFrame({"x": x[burn:], "y": y[burn:]})


def _sup_t(r: np.ndarray, pool: np.ndarray, level: float) -> float:
    w, u = np.linalg.eigh(r)
    a = u * np.sqrt(np.clip(w, 0.0, None))
    m = np.abs(pool @ a.T).max(axis=1)
    k = int(math.ceil(level * len(m))) - 1
    return float(np.partition(m, k)[k])


def run(dgp: str, reps: int = 500, T: int = 200, H: int = 12, rho: float = 0.9,
        phi: float = 0.8, seed: int = 1, methods=METHODS, simultaneous=True,
        pool_size: int = 10_000):
    """Coverage by horizon (rows) and method (columns), mean band widths, and simultaneous
    coverage of the sup-t bands."""
    phi_ = 0.0 if dgp == "iid shock" else phi
    theta = true_irf(rho, phi_, H)
    rng = np.random.default_rng(seed)
    pool = np.random.default_rng(seed + 10_000).standard_normal((pool_size, H + 1))
    ests = estimators()
    hits = {m: np.zeros(H + 1) for m in methods}
    width = {m: np.zeros(H + 1) for m in methods}
    sim = {"sup-t LA-HC0": 0, "sup-t NW rule": 0, "all pointwise LA-HC0": 0}
    err = np.zeros((reps, H + 1))
    for r in range(reps):
        lp = lagwise.fit_local_projections(simulate(T, rho, phi_, rng), "y", "x", lags=1,
                                           horizons=H)
        tables = {}
        for m in methods:
            t = lp.irf(ests[m], LEVEL)
            tables[m] = t
            half = (t["critical_value"] * t["std_error"]).to_numpy()
            cover = np.abs(t["estimate"].to_numpy() - theta) <= half
            hits[m] += cover
            width[m] += 2 * half
            if m == "LA-HC0":
                sim["all pointwise LA-HC0"] += bool(cover.all())
                err[r] = t["estimate"].to_numpy() - theta
        if simultaneous:
            for name, m in (("sup-t LA-HC0", "LA-HC0"), ("sup-t NW rule", "NW rule")):
                if m not in tables:
                    continue
                jc = lp.joint(ests[m], LEVEL)
                c = _sup_t(jc.R, pool, LEVEL)
                t = tables[m]
                dev = np.abs(t["estimate"].to_numpy() - theta) / jc.std_error
                sim[name] += bool((dev <= c).all())
    cov = pd.DataFrame({m: hits[m] / reps for m in methods},
                       index=pd.RangeIndex(H + 1, name="h"))
    wid = pd.DataFrame({m: width[m] / reps for m in methods},
                       index=pd.RangeIndex(H + 1, name="h"))
    if "LA-HC0" in methods:
        cov["bias/sd (LA-HC0)"] = err.mean(axis=0) / err.std(axis=0)
    return cov, wid, {k: v / reps for k, v in sim.items()}


def run_no_lags(reps: int = 500, T: int = 200, H: int = 12, rho: float = 0.9,
                phi: float = 0.8, seed: int = 3) -> pd.DataFrame:
    pi, theta = projection_coefficient(rho, phi, H), true_irf(rho, phi, H)
    rng = np.random.default_rng(seed)
    ests = estimators()
    hits = {m: np.zeros(H + 1) for m in NO_LAG_METHODS}
    for _ in range(reps):
        lp0 = lagwise.fit_local_projections(simulate(T, rho, phi, rng), "y", "x", lags=0,
                                            horizons=H)
        for m in NO_LAG_METHODS:
            truth = theta if m.startswith("LA") else pi
            t = lp0.irf(ests[m], LEVEL)
            hits[m] += np.abs(t["estimate"].to_numpy() - truth) <= \
                (t["critical_value"] * t["std_error"]).to_numpy()
    return pd.DataFrame({m: hits[m] / reps for m in NO_LAG_METHODS},
                        index=pd.RangeIndex(H + 1, name="h"))


def mc_se(p: float, reps: int) -> float:
    return math.sqrt(p * (1 - p) / reps)
