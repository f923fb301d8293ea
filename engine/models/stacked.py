"""The stacked model: several moment models on one time index as one moment model.

`stack(models, labels)` joins time-series moment models (regressions of many assets on the same
factors, one regression per horizon, several specifications) so that every estimator of S gives
the JOINT covariance of all their coefficients, and Wald tests across members ("this coefficient
is zero in every member") follow:

* the index is the union of the members' indexes (sorted); T is its length;
* the contributions are the members' working contributions side by side, zero where a member
  has no observation (a late start, an early end, a gap);
* the influence map is block-diagonal with each member's own map, so V = T M S M' with
  S = (1/T) sum over the union of the stacked contributions. For a member alone, its own
  V = T_i M_i S_i M_i' = M_i (sum over its rows g g') M_i': the stacked diagonal block equals it
  exactly for every estimator that is a sum of products of the contributions over the union's
  rows (HC0 and kernels when the member's rows are consecutive in the union). Lags are counted in
  rows of the union, so a member with interior gaps has its lags counted in periods of the union
  (its own fit treats its rows as consecutive); bandwidth rules and VAR orders are chosen on the
  stacked contributions, not per member.
* coefficients and moments are labelled "label:name"; the residual degrees of freedom are per
  coefficient (each member's own), so Student t laws carry per-coefficient values.
* the classical estimate of S is the seemingly-unrelated-regressions one: block (i, j) is
  s_ij (1/T) sum_t w_it w_jt' over the rows both members have, with
  s_ij = e_i'e_j / sqrt(df_i df_j) over those rows (members without a design use their
  contributions' cross products instead).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ..capabilities import Capabilities
from ..data.columns import SampleInfo, index_label
from ..errors import SpecificationError
from .base import MomentModel


def _labels(models, labels) -> list[str]:
    if labels is None:
        names = [str(m.response) if m.response else f"m{i + 1}" for i, m in enumerate(models)]
        if len(set(names)) < len(names):
            names = [f"m{i + 1}" for i in range(len(models))]
        return names
    labels = [str(x) for x in labels]
    if len(labels) != len(models):
        raise SpecificationError(f"{len(labels)} labels for {len(models)} models")
    for label in labels:
        if not label or ":" in label:
            raise SpecificationError(f"label {label!r} must be non-empty and without ':' (it "
                                     "prefixes the coefficient names, as in 'label:term')")
    if len(set(labels)) < len(labels):
        dup = next(x for x in labels if labels.count(x) > 1)
        raise SpecificationError(f"label {dup!r} is used twice")
    return labels


def _union_index(models, labels) -> pd.Index:
    for model, label in zip(models, labels):
        idx = model.index
        if not idx.is_unique:
            raise SpecificationError(f"member '{label}' has repeated index values; a stacked "
                                     "model joins members on one time index")
        if not (idx.is_monotonic_increasing or len(idx) <= 1):
            raise SpecificationError(f"member '{label}' is not in time order")
    union = models[0].index
    try:
        for model in models[1:]:
            union = union.union(model.index, sort=True)
    except TypeError as exc:
        raise SpecificationError(f"the members' indexes cannot be joined: {exc}") from None
    if not union.is_monotonic_increasing:
        raise SpecificationError("the members' indexes cannot be put in one time order (mixed "
                                 "kinds of labels)")
    return union


class StackedModel(MomentModel):
    """Several time-series moment models as one (see the module docstring)."""

    kind = "stacked"
    df_reason = "each equation's own T - k"

    def __init__(self, models, labels=None):
        self._init_model()
        models = list(models)
        if not models:
            raise SpecificationError("stack at least one model")
        for i, model in enumerate(models):
            if not isinstance(model, MomentModel):
                raise SpecificationError(f"item {i + 1} is not a fitted Lagwise model")
        self.labels = _labels(models, labels)
        for model, label in zip(models, self.labels):
            if not model.capabilities.time_ordered:
                raise SpecificationError(f"member '{label}' is not a time series ({model.kind}); "
                                         "a stacked model joins models on one time index")
            if model.capabilities.several_equations:
                raise SpecificationError(f"member '{label}' has several equations already; "
                                         "stack its members instead")
        self.members = models
        self.index = _union_index(models, self.labels)
        self.nobs = len(self.index)
        self.rows = [self.index.get_indexer(m.index) for m in models]
        self.terms = [f"{lab}:{t}" for lab, m in zip(self.labels, models) for t in m.terms]
        self.beta = np.concatenate([np.asarray(m.beta, dtype=float) for m in models])
        self.k = len(self.terms)
        self.response = ", ".join(str(m.response) for m in models)
        widths = [m.m for m in models]
        self._moment_slices = np.cumsum([0] + widths)
        self._coef_slices = np.cumsum([0] + [m.k for m in models])
        g = np.zeros((self.nobs, int(self._moment_slices[-1])))
        for model, rows, a, b in zip(models, self.rows, self._moment_slices[:-1],
                                     self._moment_slices[1:]):
            g[rows, a:b] = model.working_contributions
        self.caches.put("working_contributions", g)
        self.horizon = self._common_horizon()
        self.sample = self._sample()

    # ------------------------------------------------------------------ description
    def _common_horizon(self):
        hs = {m.horizon for m in self.members}
        return hs.pop() if len(hs) == 1 else None

    def _sample(self) -> SampleInfo:
        counts = [len(r) for r in self.rows]
        info = SampleInfo(rows_available=self.nobs, rows_used=self.nobs,
                          first=index_label(self.index[0]), last=index_label(self.index[-1]))
        info.notes.append(
            f"{len(self.members)} models stacked on one index of {self.nobs} periods: "
            + ", ".join(f"'{lab}' {n}" for lab, n in zip(self.labels, counts))
            + " rows; the moment contributions are zero where a member has no observation and S "
              "is per period of the joined index (1/T with T = " + f"{self.nobs})")
        if any(n < self.nobs for n in counts):
            gaps = [lab for lab, r in zip(self.labels, self.rows)
                    if len(r) and (np.diff(r) > 1).any()]
            if gaps:
                info.notes.append("members with gaps inside their sample ("
                                  + ", ".join(f"'{g}'" for g in gaps[:5])
                                  + (", ..." if len(gaps) > 5 else "")
                                  + "): lags are counted in periods of the joined index")
        return info

    @property
    def capabilities(self) -> Capabilities:
        """A time series of several equations; no single design or residual series."""
        return Capabilities(time_ordered=True, equations=tuple(self.labels))

    @property
    def equations(self) -> list[str]:
        return list(self.labels)

    @property
    def residuals(self) -> pd.DataFrame:
        """Each equation's residuals on the joined index (NaN where a member has no row, and for
        a member without one residual series)."""
        out = pd.DataFrame(np.nan, index=self.index, columns=pd.Index(self.labels,
                                                                       name="equation"))
        for label, model, rows in zip(self.labels, self.members, self.rows):
            if model.resid is not None:
                out.iloc[rows, self.labels.index(label)] = model.resid
        return out

    @property
    def df_by_equation(self) -> pd.Series:
        """Each equation's residual degrees of freedom."""
        return pd.Series([float(np.min(m.df_resid)) for m in self.members],
                         index=pd.Index(self.labels, name="equation"), name="df_resid")

    def member(self, label: str) -> MomentModel:
        """The member model with this label."""
        if label not in self.labels:
            raise SpecificationError(f"no member {label!r}; members are "
                                     + ", ".join(self.labels))
        return self.members[self.labels.index(label)]

    def across(self, term: str) -> list[str]:
        """The labels of `term` in every member that has it ("label:term"), for a Wald test
        across members: `res.wald(stack.across("x"))`."""
        out = [f"{lab}:{term}" for lab, m in zip(self.labels, self.members) if term in m.terms]
        if not out:
            raise SpecificationError(f"no member has a coefficient named {term!r}")
        return out

    def terms_of(self, label: str) -> list[str]:
        """The stacked names of one member's coefficients."""
        self.member(label)
        i = self.labels.index(label)
        return self.terms[self._coef_slices[i]: self._coef_slices[i + 1]]

    # ------------------------------------------------------------------ the protocol
    @property
    def moment_names(self) -> list[str]:
        return [f"{lab}:{n}" for lab, m in zip(self.labels, self.members) for n in m.moment_names]

    @property
    def constant_moments(self) -> np.ndarray:
        return np.concatenate([m.constant_moments for m in self.members])

    def _original_contributions(self) -> np.ndarray:
        g = np.zeros((self.nobs, int(self._moment_slices[-1])))
        for model, rows, a, b in zip(self.members, self.rows, self._moment_slices[:-1],
                                     self._moment_slices[1:]):
            g[rows, a:b] = model.contributions
        return g

    @property
    def working_basis(self) -> np.ndarray:
        return sla.block_diag(*[m.working_basis for m in self.members])

    @property
    def working_basis_inverse(self) -> np.ndarray:
        return self.caches.get("working_basis_inverse", lambda: sla.block_diag(
            *[m.working_basis_inverse for m in self.members]))

    @property
    def influence_map(self) -> np.ndarray:
        """Block-diagonal: each member's own map (V = T M S M' over the joined index)."""
        return self.caches.get("influence_map", lambda: sla.block_diag(
            *[m.influence_map for m in self.members]))

    @property
    def df_resid(self) -> np.ndarray:
        """Each coefficient's equation's residual degrees of freedom."""
        return np.concatenate([np.full(m.k, float(np.min(m.df_resid))) for m in self.members])

    @property
    def small_sample_factor(self) -> float:
        """T / (T - k) with T the joined index's length and k the largest member's number of
        coefficients (one factor for the joint S)."""
        kmax = max(m.k for m in self.members)
        return self.nobs / max(self.nobs - kmax, 1)

    @property
    def sigma2(self) -> float:
        return float("nan")

    def fits_exactly(self) -> bool:
        return any(m.fits_exactly() for m in self.members)

    def homoskedastic_long_run(self) -> np.ndarray:
        """The seemingly-unrelated-regressions S (module docstring): block (i, j) is
        s_ij (1/T) sum_t w_it w_jt' over the rows both members have."""
        sl = self._moment_slices
        s = np.zeros((int(sl[-1]), int(sl[-1])))
        present, series, resid = [], [], []
        for model, rows in zip(self.members, self.rows):
            mask = np.zeros(self.nobs, dtype=bool)
            mask[rows] = True
            w = np.zeros((self.nobs, model.m))
            e = None
            if model.capabilities.design:
                w[rows] = model.working_design
                e = np.zeros(self.nobs)
                e[rows] = model.resid
            else:
                w[rows] = model.working_contributions
            present.append(mask)
            series.append(w)
            resid.append(e)
        for i in range(len(self.members)):
            for j in range(i + 1):
                both = present[i] & present[j]
                wi, wj = series[i][both], series[j][both]
                if resid[i] is not None and resid[j] is not None:
                    df = np.sqrt(float(np.min(self.members[i].df_resid))
                                 * float(np.min(self.members[j].df_resid)))
                    block = float(resid[i][both] @ resid[j][both]) / df * (wi.T @ wj)
                else:
                    if resid[i] is not None:
                        wi = wi * resid[i][both][:, None]
                    if resid[j] is not None:
                        wj = wj * resid[j][both][:, None]
                    block = wi.T @ wj
                block = block / self.nobs
                s[sl[i]:sl[i + 1], sl[j]:sl[j + 1]] = block
                s[sl[j]:sl[j + 1], sl[i]:sl[i + 1]] = block.T
        return s

    def __repr__(self):
        return (f"StackedModel(members={self.labels}, T={self.nobs}, "
                f"coefficients={self.k})")


def stack(models, labels=None) -> StackedModel:
    """Several time-series moment models as one, on the union of their time indexes: the joint
    covariance of all their coefficients under any time-series estimator, and Wald tests across
    members. labels: one per model (default: the responses, or m1, m2, ...); coefficients are
    named "label:term". See engine.models.stacked for what the contributions and S are."""
    return StackedModel(models, labels)
