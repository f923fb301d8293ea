"""Linear instrumental variables and GMM on the moment-model seam.

y = X beta + u with instruments Z (T x L; the exogenous regressors instrument themselves, the
excluded instruments are added), moment contributions g_t = z_t u_t. With G = Z'X/T and a weight
W, beta(W) = (G'WG)^-1 G'W Z'y/T and

    V = (1/T) (G'WG)^-1 G'W S W G (G'WG)^-1        (general; Hansen 1982)
    V = (1/T) (G'S^-1 G)^-1                         (when W = S^-1 for the same S).

Everything is computed in the orthonormal basis of Z (Z = Q C): there G becomes A/T with
A = Q'X, W = I gives 2SLS, and the influence map is M = (A'WA)^-1 A'W (V = T M S M'). Methods:
"2sls", "two-step" (W = S^-1 from the first step's moment contributions, S from any registered
estimator), "iterated" (to convergence), "cue" (continuously updated, S(beta) in the objective).
Specification and strength: Hansen's J, the difference-in-J test, first-stage results, the
effective F of Montiel Olea & Pflueger (one endogenous regressor) and a robust first-stage F
from the Kleibergen-Paap (2006) rank statistic (several); weak-instrument-robust inference:
the Anderson-Rubin test and its confidence set by test inversion.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla
from scipy import optimize

from ..blas import single_blas_thread
from ..capabilities import Capabilities
from ..covariance.fewclusters import ClusterDesign
from ..covariance.registry import as_estimator
from ..data.groupings import as_names, grouping_from
from ..data.columns import (INTERCEPT, as_list, check_horizon, check_magnitudes, column_ranges,
                            frame_and_meta, index_label, numeric_block)
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..inference.sweep import sweep
from ..laws.reference import chi_square_upper
from .base import MomentModel, residuals_vanish
from .series import SeriesModel
from .iv_strength import FirstStage, anderson_rubin, anderson_rubin_test, first_stage
from .gmm_common import (JTest, WeightedGMM, fixed_bandwidth, inverse_weight,
                          with_j)
from .iv_sweep import gmm_curves
from .ols import RANK_TOLERANCE, cholesky_qr2, collinearity_message, label_column

METHODS = {"2sls": "two-stage least squares (W = (Z'Z/T)^-1)",
           "two-step": "two-step efficient GMM (W = S^-1 from the first step's moment "
                       "contributions)",
           "iterated": "iterated GMM (W = S(beta)^-1 re-estimated to convergence)",
           "cue": "continuously updated GMM (S(beta) inside the objective)"}


@dataclass
class IVCore:
    """What every weighting of one IV specification shares: the data and the basis of Z."""

    X: np.ndarray
    y: np.ndarray
    Z: np.ndarray
    terms: list[str]
    z_names: list[str]
    endogenous: list[str]
    excluded: list[str]
    exogenous: list[str]
    index: pd.Index
    response: str
    sample: object
    horizon: int | None
    table: object
    z_scales: np.ndarray | None = None   # each instrument's largest absolute value, if known
    #: groupings of the rows offered for clustering (name -> Grouping), shared by every
    #: weighting of the specification
    groupings: dict = field(default_factory=dict)
    Q: np.ndarray = field(init=False)
    C: np.ndarray = field(init=False)
    C_inv: np.ndarray = field(init=False)
    A: np.ndarray = field(init=False)
    b: np.ndarray = field(init=False)

    @single_blas_thread
    def __post_init__(self):
        if self.z_scales is None:
            norms = np.maximum(*[np.abs(v) for v in column_ranges(self.Z)])
        else:
            norms = np.asarray(self.z_scales, dtype=float)
        factor = cholesky_qr2(self.Z, norms) if norms.min() > 0 else None
        if factor is None:
            q, r, piv = sla.qr(self.Z / norms, mode="economic", pivoting=True)
            r = np.array(r)
            diag = np.abs(np.diag(r))
            rank = int(np.sum(diag > RANK_TOLERANCE * diag[0]))
            if rank < self.Z.shape[1]:
                raise SpecificationError(collinearity_message(r, piv, rank, self.z_names)
                                         .replace("regressors are collinear",
                                                  "instruments are collinear"))
            rinv = sla.solve_triangular(r, np.eye(len(piv)))
        else:
            q, r, rinv = factor
            piv = np.arange(self.Z.shape[1])
        L = self.Z.shape[1]
        c_inv = np.empty((L, L))
        c_inv[piv] = rinv / norms[piv][:, None]
        c = np.empty((L, L))
        c[:, piv] = r * norms[piv][None, :]
        self.Q, self.C, self.C_inv = q, c, c_inv
        self.A = q.T @ self.X
        self.b = q.T @ self.y
        s = np.linalg.svd(self.A / np.maximum(np.abs(self.A).max(axis=0), 1e-300),
                          compute_uv=False)
        if s.size < self.X.shape[1] or s[-1] <= 1e-10 * s[0]:
            raise SpecificationError(
                "the instruments do not identify every coefficient (the first stage is rank "
                "deficient): " + ", ".join(f"'{e}'" for e in self.endogenous)
                + " cannot be separated by the excluded instruments "
                + ", ".join(f"'{z}'" for z in self.excluded) + "; add stronger instruments")

    def estimate(self, w: np.ndarray) -> np.ndarray:
        aw = self.A.T @ w
        return np.linalg.solve(aw @ self.A, aw @ self.b)

    def series_model(self, contributions, influence_map, *, terms, beta, df_resid):
        """A moment model of statistics that are means over this specification's rows (the
        first-stage system, the Anderson-Rubin regressions)."""
        return SeriesModel(contributions, influence_map, terms=terms, beta=beta,
                           index=self.index, horizon=self.horizon, df_resid=df_resid)

    @property
    def fitted_basis(self) -> np.ndarray:
        """An orthonormal basis (T x k) of the fitted regressors X^ = P_Z X = Q A."""
        u, _ = np.linalg.qr(self.A)
        return self.Q @ u


def check_iv_spec(response, regs, endogenous, instruments, intercept):
    if not isinstance(response, str) or not response:
        raise SpecificationError("choose a response column")
    for name, group in (("regressor", regs), ("instrument", instruments)):
        if len(set(group)) != len(group):
            dup = next(r for r in group if group.count(r) > 1)
            raise SpecificationError(f"{name} '{dup}' is listed twice")
    if response in regs or response in instruments:
        raise SpecificationError(f"'{response}' is the response; it cannot also be a regressor "
                                 "or an instrument")
    missing = [e for e in endogenous if e not in regs]
    if missing:
        raise SpecificationError(f"endogenous regressor(s) {', '.join(map(repr, missing))} must "
                                 "also be listed among the regressors")
    both = [z for z in instruments if z in regs]
    if both:
        raise SpecificationError(f"instrument '{both[0]}' is also a regressor: an exogenous "
                                 "regressor instruments itself; list only excluded instruments")
    if len(instruments) < len(endogenous):
        raise SpecificationError(
            f"{len(endogenous)} endogenous regressor(s) ({', '.join(endogenous)}) but only "
            f"{len(instruments)} excluded instrument(s)"
            + (f" ({', '.join(instruments)})" if instruments else "")
            + ": the model needs at least as many excluded instruments as endogenous regressors")
    if INTERCEPT in regs or INTERCEPT in instruments:
        raise SpecificationError(f"'{INTERCEPT}' is reserved for the constant term; rename "
                                 "that column")
    if not regs and not intercept:
        raise SpecificationError("the model has no regressors: add a column or the intercept")


@single_blas_thread
def fit_iv(data, response: str, regressors=None, endogenous=None, instruments=None,
           intercept: bool = True, method: str = "2sls", weight=None, sample=None,
           horizon=None, max_iter: int = 100, tol: float = 1e-8, clusters=None) -> "IVFit":
    """Fit y = X beta + u by linear IV / GMM.

    regressors: every right-hand-side column; endogenous: the subset that is instrumented;
    instruments: the excluded instruments (exogenous regressors instrument themselves).
    method: "2sls", "two-step", "iterated" or "cue"; weight: the estimator of S behind the
    weighting (an Estimator or a registry name; default HC0) for the last three.
    """
    regs, endog, instr = as_list(regressors), as_list(endogenous), as_list(instruments)
    check_iv_spec(response, regs, endog, instr, intercept)
    if method not in METHODS:
        raise SpecificationError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    table, frame, non_numeric, horizons = frame_and_meta(data)
    cols = [*regs, *instr, response]
    values, index, info, (lo, hi) = numeric_block(frame, cols, non_numeric, sample,
                                                   ones=intercept)
    check_magnitudes(cols, lo, hi, values, lead=int(intercept))
    k = len(regs) + int(intercept)
    if len(values) <= max(k, len(instr) + k - len(endog)):
        raise SpecificationError(f"{len(values)} usable rows are too few for {k} coefficients "
                                 f"and {len(instr) + k - len(endog)} instruments")
    if hi[-1] - lo[-1] == 0:
        raise SpecificationError(f"response '{response}' is constant: nothing to explain")
    terms = ([INTERCEPT] if intercept else []) + regs
    exog = [r for r in regs if r not in endog]
    X = values[:, :k]
    lead = int(intercept)
    z_cols = list(range(lead)) + [lead + regs.index(r) for r in exog] \
        + [k + i for i in range(len(instr))]
    Z = np.empty((len(values), len(z_cols)), order="F")     # column-major, like the block
    for i, c in enumerate(z_cols):
        Z[:, i] = values[:, c]
    z_scales = np.maximum(hi[z_cols], -lo[z_cols])
    z_names = ([INTERCEPT] if intercept else []) + exog + instr
    y = values[:, -1]
    info.rows_used = len(values)
    info.first, info.last = index_label(index[0]), index_label(index[-1])
    horizon = check_horizon(horizon if horizon is not None else horizons.get(response),
                            len(values))
    core = IVCore(X=X, y=y, Z=Z, terms=terms, z_names=z_names,
                  endogenous=endog, excluded=instr, exogenous=exog, index=index,
                  response=response, sample=info, horizon=horizon, table=table,
                  z_scales=z_scales)
    for name in as_names(clusters):
        if name in cols:
            raise SpecificationError(f"'{name}' is a variable of the model; cluster by another "
                                     "column")
        core.groupings[name] = grouping_from(label_column(data, frame, name), name, info.rows)
    first = IVFit(core, np.eye(Z.shape[1]), method="2sls")
    if method == "2sls":
        return first
    weight = as_estimator(weight if weight is not None else "hc0")
    if method == "two-step":
        return first.two_step(weight)
    if method == "iterated":
        return first.iterated(weight, max_iter=max_iter, tol=tol)
    return first.cue(weight, max_iter=max_iter, tol=tol)


class IVFit(WeightedGMM, MomentModel):
    """A fitted linear IV / GMM model (see the module docstring)."""

    kind = "instrumental-variables"

    def __init__(self, core: IVCore, w: np.ndarray, *, method: str, weight=None,
                 weighting=None, iterations: int = 1, first_step: "IVFit | None" = None,
                 beta=None):
        self._init_model()
        self.core = core
        self.W = w                            # weight in the working basis (L x L)
        self.method = method
        self.weight = weight                  # the estimator of S behind W (None for 2SLS)
        self.weighting = weighting            # the LongRun W came from (its S: W = S^-1)
        self.iterations = iterations
        self.first_step = first_step
        self.terms, self.response = list(core.terms), core.response
        self.index, self.sample, self.horizon, self.table = (core.index, core.sample,
                                                             core.horizon, core.table)
        self.X, self.y = core.X, core.y
        self.nobs, self.k = core.X.shape
        try:
            self.beta = core.estimate(w) if beta is None else np.asarray(beta, dtype=float)
        except np.linalg.LinAlgError:
            raise EstimationError("the GMM weighting is singular; the estimate is not "
                                  "defined") from None
        self.fitted_values = core.X @ self.beta
        self.resid = core.y - self.fitted_values
        self.leverage = None
        self.groupings = core.groupings

    # ------------------------------------------------------------------ the protocol
    @property
    def capabilities(self) -> Capabilities:
        """A time series of instruments times residuals (a design: the instruments' basis); the
        weighting can follow the estimator of S (two-step, iterated, CUE); the groupings named
        in `clusters=`, with the hat matrix of the fitted regressors within clusters."""
        return Capabilities(time_ordered=True, design=True, reweighting=True,
                            clusters=tuple(self.groupings), cluster_leverage=True)

    def cluster_design(self) -> ClusterDesign:
        """CR2 and CR3 of an IV fit adjust the residuals of each cluster by the hat matrix of
        the fitted regressors X^ = P_Z X (the symmetric projection 2SLS uses in its second
        stage); the moment contributions are z_t u_t. The degrees of freedom of Bell & McCaffrey
        and Imbens & Kolesar assume least-squares residuals and are not offered."""
        return ClusterDesign(hat=self.core.fitted_basis, resid=self.resid,
                             contributions=self.core.Q, least_squares=False,
                             why_no_df="the residuals of an IV fit are not a projection of the "
                                       "errors", hat_words="the fitted regressors P_Z X")

    def fits_exactly(self) -> bool:
        return residuals_vanish(self.resid, self.y)

    @property
    def moment_names(self) -> list[str]:
        return list(self.core.z_names)

    @property
    def working_design(self) -> np.ndarray:
        return self.core.Q

    def _original_contributions(self) -> np.ndarray:
        return self.core.Z * self.resid[:, None]

    @property
    def working_basis(self) -> np.ndarray:
        """C: z_t u_t = q_t u_t C (Z = QC)."""
        return self.core.C

    @property
    def working_basis_inverse(self) -> np.ndarray:
        return self.core.C_inv

    @property
    def influence_map(self) -> np.ndarray:
        """M = (A'WA)^-1 A'W, so that V = T M S M'."""
        def build():
            aw = self.core.A.T @ self.W
            return np.linalg.solve(aw @ self.core.A, aw)
        return self.caches.get("influence_map", build)

    def mean_moment(self) -> np.ndarray:
        """gbar in the working basis: Q'u / T."""
        return (self.core.b - self.core.A @ self.beta) / self.nobs

    @property
    def overidentification(self) -> int:
        return len(self.core.z_names) - self.k

    @property
    def r_squared(self) -> float:
        centre = self.y.mean() if self.has_intercept else 0.0
        tss = float(((self.y - centre) ** 2).sum())
        return 1.0 - self.ssr / tss if tss > 0 else float("nan")

    def weighting_words(self) -> str:
        if self.method == "2sls":
            return "(Z'Z/T)^-1 (2SLS)"
        return f"{self.weight.label} on the {'first-step' if self.method == 'two-step' else 'final'}" \
            " moment contributions"

    def describe_method(self) -> str:
        text = METHODS[self.method]
        if self.method != "2sls":
            text += f"; S for the weighting: {self.weight.label}"
        if self.method in ("iterated", "cue"):
            text += f"; {self.iterations} iteration(s)"
        return text

    # ------------------------------------------------------------------ other weightings
    def _two_step_cache(self) -> dict:
        return self.caches.get("two_step", dict)

    @single_blas_thread
    def two_step(self, weight) -> "IVFit":
        """Two-step efficient GMM from this fit's residuals (this fit is the first step).
        Computed once per estimator and kept (a few of them) in this fit's caches."""
        weight = as_estimator(weight)
        cache = self._two_step_cache()
        key = repr(weight)
        if key not in cache:
            w, lr = inverse_weight(weight, self)
            if len(cache) >= 8:
                cache.pop(next(iter(cache)))
            cache[key] = type(self)(self.core, w, method="two-step", weight=weight, weighting=lr,
                               iterations=2, first_step=self)
        return cache[key]

    @single_blas_thread
    def iterated(self, weight, max_iter: int = 100, tol: float = 1e-8) -> "IVFit":
        weight = as_estimator(weight)
        current, steps = self, 1
        while True:
            w, lr = inverse_weight(weight, current)
            nxt = type(self)(self.core, w, method="iterated", weight=weight, weighting=lr,
                        iterations=steps + 1, first_step=self)
            change = np.max(np.abs(nxt.beta - current.beta) / (np.abs(current.beta) + 1e-8))
            current, steps = nxt, steps + 1
            if change < tol:
                break
            if steps > max_iter:
                raise EstimationError(f"iterated GMM did not converge in {max_iter} iterations "
                                      f"(last relative change {change:.2g}); use two-step")
        # at convergence the weighting S is S(beta): refresh it so W = S^-1 for the final S
        w, lr = inverse_weight(weight, current)
        final = type(self)(self.core, w, method="iterated", weight=weight, weighting=lr,
                      iterations=steps, first_step=self)
        return final

    @single_blas_thread
    def cue(self, weight, max_iter: int = 100, tol: float = 1e-8) -> "IVFit":
        """Continuously updated GMM: minimise T g(b)' S(b)^-1 g(b) over b, S(b) the weight
        estimator on the contributions at b (a data-driven bandwidth is fixed at its two-step
        value, so the objective is smooth)."""
        weight = as_estimator(weight)
        start = self.iterated(weight, max_iter=max_iter, tol=max(tol, 1e-6)) \
            if not weight.family.fixed_weight else self.two_step(weight)
        fixed = fixed_bandwidth(weight, start)
        core = self.core

        def objective(beta):
            trial = type(self)(core, start.W, method="cue", beta=beta)
            try:
                s = fixed.long_run(trial).S
                g = (core.b - core.A @ beta) / self.nobs
                return float(self.nobs * g @ np.linalg.solve(s, g))
            except (LagwiseError, np.linalg.LinAlgError):
                return np.inf
        res = optimize.minimize(objective, start.beta, method="BFGS",
                                options={"gtol": 1e-10, "maxiter": 50 * max_iter})
        if not np.isfinite(res.fun):
            raise EstimationError("the continuously updated objective is not finite near the "
                                  "two-step estimate; use two-step or iterated GMM")
        trial = type(self)(core, start.W, method="cue", beta=res.x)
        w, lr = inverse_weight(fixed, trial)
        return type(self)(core, w, method="cue", weight=fixed, weighting=lr,
                     iterations=int(res.nit) + 1, first_step=self, beta=res.x)

    # ------------------------------------------------------------------ specification
    def difference_j(self, subset, est=None) -> JTest:
        """Difference-in-J (C) test that the instruments in `subset` are valid, given the
        others: J(all) - J(without them), both with the full model's S (its sub-block for the
        smaller set), chi-square(len(subset))."""
        subset = as_list(subset)
        unknown = [s for s in subset if s not in self.core.excluded]
        if unknown:
            raise SpecificationError(f"{', '.join(map(repr, unknown))} is not an excluded "
                                     "instrument of this model")
        keep = [i for i, n in enumerate(self.core.z_names) if n not in subset]
        if len(keep) < self.k:
            raise SpecificationError("without those instruments the model is not identified")
        est = as_estimator(est if est is not None else (self.weight or "hc0"))
        s_orig = self.to_original(est.long_run(self.first_step or self).S)
        z = self.core.Z
        g_full = z.T @ (self.y - self.X @ self.beta) / self.nobs
        j_full = self.nobs * g_full @ np.linalg.solve(s_orig, g_full)
        s_sub = s_orig[np.ix_(keep, keep)]
        w_sub = np.linalg.inv(s_sub)
        zx, zy = z[:, keep].T @ self.X / self.nobs, z[:, keep].T @ self.y / self.nobs
        b_sub = np.linalg.solve(zx.T @ w_sub @ zx, zx.T @ w_sub @ zy)
        g_sub = zy - zx @ b_sub
        j_sub = self.nobs * g_sub @ w_sub @ g_sub
        c = float(j_full - j_sub)
        return JTest(c, len(subset), chi_square_upper(max(c, 0.0), len(subset)),
                     f"{est.label}, the full model's estimate",
                     f"H0: {', '.join(subset)} are valid instruments given the others")

    # ------------------------------------------------------------------ instrument strength
    def first_stage(self, est=None) -> "FirstStage":
        return first_stage(self, as_estimator(est if est is not None else "hc0"))

    def anderson_rubin(self, term: str, est=None, level: float = 0.95):
        """The Anderson-Rubin confidence set for the endogenous regressor `term` (one endogenous
        regressor), by test inversion with S from `est` (default HC0)."""
        return anderson_rubin(self, term, as_estimator(est if est is not None else "hc0"), level)

    def anderson_rubin_test(self, term: str, value: float, est=None) -> float:
        """The Anderson-Rubin test's p-value for term = value."""
        return anderson_rubin_test(self, term, value,
                                   as_estimator(est if est is not None else "hc0"))

    # ------------------------------------------------------------------ sensitivity
    def sweep_axis(self, estimators, values=None):
        """Estimators of one family along its tuning axis. For a GMM fit the weighting follows
        the estimator: the two-step estimate at each value (efficient form), with J; for 2SLS
        the ordinary sweep with J at every point."""
        ests = [as_estimator(e) for e in (estimators if isinstance(estimators, (list, tuple))
                                          else [estimators])]
        if self.method == "2sls":
            return with_j(self, sweep(self, ests, values))
        return gmm_curves(self, ests, values)

    def __repr__(self):
        return (f"IVFit(response={self.response!r}, terms={self.terms}, instruments="
                f"{self.core.z_names}, method={self.method!r}, T={self.nobs})")


