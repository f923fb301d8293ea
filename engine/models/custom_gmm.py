"""GMM with the analyst's own moment function (Hansen 1982).

`fit_gmm(moments, start, data)` estimates theta from sample moment conditions
gbar(theta) = (1/T) sum_t g_t(theta) = 0 written by the analyst: `moments(theta, data)` returns the
T x m matrix of contributions g_t(theta). The estimate minimises gbar' W gbar:

* "identity": one step with W = I (or a fixed weight matrix given as `weighting`);
* "two-step": a first step with `first_weight` (default I), then W = S^-1 with S from the
  estimator of S (`estimator`, any registered family) on the first step's contributions;
* "iterated": W = S(theta)^-1 re-estimated until theta changes by less than `tol`;
* "cue": continuously updated, gbar' S(theta)^-1 gbar minimised with S inside the objective (a
  data-driven bandwidth fixed at its two-step value, so the objective is smooth; Hansen, Heaton
  & Yaron 1996).

D = dgbar/dtheta' (m x p) is the analyst's `jacobian(theta, data)` or a central difference with
step h_j = eps^(1/3) max(|theta_j|, 1) (eps the double-precision epsilon). The fitted model is a
moment model like every other: V = (D'WD)^-1 D'W S W D (D'WD)^-1 / T for any estimator of S
(`infer`), the efficient form (D'S^-1 D)^-1 / T with the weighting's own S (`infer_weighting`),
Hansen's J, the comparison, and sweeps along a tuning axis with the weighting following the
estimator (the estimate and J move). Minimisation: scipy.optimize.minimize (BFGS with the
analytic gradient 2 D'W gbar; gtol 1e-10 on the objective scaled by its starting value, at
most `max_iter` x 50 iterations, restarted up to three times until the first-order condition
|D'W gbar| <= 1e-6 |D| |W gbar| holds); a run that stops without converging raises
EstimationError with the optimiser's message, never returns a silent estimate. Nothing here evaluates text: the moment function is
the analyst's own Python code, run in the analyst's process (the dashboard never takes one).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize

from ..capabilities import Capabilities
from ..covariance.registry import as_estimator
from ..data.columns import SampleInfo, index_label
from ..data.table import Table
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..inference.sweep import sweep
from .base import MomentModel
from .gmm_common import WeightedGMM, axis_sweep, fixed_bandwidth, inverse_weight, with_j

WEIGHTINGS = {
    "identity": "one-step GMM with the identity weight (or the fixed weight given)",
    "two-step": "two-step efficient GMM (W = S^-1 from the first step's moment contributions)",
    "iterated": "iterated GMM (W = S(theta)^-1 re-estimated to convergence)",
    "cue": "continuously updated GMM (S(theta) inside the objective)",
}
#: Central-difference step: h_j = STEP_SCALE * max(|theta_j|, 1), STEP_SCALE = eps^(1/3).
STEP_SCALE = float(np.finfo(float).eps) ** (1.0 / 3.0)
#: Relative gradient size below which a stop for precision loss still counts as converged
#: (the continuously updated objective).
GRADIENT_TOL = 1e-6
#: |D'W gbar| / (|D| |W gbar|) below which gbar' W gbar is at a stationary point.
STATIONARITY_TOL = 1e-6


class MomentProblem:
    """The analyst's moment conditions on their data: evaluated and checked in one place."""

    def __init__(self, moments, data, jacobian=None, m=None, p=None):
        if not callable(moments):
            raise SpecificationError("moments must be a function (theta, data) -> T x m array")
        if jacobian is not None and not callable(jacobian):
            raise SpecificationError("jacobian must be a function (theta, data) -> m x p array")
        self.moments = moments
        self.jacobian_function = jacobian
        self.data = data
        self.m, self.p = m, p
        self.nobs = None

    def contributions(self, theta) -> np.ndarray:
        try:
            g = self.moments(np.asarray(theta, dtype=float), self.data)
        except LagwiseError:
            raise
        except Exception as exc:  # noqa: BLE001 - the analyst's function: say what it raised
            raise EstimationError(f"the moment function failed at theta = "
                                  f"{np.round(np.asarray(theta, dtype=float), 6).tolist()}: "
                                  f"{type(exc).__name__}: {exc}") from None
        g = np.asarray(g, dtype=float)
        if g.ndim == 1:
            g = g[:, None]
        if g.ndim != 2:
            raise SpecificationError(f"the moment function must return a T x m array, got "
                                     f"shape {g.shape}")
        if self.nobs is None:
            self.nobs, self.m = g.shape
        elif g.shape != (self.nobs, self.m):
            raise SpecificationError(f"the moment function returned shape {g.shape}, earlier "
                                     f"{(self.nobs, self.m)}: it must not change with theta")
        return g

    def mean(self, theta) -> np.ndarray:
        return self.contributions(theta).mean(axis=0)

    def jacobian(self, theta) -> np.ndarray:
        """D = d gbar / d theta' (m x p): the analyst's, or central differences."""
        theta = np.asarray(theta, dtype=float)
        if self.jacobian_function is not None:
            try:
                d = np.asarray(self.jacobian_function(theta, self.data), dtype=float)
            except Exception as exc:  # noqa: BLE001 - the analyst's function
                raise EstimationError(f"the jacobian function failed: {type(exc).__name__}: "
                                      f"{exc}") from None
            if d.shape != (self.m, theta.size):
                raise SpecificationError(f"the jacobian must be m x p = {(self.m, theta.size)}, "
                                         f"got {d.shape}")
            return d
        return numerical_jacobian(self.mean, theta)


def numerical_jacobian(mean, theta) -> np.ndarray:
    """Central differences of gbar with step h_j = eps^(1/3) max(|theta_j|, 1)."""
    theta = np.asarray(theta, dtype=float)
    cols = []
    for j in range(theta.size):
        h = STEP_SCALE * max(abs(theta[j]), 1.0)
        up, down = theta.copy(), theta.copy()
        up[j] += h
        down[j] -= h
        cols.append((mean(up) - mean(down)) / (up[j] - down[j]))
    return np.column_stack(cols)


def stationarity(problem: MomentProblem, w: np.ndarray, theta) -> float:
    """|D'W gbar| relative to |D| |W gbar|: zero at a stationary point of gbar' W gbar (and 0
    when gbar itself is zero)."""
    g = problem.mean(theta)
    wg = w @ g
    d = problem.jacobian(theta)
    if np.linalg.norm(wg) == 0:
        return 0.0
    size = np.linalg.norm(d) * np.linalg.norm(wg)
    return np.inf if size == 0 else float(np.linalg.norm(d.T @ wg) / size)


def minimise(problem: MomentProblem, w: np.ndarray, start, max_iter: int = 100,
             rounds: int = 3) -> np.ndarray:
    """theta minimising gbar' W gbar from `start`: BFGS with the analytic gradient 2 D'W gbar
    on the objective scaled by its value at the starting point, restarted (at most `rounds`
    times, rescaled) until the first-order condition holds to STATIONARITY_TOL; otherwise an
    EstimationError with the optimiser's message."""
    theta = np.asarray(start, dtype=float)
    message = ""
    for _ in range(rounds):
        g0 = problem.mean(theta)
        q0 = float(g0 @ w @ g0)
        scale = 1.0 / q0 if q0 > 0 and np.isfinite(q0) else 1.0

        def objective(th, scale=scale):
            g = problem.mean(th)
            q = float(g @ w @ g) * scale
            return q if np.isfinite(q) else np.inf

        def gradient(th, scale=scale):
            return 2.0 * problem.jacobian(th).T @ w @ problem.mean(th) * scale

        with np.errstate(over="ignore", invalid="ignore"):
            res = optimize.minimize(objective, theta, jac=gradient, method="BFGS",
                                    options={"gtol": 1e-10, "maxiter": 50 * max_iter})
        if not np.isfinite(res.fun) or not np.all(np.isfinite(res.x)):
            raise EstimationError(f"minimising gbar' W gbar reached a point where it is not "
                                  f"finite ({res.message}); try other starting values")
        theta, message = res.x, res.message
        with np.errstate(over="ignore", invalid="ignore"):
            if stationarity(problem, w, theta) <= STATIONARITY_TOL:
                return theta
    raise EstimationError(f"minimising gbar' W gbar did not converge: {message} (the "
                          f"first-order condition is not met at theta = "
                          f"{np.round(theta, 6).tolist()}); try other starting values or a "
                          "simpler weighting")


def _accept(res, what: str) -> np.ndarray:
    if not np.isfinite(res.fun) or not np.all(np.isfinite(res.x)):
        raise EstimationError(f"minimising {what} reached a point where it is not finite "
                              f"({res.message}); try other starting values")
    if res.success:
        return res.x
    grad = getattr(res, "jac", None)
    if grad is not None and np.all(np.isfinite(grad)) \
            and np.max(np.abs(grad)) <= GRADIENT_TOL * max(1.0, abs(res.fun)):
        return res.x            # stopped on precision loss at a stationary point
    raise EstimationError(f"minimising {what} did not converge: {res.message} "
                          f"(after {res.nit} iterations); try other starting values or a "
                          "simpler weighting")


class GMMFit(WeightedGMM, MomentModel):
    """A GMM fit of the analyst's moment conditions (see the module docstring)."""

    kind = "GMM (own moment function)"
    df_reason = "T - p"

    def __init__(self, problem: MomentProblem, theta, w, *, names, moment_names, index,
                 sample, weighting, estimator=None, weighting_run=None, first_step=None,
                 iterations=1, label=""):
        self._init_model()
        self.problem = problem
        self.beta = np.asarray(theta, dtype=float)
        self.W = np.asarray(w, dtype=float)
        self.terms = list(names)
        self._moment_names = list(moment_names)
        self.index = index
        self.sample = sample
        self.method = weighting
        self.weight = estimator
        self.weighting = weighting_run
        self.first_step = first_step
        self.iterations = iterations
        self.response = label
        self.horizon = None
        g = problem.contributions(self.beta)
        self.caches.put("working_contributions", g)
        self.nobs, self.k = g.shape[0], self.beta.size

    @property
    def D(self) -> np.ndarray:
        """d gbar / d theta' at the estimate (m x p), computed once."""
        def build():
            d = self.problem.jacobian(self.beta)
            if not np.all(np.isfinite(d)):
                raise EstimationError("the derivative of the moments is not finite at the "
                                      "estimate")
            return d
        return self.caches.get("jacobian", build)

    # ------------------------------------------------------------------ the protocol
    @property
    def capabilities(self) -> Capabilities:
        """The rows are taken to be consecutive periods; the weighting can follow the
        estimator of S."""
        return Capabilities(time_ordered=True, reweighting=True)

    @property
    def moment_names(self) -> list[str]:
        return list(self._moment_names)

    @property
    def working_basis(self) -> np.ndarray:
        return np.eye(self.m)

    def to_original(self, s_working):
        return s_working

    def to_working(self, s_original):
        return s_original

    def _original_contributions(self):
        return self.working_contributions

    @property
    def influence_map(self) -> np.ndarray:
        """M = (D'WD)^-1 D'W / T, so that V = T M S M'."""
        def build():
            dw = self.D.T @ self.W
            try:
                return np.linalg.solve(dw @ self.D, dw) / self.nobs
            except np.linalg.LinAlgError:
                raise EstimationError("D'WD is singular: the moments do not identify every "
                                      "parameter at the estimate") from None
        return self.caches.get("influence_map", build)

    @property
    def df_resid(self) -> int:
        return self.nobs - self.k

    @property
    def sigma2(self) -> float:
        return float("nan")

    def homoskedastic_long_run(self) -> np.ndarray:
        g = self.working_contributions
        return g.T @ g / self.nobs

    j_subject = "the contributions"

    def mean_moment(self) -> np.ndarray:
        return self.working_contributions.mean(axis=0)

    def weighting_words(self) -> str:
        if self.weight is None:
            return "the fixed weight given" if self.method == "identity" else ""
        return f"{self.weight.label} on the first step's contributions"

    @property
    def overidentification(self) -> int:
        return self.m - self.k

    def describe_method(self) -> str:
        text = WEIGHTINGS.get(self.method, "GMM with a fixed weight matrix")
        if self.weight is not None and self.method in ("two-step", "iterated", "cue"):
            text += f"; S for the weighting: {self.weight.label}"
        if self.method in ("iterated", "cue"):
            text += f"; {self.iterations} iteration(s)"
        return text + ("; derivative by central differences" if
                       self.problem.jacobian_function is None else "")

    # ------------------------------------------------------------------ weightings
    def _child(self, theta, w, method, est, run, iterations):
        return GMMFit(self.problem, theta, w, names=self.terms, moment_names=self._moment_names,
                      index=self.index, sample=self.sample, weighting=method, estimator=est,
                      weighting_run=run, first_step=self.first_step or self,
                      iterations=iterations, label=self.response)

    def two_step(self, estimator, max_iter: int = 100) -> "GMMFit":
        """Two-step efficient GMM with this fit as the first step, S from `estimator`."""
        est = as_estimator(estimator)
        cache = self.caches.get("two_step", dict)
        key = repr(est)
        if key not in cache:
            w, lr = inverse_weight(est, self)
            theta = minimise(self.problem, w, self.beta, max_iter)
            if len(cache) >= 8:
                cache.pop(next(iter(cache)))
            cache[key] = self._child(theta, w, "two-step", est, lr, 2)
        return cache[key]

    def iterated(self, estimator, max_iter: int = 100, tol: float = 1e-8) -> "GMMFit":
        est = as_estimator(estimator)
        current, steps = self, 1
        while True:
            w, lr = inverse_weight(est, current)
            theta = minimise(self.problem, w, current.beta, max_iter)
            change = np.max(np.abs(theta - current.beta) / (np.abs(current.beta) + 1e-8))
            current = self._child(theta, w, "iterated", est, lr, steps + 1)
            steps += 1
            if change < tol:
                break
            if steps > max_iter:
                raise EstimationError(f"iterated GMM did not converge in {max_iter} iterations "
                                      f"(last relative change {change:.2g}); use two-step")
        w, lr = inverse_weight(est, current)
        return self._child(current.beta, w, "iterated", est, lr, steps)

    def cue(self, estimator, max_iter: int = 100, tol: float = 1e-8) -> "GMMFit":
        est = as_estimator(estimator)
        start = self.iterated(est, max_iter=max_iter, tol=max(tol, 1e-6)) \
            if not est.family.fixed_weight else self.two_step(est)
        fixed = fixed_bandwidth(est, start)
        problem = self.problem

        def objective(theta):
            try:
                trial = self._child(theta, start.W, "cue", None, None, 0)
                s = fixed.long_run(trial).S
                g = problem.mean(theta)
                return float(self.nobs * g @ np.linalg.solve(s, g))
            except (LagwiseError, np.linalg.LinAlgError):
                return np.inf
        with np.errstate(over="ignore", invalid="ignore"):
            res = optimize.minimize(objective, start.beta, method="BFGS",
                                    options={"gtol": 1e-9, "maxiter": 50 * max_iter})
        theta = _accept(res, "the continuously updated objective")
        trial = self._child(theta, start.W, "cue", None, None, 0)
        w, lr = inverse_weight(fixed, trial)
        return self._child(theta, w, "cue", fixed, lr, int(res.nit) + 1)

    # ------------------------------------------------------------------ sensitivity
    def sweep_axis(self, estimators, values=None):
        """Estimators of one family along its axis. For a weighted fit (two-step, iterated,
        CUE) the weighting follows the estimator: the two-step estimate from the first step at
        each value, its efficient-form standard error and J; for a one-step fit the estimate
        stays and S moves (J at every point)."""
        ests = [as_estimator(e) for e in (estimators if isinstance(estimators, (list, tuple))
                                          else [estimators])]
        if self.method not in ("two-step", "iterated", "cue"):
            return with_j(self, sweep(self, ests, values))
        return axis_sweep(self.first_step or self, ests, values)

    def __repr__(self):
        return (f"GMMFit(parameters={self.terms}, moments={self.m}, method={self.method!r}, "
                f"T={self.nobs})")


def _index_of(data, nobs):
    frame = data.frame if isinstance(data, Table) else data
    if isinstance(frame, (pd.DataFrame, pd.Series)) and len(frame.index) == nobs:
        return frame.index
    return pd.RangeIndex(nobs)


def fit_gmm(moments, start, data, *, jacobian=None, weighting="two-step", estimator=None,
            first_weight=None, names=None, moment_names=None, label: str = "",
            max_iter: int = 100, tol: float = 1e-8) -> GMMFit:
    """GMM with your own moment function (see engine.models.custom_gmm).

    moments: (theta, data) -> T x m array of contributions g_t(theta); start: starting values
    (a sequence, or a dict / Series whose keys name the parameters); data: passed to your
    functions as it is (a DataFrame, a Table, arrays...). jacobian: (theta, data) -> the m x p
    derivative of the mean contribution (default: central differences). weighting: "identity",
    "two-step", "iterated", "cue", or an m x m weight matrix (one step with it). estimator: the
    estimator of S behind the weighting (default HC0). first_weight: the first step's weight
    for two-step and iterated (default the identity). names / moment_names: labels of the
    parameters and of the moments."""
    if isinstance(start, (dict, pd.Series)):
        names = list(start.keys()) if names is None else names
        start = list(start.values())
    theta0 = np.atleast_1d(np.asarray(start, dtype=float))
    if theta0.ndim != 1 or theta0.size == 0 or not np.all(np.isfinite(theta0)):
        raise SpecificationError("start must be a non-empty list of finite numbers")
    p = theta0.size
    names = [f"theta{i}" for i in range(p)] if names is None else [str(n) for n in names]
    if len(names) != p or len(set(names)) != p:
        raise SpecificationError(f"give {p} distinct parameter names")
    problem = MomentProblem(moments, data, jacobian)
    g = problem.contributions(theta0)
    t_obs, m = g.shape
    if not np.all(np.isfinite(g)):
        raise EstimationError("the moment contributions are not finite at the starting values")
    if m < p:
        raise SpecificationError(f"{m} moment conditions cannot identify {p} parameters")
    if t_obs <= m:
        raise SpecificationError(f"{t_obs} observations are too few for {m} moments")
    moment_names = [f"g{i}" for i in range(m)] if moment_names is None \
        else [str(n) for n in moment_names]
    if len(moment_names) != m:
        raise SpecificationError(f"give {m} moment names")
    index = _index_of(data, t_obs)
    sample = SampleInfo(rows_available=t_obs, rows_used=t_obs, first=index_label(index[0]),
                        last=index_label(index[-1]))
    fixed = None
    if not isinstance(weighting, str):
        fixed = np.asarray(weighting, dtype=float)
        if fixed.shape != (m, m) or not np.all(np.isfinite(fixed)):
            raise SpecificationError(f"a weight matrix must be a finite {m} x {m} array")
        weighting = "identity"
    if weighting not in WEIGHTINGS:
        raise SpecificationError(f"weighting must be one of {', '.join(WEIGHTINGS)} or an "
                                 "m x m matrix")
    w1 = np.eye(m) if fixed is None else 0.5 * (fixed + fixed.T)
    if first_weight is not None and fixed is None:
        w1 = np.asarray(first_weight, dtype=float)
        if w1.shape != (m, m):
            raise SpecificationError(f"first_weight must be {m} x {m}")
    theta1 = minimise(problem, w1, theta0, max_iter)
    first = GMMFit(problem, theta1, w1, names=names, moment_names=moment_names, index=index,
                   sample=sample, weighting="identity", label=label)
    if weighting == "identity":
        return first
    est = as_estimator(estimator if estimator is not None else "hc0")
    if weighting == "two-step":
        return first.two_step(est, max_iter)
    if weighting == "iterated":
        return first.iterated(est, max_iter, tol)
    return first.cue(est, max_iter, tol)
