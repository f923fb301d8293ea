"""The derived-results service: per-session fits, sweeps, comparisons, flips, diagnostics and
instrument results, each computed once per setting (single-flight per session and key) and kept
in the session's part of the store within its budget. Callbacks ask here; nothing here knows
about the page's layout. What to compute for a model follows its kind (engine.kinds)."""

from __future__ import annotations

import warnings

import numpy as np

from .. import engine
from ..engine.covariance.registry import FAMILIES
from ..engine.kinds import kind_of
from . import views as V
from .state import MAX_UPLOAD_BYTES, STORE, content_hash, key_for, spec_hash
from .work import tracked

#: IV methods whose weighting follows the estimator of S, and the fit's method for each.
REWEIGHTINGS = {"two-step": "two_step", "iterated": "iterated", "cue": "cue"}



def stored(session, key):
    return STORE.get(session, key)


def dataset_from_bytes(session: str, raw: bytes, name: str):
    table = tracked(session, f"Reading {name}",
                    lambda p: engine.load_table(raw, name=name, max_bytes=MAX_UPLOAD_BYTES,
                                                progress=p))
    key = key_for("data", content_hash(raw))
    STORE.put(session, key, table)
    return key, table


def dataset_from_path(session: str, path):
    """A file on the server (a bundled demo) read as this session's data: (key, table)."""
    return dataset_from_bytes(session, path.read_bytes(), path.name)


def dataset_from_table(session: str, table) -> str:
    """A Table made in Python (lagwise.show) as this session's data."""
    key = key_for("data", "table", id(table))
    STORE.put(session, key, table)
    return key


def given_model(session: str, model) -> str:
    """A model fitted in Python (lagwise.show) as this session's fit."""
    key = key_for("fit", "given", id(model))
    STORE.put(session, key, model)
    return key


def param_values(family, values, ids) -> dict:
    """Parameter values from the generated controls (unknown or axis-set names ignored)."""
    kinds = {p.name: p for p in family.params}
    out = {}
    for pid, v in zip(ids or [], values or []):
        p = kinds.get(pid.get("name") if isinstance(pid, dict) else None)
        if p is None or p.kind == "bandwidth":
            continue
        if p.kind == "bool":
            v = isinstance(v, list) and "on" in v
        elif p.kind == "int" and v == "auto":
            v = None
        out[p.name] = v
    return out


def axis_value(family, slider):
    """The slider's value typed for the family's tuning parameter."""
    p = next(p for p in family.params if p.name == family.axis.param)
    value = slider if isinstance(slider, (int, float)) and not isinstance(slider, bool) else 1
    return float(value) if p.kind == "bandwidth" else int(round(value))


def make_estimator(name, values, ids, rule, slider) -> engine.Estimator:
    family = FAMILIES.get(name)
    if family is None:
        raise engine.SpecificationError(f"unknown estimator {name!r}")
    params = param_values(family, values, ids)
    axis = family.axis
    if axis is not None:
        if rule in axis.rules:
            params.update(axis.rules[rule][1])
        else:
            params.update(axis.fixed)
            params[axis.param] = axis_value(family, slider)
    return engine.estimator(name, **params)


def is_gmm(model, method) -> bool:
    """The weighting of this model follows the estimator under this method (GMM)."""
    return model.capabilities.reweighting and method in REWEIGHTINGS


def sweep_for(session, fkey, model, est, method="2sls"):
    """The chart's sweep for the current family and options, computed once per fit. For a GMM
    fit the weighting follows the estimator (two-step estimates along the axis)."""
    family = est.family
    kind = kind_of(model)
    if kind.chart_sweep is not None and family.panel_chart is not None:
        p = family.panel_chart(est.params)
        small, repair = bool(p.get("small_sample", False)), bool(p.get("repair", True))
        key = key_for(fkey, "panel-sweep", small, repair)
        return STORE.derived(session, key, lambda: tracked(
            session, "Panel estimators along the bandwidth",
            lambda _p: kind.chart_sweep(model, small, repair)))
    if family.axis is None:
        family = FAMILIES[kind.default_family]
        est = engine.estimator(kind.default_family)
    gmm = is_gmm(model, method)
    if family.companions is not None:
        # a GMM sweep weights by the estimator itself: no prewhitening there
        curves = [engine.estimator(family.name, **({**p, "prewhiten": False}
                                                   if gmm and "prewhiten" in p else p))
                  for p in family.companions(est.params)]
    else:
        curves = [est.at(1)]
    key = key_for(fkey, "sweep", method if gmm else "", spec_hash([c.settings() for c in curves]))

    def build():
        if gmm:      # two-step estimates along the axis, from this fit as the first step
            sw = model.two_step(curves[0]).sweep_axis(curves)
            if method != "two-step":          # the cheaper curve: named as what it is
                sw.extras["curve_suffix"] = ", two-step"
                sw.extras["chart_note"] = (sw.extras.get("chart_note", "")
                                           + f"; the table shows {method} GMM")
            return sw
        return model.sweep_axis(curves)
    what = family.axis.title if family.axis is not None else "settings"
    return STORE.derived(session, key, lambda: tracked(
        session, f"{family.title} along its {what}", lambda _p: build()))


def view_model(session, fkey, model, method, est):
    """The model the screen shows: the fit itself, or for GMM the fit weighted by `est`."""
    if not is_gmm(model, method):
        return model
    if method == "two-step":
        return model.two_step(est)
    key = key_for(fkey, method, spec_hash(est.settings()))
    return STORE.derived(session, key, lambda: getattr(model, REWEIGHTINGS[method])(est))


def view_inference(session, fkey, model, method, est, level, reference):
    shown = view_model(session, fkey, model, method, est)
    if shown is model:
        return shown, model.infer(est, level=level, reference=reference)
    return shown, shown.infer_weighting(level=level, reference=reference)


def comparison_for(session, fkey, model, level, reference, extra=""):
    key = key_for(fkey, "compare", level, reference, extra)
    return STORE.derived(session, key, lambda: tracked(
        session, "Comparing estimators",
        lambda p: model.compare(level=level, reference=reference, progress=p)))


def flip_for(session, fkey, model, est, focus, level, reference, method="2sls"):
    """Where the current curve's conclusion changes; computed once per setting, not per move."""
    if est.family.axis is None:
        return None
    sweep = sweep_for(session, fkey, model, est, method)
    key = key_for(fkey, "flip", spec_hash([est.family.curve_label(est.params), focus, level,
                                           reference, method]))

    def build():
        ref = reference
        try:
            sweep.law(current_curve(sweep, est), 0, reference)
        except engine.LagwiseError:
            ref = "auto"
        return engine.significance_flip(model, focus, level=level, reference=ref,
                                        sweep_result=sweep, curve=current_curve(sweep, est))
    return STORE.derived(session, key, build)


def panel_reference_lines(session, fkey, model, focus, col, level, skip=""):
    """Horizontal lines on the panel chart: the results of the families that declare
    reference lines (the clustered estimators) for the coefficient."""
    def build():
        out = []
        for family in FAMILIES.values():
            if not family.reference_lines or family.applies(model) is not None:
                continue
            for item in family.presets(model, None, None):
                est = item[0] if isinstance(item, tuple) else item
                try:
                    out.append((est.label, est.label[:1].lower() + est.label[1:],
                                model.infer(est, level=level).table))
                except engine.LagwiseError:
                    continue
        return out
    rows = STORE.derived(session, key_for(fkey, "panel-lines", level), build)
    return [(f"{title}: {V.fmt(float(table.loc[focus, col]), 3)}", float(table.loc[focus, col]))
            for label, title, table in rows if label != skip
            and np.isfinite(table.loc[focus, col])]


def rule_marks(session, fkey, model, est, sweep):
    """Where each automatic rule of the family lands: [(curve, title, value, how in full)]."""
    family = est.family
    if family.axis is None or sweep.family is not family:
        return []
    key = key_for(fkey, "marks", spec_hash(est.settings()))

    def build():
        curve = current_curve(sweep, est)
        out = []
        for rule, (title, changes) in family.axis.rules.items():
            try:
                lr = est.with_params(**changes).long_run(model)
            except engine.LagwiseError:
                continue
            out.append((curve, title, lr.tuning, lr.how or title))
        return out
    return STORE.derived(session, key, build)


def current_curve(sweep, est) -> int:
    kernel = est.params.get("kernel")
    return sweep.kernels.index(kernel) if kernel in sweep.kernels else 0


def no_model_message(session, key) -> str:
    if STORE.was_evicted(session, key):
        return ("this session's data was removed to stay within its memory budget: load the "
                "file again")
    if not STORE.has_session(session):
        return "this page's session is not known to the server any more: reload the page"
    return "Load data and choose a model."


def diagnostics_for(session, fkey, model):
    def build():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            kind = kind_of(model)
            if kind.diagnostics is None:
                raise engine.EstimationError(f"residual diagnostics are not offered for "
                                             f"{kind.title}")
            return tracked(session, "Residual diagnostics",
                           lambda p: kind.diagnostics(model, p))
    return STORE.derived(session, key_for(fkey, "diagnostics"), build)


def strength_for(session, fkey, model, method, est, level):
    key = key_for(fkey, "strength", method, level, spec_hash(est.settings()))

    def build():
        shown = view_model(session, fkey, model, method, est)
        fs = model.first_stage(est)
        tests = [("Hansen J (overidentifying restrictions)",
                  shown.j_test() if shown is not model else model.j_test(est))]
        if model.overidentification > 0:
            for z in model.core.excluded:
                try:
                    tests.append((f"difference-in-J: {z}", shown.difference_j([z], est)))
                except engine.LagwiseError:
                    continue
        ar = None
        if len(model.core.endogenous) == 1:
            ar = model.anderson_rubin(model.core.endogenous[0], est, level)
        return fs, tests, ar
    return STORE.derived(session, key, build)
