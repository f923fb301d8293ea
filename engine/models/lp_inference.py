"""Bands for local projections: estimators of each horizon's variance, the joint covariance
across horizons, sup-t and Bonferroni bands, the sweep of every horizon along the bandwidth,
cumulative responses, multipliers and bootstrap bands.

Estimators (each says what it assumes):

* any estimator from `lagwise.estimator(...)`, applied to each horizon's own fit: kernel HAC at a
  fixed bandwidth, an automatic bandwidth rule evaluated on each horizon's fit, EWC with B on each
  horizon's n_h, HC, VAR-HAC, ... (`PerHorizon`);
* `horizon_rule(rule)`: Bartlett (or another kernel) with L_h lags that grow with the horizon,
  at least h, since the horizon-h error is a moving average of order h at least when the
  regressors do not absorb the serial correlation (`HorizonRule`; the rules are common practice);
* `lag_augmented(extra, kind)`: the projections refitted with `extra` more lags of every
  variable and heteroskedasticity-robust errors, no HAC (`LagAugmented`; Montiel Olea &
  Plagborg-Moller 2021, conditions below).

Joint covariance across horizons. The shock coefficient's influence series of every horizon,
z_{h,t} = [M_h g_{h,t}]_shock, side by side on the stacked index with zeros where a horizon has no
observation (`LocalProjections.shock_series`, taken from `lagwise.stack` of the fits), as a moment
model with the identity influence map: any estimator of S applied to it gives
Cov(beta_h, beta_h') = sum over the pairs of rows both horizons have of k((t-s)/b) z_{h,t} z_{h',s}
(HC0: the rows both have). The bands keep each horizon's own variance (the estimator applied to
that horizon's fit) and take the correlations R from the stacked series under the estimator's
joint version: the same estimator when its tuning value does not depend on the horizon; the
largest of the horizons' bandwidths (lags) for a bandwidth rule or the horizon rule; EWC with
B = floor(0.4 T_s^(2/3)) cosines of the stacked length T_s when B follows the LLSW rule; HC2 and
HC3 take HC0's correlations (their leverage factors differ by horizon; each variance keeps its
own). A joint matrix that is not positive semi-definite (truncated, Tukey-Hanning kernels) has
its negative eigenvalues set to zero, and this is flagged.

Sup-t band (Montiel Olea & Plagborg-Moller 2019, J. Applied Econometrics 34(1)): beta_h +- c se_h
with c the level-quantile of max_h |Z_h|, Z ~ N(0, R), simulated with a seeded generator; under
EWC the draws follow its fixed-b law, t_h = L0_h / sqrt(mean_j Lj_h^2) with L0..LB iid N(0, R)
(Lazarus, Lewis, Stock & Watson 2018). The true value lies between the pointwise and the
Bonferroni critical values; the simulated one is clipped to that interval (which can only reduce
its error), and both it and its Monte Carlo standard error are reported.

Lag augmentation: what is verified here is the published abstract of Montiel Olea &
Plagborg-Moller (2021, Econometrica 89(4), 1789-1823): "lag-augmented local projections with
normal critical values are asymptotically valid uniformly over (i) both stationary and
non-stationary data, and also over (ii) a wide range of response horizons. Moreover, lag
augmentation obviates the need to correct standard errors for serial correlation in the
regression residuals". The conditions as recalled, not checked against the paper's text [M]:
the data follow a VAR of finite order p0 in the variables whose lags are included, the
regression includes lags of all of them beyond p0 (their recommendation: one more lag than p0),
the innovations are serially independent in a sense stronger than a martingale difference
(conditionally mean-independent of past and future innovations) with enough moments, and the
horizon is small relative to T.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from ..covariance.kernels import KERNELS, get_kernel
from ..covariance.registry import Estimator, as_estimator, estimator as make_estimator
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..inference.sweep import Flip
from ..laws.fixedb import available as fixed_b_available, fixed_b_critical_value
from ..laws.reference import EWCLaw, Normal, normal_critical, t_critical
from .series import SeriesModel
from .stacked import stack

#: Default number of draws of the sup-t simulation (normal law) and its seed.
SUP_T_REPS = 100_000
SUP_T_EWC_REPS = 20_000
SUP_T_SEED = 20240601
#: The kinds of bands.
BAND_KINDS = ("pointwise", "sup-t", "bonferroni")


# =========================================================================== estimators

def lags_lagwise(h: int, n: int) -> int:
    """L_h = max(h, floor(4 (n_h/100)^(2/9))): at least the moving-average order h of the
    horizon-h error, and never fewer than the usual rule of thumb on the horizon's sample
    (common practice, not derived)."""
    return max(int(h), int(math.floor(4.0 * (n / 100.0) ** (2.0 / 9.0))))


def lags_statsmodels(h: int, n: int) -> int:
    """statsmodels 0.15 LocalProjections' default: max(h, ceil(4 (max(h, 1)/100)^(2/9))), the
    rule of thumb evaluated at h rather than at the sample size: max(h, 2) for h <= 100."""
    return max(int(h), int(math.ceil(4.0 * (max(h, 1) / 100.0) ** (2.0 / 9.0))))


#: Horizon rules: name -> (lag count L_h from (h, n_h), words).
HORIZON_RULES: dict[str, tuple[Callable[[int, int], int], str]] = {
    "lagwise": (lags_lagwise, "max(h, floor(4 (n_h/100)^(2/9))) lags"),
    "statsmodels": (lags_statsmodels, "max(h, ceil(4 (max(h,1)/100)^(2/9))) lags, statsmodels' "
                                      "LocalProjections rule"),
}


class LPEstimator:
    """How the variance of each horizon's response is estimated (see the module docstring)."""

    short = ""

    def source(self, lp):
        """The projections whose estimates the bands are built around."""
        return lp

    def at(self, lp, h: int) -> Estimator:
        raise NotImplementedError

    def joint_estimator(self, lp, table) -> Estimator:
        raise NotImplementedError

    @property
    def label(self) -> str:
        raise NotImplementedError

    @property
    def assumes(self) -> str:
        raise NotImplementedError

    def settings(self) -> dict:
        raise NotImplementedError

    def script(self) -> str:
        """A Python expression that makes this estimator (for exported scripts)."""
        raise NotImplementedError

    def __eq__(self, other):
        return type(self) is type(other) and self.settings() == other.settings()

    def __hash__(self):
        return hash(repr(self.settings()))

    def __repr__(self):
        return f"<{self.label}>"


def _bandwidth_param(est: Estimator):
    """The name of the estimator's bandwidth parameter, or None."""
    return next((p.name for p in est.family.params if p.kind == "bandwidth"), None)


def _literal(value) -> str:
    return repr(value.item() if isinstance(value, np.generic) else value)


class PerHorizon(LPEstimator):
    """An engine estimator applied to each horizon's own fit."""

    def __init__(self, est: Estimator):
        self.est = as_estimator(est)

    def at(self, lp, h):
        return self.est

    def joint_estimator(self, lp, table):
        est = self.est
        name = _bandwidth_param(est)
        if name and isinstance(est.params.get(name), str):
            used = pd.to_numeric(table["bandwidth"], errors="coerce").to_numpy(dtype=float)
            top = float(np.nanmax(used)) if np.isfinite(used).any() else 1.0
            return est.with_params(**{name: max(top, 0.0)})
        return est

    @property
    def label(self):
        return self.est.label

    @property
    def short(self):
        return self.est.label

    @property
    def assumes(self):
        text = self.est.family.assumptions
        name = _bandwidth_param(self.est)
        if name and isinstance(self.est.params.get(name), str):
            text += " The bandwidth is chosen by the rule on each horizon's own fit."
        return text

    def settings(self):
        return {"estimator": "per-horizon", "name": self.est.name,
                "params": dict(self.est.params)}

    def script(self):
        params = ", ".join(f"{k}={_literal(v)}" for k, v in self.est.params.items())
        return f"lagwise.estimator({self.est.name!r}{', ' + params if params else ''})"


class HorizonRule(LPEstimator):
    """A kernel with a lag count that grows with the horizon (L_h >= h)."""

    def __init__(self, rule: str = "lagwise", kernel: str = "bartlett",
                 small_sample: bool = False):
        if rule not in HORIZON_RULES:
            raise SpecificationError(f"unknown horizon rule {rule!r}; choose one of "
                                     + ", ".join(HORIZON_RULES))
        if kernel not in KERNELS:
            raise SpecificationError(f"unknown kernel {kernel!r}; choose one of "
                                     + ", ".join(KERNELS))
        self.rule, self.kernel, self.small_sample = rule, kernel, bool(small_sample)

    def lags(self, h: int, n: int) -> int:
        return HORIZON_RULES[self.rule][0](h, n)

    def at(self, lp, h):
        n = lp.fits[h].nobs
        return make_estimator("kernel", kernel=self.kernel, bandwidth=float(self.lags(h, n) + 1),
                              small_sample=self.small_sample)

    def joint_estimator(self, lp, table):
        top = max(self.lags(h, f.nobs) for h, f in enumerate(lp.fits))
        return make_estimator("kernel", kernel=self.kernel, bandwidth=float(top + 1),
                              small_sample=self.small_sample)

    @property
    def label(self):
        k = get_kernel(self.kernel).label
        return f"{k}, horizon rule: {HORIZON_RULES[self.rule][1]}" + \
            (", T/(T-k)" if self.small_sample else "")

    @property
    def short(self):
        return f"{get_kernel(self.kernel).label}, lags by horizon ({self.rule})"

    @property
    def assumes(self):
        return ("The horizon-h error is serially correlated up to about h lags (a moving average "
                "of order h when the regressors do not absorb the serial correlation); the lag "
                f"count grows with h: {HORIZON_RULES[self.rule][1]} (common practice, not "
                "derived). Normal critical values; they are too small when the lag count is not "
                "small relative to n_h.")

    def settings(self):
        return {"estimator": "horizon-rule", "rule": self.rule, "kernel": self.kernel,
                "small_sample": self.small_sample}

    def script(self):
        extra = ", small_sample=True" if self.small_sample else ""
        return f"lagwise.horizon_rule({self.rule!r}, kernel={self.kernel!r}{extra})"


class LagAugmented(LPEstimator):
    """The projections with `extra` more lags of every variable, heteroskedasticity-robust
    errors (no HAC)."""

    KINDS = ("hc0", "hc1", "hc2", "hc3")

    def __init__(self, extra: int = 1, kind: str = "hc0"):
        if isinstance(extra, bool) or not isinstance(extra, (int, np.integer)) or extra < 0:
            raise SpecificationError(f"extra lags must be a whole number >= 0, got {extra!r}")
        if kind not in self.KINDS:
            raise SpecificationError(f"unknown heteroskedasticity-robust kind {kind!r}; choose "
                                     "one of " + ", ".join(self.KINDS))
        self.extra, self.kind = int(extra), kind

    def source(self, lp):
        return lp.augmented(self.extra)

    def at(self, lp, h):
        return make_estimator(self.kind)

    def joint_estimator(self, lp, table):
        return make_estimator(self.kind)

    @property
    def label(self):
        return f"lag-augmented {self.kind.upper()} (p + {self.extra} lags)"

    @property
    def short(self):
        return f"lag-augmented {self.kind.upper()}"

    @property
    def assumes(self):
        return ("Heteroskedasticity-robust errors without HAC, on the regression with "
                f"{self.extra} more lag(s) of every variable. Valid when the lags included go "
                "beyond the order of the VAR that generates the shock, the response and the "
                "controls, with serially independent innovations and horizons small relative to "
                "T; uniformly over persistent and non-stationary data (Montiel Olea & "
                "Plagborg-Moller 2021, Econometrica 89(4); conditions as recalled, not checked "
                "against the paper's text). The estimates are the augmented regression's.")

    def settings(self):
        return {"estimator": "lag-augmented", "extra": self.extra, "kind": self.kind}

    def script(self):
        return f"lagwise.lag_augmented(extra={self.extra}, kind={self.kind!r})"


def horizon_rule(rule: str = "lagwise", kernel: str = "bartlett",
                 small_sample: bool = False) -> HorizonRule:
    """Kernel HAC with a lag count that grows with the horizon: "lagwise" L_h = max(h,
    floor(4 (n_h/100)^(2/9))), "statsmodels" L_h = max(h, ceil(4 (max(h,1)/100)^(2/9)))."""
    return HorizonRule(rule, kernel, small_sample)


def lag_augmented(extra: int = 1, kind: str = "hc0") -> LagAugmented:
    """Lag-augmented local projections with heteroskedasticity-robust errors (Montiel Olea &
    Plagborg-Moller 2021): `extra` more lags of every variable, HC errors, normal critical
    values."""
    return LagAugmented(extra, kind)


def as_lp_estimator(est) -> LPEstimator:
    """An LP estimator from an engine estimator, an LP estimator, a name, or None (the lagwise
    horizon rule)."""
    if est is None:
        return HorizonRule()
    if isinstance(est, LPEstimator):
        return est
    if isinstance(est, str):
        if est == "horizon-rule":
            return HorizonRule()
        if est == "lag-augmented":
            return LagAugmented()
        return PerHorizon(make_estimator(est))
    if isinstance(est, Estimator):
        return PerHorizon(est)
    raise SpecificationError("pass an estimator made by lagwise.estimator(...), "
                             "lagwise.horizon_rule(...) or lagwise.lag_augmented(...)")


def lp_estimator_from_settings(record: dict) -> LPEstimator:
    """The inverse of `LPEstimator.settings()` (validated)."""
    if not isinstance(record, dict):
        raise SpecificationError("an estimator record must be a dictionary")
    kind = record.get("estimator")
    if kind == "horizon-rule":
        return HorizonRule(record.get("rule", "lagwise"), record.get("kernel", "bartlett"),
                           bool(record.get("small_sample", False)))
    if kind == "lag-augmented":
        return LagAugmented(record.get("extra", 1), record.get("kind", "hc0"))
    if kind == "per-horizon":
        params = record.get("params") or {}
        if not isinstance(params, dict):
            raise SpecificationError("estimator parameters must be a dictionary")
        return PerHorizon(make_estimator(str(record.get("name", "")), **params))
    raise SpecificationError(f"unknown local-projection estimator {kind!r}")


def default_estimators(lp) -> list[LPEstimator]:
    """The estimators compared by default: Newey-West with 2 lags at every horizon (a short fixed
    lag), the lagwise horizon rule, Bartlett with the Andrews (1991) bandwidth of each horizon,
    EWC (B by the LLSW rule on each horizon) and lag-augmented HC0."""
    return [PerHorizon(make_estimator("kernel", kernel="bartlett", lags=2)), HorizonRule(),
            PerHorizon(make_estimator("kernel", kernel="bartlett", bandwidth="andrews")),
            PerHorizon(make_estimator("ewc")), LagAugmented()]


# =========================================================================== pointwise

def irf_table(lp, lpest: LPEstimator, level: float = 0.90,
              reference: str = "auto") -> pd.DataFrame:
    """One row per horizon: the estimate and its pointwise band under `lpest` (each horizon's
    own fit and law). `.attrs`: estimator label, level, reference, laws, notes."""
    _check_level(level)
    src = lpest.source(lp)
    rows, laws, notes = [], [], []
    for h, fit in enumerate(src.fits):
        est = lpest.at(src, h)
        try:
            res = fit.infer(est, level=level, reference=reference)
        except LagwiseError as exc:
            raise type(exc)(f"horizon {h}: {exc}") from None
        r = res.table.loc[src.shock]
        crit = res.critical_value
        crit = float(np.ravel(crit)[fit.terms.index(src.shock)]) if np.ndim(crit) else \
            float(crit)
        law = res.law
        rows.append({"estimate": float(r["estimate"]), "std_error": float(r["std_error"]),
                     "t_stat": float(r["t_stat"]), "p_value": float(r["p_value"]),
                     "ci_low": float(r["ci_low"]), "ci_high": float(r["ci_high"]),
                     "critical_value": crit,
                     "bandwidth": np.nan if res.bandwidth is None else float(res.bandwidth),
                     "lags": np.nan if res.lags is None else float(res.lags),
                     "df": np.nan if law.df is None or np.ndim(law.df) else float(law.df),
                     "law": law.label, "nobs": fit.nobs})
        laws.append(law)
        for n in res.notes:
            if n not in notes:
                notes.append(n)
    out = pd.DataFrame(rows, index=pd.RangeIndex(len(rows), name="horizon"))
    out.attrs.update({"estimator": lpest.label, "level": level, "reference": reference,
                      "laws": laws, "notes": notes, "assumes": lpest.assumes})
    if not np.isfinite(out["std_error"]).all():
        bad = [int(h) for h in out.index[~np.isfinite(out["std_error"])]]
        out.attrs["notes"].append(f"no standard error at horizon(s) {bad} under this estimator "
                                  "(see the notes above); their bands are missing")
    return out


def _check_level(level) -> None:
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0 < level < 1:
        raise SpecificationError(f"level must be a number between 0 and 1, got {level!r}")


# =========================================================================== joint covariance

@dataclass
class JointCovariance:
    """The covariance of the responses across horizons under one estimator."""

    V: np.ndarray                  # (H+1) x (H+1): D R D
    R: np.ndarray                  # correlation matrix
    std_error: np.ndarray          # each horizon's own standard error (D)
    how: str
    law: object                    # the law of the joint maximum (Normal or EWCLaw)
    repaired: bool = False
    notes: list = field(default_factory=list)


def shock_series_of(fits, labels, shock: str, beta=None) -> SeriesModel:
    """The shock coefficient's influence series of several fits side by side on their joined
    index (from `lagwise.stack` of the fits; zero where a fit has no observation)."""
    st = stack(fits, labels=labels)
    rows = [st.terms.index(f"{lab}:{shock}") for lab in labels]
    z = st.working_contributions @ st.influence_map[rows].T
    beta = np.array([f.beta[f.terms.index(shock)] for f in fits]) if beta is None else beta
    return SeriesModel(z, np.eye(len(rows)), terms=list(labels), beta=beta, index=st.index,
                       df_resid=int(min(f.df_resid for f in fits)))


def _repair(v: np.ndarray) -> tuple[np.ndarray, bool]:
    v = 0.5 * (v + v.T)
    w, u = np.linalg.eigh(v)
    if w.min() >= -1e-12 * max(float(np.abs(w).max()), 1e-300):
        return v, False
    return (u * np.clip(w, 0.0, None)) @ u.T, True


def _joint_from_series(series, est: Estimator, se: np.ndarray, what: str) -> JointCovariance:
    notes = []
    try:
        lr = est.long_run(series)
        how = f"correlations from {est.label_for(lr)} on the stacked influence series"
    except LagwiseError as exc:
        fallback = make_estimator("hc0")
        lr = fallback.long_run(series)
        how = (f"correlations from HC0 on the stacked influence series ({est.label} is not "
               f"defined on it: {exc})")
        notes.append(how)
    vj = series.covariance_from_long_run(lr.S)
    vj, repaired = _repair(vj)
    d = np.sqrt(np.clip(np.diag(vj), 0.0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        r = vj / np.outer(d, d)
    r[~np.isfinite(r)] = 0.0
    np.fill_diagonal(r, 1.0)
    if repaired:
        notes.append("the joint estimate was not positive semi-definite; its negative "
                     "eigenvalues were set to zero")
    law = lr.law if isinstance(lr.law, EWCLaw) else Normal()
    se = np.asarray(se, dtype=float)
    v = r * np.outer(se, se)
    return JointCovariance(V=v, R=r, std_error=se, how=f"{what}: {how}", law=law,
                           repaired=repaired, notes=notes)


def joint_covariance(lp, lpest: LPEstimator, table: pd.DataFrame) -> JointCovariance:
    """D R D with D each horizon's own standard error (`table`) and R from the stacked
    influence series under the estimator's joint version (module docstring)."""
    src = lpest.source(lp)
    est = lpest.joint_estimator(src, table)
    return _joint_from_series(src.shock_series, est, table["std_error"].to_numpy(),
                              "each horizon's own variance")


# =========================================================================== sup-t

@dataclass
class SupT:
    """The sup-t critical value and how it was obtained."""

    value: float                   # used: raw clipped to [pointwise, Bonferroni]
    raw: float                     # the simulated quantile
    mc_se: float                   # Monte Carlo standard error of the raw quantile
    reps: int
    seed: int
    pointwise: float
    bonferroni: float
    law: str


def _max_abs_draws(r: np.ndarray, reps: int, rng, df: int | None, chunk: int = 20_000):
    n = r.shape[0]
    w, u = np.linalg.eigh(r)
    a = u * np.sqrt(np.clip(w, 0.0, None))             # R = A A' (a singular R works)
    out = np.empty(reps)
    for s in range(0, reps, chunk):
        m = min(chunk, reps - s)
        num = rng.standard_normal((m, n)) @ a.T
        if df is None:
            out[s: s + m] = np.abs(num).max(axis=1)
            continue
        den = np.zeros((m, n))
        for _ in range(int(df)):
            x = rng.standard_normal((m, n)) @ a.T
            den += x * x
        with np.errstate(divide="ignore", invalid="ignore"):
            t = num / np.sqrt(den / df)
        t[~np.isfinite(t)] = 0.0
        out[s: s + m] = np.abs(t).max(axis=1)
    return out


def quantile_with_error(draws: np.ndarray, level: float) -> tuple[float, float]:
    """The level-quantile of the draws and its Monte Carlo standard error from the
    distribution-free order-statistic interval, (x[k + d] - x[k - d]) / (2 x 1.96) with
    d = 1.96 sqrt(N p (1 - p))."""
    x = np.sort(draws)
    n = len(x)
    k = min(max(int(math.ceil(level * n)) - 1, 0), n - 1)
    d = int(math.ceil(1.96 * math.sqrt(n * level * (1.0 - level))))
    return float(x[k]), float((x[min(k + d, n - 1)] - x[max(k - d, 0)]) / (2 * 1.96))


def sup_t_critical_value(r, level: float = 0.90, reps: int | None = None,
                         seed: int = SUP_T_SEED, law=None) -> SupT:
    """Critical value of the sup-t band for the correlation matrix `r` (Montiel Olea &
    Plagborg-Moller 2019): the level-quantile of max_h |Z_h|, Z ~ N(0, r), or of max_h |t_h|
    under the EWC fixed-b law when `law` is an EWC law (t(B))."""
    _check_level(level)
    r = np.asarray(r, dtype=float)
    n = r.shape[0]
    df = int(law.df) if isinstance(law, EWCLaw) else None
    reps = int(reps or (SUP_T_REPS if df is None else SUP_T_EWC_REPS))
    if reps < 100:
        raise SpecificationError(f"the sup-t simulation needs at least 100 draws, got {reps}")
    rng = np.random.default_rng(seed)
    raw, mc = quantile_with_error(_max_abs_draws(r, reps, rng, df), level)
    alpha = 1.0 - level
    if df is None:
        point, bonf = normal_critical(level), normal_critical(1 - alpha / n)
        name = "normal"
    else:
        point, bonf = t_critical(level, df), t_critical(1 - alpha / n, df)
        name = f"EWC fixed-b law, B = {df}"
    return SupT(value=min(max(raw, point), bonf), raw=raw, mc_se=mc, reps=reps, seed=seed,
                pointwise=point, bonferroni=bonf, law=name)


class Bands(pd.DataFrame):
    """A DataFrame of bands indexed by horizon (estimate, std_error, critical_value, ci_low,
    ci_high); `.attrs` say how they were made."""

    @property
    def _constructor(self):
        return Bands


def pointwise_bands(lp, lpest: LPEstimator, level: float = 0.90, kind: str = "pointwise",
                    reference: str = "auto", reps: int | None = None,
                    seed: int = SUP_T_SEED, table: pd.DataFrame | None = None) -> Bands:
    """Pointwise, sup-t or Bonferroni bands (see `LocalProjections.bands`)."""
    if kind not in BAND_KINDS:
        raise SpecificationError(f"unknown band kind {kind!r}; use " + ", ".join(BAND_KINDS))
    t = irf_table(lp, lpest, level, reference) if table is None else table
    n = len(t)
    info = {"kind": kind, "level": level, "estimator": lpest.label, "reference": reference,
            "notes": list(t.attrs.get("notes", []))}
    if kind == "pointwise":
        c = t["critical_value"].to_numpy(dtype=float)
    elif kind == "bonferroni":
        adj = 1.0 - (1.0 - level) / n
        c = np.array([float(np.ravel(law.critical_value(adj))[0]) for law in t.attrs["laws"]])
        info["how"] = f"each horizon's law at level 1 - (1 - {level:g})/{n}"
    else:
        jc = joint_covariance(lp, lpest, t)
        st = sup_t_critical_value(jc.R, level, reps, seed, jc.law)
        c = np.full(n, st.value)
        laws = {law.label for law in t.attrs["laws"]}
        info.update({"sup_t": st, "how": jc.how, "repaired": jc.repaired, "joint": jc})
        info["notes"] += jc.notes
        if jc.law.label == "normal" and laws - {"normal"}:
            info["notes"].append(f"the pointwise laws are {', '.join(sorted(laws))}; the sup-t "
                                 "critical value is simulated under the normal law")
        if abs(st.value - st.raw) > 0:
            info["notes"].append(f"the simulated sup-t value {st.raw:.4f} was clipped to "
                                 f"[{st.pointwise:.4f}, {st.bonferroni:.4f}]")
    se = t["std_error"].to_numpy(dtype=float)
    est = t["estimate"].to_numpy(dtype=float)
    out = Bands({"estimate": est, "std_error": se, "t_stat": t["t_stat"].to_numpy(),
                 "critical_value": c, "ci_low": est - c * se, "ci_high": est + c * se,
                 "bandwidth": t["bandwidth"].to_numpy(), "lags": t["lags"].to_numpy(),
                 "df": t["df"].to_numpy(), "nobs": t["nobs"].to_numpy()}, index=t.index)
    out.attrs.update(info)
    return out


def significant(bands: pd.DataFrame) -> np.ndarray:
    """True where the band excludes zero (False where there is no band)."""
    lo, hi = bands["ci_low"].to_numpy(dtype=float), bands["ci_high"].to_numpy(dtype=float)
    return (lo > 0) | (hi < 0)


def runs_text(flags, index) -> str:
    """'0-3, 7, 9-10' for the positions marked True."""
    idx = [int(i) for i, f in zip(index, flags) if f]
    if not idx:
        return "none"
    parts, start = [], idx[0]
    for a, b in zip(idx, idx[1:] + [None]):
        if b != a + 1:
            parts.append(str(start) if start == a else f"{start}-{a}")
            start = b
    return ", ".join(parts)


def stop_horizon(flags) -> tuple[int | None, int | None]:
    """(first significant horizon, the horizon at which the response stops being significant:
    the first non-significant horizon after the first significant one; None when it never is,
    or never stops)."""
    flags = list(flags)
    if not any(flags):
        return None, None
    first = flags.index(True)
    for h in range(first, len(flags)):
        if not flags[h]:
            return first, h
    return first, None


def significance_table(lp, ests, level=0.90, kind="pointwise", reference="auto"):
    rows = []
    for e in ests:
        b = pointwise_bands(lp, e, level, kind, reference)
        sig = significant(b)
        first, stop = stop_horizon(sig)
        rows.append({"estimator": e.label, "significant_at": runs_text(sig, b.index),
                     "first_significant": first, "stops_at": stop,
                     "horizons_significant": int(sig.sum()), "assumes": e.assumes})
    out = pd.DataFrame(rows)
    for col in ("first_significant", "stops_at"):
        out[col] = pd.array([r[col] for r in rows], dtype="Int64")
    out.attrs.update({"level": level, "kind": kind})
    return out


# =========================================================================== sweep

@dataclass
class LPSweep:
    """Every horizon's standard error and t statistic along the bandwidth for several kernels:
    arrays (kernels, bandwidths, horizons)."""

    kernels: list
    labels: list
    bandwidths: np.ndarray
    estimate: np.ndarray           # (H+1,)
    std_error: np.ndarray          # (nk, nb, H+1)
    t_stat: np.ndarray
    status: np.ndarray             # (nk, nb) "" or a status of the stacked estimate
    nobs: np.ndarray               # (H+1,)
    small_sample: bool = False

    @property
    def horizons(self) -> np.ndarray:
        return np.arange(len(self.estimate))

    def critical_values(self, level: float = 0.90, fixed_b: bool = False) -> np.ndarray:
        """(nk, nb, H+1): normal critical values, or with `fixed_b` the fixed-b values at
        b/n_h of each horizon (NaN where the kernel has no table or b/n_h is beyond it)."""
        _check_level(level)
        shape = self.std_error.shape
        if not fixed_b:
            return np.full(shape, normal_critical(level))
        out = np.full(shape, np.nan)
        for i, k in enumerate(self.kernels):
            if not fixed_b_available(k):
                continue
            for j, b in enumerate(self.bandwidths):
                for h, n in enumerate(self.nobs):
                    try:
                        out[i, j, h] = fixed_b_critical_value(k, float(b) / n, level)
                    except LagwiseError:
                        pass
        return out

    def rejects(self, level: float = 0.90, fixed_b: bool = False):
        """(rejects, valid), each (nk, nb, H+1)."""
        cv = self.critical_values(level, fixed_b)
        t = np.abs(self.t_stat)
        valid = np.isfinite(t) & np.isfinite(cv)
        return np.where(valid, t > np.where(valid, cv, 0.0), False), valid

    def flips(self, level: float = 0.90, fixed_b: bool = False) -> list[Flip]:
        """One Flip (runs of equal conclusions along b) per kernel and horizon."""
        rej, valid = self.rejects(level, fixed_b)
        law = "fixed-b" if fixed_b else "normal"
        out = []
        for i, lab in enumerate(self.labels):
            for h in self.horizons:
                out.append(Flip(f"h = {h}", lab, "b", level, law, self.bandwidths,
                                rej[i, :, h], valid[i, :, h]))
        return out

    def flip_table(self, level: float = 0.90, fixed_b: bool = False) -> pd.DataFrame:
        """The compact view: for each horizon (rows) and kernel (columns), where along b the
        response is significant: 'every b', 'no b', 'b < 7', 'b >= 12', or the runs."""
        rej, valid = self.rejects(level, fixed_b)
        b = self.bandwidths
        data = {}
        for i, lab in enumerate(self.labels):
            data[lab] = [_flip_words(b, rej[i, :, h], valid[i, :, h]) for h in self.horizons]
        out = pd.DataFrame(data, index=pd.RangeIndex(len(self.horizons), name="horizon"))
        out.attrs.update({"level": level, "law": "fixed-b" if fixed_b else "normal",
                          "bandwidths": f"b = {b[0]:g}..{b[-1]:g}"})
        return out

    def t_table(self, kernel=0) -> pd.DataFrame:
        """t statistics of one kernel: horizons by bandwidths."""
        i = kernel if isinstance(kernel, (int, np.integer)) else self._kernel_index(kernel)
        return pd.DataFrame(self.t_stat[i].T, index=pd.RangeIndex(len(self.horizons),
                                                                  name="horizon"),
                            columns=pd.Index(self.bandwidths, name="b"))

    def _kernel_index(self, name) -> int:
        for names in (self.kernels, self.labels):
            if name in names:
                return names.index(name)
        raise SpecificationError(f"no kernel {name!r} in this sweep; kernels are "
                                 + ", ".join(self.kernels))


def _flip_words(b, rej, valid) -> str:
    ok = valid
    if not ok.any():
        return "no standard error"
    r = rej[ok]
    bb = b[ok]
    if r.all():
        return "every b"
    if not r.any():
        return "no b"
    first_change = int(np.argmax(r != r[0]))
    if (r[first_change:] == r[first_change]).all():
        edge = bb[first_change]
        return f"b < {edge:g}" if r[0] else f"b >= {edge:g}"
    return "b in " + runs_text(r, bb.astype(int) if np.allclose(bb, np.round(bb)) else bb)


def sweep_horizons(lp, kernels=None, bandwidths=None, small_sample=False) -> LPSweep:
    """Every horizon's standard error along the bandwidth for every kernel: the engine's kernel
    sweep of the stacked shock influence series (one autocovariance cache per horizon's series;
    its diagonal is each horizon's own kernel variance, exactly). Kernels that are not PSD are
    not repaired here (a negative variance has no standard error and is flagged)."""
    kernels = list(KERNELS) if kernels is None else \
        ([kernels] if isinstance(kernels, str) else list(kernels))
    for k in kernels:
        get_kernel(k)
    b = np.arange(1.0, 41.0) if bandwidths is None else np.asarray(list(bandwidths), float)
    if b.ndim != 1 or not len(b) or not np.isfinite(b).all() or (b < 0).any():
        raise SpecificationError("bandwidths must be non-negative numbers")
    series = lp.shock_series
    sw = series.sweep(kernels=kernels, bandwidths=b, repair=False)
    se = sw.std_error.copy()
    nobs = lp.nobs
    if small_sample:
        k = len(lp.terms)
        se = se * np.sqrt(nobs / (nobs - k))[None, None, :]
    est = lp.estimates.to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(se > 0, est[None, None, :] / se, np.nan)
    return LPSweep(kernels=kernels, labels=[get_kernel(k).label for k in kernels],
                   bandwidths=b, estimate=est, std_error=se, t_stat=t, status=sw.status,
                   nobs=nobs, small_sample=bool(small_sample))


# =========================================================================== cumulative, ratio

def cumulative_table(lp, lpest: LPEstimator, level=0.90, reference="auto") -> pd.DataFrame:
    """C_h = beta_0 + ... + beta_h, Var(C_h) = 1' V_{0:h,0:h} 1 from the joint covariance; the
    band refers C_h / se to the joint law (normal, or t(B) under EWC)."""
    t = irf_table(lp, lpest, level, reference)
    jc = joint_covariance(lp, lpest, t)
    n = len(t)
    low = np.tril(np.ones((n, n)))
    c = low @ t["estimate"].to_numpy()
    v = low @ jc.V @ low.T
    se = np.sqrt(np.clip(np.diag(v), 0.0, None))
    cv = float(np.ravel(jc.law.critical_value(level))[0])
    with np.errstate(invalid="ignore", divide="ignore"):
        tt = np.where(se > 0, c / se, np.nan)
    out = pd.DataFrame({"estimate": c, "std_error": se, "t_stat": tt, "ci_low": c - cv * se,
                        "ci_high": c + cv * se, "critical_value": cv}, index=t.index)
    out.attrs.update({"estimator": lpest.label, "level": level, "how": jc.how,
                      "law": jc.law.label, "covariance": v})
    return out


def multiplier_table(num, den, lpest: LPEstimator, level=0.90, reference="auto"):
    """m_h = C^num_h / C^den_h with the delta-method band and the Fieller (1954) set."""
    if num.H != den.H:
        raise SpecificationError(f"both projections need the same horizons (H = {num.H} and "
                                 f"H = {den.H})")
    if num.shock != den.shock:
        raise SpecificationError(f"both projections need the same shock ({num.shock!r} and "
                                 f"{den.shock!r})")
    sn, sd = lpest.source(num), lpest.source(den)
    tn, td = irf_table(num, lpest, level, reference), irf_table(den, lpest, level, reference)
    n = num.H + 1
    fits = list(sn.fits) + list(sd.fits)
    labels = [f"num{h}" for h in range(n)] + [f"den{h}" for h in range(n)]
    series = shock_series_of(fits, labels, sn.shock)
    both = pd.concat([tn, td], ignore_index=True)
    est = lpest.joint_estimator(sn, both)
    jc = _joint_from_series(series, est, both["std_error"].to_numpy(), "each horizon's own "
                            "variance")
    low = np.tril(np.ones((n, n)))
    t2 = np.block([[low, np.zeros_like(low)], [np.zeros_like(low), low]])
    v = t2 @ jc.V @ t2.T
    cn, cd = low @ tn["estimate"].to_numpy(), low @ td["estimate"].to_numpy()
    cv = float(np.ravel(jc.law.critical_value(level))[0])
    rows = []
    for h in range(n):
        vnn, vdd, vnd = v[h, h], v[n + h, n + h], v[h, n + h]
        m = cn[h] / cd[h] if cd[h] != 0 else np.nan
        var = (vnn - 2 * m * vnd + m * m * vdd) / cd[h] ** 2 if cd[h] != 0 else np.nan
        se = math.sqrt(max(var, 0.0)) if np.isfinite(var) else np.nan
        a = cd[h] ** 2 - cv ** 2 * vdd
        bq = -2 * (cn[h] * cd[h] - cv ** 2 * vnd)
        c0 = cn[h] ** 2 - cv ** 2 * vnn
        disc = bq * bq - 4 * a * c0
        if a > 0 and disc >= 0:
            r = math.sqrt(disc)
            lo, hi, shape = (-bq - r) / (2 * a), (-bq + r) / (2 * a), "bounded"
        elif a < 0 and disc > 0:
            r = math.sqrt(disc)
            lo, hi = sorted([(-bq - r) / (2 * a), (-bq + r) / (2 * a)])
            shape = "outside the interval"
        else:
            lo, hi, shape = -math.inf, math.inf, "whole line"
        rows.append({"cumulative_num": cn[h], "cumulative_den": cd[h], "multiplier": m,
                     "std_error": se, "ci_low": m - cv * se, "ci_high": m + cv * se,
                     "fieller_low": lo, "fieller_high": hi, "fieller_set": shape})
    out = pd.DataFrame(rows, index=pd.RangeIndex(n, name="horizon"))
    out.attrs.update({"estimator": lpest.label, "level": level, "how": jc.how,
                      "note": "the delta-method band needs a denominator far from zero; the "
                              "Fieller set stays valid when it is not ('outside the interval': "
                              "every value below fieller_low or above fieller_high)"})
    return out


# =========================================================================== bootstrap

def bootstrap_bands(lp, lpest: LPEstimator, level=0.90, scheme="block", reps=2000,
                    block=None, seed=SUP_T_SEED, progress=None) -> Bands:
    """Bootstrap critical values (pointwise for each horizon and sup-t over the horizons) from
    the stacked influence series: a multiplier bootstrap of the linearised estimator, no
    refitting. "block": moving blocks of rows (Kunsch 1989, Ann. Statist. 17(3); block length
    default ceil(T_s^(1/3)), common practice), valid for weakly dependent series when the block
    grows with T; "wild": Rademacher multipliers per row, valid when the influence series is
    serially uncorrelated (the lag-augmented regression under its conditions). The draws are
    studentised by their exact bootstrap variance; the band is estimate +- c x the estimator's
    standard error. progress(done, total) is called after each chunk of draws. It does not
    correct the small-sample bias of long-horizon estimates."""
    _check_level(level)
    if scheme not in ("block", "wild"):
        raise SpecificationError(f"unknown bootstrap scheme {scheme!r}; use block or wild")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 100:
        raise SpecificationError(f"the bootstrap needs at least 100 draws, got {reps!r}")
    t = irf_table(lp, lpest, level)
    src = lpest.source(lp)
    z = src.shock_series.working_contributions
    nrow, n = z.shape
    rng = np.random.default_rng(seed)
    maxes, each = np.empty(reps), np.empty((reps, n))
    chunk = 250
    if scheme == "block":
        size = int(block) if block is not None else int(math.ceil(nrow ** (1.0 / 3.0)))
        if not 1 <= size <= nrow:
            raise SpecificationError(f"the block length must be between 1 and {nrow}, got "
                                     f"{block!r}")
        cs = np.vstack([np.zeros((1, n)), np.cumsum(z, axis=0)])
        sums = cs[size:] - cs[: nrow - size + 1]
        nblocks = int(math.ceil(nrow / size))
        mean = sums.mean(axis=0)
        var = nblocks * sums.var(axis=0)
        how = f"moving-block bootstrap, blocks of {size} rows, {nblocks} blocks per draw"
    else:
        var = (z * z).sum(axis=0)
        how = "wild bootstrap, Rademacher multipliers per row"
    if not (var > 0).all():
        raise EstimationError("an influence series is zero: the bootstrap has nothing to draw")
    for s in range(0, reps, chunk):
        m = min(chunk, reps - s)
        if scheme == "block":
            idx = rng.integers(0, nrow - size + 1, size=(m, nblocks))
            tot = sums[idx].sum(axis=1) - nblocks * mean
        else:
            tot = rng.choice(np.array([-1.0, 1.0]), size=(m, nrow)) @ z
        tt = np.abs(tot / np.sqrt(var))
        each[s: s + m] = tt
        maxes[s: s + m] = tt.max(axis=1)
        if progress is not None:
            progress(s + m, reps)
    c_sup, mc = quantile_with_error(maxes, level)
    c_point = np.array([quantile_with_error(each[:, j], level)[0] for j in range(n)])
    se = t["std_error"].to_numpy()
    est = t["estimate"].to_numpy()
    out = Bands({"estimate": est, "std_error": se, "critical_value": c_point,
                 "ci_low": est - c_point * se, "ci_high": est + c_point * se,
                 "sup_t_critical_value": c_sup, "sup_t_low": est - c_sup * se,
                 "sup_t_high": est + c_sup * se, "nobs": t["nobs"].to_numpy()}, index=t.index)
    out.attrs.update({"kind": "bootstrap", "how": how, "reps": reps, "seed": seed,
                      "sup_t_mc_se": mc, "estimator": lpest.label, "level": level,
                      "note": "a multiplier bootstrap of the linearised estimates: it does not "
                              "correct their small-sample bias"})
    return out
