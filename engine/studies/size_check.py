"""The size of each test at the analyst's own sample.

`size_check(fit, estimators, reps, method)`: simulate data like the analyst's under the null
(the coefficient in focus is zero) at the same T, from a VAR fitted to the regressors and the
null-imposed residuals (`method="var"`) or by block-resampling them (`method="block"`), keeping
the overlap of an h-period response; refit and test with every estimator at its settings; report
each nominal test's actual rejection rate with a Monte Carlo interval and the size-adjusted
critical value. Replications run in chunks, each with its own seed from one SeedSequence, on
worker processes; the numbers do not depend on the number of workers. A progress callback and a
cancel check are taken.
"""

from __future__ import annotations

import concurrent.futures as cf
import math
import multiprocessing as mp
import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..blas import one_blas_thread
from ..capabilities import missing
from ..covariance.registry import as_estimator, estimator
from ..data.columns import INTERCEPT
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..inference.compare import family_presets
from ..laws.reference import normal_critical, row_suffix
from .bootstrap import quick_fit
from .predictive import one_period_series

SIZE_METHODS = ("var", "block")


@dataclass
class SizeCheck:
    frame: pd.DataFrame      # estimator, family, reference, nominal, rejection_rate, ci_low,
    #                          ci_high, size_adjusted_critical_value, typical_critical_value
    reps: int                # replications requested
    done: int                # replications completed
    method: str
    seed: int
    focus: str
    level: float
    notes: list[str] = field(default_factory=list)
    cancelled: bool = False


def wilson(k: int, n: int, level: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion."""
    if n == 0:
        return float("nan"), float("nan")
    z = normal_critical(level)
    p = k / n
    centre = (p + z**2 / (2 * n)) / (1 + z**2 / n)
    half = z * math.sqrt(p * (1 - p) / n + z**2 / (4 * n**2)) / (1 + z**2 / n)
    return max(centre - half, 0.0), min(centre + half, 1.0)


def _fit_var(z: np.ndarray, max_order: int, min_order: int = 1):
    """A VAR with a constant by least squares, order by BIC in [min_order, max_order]; returns
    (order, intercept (m,), coefficients (p, m, m) with A[i] multiplying z_{t-i-1}, residuals)."""
    t, m = z.shape
    best = None
    for p in range(min_order, max_order + 1):
        rows = t - max_order
        Y = z[max_order:]
        Z = np.column_stack([np.ones(rows)] + [z[max_order - i - 1: t - i - 1]
                                               for i in range(p)])
        coef, *_ = np.linalg.lstsq(Z, Y, rcond=None)
        resid = Y - Z @ coef
        sign, logdet = np.linalg.slogdet(resid.T @ resid / rows)
        bic = logdet + np.log(rows) * (m * m * p) / rows
        if sign > 0 and (best is None or bic < best[0]):
            best = (bic, p, coef)
    if best is None:
        raise EstimationError("the VAR for the simulation could not be fitted")
    _, p, coef = best
    Y = z[p:]
    Z = np.column_stack([np.ones(t - p)] + [z[p - i - 1: t - i - 1] for i in range(p)])
    coef, *_ = np.linalg.lstsq(Z, Y, rcond=None)
    resid = Y - Z @ coef
    c = coef[0]
    a = np.stack([coef[1 + i * m: 1 + (i + 1) * m].T for i in range(p)])
    return p, c, a, resid


def _plan(fit, focus: str, method: str):
    """Everything a worker needs to simulate: plain arrays and numbers (picklable)."""
    if focus not in fit.terms or focus == INTERCEPT:
        raise SpecificationError(f"choose a slope to check; terms are {', '.join(fit.terms)}")
    j = fit.terms.index(focus)
    X = fit.X
    keep = [i for i in range(fit.k) if i != j]
    # the null: the focus coefficient set to zero, the others and the errors as estimated (the
    # residuals of the full fit: restricted residuals would keep the focus predictor's
    # contribution, and its persistence, in the simulated errors)
    coef_r = fit.beta[keep]
    e_r = fit.resid
    h = fit.horizon or 1
    const = [i for i in range(fit.k) if fit.terms[i] == INTERCEPT]
    xcols = [i for i in range(fit.k) if fit.terms[i] != INTERCEPT]
    plan = {"method": method, "T": fit.nobs, "terms": fit.terms, "k": fit.k, "j": j,
            "keep": keep, "coef_r": coef_r, "const": const, "xcols": xcols, "h": h,
            "response": fit.response, "X_const": X[0, const] if const else np.zeros(0)}
    one = None
    if h > 1 and fit.capabilities.one_period:
        y1, _ = one_period_series(fit)
        if np.isfinite(y1).all():
            one = y1
    plan["one_period"] = one is not None
    if one is not None:
        # one-period errors: the residuals of the one-period regression on every regressor
        u1 = one - X @ np.linalg.lstsq(X, one, rcond=None)[0]
        series = np.column_stack([X[:, xcols], u1])
    else:
        series = np.column_stack([X[:, xcols], e_r])
    plan["series"] = series
    notes = []
    if method == "var":
        top = int(min(max(h, 4), max(1, series.shape[0] // (4 * series.shape[1]))))
        p, c, a, resid = _fit_var(series, max_order=max(top, 1),
                                  min_order=1 if one is not None or h == 1 else min(h, top))
        # no predictability: the error equation does not load on the lagged regressors
        a[:, -1, :-1] = 0.0
        plan.update(var_order=p, var_c=c, var_a=a, var_resid=resid)
        notes.append(f"simulated under beta = 0 for '{focus}' from a VAR({p}) of the "
                     "regressors and the estimated errors, its residuals resampled; the errors' "
                     "equation does not load on lagged regressors (no predictability)")
    else:
        from arch.bootstrap import optimal_block_length
        b = float(np.nanmax(optimal_block_length(series)["circular"].to_numpy()))
        b = max(b if np.isfinite(b) else 1.0, 2.0 * h, 1.0)
        plan["block"] = b
        notes.append(f"simulated under beta = 0 for '{focus}': rows of the regressors and the "
                     f"estimated errors resampled in moving blocks of {b:.0f} (Politis-White via "
                     "arch, at least 2h)")
    if one is not None:
        notes.append(f"the {h}-period response is rebuilt as the sum of the next {h} simulated "
                     "one-period errors, so its overlap is exact")
    elif h > 1:
        notes.append(f"the {h}-period response's errors are simulated directly (the one-period "
                     "series is not known), so their MA structure is approximated")
    return plan, notes


def _simulate(plan, rng):
    """One data set under the null: (X, y, one-period series or None)."""
    T, h = plan["T"], plan["h"]
    series = plan["series"]
    m = series.shape[1]
    extra = h if plan["one_period"] else 0
    n = T + extra
    if plan["method"] == "var":
        p, c, a, resid = plan["var_order"], plan["var_c"], plan["var_a"], plan["var_resid"]
        burn = 200
        draws = resid[rng.integers(0, len(resid), size=n + burn)]
        z = np.empty((n + burn + p, m))
        z[:p] = series.mean(axis=0)
        for t in range(p, n + burn + p):
            z[t] = c + draws[t - p]
            for i in range(p):
                z[t] += a[i] @ z[t - i - 1]
        sim = z[burn + p:]
    else:
        from arch.bootstrap import MovingBlockBootstrap
        bs = MovingBlockBootstrap(max(int(round(plan["block"])), 1), np.arange(len(series)),
                                  seed=rng)
        idx = next(bs.bootstrap(1))[0][0]
        while len(idx) < n:                      # the h rows beyond the sample: more blocks
            idx = np.r_[idx, next(bs.bootstrap(1))[0][0]]
        sim = series[idx[:n]]
    X = np.empty((T, plan["k"]))
    for i in plan["const"]:
        X[:, i] = 1.0
    X[:, plan["xcols"]] = sim[:T, :-1]
    part = X[:, plan["keep"]] @ plan["coef_r"] if plan["keep"] else np.zeros(T)
    if plan["one_period"]:
        u1 = sim[:, -1]
        csum = np.r_[0.0, np.cumsum(u1)]
        errors = csum[1 + h: T + 1 + h] - csum[1: T + 1]      # u_{t+1} + ... + u_{t+h}
        # the one-period errors as the one-period series (Hodrick's estimator demeans them)
        return X, part + errors, pd.Series(u1, name="one period")
    return X, part + sim[:T, -1], None


def _run_chunk(plan, settings, reps, seed_entropy, level):
    """Replications of one chunk: |t|, critical values and rejections per estimator."""
    with one_blas_thread():
        return _chunk(plan, settings, reps, seed_entropy, level)


def _chunk(plan, settings, reps, seed_entropy, level):
    rng = np.random.default_rng(seed_entropy)
    ests = [(estimator(s["estimator"], **s["params"]), ref) for s, ref in settings]
    j = plan["j"]
    shell = _Shell(plan)
    out_t = np.full((reps, len(ests)), np.nan)
    out_cv = np.full((reps, len(ests)), np.nan)
    for r in range(reps):
        X, y, one = _simulate(plan, rng)
        try:
            m = quick_fit(shell, X, y, one)
        except LagwiseError:
            continue
        for e, (est, ref) in enumerate(ests):
            try:
                res = m.infer(est, level=level, reference=ref or "auto")
            except LagwiseError:
                continue
            out_t[r, e] = abs(res.table.iat[j, 2])          # column 2: t_stat
            out_cv[r, e] = res.critical_value
    return out_t, out_cv


class _Shell:
    """What `quick_fit` reads from a fit."""

    def __init__(self, plan):
        self.terms = plan["terms"]
        self.response = plan["response"]
        self.horizon = plan["h"] if plan["h"] > 1 else None


def size_check(fit, estimators=None, reps: int = 1000, method: str = "var", seed: int = 0,
               level: float = 0.95, focus: str | None = None, progress=None, cancel=None,
               workers: int | None = None, chunks: int = 20) -> SizeCheck:
    """The actual size of each estimator's nominal test of `focus` = 0 at this sample.

    estimators: Estimators or (Estimator, law request, why) items (default: the comparison's
    presets for this fit). progress(done, total) is called as chunks finish; cancel() returning
    True stops early (the result then covers the replications done and says so). workers: worker
    processes (default: the machine's cores, at most 2 per 1,000 replications; 1 runs here)."""
    why = missing(fit.capabilities, ("time_ordered", "least_squares", "rows"))
    if why:
        raise SpecificationError(f"the size check is for least-squares time-series fits: {why}")
    if method not in SIZE_METHODS:
        raise SpecificationError(f"method must be one of {', '.join(SIZE_METHODS)}")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 20:
        raise SpecificationError("use at least 20 replications")
    focus = focus or next((t for t in fit.terms if t != INTERCEPT), None)
    items = estimators if estimators is not None else family_presets(fit)
    items = [i if isinstance(i, tuple) else (as_estimator(i), None, "") for i in items]
    labels = []
    for est, ref, _ in items:
        label = est.label + row_suffix(ref)
        labels.append(label)
    settings = [(est.settings(), ref) for est, ref, _ in items]
    with one_blas_thread():
        plan, notes = _plan(fit, focus, method)
    chunks = int(max(1, min(chunks, reps)))
    sizes = [reps // chunks + (1 if i < reps % chunks else 0) for i in range(chunks)]
    seeds = np.random.SeedSequence(seed).spawn(chunks)
    entropies = [(s.entropy, *s.spawn_key) for s in seeds]
    if workers is None:
        workers = min(os.cpu_count() or 1, 2)
    results: dict[int, tuple] = {}
    cancelled = False
    done = 0
    if progress:
        progress(0, reps)
    if workers <= 1:
        for i, n in enumerate(sizes):
            if cancel and cancel():
                cancelled = True
                break
            results[i] = _run_chunk(plan, settings, n, _entropy(entropies[i]), level)
            done += n
            if progress:
                progress(done, reps)
    else:
        with cf.ProcessPoolExecutor(max_workers=workers,
                                    mp_context=mp.get_context("spawn")) as pool:
            futures = {pool.submit(_run_chunk, plan, settings, n, _entropy(entropies[i]),
                                   level): i for i, n in enumerate(sizes)}
            pending = set(futures)
            while pending:
                finished, pending = cf.wait(pending, timeout=0.25,
                                            return_when=cf.FIRST_COMPLETED)
                for f in finished:
                    i = futures[f]
                    results[i] = f.result()
                    done += sizes[i]
                    if progress:
                        progress(done, reps)
                if pending and cancel and cancel():
                    cancelled = True
                    for f in pending:
                        f.cancel()
                    break
    if not results:
        raise EstimationError("the size check was cancelled before any replication finished")
    order = sorted(results)
    t_abs = np.vstack([results[i][0] for i in order])
    cvs = np.vstack([results[i][1] for i in order])
    rows = []
    for e, (est, ref, _) in enumerate(items):
        ok = np.isfinite(t_abs[:, e]) & np.isfinite(cvs[:, e])
        n_ok = int(ok.sum())
        k = int((t_abs[ok, e] > cvs[ok, e]).sum())
        lo, hi = wilson(k, n_ok)
        rows.append({"estimator": labels[e], "family": est.family.name,
                     "reference": ref or "auto", "nominal": 1.0 - level,
                     "rejection_rate": k / n_ok if n_ok else np.nan, "ci_low": lo, "ci_high": hi,
                     "size_adjusted_critical_value": float(np.quantile(t_abs[ok, e], level))
                     if n_ok else np.nan,
                     "typical_critical_value": float(np.median(cvs[ok, e])) if n_ok else np.nan,
                     "replications": n_ok})
    frame = pd.DataFrame(rows)
    if cancelled:
        notes.append(f"cancelled after {done} of {reps} replications; the rates cover those")
    notes.append(f"{done} replications at T = {fit.nobs}, seed {seed}; Monte Carlo intervals "
                 "are 95% Wilson intervals")
    return SizeCheck(frame=frame, reps=reps, done=done, method=method, seed=seed, focus=focus,
                     level=level, notes=notes, cancelled=cancelled)


def _entropy(spec):
    entropy, *key = spec
    return np.random.SeedSequence(entropy, spawn_key=tuple(key))
