"""Predictive regressions: persistence, Stambaugh bias and the reduced-bias slope, IVX, Hodrick
standard errors, horizon sweeps, block bootstraps and the size check.

Outside sources: the `arch` package (block bootstraps and the Politis-White block length), Monte
Carlo of the predictive-regression model with known truth (Stambaugh 1999; Amihud & Hurvich
2004; Kostakis, Magdalinos & Stamatogiannis 2015; Hodrick 1992; the pattern of Ang & Bekaert
2007), and an IVX written here separately from the paper's formulas [M: recalled]."""

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.engine.studies.predictive import horizon_sweep, ivx_test, persistence_report
from lagwise.engine.studies.bootstrap import bootstrap
from lagwise.engine.studies.size_check import size_check


def predictive_frame(rng, n, rho, delta, beta=0.0, burn=100):
    """x_{t+1} = rho x_t + v_{t+1}; r_{t+1} = beta x_t + u_{t+1}; corr(u, v) = delta. Row t
    holds x_t and r_next = r_{t+1} (the response realised after t) and r = r_t."""
    m = n + burn + 1
    e = rng.multivariate_normal([0, 0], [[1, delta], [delta, 1]], size=m)
    x = np.zeros(m)
    for t in range(1, m):
        x[t] = rho * x[t - 1] + e[t, 1]
    r = np.r_[0.0, beta * x[:-1] + e[1:, 0]]
    x, r = x[burn:], r[burn:]
    return pd.DataFrame({"x": x[:-1], "r_next": r[1:], "r": r[:-1]})


# --------------------------------------------------------------------------- IVX

def ivx_by_the_formulas(y1, x, k, c_z=-1.0, beta=0.95, lags=0):
    """A second IVX, written separately with explicit loops from the formulas of Kostakis,
    Magdalinos & Stamatogiannis (2015), one predictor: y_s = returns[s-1] predicted by x_{s-1}."""
    T = len(x)
    n = T - 1
    y = [None] + list(y1[:-1])
    xs = list(x)
    a = np.linalg.lstsq(np.column_stack([np.ones(n), xs[:-1]]), np.array(y[1:]), rcond=None)[0]
    eps = [y[s] - a[0] - a[1] * xs[s - 1] for s in range(1, T)]
    b = np.linalg.lstsq(np.column_stack([np.ones(n), xs[:-1]]), np.array(xs[1:]), rcond=None)[0]
    u = [xs[s] - b[0] - b[1] * xs[s - 1] for s in range(1, T)]
    s_ee = sum(e * e for e in eps) / n
    o_uu = sum(v * v for v in u) / n
    o_eu = sum(e * v for e, v in zip(eps, u)) / n
    for h in range(1, lags + 1):
        w = 1 - h / (lags + 1)
        o_uu += 2 * w * sum(u[t] * u[t - h] for t in range(h, n)) / n
        o_eu += w * sum(u[t] * eps[t - h] for t in range(h, n)) / n
    rnz = 1 + c_z / n ** beta
    z = [0.0] * T
    for t in range(1, T):
        z[t] = rnz * z[t - 1] + (xs[t] - xs[t - 1])
    L = T - k + 1
    yk = [sum(([0.0] + y[1:])[t: t + k]) for t in range(L)]
    xk = [sum(xs[t: t + k]) for t in range(L)]
    zk = [sum(z[t: t + k]) for t in range(L)]
    ybar = np.mean(yk[1:])
    xbar = np.mean(xk[:-1])
    zbar = np.mean(zk[: L - k])
    num = sum(z[t] * (yk[t + 1] - ybar) for t in range(T - k))
    den = sum((xk[t] - xbar) * z[t] for t in range(T - k))
    a_ivx = num / den
    o_fm = s_ee - o_eu ** 2 / o_uu
    m = sum(v * v for v in zk[:-1]) * s_ee - (L - 1) * zbar ** 2 * o_fm
    q = m / den ** 2
    return a_ivx, a_ivx ** 2 / q


@pytest.mark.parametrize("k,lags", [(1, 0), (1, 4), (6, 3)])
def test_ivx_equals_a_second_implementation_from_the_formulas(k, lags):
    rng = np.random.default_rng(3)
    df = predictive_frame(rng, 180, 0.97, -0.8, beta=0.05)
    res = ivx_test(df.r_next.to_numpy(), df.x.to_numpy(), horizon=k, lags=lags)
    a, w = ivx_by_the_formulas(df.r_next.to_numpy(), df.x.to_numpy(), k, lags=lags)
    assert res.coefficients[0] == pytest.approx(a, rel=1e-10)
    assert res.statistic == pytest.approx(w, rel=1e-10)
    assert res.tuning == {"c_z": -1.0, "beta": 0.95, "lags": lags}


@pytest.mark.slow
def test_ivx_keeps_its_size_where_the_least_squares_t_test_over_rejects():
    """Kostakis, Magdalinos & Stamatogiannis (2015): with a predictor near a unit root and
    innovations strongly negatively correlated with returns, the OLS t test over-rejects a true
    null while IVX stays close to its nominal size (their simulations report roughly 5-8%)."""
    rng = np.random.default_rng(2015)
    reps, n = 300, 250
    rates = {}
    for rho in (0.95, 1.0):
        ols = ivx = 0
        for _ in range(reps):
            df = predictive_frame(rng, n, rho, -0.95)
            fit = lagwise.fit_ols(df, "r_next", ["x"])
            ols += fit.infer("hc0").table.loc["x", "p_value"] < 0.05
            ivx += ivx_test(df.r_next.to_numpy(), df.x.to_numpy()).p_value < 0.05
        rates[rho] = (ols / reps, ivx / reps)
    print(f"\nIVX SIZE (rejections at 5%: OLS t, IVX): {rates}")
    assert rates[1.0][0] > 0.12                     # OLS over-rejects near a unit root
    for rho, (o, i) in rates.items():
        assert 0.01 <= i <= 0.095, (rho, i)


# --------------------------------------------------------------------------- bias

@pytest.mark.slow
@pytest.mark.parametrize("rho,delta,n", [(0.9, -0.9, 100), (0.98, -0.7, 240)])
def test_stambaugh_bias_and_the_reduced_bias_slope_against_monte_carlo(rho, delta, n):
    rng = np.random.default_rng(int(rho * 100) + n)
    slopes, biases, reduced = [], [], []
    for _ in range(800):
        df = predictive_frame(rng, n, rho, delta)
        fit = lagwise.fit_ols(df, "r_next", ["x"])
        rep = persistence_report(fit, "x")
        slopes.append(rep.slope)
        biases.append(rep.bias)
        reduced.append(rep.reduced_bias_slope)
    slopes, reduced = np.array(slopes), np.array(reduced)
    mc_bias, mc_se = slopes.mean(), slopes.std(ddof=1) / np.sqrt(len(slopes))
    theory = -delta * (1 + 3 * rho) / (n - 1)            # sigma_uv / sigma_vv = delta here
    # Stambaugh's formula (Kendall's approximation) against the Monte Carlo bias
    assert abs(mc_bias - theory) < 3 * mc_se + 0.25 * abs(theory)
    assert abs(np.mean(biases) - theory) < 0.2 * abs(theory)
    # the reduced-bias slope is unbiased within Monte Carlo error (truth 0)
    assert abs(reduced.mean()) < 3 * reduced.std(ddof=1) / np.sqrt(len(reduced)) \
        + 0.1 * abs(theory)


def test_persistence_report_on_the_demo():
    table = lagwise.load_table(lagwise.demo_file())
    fit = lagwise.fit_ols(table, "exret_12m", ["rate_capacity", "credit_spread"], horizon=12,
                          one_period="exret_1m")
    rep = persistence_report(fit)
    assert rep.predictor == "rate_capacity" and rep.persistent and rep.horizon == 12
    assert rep.rho_interval[0] < rep.rho_bias_adjusted < rep.rho_interval[1]
    assert rep.ivx is not None and rep.ivx_long is not None and rep.ivx_long.horizon == 12
    assert rep.bias > 0 and rep.reduced_bias_slope < rep.slope      # negative corr_uv
    assert any("Stambaugh" in s for s in rep.reading)
    # without the one-period series the report says what is missing
    bare = lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=12)
    with pytest.raises(lagwise.SpecificationError, match="one-period series is not known"):
        persistence_report(bare)
    with pytest.raises(lagwise.SpecificationError, match="is not the sum of the next 12"):
        lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=12,
                        one_period="credit_spread")


# --------------------------------------------------------------------------- Hodrick

def hodrick_by_definition(fit):
    """Hodrick (1992) 1B written from the definition: V = (X'X)^-1 [sum_s eps_s^2 xbar_s
    xbar_s'] (X'X)^-1 with eps the demeaned one-period values after each row."""
    h = fit.horizon
    src = fit.one_period.to_numpy()
    pos = fit.one_period.index.get_indexer(fit.index)
    X = fit.X
    meat = np.zeros((fit.k, fit.k))
    eps_all = src[pos[0] + 1: pos[-1] + h + 1]
    mean = eps_all.mean()
    for s in range(pos[0] + 1, pos[-1] + h + 1):
        rows = [r for r in range(s - h, s) if pos[0] <= r <= pos[-1]]
        xbar = X[[r - pos[0] for r in rows]].sum(axis=0)
        meat += (src[s] - mean) ** 2 * np.outer(xbar, xbar)
    inv = np.linalg.inv(X.T @ X)
    return inv @ meat @ inv


def test_hodrick_equals_its_definition_and_needs_the_one_period_series():
    table = lagwise.load_table(lagwise.demo_file())
    table, y = table.with_transform("sum-next", "exret_1m", 12)
    fit = lagwise.fit_ols(table, y, ["rate_capacity", "credit_spread"])
    assert fit.horizon == 12 and fit.one_period.name == "exret_1m"      # from the transform
    np.testing.assert_allclose(fit.infer("hodrick").cov.to_numpy(), hodrick_by_definition(fit),
                               rtol=1e-10)
    bare = lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=12)
    with pytest.raises(lagwise.SpecificationError, match="one-period series"):
        bare.infer("hodrick")
    assert "Hodrick (1992)" in set(lagwise.compare(fit).estimator)
    assert "Hodrick (1992)" not in set(lagwise.compare(bare).estimator)


@pytest.mark.slow
def test_hodrick_holds_its_size_where_newey_west_over_rejects():
    """Overlapping 12-period null with a persistent predictor, T = 240 (the pattern of Hodrick
    1992 and Ang & Bekaert 2007: Newey-West with L = h over-rejects, Hodrick 1B is close to its
    size)."""
    rng = np.random.default_rng(1992)
    reps, n, h = 300, 240, 12
    nw = hod = 0
    for _ in range(reps):
        df = predictive_frame(rng, n + h, 0.95, -0.5)
        t = lagwise.Table(frame=df[["x", "r"]].copy())
        t, y = t.with_transform("sum-next", "r", h)
        fit = lagwise.fit_ols(t, y, ["x"], sample=(0, n - 1))
        nw += fit.infer(lagwise.estimator("kernel", lags=h)).table.loc["x", "p_value"] < 0.05
        hod += fit.infer("hodrick").table.loc["x", "p_value"] < 0.05
    print(f"\nHODRICK SIZE (rejections at 5%): Newey-West L = h {nw / reps:.3f}, "
          f"Hodrick 1B {hod / reps:.3f}")
    assert nw / reps > 0.09
    assert 0.01 <= hod / reps <= 0.09


def test_horizon_sweep_matches_fits_at_each_horizon():
    table = lagwise.load_table(lagwise.demo_file())
    hs = horizon_sweep(table, "exret_1m", ["rate_capacity"], horizons=[1, 6, 12])
    for h in (6, 12):
        t2, y = table.with_transform("sum-next", "exret_1m", h)
        fit = lagwise.fit_ols(t2, y, ["rate_capacity"])
        for label, est in (("Bartlett, L = h", lagwise.estimator("kernel", lags=h)),
                           ("Hodrick (1992)", lagwise.estimator("hodrick"))):
            row = hs.frame[(hs.frame.h == h) & (hs.frame.estimator == label)
                           & (hs.frame.term == "rate_capacity")].iloc[0]
            res = fit.infer(est).table.loc["rate_capacity"]
            assert row.estimate == pytest.approx(res.estimate, rel=1e-12)
            assert row.std_error == pytest.approx(res.std_error, rel=1e-10)


# --------------------------------------------------------------------------- bootstrap

def test_block_bootstrap_uses_arch_resampling_and_block_length():
    from arch.bootstrap import MovingBlockBootstrap, StationaryBootstrap, optimal_block_length
    table = lagwise.load_table(lagwise.demo_file())
    fit = lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=12)
    pw = optimal_block_length(fit.contributions[:, 1:])
    res = bootstrap(fit, method="moving_block", reps=199, seed=5)
    assert res.block == pytest.approx(max(float(pw["circular"].max()), 12.0))
    bs = MovingBlockBootstrap(int(round(res.block)), np.arange(fit.nobs), seed=5)
    for i, (pos, _) in enumerate(bs.bootstrap(3)):
        idx = pos[0]
        beta = np.linalg.lstsq(fit.X[idx], fit.y[idx], rcond=None)[0]
        np.testing.assert_allclose(res.draws[i], beta, rtol=1e-9)
    st = bootstrap(fit, method="stationary", reps=199, seed=5)
    assert st.block == pytest.approx(max(float(pw["stationary"].max()), 12.0))
    first = next(StationaryBootstrap(st.block, np.arange(fit.nobs), seed=5).bootstrap(1))[0][0]
    np.testing.assert_allclose(st.draws[0], np.linalg.lstsq(fit.X[first], fit.y[first],
                                                            rcond=None)[0], rtol=1e-9)
    again = bootstrap(fit, method="moving_block", reps=199, seed=5)
    pd.testing.assert_frame_equal(res.table, again.table)
    row = res.table.loc["rate_capacity"]
    assert row.boot_ci_low < row.estimate < row.boot_ci_high and 0 <= row.boot_p_value <= 1
    wild = bootstrap(fit, method="wild", reps=199, seed=1)
    assert wild.block is None and any("wild" in n for n in wild.notes)


# --------------------------------------------------------------------------- size check

def test_size_check_classical_is_near_nominal_for_iid_data_and_reproducible():
    rng = np.random.default_rng(7)
    n = 200
    df = pd.DataFrame({"x": rng.standard_normal(n), "y": rng.standard_normal(n)})
    fit = lagwise.fit_ols(df, "y", ["x"])
    ests = [lagwise.estimator("classical"), lagwise.estimator("hc1")]
    sc = size_check(fit, estimators=ests, reps=400, seed=3, workers=1)
    row = sc.frame.set_index("estimator").loc["Classical (iid)"]
    assert row.ci_low <= 0.05 <= row.ci_high
    assert row.size_adjusted_critical_value == pytest.approx(1.97, abs=0.25)
    again = size_check(fit, estimators=ests, reps=400, seed=3, workers=1)
    pd.testing.assert_frame_equal(sc.frame, again.frame)
    seen = []
    size_check(fit, estimators=ests, reps=40, seed=3, workers=1,
               progress=lambda d, t: seen.append((d, t)))
    assert seen[0] == (0, 40) and seen[-1] == (40, 40)
    calls = []
    stopped = size_check(fit, estimators=ests, reps=100, seed=3, workers=1,
                         cancel=lambda: len(calls) > 3, progress=lambda d, t: calls.append(d))
    assert stopped.cancelled and stopped.done < 100 and "cancelled" in " ".join(stopped.notes)


def test_size_check_shows_hac_over_rejection_with_autocorrelated_scores():
    """Strongly autocorrelated regressor and errors (AR(1) 0.9 each): the normal-reference
    Bartlett test with the rule-of-thumb lag count over-rejects (as den Haan & Levin 1997 and
    Kiefer & Vogelsang 2005 report); the same seed gives the same numbers with two workers."""
    from tests.helpers import ar1
    rng = np.random.default_rng(11)
    n = 150
    df = pd.DataFrame({"x": ar1(rng, n, 0.9), "y": ar1(rng, n, 0.9)})
    fit = lagwise.fit_ols(df, "y", ["x"])
    ests = [lagwise.estimator("kernel", bandwidth="rule-of-thumb"), lagwise.estimator("ewc")]
    one = size_check(fit, estimators=ests, reps=200, seed=1, workers=1)
    nw = one.frame.set_index("estimator").iloc[0]
    assert nw.ci_low > 0.08
    two = size_check(fit, estimators=ests, reps=200, seed=1, workers=2)
    pd.testing.assert_frame_equal(one.frame, two.frame)
