"""The wild cluster bootstrap: p-values and confidence intervals by test inversion for a
coefficient of a least-squares fit (OLS, fixed-effects panels; one-way and two-way clustering)
and, for linear IV, the wild restricted efficient bootstrap.

Least squares (`WildSetup`): the restricted wild cluster bootstrap (WCR; Cameron, Gelbach &
Miller 2008) with the CR1 t statistic, by the algebra of Roodman, MacKinnon, Nielsen & Webb
(2019, Stata Journal 19(1), "fast and wild"): with w = X M c, the restricted residual
u~ = e + delta w (delta = (c'b - r) / c'Mc) and v the weights of the bootstrap clusters,

    c'b* - r = sum_g v_g a_g,              a_g = w_g'u~_g
    bootstrap CR1 score of cluster h = (Z_d v)_h,   Z_d = A_d - B_d S

(A_d[h, g] = sum over rows in h and g of w_i u~_i, B_d[h] = sum_{i in h} w_i Q_i,
S[:, g] = Q_g'u~_g, Q = [basis of X, absorbed effects not nested in the bootstrap clusters]).
Everything is linear in delta, so the setup (O(N k), independent of the null) keeps the pieces
for e and for w; a replication costs O(G p) for the bootstrap dimension (a o v - B (S v)) and
O(G^2) for each other dimension of two-way clustering (v' Z_d'Z_d v with the G x G matrix made
once). With five numbers per replication, t*(r) is a rational function of the null r, so the
p-value at any r and the interval by test inversion cost O(B) each, with no new replications.
Two-way clustering (MacKinnon, Nielsen & Webb 2021, J. Econometrics 224(1)): the weights are
drawn by one dimension (by default the one with fewer clusters) and t uses the two-way CR1
variance (entity + time - cells, each with its own factor).

Weights: Rademacher (+-1), Webb's six points (Webb 2023, Canadian J. Economics), Mammen's two.
With Rademacher weights and 2^G <= reps every sign vector is enumerated: the p-value is then
exact and the same for every seed. The sign vectors v = 1 and v = -1 reproduce t and -t exactly;
|t*| >= |t| is decided with a relative tolerance (TIE_RTOL) so they always count (under
enumeration the smallest symmetric p-value is 2 / 2^G).

Linear IV (`wre_bootstrap`): the wild restricted efficient bootstrap of Davidson & MacKinnon
(2010, JBES 28(1)) for the coefficient of one endogenous regressor, one-way clustering, the 2SLS
CR1 t statistic; the interval by inversion re-runs the restricted fits at each trial null.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import sparse

from ..covariance.cluster import check_offered, cluster_factor
from ..covariance.fewclusters import absorbed_basis, nested_in
from ..data.groupings import Grouping
from ..errors import EstimationError, SpecificationError

WEIGHTS = ("rademacher", "webb", "mammen")
PVALUES = ("symmetric", "equal-tailed")
MIN_REPS, MAX_REPS = 99, 10 ** 7
#: Replications per block (fixed, so seeded draws reproduce across calls).
BLOCK = 4096
#: Relative tolerance deciding |t*| >= |t| for the exact ties of v = +-1 (see _pvalue).
TIE_RTOL = 1e-9

_WEBB = np.array([-np.sqrt(1.5), -1.0, -np.sqrt(0.5), np.sqrt(0.5), 1.0, np.sqrt(1.5)])
_S5 = np.sqrt(5.0)
_MAMMEN = np.array([-(_S5 - 1) / 2, (_S5 + 1) / 2])
_MAMMEN_P = (_S5 + 1) / (2 * _S5)


@dataclass
class WildBootstrapResult:
    """A wild cluster bootstrap test of coefficient = null, and the interval by inversion."""

    coefficient: str
    by: str
    boot_by: str
    method: str                      # "WCR" (restricted), "WCU" (unrestricted), "WRE" (IV)
    estimate: float
    std_error: float                 # the CR1 standard error of the coefficient
    t_stat: float                    # (estimate - null) / std_error
    null: float
    p_value: float
    p_kind: str                      # "symmetric" or "equal-tailed"
    ci: tuple | None                 # (low, high) by test inversion at `level`
    level: float
    reps: int
    enumerated: bool
    weights: str
    seed: int
    n_clusters: int
    ci_is_interval: bool | None = None
    notes: list[str] = field(default_factory=list)
    t_star: np.ndarray | None = field(default=None, repr=False)

    def summary(self) -> str:
        pct = f"{self.level:.0%}"
        ci = ("not computed" if self.ci is None else
              f"[{self.ci[0]:.5g}, {self.ci[1]:.5g}]")
        how = (f"all 2^{self.n_clusters} = {self.reps:,} sign vectors (exact)" if self.enumerated
               else f"{self.reps:,} replications, {self.weights} weights, seed {self.seed}")
        return (f"wild cluster bootstrap ({self.method}, clusters by {self.by}"
                + (f", weights by {self.boot_by}" if self.boot_by != self.by else "")
                + f", {self.n_clusters} bootstrap clusters): {self.coefficient} = "
                f"{self.estimate:.5g}, t = {self.t_stat:.4g} for {self.coefficient} = "
                f"{self.null:g}; bootstrap p = {self.p_value:.4g} ({self.p_kind}); {pct} "
                f"interval {ci}; {how}")

    def to_dict(self) -> dict:
        return {"coefficient": self.coefficient, "by": self.by, "boot_by": self.boot_by,
                "method": self.method, "estimate": self.estimate, "std_error": self.std_error,
                "t_stat": self.t_stat, "null": self.null, "p_value": self.p_value,
                "p_kind": self.p_kind, "ci_low": None if self.ci is None else self.ci[0],
                "ci_high": None if self.ci is None else self.ci[1], "level": self.level,
                "reps": self.reps, "enumerated": self.enumerated, "weights": self.weights,
                "seed": self.seed, "n_clusters": self.n_clusters, "notes": list(self.notes)}


# --------------------------------------------------------------------------- checks and weights

def check_options(reps, weights, pvalue="symmetric", level=0.95, seed=0) -> None:
    """Typed errors naming the value, before any work."""
    if weights not in WEIGHTS:
        raise SpecificationError(f"weights={weights!r} is not one of {', '.join(WEIGHTS)}")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or \
            not MIN_REPS <= reps <= MAX_REPS:
        raise SpecificationError(f"reps must be a whole number from {MIN_REPS} to {MAX_REPS:,}, "
                                 f"got {reps!r}")
    if pvalue not in PVALUES:
        raise SpecificationError(f"pvalue={pvalue!r} is not one of {', '.join(PVALUES)}")
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.5 <= level < 1:
        raise SpecificationError(f"level must be between 0.5 and 1, got {level!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise SpecificationError(f"seed must be a whole number >= 0, got {seed!r}")


def enumerate_signs(G: int, start: int, stop: int) -> np.ndarray:
    """Rademacher sign vectors for the integers j in [start, stop): v_g = 1 - 2 bit_g(j), one
    column each. j = 0 is the vector of ones; j and 2^G - 1 - j are mirror images (v, -v)."""
    j = np.arange(start, stop, dtype=np.int64)
    bits = (j[None, :] >> np.arange(G, dtype=np.int64)[:, None]) & 1
    return 1.0 - 2.0 * bits


def draw_weights(rng, kind: str, G: int, nb: int) -> np.ndarray:
    """(G, nb) wild weights with mean 0 and variance 1."""
    if kind == "rademacher":
        nbits = G * nb
        raw = rng.integers(0, 256, size=(nbits + 7) // 8, dtype=np.uint8)
        return 1.0 - 2.0 * np.unpackbits(raw)[:nbits].reshape(G, nb)
    if kind == "webb":
        return _WEBB[rng.integers(0, 6, size=(G, nb), dtype=np.int8)]
    if kind == "mammen":
        return np.where(rng.random((G, nb)) < _MAMMEN_P, _MAMMEN[0], _MAMMEN[1])
    raise SpecificationError(f"weights={kind!r} is not one of {', '.join(WEIGHTS)}")


class Replications:
    """The weight blocks: every sign vector (enumerated: exact, seed-free) or seeded draws in
    fixed blocks of BLOCK (a second pass reproduces them)."""

    def __init__(self, G: int, reps: int, weights: str, seed: int, block: int = BLOCK):
        self.G, self.weights, self.seed, self.block = G, weights, int(seed), block
        self.enumerated = weights == "rademacher" and G < 40 and 2 ** G <= reps
        self.reps = 2 ** G if self.enumerated else int(reps)

    def blocks(self):
        rng = None if self.enumerated else np.random.default_rng(self.seed)
        for start in range(0, self.reps, self.block):
            stop = min(start + self.block, self.reps)
            yield (enumerate_signs(self.G, start, stop) if self.enumerated
                   else draw_weights(rng, self.weights, self.G, stop - start))


def _pvalue(N, D, t, kind):
    """Bootstrap p-value from the numerators N and squared denominators D of t* (D <= 0: |t*| is
    infinite and counts); exact ties counted (TIE_RTOL)."""
    if kind == "symmetric":
        return float(np.mean(N * N >= t * t * D * (1.0 - TIE_RTOL)))
    with np.errstate(divide="ignore", invalid="ignore"):
        ts = np.where(D > 0, N / np.sqrt(np.where(D > 0, D, 1.0)), np.sign(N) * np.inf)
    slack = TIE_RTOL * abs(t)
    lo = np.mean(ts <= t + slack)
    hi = np.mean(ts >= t - slack)
    return float(min(1.0, 2.0 * min(lo, hi)))


def _blas_one_thread():
    """One BLAS thread for the replications' many small products (faster on shared cores)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:                                    # pragma: no cover
        return contextlib.nullcontext()
    return threadpool_limits(limits=1)


# --------------------------------------------------------------------------- inversion

def _bisect(pfun, acc, rej, alpha, rtol=1e-10):
    scale = max(abs(acc), abs(rej), 1e-300)
    for _ in range(200):
        if abs(rej - acc) <= rtol * scale:
            break
        mid = 0.5 * (acc + rej)
        if pfun(mid) > alpha:
            acc = mid
        else:
            rej = mid
    return 0.5 * (acc + rej)


def invert(pfun, center, se, alpha, grid=101):
    """The confidence set {r : p(r) > alpha}: bracket outward from the estimate by doubling
    steps of one standard error, keep the outermost crossing of a fine scan, bisect; then check
    on a grid that the set is an interval. Returns ((low, high), is_interval)."""
    bounds = []
    for sgn in (-1.0, 1.0):
        step, prev, found = se, center, None
        for _ in range(80):
            r = center + sgn * step
            if pfun(r) <= alpha:
                found = r
                break
            prev, step = r, step * 2.0
        if found is None:
            bounds.append(sgn * np.inf)
            continue
        far = center + sgn * 2.0 * abs(found - center)
        scan = np.linspace(prev, far, 33)
        acc = [r for r in scan if pfun(r) > alpha]
        last_acc = max(acc, key=lambda r: abs(r - center)) if acc else prev
        outer = [r for r in scan if abs(r - center) > abs(last_acc - center)]
        rej = min(outer, key=lambda r: abs(r - center)) if outer else found
        bounds.append(_bisect(pfun, last_acc, rej, alpha))
    lo, hi = bounds
    is_int = True
    if np.isfinite(lo) and np.isfinite(hi):
        width = hi - lo
        tol = 1e-8 * max(abs(lo), abs(hi), width)
        for r in np.linspace(lo - 0.5 * width, hi + 0.5 * width, grid):
            if abs(r - lo) <= tol or abs(r - hi) <= tol:
                continue
            if (lo < r < hi) != (pfun(r) > alpha):
                is_int = False
                break
    return (float(lo), float(hi)), is_int


# --------------------------------------------------------------------------- least squares

class WildSetup:
    """The null-free pieces of the wild cluster bootstrap of one coefficient (see the module
    docstring): a(e), a(w), the boot dimension's (a, B, S) and, for the other dimensions of
    two-way clustering, the G x G matrices Z_d'Z_d. Holds only G- and p-sized arrays, so it
    travels cheaply (the dashboard's background job)."""

    def __init__(self, *, hat, resid, influence, beta, contrast, dims, boot, absorbed=(),
                 restricted=True):
        """hat: N x k orthonormal basis of X; influence: k x k map with beta = M hat'y;
        dims: [(Grouping, sign, factor)] of the t statistic's variance; boot: index of the
        bootstrap dimension."""
        c = np.asarray(contrast, dtype=float)
        ell = influence.T @ c
        self.cMc = float(ell @ ell)
        self.est = float(c @ beta)
        self.restricted = bool(restricted)
        w = hat @ ell
        bgroup = dims[boot][0]
        self.G = bgroup.n_groups
        Ft, _, _ = absorbed_basis(absorbed, bgroup.codes)
        Q = hat if Ft is None else np.hstack([hat, Ft])
        self.p = Q.shape[1]
        bcodes = bgroup.codes
        # variance of c'b: CR1, one- or two-way, each term its own factor
        var = 0.0
        for grouping, sign, factor in dims:
            sc = np.bincount(grouping.codes, weights=w * resid, minlength=grouping.n_groups)
            var += sign * factor * float(sc @ sc)
        if not var > 0:
            raise EstimationError(f"the cluster-robust variance of the tested coefficient is not "
                                  f"positive ({var:.3g}); the bootstrap t is not defined")
        self.var = var
        self.terms = []
        for j, (grouping, sign, factor) in enumerate(dims):
            B = _sums(grouping.codes, Q * w[:, None], grouping.n_groups)
            self.terms.append({"sign": sign, "factor": factor, "boot": j == boot, "B": B,
                               "grouping": grouping})
        u0, u1 = resid, w

        def pieces(u):
            a = np.bincount(bcodes, weights=w * u, minlength=self.G)
            S = _sums(bcodes, Q * u[:, None], self.G).T
            return a, S
        (self.a0, self.S0), (self.a1, self.S1) = pieces(u0), pieces(u1)
        # other dimensions: K = Z0'Z0, Z0'Z1 (+ transpose), Z1'Z1 (G x G)
        for tm in self.terms:
            if tm["boot"]:
                continue
            g = tm["grouping"]
            A0 = sparse.coo_matrix((w * u0, (g.codes, bcodes)), shape=(g.n_groups, self.G))
            A1 = sparse.coo_matrix((w * u1, (g.codes, bcodes)), shape=(g.n_groups, self.G))
            A0, A1 = A0.tocsr(), A1.tocsr()
            B = tm["B"]
            Z = [(A0, self.S0), (A1, self.S1)]

            def cross(x, y, B=B):
                (Ax, Sx), (Ay, Sy) = x, y
                AtA = (Ax.T @ Ay).toarray()
                AtB_x = np.asarray(Ax.T @ B)             # G x p
                AtB_y = np.asarray(Ay.T @ B)
                BtB = B.T @ B
                return AtA - AtB_x @ Sy - Sx.T @ AtB_y.T + Sx.T @ BtB @ Sy
            k01 = cross(Z[0], Z[1])
            tm["K00"] = cross(Z[0], Z[0])
            tm["K01"] = 0.5 * (k01 + k01.T)
            tm["K11"] = cross(Z[1], Z[1])
            del tm["B"]
        for tm in self.terms:
            tm.pop("grouping")
        self.dense_boot = 2 * self.p >= self.G

    def delta(self, r: float) -> float:
        return (self.est - r) / self.cMc if self.restricted else 0.0

    def t_stat(self, r: float) -> float:
        return (self.est - r) / np.sqrt(self.var)

    @property
    def std_error(self) -> float:
        return float(np.sqrt(self.var))

    def five(self, V):
        """(N0, N1, D00, D01, D11) for a block of weights V (G x b)."""
        N0, N1 = self.a0 @ V, self.a1 @ V
        d00 = np.zeros(V.shape[1])
        d01 = np.zeros(V.shape[1])
        d11 = np.zeros(V.shape[1])
        for tm in self.terms:
            s = tm["sign"] * tm["factor"]
            if tm["boot"]:
                B = tm["B"]
                y0 = self.a0[:, None] * V - B @ (self.S0 @ V)
                y1 = self.a1[:, None] * V - B @ (self.S1 @ V)
                d00 += s * np.einsum("hb,hb->b", y0, y0)
                d01 += s * np.einsum("hb,hb->b", y0, y1)
                d11 += s * np.einsum("hb,hb->b", y1, y1)
            else:
                d00 += s * np.einsum("gb,gb->b", tm["K00"] @ V, V)
                d01 += s * np.einsum("gb,gb->b", tm["K01"] @ V, V)
                d11 += s * np.einsum("gb,gb->b", tm["K11"] @ V, V)
        return N0, N1, d00, d01, d11

    def run(self, null=0.0, reps=9999, weights="rademacher", seed=0, pvalue="symmetric",
            level=0.95, ci=True, keep_t=False, progress=None):
        """(p-value, interval or None, is_interval, Replications, t* or None) at `null`."""
        check_options(reps, weights, pvalue, level, seed)
        gen = Replications(self.G, int(reps), weights, seed)
        parts = [[] for _ in range(5)]
        step = progress or (lambda done, total: None)
        with _blas_one_thread():
            done = 0
            for V in gen.blocks():
                for part, x in zip(parts, self.five(V)):
                    part.append(x)
                done += V.shape[1]
                step(done, gen.reps)
        N0, N1, D00, D01, D11 = (np.concatenate(p) for p in parts)

        def pfun(r):
            d = self.delta(r)
            return _pvalue(N0 + d * N1, D00 + 2 * d * D01 + d * d * D11, self.t_stat(r),
                           pvalue)
        p0 = pfun(null)
        interval, is_int = (None, None)
        if ci:
            interval, is_int = invert(pfun, self.est, self.std_error, 1.0 - level)
        tstar = None
        if keep_t:
            d = self.delta(null)
            N, D = N0 + d * N1, D00 + 2 * d * D01 + d * d * D11
            with np.errstate(divide="ignore", invalid="ignore"):
                tstar = np.where(D > 0, N / np.sqrt(np.where(D > 0, D, 1.0)),
                                 np.sign(N) * np.inf)
        return p0, interval, is_int, gen, tstar


def _sums(codes, a, n_groups):
    out = np.empty((n_groups, a.shape[1]))
    for j in range(a.shape[1]):
        out[:, j] = np.bincount(codes, weights=a[:, j], minlength=n_groups)
    return out


def contrast_of(fit, coefficient) -> tuple[np.ndarray, str]:
    """The contrast vector of a coefficient given by name (or index)."""
    terms = list(fit.terms)
    if isinstance(coefficient, str):
        if coefficient not in terms:
            raise SpecificationError(f"no coefficient named {coefficient!r}; the terms are "
                                     + ", ".join(terms))
        j = terms.index(coefficient)
    elif isinstance(coefficient, (int, np.integer)) and not isinstance(coefficient, bool) \
            and 0 <= coefficient < len(terms):
        j = int(coefficient)
    else:
        raise SpecificationError(f"coefficient {coefficient!r} is not a term of the model ("
                                 + ", ".join(terms) + ")")
    c = np.zeros(len(terms))
    c[j] = 1.0
    return c, terms[j]


def _dims(fit, by, boot_by):
    """The clusterings of the t statistic's variance [(Grouping, sign, factor)] and the index
    of the bootstrap dimension."""
    if by == "both":
        a, b = fit.grouping("entity"), fit.grouping("time")
        for g in (a, b):
            if g.n_groups < 2:
                raise SpecificationError(f"clustering by {g.name} needs at least two clusters; "
                                         f"this sample has {g.n_groups}")
        cells = fit.grouping("entity x time")
        n = fit.nobs
        kk = n - fit.df_resid
        h = cells.n_groups
        dims = [(a, 1.0, cluster_factor(fit, a.n_groups)),
                (b, 1.0, cluster_factor(fit, b.n_groups)),
                (cells, -1.0, h / max(h - 1.0, 1.0) * (n - 1.0) / (n - kk))]
        if boot_by not in ("fewer", "entity", "time"):
            raise SpecificationError(f"boot_by={boot_by!r} is not one of fewer, entity, time")
        boot = {"entity": 0, "time": 1}.get(boot_by, 0 if a.n_groups <= b.n_groups else 1)
        return dims, boot
    g = fit.grouping(by)
    if g.n_groups < 2:
        raise SpecificationError(f"clustering by {by} needs at least two clusters; this sample "
                                 f"has {g.n_groups} ({g.label(0)!r})")
    return [(g, 1.0, cluster_factor(fit, g.n_groups, fit.effects_nested_in(by)))], 0


def wild_setup(fit, coefficient, by="entity", boot_by="fewer", restricted=True):
    """The null-free setup for a least-squares fit (see WildSetup)."""
    check_offered(fit, by)
    c, name = contrast_of(fit, coefficient)
    design = fit.cluster_design()
    if not (design.least_squares and fit.capabilities.least_squares):
        raise SpecificationError("the wild cluster bootstrap here is for least squares (OLS, "
                                 "fixed-effects panels) and, through wre_bootstrap, linear IV")
    dims, boot = _dims(fit, by, boot_by)
    setup = WildSetup(hat=design.hat, resid=design.resid, influence=fit.influence_map,
                      beta=fit.beta, contrast=c, dims=dims, boot=boot, absorbed=design.absorbed,
                      restricted=restricted)
    return setup, name, dims[boot][0]


def wild_cluster_bootstrap(fit, coefficient, by="entity", reps=9999, weights="rademacher",
                           null=0.0, level=0.95, seed=0, restricted=True, pvalue="symmetric",
                           boot_by="fewer", ci=True, progress=None,
                           keep_t=False) -> WildBootstrapResult:
    """Wild cluster bootstrap test of `coefficient` = `null` and its interval by test inversion.

    fit: a least-squares fit (fit_ols with clusters=..., fit_panel with or without fixed
    effects) or a linear IV fit (then the wild restricted efficient bootstrap, one endogenous
    regressor, one-way clustering). by: "entity", "time", "both" or a grouping the fit offers.
    restricted: impose the null on the bootstrap samples (WCR; recommended) or not (WCU).
    pvalue: "symmetric" (the share of |t*| >= |t|) or "equal-tailed". boot_by (two-way): the
    dimension whose clusters get the weights ("fewer", "entity" or "time"). With Rademacher
    weights and 2^G <= reps every sign vector is used (exact; the seed plays no role).
    progress(done, total) is called after each block of replications."""
    job = prepare_bootstrap(fit, coefficient, by=by, reps=reps, weights=weights, null=null,
                            level=level, seed=seed, restricted=restricted, pvalue=pvalue,
                            boot_by=boot_by, ci=ci, keep_t=keep_t)
    return job.run(progress)


@dataclass
class BootstrapJob:
    """A prepared wild cluster bootstrap: the null-free setup (only cluster-sized arrays for
    least squares; the IV data for WRE) and the options; `run` does the replications (the
    dashboard runs it in a background job)."""

    setup: object
    coefficient: str
    by: str
    boot_name: str
    options: dict

    def run(self, progress=None) -> WildBootstrapResult:
        o = self.options
        if isinstance(self.setup, WRESetup):
            return _run_wre(self, progress)
        p, interval, is_int, gen, tstar = self.setup.run(
            o["null"], o["reps"], o["weights"], o["seed"], o["pvalue"], o["level"], o["ci"],
            o["keep_t"], progress)
        return _result(self.setup, self.coefficient, self.by, self.boot_name,
                       "WCR" if o["restricted"] else "WCU", o["null"], p, interval, is_int,
                       gen, o["pvalue"], o["level"], o["weights"], o["seed"], tstar)


def prepare_bootstrap(fit, coefficient, by="entity", reps=9999, weights="rademacher",
                      null=0.0, level=0.95, seed=0, restricted=True, pvalue="symmetric",
                      boot_by="fewer", ci=True, keep_t=False) -> BootstrapJob:
    """Check the request and build the setup (see wild_cluster_bootstrap); typed errors name the
    value at fault before any replication."""
    check_options(reps, weights, pvalue, level, seed)
    if not isinstance(null, (int, float, np.floating)) or isinstance(null, bool) \
            or not np.isfinite(null):
        raise SpecificationError(f"null must be a finite number, got {null!r}")
    if not isinstance(restricted, (bool, np.bool_)):
        raise SpecificationError(f"restricted must be true or false, got {restricted!r}")
    check_offered(fit, by)
    options = {"reps": int(reps), "weights": weights, "null": float(null), "level": level,
               "seed": int(seed), "restricted": bool(restricted), "pvalue": pvalue, "ci": ci,
               "keep_t": keep_t}
    if fit.capabilities.reweighting:
        setup, name, grouping = _wre_setup(fit, coefficient, by, restricted)
        return BootstrapJob(setup, name, by, grouping.name, options)
    setup, name, bgroup = wild_setup(fit, coefficient, by, boot_by, restricted)
    return BootstrapJob(setup, name, by, bgroup.name, options)


def _result(setup, name, by, boot_name, method, null, p, interval, is_int, gen, pvalue, level,
            weights, seed, tstar):
    notes = []
    if gen.enumerated:
        notes.append(f"all 2^{gen.G} = {gen.reps:,} Rademacher sign vectors enumerated: the "
                     "p-value is exact for this bootstrap and does not depend on the seed")
    elif weights == "rademacher" and gen.G <= 12:
        notes.append(f"only 2^{gen.G} = {2 ** gen.G:,} distinct Rademacher sign vectors exist; "
                     "with so few clusters consider Webb weights")
    if is_int is False:
        notes.append("the set of nulls not rejected is not an interval on the check grid; the "
                      "interval spans its outermost bounds")
    if interval is not None and not np.all(np.isfinite(interval)):
        notes.append("the interval is unbounded: no null value on that side is rejected")
    return WildBootstrapResult(
        coefficient=name, by=by, boot_by=boot_name, method=method,
        estimate=setup.est,
        std_error=setup.std_error, t_stat=float(setup.t_stat(null)), null=float(null),
        p_value=p, p_kind=pvalue, ci=interval, level=level, reps=gen.reps,
        enumerated=gen.enumerated, weights=weights, seed=int(seed), n_clusters=gen.G,
        ci_is_interval=is_int, notes=notes, t_star=tstar)


# --------------------------------------------------------------------------- IV: WRE

class WRESetup:
    """Data of the wild restricted efficient bootstrap (Davidson & MacKinnon 2010) for the
    coefficient of the single endogenous regressor y2 in y1 = beta y2 + Z gamma + u1, 2SLS with
    instruments W = [Z, Wx], one-way clusters, CR1 t with `factor`."""

    def __init__(self, y1, y2, Z, Wx, grouping: Grouping, factor: float):
        self.y1, self.y2, self.Z, self.Wx = y1, y2, Z, Wx
        self.W = np.hstack([Z, Wx])
        self.X = np.column_stack([y2, Z])
        self.codes, self.G = grouping.codes, grouping.n_groups
        self.factor = factor
        self.k, self.l = self.X.shape[1], self.W.shape[1]
        pi = np.linalg.lstsq(self.W, self.X, rcond=None)[0]
        Xh = self.W @ pi
        self.beta = np.linalg.solve(Xh.T @ Xh, Xh.T @ y1)
        u = y1 - self.X @ self.beta
        ainv = np.linalg.inv(Xh.T @ Xh)
        sc = _sums(self.codes, Xh * u[:, None], self.G) @ ainv[:, 0]
        self.se = float(np.sqrt(factor * sc @ sc))
        if not self.se > 0:
            raise EstimationError("the clustered standard error of the instrumented coefficient "
                                  "is zero; the bootstrap t is not defined")
        self.WWinv = np.linalg.inv(self.W.T @ self.W)
        self.WZ_g = np.stack([_sums(self.codes, self.W * Z[:, [j]], self.G)
                              for j in range(Z.shape[1])], axis=2)
        self.WZ = self.WZ_g.sum(axis=0)

    @property
    def est(self) -> float:
        return float(self.beta[0])

    @property
    def std_error(self) -> float:
        return self.se

    def t_stat(self, r):
        return (self.est - r) / self.se

    def tstars(self, r, blocks):
        y1, y2, Z, W = self.y1, self.y2, self.Z, self.W
        k, l = self.k, self.l
        gam = np.linalg.lstsq(Z, y1 - r * y2, rcond=None)[0]
        u1 = y1 - r * y2 - Z @ gam
        pi = np.linalg.lstsq(np.column_stack([W, u1]), y2, rcond=None)[0][:l]
        u2 = y2 - W @ pi
        P2 = _sums(self.codes, W * (W @ pi)[:, None], self.G)
        U1 = _sums(self.codes, W * u1[:, None], self.G)
        U2 = _sums(self.codes, W * u2[:, None], self.G)
        WZgam = self.WZ_g @ gam
        wy2_fix, wzgam = P2.sum(axis=0), WZgam.sum(axis=0)
        Ns, Ds = [], []
        for V in blocks:
            Vt = V.T
            b = V.shape[1]
            wy2 = wy2_fix[None, :] + Vt @ U2
            wy1 = r * wy2 + wzgam[None, :] + Vt @ U1
            Wh = np.concatenate([wy2[:, :, None], np.broadcast_to(self.WZ, (b, l, k - 1))],
                                axis=2)
            CW = np.einsum("ij,bjk->bik", self.WWinv, Wh)
            A = np.einsum("blk,blm->bkm", Wh, CW)
            rhs = np.einsum("blk,bl->bk", CW, wy1)
            bst = np.linalg.solve(A, rhs[:, :, None])[:, :, 0]
            e0 = np.broadcast_to(np.eye(k)[:, 0], (b, k))[:, :, None]
            a0 = np.linalg.solve(A, e0)[:, :, 0]
            q = np.einsum("blk,bk->bl", CW, a0)
            wy2g = P2[None, :, :] + Vt[:, :, None] * U2[None, :, :]
            s = (r - bst[:, 0])[:, None, None] * wy2g + WZgam[None] \
                + Vt[:, :, None] * U1[None] - np.einsum("glj,bj->bgl", self.WZ_g, bst[:, 1:])
            z = np.einsum("bgl,bl->bg", s, q)
            Ns.append(bst[:, 0] - r)
            Ds.append(self.factor * np.einsum("bg,bg->b", z, z))
        return np.concatenate(Ns), np.concatenate(Ds)


def wre_bootstrap(fit, coefficient, by="entity", reps=9999, weights="rademacher", null=0.0,
                  level=0.95, seed=0, restricted=True, pvalue="symmetric", ci=True,
                  progress=None, keep_t=False) -> WildBootstrapResult:
    """The wild restricted efficient bootstrap for a linear IV fit (see WRESetup); the same as
    wild_cluster_bootstrap on an IV fit."""
    return wild_cluster_bootstrap(fit, coefficient, by=by, reps=reps, weights=weights,
                                  null=null, level=level, seed=seed, restricted=restricted,
                                  pvalue=pvalue, ci=ci, progress=progress, keep_t=keep_t)


def _wre_setup(fit, coefficient, by, restricted):
    """The WRE setup, or a typed error naming what is missing: one endogenous regressor, the
    test of its coefficient, one-way clustering, effects (panels) nested in the clusters, the
    restricted version."""
    core = fit.core
    c, name = contrast_of(fit, coefficient)
    if not restricted:
        raise SpecificationError("for IV only the restricted (WRE) bootstrap is offered; use "
                                 "restricted=True")
    if len(core.endogenous) != 1:
        raise SpecificationError(f"the WRE bootstrap here handles one endogenous regressor; this "
                                 f"model has {len(core.endogenous)} "
                                 f"({', '.join(core.endogenous)})")
    if name != core.endogenous[0]:
        raise SpecificationError(f"the WRE bootstrap tests the coefficient of the endogenous "
                                 f"regressor '{core.endogenous[0]}', not {name!r}")
    if by == "both":
        raise SpecificationError("the WRE bootstrap here handles one-way clustering; choose "
                                 "entity, time or a grouping column")
    grouping = fit.grouping(by)
    if grouping.n_groups < 2:
        raise SpecificationError(f"clustering by {by} needs at least two clusters; this sample "
                                 f"has {grouping.n_groups}")
    design = fit.cluster_design()
    for eff, codes in design.absorbed:
        if not nested_in(codes, grouping.codes):
            raise SpecificationError(f"the {eff} effects are not nested in the clusters by {by}: "
                                     "the WRE bootstrap on demeaned data is exact only for "
                                     "effects inside the clusters")
    X, Zfull = core.X, core.Z
    j = core.terms.index(name)
    exog_cols = [core.terms.index(t) for t in core.terms if t != name]
    if not exog_cols:
        raise SpecificationError("the WRE bootstrap needs at least one exogenous column (the "
                                 "intercept or a regressor) besides the endogenous one")
    Wx = Zfull[:, [core.z_names.index(z) for z in core.excluded]]
    factor = cluster_factor(fit, grouping.n_groups, fit.effects_nested_in(by))
    return WRESetup(core.y, X[:, j], X[:, exog_cols], Wx, grouping, factor), name, grouping


def _run_wre(job, progress, ci_grid=41):
    o, setup = job.options, job.setup
    gen = Replications(setup.G, o["reps"], o["weights"], o["seed"], block=1024)
    report = [progress or (lambda done, total: None)]

    def blocks():
        done = 0
        for V in gen.blocks():
            yield V
            done += V.shape[1]
            report[0](done, gen.reps)

    def evaluate(r):
        with _blas_one_thread():
            N, D = setup.tstars(r, blocks())
        return _pvalue(N, D, setup.t_stat(r), o["pvalue"]), N, D
    p0, N, D = evaluate(o["null"])
    interval, is_int = (None, None)
    if o["ci"]:
        report[0] = lambda done, total: None       # the inversion repeats the replications
        interval, is_int = invert(lambda r: evaluate(r)[0], setup.est, setup.se,
                                  1.0 - o["level"], grid=ci_grid)
    tstar = None
    if o["keep_t"]:
        with np.errstate(divide="ignore", invalid="ignore"):
            tstar = np.where(D > 0, N / np.sqrt(np.where(D > 0, D, 1.0)), np.sign(N) * np.inf)
    res = _result(setup, job.coefficient, job.by, job.boot_name, "WRE", o["null"], p0,
                  interval, is_int, gen, o["pvalue"], o["level"], o["weights"], o["seed"], tstar)
    res.notes.append("t statistics of 2SLS (Davidson & MacKinnon 2010), whatever the fit's "
                     "weighting; the interval re-runs the restricted fits at each trial null")
    return res


def frame_of(results) -> pd.DataFrame:
    """Bootstrap results as rows (for tables and exports)."""
    return pd.DataFrame([r.to_dict() for r in results])
