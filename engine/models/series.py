"""A moment model given by its contributions directly (the Fama-MacBeth slopes, systems of first
stages)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..capabilities import Capabilities
from ..data.columns import SampleInfo
from ..errors import SpecificationError
from .base import MomentModel


class SeriesModel(MomentModel):
    """A moment model given by its contributions directly: g_t (T x m), in their own basis,
    with an influence map M (k x m), so that V = T M S M'. Used for statistics that are means
    of a series (Fama-MacBeth slopes, first-stage systems); estimators that need a regression
    design (classical, HC2, HC3) say so."""

    kind = "series of moment contributions"

    def __init__(self, contributions, influence_map, *, terms, beta, index=None,
                 moment_names=None, sample=None, horizon=None, df_resid=None, response=""):
        self._init_model()
        g = np.asarray(contributions, dtype=float)
        if g.ndim != 2 or not np.isfinite(g).all():
            raise SpecificationError("moment contributions must be a finite T x m matrix")
        self.caches.put("working_contributions", g)
        self._m = np.asarray(influence_map, dtype=float)
        self.terms = list(terms)
        self.beta = np.asarray(beta, dtype=float)
        self.nobs, self.k = g.shape[0], len(self.terms)
        self._names = list(moment_names) if moment_names is not None else list(self.terms)
        self.index = index if index is not None else pd.RangeIndex(self.nobs)
        self.sample = sample if sample is not None else SampleInfo(self.nobs, self.nobs)
        self.horizon = horizon
        self.response = response
        self._df = df_resid
        self.resid = None

    @property
    def capabilities(self) -> Capabilities:
        """A series in time order; no regression design."""
        return Capabilities(time_ordered=True)

    @property
    def moment_names(self) -> list[str]:
        return self._names

    @property
    def working_design(self):
        raise SpecificationError("this estimator needs a regression design, which a series of "
                                 "moment contributions does not have; use HC0, a kernel, VAR "
                                 "or EWC")

    def homoskedastic_long_run(self):
        g = self.working_contributions
        return g.T @ g / self.nobs

    @property
    def sigma2(self) -> float:
        return float("nan")

    def _original_contributions(self):
        return self.working_contributions

    @property
    def working_basis(self) -> np.ndarray:
        """The contributions are given in their own basis."""
        return np.eye(self.m)

    def to_original(self, s_working):
        return s_working

    def to_working(self, s_original):
        return s_original

    @property
    def influence_map(self):
        return self._m

    @property
    def df_resid(self) -> int:
        return self._df if self._df is not None else self.nobs - 1

    @property
    def small_sample_factor(self) -> float:
        return self.nobs / max(self.df_resid, 1)
