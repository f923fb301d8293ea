"""Risk premia of linear factor models: the price of each factor's risk in the cross-section.

`fit_risk_premia(data, assets, factors, method="two-pass")`: betas from the N time-series
regressions (the factor model's own, on the balanced subsample), then the cross-sectional least
squares of the assets' mean excess returns on the betas (with a zero-beta rate when
`zero_beta=True`). Since the betas do not change over time, the premia are also the average of
the period-by-period Fama-MacBeth (1973) slopes gamma_t = A r_t, A = (X'X)^-1 X'. Standard errors
(`rp.infer(est, correction=...)`, a table indexed by premium) under any time-series estimator:

* correction="none": Fama-MacBeth, the estimator applied to the slope series (a
  `FamaMacBethFit`: classical = s^2 / T with divisor T - 1; HC0 = divisor T; a kernel corrects
  for autocorrelated slopes). Treats the betas as known.
* correction="shanken": Shanken (1992, RFS 5(1)) errors-in-variables correction. The slope series
  splits exactly into gamma_t - gamma = f*_t + A e_t (f*_t the demeaned factors, padded with a zero
  for the zero-beta rate; e_t the time-series residuals), and Shanken's covariance is
  (1 + c) V(A e) + V(f*), c = lambda' Sigma_f^-1 lambda over the factor premia (Sigma_f with
  divisor T), each V under the chosen estimator. Under HC0 this is exactly Shanken's
  (1/T)[(1 + c) A Sigma_e A' + Sigma_f*] (divisors T), i.e. (1 + c) V_FM - c Sigma_f*/T; with a
  kernel it extends the same assumption (errors independent of the factors) to autocorrelated
  series.
* correction="krs": the misspecification-robust covariance of Kan, Robotti & Shanken (2013, JF
  68(6)): the two-pass estimator written as one exactly identified GMM system (Cochrane 2005,
  ch. 12-13: time-series moments, X' times the pricing moments, the pricing errors), whose
  influence series psi_t = -J^-1 g_t gives V = LR(psi)/T under any estimator; it keeps the
  pricing errors in the Jacobian, so it stays valid when the model is misspecified. Its premium
  rows are KRS's h_t (their code csrw.m, W = I); under HC0 it equals linearmodels'
  LinearFactorModel covariance.

Also: the cross-sectional R^2 (centred, 1 - e'e / sum (r_bar_i - mean r_bar)^2; negative
possible without a zero-beta rate), the test that the pricing errors are jointly zero (in the
N - p dimensional space they lie in, under each correction), and `factor_means(est)`: premia of
traded factors as their time-series means (valid when each factor is an excess return the model
prices with zero alpha).

`method="gmm"`: the joint GMM estimation of betas, premia and factor means (the moments of
linearmodels' LinearFactorModelGMM: e_t = r_t - B lambda - B (f_t - mu), moments (1, f_t) e_it
and f_t - mu; N(K+1) + K moments, NK + 2K parameters) with `lagwise.fit_gmm`: two-step efficient
GMM whose weighting follows the estimator of S (`rp.infer(est)` re-weights by est), J test with
N - K degrees of freedom.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from dataclasses import replace

from ..covariance.registry import as_estimator
from ..errors import EstimationError, SpecificationError
from ..inference.infer import TABLE_COLUMNS
from .custom_gmm import fit_gmm
from .factors import fit_factor_model
from .fama_macbeth import FamaMacBethFit
from .joint import JointTest, wald_statistic
from .series import SeriesModel

ZERO_BETA = "zero_beta"
CORRECTIONS = {
    "none": "Fama-MacBeth (1973): the slope series, betas treated as known",
    "shanken": "Shanken (1992) errors-in-variables correction",
    "krs": "Kan, Robotti & Shanken (2013) misspecification-robust",
}


def _with_cov(res, cov: np.ndarray, notes, names=None):
    """A copy of an Inference with another covariance (the table recomputed under its law)."""
    names = res.params.index if names is None else names
    beta = res.params.reindex(names).to_numpy()
    var = np.diag(cov)
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.sqrt(np.where(var < 0, np.nan, var))
        t = np.where(se > 0, beta / se, np.nan)
    cv = res.law.critical_value(res.level)
    table = pd.DataFrame(np.column_stack([beta, se, t, res.law.p_values(t), beta - cv * se,
                                          beta + cv * se]), index=names, columns=TABLE_COLUMNS)
    return replace(res, cov=pd.DataFrame(cov, index=names, columns=names), table=table,
                   params=pd.Series(beta, index=names, name="estimate"), k=len(names),
                   notes=list(notes))


def _subset(res, terms, rename):
    """An Inference restricted to `terms` (renamed), the law unchanged."""
    idx = pd.Index(rename, name="premium")
    cov = res.cov.loc[terms, terms].to_numpy()
    table = res.table.loc[terms].copy()
    table.index = idx
    return replace(res, cov=pd.DataFrame(cov, index=idx, columns=idx), table=table,
                   params=pd.Series(res.params.loc[terms].to_numpy(), index=idx,
                                    name="estimate"), k=len(terms))


class RiskPremia:
    """Two-pass risk premia with Fama-MacBeth, Shanken and Kan-Robotti-Shanken standard errors
    (see the module docstring)."""

    method = "two-pass"

    def __init__(self, factor_model, zero_beta: bool = False):
        fm = factor_model
        self.factor_model = fm
        self.assets, self.factors = list(fm.assets), list(fm.factors)
        self.zero_beta = bool(zero_beta)
        r = fm.returns.to_numpy()
        f = fm.factor_values.to_numpy()
        t_obs, n = r.shape
        k = f.shape[1]
        p = k + int(zero_beta)
        if n <= p:
            raise SpecificationError(f"{n} assets cannot identify {p} premia: the cross-section "
                                     "needs more assets than premia")
        self.names = ([ZERO_BETA] if zero_beta else []) + self.factors
        self.index = fm.index
        self.nobs = t_obs
        mu_f = f.mean(axis=0)
        fd = f - mu_f
        rbar = r.mean(axis=0)
        betas = fm.betas.to_numpy()
        x = np.column_stack([np.ones(n), betas]) if zero_beta else betas
        xtx = x.T @ x
        if np.linalg.cond(xtx) > 1e12:
            raise EstimationError("the betas are (nearly) collinear across assets: the "
                                  "cross-sectional regression cannot separate the premia")
        a = np.linalg.solve(xtx, x.T)
        gamma_t = r @ a.T
        gamma = gamma_t.mean(axis=0)
        alpha = rbar - x @ gamma
        e = np.column_stack([m.resid for m in fm.members])      # balanced: T x N residuals
        self._r, self._f, self._fd, self._e, self._x, self._a = r, f, fd, e, x, a
        self.sigma_f = fd.T @ fd / t_obs
        self.sigma_e = e.T @ e / t_obs
        self.premia = pd.Series(gamma, index=pd.Index(self.names, name="premium"),
                                name="premium")
        self.betas = fm.betas
        self.pricing_errors = pd.Series(alpha, index=pd.Index(self.assets, name="asset"),
                                        name="pricing_error")
        tss = float(((rbar - rbar.mean()) ** 2).sum())
        self.r_squared = 1.0 - float(alpha @ alpha) / tss if tss > 0 else float("nan")
        lam = gamma[int(zero_beta):]
        self.shanken_c = float(lam @ np.linalg.solve(self.sigma_f, lam))
        idx = fm.index
        self.fama_macbeth = self._series(gamma_t, self.names, "Fama-MacBeth slopes")
        self._alpha_series = self._series(r @ (np.eye(n) - x @ a).T, self.assets,
                                          "period-by-period pricing errors")
        self._ae = self._series(e @ a.T, self.names, "A e_t")
        self._fstar = self._series(f, self.factors, "factors")
        self.notes = list(fm.sample.notes[:-1]) + [
            "two-pass: betas from the time-series regressions on the balanced subsample "
            f"({t_obs} periods), premia from the cross-sectional least squares of mean excess "
            "returns on the betas" + (" with a zero-beta rate" if zero_beta else " (no "
                                                                           "intercept)"),
            f"cross-sectional R^2 = {self.r_squared:.4f} (centred; "
            + ("can be negative without a zero-beta rate)" if not zero_beta else "OLS weights)"),
            f"Shanken's c = lambda' Sigma_f^-1 lambda = {self.shanken_c:.4g}"]
        self._psi = None
        self._index = idx

    def _series(self, values, names, what):
        frame = pd.DataFrame(values, index=self.index, columns=pd.Index(names, name="term"))
        sample = replace(self.factor_model.sample, notes=[])
        return FamaMacBethFit(frame, response=what, sample=sample,
                              counts=np.full(len(frame), len(self.assets)), skipped={})

    # ------------------------------------------------------------------ KRS
    def _krs_model(self) -> SeriesModel:
        """The exactly identified two-pass GMM system's influence series psi_t = -J^-1 g_t for
        the premia and the pricing errors (V = LR(psi)/T)."""
        if self._psi is None:
            r, f, x, n = self._r, self._f, self._x, len(self.assets)
            t_obs, k = f.shape
            p = len(self.names)
            zb = int(self.zero_beta)
            fc = np.column_stack([np.ones(t_obs), f])
            e = self._e
            gamma = self.premia.to_numpy()
            alpha = self.pricing_errors.to_numpy()
            u = r - x @ gamma
            g = np.hstack([(fc[:, None, :] * e[:, :, None]).reshape(t_obs, -1), u @ x,
                           u - alpha])
            k1 = k + 1
            s1, s2 = n * k1, n * k1 + p
            m = s2 + n
            jac = np.zeros((m, m))
            fpf = fc.T @ fc / t_obs
            sel = np.zeros((p, k))
            sel[zb:, :] = np.eye(k)
            for i in range(n):
                jac[i * k1:(i + 1) * k1, i * k1:(i + 1) * k1] = -fpf
                cols = slice(i * k1 + 1, (i + 1) * k1)           # asset i's betas
                jac[s1:s2, cols] = alpha[i] * sel - np.outer(x[i], gamma) @ sel
                jac[s2 + i, cols] = -(gamma @ sel)
            jac[s1:s2, s1:s2] = -x.T @ x
            jac[s2:, s1:s2] = -x
            jac[s2:, s2:] = -np.eye(n)
            try:
                proj = -np.linalg.solve(jac.T, np.eye(m)[:, s1:])     # rows of -J^-1
            except np.linalg.LinAlgError:
                raise EstimationError("the two-pass system's Jacobian is singular") from None
            psi = g @ proj                                   # T x (p + N)
            names = self.names + [f"{a}:pricing_error" for a in self.assets]
            self._psi = SeriesModel(psi, np.eye(p + n) / t_obs, terms=names,
                                    beta=np.concatenate([gamma, alpha]), index=self.index,
                                    sample=replace(self.factor_model.sample, notes=[]),
                                    df_resid=t_obs - 1, response="two-pass GMM system")
        return self._psi

    # ------------------------------------------------------------------ inference
    def infer(self, est, correction: str = "none", level: float = 0.95,
              reference: str = "auto"):
        """The premia under `est` with a correction ("none" = Fama-MacBeth, "shanken", "krs"):
        an Inference whose table is indexed by premium."""
        est = as_estimator(est)
        if correction not in CORRECTIONS:
            raise SpecificationError(f"correction must be one of {', '.join(CORRECTIONS)}")
        if correction == "krs":
            res = self._krs_model().infer(est, level=level, reference=reference)
            out = _subset(res, self.names, self.names)
            notes = [CORRECTIONS["krs"] + ": influence series of the two-pass GMM system "
                     "(valid under misspecification)"]
        else:
            res = self.fama_macbeth.infer(est, level=level, reference=reference)
            out = _subset(res, self.names, self.names)
            notes = [CORRECTIONS["none"]]
            if correction == "shanken":
                v_ae = self._ae.infer(est, level=level, reference=reference).cov.to_numpy()
                v_f = self._fstar.infer(est, level=level, reference=reference).cov.to_numpy()
                zb = int(self.zero_beta)
                cov = (1.0 + self.shanken_c) * v_ae
                cov[zb:, zb:] += v_f
                notes = [CORRECTIONS["shanken"] + f": (1 + c) V(A e) + V(f), c = "
                         f"{self.shanken_c:.4g}; assumes errors independent of the factors"]
                out = _with_cov(out, cov, out.notes, out.table.index)
        out.notes = notes + [n for n in out.notes if n not in notes]
        out.label = f"{out.label}; {correction if correction != 'none' else 'Fama-MacBeth'}"
        return out

    def corrections(self, est, level: float = 0.95, reference: str = "auto") -> pd.DataFrame:
        """Each premium's standard error, t and p under every correction, side by side (long:
        one row per premium and correction), plus the time-series mean of each factor."""
        rows = []
        for corr, title in CORRECTIONS.items():
            tab = self.infer(est, corr, level, reference).table
            for name, r in tab.iterrows():
                rows.append({"premium": name, "correction": corr, "title": title, **r})
        means = self.factor_means(est, level, reference).table
        for name, r in means.iterrows():
            rows.append({"premium": name, "correction": "mean",
                         "title": "time-series mean (traded factor)", **r})
        return pd.DataFrame(rows)

    def factor_means(self, est, level: float = 0.95, reference: str = "auto"):
        """Premia of traded factors as their time-series means, with the estimator's standard
        error of the mean (classical: divisor T - 1, linearmodels' TradedFactorModel default).
        Valid when each factor is an excess return on a traded portfolio and the model prices
        the factors themselves with zero alpha."""
        res = self._fstar.infer(as_estimator(est), level=level, reference=reference)
        out = _subset(res, self.factors, self.factors)
        out.notes = ["each premium is the factor's time-series mean: valid for a traded "
                     "excess-return factor that the model prices with zero alpha"] + out.notes
        return out

    # ------------------------------------------------------------------ pricing errors
    def pricing_error_cov(self, est, correction: str = "none", level: float = 0.95,
                          reference: str = "auto"):
        """(covariance N x N, Inference of the period-by-period pricing errors) under `est`."""
        est = as_estimator(est)
        if correction == "krs":
            res = self._krs_model().infer(est, level=level, reference=reference)
            terms = [f"{a}:pricing_error" for a in self.assets]
            return res.cov.loc[terms, terms].to_numpy(), res
        if correction not in CORRECTIONS:
            raise SpecificationError(f"correction must be one of {', '.join(CORRECTIONS)}")
        res = self._alpha_series.infer(est, level=level, reference=reference)
        cov = res.cov.to_numpy()
        if correction == "shanken":
            cov = (1.0 + self.shanken_c) * cov
        return cov, res

    def pricing_error_test(self, est, correction: str = "none",
                           reference: str = "auto") -> JointTest:
        """W = alpha' V^+ alpha in the N - p dimensional space the pricing errors lie in
        (V^+ = Q (Q'VQ)^-1 Q', Q an orthonormal basis orthogonal to the cross-sectional
        regressors: no tolerance picks a rank), referred to the estimator's law for N - p
        restrictions."""
        cov, res = self.pricing_error_cov(est, correction, reference=reference)
        n, p = self._x.shape
        df = n - p
        q = np.linalg.svd(self._x)[0][:, p:]
        alpha = self.pricing_errors.to_numpy()
        w, status, span = wald_statistic(q.T @ alpha, q.T @ cov @ q)
        if status:
            raise EstimationError(f"the pricing errors' covariance under {res.label} is "
                                  f"{'singular' if status == 'singular' else 'not PSD'} in the "
                                  f"{df} dimensions they span (eigenvalues {span[0]:.3g} to "
                                  f"{span[1]:.3g}): no test")
        law = res.law.restricted(np.ones(len(res.params), dtype=bool))
        law.check_restrictions(df)
        form = law.wald(w, df)
        return JointTest(w, df, form.p_value, form.f_statistic, form.f_df, law.wald_text(df),
                         f"{res.label}; {correction}", list(self.pricing_errors.index),
                         [f"H0: the {n} pricing errors are zero ({df} = N - {p} restrictions)"])

    def summary(self, est, level: float = 0.95) -> str:
        est = as_estimator(est)
        lines = [f"Risk premia (two-pass), {len(self.assets)} assets, T = {self.nobs}; "
                 f"R^2 = {self.r_squared:.3f}; standard errors under {est.label}"]
        tab = self.corrections(est, level)
        wide = tab.pivot(index="premium", columns="correction", values="std_error")
        lines.append(f"  {'premium':<14}{'estimate':>12}" + "".join(
            f"{c:>12}" for c in wide.columns))
        for name in wide.index:
            value = (self.premia.get(name) if name in self.premia.index
                     else np.nan)
            lines.append(f"  {name:<14}{value:>12.5g}" + "".join(
                f"{wide.loc[name, c]:>12.4g}" for c in wide.columns))
        return "\n".join(lines)


# --------------------------------------------------------------------------- joint GMM

def _gmm_moments(theta, data):
    r, f = data
    t_obs, n = r.shape
    k = f.shape[1]
    b = theta[: n * k].reshape(n, k)
    lam = theta[n * k: n * k + k]
    mu = theta[n * k + k:]
    fe = f - mu
    e = r - (b @ lam)[None, :] - fe @ b.T
    fc = np.column_stack([np.ones(t_obs), f])
    g1 = (e[:, :, None] * fc[:, None, :]).reshape(t_obs, -1)
    return np.hstack([g1, fe])


def _gmm_jacobian(theta, data):
    r, f = data
    t_obs, n = r.shape
    k = f.shape[1]
    b = theta[: n * k].reshape(n, k)
    lam = theta[n * k: n * k + k]
    mu = theta[n * k + k:]
    fc = np.column_stack([np.ones(t_obs), f])
    k1 = k + 1
    jac = np.zeros((n * k1 + k, n * k + 2 * k))
    fcd = fc.T @ (lam[None, :] + f - mu) / t_obs
    fbar = fc.mean(axis=0)
    for i in range(n):
        rows = slice(i * k1, (i + 1) * k1)
        jac[rows, i * k:(i + 1) * k] = -fcd
        jac[rows, n * k: n * k + k] = -np.outer(fbar, b[i])
        jac[rows, n * k + k:] = np.outer(fbar, b[i])
    jac[n * k1:, n * k + k:] = -np.eye(k)
    return jac


class RiskPremiaGMM:
    """Joint GMM of betas, premia and factor means (see the module docstring)."""

    method = "gmm"

    def __init__(self, two_pass: RiskPremia, estimator="hc0"):
        if two_pass.zero_beta:
            raise SpecificationError("the joint GMM estimation here prices excess returns "
                                     "without a zero-beta rate; use zero_beta=False")
        self.two_pass = two_pass
        self.assets, self.factors = two_pass.assets, two_pass.factors
        r, f = two_pass._r, two_pass._f
        n, k = r.shape[1], f.shape[1]
        t_obs = len(r)
        m = n * (k + 1) + k
        if t_obs <= m:
            raise SpecificationError(f"the joint GMM needs more periods than moments: T = "
                                     f"{t_obs}, N(K+1) + K = {m} (N = {n}, K = {k}); use the "
                                     "two-pass estimator")
        start = np.concatenate([two_pass.betas.to_numpy().ravel(), two_pass.premia.to_numpy(),
                                f.mean(axis=0)])
        g0 = _gmm_moments(start, (r, f))
        try:
            w0 = np.linalg.inv(g0.T @ g0 / t_obs)
        except np.linalg.LinAlgError:
            raise EstimationError("the moments at the two-pass start have a singular "
                                  "covariance") from None
        self.names = ([f"{a}:{c}" for a in self.assets for c in self.factors]
                      + [f"lambda:{c}" for c in self.factors] + [f"mean:{c}" for c in self.factors])
        moment_names = ([f"{a}:{t}" for a in self.assets for t in ["alpha"] + self.factors]
                        + [f"mean:{c}" for c in self.factors])
        self.fit = fit_gmm(_gmm_moments, start, (r, f), jacobian=_gmm_jacobian,
                           weighting="two-step", estimator=as_estimator(estimator),
                           first_weight=0.5 * (w0 + w0.T), names=self.names,
                           moment_names=moment_names, label="risk premia (GMM)")
        self.first_step = self.fit.first_step
        self.nobs = t_obs

    def weighted(self, est):
        """The two-step fit weighted by `est` (from the same first step)."""
        return self.first_step.two_step(as_estimator(est))

    def infer(self, est, correction: str = "none", level: float = 0.95,
              reference: str = "auto"):
        """The premia under two-step GMM weighted by `est`, efficient-form covariance."""
        if correction != "none":
            raise SpecificationError("the joint GMM estimates betas and premia together, so "
                                     "its covariance needs no errors-in-variables correction; "
                                     "use correction='none'")
        res = self.weighted(est).infer_weighting(level=level, reference=reference)
        out = _subset(res, [f"lambda:{c}" for c in self.factors], self.factors)
        out.notes = ["joint GMM (two-step; the weighting follows the estimator)"] + out.notes
        return out

    @property
    def premia(self) -> pd.Series:
        k = len(self.factors)
        n = len(self.assets)
        return pd.Series(self.fit.beta[n * k: n * k + k], index=pd.Index(self.factors,
                                                                          name="premium"))

    def j_test(self, est=None):
        """Hansen's J of the over-identifying restrictions (N - K degrees of freedom)."""
        fit = self.fit if est is None else self.weighted(est)
        return fit.j_test()


def risk_premia_of(factor_model, zero_beta: bool = False, method: str = "two-pass",
                   estimator="hc0"):
    """The risk premia of a fitted factor model's assets and factors (its excess returns, on the
    balanced subsample): the same as `fit_risk_premia` on the data it was fitted on."""
    fm = factor_model
    frame = fm.returns.join(fm.factor_values)
    return fit_risk_premia(frame, fm.assets, fm.factors, method=method, zero_beta=zero_beta,
                           estimator=estimator)


def fit_risk_premia(data, assets, factors, time: str | None = None,
                    method: str = "two-pass", risk_free: str | None = None, sample=None,
                    zero_beta: bool = False, estimator="hc0"):
    """Risk premia of the factors from the cross-section of the assets (see
    engine.models.risk_premia). method: "two-pass" (Fama-MacBeth slopes, Shanken and
    Kan-Robotti-Shanken corrections through `rp.infer(est, correction=...)`) or "gmm" (joint
    two-step GMM of betas, premia and factor means; `estimator` is the first weighting's S,
    and `rp.infer(est)` re-weights by est). Uses the balanced subsample (the periods in which
    every asset is observed); zero_beta adds a zero-beta rate to the cross-section."""
    if method not in ("two-pass", "gmm"):
        raise SpecificationError("method must be 'two-pass' or 'gmm'")
    fm = fit_factor_model(data, assets, factors, time=time, risk_free=risk_free, sample=sample,
                          balanced=True)
    two_pass = RiskPremia(fm, zero_beta=zero_beta)
    if method == "two-pass":
        return two_pass
    return RiskPremiaGMM(two_pass, estimator)
