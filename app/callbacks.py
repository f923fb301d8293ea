"""Thin callbacks: read inputs, ask the derived-results service (app.derived), hand results to
views and figures.

Each callback is a module-level function recorded by `@callback(...)` (app.wiring) and wired by
`wiring.register(app)`. Big objects (tables, fits, sweeps, comparisons, diagnostics) stay in the
session's part of `app.state.STORE`; the browser holds only keys and settings. A slider move
only reweights the fit's cached autocovariances (engine: `infer`) and patches the marker on the
sensitivity chart. What a model shows follows its kind (engine.kinds), never its class.
"""

from __future__ import annotations

import base64

import numpy as np
import pandas as pd
from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from .. import engine
from ..engine.covariance.registry import FAMILIES
from ..engine.data.columns import index_label
from ..engine.data.panels import periods_of
from ..engine.kinds import kind_of
from . import answer as A
from . import figures as F
from . import views as V
from .factors import factor_fit
from .derived import (comparison_for, current_curve, dataset_from_bytes, dataset_from_path,
                      diagnostics_for, flip_for, is_gmm, make_estimator, no_model_message,
                      panel_reference_lines, rule_marks, stored, strength_for, sweep_for,
                      view_inference)
from .layout import estimator_controls, rule_options
from .clusters import bootstrap_rows, grouping_columns
from .state import STORE, key_for, spec_hash
from .wiring import RUNNING, callback, clientside
from .work import IDLE_POLLS, SHOW_AFTER, WORK


# --------------------------------------------------------------------------- data and model

@callback(Output("dataset-key", "data"), Output("upload-message", "children"),
          Output("upload", "contents"), Output("horizon", "value", allow_duplicate=True),
          Input("upload", "contents"), Input("load-demo", "n_clicks"),
          Input("load-demo-panel", "n_clicks"),
          State("upload", "filename"), State("session", "data"), prevent_initial_call=True,
          message=1, running=RUNNING)
def on_upload(contents, _demo, _panel_demo, filename, session):
    """A new file replaces the data and resets what belonged to the old one (the horizon);
    the file's bytes are not kept in the browser once the server has them."""
    name = filename if isinstance(filename, str) else "upload"
    try:
        if ctx.triggered_id in ("load-demo", "load-demo-panel"):
            panel = ctx.triggered_id == "load-demo-panel"
            key, table = dataset_from_path(session, engine_demo(panel))
            what = "the panel demo" if panel else "the demo data"
            return key, V.ok_box(f"loaded {what} ({len(table.frame):,} rows, simulated)"), \
                None, no_update
        if not contents:
            return no_update, no_update, None, no_update
        if not isinstance(contents, str) or "," not in contents:
            return no_update, V.error_box(f"{name}: the upload could not be read"), None, \
                no_update
        raw = base64.b64decode(contents.split(",", 1)[1], validate=False)
        key, table = dataset_from_bytes(session, raw, name)
    except engine.LagwiseError as exc:
        return no_update, V.error_box(str(exc)), None, no_update
    except (ValueError, TypeError):
        return no_update, V.error_box(f"{name}: the upload could not be decoded"), None, \
            no_update
    return key, V.ok_box(f"loaded {name}: {len(table.frame):,} rows, "
                         f"{len(table.frame.columns):,} numeric columns"), None, None


def engine_demo(panel: bool = False):
    from .._files import demo_file
    return demo_file(PANEL_DEMO if panel else "freight_index.csv")


#: The simulated panel demo and the model it opens with.
PANEL_DEMO = "shipping_panel.csv"
PANEL_DEMO_SPEC = {"response": "exret",
                   "regressors": ["book_to_market", "fleet_age", "charter_cover"]}


@callback(Output("load-report", "children"), Output("preview", "rowData"),
          Output("preview", "columnDefs"), Output("col-summary", "rowData"),
          Output("response", "options"), Output("regressors", "options"),
          Output("tf-column", "options"), Output("response", "value"),
          Output("regressors", "value"), Output("window", "max"), Output("window", "value"),
          Output("entity", "options"), Output("entity", "value"), Output("time-col", "options"),
          Output("time-col", "value"), Output("panel-details", "open"),
          Output("one-period", "options"),
          Input("dataset-key", "data"), State("session", "data"), State("response", "value"),
          State("regressors", "value"), State("initial-spec", "data"),
          State("pending-settings", "data"), message=0)
def on_dataset(key, session, response, regressors, initial, pending):
    table = stored(session, key)
    if table is None:
        return ([html.Li(no_model_message(session, key))] if key else []), [], [], [], [], [], \
            [], None, [], 1, [0, 1], [], None, [], None, False, []
    frame = table.frame
    cols = [str(c) for c in frame.columns]
    opts = [{"label": c, "value": c, "title": c} for c in cols]     # title: the full name
    labels = [str(c) for c in (table.labels.columns if table.labels is not None else [])]
    id_opts = [{"label": c, "value": c, "title": c} for c in labels + cols]
    records, columns = V.preview(table)
    regressors = regressors if isinstance(regressors, list) else []
    settings = pending if isinstance(pending, dict) else {}
    panel = table.report.panel
    if settings.get("entity") in labels + cols and settings.get("time") in labels + cols:
        panel = (settings["entity"], settings["time"])
    if response not in cols or any(r not in cols for r in regressors):
        spec = initial if isinstance(initial, dict) else {}
        if table.report.source == PANEL_DEMO and not settings:
            spec = PANEL_DEMO_SPEC
        if spec.get("response") in cols:
            response = spec["response"]
            regressors = [r for r in spec.get("regressors", []) if r in cols]
        else:
            response, regressors = cols[0], cols[1:2]
    n = len(frame)
    if panel:
        try:
            n = len(periods_of(table, panel[1]))
        except engine.LagwiseError:
            panel = None
    entity, time = panel if panel else (None, None)
    return ([html.Li(line) for line in table.report.lines()], records, columns,
            V.summary_records(table), opts, opts, opts, response, regressors, n - 1, [0, n - 1],
            id_opts, entity, id_opts, time, bool(panel), opts)


@callback(Output("dataset-key", "data", allow_duplicate=True), Output("tf-message", "children"),
          Output("response", "value", allow_duplicate=True),
          Output("horizon", "value", allow_duplicate=True),
          Input("tf-add", "n_clicks"), State("tf-kind", "value"), State("tf-column", "value"),
          State("tf-p", "value"), State("dataset-key", "data"), State("session", "data"),
          prevent_initial_call=True, message=1)
def on_transform(_n, kind, column, p, key, session):
    table = stored(session, key)
    if table is None or not column:
        return no_update, V.error_box("load data and choose a column first"), no_update, no_update
    try:
        new, name = table.with_transform(kind, column, int(p or 1))
        new_key = key_for("data", spec_hash([key, kind, column, p]))
        STORE.put(session, new_key, new)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return no_update, V.error_box(str(exc)), no_update, no_update
    if new.horizons.get(name):
        return new_key, V.ok_box(f"added '{name}'; used as the response (h = {int(p)})"), name, \
            int(p)
    return new_key, V.ok_box(f"added '{name}'"), no_update, no_update


@callback(Output("endogenous", "options"), Output("endogenous", "value"),
          Output("instruments", "options"), Output("instruments", "value"),
          Input("response", "options"), Input("response", "value"), Input("regressors", "value"),
          State("endogenous", "value"), State("instruments", "value"), message=None)
def on_iv_options(columns, response, regressors, endogenous, instruments):
    """Endogenous regressors come from the regressors; instruments from the other columns."""
    cols = [o["value"] for o in columns or [] if isinstance(o, dict)]
    regs = regressors if isinstance(regressors, list) else []
    endo = [e for e in (endogenous if isinstance(endogenous, list) else []) if e in regs]
    free = [c for c in cols if c != response and c not in regs]
    inst = [z for z in (instruments if isinstance(instruments, list) else []) if z in free]
    return ([{"label": r, "value": r, "title": r} for r in regs], endo,
            [{"label": c, "value": c, "title": c} for c in free], inst)


@callback(Output("fit-key", "data"), Output("fit-message", "children"),
          Output("focus", "options"), Output("focus", "value"),
          Output("window-text", "children"), Output("horizon", "value"),
          Output("one-period", "value"),
          Input("dataset-key", "data"), Input("response", "value"), Input("regressors", "value"),
          Input("intercept", "value"), Input("horizon", "value"), Input("window", "value"),
          Input("endogenous", "value"), Input("instruments", "value"),
          Input("entity", "value"), Input("time-col", "value"), Input("effects", "value"),
          Input("one-period", "value"), Input("fm-spec", "data"),
          State("focus", "value"), State("session", "data"), State("initial-spec", "data"),
          State("fit-key", "data"), message=1, running=RUNNING)
def on_spec(key, response, regressors, intercept, horizon, window, endogenous, instruments,
            entity, time, effects, one_period, factor_spec, focus, session, initial, given=None):
    if isinstance(initial, dict) and initial.get("given_fit"):
        return _given_spec(session, given, focus)
    if isinstance(factor_spec, dict) and factor_spec.get("on"):      # the factor-model mode
        return factor_fit(session, key, factor_spec, window, focus)
    table = stored(session, key)
    if table is None or not isinstance(response, str) or not response:
        return None, "", [], None, "", no_update, no_update
    if isinstance(entity, str) and entity and isinstance(time, str) and time:
        return (*_panel_spec(table, key, response, regressors, intercept, window, endogenous,
                             instruments, entity, time, effects, focus, session), None)
    sample, text = _window(table.frame, window)
    triggered = ctx.triggered_id
    if triggered in ("response", "dataset-key") or (triggered is None and one_period is None):
        # the horizon and the one-period series belong to the response: the ones recorded for
        # it (by a transform, the demo or a settings file), or none
        spec = initial if isinstance(initial, dict) else {}
        if triggered == "response":
            horizon = table.horizons.get(response) or spec.get("horizons", {}).get(response)
        one_period = spec.get("one_period", {}).get(response)
    if one_period not in table.frame.columns:
        one_period = None
    regs = regressors if isinstance(regressors, list) else []
    endo = endogenous if isinstance(endogenous, list) else []
    inst = instruments if isinstance(instruments, list) else []
    try:
        h = int(horizon) if horizon not in (None, "") else None
        with WORK.step(session, "Fitting the model"):
            groups = grouping_columns(table)
            if endo or inst:
                model = engine.fit_iv(table, response, regs, endo, inst,
                                      intercept=bool(intercept), sample=sample, horizon=h,
                                      clusters=groups)
            else:
                model = engine.fit_ols(table, response, regs, intercept=bool(intercept),
                                       sample=sample, horizon=h,
                                       one_period=one_period if h else None, clusters=groups)
        fkey = key_for("fit", spec_hash([key, response, regs, bool(intercept), sample, h,
                                         endo, inst, one_period if h else None]))
        STORE.put(session, fkey, model)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return None, V.error_box(str(exc)), [], None, text, no_update, no_update
    slopes = [t for t in model.terms if t != engine.INTERCEPT] or model.terms
    focus = focus if focus in model.terms else slopes[0]
    msg = [engine.model_line(model)]
    if model.horizon:
        msg.append(f"overlapping {model.horizon}-period response: errors are MA("
                   f"{model.horizon - 1}) by construction")
    spacing = table.report.spacing or ""
    if "gap" in spacing or spacing == "irregular":
        msg.append(f"the dates are {spacing}: kernel estimators treat the rows as equally "
                   "spaced periods")
    msg += model.sample.notes
    known = model.one_period if model.capabilities.one_period else None
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t, "title": t} for t in model.terms], focus, text, h,
            known.name if known is not None else None)


def _given_spec(session, fkey, focus):
    """A model handed to the page (lagwise.show): nothing to fit; its line and its terms."""
    model = stored(session, fkey)
    if model is None:
        return None, V.error_box(no_model_message(session, fkey)), [], None, "", no_update, \
            no_update
    slopes = [t for t in model.terms if t != engine.INTERCEPT] or model.terms
    focus = focus if focus in model.terms else slopes[0]
    msg = [engine.model_line(model), *model.sample.notes]
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t, "title": t} for t in model.terms], focus, "", no_update, no_update)


def _panel_spec(table, key, response, regressors, intercept, window, endogenous, instruments,
                entity, time, effects, focus, session):
    regs = regressors if isinstance(regressors, list) else []
    eff = tuple(e for e in ("entity", "time") if isinstance(effects, list) and e in effects)
    endo = endogenous if isinstance(endogenous, list) else []
    inst = instruments if isinstance(instruments, list) else []
    try:
        periods = periods_of(table, time)
        sample, text = _window(pd.DataFrame(index=periods), window)
        groups = grouping_columns(table, exclude=(entity, time))
        with WORK.step(session, "Fitting the panel"):
            if endo or inst:            # panel IV: the within transformation, then IV / GMM
                model = engine.fit_panel_iv(table, response, regs, endo, inst, entity=entity,
                                            time=time, effects=eff, intercept=bool(intercept),
                                            sample=sample, clusters=groups)
            else:
                model = engine.fit_panel(table, response, regs, entity=entity, time=time,
                                         effects=eff, intercept=bool(intercept), sample=sample,
                                         clusters=groups)
        fkey = key_for("fit", spec_hash([key, response, regs, bool(intercept), str(sample),
                                         "panel", entity, time, list(eff), endo, inst]))
        STORE.put(session, fkey, model)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return None, V.error_box(str(exc)), [], None, "", no_update
    p = model.panel
    focus = focus if focus in model.terms else \
        ([t for t in model.terms if t != engine.INTERCEPT] or model.terms)[0]
    r2 = V.fmt(model.r_squared, 3) or "n/a"
    msg = [f"N = {model.nobs:,} rows: {p.n_entities:,} entities x {p.n_periods:,} periods; k = "
           f"{model.k}; {'within ' if p.effects else ''}R² = {r2}", model.describe_method()]
    msg += model.sample.notes
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t, "title": t} for t in model.terms], focus, text, None)


def _window(frame, window):
    if not (isinstance(window, list) and len(window) == 2 and len(frame) > 1):
        return None, ""
    try:
        i0, i1 = int(window[0]), int(min(window[1], len(frame) - 1))
    except (TypeError, ValueError):
        return None, ""
    i0 = max(0, min(i0, i1))
    sample = (frame.index[i0], frame.index[i1]) if i0 > 0 or i1 < len(frame) - 1 else None
    return sample, f"{index_label(frame.index[i0])} to {index_label(frame.index[i1])}"


# --------------------------------------------------------------------------- estimator controls

def applies(name, model) -> bool:
    family = FAMILIES.get(name)
    return family is not None and model is not None and family.applies(model) is None


@callback(Output("est-name", "options"), Output("est-name", "value", allow_duplicate=True),
          Input("fit-key", "data"), State("est-name", "value"), State("pending-settings", "data"),
          State("session", "data"), prevent_initial_call=True)
def on_family_options(fkey, name, pending, session):
    """The estimator picker offers the families that apply to the model: time-series estimators
    for a time series, the panel estimators for a panel."""
    model = stored(session, fkey)
    if model is None:
        raise PreventUpdate
    names = [f.name for f in FAMILIES.values() if f.applies(model) is None]
    options = [{"label": FAMILIES[n].title, "value": n} for n in names]
    if name in names:
        return options, no_update
    wanted = pending.get("estimator") if isinstance(pending, dict) else None
    return options, wanted if wanted in names else kind_of(model).default_family


@callback(Output("est-params", "children"), Input("est-name", "value"),
          Input("pending-settings", "data"))
def on_family(name, pending):
    if name not in FAMILIES:
        return []
    values = pending.get("params") if isinstance(pending, dict) \
        and pending.get("estimator") == name else None
    return estimator_controls(name, values if isinstance(values, dict) else None)


def landed_value(tuning, grid) -> float | None:
    """Where the slider goes for a rule's value: the nearest whole value inside the slider's
    range; None (the slider stays) when there is no finite value (never NaN in an input)."""
    if tuning is None or not np.isfinite(tuning) or len(grid) == 0 \
            or not np.isfinite(grid[[0, -1]]).all():
        return None
    return float(np.clip(round(float(tuning)), grid[0], grid[-1]))


def rule_keys(name) -> list[str]:
    return [o["value"] for o in rule_options(name)] if name in FAMILIES else []


def family_rule(name, pending) -> str:
    """The rule a family opens with: the one in pending settings for it, else Andrews where the
    family has it, else its first rule ("fixed" without a tuning axis)."""
    keys = rule_keys(name)
    wanted = pending.get("rule") if isinstance(pending, dict) \
        and pending.get("estimator") == name else None
    return wanted if wanted in keys else ("andrews" if "andrews" in keys else
                                          keys[1] if len(keys) > 1 else "fixed")


@callback(Output("tune-slider", "min"), Output("tune-slider", "max"),
          Output("tune-slider", "disabled"), Output("tune-title", "children"),
          Output("tune-help", "children"), Output("tune-rule", "options"),
          Output("tune-rule", "value", allow_duplicate=True),
          Input("fit-key", "data"), Input("est-name", "value"), State("tune-rule", "value"),
          State("pending-settings", "data"), State("session", "data"),
          prevent_initial_call="initial_duplicate")
def on_axis(fkey, name, rule, pending, session):
    """The slider follows the family's tuning axis: its range for this model, its title."""
    family = FAMILIES.get(name)
    if family is None:
        return no_update, no_update, True, "", "", [], "fixed"
    options = rule_options(name)
    keys = [o["value"] for o in options]
    # a new fit keeps a rule that applies: resending it would recompute the tables
    same = ctx.triggered_id == "fit-key" and rule in keys
    if ctx.triggered_id == "est-name" or rule not in keys:
        rule = family_rule(name, pending)
    if family.axis is None:
        return no_update, no_update, True, "no tuning value", \
            "This estimator has no tuning value; the chart shows the kernel estimators for " \
            "context, with the current estimate as a dotted line.", options, "fixed"
    model = stored(session, fkey)
    grid = family.axis.grid(model) if model is not None else np.arange(1.0, 61.0)
    return (float(grid[0]), float(grid[-1]), False, family.axis.title, family.axis.help,
            no_update if same else options, no_update if same else rule)


# --------------------------------------------------------------------------- the hot path

INFERENCE_INPUTS = [Input("fit-key", "data"), Input("est-name", "value"),
                    Input({"type": "est-param", "name": ALL}, "value"),
                    Input("tune-rule", "value"), Input("tune-slider", "value"),
                    Input("reference", "value"), Input("level", "value"),
                    Input("focus", "value"), Input("iv-method", "value")]


@callback(Output("coef-table", "rowData"), Output("coef-caption", "children"),
          Output("coef-notes", "children"), Output("headline", "children"),
          Output("tune-text", "children"), Output("compare-table", "rowData"),
          Output("tune-rule", "value"), Output("tune-slider", "value"),
          Output("compare-shown", "data"),
          *INFERENCE_INPUTS, State({"type": "est-param", "name": ALL}, "id"),
          State("session", "data"), State("compare-shown", "data"),
          State("pending-settings", "data"), prevent_initial_call=True, message=1)
def on_inference(fkey, name, values, rule, slider, reference, level, focus, method, ids, session,
                 shown, pending=None):
    """One round trip per slider move. The rule and the slider are kept in step here: a rule
    places the slider where it landed; moving the slider switches to a value set by hand. A
    new family is computed once, at its own rule: while the page still holds the previous
    family's rule, on_axis is about to replace it, and that change brings us back here."""
    out_rule = out_slider = no_update
    if rule not in rule_keys(name) or ("est-name.value" in ctx.triggered_prop_ids
                                       and rule != family_rule(name, pending)):
        raise PreventUpdate
    if ctx.triggered_id == "tune-slider" and rule != "fixed":
        rule = out_rule = "fixed"
    model = stored(session, fkey)
    if model is None or focus not in model.terms:
        msg = no_model_message(session, fkey) if fkey else "Load data and choose a model."
        return [], "", [], msg, "", [], out_rule, out_slider, None
    if not applies(name, model):
        raise PreventUpdate          # the picker is switching to a family that applies
    try:
        est = make_estimator(name, values, ids, rule, slider)
        shown_model, res = view_inference(session, fkey, model, method, est, level, reference)
    except engine.LagwiseError as exc:
        box = V.error_box(str(exc))
        return [], box, [], box, "", no_update, out_rule, out_slider, no_update
    family = est.family
    if family.axis is not None and rule != "fixed":
        landed = landed_value(res.long_run.tuning, family.axis.grid(model))
        if landed is not None and landed != slider:
            out_slider = landed
    flip = flip_for(session, fkey, model, est, focus, level, reference, method)
    title = family.axis.rules[rule][0] if family.axis and rule in family.axis.rules else None
    rejects, headline = A.headline(res, est, shown_model, focus, flip, title)
    notes = list(res.notes)
    short = V.shortfall_note(res, model)
    if short:
        notes.append(short)
    # the comparison is resent only when its inputs or the current conclusion change (the
    # signature lives in the page, so a superseded request never hides an update)
    gmm_key = spec_hash(est.settings()) if is_gmm(model, method) else ""
    signature = [fkey, focus, level, reference, rejects, method, gmm_key]
    rows = no_update
    if shown != signature:
        comp = comparison_for(session, fkey, shown_model, level, reference, gmm_key)
        rows = V.comparison_records(comp, focus, rejects) + bootstrap_rows(session, fkey, focus)
    return (V.coefficient_records(res), res.describe(), [html.Li(n) for n in notes], headline,
            V.tuning_text(res, model), rows, out_rule, out_slider,
            signature if rows is not no_update else no_update)


@callback(Output("fit-cards", "data"), Input("fit-key", "data"), State("session", "data"),
          State("fit-cards", "data"))
def on_fit_cards(fkey, session, current):
    """The cards of the current model's kind, for the page to route slider presses."""
    model = stored(session, fkey)
    cards = sorted(kind_of(model).cards) if model is not None else []
    return no_update if cards == current else cards


# One press of the slider goes to the server once (on_inference); the instrument, factor and
# local-projection cards hear of it only when the page holds such a model.
clientside(
    """function(v, cards, lkey) {
        const nu = window.dash_clientside.no_update, has = c => (cards || []).includes(c);
        return [has("instruments") ? v : nu, has("factors") ? v : nu, lkey ? v : nu];
    }""",
    Output("slider-iv", "data"), Output("slider-fm", "data"), Output("slider-lp", "data"),
    Input("tune-slider", "value"), State("fit-cards", "data"), State("lp-key", "data"),
    prevent_initial_call=True)


# The current-value markers of the sensitivity and flip charts move in the page (partial
# updates of the two figures, no request).
clientside(
    """function(v) {
        const patch = () => new window.dash_clientside.Patch()
            .assign(["layout", "shapes", 0, "x0"], v)
            .assign(["layout", "shapes", 0, "x1"], v).build();
        return [patch(), patch()];
    }""",
    Output("sens-graph", "figure", allow_duplicate=True),
    Output("flip-graph", "figure", allow_duplicate=True),
    Input("tune-slider", "value"), prevent_initial_call=True)


@callback(Output("sens-graph", "figure"), Output("flip-text", "children"),
          Output("interval-graph", "figure"), Output("flip-graph", "figure"),
          Output("flip-summary", "children"),
          Input("fit-key", "data"), Input("reference", "value"), Input("level", "value"),
          Input("focus", "value"), Input("chart-mode", "value"), Input("est-name", "value"),
          Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
          Input("iv-method", "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("tune-slider", "value"),
          State("session", "data"), message=1, running=RUNNING)
def on_sensitivity(fkey, reference, level, focus, mode, name, values, rule, method, ids, slider,
                   session):
    model = stored(session, fkey)
    if model is None or focus not in model.terms:
        empty = F.empty_figure(no_model_message(session, fkey) if fkey else
                               "Load data and choose a model to see the sensitivity chart.")
        return empty, "", F.empty_figure(""), F.empty_figure("", 120), ""
    if not applies(name, model):
        raise PreventUpdate
    try:
        est = make_estimator(name, values, ids, rule, slider)
        sweep = sweep_for(session, fkey, model, est, method)
        shown_model, res = view_inference(session, fkey, model, method, est, level, reference)
        lines = []
        col = {"t": "t_stat", "se": "std_error", "estimate": "estimate"}.get(mode, "t_stat")
        if est.family.axis is None and mode != "ci":
            value = res.table.loc[focus, col]
            lines = [(f"{res.label}: {V.fmt(value, 3)}", float(value))]
        if "panel-lines" in kind_of(model).cards and mode in ("t", "se"):
            lines += panel_reference_lines(session, fkey, model, focus, col, level,
                                           skip=res.label)
        ref = reference if np.isfinite(sweep.critical_values(level, reference, focus)).any() \
            else "auto"
        chosen = current_curve(sweep, est) if sweep.family is est.family else None
        fig = F.sensitivity_figure(sweep, focus, mode or "t", level, ref, slider, chosen,
                                   rule_marks(session, fkey, model, est, sweep),
                                   reference_lines=lines, horizon=model.horizon)
        strips = F.flip_strip_figure(sweep, focus, level, ref, slider, chosen)
        summary = V.conclusion_summary(sweep, F.conclusion_states(sweep, focus, level, ref),
                                       level)
        flips = [html.Li(engine.significance_flip(model, focus, level=level, reference=ref,
                                                  sweep_result=sweep, curve=c).sentence())
                 for c in range(len(sweep.labels))]
        flips = V.flagged_points_note(sweep) + flips
        gmm_key = spec_hash(est.settings()) if is_gmm(model, method) else ""
        comp = comparison_for(session, fkey, shown_model, level, reference, gmm_key)
    except engine.LagwiseError as exc:
        return F.empty_figure(str(exc)), V.error_box(str(exc)), F.empty_figure(""), \
            F.empty_figure("", 120), ""
    STORE.refresh(session, fkey)          # the fit now carries its caches: count them
    return fig, html.Ul(flips), F.interval_figure(comp, focus, level), strips, summary


# --------------------------------------------------------------------------- progress

@callback(Output("work-strip", "children"), Output("work-strip", "className"),
          Output("work-poll", "disabled"), Input("work-poll", "n_intervals"),
          State("session", "data"), State("work-strip", "className"),
          prevent_initial_call=True)
def on_work_poll(n, session, shown_class=None):
    """While a long callback runs, show this session's steps that have taken more than a
    moment; switch the poll off after a few polls with nothing running. A hidden panel that
    stays hidden is not sent again (the page has nothing to redraw)."""
    steps = WORK.active(session)
    shown = [st for st in steps if st.elapsed >= SHOW_AFTER]
    if shown:
        return V.work_strip(shown), "lw-work", no_update
    idle = not steps and isinstance(n, int) and n >= IDLE_POLLS
    hidden = isinstance(shown_class, str) and "lw-hidden" in shown_class
    return (no_update if hidden else [], no_update if hidden else "lw-work lw-hidden",
            True if idle else no_update)


# --------------------------------------------------------------------------- diagnostics

@callback(Output("resid-graph", "figure"), Output("acf-graph", "figure"),
          Output("scatter-graph", "figure"), Output("score-graph", "figure"),
          Output("diag-table", "rowData"), Output("diag-reading", "children"),
          Output("acf-bands", "children"), Input("fit-key", "data"), State("session", "data"),
          message=5, running=RUNNING)
def on_diagnostics(fkey, session):
    model = stored(session, fkey)
    if model is None:
        e = F.empty_figure("")
        return e, e, e, e, [], "", ""
    try:
        rep = diagnostics_for(session, fkey, model)
    except engine.LagwiseError as exc:
        e = F.empty_figure(str(exc))
        return e, e, e, e, [], V.error_box(str(exc)), ""
    reading = html.Ul([html.Li(s) for s in rep.reading + rep.notes])
    resid = F.residual_chart(model, kind_of(model).residual_chart)
    return (resid, F.acf_figure(rep), F.fitted_scatter_figure(model),
            F.score_acf_figure(rep), V.diagnostics_records(rep), reading,
            f"ACF: {rep.bands['acf']}.")


# --------------------------------------------------------------------------- instruments

@callback(Output("strength-card", "style"), Output("first-stage-table", "rowData"),
          Output("strength-list", "children"), Output("spec-table", "rowData"),
          Output("ar-text", "children"),
          Input("fit-key", "data"), Input("est-name", "value"),
          Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
          Input("iv-method", "value"), Input("level", "value"), Input("slider-iv", "data"),
          State({"type": "est-param", "name": ALL}, "id"), State("session", "data"),
          State("tune-slider", "value"), message=4)
def on_strength(fkey, name, values, rule, method, level, _press, ids, session, slider):
    """First stage, strength statistics, J and difference-in-J, and the Anderson-Rubin set,
    under the estimator of S chosen in the Sensitivity card."""
    model = stored(session, fkey)
    if model is None or "instruments" not in kind_of(model).cards:
        return {"display": "none"}, [], [], [], ""
    try:
        est = make_estimator(name, values, ids, rule, slider)
        report = strength_for(session, fkey, model, method, est, level)
    except engine.LagwiseError as exc:
        return {}, [], [html.Li(str(exc))], [], ""
    fs, tests, ar = report
    ar_block = [] if ar is None else [
        html.P(f"Anderson-Rubin {ar.level:.0%} set for {ar.term}: {ar.text()} ({ar.estimator}; "
               f"{ar.law})", className="lw-ar-set"), html.P(ar.reading)]
    return ({}, V.first_stage_records(fs), V.strength_lines(fs), V.spec_records(tests),
            ar_block)


# --------------------------------------------------------------------------- clipboard

for _grid, _cols in (("coef-table", V.COEF_COLUMNS), ("compare-table", V.COMPARE_COLUMNS),
                     ("diag-table", V.DIAG_COLUMNS)):
    def _copy(_n, rows, columns=_cols):
        return V.tsv(rows if isinstance(rows, list) else [], columns)
    callback(Output({"type": "copy", "target": _grid}, "content"),
             Input({"type": "copy", "target": _grid}, "n_clicks"), State(_grid, "rowData"),
             prevent_initial_call=True)(_copy)
