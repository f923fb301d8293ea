"""Linear factor models: N assets' excess returns on K factors as one moment model.

`fit_factor_model(data, assets, factors, risk_free=...)` runs N time-series regressions
r_it = alpha_i + beta_i' f_t + e_it (least squares, each asset on the periods where it is
observed) and joins them with `lagwise.stack` (engine.models.stacked): a `FactorModel` IS a
stacked model whose members are the N least-squares fits. So its moment contributions are the
N(K+1) series x_t e_it (asset-major: the issue's (1, f_t')' kron e_t with its terms permuted),
side by side on the union of the assets' periods, zero where an asset is missing; its influence
map is block-diagonal ((X_i'X_i)^-1 per asset, in each fit's working basis), and
V = T M S M' with S per period of the common index (T its length). For an asset alone its block
is exactly its own regression's covariance under HC0 and every kernel when its periods are
consecutive in the common index; with gaps, lags are calendar lags on the common index (T
cancels: S carries 1/T, M each asset's own (X_i'X_i)^-1). Every time-series estimator family,
`infer`, `sweep`, `compare` and `significance_flip` apply unchanged. Coefficients are named
"asset:alpha" and "asset:factor".

On top of the stacked model:

* `alphas(est)`: the N alphas with standard errors, t, p and intervals under any estimator;
* `alpha_test(est, reference)`: the Wald test that all alphas are zero (engine.models.joint),
  refused when N >= T - K (the N x N covariance cannot be estimated with full rank);
* `joint_sweep(...)`: its p-value along the bandwidth for every kernel (along B for EWC, the
  order for VAR-HAC), from one autocovariance cache of the alphas' influence series;
* `grs()`: Gibbons, Ross & Shanken (1989), exact F(N, T - N - K) under iid normal errors, on the
  balanced subsample;
* `large_n_test()`: Pesaran & Yamagata (2024) for N >= T - K (classical t's; no N x N inverse).

Two choices are stated in every fit's notes: missing asset-periods keep each asset's own
sample (the balanced subsample is an option), and periods with a missing factor or risk-free
value are dropped for every asset (the factors are shared by all equations).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..covariance.kernels import KERNELS
from ..covariance.registry import estimator as make_estimator
from ..data.columns import INTERCEPT, SampleInfo, as_list, frame_and_meta, index_label
from ..data.dates import parse_dates
from ..data.table import Table
from ..errors import DataError, EstimationError, SpecificationError
from ..laws.reference import f_upper, normal_critical, normal_upper
from .joint import (JointSweep, JointTest, joint_sweep, joint_test_from,
                    restricted_inference, rule_landings)
from .ols import OLSFit, collinearity_message
from .stacked import StackedModel

#: The name of the intercept in a factor model: "asset:alpha".
ALPHA = "alpha"

GRS_ASSUMPTIONS = ("GRS is exact F(N, T - N - K) when the errors are iid multivariate normal "
                   "and independent of the factors (the statistic is conditional on the "
                   "factors); serially correlated or heteroskedastic errors are not covered")
PY_ASSUMPTIONS = ("Pesaran & Yamagata (2024): asymptotically N(0, 1), one-sided, as N and T "
                  "grow (N may exceed T); built from classical t statistics, so the errors are "
                  "taken to be serially uncorrelated with constant variance over time (they may "
                  "be non-normal and weakly cross-correlated); balanced panel")


class FactorModel(StackedModel):
    """N time-series regressions of excess returns on K factors as one stacked moment model
    (see the module docstring)."""

    kind = "factor model"
    df_reason = "each asset's own T_i - K - 1"

    def __init__(self, members, *, assets, factors, risk_free, returns, factor_values,
                 intro_notes, balanced, time=None, window=None):
        self.assets = list(assets)
        self.factors = list(factors)
        self.risk_free = risk_free
        self.balanced = balanced
        self.time = time                  # the column the periods came from (None: the index)
        self.window = window              # the sample window asked for (None: every period)
        self._intro = list(intro_notes)
        super().__init__(members, labels=self.assets)
        self.terms = [f"{a}:{ALPHA if t == INTERCEPT else t}"
                      for a, m in zip(self.assets, members) for t in m.terms]
        self.response = f"{len(self.assets)} assets"
        # opened as it is by lagwise.show (no table refit: the page has a factor-model mode)
        self.table = None
        self.loaded_from = None           # the LoadReport of the file read (exports cite it)
        #: excess returns (T x N, NaN where missing) and factors (T x K) on the common index
        self.returns = returns
        self.factor_values = factor_values

    @property
    def source_report(self):
        """The file the returns were read from (the model keeps no table: see `table`)."""
        return self.loaded_from

    # ------------------------------------------------------------------ description
    def _sample(self) -> SampleInfo:
        counts = np.array([len(r) for r in self.rows])
        info = SampleInfo(rows_available=self.nobs, rows_used=int(counts.sum()),
                          first=index_label(self.index[0]), last=index_label(self.index[-1]))
        info.notes.extend(self._intro)
        short = [(lab, int(c)) for lab, c in zip(self.labels, counts) if c < self.nobs]
        if short:
            listed = ", ".join(f"{lab} {c}" for lab, c in short[:8])
            more = f", and {len(short) - 8} more" if len(short) > 8 else ""
            info.notes.append(
                f"unbalanced: {int(self.nobs * len(counts) - counts.sum())} missing "
                f"asset-periods; each asset keeps its own sample (periods per asset below "
                f"T = {self.nobs}: {listed}{more}). The joint covariance uses zero moment "
                "contributions where an asset is missing, lags are calendar lags on the common "
                f"index, S is per period of the common index (1/T, T = {self.nobs}) and each "
                "asset's block uses its own (X_i'X_i)^-1, so a block equals the asset's own "
                "regression wherever its periods are consecutive")
            gaps = [lab for lab, r in zip(self.labels, self.rows)
                    if len(r) and (np.diff(r) > 1).any()]
            if gaps:
                info.notes.append("assets with gaps inside their sample ("
                                  + ", ".join(gaps[:5]) + (", ..." if len(gaps) > 5 else "")
                                  + "): their lags are counted in periods of the common index")
        info.notes.append(
            f"joint tests of the {len(self.assets)} alphas treat their N x N covariance under "
            "the chosen estimator as the truth behind a chi-square(N) (large-sample laws) or "
            "EWC's F law; GRS is the exact test under iid normal errors")
        return info

    # ------------------------------------------------------------------ names
    @property
    def alpha_terms(self) -> list[str]:
        return [f"{a}:{ALPHA}" for a in self.assets]

    @property
    def moment_names(self) -> list[str]:
        return [f"{lab}:{ALPHA if n == INTERCEPT else n}"
                for lab, m in zip(self.labels, self.members) for n in m.moment_names]

    @property
    def constant_moments(self) -> np.ndarray:
        """No moment is set aside by the bandwidth rules. In a regression the intercept's moment
        (e_t) is weighted 0 because its autocorrelation says nothing about the slopes; in a
        factor model the alphas are what is tested, and their influence runs mostly through
        e_it, whose autocorrelation the slope moments f_t e_it do not show when the factors are
        serially uncorrelated. So the Andrews and Newey-West rules weight every moment."""
        return np.zeros(self.m, dtype=bool)

    def across(self, term: str) -> list[str]:
        """The names of `term` ("alpha" or a factor) in every asset's equation."""
        if term != ALPHA and term not in self.factors:
            raise SpecificationError(f"no coefficient named {term!r}; terms are alpha, "
                                     + ", ".join(self.factors))
        return [f"{a}:{term}" for a in self.assets]

    @property
    def n_assets(self) -> int:
        return len(self.assets)

    @property
    def n_factors(self) -> int:
        return len(self.factors)

    @property
    def alpha(self) -> pd.Series:
        k1 = self.n_factors + 1
        return pd.Series(self.beta[::k1], index=pd.Index(self.assets, name="asset"),
                         name="alpha")

    @property
    def betas(self) -> pd.DataFrame:
        k1 = self.n_factors + 1
        b = self.beta.reshape(self.n_assets, k1)[:, 1:]
        return pd.DataFrame(b, index=pd.Index(self.assets, name="asset"), columns=self.factors)

    @property
    def nobs_per_asset(self) -> pd.Series:
        return pd.Series([len(r) for r in self.rows], index=pd.Index(self.assets, name="asset"),
                         name="periods")

    @property
    def r_squared_by_asset(self) -> pd.Series:
        return pd.Series([m.r_squared for m in self.members],
                         index=pd.Index(self.assets, name="asset"), name="r_squared")

    # ------------------------------------------------------------------ alphas
    def alphas(self, est, level: float = 0.95, reference: str = "auto") -> pd.DataFrame:
        """The alphas under `est`: estimate, std_error, t_stat, p_value, ci_low, ci_high,
        indexed by asset (each t referred to the estimator's law; Student t laws use each
        asset's own T_i - K - 1)."""
        return self.alpha_inference(est, level, reference).table(
            pd.Index(self.assets, name="asset"), level, self.k)

    def alpha_inference(self, est, level: float = 0.95, reference: str = "auto"):
        """The alphas' N x N covariance under `est` with its law, label and notes
        (engine.models.joint.RestrictedInference; `.table(...)` gives `alphas`)."""
        return restricted_inference(self, self.alpha_terms, est, level, reference)

    def check_joint_size(self, nobs: int | None = None, what: str = "the joint test of the "
                                                                      "alphas") -> None:
        """Refuse N >= T - K: a full-rank N x N covariance cannot be estimated from T periods
        (typed error naming N, T and K, and what to do instead)."""
        n, t, k = self.n_assets, self.nobs if nobs is None else nobs, self.n_factors
        if n >= t - k:
            raise SpecificationError(
                f"{what} needs fewer assets than periods minus factors (N < T - K): N = {n} "
                f"assets, T = {t} periods, K = {k} factors. Test a subset of the assets or a "
                "smaller set of portfolios, or use the large-N test (fm.large_n_test(), "
                "Pesaran & Yamagata 2024), which does not invert an N x N matrix")

    def alpha_test(self, est, reference: str = "auto", level: float = 0.95) -> JointTest:
        """The Wald test that all N alphas are zero under `est`, referred to the estimator's
        law for N restrictions: chi-square(N) (large-sample), F(N, B - N + 1) of the scaled
        statistic (EWC, needs B >= N), F(N, df) of W/N (Student t laws: the smallest T_i - K -
        1), fixed-b where the tables cover N <= 5 (refused otherwise)."""
        return self.alpha_test_from(self.alpha_inference(est, level, reference))

    def alpha_test_from(self, part) -> JointTest:
        """The joint alpha test from `alpha_inference(...)` already made."""
        self.check_joint_size()
        out = joint_test_from(self, part)
        out.notes.append(f"{self.n_assets} alphas on {self.n_factors} factors, T = {self.nobs}")
        return out

    def joint_sweep(self, estimators=None, values=None, reference: str = "auto") -> JointSweep:
        """The joint alpha test along the tuning axis of `estimators` (default: every kernel
        over the bandwidth grid); see engine.models.joint for the vectorised paths."""
        self.check_joint_size()
        if estimators is None:
            estimators = self.kernel_estimators()
        return joint_sweep(self, self.alpha_terms, estimators, values, reference)

    def kernel_estimators(self, **options) -> list:
        """One estimator of the model's kernel family per registered kernel (the joint chart's
        curves), with the same options (small_sample, repair, prewhiten)."""
        return [make_estimator(self.kernel_family, kernel=k, bandwidth=1.0, **options)
                for k in KERNELS]

    def rule_landings(self, estimators) -> list:
        """Where each automatic rule lands on each curve: (curve, key, title, value)."""
        return rule_landings(self, estimators)

    # ------------------------------------------------------------------ GRS and large N
    def balanced_arrays(self):
        """(excess returns T_b x N, factors T_b x K, periods) over the periods in which every
        asset is observed."""
        r = self.returns.to_numpy()
        rows = np.isfinite(r).all(axis=1)
        return r[rows], self.factor_values.to_numpy()[rows], self.index[rows]

    def grs(self) -> "GRSTest":
        """Gibbons, Ross & Shanken (1989) on the balanced subsample (alphas re-estimated there
        when the fit is unbalanced; the notes say so)."""
        r, f, periods = self.balanced_arrays()
        t_b = len(r)
        notes = []
        if t_b < self.nobs:
            notes.append(f"GRS uses the balanced subsample only: {t_b} of {self.nobs} periods "
                         "in which every asset is observed (alphas re-estimated there)")
        self.check_joint_size(t_b, "GRS")
        out = grs_test(r, f)
        out.notes = notes + out.notes
        return out

    def large_n_test(self, p: float = 0.05) -> "LargeNTest":
        """Pesaran & Yamagata (2024) on the balanced subsample; defined when N >= T - K too."""
        r, f, _ = self.balanced_arrays()
        out = pesaran_yamagata(r, f, p=p)
        if len(r) < self.nobs:
            out.notes.insert(0, f"balanced subsample: {len(r)} of {self.nobs} periods")
        return out

    def __repr__(self):
        return (f"FactorModel(assets={self.n_assets}, factors={self.factors}, T={self.nobs})")


# --------------------------------------------------------------------------- GRS

@dataclass
class GRSTest:
    """Gibbons, Ross & Shanken (1989): statistic, df = (N, T - N - K), p-value."""

    statistic: float
    df: tuple
    p_value: float
    nobs: int
    sharpe2_factors: float                 # mu' Omega^-1 mu (Omega with divisor T)
    notes: list[str] = field(default_factory=list)

    @property
    def assumptions(self) -> str:
        return GRS_ASSUMPTIONS

    def summary(self) -> str:
        p = "<0.001" if self.p_value < 0.001 else f"{self.p_value:.4g}"
        return (f"GRS = {self.statistic:.4g}, F({self.df[0]}, {self.df[1]}), p = {p} "
                f"(T = {self.nobs}); {GRS_ASSUMPTIONS}")

    def __str__(self):
        return self.summary()


def grs_test(returns, factors) -> GRSTest:
    """GRS from balanced excess returns (T x N) and factors (T x K):
    F = (T/N) ((T-N-K)/(T-K-1)) a' Sigma^-1 a / (1 + mu' Omega^-1 mu), Sigma = E'E/(T-K-1),
    Omega = the factors' covariance with divisor T; F(N, T-N-K) (REFERENCES.md section 21)."""
    r = np.asarray(returns, dtype=float)
    f = np.asarray(factors, dtype=float)
    t_obs, n = r.shape
    k = f.shape[1]
    if n >= t_obs - k:
        raise SpecificationError(f"GRS needs N < T - K: N = {n} assets, T = {t_obs} periods, "
                                 f"K = {k} factors")
    x = np.column_stack([np.ones(t_obs), f])
    q, rr = np.linalg.qr(x)
    coef = sla.solve_triangular(rr, q.T @ r)
    coef += sla.solve_triangular(rr, q.T @ (r - x @ coef))       # one refinement step
    e = r - x @ coef
    a = coef[0]
    sigma = e.T @ e / (t_obs - k - 1)
    mu = f.mean(axis=0)
    fd = f - mu
    omega = fd.T @ fd / t_obs
    sh2 = float(mu @ np.linalg.solve(omega, mu))
    try:
        quad = float(a @ sla.cho_solve(sla.cho_factor(sigma), a))
    except np.linalg.LinAlgError:
        raise EstimationError("the residual covariance of the assets is singular (an asset is "
                              "a combination of others and the factors): GRS is not "
                              "defined") from None
    stat = (t_obs / n) * ((t_obs - n - k) / (t_obs - k - 1)) * quad / (1.0 + sh2)
    df = (n, t_obs - n - k)
    return GRSTest(stat, df, float(f_upper(stat, *df)), t_obs, sh2, notes=[GRS_ASSUMPTIONS])


# --------------------------------------------------------------------------- large N

@dataclass
class LargeNTest:
    """Pesaran & Yamagata (2024) J_alpha: standardised sum of squared classical alpha t's."""

    statistic: float
    p_value: float
    rho2_bar: float
    threshold: float
    nobs: int
    n_assets: int
    notes: list[str] = field(default_factory=list)

    def summary(self) -> str:
        p = "<0.001" if self.p_value < 0.001 else f"{self.p_value:.4g}"
        return (f"Pesaran-Yamagata J = {self.statistic:.4g}, one-sided p = {p} (N = "
                f"{self.n_assets}, T = {self.nobs}); {PY_ASSUMPTIONS}")


def pesaran_yamagata(returns, factors, p: float = 0.05) -> LargeNTest:
    """J_alpha of Pesaran & Yamagata (2024, J. Financial Econometrics 22(2), 407-460):
    J = N^-1/2 sum_i (t_i^2 - v/(v-2)) / [(v/(v-2)) sqrt(2 (v-1)/(v-4) (1 + (N-1) rho2_bar))],
    v = T - K - 1, t_i the classical t of alpha_i, rho2_bar the average over pairs of the squared
    residual correlations with v rho_ij^2 >= Phi^-1(1 - p_N/2)^2, p_N = p / (N - 1). One-sided:
    reject for large J. Needs v > 4 and N >= 2; defined whether or not N exceeds T."""
    r = np.asarray(returns, dtype=float)
    f = np.asarray(factors, dtype=float)
    t_obs, n = r.shape
    k = f.shape[1]
    v = t_obs - k - 1
    if v <= 4 or n < 2:
        raise SpecificationError(f"the Pesaran-Yamagata test needs T - K - 1 > 4 and N >= 2 "
                                 f"(T = {t_obs}, K = {k}, N = {n})")
    x = np.column_stack([np.ones(t_obs), f])
    q, rr = np.linalg.qr(x)
    coef = sla.solve_triangular(rr, q.T @ r)
    e = r - x @ coef
    ssr = (e**2).sum(axis=0)
    if (ssr <= 0).any():
        raise EstimationError("an asset is fitted exactly by the factors: its t statistic is "
                              "not defined")
    c00 = float(np.linalg.inv(x.T @ x)[0, 0])
    t2 = coef[0] ** 2 / (ssr / v * c00)
    sd = np.sqrt(ssr)
    corr = (e.T @ e) / np.outer(sd, sd)
    iu = np.triu_indices(n, 1)
    rho2 = corr[iu] ** 2
    theta = normal_critical(1 - p / (n - 1)) ** 2
    rho2_bar = float(rho2[v * rho2 >= theta].sum() * 2 / (n * (n - 1)))
    ratio = v / (v - 2)
    num = (t2 - ratio).sum() / np.sqrt(n)
    den = ratio * np.sqrt(2 * (v - 1) / (v - 4) * (1 + (n - 1) * rho2_bar))
    stat = float(num / den)
    return LargeNTest(stat, float(normal_upper(stat)), rho2_bar, theta, t_obs, n,
                      notes=[PY_ASSUMPTIONS, "threshold constants p = 0.05, p_N = p/(N-1) as "
                             "in the authors' reference implementation"])


# --------------------------------------------------------------------------- fitting

def _numeric(frame, col, non_numeric, what):
    if col not in frame.columns:
        raise SpecificationError(f"no column named '{col}' for the {what}; available: "
                                 + ", ".join(map(str, list(frame.columns)[:20])))
    s = frame[col]
    if col in non_numeric or not pd.api.types.is_numeric_dtype(s) \
            or pd.api.types.is_bool_dtype(s):
        example = non_numeric.get(col)
        if example is None:
            nonnull = s.dropna()
            example = nonnull.iloc[0] if len(nonnull) else None
        example = example.item() if isinstance(example, np.generic) else example
        raise DataError(f"{what} column '{col}' is not numeric (it holds values such as "
                        f"{example!r})")
    values = s.to_numpy(dtype=float)
    if np.isinf(values).any():
        raise DataError(f"{what} column '{col}' contains infinite values")
    return values


def _time_index(table, frame, time):
    """The frame indexed by the `time` column (a numeric column, or a label column of the
    table), checked for repeated periods."""
    if time is None:
        index = frame.index
    else:
        if time in frame.columns:
            index = pd.Index(frame[time].to_numpy(), name=time)
        elif table is not None and table.labels is not None and time in table.labels.columns:
            raw = table.labels[time]
            parsed = parse_dates(raw.astype(str))
            index = pd.Index(parsed.to_numpy() if parsed is not None else raw.astype(str)
                             .to_numpy(), name=time)
        else:
            raise SpecificationError(f"no column named '{time}' for the time index")
        if index.hasnans:
            raise DataError(f"time column '{time}' has {int(index.isna().sum())} missing "
                            "value(s)")
        frame = frame.set_axis(index, axis=0)
    dup = index.duplicated(keep="first")
    if dup.any():
        firsts = list(dict.fromkeys(index[dup]))
        shown = ", ".join(str(index_label(x)) for x in firsts[:3])
        raise DataError(f"the time index has {int(dup.sum())} duplicated period(s), e.g. "
                        f"{shown}: each period must appear once (a factor model is one time "
                        "series per asset; aggregate or drop the duplicates)")
    try:
        ordered = index.is_monotonic_increasing
    except TypeError:
        ordered = True
    if not ordered:
        frame = frame.sort_index()
    return frame


def _window(frame, sample):
    if sample is None:
        return frame, 0
    try:
        start, end = sample
        used = frame.loc[start:end]
    except (TypeError, KeyError, ValueError) as exc:
        raise SpecificationError(f"sample window {sample!r} does not match the index: {exc}") \
            from None
    return used, len(frame) - len(used)


def _check_factors(f, factors):
    spread = f.max(axis=0) - f.min(axis=0)
    if (spread == 0).any():
        j = int(np.flatnonzero(spread == 0)[0])
        raise SpecificationError(f"factor '{factors[j]}' is constant ({f[0, j]:g}) over the "
                                 "sample: it duplicates the alpha (the intercept). Remove it.")
    x = np.column_stack([np.ones(len(f)), f])
    norms = np.abs(x).max(axis=0)
    _, r, piv = sla.qr(x / norms, mode="economic", pivoting=True)
    d = np.abs(np.diag(r))
    rank = int(np.sum(d > 1e-10 * d[0]))
    if rank < x.shape[1]:
        raise SpecificationError(collinearity_message(r, piv, rank, [ALPHA] + list(factors))
                                 .replace("regressors are collinear", "the factors are "
                                          "collinear"))


def fit_factor_model(data, assets, factors, time: str | None = None,
                     risk_free: str | None = None, sample=None,
                     balanced: bool = False) -> FactorModel:
    """N time-series regressions of excess returns on a constant and K factors, as one moment
    model (a stacked model; see engine.models.factors).

    data: a Table or a DataFrame, one row per period. assets: the test assets' columns (a list
    or "a,b,c"); factors: the factor columns; time: a column holding the periods (default: the
    table's index, e.g. its date column); risk_free: a column subtracted from every asset (None:
    the assets are excess returns already); sample: (start, end) labels of the index, both
    included; balanced: keep only the periods in which every asset is observed (otherwise each
    asset keeps its own sample, and the notes list the counts)."""
    table, frame, non_numeric, _ = frame_and_meta(data)
    assets, factors = as_list(assets), as_list(factors)
    if len(assets) < 2:
        one = f" ('{assets[0]}')" if assets else ""
        raise SpecificationError(f"a factor model needs at least two assets; got "
                                 f"{len(assets)}{one}. For a single asset fit one regression "
                                 "(lagwise.fit_ols) and use its alpha's t statistic")
    if not factors:
        raise SpecificationError("choose at least one factor")
    for names, what in ((assets, "asset"), (factors, "factor")):
        if len(set(names)) < len(names):
            dup = next(a for a in names if names.count(a) > 1)
            raise SpecificationError(f"{what} '{dup}' is listed twice")
    both = [a for a in assets if a in factors]
    if both:
        raise SpecificationError(f"'{both[0]}' is both an asset and a factor")
    if risk_free is not None and (risk_free in assets or risk_free in factors):
        raise SpecificationError(f"the risk-free column '{risk_free}' is also an asset or a "
                                 "factor")
    for a in assets:
        if ":" in a or not a:
            raise SpecificationError(f"asset name {a!r} must be non-empty and without ':' (it "
                                     "prefixes the coefficient names, as in 'asset:alpha')")
    if time is not None and (time in assets or time in factors or time == risk_free):
        raise SpecificationError(f"'{time}' is the time column; it cannot also be an asset, a "
                                 "factor or the risk-free rate")
    frame = _time_index(table, frame, time)
    used, outside = _window(frame, sample)
    if len(used) == 0:
        raise SpecificationError("no periods in the sample window")
    fac = np.column_stack([_numeric(used, c, non_numeric, "factor") for c in factors])
    rf = None if risk_free is None else _numeric(used, risk_free, non_numeric, "risk-free")
    ret = np.column_stack([_numeric(used, a, non_numeric, "asset") for a in assets])
    for j, c in enumerate(factors):
        if np.isnan(fac[:, j]).all():
            raise DataError(f"factor column '{c}' has no values (every cell is missing)")
    if rf is not None and np.isnan(rf).all():
        raise DataError(f"risk-free column '{risk_free}' has no values")
    shared = np.isfinite(fac).all(axis=1) & (True if rf is None else np.isfinite(rf))
    notes = []
    if outside:
        notes.append(f"{outside} periods outside the sample window left out")
    if not shared.all():
        keep = np.flatnonzero(shared)
        interior = int((~shared[keep[0]: keep[-1] + 1]).sum()) if keep.size else 0
        what = "a factor" + (" or the risk-free rate" if rf is not None else "")
        notes.append(f"{int((~shared).sum())} periods with a missing value of {what} dropped "
                     "for every asset (the factors are shared by all equations)"
                     + (f"; {interior} of them inside the sample, so the remaining periods are "
                        "treated as consecutive by the lag-based estimators" if interior else ""))
    excess = ret[shared] - (0.0 if rf is None else rf[shared][:, None])
    fac = fac[shared]
    index = used.index[shared]
    observed = np.isfinite(excess)
    empty = ~observed.any(axis=0)
    if empty.any():
        a = assets[int(np.flatnonzero(empty)[0])]
        raise DataError(f"asset column '{a}' has no values in the periods where the factors"
                        + (" and the risk-free rate" if rf is not None else "")
                        + " are observed (every cell is missing)")
    if balanced:
        rows = observed.all(axis=1)
        if not rows.any():
            raise SpecificationError("no period has every asset observed: the balanced "
                                     "subsample is empty")
        dropped = int((~rows).sum())
        notes.append(f"balanced subsample: {dropped} of {len(rows)} periods dropped because "
                     "some asset is missing in them" if dropped else
                     "balanced subsample requested: no period had a missing asset")
        if dropped:
            keep = np.flatnonzero(rows)
            inside = int((~rows[keep[0]: keep[-1] + 1]).sum())
            if inside:
                notes.append(f"{inside} of the dropped periods are inside the sample; the "
                             "remaining periods are treated as consecutive")
        excess, fac, index, observed = excess[rows], fac[rows], index[rows], observed[rows]
    any_obs = observed.any(axis=1)
    excess, fac, index, observed = (excess[any_obs], fac[any_obs], index[any_obs],
                                    observed[any_obs])
    k = len(factors)
    _check_factors(fac, factors)
    n_i = observed.sum(axis=0)
    few = np.flatnonzero(n_i <= k + 1)
    if few.size:
        i = int(few[0])
        raise SpecificationError(f"asset '{assets[i]}' has {int(n_i[i])} observed periods for "
                                 f"{k + 1} coefficients: it needs more than {k + 1}")
    x = np.column_stack([np.ones(len(fac)), fac])
    members = []
    for i, a in enumerate(assets):
        rows = observed[:, i]
        y = excess[rows, i]
        if np.ptp(y) == 0:
            raise SpecificationError(f"asset '{a}' has a constant excess return ({y[0]:g}): "
                                     "nothing to explain")
        idx = index[rows]
        info = SampleInfo(rows_available=len(index), rows_used=int(rows.sum()),
                          dropped_missing=int((~rows).sum()),
                          first=index_label(idx[0]), last=index_label(idx[-1]))
        try:
            members.append(OLSFit(X=np.ascontiguousarray(x[rows]), y=np.ascontiguousarray(y),
                                  terms=[INTERCEPT] + factors, index=idx, response=a,
                                  sample=info))
        except SpecificationError as exc:
            raise SpecificationError(f"asset '{a}': {exc}") from None
    rf_text = f" minus '{risk_free}'" if risk_free is not None else " (already excess returns)"
    notes.insert(0, f"{len(assets)} assets{rf_text} on {k} factor(s) "
                    f"({', '.join(factors)}) over {len(index)} periods")
    returns = pd.DataFrame(np.where(observed, excess, np.nan), index=index, columns=assets)
    factor_values = pd.DataFrame(fac, index=index, columns=factors)
    fm = FactorModel(members, assets=assets, factors=factors, risk_free=risk_free,
                     returns=returns, factor_values=factor_values, intro_notes=notes,
                     balanced=balanced, time=time, window=sample)
    fm.loaded_from = table.report if isinstance(table, Table) else None
    return fm
