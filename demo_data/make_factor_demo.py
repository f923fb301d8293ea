"""Generate demo_data/strategy_portfolios.csv: an invented, seeded scenario for the factor-model
mode (simulated data, not real returns).

25 simulated strategy portfolios (P01..P25, raw monthly returns) on three invented factors
(market, carry, defensive: excess returns of invented traded portfolios) and a simulated
risk-free rate (rf), 480 months. Four portfolios (P03, P08, P14, P19) are mispriced by 0.12% a
month. The residuals of every portfolio are negatively autocorrelated (MA(1) with coefficient
-0.6: noise in each month's reported portfolio value that reverses the following month) and
heteroskedastic (their volatility rises with the size of the market's move). Five portfolios
(P21..P25) start five years late and P12 has a six-month gap, so the factor model runs on an
unbalanced panel.

What it shows (tests/test_factors.py checks the README's statement): the joint test that all
25 alphas are zero does not reject at 5% under the classical and heteroskedasticity-robust (HC0,
HC1) estimators nor under GRS, and rejects under kernel HAC (every kernel) at the Andrews (1991)
and Newey-West (1994) automatic bandwidths: negatively autocorrelated residuals make the iid
and HC estimates of the alphas' long-run covariance too large. (In seeded simulations of this
scenario the same split appears in most samples, not only in this one.)

    python demo_data/make_factor_demo.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20240924
T = 480
N = 25
THETA = -0.6                                               # MA(1) coefficient
MISPRICED = {3: 0.0012, 8: 0.0012, 14: 0.0012, 19: 0.0012}  # portfolio number -> alpha


def simulate(seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    dates = pd.date_range("1985-01-31", periods=T, freq="ME")
    market = 0.006 + 0.044 * rng.standard_normal(T)
    carry = 0.002 + 0.024 * rng.standard_normal(T)
    defensive = 0.003 + 0.020 * rng.standard_normal(T)
    f = np.column_stack([market, carry, defensive])
    rf = np.empty(T)
    rf[0] = 0.004
    for t in range(1, T):
        rf[t] = max(0.0, 0.0002 + 0.95 * rf[t - 1] + 0.0003 * rng.standard_normal())
    betas = np.column_stack([rng.uniform(0.6, 1.4, N), rng.normal(0.2, 0.5, N),
                             rng.normal(0.1, 0.5, N)])
    alpha = np.zeros(N)
    for p, a in MISPRICED.items():
        alpha[p - 1] = a
    vol = 0.012 * (0.5 + 12.0 * np.abs(np.r_[0.0, market] - market.mean()))[:, None]
    shocks = rng.standard_normal((T + 1, N)) * vol
    e = shocks[1:] + THETA * shocks[:-1]
    excess = alpha + f @ betas.T + e
    raw = excess + rf[:, None]
    raw[:60, 20:] = np.nan                          # P21..P25 start five years late
    raw[200:206, 11] = np.nan                       # P12: six months missing
    frame = pd.DataFrame({"date": dates.strftime("%Y-%m-%d"), "rf": rf, "market": market,
                          "carry": carry, "defensive": defensive})
    for i in range(N):
        frame[f"P{i + 1:02d}"] = raw[:, i]
    return frame.round(6)


def main() -> None:
    out = Path(__file__).with_name("strategy_portfolios.csv")
    simulate().to_csv(out, index=False)
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
