"""Joint Wald tests of several coefficients of any moment model, under any estimator of S, and
along a family's tuning axis (the joint counterpart of the sensitivity sweep).

`joint_test(model, terms, est)` tests that every coefficient named in `terms` is zero:
W = b_R' V_RR^-1 b_R with V = T M S M' from `infer`, referred to the estimator's law for m
restrictions (chi-square(m) for large-sample laws, F(m, B - m + 1) of the scaled statistic for
EWC, F(m, df) of W/m for Student t laws, fixed-b where the tables cover m <= 5). V_RR is inverted
through its Cholesky factor; a V_RR that is not positive definite (a band-limited kernel with
more restrictions than its estimate has rank, a non-PSD kernel without repair) gives no
statistic: a typed error in a single test, status "singular" / "not_psd" in a sweep.

`joint_sweep(model, terms, estimators, values)` moves each estimator (one family) along its axis
and returns W and the p-value at every point. The numbers equal `joint_test` at the same setting
(tests check 1e-10). Paths, chosen by what the family declares (never by its name):

* the family's S is a kernel weighting of the cached autocovariances (`Family.kernel_of`) and no
  eigenvalue repair can act on it (a PSD kernel, or repair off): V_RR(b) = T sum_j w_j(b) C_j(z)
  with z_t = M_R g_t the restricted coefficients' influence series (m_R series, not the m of the
  model): one all-lag autocovariance cache of z (engine.covariance.cache.MomentCache) serves every
  kernel and bandwidth, one weights-times-cache product per kernel;
* the family's S is a fixed quadratic form of the contributions (`Family.quadratic`, e.g. EWC):
  M_R S(g) M_R' = S(z), so the family's own estimate on z (a `RestrictedSeries` view, cached on
  the model) gives V_RR directly (EWC: one cosine transform of z);
* a kernel whose estimate of S is repaired (clipped to PSD) before the sandwich: the repair does
  not pass through M_R, so S(b) of all moments is formed and repaired exactly as `infer` does
  (engine.covariance.longrun.kernel_many, in chunks of bandwidths), one m x m
  eigendecomposition per bandwidth;
* anything else (prewhitening, VAR-HAC, ...): one estimate of S per point, as `infer`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..blas import single_blas_thread
from ..covariance import longrun
from ..covariance.bandwidth import resolve_bandwidth
from ..covariance.cache import MomentCache
from ..covariance.kernels import get_kernel
from ..covariance.registry import ModelInfo, as_estimator
from ..errors import EstimationError, LagwiseError, LawUnavailable, SpecificationError
from ..inference.sweep import Flip
from .series import SeriesModel

#: A covariance whose smallest eigenvalue (Cholesky pivot) is within this fraction of its largest
#: counts as singular: no Wald statistic.
RANK_TOL = 1e-10
#: Bandwidths per batch when S of every moment is formed and repaired (bounds memory).
REPAIR_BATCH = 8


@dataclass
class JointTest:
    """The Wald test that every coefficient in `restrictions` is zero."""

    statistic: float                     # W = b' V^-1 b (chi-square form)
    df: int                              # number of restrictions m
    p_value: float                       # under `law`
    f_statistic: float                   # the form the law refers (W/m, EWC's scaled F, ...)
    f_df: tuple | None
    law: str                             # the reference law, in words
    estimator: str                       # the estimator of S, with its tuning value
    restrictions: list[str]
    notes: list[str] = field(default_factory=list)

    def rejects(self, level: float = 0.95) -> bool:
        return bool(self.p_value < 1 - level)

    def summary(self) -> str:
        df = "" if self.f_df is None else f" with ({self.f_df[0]:g}, {self.f_df[1]:g}) df"
        p = "<0.001" if self.p_value < 0.001 else f"{self.p_value:.4g}"
        return (f"joint Wald test that {self.df} coefficients are zero under {self.estimator}: "
                f"W = {self.statistic:.4g}; F = {self.f_statistic:.4g}{df}; p = {p} under "
                f"{self.law}")

    def __str__(self) -> str:
        return self.summary()


def wald_statistic(estimate: np.ndarray, cov: np.ndarray, tol: float = RANK_TOL):
    """(W, status, eigenvalue range) of W = b' V^-1 b. status "" (V positive definite),
    "singular" (PSD with an eigenvalue within `tol` of zero relative to the largest) or
    "not_psd" (a negative eigenvalue beyond `tol`); W is NaN unless status is "". The common
    case is one Cholesky factor; the eigenvalues are computed only when its pivots come near
    the threshold or it fails."""
    v = 0.5 * (cov + cov.T)
    b = np.asarray(estimate, dtype=float)
    if not np.all(np.isfinite(v)):
        return float("nan"), "singular", (float("nan"), float("nan"))
    try:
        chol = np.linalg.cholesky(v)
    except np.linalg.LinAlgError:
        chol = None
    if chol is not None:
        d = np.diag(chol) ** 2
        if d.min() > 1e3 * tol * d.max():            # far from the threshold
            u = sla.solve_triangular(chol, b, lower=True, check_finite=False)
            return float(u @ u), "", None
    vals = np.linalg.eigvalsh(v)
    top = max(float(np.abs(vals).max()), np.finfo(float).tiny)
    span = (float(vals[0]), float(vals[-1]))
    if vals[0] < -tol * top:
        return float("nan"), "not_psd", span
    if vals[0] <= tol * top:
        return float("nan"), "singular", span
    if chol is not None:
        u = sla.solve_triangular(chol, b, lower=True, check_finite=False)
        return float(u @ u), "", span
    vals, vecs = np.linalg.eigh(v)
    return float(((vecs.T @ b) ** 2 / vals).sum()), "", span


def _positions(model, terms) -> np.ndarray:
    terms = list(terms)
    if not terms:
        raise SpecificationError("name at least one coefficient to test")
    unknown = [t for t in terms if t not in model.terms]
    if unknown:
        raise SpecificationError(f"no coefficient named {unknown[0]!r}")
    if len(set(terms)) < len(terms):
        raise SpecificationError("a coefficient is named twice in the joint test")
    lookup = {t: i for i, t in enumerate(model.terms)}
    return np.array([lookup[t] for t in terms])


def _refuse_law(exc: Exception, m: int) -> LawUnavailable:
    return LawUnavailable(f"{exc}: a joint test of {m} coefficients has no such law here. With "
                          "many restrictions use EWC (its F law accounts for estimating the "
                          f"{m} x {m} covariance and needs B >= {m} cosine terms), a "
                          "large-sample law, or test at most 5 coefficients")


def _law_for(law, involved, m):
    law = law.restricted(involved)
    try:
        law.check_restrictions(m)
    except SpecificationError as exc:
        raise _refuse_law(exc, m) from None
    return law


def singular_message(status, span, m, label) -> str:
    if status == "not_psd":
        return (f"the covariance of the {m} coefficients under {label} is not positive "
                f"semi-definite (eigenvalues from {span[0]:.3g} to {span[1]:.3g}): the joint "
                "test is not defined. Turn the eigenvalue repair on or choose a PSD kernel.")
    return (f"the covariance of the {m} coefficients under {label} is singular (eigenvalues "
            f"from {span[0]:.3g} to {span[1]:.3g}): it has fewer effective dimensions than "
            "restrictions, so the joint test is not defined. Band-limited kernels such as the "
            "Quadratic Spectral one estimate a covariance of rank about 1.2 T / b; use a smaller "
            "bandwidth, EWC with more cosine terms, or test fewer coefficients.")


@dataclass
class RestrictedInference:
    """The covariance of a subset of coefficients under one estimator, and what referring them
    needs: the law for the model's coefficients, the (light) estimate of S, its label, notes."""

    positions: np.ndarray
    estimate: np.ndarray
    cov: np.ndarray
    law: object
    long_run: object
    label: str
    notes: list

    @property
    def std_error(self) -> np.ndarray:
        var = np.diag(self.cov)
        with np.errstate(invalid="ignore"):
            return np.sqrt(np.where(var < 0, np.nan, var))

    def table(self, names, level: float, k: int) -> pd.DataFrame:
        """estimate, std_error, t_stat, p_value, ci_low, ci_high for the subset (a law with one
        value per coefficient of the model is read at the subset's positions)."""
        se = self.std_error
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(se > 0, self.estimate / se, np.nan)
        full = np.full(k, np.nan)
        full[self.positions] = t
        pv = np.asarray(self.law.p_values(full))[self.positions]
        cv = self.law.critical_value(level)
        cv = np.asarray(cv)[self.positions] if np.ndim(cv) else float(cv)
        return pd.DataFrame({"estimate": self.estimate, "std_error": se, "t_stat": t,
                             "p_value": pv, "ci_low": self.estimate - cv * se,
                             "ci_high": self.estimate + cv * se}, index=names)


def restricted_inference(model, terms, est, level: float = 0.95,
                         reference: str = "auto") -> RestrictedInference:
    """V_RR of the coefficients `terms` under `est`: equal to the block of `infer`'s covariance
    (tests check 1e-10). A PSD kernel estimate (the family's S a kernel weighting of the cached
    autocovariances, `Family.kernel_of`) is formed from the restricted influence series' cache
    (m_R series, not the model's m: the bandwidth rules still run on the model's own
    contributions); anything else goes through `infer`."""
    est = as_estimator(est)
    idx = _positions(model, terms)
    family, params = est.family, est.params
    name = family.kernel_of(params)
    if name is None or not get_kernel(name).psd:
        res = model.infer(est, level=level, reference=reference)
        return RestrictedInference(idx, np.asarray(model.beta)[idx],
                                   res.cov.to_numpy()[np.ix_(idx, idx)], res.law, res.long_run,
                                   res.label, list(res.notes))
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.5 <= level < 1:
        raise SpecificationError(f"confidence level must be between 0.5 and 1, got {level!r}")
    why = family.applies(model)
    if why:
        raise SpecificationError(why)
    if model.fits_exactly():
        raise EstimationError("the model fits the data exactly (every residual is zero): "
                              "standard errors are zero and t statistics are not defined")
    kern = get_kernel(name)
    choice = resolve_bandwidth(model, kern, params["bandwidth"])
    covs, runs = _kernel_path(model, idx, est, kern, [choice.b])
    lr, status, _ = runs[0]
    if status:
        raise EstimationError(
            f"the {kern.label} estimate of S is zero at b = {choice.b:g} (T = {model.nobs}): "
            "with weights that stay flat over every lag the autocovariances of the moment "
            "contributions sum to zero. Choose a smaller bandwidth.")
    lr.how = choice.explanation
    lr.flags |= choice.flags
    lr.notes += choice.notes
    law = family.law(reference, params, lr, model)
    notes = list(model.sample.notes) + list(lr.notes)
    return RestrictedInference(idx, np.asarray(model.beta)[idx], covs[0], law, lr,
                               est.label_for(lr), notes)


def joint_test(model, terms, est, reference: str = "auto", level: float = 0.95) -> JointTest:
    """The Wald test that every coefficient in `terms` is zero under `est` and the reference
    law asked for (module docstring)."""
    return joint_test_from(model, restricted_inference(model, terms, est, level, reference))


def joint_test_from(model, part: RestrictedInference) -> JointTest:
    """The joint test from a restricted inference already made (one estimate of S serves the
    coefficients' table and their joint test)."""
    idx = part.positions
    m = len(idx)
    involved = np.zeros(len(model.terms), dtype=bool)
    involved[idx] = True
    law = _law_for(part.law, involved, m)
    w, status, span = wald_statistic(part.estimate, part.cov)
    if status:
        raise EstimationError(singular_message(status, span, m, part.label))
    form = law.wald(w, m)
    return JointTest(w, m, form.p_value, form.f_statistic, form.f_df, law.wald_text(m),
                     part.label, [model.terms[i] for i in idx], list(part.long_run.notes))


# --------------------------------------------------------------------------- the view on z

class RestrictedSeries(SeriesModel):
    """The restricted coefficients' influence series z_t = M_R w_t (T x m_R) as a series model
    with the identity influence map: for an estimator whose S is a fixed quadratic form of the
    contributions, T S(z) is the restricted block of the parent's V = T M S(w) M'. It keeps the
    parent's small-sample factor so estimators that apply one scale alike."""

    kind = "restricted influence series"

    def __init__(self, parent, positions):
        mmap = parent.influence_map[positions]
        z = parent.working_contributions @ mmap.T
        names = [parent.terms[i] for i in positions]
        super().__init__(z, np.eye(len(names)), terms=names,
                         beta=np.asarray(parent.beta)[positions], index=parent.index,
                         sample=parent.sample, horizon=parent.horizon,
                         df_resid=float(np.min(parent.df_resid)), response=parent.response)
        self._factor = float(parent.small_sample_factor)

    @property
    def small_sample_factor(self) -> float:
        return self._factor

    @property
    def constant_moments(self) -> np.ndarray:
        return np.zeros(self.m, dtype=bool)

    def covariance_from_long_run(self, s_working):
        return self.nobs * s_working


def restricted_view(model, terms) -> RestrictedSeries:
    """The view on the influence series of `terms`, built once per model and set of terms."""
    idx = _positions(model, terms)
    key = "joint_view:" + "\x1f".join(model.terms[i] for i in idx)
    return model.caches.get(key, lambda: RestrictedSeries(model, idx))


def _moment_diagonal(model) -> MomentCache:
    """Each working contribution's own autocovariances (the collapse check of a kernel
    estimate, as engine.covariance.longrun.kernel_many makes it, without the m x m pairs)."""
    return model.caches.get("moment_diagonal", lambda: MomentCache(
        model.working_contributions, diagonal_only=True))


# --------------------------------------------------------------------------- the sweep

@dataclass
class JointFlip(Flip):
    """Where the joint test's conclusion changes along the axis (rejects = p < 1 - level)."""

    def sentence(self) -> str:
        pct = f"{100 * (1 - self.level):g}%"
        tail = f" ({self.curve})"
        words = {True: "rejected", False: "not rejected", None: "not available"}
        segs = self.segments
        if self.rejects_at_start is None:
            return f"{self.term}: no joint test is defined at any {self.symbol} shown{tail}."
        if len(segs) == 1:
            a, b, s = segs[0]
            return (f"{self.term}: {words[s]} at {pct} for every {self.symbol} from {a:g} to "
                    f"{b:g}{tail}.")
        parts = [(f"{words[s]} for {self.symbol} = {a:g}" if a == b else
                  f"{words[s]} for {self.symbol} from {a:g} to {b:g}") for a, b, s in segs]
        from_flips = len(self.changes)
        return (f"{self.term} at {pct}: " + "; ".join(parts) + "; the conclusion changes "
                + {0: "nowhere", 1: "once", 2: "twice"}.get(from_flips, f"{from_flips} times")
                + tail + ".")


@dataclass
class JointSweep:
    """W and p-values of the joint test (curves x values) along a family's tuning axis."""

    labels: list[str]
    estimators: list
    values: np.ndarray
    restrictions: list[str]
    statistic: np.ndarray              # (curves, values) W
    f_statistic: np.ndarray
    p_value: np.ndarray
    status: np.ndarray                 # "" | "singular" | "not_psd" | "collapsed" | "unavailable"
    reasons: np.ndarray                # why a point has no p-value
    laws: np.ndarray                   # the reference law at each point, in words
    reference: str
    symbol: str
    title: str
    nobs: int

    @property
    def family(self):
        return self.estimators[0].family

    @property
    def df(self) -> int:
        return len(self.restrictions)

    def curve_index(self, curve) -> int:
        if isinstance(curve, (int, np.integer)):
            return int(curve)
        kernels = [e.params.get("kernel") for e in self.estimators]
        for names in (self.labels, kernels):
            if curve in names:
                return names.index(curve)
        raise SpecificationError(f"no curve {curve!r}; curves are " + ", ".join(self.labels))

    def flip(self, curve=0, level: float = 0.95, what: str = "") -> JointFlip:
        """Where the conclusion at 1 - level changes along the axis for one curve."""
        c = self.curve_index(curve)
        p = self.p_value[c]
        valid = np.isfinite(p)
        rejects = np.where(valid, p < 1 - level, False)
        name = what or f"the {self.df} coefficients jointly zero"
        return JointFlip(name, self.labels[c], self.symbol, level, self.reference, self.values,
                         rejects, valid)

    def flips(self, level: float = 0.95, what: str = "") -> list[JointFlip]:
        return [self.flip(c, level, what) for c in range(len(self.labels))]

    @property
    def frame(self) -> pd.DataFrame:
        nc, n = self.p_value.shape
        return pd.DataFrame({
            "curve": np.repeat(self.labels, n),
            self.family.axis.param: np.tile(self.values, nc),
            "statistic": self.statistic.ravel(), "f_statistic": self.f_statistic.ravel(),
            "p_value": self.p_value.ravel(), "law": self.laws.ravel(),
            "status": self.status.ravel(), "reason": self.reasons.ravel()})


def joint_grid(model, terms, family) -> np.ndarray:
    """The family's own grid for the model, extended where the family's law needs more (EWC
    needs B >= m) so that it holds values at which m restrictions can be tested: from m on, as
    many points as the family's grid has. The law is read from the family's estimate at the top
    of the grid on the restricted view (the same law; no m x m estimate of S is made)."""
    grid = family.axis.grid(model)
    m = len(terms)
    est = as_estimator(family.name).at(_typed(family, float(grid[-1])))
    try:
        law = est.long_run(restricted_view(model, terms)).law
        if law is not None:
            law.check_restrictions(m)
        return grid
    except SpecificationError:
        pass
    except LagwiseError:
        return grid
    step = float(grid[1] - grid[0]) if len(grid) > 1 else 1.0
    start = float(m)
    stop = min(start + step * (len(grid) - 1), model.nobs - 1)
    if stop < start:
        return grid
    return np.arange(start, stop + step / 2, step)


def _typed(family, value):
    p = next(p for p in family.params if p.name == family.axis.param)
    return float(value) if p.kind == "bandwidth" else int(round(float(value)))


@single_blas_thread
def joint_sweep(model, terms, estimators, values=None, reference: str = "auto") -> JointSweep:
    """The joint test of `terms` along the tuning axis of `estimators` (one family); see the
    module docstring for how each family is computed."""
    ests = [as_estimator(e) for e in (estimators if isinstance(estimators, (list, tuple))
                                      else [estimators])]
    if not ests:
        raise SpecificationError("choose at least one estimator to sweep")
    family = ests[0].family
    if any(e.family is not family for e in ests):
        raise SpecificationError("a sweep moves estimators of one family along one axis")
    if family.axis is None:
        raise SpecificationError(f"{family.title} has no tuning parameter to sweep")
    why = family.applies(model)
    if why:
        raise SpecificationError(why)
    idx = _positions(model, terms)
    m = len(idx)
    v = joint_grid(model, [model.terms[i] for i in idx], family) if values is None else \
        np.atleast_1d(np.asarray(values, dtype=float))
    if v.size == 0 or np.any(~np.isfinite(v)):
        raise SpecificationError("the values to sweep must be finite numbers")
    if model.fits_exactly():
        raise EstimationError("the model fits the data exactly: no joint test is defined")
    nc, n = len(ests), len(v)
    out = {"statistic": np.full((nc, n), np.nan), "f_statistic": np.full((nc, n), np.nan),
           "p_value": np.full((nc, n), np.nan), "status": np.full((nc, n), "", dtype=object),
           "reasons": np.full((nc, n), "", dtype=object),
           "laws": np.full((nc, n), "", dtype=object)}
    involved = np.zeros(len(model.terms), dtype=bool)
    involved[idx] = True
    info = ModelInfo(model.nobs, model.df_resid)
    beta = np.asarray(model.beta)[idx]
    _fill_caches(model, [model.terms[i] for i in idx], ests)
    for c, est in enumerate(ests):
        covs, runs = _curve_covariances(model, idx, est, v)
        for i in range(n):
            lr, cov, status, reason = runs[i][0], covs[i], runs[i][1], runs[i][2]
            if status:
                out["status"][c, i], out["reasons"][c, i] = status, reason
                continue
            try:
                point = est.at(_typed(family, v[i]))
                law = _law_for(family.law(reference, point.params, lr, info), involved, m)
            except LagwiseError as exc:
                out["status"][c, i], out["reasons"][c, i] = "unavailable", str(exc)
                continue
            w, st, span = wald_statistic(beta, cov)
            if st:
                out["status"][c, i] = st
                out["reasons"][c, i] = singular_message(st, span, m, point.label_for(lr))
                continue
            form = law.wald(w, m)
            out["statistic"][c, i] = w
            out["f_statistic"][c, i] = form.f_statistic
            out["p_value"][c, i] = form.p_value
            out["laws"][c, i] = law.wald_text(m)
    return JointSweep(labels=[family.curve_label(e.params) for e in ests], estimators=ests,
                      values=v, restrictions=[model.terms[i] for i in idx],
                      reference=reference, symbol=family.axis.symbol, title=family.axis.title,
                      nobs=model.nobs, **out)


def _fill_caches(model, terms, estimators) -> None:
    """A kernel weighting every lag needs every lag's autocovariances: fill the view's and the
    diagonal caches once, before the finite kernels would fill them to fewer lags first."""
    kernels = [get_kernel(e.family.kernel_of(e.params)) for e in estimators
               if e.family.kernel_of(e.params) is not None]
    if any(k.psd and not k.finite_support for k in kernels):
        restricted_view(model, terms).moments.ensure(model.nobs - 1)
        _moment_diagonal(model).ensure(model.nobs - 1)


def _curve_covariances(model, idx, est, values):
    """V_RR at every value for one estimator, and per point (light LongRun, status, reason)."""
    family = est.family
    params = est.params
    kernel_name = family.kernel_of(params)
    if kernel_name is not None:
        kern = get_kernel(kernel_name)
        if kern.psd or not params.get("repair", True):
            return _kernel_path(model, idx, est, kern, values)
        return _repaired_path(model, idx, est, kern, values)
    if family.quadratic(params):
        view = restricted_view(model, [model.terms[i] for i in idx])
        return _point_path(model, view, idx, est, values)
    return _point_path(model, model, idx, est, values)


def _kernel_path(model, idx, est, kern, values):
    b = np.asarray(values, dtype=float)
    if np.any(b <= 0):
        raise SpecificationError("bandwidths must be positive numbers")
    view = restricted_view(model, [model.terms[i] for i in idx])
    cache = view.moments
    if not kern.finite_support:
        cache.ensure(model.nobs - 1)
    factor = model.small_sample_factor if est.params.get("small_sample") else 1.0
    covs = model.nobs * factor * cache.unpack(cache.kernel_sums(kern, b))
    lags = kern.lags_many(b, model.nobs)
    diag = _moment_diagonal(model)
    if not kern.finite_support:
        diag.ensure(model.nobs - 1)
    s_diag = diag.kernel_sums(kern, b) * factor
    g0 = np.abs(diag.packed(0)[0])
    collapsed = ((np.abs(s_diag) <= longrun.COLLAPSE_TOL * g0) & (g0 > 0)).any(axis=1)
    runs = []
    for x, n_lags, gone in zip(b, lags, collapsed):
        lr = longrun.LongRun(S=None, bandwidth=float(x), lags=int(n_lags), tuning=float(x),
                             factor=factor)
        runs.append((lr, "collapsed", f"the estimate of S is zero at b = {x:g}") if gone
                    else (lr, "", ""))
    return covs, runs


def _repaired_path(model, idx, est, kern, values):
    """A non-PSD kernel with the eigenvalue repair: S(b) of every moment, repaired as `infer`
    repairs it, then the restricted block of T M S M'."""
    b = np.asarray(values, dtype=float)
    mr = model.influence_map[idx]
    covs = np.empty((len(b), len(idx), len(idx)))
    runs = []
    p = est.params
    model.moments.ensure(int(kern.lags_many(b, model.nobs).max()))   # once, every batch's lags
    for start in range(0, len(b), REPAIR_BATCH):
        part = b[start: start + REPAIR_BATCH]
        s, lags, _, status = longrun.kernel_many(model, kern, part,
                                                 small_sample=p.get("small_sample", False),
                                                 repair=True)
        covs[start: start + len(part)] = model.nobs * (mr @ s @ mr.T)
        for x, n_lags, st in zip(part, lags, status):
            lr = longrun.LongRun(S=None, bandwidth=float(x), lags=int(n_lags), tuning=float(x))
            if st == "collapsed":
                runs.append((lr, "collapsed", f"the estimate of S is zero at b = {x:g}"))
            else:
                runs.append((lr, "", ""))
    return covs, runs


def _point_path(model, target, idx, est, values):
    """One estimate of S per point: on the view (quadratic families) or on the model."""
    family = est.family
    m = len(idx)
    covs = np.full((len(values), m, m), np.nan)
    runs = []
    for i, x in enumerate(values):
        try:
            point = est.at(_typed(family, x))
            lr = point.long_run(target)
            if target is model:
                full = model.covariance_from_long_run(lr.S)
                covs[i] = full[np.ix_(idx, idx)]
            else:
                covs[i] = target.covariance_from_long_run(lr.S)
            light = longrun.LongRun(S=None, bandwidth=lr.bandwidth, lags=lr.lags, law=lr.law,
                                    tuning=lr.tuning, span=lr.span, factor=lr.factor)
            runs.append((light, "", ""))
        except LagwiseError as exc:
            runs.append((longrun.LongRun(S=None, tuning=float(x)), "unavailable", str(exc)))
    return covs, runs


def rule_landings(model, estimators) -> list[tuple[int, str, str, float]]:
    """Where each automatic rule of the family lands on each curve: (curve, rule key, title,
    value); rules that cannot be applied here are left out."""
    out = []
    for c, est in enumerate(estimators):
        est = as_estimator(est)
        axis = est.family.axis
        if axis is None:
            continue
        for key, (title, changes) in axis.rules.items():
            try:
                point = est.with_params(**changes)
                name = point.family.kernel_of(point.params)
                if name is not None:            # a kernel weighting: the rule's b, no estimate
                    value = resolve_bandwidth(model, get_kernel(name),
                                              point.params["bandwidth"]).b
                else:
                    value = point.long_run(model).tuning
            except LagwiseError:
                continue
            if value is not None and np.isfinite(value):
                out.append((c, key, title, float(value)))
    return out


