"""The moment-model protocol every fitted model implements.

A moment model is anything fitted whose coefficients solve sample moment conditions
(1/T) sum_t g_t(beta) = 0 (exactly or, for over-identified GMM, after weighting). Every estimator
of S, every bandwidth rule, the sweep, the comparison, the flips and the score diagnostics take a
`MomentModel`; none of them knows which model produced the moments. A model supplies:

* `contributions`: g_t in the original basis (T x m; OLS: x_t e_t), named by `moment_names`;
* `working_contributions`: the same series in the working basis in which S is estimated (OLS: the
  orthonormal basis of X from its QR factor, q_t e_t, so that ill-conditioned designs keep their
  digits), with `to_original` / `to_working` mapping an S between the two;
* `influence_map` M (k x m): V = T M S M' with S of the working contributions. This is the
  sandwich D^-1 S D^-1' / T of an exactly identified model (D = X'X/T for OLS) or
  (D'WD)^-1 D'W S W D (D'WD)^-1 / T of an over-identified one, written in the working basis;
  `covariance_from_long_run` forms it (an estimator of S never does);
* `capabilities`: what it declares about itself (time-ordered rows, a panel, a regression design,
  leverage, equations, cluster codes, ...; see engine.capabilities); families and the app read it;
* `working_design` and `resid` when g_t = design_t * residual_t (linear models), which the
  classical and heteroskedasticity-robust estimators use; `leverage` where defined;
* the term names, the sample (`index`, `sample`), the horizon of an overlapping response, the
  residual degrees of freedom (`df_resid`: a number, or one per coefficient when the equations
  differ), and `caches`, the model's explicit caches (autocovariances and the rest) with a byte
  count.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..caches import Caches, nbytes_of
from ..capabilities import Capabilities
from ..covariance.cache import MomentCache
from ..data.columns import INTERCEPT, SampleInfo
from ..covariance.registry import as_estimator, estimator as make_estimator
from ..covariance.fewclusters import ClusterBlocks, blocks_from_rows, pieces
from ..covariance.hc import LEVERAGE_TOL
from ..data.columns import index_label
from ..data.groupings import Grouping
from ..data.table import Table
from ..errors import EstimationError, SpecificationError
from ..inference.compare import compare
from ..inference.infer import infer
from ..inference.sweep import sweep

#: Residuals this small against the response count as an exact fit.
EXACT_FIT_TOL = 1e-12


def residuals_vanish(resid: np.ndarray, response: np.ndarray) -> bool:
    """Every residual zero to rounding, relative to the response's scale."""
    scale = float(np.abs(response).max()) or 1.0
    return bool(np.abs(resid).max() <= EXACT_FIT_TOL * scale)


class MomentModel:
    """What every fitted model shares (see the module docstring for the protocol)."""

    kind = "moment model"
    response: str
    terms: list[str]
    beta: np.ndarray
    nobs: int
    k: int
    index: pd.Index
    sample: SampleInfo
    horizon: int | None = None
    leverage: np.ndarray | None = None
    resid: np.ndarray | None = None
    #: the Table the model was fitted on, when it was fitted on one (exports state its file)
    table = None
    @property
    def source_report(self):
        """The LoadReport of the file behind the model (exports state its name, rows and
        SHA-256), or None when the data were given in memory."""
        return self.table.report if isinstance(self.table, Table) else None

    #: why the residual degrees of freedom are what they are ("T - k", "N - K", ...)
    df_reason = "T - k"
    #: the estimator family whose kernels `sweep(kernels=...)` moves along the bandwidth
    kernel_family = "kernel"

    @property
    def capabilities(self) -> Capabilities:
        """What the model declares about itself (engine.capabilities); each kind says."""
        return Capabilities()

    def _init_model(self):
        self.caches = Caches()
        #: groupings of the rows offered for clustering (name -> Grouping), beyond a panel's
        #: entities and periods: the columns named in a fit's `clusters=`
        self.groupings: dict[str, Grouping] = {}

    # ------------------------------------------------------------------ protocol pieces
    @property
    def moment_names(self) -> list[str]:
        return list(self.terms)

    @property
    def m(self) -> int:
        return len(self.moment_names)

    @property
    def constant_moments(self) -> np.ndarray:
        """True for moments formed with the constant (the intercept's): bandwidth rules weight
        them by zero, since their autocorrelation says nothing about the slopes."""
        return np.array([name == INTERCEPT for name in self.moment_names])

    @property
    def working_contributions(self) -> np.ndarray:
        """g_t in the working basis (T x m), cached."""
        return self.caches.get("working_contributions",
                               lambda: self.working_design * self.resid[:, None])

    @property
    def contributions(self) -> np.ndarray:
        """g_t in the original basis (T x m), one column per moment, cached."""
        return self.caches.get("contributions", self._original_contributions)

    def _original_contributions(self) -> np.ndarray:
        raise NotImplementedError

    @property
    def working_basis(self) -> np.ndarray:
        """B (m x m) with g_t = w_t B for the working contributions w_t (OLS: X = QC, B = C)."""
        raise NotImplementedError

    @property
    def working_basis_inverse(self) -> np.ndarray:
        """B^-1, computed once (a model that has it already says so)."""
        return self.caches.get("working_basis_inverse",
                               lambda: np.linalg.inv(self.working_basis))

    def to_original(self, s_working: np.ndarray) -> np.ndarray:
        """S of g_t from S of the working contributions: B' S_w B."""
        b = self.working_basis
        return b.T @ s_working @ b

    def to_working(self, s_original: np.ndarray) -> np.ndarray:
        """S of the working contributions from S of g_t: B^-1' S B^-1."""
        inv = self.working_basis_inverse
        return inv.T @ s_original @ inv

    @property
    def influence_map(self) -> np.ndarray:
        raise NotImplementedError

    def covariance_from_long_run(self, s_working: np.ndarray) -> np.ndarray:
        """The coefficient covariance V = T M S M' for S of the working contributions."""
        m = self.influence_map
        return self.nobs * m @ s_working @ m.T

    def outer(self) -> np.ndarray:
        """sum_t g_t g_t' of the working contributions."""
        return self.caches.get("outer", lambda: self.working_contributions.T
                               @ self.working_contributions)

    def fits_exactly(self) -> bool:
        """Every moment contribution zero to rounding (a model with residuals: every residual)."""
        return bool(not np.any(self.working_contributions))

    def homoskedastic_long_run(self) -> np.ndarray:
        """S under uncorrelated, constant-variance errors: s^2 (1/T) sum_t w_t w_t' for the
        working design rows w_t, s^2 = e'e / (T - k)."""
        w = self.working_design
        return self.sigma2 * (w.T @ w) / self.nobs

    def covariance_form(self, lr) -> str:
        """Which sandwich V is for this estimate of S, in words ('' when there is one form)."""
        return ""

    def describe_method(self) -> str:
        """How the coefficients were estimated, in words ('' for least squares)."""
        return ""

    # ------------------------------------------------------------------ clusters
    def grouping(self, name: str) -> Grouping:
        """The rows grouped by `name`, one of the groupings the model offers
        (`capabilities.clusters`)."""
        offered = self.capabilities.clusters
        if name not in offered or name not in self.groupings:
            raise SpecificationError(
                f"this fit offers no grouping {name!r} to cluster by"
                + (f" (it offers {', '.join(repr(o) for o in offered)})" if offered else "")
                + f"; fit it with clusters={name!r} to cluster by that column")
        return self.groupings[name]

    def group_sums(self, name: str) -> np.ndarray:
        """Sums of the working moment contributions within each group of a grouping."""
        def build():
            g = self.grouping(name)
            w = self.working_contributions
            out = np.empty((g.n_groups, w.shape[1]))
            for j in range(w.shape[1]):
                out[:, j] = np.bincount(g.codes, weights=w[:, j], minlength=g.n_groups)
            return out
        return self.caches.get(f"sums_{name}", build)

    def effects_nested_in(self, name: str) -> bool:
        """Every effect absorbed by the fit lies inside one group of the grouping (no effects:
        False)."""
        return False

    def cluster_design(self):
        """The hat basis, residuals, contribution basis and absorbed effects behind the
        bias-reduced cluster covariances (engine.covariance.fewclusters.ClusterDesign); a model
        that declares `cluster_leverage` says."""
        raise SpecificationError("this model does not declare the hat matrix within clusters "
                                 "that CR2 and CR3 need; use CR1")

    def cluster_meat(self, name: str, correction: str) -> np.ndarray:
        """sum_g psi_g psi_g' of the adjusted cluster sums of the working contributions (CR2,
        CR3) for a grouping (or the cells of entities and periods)."""
        return pieces(self.cluster_blocks(name), correction).meat()

    def leverage_outer(self, power: int) -> np.ndarray:
        """sum_t e_t^2 / (1 - h_tt)^power w_t w_t' over the working design rows (HC2: power 1,
        HC3: power 2); a row of leverage one is a typed error naming it."""
        h = self.leverage
        bad = np.flatnonzero(h > 1.0 - LEVERAGE_TOL)
        if bad.size:
            rows = ", ".join(str(index_label(self.index[i])) for i in bad[:5])
            raise EstimationError(
                f"HC{power + 1} is undefined: {bad.size} observation(s) have leverage 1 (rows "
                f"{rows}); each is fitted exactly, e.g. by a dummy for one row. Use HC0/HC1 or "
                "drop those rows.")
        omega = self.resid ** 2 / (1.0 - h) ** power
        w = self.working_design
        return (w * omega[:, None]).T @ w

    def cluster_blocks(self, name: str) -> ClusterBlocks:
        """Per-cluster blocks of one grouping for CR2, CR3 and their degrees of freedom,
        cached."""
        return self.caches.get(f"cluster_blocks_{name}", lambda: blocks_from_rows(
            self.cluster_design(), self.grouping(name)))

    # ------------------------------------------------------------------ caches
    @property
    def moments(self) -> MomentCache:
        """Autocovariance cache of the working contributions (filled lazily, once)."""
        return self.caches.get("moments", lambda: MomentCache(self.working_contributions))

    @property
    def influence(self) -> MomentCache:
        """Own autocovariances of each coefficient's influence series z_t = M g_t (k series):
        the variances of a whole sweep of PSD kernels come from them."""
        return self.caches.get("influence", lambda: MomentCache(
            self.working_contributions @ self.influence_map.T, diagonal_only=True))

    @property
    def nbytes(self) -> int:
        """Bytes held by the model: its arrays and every cache filled so far."""
        seen: set = set()
        own = sum(nbytes_of(v, seen) for name, v in vars(self).items()
                  if name not in ("caches", "table"))
        return own + self.caches.own_nbytes(seen)

    # ------------------------------------------------------------------ summaries
    @property
    def term_index(self) -> pd.Index:
        """The terms as a pandas Index, built once (string Index construction is costly)."""
        return self.caches.get("term_index", lambda: pd.Index(self.terms, name="term"))

    @property
    def params(self) -> pd.Series:
        return pd.Series(self.beta, index=self.term_index, name="estimate")

    @property
    def residuals(self) -> pd.Series:
        return pd.Series(self.resid, index=self.index, name="residual")

    @property
    def df_resid(self) -> int:
        return self.nobs - self.k

    @property
    def ssr(self) -> float:
        return float(self.resid @ self.resid)

    @property
    def sigma2(self) -> float:
        """s^2 = e'e / (T - k)."""
        return self.ssr / self.df_resid

    @property
    def small_sample_factor(self) -> float:
        """T / (T - k), the finite-sample inflation an estimator may apply to S."""
        return self.nobs / self.df_resid

    @property
    def r_squared(self) -> float:
        """R^2 where the model defines one (NaN otherwise)."""
        return float("nan")

    @property
    def has_intercept(self) -> bool:
        return INTERCEPT in self.terms

    def long_run_for(self, estimator):
        """The estimate of S this model's tables use for `estimator` (every coefficient table,
        comparison row and sweep point): the estimator applied to this model's moment
        contributions. A model weighted by an estimate of S answers with that estimate when
        asked for its own weighting estimator (IVFit)."""
        return estimator.long_run(self)

    # ------------------------------------------------------------------ the public verbs
    def infer(self, estimator, level: float = 0.95, reference: str = "auto"):
        """Coefficient table under one estimator of S and one reference law."""
        return infer(self, estimator, level=level, reference=reference)

    def sweep_axis(self, estimators, values=None):
        """Estimators (of one family) moved along the family's tuning axis (b, B, VAR order):
        the one sweep of every model (engine.inference.sweep). A model whose weighting follows
        the estimator (GMM) moves its estimate too."""
        ests = estimators if isinstance(estimators, (list, tuple)) else [estimators]
        return sweep(self, [as_estimator(e) for e in ests], values)

    def sweep(self, kernels=("bartlett",), bandwidths=None, small_sample: bool = False,
              repair: bool = True, prewhiten: bool = False):
        """Convenience for the common case: the model's kernel estimators (`kernel_family`:
        kernel HAC for a time series, Driscoll-Kraay for a panel), one curve per kernel, along
        the bandwidth; the same numbers as `sweep_axis`."""
        kernels = [kernels] if isinstance(kernels, str) else list(kernels)
        if not kernels:
            raise SpecificationError("choose at least one kernel to sweep")
        extra = {"prewhiten": True} if prewhiten else {}
        return self.sweep_axis([make_estimator(self.kernel_family, kernel=k, bandwidth=1.0,
                                               small_sample=small_sample, repair=repair, **extra)
                                for k in kernels], bandwidths)

    def compare(self, level: float = 0.95, reference: str = "auto", **kwargs):
        return compare(self, level=level, reference=reference, **kwargs)
