"""Model kinds: what each kind of fitted model is, and what the rest of Lagwise does with it.

A model kind is declared once, like an estimator family: the model class, the public function
that fits it, the estimator the app and the command line pick first, the dashboard cards and
charts it has, its residual diagnostics, what the sensitivity chart moves for it, the model in
one line, and how a script or `lagwise.show` rebuilds it. The app, the command line, the
comparison, the script export and the size check read this registry; none of them asks which
class a model is. A new kind is its model module, one `register_kind` call and its tests.

Capabilities (what estimator families need) are declared by the models themselves
(engine.capabilities); this registry holds what the workflows need.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from .data.columns import INTERCEPT
from .data.losses import losses
from .data.table import LoadReport, Table
from .errors import SpecificationError
from .models.base import MomentModel
from .models.custom_gmm import GMMFit, fit_gmm
from .models.fama_macbeth import FamaMacBethFit, fit_fama_macbeth
from .models.iv import IVFit, fit_iv
from .models.ols import OLSFit, fit_ols
from .models.panel import PanelFit, PeriodSums, fit_panel
from .models.panel_iv import PanelIVFit, fit_panel_iv
from .models.series import SeriesModel
from .models.stacked import StackedModel, stack
from .distributed.panel import PanelSummaryFit
from .studies.diagnostics import diagnose
from .studies.panel_diagnostics import diagnose_panel
from .studies.panel_sensitivity import panel_sweep

#: Dashboard cards a kind can show beyond the coefficient table, the comparison and the
#: sensitivity chart (the app maps each name to its card).
CARDS = {
    "diagnostics": "residual tests and charts",
    "persistence": "persistence of the predictor and the slope across horizons",
    "size-check": "the size of each test at this sample",
    "instruments": "first stage, instrument strength, J and the Anderson-Rubin set",
    "panel-lines": "clustered results as reference lines on the sensitivity chart",
}


@dataclass(frozen=True)
class ModelKind:
    name: str                              # a short key, e.g. "time-series"
    title: str                             # in words, e.g. "time-series least squares"
    model_class: type
    #: the public function that fits it (None: the model is made by another call)
    fit: Callable | None = None
    #: the estimator family the app and the command line pick first
    default_family: str = "kernel"
    #: dashboard cards beyond the common ones (keys of CARDS)
    cards: tuple = ()
    #: "series" (residuals over time), "panel" (residuals by period) or None
    residual_chart: str | None = None
    #: (model, progress) -> DiagnosticReport, or None when the kind has no diagnostics
    diagnostics: Callable | None = None
    #: (model, small_sample, repair) -> SweepResult the sensitivity chart shows instead of the
    #: family's own axis when the family asks for it (Family.panel_chart); None: never
    chart_sweep: Callable | None = None
    #: model -> (function name, keyword arguments) that refit it from its table (the script
    #: export, lagwise.show); None: not rebuilt from a table
    recipe: Callable | None = None
    #: model -> the model in one line (response, regressors, sample, T, fit)
    line: Callable | None = None
    #: model -> a Table holding the data it was fitted on (lagwise.show on a fit made from a
    #: DataFrame); None: the dashboard takes the fitted model itself
    data: Callable | None = None
    notes: str = ""


KINDS: dict[str, ModelKind] = {}
_BY_CLASS: dict[type, ModelKind] = {}


def register_kind(kind: ModelKind) -> ModelKind:
    if kind.name in KINDS or kind.model_class in _BY_CLASS:
        raise ValueError(f"model kind {kind.name!r} registered twice")
    unknown = set(kind.cards) - set(CARDS)
    if unknown:
        raise ValueError(f"model kind {kind.name!r}: unknown cards {sorted(unknown)}")
    KINDS[kind.name] = kind
    _BY_CLASS[kind.model_class] = kind
    return kind


def kind_of(model) -> ModelKind:
    """The registered kind of a fitted model (its class or the nearest registered base)."""
    for cls in type(model).__mro__:
        if cls in _BY_CLASS:
            return _BY_CLASS[cls]
    raise SpecificationError(f"{type(model).__name__} is not a registered model kind")


# --------------------------------------------------------------------------- the model in words

def _sample_text(model) -> str:
    first, last = model.sample.first, model.sample.last
    return f"{first} to {last}" if first is not None else ""


def _lost(model, columns=()) -> str:
    """What was lost between the data and the fit, in words (empty when nothing was)."""
    text = losses(model.sample, model.table, columns, model.response, model.horizon).text()
    return f" ({text})" if text else ""


def _r2(model, prefix: str = "") -> str:
    r2 = model.r_squared
    return f"{prefix}R² = {r2:.3f}" if np.isfinite(r2) else ""


def _overlap(model) -> str:
    h = model.horizon
    return f"overlap h = {h}" if h and h > 1 else ""


def _join(*parts) -> str:
    return "; ".join(p for p in parts if p)


def _regression(model, absorbed: bool = False) -> str:
    """"y on x1, x2 and an intercept" (the response and the regressors)."""
    slopes = [t for t in model.terms if t != INTERCEPT]
    if not slopes:
        return f"{model.response} on a constant"
    tail = " and an intercept" if INTERCEPT in model.terms else \
        (" (intercept absorbed by the effects)" if absorbed else " (no intercept)")
    return f"{model.response} on {', '.join(slopes)}{tail}"


def _used_columns(model) -> list[str]:
    return [model.response] + [t for t in model.terms if t != INTERCEPT]


def series_line(model) -> str:
    return _join(_regression(model), _sample_text(model),
                 f"T = {model.nobs:,}{_lost(model, _used_columns(model))}", _overlap(model),
                 _r2(model))


#: How an IV fit's coefficients were estimated, in a word or two.
IV_METHODS = {"2sls": "2SLS", "two-step": "two-step GMM", "iterated": "iterated GMM",
              "cue": "continuously updated GMM"}


def iv_line(model) -> str:
    core = model.core
    columns = _used_columns(model) + list(core.excluded)
    return _join(_regression(model),
                 f"{', '.join(core.endogenous)} instrumented by {', '.join(core.excluded)}"
                 if core.endogenous else "", IV_METHODS.get(model.method, model.method),
                 _sample_text(model), f"T = {model.nobs:,}{_lost(model, columns)}",
                 _overlap(model), _r2(model))


def panel_line(model) -> str:
    p = model.panel
    effects = (" and ".join(p.effects) + " fixed effects") if p.effects else \
        "pooled (no fixed effects)"
    return _join(_regression(model, absorbed=bool(p.effects)),
                 f"{p.n_entities:,} entities x {p.n_periods:,} periods ({p.entity}, {p.time})",
                 effects, _sample_text(model), f"N = {model.nobs:,}{_lost(model)}",
                 _r2(model, "within " if p.effects else ""))


def fama_macbeth_line(model) -> str:
    return _join(f"Fama-MacBeth: {_regression(model)}",
                 f"{model.nobs:,} periods ({_sample_text(model)})")


def series_model_line(model) -> str:
    return _join(f"{model.kind}: {', '.join(model.terms)}", f"T = {model.nobs}")


def stacked_line(model) -> str:
    counts = [len(r) for r in model.rows]
    return _join(f"{len(model.members)} equations stacked ({', '.join(model.labels[:6])}"
                 + (", ..." if len(model.labels) > 6 else "") + ")",
                 _sample_text(model), f"T = {model.nobs}"
                 + (f" (members {min(counts)} to {max(counts)})" if min(counts) < max(counts)
                    else ""))


def model_line(model) -> str:
    """The model in one line, as its kind writes it."""
    kind = kind_of(model)
    return kind.line(model) if kind.line is not None else series_model_line(model)


# --------------------------------------------------------------------------- recipes

def _window(model):
    s = model.sample
    return (s.first, s.last) if s.dropped_window else None


def ols_recipe(model):
    args = {"response": model.response,
            "regressors": [t for t in model.terms if t != INTERCEPT],
            "intercept": INTERCEPT in model.terms, "sample": _window(model),
            "horizon": model.horizon}
    if model.one_period is not None:
        args["one_period"] = str(model.one_period.name)
    return "fit_ols", args


def iv_recipe(model):
    core = model.core
    return "fit_iv", {"response": model.response,
                      "regressors": [t for t in model.terms if t != INTERCEPT],
                      "endogenous": list(core.endogenous), "instruments": list(core.excluded),
                      "intercept": INTERCEPT in model.terms, "sample": _window(model),
                      "horizon": model.horizon}


def panel_recipe(model):
    p = model.panel
    return "fit_panel", {"response": model.response,
                         "regressors": [t for t in model.terms if t != INTERCEPT],
                         "entity": p.entity, "time": p.time, "effects": list(p.effects),
                         "intercept": INTERCEPT in model.terms or bool(p.effects),
                         "sample": _window(model)}


def _memory_table(frame, **kw) -> Table:
    report = LoadReport(source="a fit made in Python", file_format="memory",
                        rows_read=len(frame), panel=kw.pop("panel", None))
    return Table(frame=frame, report=report, **kw)


def ols_data(model) -> Table:
    regs = [t for t in model.terms if t != INTERCEPT]
    frame = pd.DataFrame({t: model.X[:, model.terms.index(t)] for t in regs}, index=model.index)
    frame[model.response] = model.y
    if model.one_period is not None:
        one = model.one_period
        frame = frame.reindex(frame.index.union(one.index))
        frame[one.name] = one.reindex(frame.index).to_numpy()
    return _memory_table(frame, horizons={model.response: model.horizon} if model.horizon
                         else {})


def iv_data(model) -> Table:
    core = model.core
    regs = [t for t in model.terms if t != INTERCEPT]
    frame = pd.DataFrame({t: model.X[:, model.terms.index(t)] for t in regs}, index=model.index)
    frame[model.response] = model.y
    for z in core.excluded:
        frame[z] = core.Z[:, core.z_names.index(z)]
    return _memory_table(frame, horizons={model.response: model.horizon} if model.horizon
                         else {})


def panel_data_of(model) -> Table:
    p = model.panel
    regs = [t for t in model.terms if t != INTERCEPT]
    values, y = model.raw_rows()
    frame = pd.DataFrame(values, columns=regs)
    frame[model.response] = y
    labels = pd.DataFrame({p.entity: model.index.get_level_values(0).astype(str),
                           p.time: model.index.get_level_values(1)})
    frame.index = pd.RangeIndex(len(frame), name="row")
    labels.index = frame.index
    return _memory_table(frame, labels=labels, panel=(p.entity, p.time))


def _series_diagnostics(model, progress=None):
    return diagnose(model, progress=progress)


def _panel_diagnostics(model, progress=None):
    return diagnose_panel(model, progress=progress)


def _panel_chart(model, small_sample, repair):
    return panel_sweep(model, small_sample=small_sample, repair=repair)


register_kind(ModelKind(
    name="time-series", title="time-series least squares", model_class=OLSFit, fit=fit_ols,
    default_family="kernel", cards=("diagnostics", "persistence", "size-check"),
    residual_chart="series", diagnostics=_series_diagnostics, recipe=ols_recipe,
    line=series_line, data=ols_data))
register_kind(ModelKind(
    name="instrumental-variables", title="instrumental variables / GMM", model_class=IVFit,
    fit=fit_iv, default_family="kernel", cards=("diagnostics", "instruments"),
    residual_chart="series", diagnostics=_series_diagnostics, recipe=iv_recipe, line=iv_line,
    data=iv_data))
register_kind(ModelKind(
    name="panel", title="panel least squares", model_class=PanelFit, fit=fit_panel,
    default_family="driscoll_kraay", cards=("diagnostics", "panel-lines"),
    residual_chart="panel", diagnostics=_panel_diagnostics, chart_sweep=_panel_chart,
    recipe=panel_recipe, line=panel_line, data=panel_data_of))
register_kind(ModelKind(
    name="panel-summary", title="panel least squares from sufficient statistics (Dask)",
    model_class=PanelSummaryFit, fit=fit_panel, default_family="driscoll_kraay",
    cards=("panel-lines",), chart_sweep=_panel_chart, line=panel_line,
    notes="no rows in memory: no residual diagnostics, no leverage"))
register_kind(ModelKind(
    name="fama-macbeth", title="Fama-MacBeth", model_class=FamaMacBethFit,
    fit=fit_fama_macbeth, default_family="kernel", line=fama_macbeth_line))
register_kind(ModelKind(
    name="series", title="series of moment contributions", model_class=SeriesModel,
    default_family="kernel", line=series_model_line))
register_kind(ModelKind(
    name="period-sums", title="per-period sums of a panel's moment contributions",
    model_class=PeriodSums, default_family="kernel", line=series_model_line))
register_kind(ModelKind(
    name="custom-gmm", title="GMM with your own moment function", model_class=GMMFit,
    fit=fit_gmm, default_family="kernel", line=lambda m: _join(
        f"GMM: {m.k} parameters ({', '.join(m.terms[:6])}) from {m.m} moments",
        m.method, _sample_text(m), f"T = {m.nobs}"),
    notes="refitted in Python only: the dashboard never runs a moment function"))
register_kind(ModelKind(
    name="stacked", title="stacked equations", model_class=StackedModel, fit=stack,
    default_family="kernel", line=stacked_line))


def _check_registered() -> None:
    """Every moment-model class shipped is a registered kind (a test calls this)."""
    missing = [cls.__name__ for cls in MomentModel.__subclasses__() if cls not in _BY_CLASS
               and not any(b in _BY_CLASS for b in cls.__mro__)]
    if missing:
        raise SpecificationError(f"unregistered model classes: {', '.join(missing)}")


__all__ = ["CARDS", "KINDS", "ModelKind", "kind_of", "model_line", "register_kind"]


# --------------------------------------------------------------------------- factor models
# (issue 24: many assets at once) A factor model is a stacked model of N least-squares fits;
# its own kind gives it the dashboard's factor cards, its line and its recipe.

from .models.factors import FactorModel, fit_factor_model  # noqa: E402

CARDS["factors"] = ("every asset's alpha, the joint alpha test along the bandwidth with GRS, "
                    "alphas under every estimator and the risk premia")


def factor_line(model) -> str:
    counts = [len(r) for r in model.rows]
    rf = f" minus {model.risk_free}" if model.risk_free else ""
    return _join(f"factor model: {model.n_assets} assets{rf} on "
                 f"{', '.join(model.factors)}", _sample_text(model),
                 f"T = {model.nobs}" + (f" (assets {min(counts)} to {max(counts)})"
                                         if min(counts) < max(counts) else ""),
                 "balanced subsample" if model.balanced else "")


def factor_recipe(model):
    return "fit_factor_model", {"assets": list(model.assets), "factors": list(model.factors),
                                "time": model.time, "risk_free": model.risk_free,
                                "sample": model.window, "balanced": model.balanced or None}


register_kind(ModelKind(
    name="factor-model", title="linear factor model (many assets)", model_class=FactorModel,
    fit=fit_factor_model, default_family="kernel", cards=("factors",), line=factor_line,
    recipe=factor_recipe,
    notes="the dashboard opens a factor model fitted in Python as it is (no table refit)"))
# --------------------------------------------------------------------------- panel IV (few clusters)

def panel_iv_line(model) -> str:
    p, core = model.panel, model.core
    slopes = [t for t in model.terms if t != INTERCEPT]
    effects = (" + ".join(p.effects) + " effects") if p.effects else "pooled"
    return _join(f"{model.response} on {', '.join(slopes)}",
                 f"{', '.join(core.endogenous)} instrumented by {', '.join(core.excluded)}",
                 model.method if model.method != "2sls" else "2SLS",
                 f"{p.n_entities:,} {p.entity} x {p.n_periods:,} {p.time}", effects,
                 f"N = {model.nobs:,}{_lost(model)}", f"df N - K = {model.df_resid:,}")


def panel_iv_recipe(model):
    p, core = model.panel, model.core
    return "fit_panel_iv", {"response": model.response,
                            "regressors": [t for t in model.terms if t != INTERCEPT],
                            "endogenous": list(core.endogenous),
                            "instruments": list(core.excluded), "entity": p.entity,
                            "time": p.time, "effects": list(p.effects),
                            "intercept": INTERCEPT in model.terms or bool(p.effects),
                            "sample": _window(model), "clusters": list(model.groupings) or None}


register_kind(ModelKind(
    name="panel-iv", title="panel instrumental variables", model_class=PanelIVFit,
    fit=fit_panel_iv, default_family="driscoll_kraay", cards=("instruments", "panel-lines"),
    residual_chart="panel", diagnostics=_panel_diagnostics, recipe=panel_iv_recipe,
    line=panel_iv_line))
