"""Instrumental variables on a stacked panel: 2SLS and GMM after the within transformation.

`fit_panel_iv` removes entity and/or time fixed effects from the response, the regressors and
the instruments by the same within transformation as `fit_panel` (engine.models.within), then
fits by the IV machinery of `fit_iv` (IVCore / IVFit: 2SLS, two-step, iterated, CUE). The fit is
a panel as well (PanelRows): entity and period codes, group sums, the per-period model and the
within-entity lag products, so every panel estimator of S applies unchanged: clustering by
entity, time, both or a named grouping (CR1, and CR2/CR3 with the hat matrix of the fitted
regressors), Driscoll-Kraay with every kernel and bandwidth rule, entity clusters plus a kernel
over time. First-stage strength, J and the Anderson-Rubin set use the chosen estimator of S on
the panel's rows. Degrees of freedom: N - K with K = k + the effect parameters absorbed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..capabilities import Capabilities
from ..covariance.registry import estimator
from ..data.columns import INTERCEPT, as_list
from ..data.dates import spacing_note
from ..data.groupings import as_names, grouping_from
from ..data.panels import (PanelInfo, check_names, checked_panel, columns_of,
                           describe_effects, panel_names)
from ..errors import EstimationError, SpecificationError
from .iv import METHODS, IVCore, IVFit, check_iv_spec
from .panel import ABSORBED_TOL, PanelRows
from .series import SeriesModel
from .within import effects_of, within


@dataclass
class PanelIVCore(IVCore):
    """The IV core of a panel: its structure travels with every weighting."""

    panel: PanelInfo | None = None

    def series_model(self, contributions, influence_map, *, terms, beta, df_resid):
        model = PanelSeries(contributions, influence_map, terms=terms, beta=beta,
                            index=self.index, df_resid=df_resid - self.panel.absorbed)
        model.panel = self.panel
        model.groupings = self.groupings
        return model


class PanelSeries(PanelRows, SeriesModel):
    """Means over a panel's rows (a first-stage system, an Anderson-Rubin regression) with the
    panel's entity and period codes, so the panel estimators of S apply."""

    kind = "series of moment contributions on a panel"

    @property
    def capabilities(self) -> Capabilities:
        return Capabilities(panel=True, clusters=("entity", "time", *self.groupings))


class PanelIVFit(PanelRows, IVFit):
    """IV / GMM on a within-transformed panel (see the module docstring)."""

    kind = "panel instrumental variables"
    df_reason = "N - K"
    kernel_family = "driscoll_kraay"

    def __init__(self, core: PanelIVCore, w, **kw):
        self.panel = core.panel
        super().__init__(core, w, **kw)

    @property
    def capabilities(self) -> Capabilities:
        """A stacked panel of instruments times residuals: entity and period codes, clusters
        (with the hat matrix of the fitted regressors), a weighting that can follow the
        estimator; the rows are not one time series."""
        return Capabilities(panel=True, design=True, reweighting=True,
                            clusters=("entity", "time", *self.groupings), cluster_leverage=True)

    def cluster_design(self):
        design = super().cluster_design()
        design.absorbed = self.absorbed_factors()
        return design

    @property
    def df_resid(self) -> int:
        return self.nobs - self.k - self.panel.absorbed

    @property
    def small_sample_factor(self) -> float:
        return self.nobs / self.df_resid

    def describe_method(self) -> str:
        p = self.panel
        text = super().describe_method()
        if p.effects:
            text += "; " + describe_effects(p.effects, p.absorbed, p.components, p.iterations,
                                            p.balanced)
        return text

    def raw_rows(self):
        raise EstimationError("the first-difference serial correlation test is for least "
                              "squares; it is not computed for an IV fit")

    def compare(self, level: float = 0.95, reference: str = "auto", fama_macbeth: bool = False,
                **kwargs):
        """Every panel estimator of S (presets of the registry); Fama-MacBeth, a least-squares
        estimator, has no rows here."""
        return super().compare(level=level, reference=reference, **kwargs)

    def fama_macbeth(self):
        raise SpecificationError("Fama-MacBeth is a least-squares estimator; it is not offered "
                                 "for an IV fit")

    def __repr__(self):
        p = self.panel
        return (f"PanelIVFit(response={self.response!r}, terms={self.terms}, instruments="
                f"{self.core.z_names}, method={self.method!r}, N={self.nobs}, "
                f"entities={p.n_entities}, periods={p.n_periods}, effects={p.effects})")


def fit_panel_iv(data, response: str, regressors=None, endogenous=None, instruments=None,
                 entity: str | None = None, time: str | None = None, effects=(),
                 intercept: bool = True, method: str = "2sls", weight=None, sample=None,
                 clusters=None, max_iter: int = 100, tol: float = 1e-8) -> PanelIVFit:
    """Linear IV / GMM on a stacked panel (one row per entity and period), after removing
    `effects` ("entity", "time", both or none) from the response, the regressors and the
    instruments by the within transformation.

    regressors: every right-hand-side column; endogenous: those instrumented; instruments: the
    excluded instruments. method: "2sls", "two-step", "iterated" or "cue" (as `fit_iv`); weight:
    the estimator of S behind the weighting (default: clustered by entity, CR1). clusters:
    further grouping columns offered for clustering. With effects the intercept is absorbed.
    Degrees of freedom N - K, K = k + the effect parameters absorbed."""
    regs, endog, instr = as_list(regressors), as_list(endogenous), as_list(instruments)
    entity, time = panel_names(data, entity, time)
    eff = effects_of(effects)
    if eff:
        intercept = False
    check_iv_spec(response, regs, endog, instr, intercept or bool(eff))
    check_names(response, regs + instr, entity, time, intercept or bool(eff))
    if not regs:
        raise SpecificationError("the model needs at least one regressor to instrument")
    if method not in METHODS:
        raise SpecificationError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    cols = [*regs, *instr]
    pdata, values, lo, hi = checked_panel(data, response, cols, entity, time, sample)
    if hi[-1] - lo[-1] == 0:
        raise SpecificationError(f"response '{response}' is constant: nothing to explain")
    for j, c in enumerate(cols):
        if hi[j] - lo[j] == 0 and (intercept or eff):
            raise SpecificationError(f"column '{c}' is constant; it "
                                     + ("is absorbed by the effects" if eff else
                                        "duplicates the intercept") + ". Remove it.")
    g, t = len(pdata.entities), len(pdata.periods)
    res = within(values, pdata.entity_codes, pdata.time_codes, g, t, eff,
                 grid=(g, t) if pdata.entity_major and len(values) == g * t else None)
    transformed, absorbed, comps, iters = res.values, res.absorbed, res.components, res.iterations
    if eff:
        before = np.sqrt(((values - values.mean(axis=0)) ** 2).sum(axis=0))
        after = np.sqrt((transformed ** 2).sum(axis=0))
        gone = [c for j, c in enumerate(cols + [response])
                if after[j] <= ABSORBED_TOL * max(before[j], 1e-300)]
        if gone:
            raise SpecificationError(f"{', '.join(repr(c) for c in gone)} does not vary within "
                                     f"the {' and '.join(eff)} effects: it is absorbed by them. "
                                     "Remove it, or drop those effects.")
    n = len(values)
    k = len(regs) + int(intercept)
    exog = [r for r in regs if r not in endog]
    n_z = int(intercept) + len(exog) + len(instr)
    if n <= max(k, n_z) + absorbed:
        raise SpecificationError(f"{n} rows are too few for {k} coefficients, {n_z} instruments "
                                 f"and {absorbed} effect parameters")
    ones = np.ones((n, int(intercept)))
    X = np.ascontiguousarray(np.hstack([ones, transformed[:, :len(regs)]]))
    z_cols = [regs.index(r) for r in exog] + [len(regs) + i for i in range(len(instr))]
    Z = np.ascontiguousarray(np.hstack([ones, transformed[:, z_cols]]))
    y = np.ascontiguousarray(transformed[:, -1])
    info = PanelInfo(entity=entity, time=time, entities=pdata.entities, periods=pdata.periods,
                     entity_codes=pdata.entity_codes, time_codes=pdata.time_codes, effects=eff,
                     absorbed=absorbed, components=comps, iterations=iters,
                     entity_major=pdata.entity_major)
    note = spacing_note(pdata.periods)
    if note:
        info.notes.append(note)
    sample_info = pdata.sample
    sample_info.notes.extend(info.describe())
    if eff:
        sample_info.notes.append(describe_effects(eff, absorbed, comps, iters, info.balanced)
                                 + "; the instruments are demeaned the same way")
    terms = ([INTERCEPT] if intercept else []) + regs
    z_names = ([INTERCEPT] if intercept else []) + exog + instr
    core = PanelIVCore(X=X, y=y, Z=Z, terms=terms, z_names=z_names, endogenous=endog,
                       excluded=instr, exogenous=exog, index=pdata.index, response=response,
                       sample=sample_info, horizon=None, table=pdata.table, panel=info)
    _, get, _, _ = columns_of(data, [])
    for name in as_names(clusters):
        if name in (response, *cols, entity, time):
            raise SpecificationError(f"'{name}' is a variable or an identifier of the panel; "
                                     "name another column to cluster by")
        core.groupings[name] = grouping_from(get(name), name, pdata.rows)
    first = PanelIVFit(core, np.eye(Z.shape[1]), method="2sls")
    if method == "2sls":
        return first
    weight = weight if weight is not None else estimator("cluster", by="entity")
    if method == "two-step":
        return first.two_step(weight)
    if method == "iterated":
        return first.iterated(weight, max_iter=max_iter, tol=tol)
    return first.cue(weight, max_iter=max_iter, tol=tol)

