"""Predictive regressions: persistent predictors, long horizons, and IVX.

A predictive regression y_t = a + b x_t + u_t uses a predictor x_t known at t to explain a
response realised after t (a one-period return r_{t+1}, or the sum of the next h returns). When x
is persistent, x_{t+1} = mu + rho x_t + v_{t+1}, and its innovation v_{t+1} is correlated with
u_t, the least-squares slope is biased in small samples and its t test is distorted; no choice of
kernel fixes that. `persistence_report(fit, predictor)` gives the persistence (rho with an
interval), the small-sample bias of the slope (Stambaugh 1999), a reduced-bias slope (the
augmented regression of Amihud & Hurvich 2004), and the IVX test of no predictability
(Kostakis, Magdalinos & Stamatogiannis 2015), short- and long-horizon, which is valid whether the
predictor is stationary, near a unit root or integrated. `horizon_sweep` fits the regression at
every horizon h = 1..H from the one-period series.

Rows: the fit's row t holds the response realised after t and the predictor at t, so the
response's error u_t is paired with the predictor's next innovation v_{t+1}.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import signal

from ..blas import single_blas_thread
from ..covariance.registry import estimator
from ..data.columns import INTERCEPT, as_list
from ..data.table import as_table
from ..errors import EstimationError, SpecificationError
from ..laws.reference import chi_square_upper, normal_critical
from ..models.ols import fit_ols

#: A regressor whose first-order autocorrelation exceeds this is treated as persistent
#: (a rule of thumb, stated wherever it is used).
PERSISTENCE_THRESHOLD = 0.9
#: The persistence report needs this many rows at least: the augmented regression has three
#: coefficients on the T - 1 pairs of consecutive rows, and keeps two degrees of freedom.
MIN_PERSISTENCE_ROWS = 6
#: IVX tuning constants (Kostakis, Magdalinos & Stamatogiannis 2015): R_nz = 1 + c_z / n^beta.
IVX_CZ = -1.0
IVX_BETA = 0.95


# --------------------------------------------------------------------------- IVX

@dataclass
class IVXResult:
    statistic: float                  # Wald statistic, chi-square(df) under no predictability
    p_value: float
    df: int
    coefficients: np.ndarray          # the IVX slope estimates
    horizon: int
    nobs: int
    tuning: dict                      # c_z, beta, lags of the long-run covariances

    def text(self) -> str:
        h = "" if self.horizon == 1 else f", {self.horizon}-period horizon"
        p = "<0.001" if self.p_value < 0.001 else f"{self.p_value:.3f}"
        return (f"IVX Wald = {self.statistic:.3f}, p = {p} (chi-square({self.df}){h}; c_z = "
                f"{self.tuning['c_z']:g}, beta = {self.tuning['beta']:g}, "
                f"{self.tuning['lags']} lags in the long-run covariances)")


def ivx_test(returns, predictors, horizon: int = 1, c_z: float = IVX_CZ,
             beta: float = IVX_BETA, lags: int | None = None) -> IVXResult:
    """IVX Wald test of no predictability (Kostakis, Magdalinos & Stamatogiannis 2015, RFS 28(5)).

    returns: the one-period series y_1..y_n predicted by the predictors of the previous period;
    here aligned as rows: returns[t] is realised after predictors[t] (so the pairs are
    (returns[t], predictors[t])). predictors: T x r. horizon K: the long-horizon version, in which
    K-period sums of the returns are regressed on K-period forward sums of the predictors, with
    instruments summed the same way. lags: Bartlett lags for the long-run covariances of the
    residuals and the predictors' innovations (default floor(n^(1/3)), common practice)."""
    y1 = np.asarray(returns, dtype=float)
    x = np.atleast_2d(np.asarray(predictors, dtype=float).T).T
    if x.shape[0] != y1.shape[0]:
        raise SpecificationError("returns and predictors must have the same number of rows")
    ok = np.isfinite(y1) & np.isfinite(x).all(axis=1)
    if not ok.all():
        first, last = np.flatnonzero(ok)[[0, -1]]
        if not ok[first:last + 1].all():
            raise SpecificationError("IVX needs consecutive rows: missing values inside the "
                                     "sample")
        y1, x = y1[first:last + 1], x[first:last + 1]
    k = int(horizon)
    if k < 1:
        raise SpecificationError("the IVX horizon must be a whole number >= 1")
    # KMS indexing: y[s] for s = 1..n is predicted by X[s-1]; X has n + 1 rows
    X = x                                                             # rows 0..T-1
    y = np.r_[np.nan, y1[:-1]]                                        # y[s] = returns[s-1]
    T = X.shape[0]
    n = T - 1
    r = X.shape[1]
    if n < 10 + k:
        raise SpecificationError(f"IVX needs more observations (n = {n})")
    # OLS of y_s on (1, X_{s-1}); AR(1) of each predictor with an intercept
    Z = np.column_stack([np.ones(n), X[:-1]])
    coef, *_ = np.linalg.lstsq(Z, y[1:], rcond=None)
    eps = y[1:] - Z @ coef
    u = np.empty((n, r))
    for j in range(r):
        zj = np.column_stack([np.ones(n), X[:-1, j]])
        cj, *_ = np.linalg.lstsq(zj, X[1:, j], rcond=None)
        u[:, j] = X[1:, j] - zj @ cj
    m_lags = int(np.floor(n ** (1.0 / 3.0))) if lags is None else int(lags)
    s_ee = float(eps @ eps) / n
    s_eu = eps @ u / n
    s_uu = u.T @ u / n
    o_uu, o_eu = s_uu.copy(), s_eu.copy()
    for h in range(1, m_lags + 1):
        w = 1.0 - h / (m_lags + 1.0)
        l_uu = u[h:].T @ u[:-h] / n
        l_ue = u[h:].T @ eps[:-h] / n
        o_uu += w * (l_uu + l_uu.T)
        o_eu += w * l_ue
    # the mildly integrated instrument z_t = R_nz z_{t-1} + dX_t
    rnz = 1.0 + c_z / n ** beta
    dx = np.vstack([np.zeros((1, r)), np.diff(X, axis=0)])
    z = signal.lfilter([1.0], [1.0, -rnz], dx, axis=0)   # z_0 = dx_0 = 0: the same recursion
    # K-period forward sums
    length = T - (k - 1)
    csum = lambda a: np.cumsum(np.vstack([np.zeros((1,) + a.shape[1:]), a]), axis=0)  # noqa
    yy = np.r_[0.0, y[1:]]
    y_k = (csum(yy[:, None])[k:k + length] - csum(yy[:, None])[:length])[:, 0]
    x_k = csum(X)[k:k + length] - csum(X)[:length]
    z_k = csum(z)[k:k + length] - csum(z)[:length]
    n_k = length - 1
    y_dm = y_k[1:] - y_k[1:].mean()
    x_dm = x_k[:-1] - x_k[:-1].mean(axis=0)
    z_use = z[: T - k]
    z_bar = z_k[: length - k].mean(axis=0)
    zk_use = z_k[:-1]
    xz = x_dm.T @ z_use
    a_ivx = np.linalg.solve(xz, z_use.T @ y_dm)
    o_fm = s_ee - float(o_eu @ np.linalg.solve(o_uu, o_eu))
    m = zk_use.T @ zk_use * s_ee - n_k * np.outer(z_bar, z_bar) * o_fm
    inv_zx = np.linalg.inv(z_use.T @ x_dm)
    q = inv_zx @ m @ np.linalg.inv(xz)
    w_stat = float(a_ivx @ np.linalg.solve(q, a_ivx))
    if not np.isfinite(w_stat) or w_stat < 0:
        raise EstimationError("the IVX statistic is not defined for these data (its variance "
                              "is not positive definite)")
    return IVXResult(statistic=w_stat, p_value=chi_square_upper(w_stat, r), df=r,
                     coefficients=a_ivx, horizon=k, nobs=n,
                     tuning={"c_z": c_z, "beta": beta, "lags": m_lags})


# --------------------------------------------------------------------------- persistence

@dataclass
class PersistenceReport:
    predictor: str
    rho: float                        # least-squares AR(1) coefficient of the predictor
    rho_se: float
    rho_bias_adjusted: float          # rho + (1 + 3 rho)/n (Kendall 1954)
    rho_interval: tuple               # bias-adjusted rho +- z se (normal approximation)
    corr_uv: float                    # correlation of the response's error and v_{t+1}
    slope: float                      # least-squares slope of the one-period regression
    bias: float                       # Stambaugh (1999): -(s_uv/s_vv)(1 + 3 rho)/n
    reduced_bias_slope: float         # Amihud & Hurvich (2004) augmented regression
    reduced_bias_se: float
    ivx: IVXResult | None
    ivx_long: IVXResult | None        # the long-horizon version at the fit's horizon
    horizon: int
    nobs: int
    reading: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def persistent(self) -> bool:
        return self.rho > PERSISTENCE_THRESHOLD


def _ols(y, X):
    dof = len(y) - X.shape[1]
    if dof < 1:
        raise EstimationError(f"{len(y)} rows are too few for a regression with "
                              f"{X.shape[1]} coefficients")
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    s2 = float(resid @ resid) / dof
    try:
        cov = s2 * np.linalg.inv(X.T @ X)
    except np.linalg.LinAlgError:
        raise EstimationError("the regression's regressors are collinear (a constant "
                              "predictor?)") from None
    if not np.isfinite(cov).all():
        raise EstimationError("the regression's regressors are collinear (a constant "
                              "predictor?)")
    return coef, resid, cov


def one_period_series(fit) -> tuple[np.ndarray, str]:
    """The one-period response over the fit's rows: the response itself for a one-period fit,
    else the one-period series behind an overlapping response (or a typed error)."""
    h = fit.horizon or 1
    if h == 1:
        return np.asarray(fit.y, dtype=float), fit.response
    source = fit.one_period if fit.capabilities.one_period else None
    if source is None:
        raise SpecificationError(
            f"the response overlaps over {h} periods and its one-period series is not known: "
            "build the response with the sum-next transform, or name it with "
            "fit_ols(..., horizon=h, one_period='column')")
    # row t's one-period response is the next period's value
    nxt = source.shift(-1).reindex(fit.index).to_numpy(dtype=float)
    return nxt, str(source.name)


@single_blas_thread
def persistence_report(fit, predictor: str | None = None, level: float = 0.95) -> PersistenceReport:
    """Persistence of a predictor and what it does to the slope (see the module docstring).

    predictor: a regressor of the fit (default: the most persistent one). The bias and the
    reduced-bias slope refer to the one-period regression (the response itself when it is a
    one-period response, else its one-period series); IVX is given for one period and, for an
    overlapping response, at the fit's horizon."""
    terms = [t for t in fit.terms if t != INTERCEPT]
    if not terms:
        raise SpecificationError("the model has no predictor")
    if fit.nobs < MIN_PERSISTENCE_ROWS:
        raise SpecificationError(
            f"the persistence report needs at least {MIN_PERSISTENCE_ROWS} rows (the "
            "predictor's AR(1) and the augmented regression with three coefficients on the "
            f"pairs of consecutive rows need degrees of freedom left); this fit has {fit.nobs}")
    j_of = {t: fit.terms.index(t) for t in terms}
    if predictor is None:
        rhos = {t: _ar1(fit.X[:, j_of[t]])[0] for t in terms}
        predictor = max(rhos, key=lambda t: rhos[t])
    if predictor not in j_of:
        raise SpecificationError(f"no regressor named {predictor!r}; regressors are "
                                 + ", ".join(terms))
    x = np.asarray(fit.X[:, j_of[predictor]], dtype=float)
    n_x = len(x)
    rho, rho_se, mu = _ar1(x)
    n = n_x - 1
    z = normal_critical(level)
    rho_adj = rho + (1.0 + 3.0 * rho) / n
    interval = (rho_adj - z * rho_se, rho_adj + z * rho_se)
    h = fit.horizon or 1
    notes = []
    y1, one_name = one_period_series(fit)
    # pairs (u_t, v_{t+1}): rows 0..n-1
    keep = np.isfinite(y1[:-1])
    X = np.column_stack([np.ones(n_x), x])
    yy, xx = y1[:-1][keep], X[:-1][keep]
    v = (x[1:] - mu - rho * x[:-1])[keep]
    coef, u, cov = _ols(yy, xx)
    s_uv = float(u @ v) / len(u)
    s_vv = float(v @ v) / len(v)
    corr = s_uv / np.sqrt(float(u @ u) / len(u) * s_vv)
    bias = -(s_uv / s_vv) * (1.0 + 3.0 * rho) / n
    # Amihud & Hurvich (2004): second-order bias-corrected rho, corrected innovations, augmented
    rho_c = rho + (1.0 + 3.0 * rho) / n + 3.0 * (1.0 + 3.0 * rho) / n**2
    mean0, mean1 = x[:-1].mean(), x[1:].mean()
    v_c = (x[1:] - (mean1 - rho_c * mean0) - rho_c * x[:-1])[keep]
    coef_a, _, cov_a = _ols(yy, np.column_stack([xx, v_c]))
    phi = coef_a[2]
    var_rho_c = (1.0 + 3.0 / n + 9.0 / n**2) ** 2 * rho_se**2
    rb_se = float(np.sqrt(cov_a[1, 1] + phi**2 * var_rho_c))
    try:
        ivx1 = ivx_test(y1, x, horizon=1)
    except (SpecificationError, EstimationError, np.linalg.LinAlgError) as exc:
        ivx1 = None
        notes.append(f"IVX not available: {exc}")
    ivx_h = None
    if h > 1:
        try:
            ivx_h = ivx_test(y1, x, horizon=h)
        except (SpecificationError, EstimationError, np.linalg.LinAlgError) as exc:
            notes.append(f"long-horizon IVX not available: {exc}")
    if len([t for t in terms]) > 1:
        notes.append("the bias formula and the augmented regression are for a single "
                     "predictor; here they use this predictor alone with the one-period "
                     "response")
    if h > 1:
        notes.append(f"the bias and the reduced-bias slope refer to the one-period regression "
                     f"of '{one_name}' on '{predictor}'; the {h}-period slope inherits a bias "
                     "of the same sign, roughly h times larger")
    report = PersistenceReport(
        predictor=predictor, rho=rho, rho_se=rho_se, rho_bias_adjusted=rho_adj,
        rho_interval=interval, corr_uv=corr, slope=float(coef[1]), bias=bias,
        reduced_bias_slope=float(coef_a[1]), reduced_bias_se=rb_se, ivx=ivx1, ivx_long=ivx_h,
        horizon=h, nobs=len(yy), notes=notes)
    report.reading = _reading(report, level)
    return report


def _ar1(x: np.ndarray):
    """Least-squares AR(1) with an intercept: (rho, its classical standard error, intercept)."""
    X = np.column_stack([np.ones(len(x) - 1), x[:-1]])
    coef, _, cov = _ols(x[1:], X)
    return float(coef[1]), float(np.sqrt(cov[1, 1])), float(coef[0])


def _reading(r: PersistenceReport, level: float) -> list[str]:
    out = []
    lo, hi = r.rho_interval
    pct = f"{level:.0%}"
    words = ("highly persistent" if r.rho > PERSISTENCE_THRESHOLD else
             "moderately persistent" if r.rho > 0.5 else "not very persistent")
    out.append(f"'{r.predictor}' is {words}: AR(1) coefficient {r.rho:.3f} (bias-adjusted "
               f"{r.rho_bias_adjusted:.3f}, {pct} interval {lo:.3f} to {hi:.3f}, a normal "
               "approximation that understates the uncertainty near 1).")
    if r.rho > PERSISTENCE_THRESHOLD:
        out.append(f"Its innovations correlate {r.corr_uv:.2f} with the response's errors, so "
                   f"the least-squares slope {r.slope:.4g} is biased by about {r.bias:.3g} in a "
                   f"sample this size (Stambaugh 1999) and its t test is not reliable whatever "
                   f"the kernel; the reduced-bias slope (Amihud & Hurvich 2004) is "
                   f"{r.reduced_bias_slope:.4g} with standard error {r.reduced_bias_se:.3g}.")
    for test in (r.ivx, r.ivx_long):
        if test is None:
            continue
        verdict = "rejects" if test.p_value < 1 - level else "does not reject"
        out.append(f"IVX {verdict} no predictability at {1 - level:.0%} "
                   + (f"at the {test.horizon}-period horizon " if test.horizon > 1 else "")
                   + f"(Wald {test.statistic:.2f}, p {test.p_value:.3f}); it is valid whether "
                   "the predictor is stationary, near a unit root or integrated "
                   "(Kostakis, Magdalinos & Stamatogiannis 2015).")
    return out


# --------------------------------------------------------------------------- horizons

@dataclass
class HorizonSweep:
    frame: pd.DataFrame               # h, estimator, term, estimate, std_error, t_stat, ...
    horizons: list
    estimators: list
    notes: list = field(default_factory=list)

    def term(self, name: str) -> pd.DataFrame:
        return self.frame[self.frame.term == name]


def default_horizon_estimators():
    return [("Bartlett, L = h", lambda h: estimator("kernel", kernel="bartlett", lags=h)),
            ("Hodrick (1992)", lambda h: estimator("hodrick")),
            ("EWC", lambda h: estimator("ewc"))]


@single_blas_thread
def horizon_sweep(data, response: str, predictors, horizons=range(1, 37), estimators=None,
                  intercept: bool = True, sample=None, level: float = 0.95,
                  progress=None) -> HorizonSweep:
    """The predictive regression at every horizon h: the sum of the next h values of the
    one-period `response` on `predictors`, with each estimator (default: Bartlett with L = h,
    Hodrick 1992, EWC). estimators: a list of (label, function h -> Estimator) or of
    Estimators. Forward sums for every h come from one cumulative sum."""
    table = as_table(data)
    regs = as_list(predictors)
    hs = sorted({int(h) for h in horizons})
    if not hs or hs[0] < 1:
        raise SpecificationError("horizons must be whole numbers >= 1")
    if response not in table.frame.columns:
        raise SpecificationError(f"no column named {response!r}")
    ests = estimators if estimators is not None else default_horizon_estimators()
    ests = [(e.label, (lambda h, e=e: e)) if not isinstance(e, tuple) else e for e in ests]
    r = table.frame[response].astype(float)
    csum = np.r_[0.0, np.nancumsum(r.to_numpy())]
    n = len(r)
    rows = []
    notes = []
    for step, h in enumerate(hs, start=1):
        if progress:
            progress(step - 1, len(hs))
        if 2 * h > n - h:
            notes.append(f"h = {h} leaves too few observations in {n} rows (an h-period "
                         "response needs T >= 2h); stopped")
            break
        ahead = np.full(n, np.nan)
        ahead[: n - h] = csum[1 + h: n + 1] - csum[1: n - h + 1]
        valid = r.rolling(h).count().shift(-h).to_numpy() == h
        ahead[~valid] = np.nan
        name = f"__{response}, sum of next {h}"
        frame = table.frame[regs].copy()
        frame[name] = ahead
        sub = table.__class__(frame=frame, report=table.report, horizons={name: h})
        fit = fit_ols(sub, name, regs, intercept=intercept, sample=sample, horizon=h)
        fit.one_period = r
        for label, make in ests:
            est = make(h)
            try:
                res = fit.infer(est, level=level)
            except (SpecificationError, EstimationError) as exc:
                for term in fit.terms:
                    rows.append({"h": h, "estimator": label, "term": term,
                                 "estimate": fit.params[term], "std_error": np.nan,
                                 "t_stat": np.nan, "p_value": np.nan, "ci_low": np.nan,
                                 "ci_high": np.nan, "note": str(exc)})
                continue
            for term, row in res.table.iterrows():
                rows.append({"h": h, "estimator": label, "term": term, **row.to_dict(),
                             "note": ""})
    if progress:
        progress(len(hs), len(hs))
    frame = pd.DataFrame(rows)
    return HorizonSweep(frame=frame, horizons=hs, estimators=[lab for lab, _ in ests],
                        notes=notes)
