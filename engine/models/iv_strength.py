"""Instrument strength and weak-instrument-robust inference for linear IV, under any estimator of
S: the first-stage system as a moment model, the effective F of Montiel Olea & Pflueger (one
endogenous regressor), a robust first-stage F from the Kleibergen-Paap (2006) rank statistic
(several), and the Anderson-Rubin test and its confidence set by test inversion. These work on the IV fit's shared core (its data
and the basis of Z) and never refit the model."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla
from scipy import optimize

from ..blas import single_blas_thread
from ..errors import LagwiseError, SpecificationError
from ..laws.reference import chi_square_upper, f_upper


#: The rank statistic's name on screen and in exports, in our own words.
RANK_F = "robust first-stage F (Kleibergen-Paap 2006 rank statistic)"

#: Rules of thumb for instrument strength (common practice, not tests with known size).
RULE_OF_THUMB_F = 10.0            # Staiger & Stock (1997): first-stage F below 10 is weak

EFFECTIVE_F_CRITICAL = 23.1       # Montiel Olea & Pflueger (2013), tau = 10%, 5% level [recalled]


@dataclass
class FirstStage:
    """First-stage results for each endogenous regressor and the joint strength statistic."""

    table: pd.DataFrame                  # per endogenous regressor: F, p, partial R^2, ...
    coefficients: dict                   # endogenous -> DataFrame of excluded instruments
    strength: dict                       # statistic name -> value, critical value, source
    estimator: str
    notes: list[str] = field(default_factory=list)


def partial_out(core):
    """(Z~, X~, y~): excluded instruments, endogenous regressors and the response with the
    exogenous regressors (and the constant) partialled out."""
    exo_idx = [i for i, n in enumerate(core.z_names) if n not in core.excluded]
    z_ex = core.Z[:, [core.z_names.index(n) for n in core.excluded]]
    x_en = core.X[:, [core.terms.index(n) for n in core.endogenous]]
    if exo_idx:
        w = core.Z[:, exo_idx]
        q, _ = np.linalg.qr(w)
        strip = lambda a: a - q @ (q.T @ a)        # noqa: E731
        return strip(z_ex), strip(x_en), strip(core.y), w
    return z_ex, x_en, core.y.copy(), None


def _coefficient_model(core, zt, vt, names):
    """The first-stage system as a moment model: contributions v_t (x) z~_t (column-major vec
    of the L x p coefficient matrix), influence map (I_p (x) Q^-1) / T, Q = Z~'Z~/T; made by the
    core (`series_model`), so a panel's system keeps its entity and period codes."""
    t_obs, L = zt.shape
    p = vt.shape[1]
    q_inv = np.linalg.inv(zt.T @ zt / t_obs)
    g = np.hstack([vt[:, [j]] * zt for j in range(p)])
    m = np.kron(np.eye(p), q_inv) / t_obs
    terms = [f"{n}:{e}" for e in names[1] for n in names[0]]
    return core.series_model(g, m, terms=terms, beta=np.zeros(len(terms)),
                             df_resid=t_obs - L)


@single_blas_thread
def first_stage(fit, est):
    core = fit.core
    if not core.endogenous:
        raise SpecificationError("no regressor is marked endogenous: there is no first stage")
    zt, xt, _, _ = partial_out(core)
    t_obs, L = zt.shape
    pi = np.linalg.lstsq(zt, xt, rcond=None)[0]                      # (L, p)
    vt = xt - zt @ pi
    system = _coefficient_model(core, zt, vt, (core.excluded, core.endogenous))
    system.beta = pi.ravel(order="F")
    res_sys = system.infer(est, reference="normal")
    v_pi = res_sys.cov.to_numpy()
    rows, coefs = [], {}
    for j, name in enumerate(core.endogenous):
        block = slice(j * L, (j + 1) * L)
        pj, vj = pi[:, j], v_pi[block, block]
        wald = float(pj @ np.linalg.solve(vj, pj))
        rss = float(vt[:, j] @ vt[:, j])
        partial_r2 = 1.0 - rss / float(xt[:, j] @ xt[:, j])
        s2 = rss / (t_obs - L - (len(core.z_names) - L))
        f_homo = float(pj @ (zt.T @ zt) @ pj) / (L * s2)
        df2 = t_obs - len(core.z_names)
        rows.append({"endogenous": name, "robust_f": wald / L,
                     "robust_p": chi_square_upper(wald, L), "homoskedastic_f": f_homo,
                     "homoskedastic_p": f_upper(f_homo, L, df2),
                     "partial_r2": partial_r2, "instruments": L})
        se = np.sqrt(np.diag(vj))
        coefs[name] = pd.DataFrame({"estimate": pj, "std_error": se, "t_stat": pj / se},
                                   index=pd.Index(core.excluded, name="instrument"))
    table = pd.DataFrame(rows).set_index("endogenous")
    strength = {}
    q = zt.T @ zt / t_obs
    if len(core.endogenous) == 1:
        v = v_pi[:L, :L]
        f_eff = float(pi[:, 0] @ q @ pi[:, 0] / np.trace(v @ q))
        strength["effective F"] = {
            "value": f_eff, "compare_with": EFFECTIVE_F_CRITICAL,
            "source": "Montiel Olea & Pflueger (2013): 23.1 is their critical value for a 10% "
                      "worst-case bias at 5% (recalled, not recomputed here)"}
    rk = kleibergen_paap(pi, v_pi, zt, vt)
    strength[RANK_F] = {
        "value": rk / L, "compare_with": RULE_OF_THUMB_F,
        "source": "rule of thumb: F below about 10 signals weak instruments (Staiger & Stock "
                  "1997; common practice; Stock & Yogo's tables assume homoskedastic errors)"}
    notes = [f"first stage with {est.label} for S; the exogenous regressors are partialled out"]
    return FirstStage(table=table, coefficients=coefs, strength=strength, estimator=est.label,
                      notes=notes)


def kleibergen_paap(pi, v_pi, zt, vt) -> float:
    """The rk Wald statistic of H0: rank(Pi) = p - 1 (Kleibergen & Paap 2006) with
    Theta = G Pi F', G = (Z~'Z~/T)^(1/2), F = Sigma_vv^(-1/2), its covariance (F (x) G) V (F (x) G)'
    and the singular vectors of Theta for the smallest singular value."""
    t_obs, L = zt.shape
    p = pi.shape[1]
    g = sla.sqrtm(zt.T @ zt / t_obs).real
    sigma = vt.T @ vt / t_obs
    f = np.linalg.inv(sla.sqrtm(sigma).real)
    theta = g @ pi @ f.T
    u, s, vh = np.linalg.svd(theta, full_matrices=True)
    v = vh.T
    q = p - 1
    u22, v22 = u[q:, q:], v[q:, q:]
    a_perp = u[:, q:] @ np.linalg.inv(u22) @ sla.sqrtm(u22 @ u22.T).real
    b_perp = sla.sqrtm(v22 @ v22.T).real @ np.linalg.inv(v22.T) @ v[:, q:].T
    lam = (a_perp.T @ theta @ b_perp.T).ravel(order="F")
    kron = np.kron(b_perp, a_perp.T)
    fg = np.kron(f, g)
    v_theta = fg @ v_pi @ fg.T
    omega = kron @ v_theta @ kron.T
    return float(lam @ np.linalg.solve(omega, lam))


@dataclass
class ARSet:
    """The Anderson-Rubin confidence set for one coefficient, and its test."""

    term: str
    level: float
    intervals: list[tuple[float, float]]
    kind: str                        # "interval", "union of intervals", "unbounded", "empty"
    estimator: str
    law: str
    wald_interval: tuple[float, float]
    reading: str
    _p: object = field(repr=False, default=None)

    def p_value(self, value: float) -> float:
        """The AR test's p-value for beta = value."""
        return float(self._p(float(value)))

    def text(self) -> str:
        parts = [("(-inf" if lo == -np.inf else f"[{lo:.4g}") + ", "
                 + ("inf)" if hi == np.inf else f"{hi:.4g}]") for lo, hi in self.intervals]
        return " U ".join(parts) if parts else "empty"


def _ar_setup(fit, term, est):
    core = fit.core
    if len(core.endogenous) != 1:
        raise SpecificationError("the Anderson-Rubin test is computed for one endogenous "
                                 "regressor; this model has " + str(len(core.endogenous)))
    if term != core.endogenous[0]:
        raise SpecificationError(f"'{term}' is not the endogenous regressor "
                                 f"('{core.endogenous[0]}')")
    zt, xt, yt, _ = partial_out(core)
    x = xt[:, 0]
    pi_y = np.linalg.lstsq(zt, yt, rcond=None)[0]
    pi_x = np.linalg.lstsq(zt, x, rcond=None)[0]
    ey, ex = yt - zt @ pi_y, x - zt @ pi_x
    est = _fixed(est, zt, ey, ex, pi_y, pi_x, core)
    return est, _ar_p_value(est, zt, ey, ex, pi_y, pi_x, core)


@single_blas_thread
def anderson_rubin_test(fit, term: str, value: float, est) -> float:
    """The AR test's p-value for beta = value (no confidence set)."""
    return float(_ar_setup(fit, term, est)[1](float(value)))


@single_blas_thread
def anderson_rubin(fit, term: str, est, level: float = 0.95) -> ARSet:
    if not 0.5 <= level < 1:
        raise SpecificationError(f"confidence level must be between 0.5 and 1, got {level!r}")
    est, p_value = _ar_setup(fit, term, est)
    alpha = 1.0 - level
    L = len(fit.core.excluded)

    wald = fit.infer(est, level=level)
    centre = float(wald.table.loc[term, "estimate"])
    scale = float(max(wald.table.loc[term, "std_error"], abs(centre), 1e-8))
    grid_t = np.linspace(-np.pi / 2, np.pi / 2, 1201)[1:-1]
    to_b = lambda t: centre + scale * np.tan(t)            # noqa: E731
    accepted = np.array([p_value(to_b(t)) > alpha for t in grid_t])     # NaN: not accepted
    tails = p_value(np.inf) > alpha
    intervals = _intervals(grid_t, accepted, tails, lambda t: p_value(to_b(t)) - alpha, to_b)
    kind = ("empty" if not intervals else "unbounded" if any(np.isinf(v) for iv in intervals
                                                              for v in iv)
            else "interval" if len(intervals) == 1 else "union of intervals")
    lo, hi = float(wald.table.loc[term, "ci_low"]), float(wald.table.loc[term, "ci_high"])
    law = p_value.law
    return ARSet(term, level, intervals, kind, est.label, law.wald_text(L), (lo, hi),
                 _ar_reading(intervals, kind, (lo, hi), level), _p=p_value)


def _ar_p_value(est, zt, ey, ex, pi_y, pi_x, core):
    """p(b0) of the AR test of beta = b0 (b0 = +-inf: the limit, the first-stage Wald test).
    For estimators that are quadratic in the contributions, S is computed once for the stacked
    contributions [v_y (x) z, v_x (x) z] and every b0 costs only L x L algebra."""
    t_obs, L = zt.shape
    q_inv = np.linalg.inv(zt.T @ zt / t_obs)

    def model_for(v, coef):
        m = _coefficient_model(core, zt, v[:, None], (core.excluded, ["AR"]))
        m.beta = coef
        return m

    ref = model_for(ey - float(pi_y @ pi_x / max(pi_x @ pi_x, 1e-300)) * ex, pi_y)
    law = est.family.law("auto", est.params, est.long_run(ref), ref)
    if est.family.quadratic(est.params):
        stacked = _coefficient_model(core, zt, np.column_stack([ey, ex]),
                                     (core.excluded, ["y", "x"]))
        s = est.long_run(stacked).S
        s_yy, s_yx, s_xx = s[:L, :L], s[:L, L:], s[L:, L:]

        def wald(b0):
            if np.isinf(b0):
                s_b, coef = s_xx, pi_x
            else:
                s_b, coef = s_yy - b0 * (s_yx + s_yx.T) + b0**2 * s_xx, pi_y - b0 * pi_x
            v = q_inv @ s_b @ q_inv / t_obs
            return float(coef @ np.linalg.solve(v, coef))
    else:
        def wald(b0):
            coef, v = (pi_x, ex) if np.isinf(b0) else (pi_y - b0 * pi_x, ey - b0 * ex)
            res = model_for(v, coef).infer(est, reference="auto")
            return float(coef @ np.linalg.solve(res.cov.to_numpy(), coef))

    def p_value(b0):
        try:
            return law.wald(wald(float(b0)), L).p_value
        except (np.linalg.LinAlgError, LagwiseError):
            return np.nan
    p_value.law = law
    return p_value


def _fixed(est, zt, ey, ex, pi_y, pi_x, core):
    """A data-driven bandwidth is fixed at its value for the AR regression at the 2SLS-like
    starting point, so the test statistic is one function of b0."""
    if isinstance(est.params.get("bandwidth"), str):
        b0 = float(pi_y @ pi_x / max(pi_x @ pi_x, 1e-300))
        model = _coefficient_model(core, zt, (ey - b0 * ex)[:, None], (core.excluded, ["AR"]))
        lr = est.long_run(model)
        return est.with_params(bandwidth=max(lr.bandwidth, 1e-6))
    return est


def _intervals(grid, accepted, tails, excess, to_b):
    """Accepted stretches of the grid, their ends refined by root-finding."""
    out = []
    n = len(grid)
    i = 0
    while i < n:
        if not accepted[i]:
            i += 1
            continue
        j = i
        while j + 1 < n and accepted[j + 1]:
            j += 1
        lo = -np.inf if (i == 0 and tails) else to_b(_root(excess, grid[i - 1], grid[i])
                                                    if i > 0 else grid[0])
        hi = np.inf if (j == n - 1 and tails) else to_b(_root(excess, grid[j], grid[j + 1])
                                                       if j < n - 1 else grid[-1])
        out.append((float(lo), float(hi)))
        i = j + 1
    return out


def _root(f, a, b):
    try:
        return optimize.brentq(f, a, b, xtol=1e-12, maxiter=200)
    except ValueError:
        return 0.5 * (a + b)


def _ar_reading(intervals, kind, wald, level) -> str:
    pct = f"{level:.0%}"
    if kind == "unbounded":
        text = (f"The {pct} Anderson-Rubin set is unbounded: the instruments cannot bound the "
                "coefficient (they are weak for it).")
    elif kind == "empty":
        text = (f"The {pct} Anderson-Rubin set is empty: every value is rejected, which points "
                "to invalid instruments (the overidentifying restrictions fail).")
    elif kind == "union of intervals":
        text = f"The {pct} Anderson-Rubin set is a union of {len(intervals)} disjoint intervals."
    else:
        text = f"The {pct} Anderson-Rubin set is an interval."
    lo, hi = intervals[0][0] if intervals else np.nan, intervals[-1][1] if intervals else np.nan
    if kind != "empty" and np.isfinite(lo) and np.isfinite(hi):
        ratio = (hi - lo) / max(wald[1] - wald[0], 1e-300)
        if ratio > 1.5 or lo > wald[0] + 0.25 * (wald[1] - wald[0]) \
                or hi < wald[1] - 0.25 * (wald[1] - wald[0]):
            text += (f" It differs from the Wald interval [{wald[0]:.4g}, {wald[1]:.4g}] "
                     f"(about {ratio:.1f} times as wide): the Wald interval relies on strong "
                     "instruments; the Anderson-Rubin set does not.")
        else:
            text += (f" It agrees roughly with the Wald interval [{wald[0]:.4g}, "
                     f"{wald[1]:.4g}].")
    elif kind != "empty":
        text += (f" The Wald interval [{wald[0]:.4g}, {wald[1]:.4g}] is finite only because it "
                 "assumes strong instruments.")
    return text
