"""Residual diagnostics: the evidence for or against White, HAC and a larger bandwidth.

statsmodels computes most statistics (the method of each is stated in words); Lagwise adds the exact
Durbin-Watson p-value, White's test without cross terms with the levels kept, the moment
contributions' autocorrelation and a plain-language reading. `diagnose(fit)` returns a
`DiagnosticReport`; nothing here refits the regression for the covariance estimators.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import integrate, linalg as sla

from ..blas import single_blas_thread
from ..covariance.bandwidth import select_bandwidth
from ..covariance.cache import MomentCache
from ..errors import EstimationError
from ..laws.reference import chi_square_upper, f_upper

#: Largest T for the exact Durbin-Watson p-value (eigenvalues of a (T-k) x (T-k) matrix).
DW_EXACT_MAX_T = 1500
#: Fewest observations for which the diagnostics are computed at all.
MIN_T = 10
_NUMERIC_FAILURES = (ValueError, np.linalg.LinAlgError, ZeroDivisionError, FloatingPointError,
                     IndexError, EstimationError)


class Section:
    """Run one group of statistics; if the numbers cannot be computed for this fit (degenerate
    data), say so in the notes instead of failing the whole report."""

    def __init__(self, name: str, notes: list):
        self.name, self.notes = name, notes

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None and issubclass(exc_type, _NUMERIC_FAILURES):
            self.notes.append(f"{self.name}: not available for this fit ({exc})")
            return True
        return False


@dataclass
class DiagnosticReport:
    tests: pd.DataFrame                  # one row per test
    acf: pd.DataFrame                    # lag x {resid, resid_sq} autocorrelations
    pacf: pd.DataFrame
    bands: dict                          # how the ACF/PACF bands are computed, and their values
    score_acf: pd.DataFrame              # lag x term autocorrelation of x_t e_t
    persistence: pd.DataFrame            # per term: first-order autocorrelation, Andrews b
    reading: list[str]
    notes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        out = []
        for _, r in self.tests.iterrows():
            df = "" if pd.isna(r.df) else f", df {r.df:g}"
            if not pd.isna(r.df2):
                df = f", df ({r.df:g}, {r.df2:g})"
            p = "n/a" if pd.isna(r.p_value) else (
                "<0.001" if r.p_value < 0.001 else f"{r.p_value:.3f}")
            p = p if p.startswith("<") else f"= {p}"
            out.append(f"  {r.test:<34} {r.statistic:>10.4g}{df:<16} p {p:<8} H0: {r.null}")
        out.append("")
        out += [f"  reading: {s}" for s in self.reading]
        out += [f"  note: {n}" for n in self.notes]
        return out


def _check(fit):
    e = fit.resid
    scale = np.abs(fit.y).max() or 1.0
    if np.abs(e).max() <= 1e-12 * scale:
        raise EstimationError("the regression fits perfectly (all residuals are zero): there is "
                              "nothing to diagnose")


def default_lags(nobs: int) -> list[int]:
    top = max(1, min(24, nobs // 5))
    return sorted({x for x in (1, 2, 4, 6, 12, 24) if x <= top} | {top})


def breusch_godfrey(e: np.ndarray, x: np.ndarray, p: int):
    """Breusch-Godfrey test of autocorrelation of order 1..p: regress e on X and e_{t-1..t-p}
    (pre-sample residuals set to zero); LM = T R^2 ~ chi-square(p), and the F test of the p lag
    coefficients with (p, T - k - p) degrees of freedom. Least squares by QR (no T x T work)."""
    t_obs, k = x.shape
    lags = np.zeros((t_obs, p))
    for j in range(1, p + 1):
        lags[j:, j - 1] = e[:-j]
    z = np.column_stack([x, lags])
    coef, *_ = sla.lstsq(z, e, lapack_driver="gelsy", check_finite=False)
    resid = e - z @ coef
    constant = any(np.all(x[:, j] == x[0, j]) for j in range(k))
    tss = float(((e - e.mean()) ** 2).sum()) if constant else float(e @ e)   # R^2 as statsmodels
    rss = float(resid @ resid)
    lm = t_obs * (1.0 - rss / tss)
    df2 = t_obs - k - p
    f = ((float(e @ e) - rss) / p) / (rss / df2)       # e is orthogonal to X: restricted RSS = e'e
    return lm, chi_square_upper(lm, p), f, f_upper(f, p, df2)


def portmanteau(e: np.ndarray, lags) -> pd.DataFrame:
    """Ljung-Box and Box-Pierce statistics for each h in `lags`, from autocorrelations of the
    demeaned series with divisor T computed by FFT (O(T log T): long series take a fraction of a
    second). Q_LB(h) = T(T+2) sum_{j<=h} r_j^2/(T-j), Q_BP(h) = T sum_{j<=h} r_j^2, chi-square(h)."""
    x = np.asarray(e, dtype=float)
    x = x - x.mean()
    t_obs = len(x)
    top = int(max(lags))
    cache = MomentCache(x[:, None], diagonal_only=True)
    gam = cache.packed(top)[:, 0] * np.r_[1.0, np.full(top, 0.5)]   # C_j = 2 gamma_j for j >= 1
    r = gam[1:] / gam[0] if gam[0] > 0 else np.full(top, np.nan)
    j = np.arange(1, top + 1)
    lb = t_obs * (t_obs + 2) * np.cumsum(r**2 / (t_obs - j))
    bp = t_obs * np.cumsum(r**2)
    h = np.asarray(sorted(int(v) for v in lags))
    return pd.DataFrame({"lb_stat": lb[h - 1], "lb_pvalue": chi_square_upper(lb[h - 1], h),
                         "bp_stat": bp[h - 1], "bp_pvalue": chi_square_upper(bp[h - 1], h)},
                        index=pd.Index(h, name="lag"))


def durbin_watson_exact(fit, d: float) -> float:
    """P(d <= d_obs) under i.i.d. normal errors: d = e'Ae/e'e with A the first-difference matrix,
    so P(d <= c) = P(sum (lambda_i - c) z_i^2 <= 0) with lambda_i the T-k eigenvalues of
    Z'AZ (Z an orthonormal basis of the residual space), by Imhof's (1961) inversion."""
    t_obs, k = fit.X.shape
    q_full, _ = sla.qr(fit.X, mode="full")
    z = q_full[:, k:]
    dz = np.diff(z, axis=0)                       # A = D'D with D the T-1 x T difference matrix
    lam = sla.eigvalsh(dz.T @ dz)
    mu = lam - d
    return _imhof_below_zero(mu)


def _imhof_below_zero(mu: np.ndarray) -> float:
    """P(sum mu_i z_i^2 < 0), z_i iid N(0, 1) (Imhof 1961)."""
    mu = mu[np.abs(mu) > 1e-14]

    def integrand(u):
        theta = 0.5 * np.sum(np.arctan(mu * u))
        with np.errstate(over="ignore"):
            rho = np.exp(0.25 * np.sum(np.log1p((mu * u) ** 2)))
        return np.sin(theta) / (u * rho)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", integrate.IntegrationWarning)
        val, _ = integrate.quad(integrand, 0, np.inf, limit=500)
    return float(np.clip(0.5 - val / np.pi, 0.0, 1.0))


def _white_no_cross(resid, X):
    """White's test without cross products, levels kept: e^2 on 1, x_j, x_j^2 (unique columns).
    (statsmodels' het_white(interaction_terms=False) uses the squares only.)"""
    cols = [X]
    cols.append(X[:, np.ptp(X, axis=0) > 0] ** 2)
    z = np.hstack(cols)
    z = np.unique(np.round(z, 12), axis=1) if z.shape[0] < 2 else z
    _, r, piv = sla.qr(z, mode="economic", pivoting=True)
    rank = int(np.sum(np.abs(np.diag(r)) > 1e-10 * abs(r[0, 0])))
    z = z[:, np.sort(piv[:rank])]
    if not np.any(np.all(z == z[0], axis=0)):
        z = np.column_stack([np.ones(len(z)), z])
    e2 = resid**2
    coef, *_ = np.linalg.lstsq(z, e2, rcond=None)
    fitted = z @ coef
    r2 = 1 - np.sum((e2 - fitted) ** 2) / np.sum((e2 - e2.mean()) ** 2)
    lm = len(e2) * r2
    df = z.shape[1] - 1
    return lm, df, chi_square_upper(lm, df)


@single_blas_thread
def diagnose(fit, lags=None, arch_lags=None, exact_dw: bool = True,
             progress=None) -> DiagnosticReport:
    """Residual and moment diagnostics for a least-squares fit (see module docstring). Every
    statistic is finite or left out with a note saying why; no library warning or exception
    escapes. progress(done, total, what) is called before each of four stages and at the end."""
    step = progress or (lambda done, total, what: None)
    _check(fit)
    t_obs = fit.nobs
    if t_obs < MIN_T:
        raise EstimationError(f"residual diagnostics need at least {MIN_T} observations "
                              f"(T = {t_obs})")
    notes: list[str] = []
    lag_list = default_lags(t_obs) if lags is None else sorted({int(x) for x in np.atleast_1d(lags)})
    cap = max(1, t_obs // 5)
    if lag_list[-1] > cap:
        notes.append(f"lags capped at T/5 = {cap} (T = {t_obs})")
        lag_list = sorted({min(x, cap) for x in lag_list})
    rows: list[dict] = []
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        step(0, 4, "autocorrelation tests")
        _autocorrelation_tests(fit, lag_list, exact_dw, rows, notes)
        step(1, 4, "heteroskedasticity tests")
        _heteroskedasticity_tests(fit, lag_list[-1], arch_lags, rows, notes)
        tests = finite_rows(rows, notes)
        step(2, 4, "autocorrelation functions")
        acf_df, pacf_df, bands, score_acf = _correlograms(fit, lag_list[-1], notes)
    step(3, 4, "bandwidth and reading")
    andrews = select_bandwidth(fit, "bartlett", "andrews")
    persistence = pd.DataFrame({"rho1": score_acf.iloc[0]})
    reading = _reading(tests, acf_df, persistence, andrews, fit)
    step(4, 4, "")
    return DiagnosticReport(tests=tests, acf=acf_df, pacf=pacf_df, bands=bands,
                            score_acf=score_acf, persistence=persistence.assign(
                                andrews_bartlett_b=andrews.b), reading=reading, notes=notes)


def add_row(rows, name, stat, df, p, null, method, df2=np.nan):
    rows.append({"test": name, "statistic": float(stat), "df": df, "df2": df2,
                 "p_value": float(p), "null": null, "method": method})


def finite_rows(rows, notes) -> pd.DataFrame:
    """Rows whose statistic or p-value is not finite are left out, each with a note (the
    Durbin-Watson p-value may be absent by design, said in its method)."""
    kept = []
    for r in rows:
        p_ok = np.isfinite(r["p_value"]) or r["test"] == "Durbin-Watson"
        if np.isfinite(r["statistic"]) and p_ok and (not np.isfinite(r["p_value"])
                                                     or 0 <= r["p_value"] <= 1):
            kept.append(r)
        else:
            notes.append(f"{r['test']}: not available for this fit (the statistic is not a "
                         "finite number: the residuals are degenerate)")
    return pd.DataFrame(kept, columns=["test", "statistic", "df", "df2", "p_value", "null",
                                       "method"])


def _autocorrelation_tests(fit, lag_list, exact_dw, rows, notes) -> None:
    from statsmodels.stats.stattools import durbin_watson
    e, t_obs, top = fit.resid, fit.nobs, lag_list[-1]
    with Section("Ljung-Box / Box-Pierce", notes):
        lb = portmanteau(e, lag_list)
        for h, r in lb.iterrows():
            add_row(rows, f"Ljung-Box Q({h})", r.lb_stat, h, r.lb_pvalue,
                 f"no residual autocorrelation up to lag {h}",
                 "T(T+2) sum of squared autocorrelations / (T-j), chi-square(h) "
                 "(Ljung & Box 1978)")
        for h, r in lb.iterrows():
            add_row(rows, f"Box-Pierce Q({h})", r.bp_stat, h, r.bp_pvalue,
                 f"no residual autocorrelation up to lag {h}",
                 "T times the sum of squared autocorrelations, chi-square(h) (Box & Pierce 1970)")
    for p in sorted({1, min(4, top), top}):
        with Section(f"Breusch-Godfrey({p})", notes):
            lm, lmp, f, fp = breusch_godfrey(e, fit.X, p)
            add_row(rows, f"Breusch-Godfrey LM({p})", lm, p, lmp,
                 f"no autocorrelation of order 1..{p}",
                 "T R^2 of e on X and p lagged residuals (pre-sample residuals set to 0), "
                 "chi-square(p)")
            add_row(rows, f"Breusch-Godfrey F({p})", f, p, fp, f"no autocorrelation of order 1..{p}",
                 "F test of the p lagged residuals in the same regression",
                 df2=float(t_obs - fit.k - p))
    with Section("Durbin-Watson", notes):
        dw = float(durbin_watson(e))
        if exact_dw and t_obs <= DW_EXACT_MAX_T:
            add_row(rows, "Durbin-Watson", dw, np.nan, durbin_watson_exact(fit, dw),
                 "no first-order autocorrelation",
                 "exact P(d <= observed) under normal errors, Imhof inversion; needs strictly "
                 "exogenous regressors (no lagged responses or predictors that respond to past "
                 "errors)")
        else:
            add_row(rows, "Durbin-Watson", dw, np.nan, np.nan, "no first-order autocorrelation",
                 f"statistic only: exact p-value computed for T <= {DW_EXACT_MAX_T}"
                 if exact_dw else "statistic only (exact p-value not requested)")


def _heteroskedasticity_tests(fit, top, arch_lags, rows, notes) -> None:
    from statsmodels.stats import diagnostic as smd
    e, t_obs = fit.resid, fit.nobs
    z_het = fit.X if fit.has_intercept else np.column_stack([np.ones(t_obs), fit.X])
    if z_het.shape[1] > 1:
        with Section("Breusch-Pagan", notes):
            lm, lmp, _, _ = smd.het_breuschpagan(e, z_het, robust=True)
            add_row(rows, "Breusch-Pagan (Koenker)", lm, z_het.shape[1] - 1, lmp,
                 "error variance unrelated to the regressors",
                 "studentised: T R^2 of e^2 on the regressors (Koenker 1981)")
            lm, lmp, _, _ = smd.het_breuschpagan(e, z_het, robust=False)
            add_row(rows, "Breusch-Pagan (original)", lm, z_het.shape[1] - 1, lmp,
                 "error variance unrelated to the regressors",
                 "half the explained sum of squares of e^2/mean(e^2) on the regressors "
                 "(Breusch & Pagan 1979); assumes normal errors")
        with Section("White (with cross terms)", notes):
            try:
                lm, lmp, _, _ = smd.het_white(e, z_het)
                add_row(rows, "White (with cross terms)", lm, _white_df(z_het), lmp,
                     "homoskedastic errors",
                     "T R^2 of e^2 on levels, squares and cross products (White 1980)")
            except AssertionError:
                notes.append("White's test with cross terms is not available for this design")
        with Section("White (no cross terms)", notes):
            lm, df, p = _white_no_cross(e, z_het)
            add_row(rows, "White (no cross terms)", lm, df, p, "homoskedastic errors",
                 "T R^2 of e^2 on levels and squares, no cross products")
    for q in sorted({1, min(4, top)} if arch_lags is None else set(np.atleast_1d(arch_lags))):
        with Section(f"ARCH-LM({q})", notes):
            lm, p, _, _ = smd.het_arch(e, nlags=int(q), result_object=False)
            add_row(rows, f"ARCH-LM({q})", lm, q, p,
                 "no autoregressive conditional heteroskedasticity",
                 "(T-q) R^2 of e^2 on its own q lags, chi-square(q) (Engle 1982)")


def _correlograms(fit, top, notes):
    from statsmodels.tsa.stattools import acf, pacf
    e, t_obs = fit.resid, fit.nobs
    nl = min(max(top, 12), t_obs - 1)
    lag_index = pd.RangeIndex(1, nl + 1, name="lag")
    acf_df = pd.DataFrame(np.nan, index=lag_index,
                          columns=["resid", "resid_sq", "resid_band", "resid_sq_band"])
    nlp = min(nl, t_obs // 2 - 1)
    pacf_df = pd.DataFrame(np.nan, index=pd.RangeIndex(1, nlp + 1, name="lag"),
                           columns=["resid", "resid_sq"])
    with Section("ACF/PACF", notes):
        acf_e, conf_e = acf(e, nlags=nl, alpha=0.05, fft=True, result_object=False)
        acf_e2, conf_e2 = acf(e**2, nlags=nl, alpha=0.05, fft=True, result_object=False)
        acf_df = pd.DataFrame({"resid": acf_e[1:], "resid_sq": acf_e2[1:],
                               "resid_band": conf_e[1:, 1] - acf_e[1:],
                               "resid_sq_band": conf_e2[1:, 1] - acf_e2[1:]}, index=lag_index)
        pacf_df = pd.DataFrame({"resid": pacf(e, nlags=nlp)[1:],
                                "resid_sq": pacf(e**2, nlags=nlp)[1:]},
                               index=pd.RangeIndex(1, nlp + 1, name="lag"))
    bands = {"acf": "95% band by Bartlett's formula (widens with the lag)",
             "pacf": f"95% band +-1.96/sqrt(T) = {1.96 / np.sqrt(t_obs):.3f}",
             "pacf_value": 1.96 / np.sqrt(t_obs)}
    u = fit.contributions
    score_acf = pd.DataFrame(
        {t: acf(u[:, i], nlags=nl, fft=True, result_object=False)[1:]
         if np.ptp(u[:, i]) > 0 else np.full(nl, np.nan)
         for i, t in enumerate(fit.moment_names)}, index=lag_index)
    return acf_df, pacf_df, bands, score_acf


def _white_df(z):
    k = z.shape[1]
    prods = np.column_stack([z[:, i] * z[:, j] for i in range(k) for j in range(i, k)])
    return int(np.linalg.matrix_rank(prods)) - 1


def _reading(tests, acf_df, persistence, andrews, fit) -> list[str]:
    """The tests in plain words, phrased as evidence. Under an overlapping response the errors
    are MA(h-1) by construction, which the heteroskedasticity tests (built for uncorrelated
    errors) do not allow for: their readings are qualified."""
    out = []
    overlapping = bool(fit.horizon and fit.horizon > 1)
    lb = tests[tests.test.str.startswith("Ljung-Box")]
    sig = lb[lb.p_value < 0.05]
    band = acf_df.resid_band.to_numpy()
    outside = [int(l) for l, v, b in zip(acf_df.index, acf_df.resid, band) if abs(v) > b]
    if len(sig):
        out.append(f"Residual autocorrelation is significant at 5% (Ljung-Box rejects for "
                   f"lags up to {', '.join(str(int(x)) for x in sig.df)}; smallest p "
                   f"{_p_words(lb.p_value.min())})"
                   + (f"; sample autocorrelations outside the band at lags "
                      f"{_ranges(outside)}" if outside else "") + ".")
        out.append(f"That is evidence against classical and HC standard errors, which assume "
                   f"uncorrelated errors. For reference, the Andrews (1991) AR(1) plug-in for "
                   f"the Bartlett kernel gives b = {andrews.b:.1f} "
                   f"({max(int(np.ceil(andrews.b)) - 1, 0)} lags); it aims at the mean squared "
                   "error of the variance estimate, not at the size of the test.")
    elif len(lb):
        out.append("No significant residual autocorrelation at 5% (Ljung-Box): little evidence "
                   "of autocorrelation in the residuals themselves.")
    slopes = persistence.drop(index="intercept", errors="ignore").dropna()
    if len(slopes):
        worst = slopes.rho1.abs().idxmax()
        out.append(f"The moment contribution x_t e_t of '{worst}' has first-order "
                   f"autocorrelation {slopes.rho1[worst]:.2f}; that is what HAC corrects for.")
    if overlapping:
        out.append(f"The response overlaps over {fit.horizon} periods, so MA({fit.horizon - 1}) "
                   "errors are expected by construction whatever the tests say.")
    het = tests[tests.test.str.startswith(("Breusch-Pagan", "White"))]
    arch = tests[tests.test.str.startswith("ARCH")]
    caveat = (" These tests assume serially uncorrelated errors, which an overlapping response "
              "rules out, so read them with caution." if overlapping else "")
    if len(het):
        if (het.p_value < 0.05).any():
            out.append("Heteroskedasticity tests reject at 5% (" + ", ".join(
                het[het.p_value < 0.05].test) + "): evidence that the error variance moves with "
                "the regressors, which classical standard errors do not allow for." + caveat)
        else:
            out.append("Heteroskedasticity tests do not reject at 5%." + caveat)
    if (arch.p_value < 0.05).any():
        out.append("ARCH-LM rejects at 5%: evidence that squared residuals are autocorrelated "
                   "(variance that changes over time)." + caveat)
    persistent = [t for t, r in _regressor_persistence(fit).items() if r > 0.9]
    if persistent or any(", lag" in t or t.startswith("lag") for t in fit.terms):
        out.append("The exact Durbin-Watson p-value assumes strictly exogenous regressors; with "
                   "lagged or persistent predictors ("
                   + ", ".join(persistent or [t for t in fit.terms if "lag" in t])
                   + ") it may not be valid; Breusch-Godfrey does not need that assumption.")
    out.append("These are tests of evidence, not verdicts: a non-rejection does not prove the "
               "absence of autocorrelation or heteroskedasticity.")
    return out


def _regressor_persistence(fit) -> dict:
    """First-order autocorrelation of each non-constant regressor."""
    out = {}
    for j, term in enumerate(fit.terms):
        x = fit.X[:, j] - fit.X[:, j].mean()
        denom = float(x[:-1] @ x[:-1])
        if denom > 0:
            out[term] = float(x[1:] @ x[:-1]) / denom
    return out


def _p_words(p: float) -> str:
    """A p-value in words as the tables show it: never in scientific notation."""
    return "below 0.001" if p < 0.001 else f"= {p:.3f}"


def _ranges(lags: list[int]) -> str:
    if not lags:
        return ""
    parts, start, prev = [], lags[0], lags[0]
    for x in lags[1:] + [None]:
        if x is not None and x == prev + 1:
            prev = x
            continue
        parts.append(f"{start}-{prev}" if prev != start else f"{start}")
        if x is not None:
            start = prev = x
    return ", ".join(parts)
