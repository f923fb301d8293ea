"""Thin callbacks: read inputs, call the engine, hand results to views and figures.

Each callback is a module-level function registered by `@callback(...)` into `CALLBACKS`;
`register(app)` wires them to an app (several apps can live in one process, as in the tests).
Big objects (tables, fits, sweeps, comparisons, diagnostics) stay in the session's part of
`app.state.STORE`; the browser holds only keys and settings. A slider move only reweights the
fit's cached autocovariances (engine: `infer`) and patches the marker on the sensitivity chart.
"""

from __future__ import annotations

import base64
import functools
import logging
import warnings

import numpy as np
from dash import ALL, Input, Output, Patch, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from .. import engine
from ..engine.covariance.registry import FAMILIES
from ..engine.data.columns import index_label
from ..engine.data.panels import periods_of
from ..engine.models.iv_sweep import gmm_curves, with_j
from ..engine.studies.panel_diagnostics import diagnose_panel
from ..engine.studies.panel_sensitivity import panel_sweep
import pandas as pd
from . import figures as F
from . import views as V
from .layout import DEFAULT_FAMILY, estimator_controls, rule_options
from .state import MAX_UPLOAD_BYTES, STORE, content_hash, key_for, spec_hash
from .work import IDLE_POLLS, SHOW_AFTER, WORK, tracked

CALLBACKS: list = []
LOG = logging.getLogger("lagwise")


def callback(*args, message: int | None = None, **kwargs):
    """Record a module-level callback; `register` wires it to an app. `message`: the position
    of the output that shows a message when a request cannot be handled (a malformed payload or
    an unexpected failure): it gets the message, the other outputs stay as they are, and the
    server never answers with an error page."""
    def deco(fn):
        CALLBACKS.append((args, kwargs, guarded(fn, args, message)))
        return fn
    return deco


def guarded(fn, args, message):
    n_out = sum(isinstance(a, Output) for a in args)

    @functools.wraps(fn)
    def run(*values):
        try:
            return fn(*values)
        except PreventUpdate:
            raise
        except Exception as exc:  # noqa: BLE001 - a message, never a traceback or an HTTP 500
            LOG.warning("callback %s could not handle a request: %s", fn.__name__, exc)
            if message is None:
                raise PreventUpdate from None
            text = V.error_box("this request could not be handled; reload the page if the "
                               "problem persists")
            if n_out == 1:
                return text
            out = [no_update] * n_out
            out[message] = text
            return tuple(out)
    return run


def register(app):
    from . import exports, studies  # noqa: F401 - their callbacks are recorded on import
    for args, kwargs, fn in CALLBACKS + exports.CALLBACKS + studies.CALLBACKS:
        app.callback(*args, **kwargs)(fn)


# --------------------------------------------------------------------------- shared helpers

def stored(session, key):
    return STORE.get(session, key)


#: Callbacks that may run for more than a second switch the progress poll on while they run
#: (and restart its idle count); the poll switches itself off when nothing is running. The
#: slider's callback (on_inference) has none: its slow first round (the comparison, the flip's
#: sweep) is shared with on_sensitivity, which has, so a slider move sends no extra requests.
RUNNING = [(Output("work-poll", "disabled"), False, False),
           (Output("work-poll", "n_intervals"), 0, 0)]


def dataset_from_bytes(session: str, raw: bytes, name: str):
    table = tracked(session, f"Reading {name}",
                    lambda p: engine.load_table(raw, name=name, max_bytes=MAX_UPLOAD_BYTES,
                                                progress=p))
    key = key_for("data", content_hash(raw))
    STORE.put(session, key, table)
    return key, table


def dataset_from_table(session: str, table) -> str:
    """A Table made in Python (lagwise.show) as this session's data."""
    key = key_for("data", "table", id(table))
    STORE.put(session, key, table)
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
    return isinstance(model, engine.IVFit) and method in ("two-step", "iterated", "cue")


def sweep_for(session, fkey, model, est, method="2sls"):
    """The chart's sweep for the current family and options, computed once per fit. For a GMM
    fit the weighting follows the estimator (two-step estimates along the axis)."""
    family = est.family
    if getattr(model, "panel", None) is not None and family.panel_chart is not None:
        p = family.panel_chart(est.params)
        small, repair = bool(p.get("small_sample", False)), bool(p.get("repair", True))
        key = key_for(fkey, "panel-sweep", small, repair)
        return STORE.derived(session, key, lambda: tracked(
            session, "Panel estimators along the bandwidth",
            lambda _p: panel_sweep(model, small_sample=small, repair=repair)))
    if family.axis is None:
        family, est = FAMILIES[DEFAULT_FAMILY], engine.estimator(DEFAULT_FAMILY)
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
        if gmm:
            sw = gmm_curves(model, curves)
            if method != "two-step":          # the cheaper curve: named as what it is
                sw.extras["curve_suffix"] = ", two-step"
                sw.extras["chart_note"] += f"; the table shows {method} GMM"
            return sw
        if isinstance(model, engine.IVFit):
            return with_j(model, engine.sweep(model, curves))
        return engine.sweep(model, curves)
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
    return STORE.derived(session, key, lambda: getattr(model, method)(est))


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


PANEL_REFERENCE = (("cluster", {"by": "entity"}, "clustered by entity"),
                   ("cluster", {"by": "time"}, "clustered by time"),
                   ("cluster", {"by": "both"}, "two-way clustered"))


def panel_reference_lines(session, fkey, model, focus, col, level, skip=""):
    """Horizontal lines on the panel chart: the clustered results for the coefficient."""
    def build():
        out = []
        for name, params, title in PANEL_REFERENCE:
            est = engine.estimator(name, **params)
            try:
                out.append((est.label, title, model.infer(est, level=level).table))
            except engine.LagwiseError:
                continue
        return out
    rows = STORE.derived(session, key_for(fkey, "panel-lines", level), build)
    return [(f"{title}: {V.fmt(float(table.loc[focus, col]), 3)}", float(table.loc[focus, col]))
            for label, title, table in rows if label != skip
            and np.isfinite(table.loc[focus, col])]


def rule_marks(session, fkey, model, est, sweep):
    """Where each automatic rule of the family lands: [(curve, title, value)]."""
    family = est.family
    if family.axis is None or sweep.family is not family:
        return []
    key = key_for(fkey, "marks", spec_hash(est.settings()))

    def build():
        curve = _current_curve(sweep, est)
        out = []
        for rule, (title, changes) in family.axis.rules.items():
            try:
                lr = est.with_params(**changes).long_run(model)
            except engine.LagwiseError:
                continue
            out.append((curve, title, lr.tuning))
        return out
    return STORE.derived(session, key, build)


def _current_curve(sweep, est) -> int:
    kernel = est.params.get("kernel")
    return sweep.kernels.index(kernel) if kernel in sweep.kernels else 0


def no_model_message(session, key) -> str:
    if STORE.was_evicted(session, key):
        return ("this session's data was removed to stay within its memory budget: load the "
                "file again")
    if not STORE.has_session(session):
        return "this page's session is not known to the server any more: reload the page"
    return "Load data and choose a model."


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
            path = engine_demo(ctx.triggered_id == "load-demo-panel")
            key, table = dataset_from_bytes(session, path.read_bytes(), path.name)
            return key, V.ok_box(f"loaded the demo data ({len(table.frame)} rows, simulated)"), \
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
    return key, V.ok_box(f"loaded {name}: {len(table.frame)} rows, "
                         f"{len(table.frame.columns)} numeric columns"), None, None


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
    opts = [{"label": c, "value": c} for c in cols]
    labels = [str(c) for c in (table.labels.columns if table.labels is not None else [])]
    id_opts = [{"label": c, "value": c} for c in labels + cols]
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
    return ([{"label": r, "value": r} for r in regs], endo,
            [{"label": c, "value": c} for c in free], inst)


@callback(Output("fit-key", "data"), Output("fit-message", "children"),
          Output("focus", "options"), Output("focus", "value"),
          Output("window-text", "children"), Output("horizon", "value"),
          Output("one-period", "value"),
          Input("dataset-key", "data"), Input("response", "value"), Input("regressors", "value"),
          Input("intercept", "value"), Input("horizon", "value"), Input("window", "value"),
          Input("endogenous", "value"), Input("instruments", "value"),
          Input("entity", "value"), Input("time-col", "value"), Input("effects", "value"),
          Input("one-period", "value"),
          State("focus", "value"), State("session", "data"), State("initial-spec", "data"),
          message=1, running=RUNNING)
def on_spec(key, response, regressors, intercept, horizon, window, endogenous, instruments,
            entity, time, effects, one_period, focus, session, initial):
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
            if endo or inst:
                model = engine.fit_iv(table, response, regs, endo, inst,
                                      intercept=bool(intercept), sample=sample, horizon=h)
            else:
                model = engine.fit_ols(table, response, regs, intercept=bool(intercept),
                                       sample=sample, horizon=h,
                                       one_period=one_period if h else None)
        fkey = key_for("fit", spec_hash([key, response, regs, bool(intercept), sample, h,
                                         endo, inst, one_period if h else None]))
        STORE.put(session, fkey, model)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return None, V.error_box(str(exc)), [], None, text, no_update, no_update
    slopes = [t for t in model.terms if t != engine.INTERCEPT] or model.terms
    focus = focus if focus in model.terms else slopes[0]
    msg = [f"T = {model.nobs}, k = {model.k}, R² = {V.fmt(model.r_squared, 3) or 'n/a'}"]
    if isinstance(model, engine.IVFit):
        msg.append(f"instrumental variables: {len(model.moment_names)} instruments for "
                   f"{model.k} coefficients ({', '.join(model.core.endogenous)} instrumented)")
    if model.horizon:
        msg.append(f"overlapping {model.horizon}-period response: errors are MA("
                   f"{model.horizon - 1}) by construction")
    spacing = table.report.spacing or ""
    if "gap" in spacing or spacing == "irregular":
        msg.append(f"the dates are {spacing}: kernel estimators treat the rows as equally "
                   "spaced periods")
    msg += model.sample.notes
    known = getattr(model, "one_period", None)
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t} for t in model.terms], focus, text, h,
            known.name if known is not None else None)


def _panel_spec(table, key, response, regressors, intercept, window, endogenous, instruments,
                entity, time, effects, focus, session):
    regs = regressors if isinstance(regressors, list) else []
    eff = tuple(e for e in ("entity", "time") if isinstance(effects, list) and e in effects)
    try:
        if (isinstance(endogenous, list) and endogenous) or \
                (isinstance(instruments, list) and instruments):
            raise engine.SpecificationError("instruments are not offered for panels; clear the "
                                            "endogenous regressors and instruments, or the "
                                            "panel columns")
        periods = periods_of(table, time)
        sample, text = _window(pd.DataFrame(index=periods), window)
        with WORK.step(session, "Fitting the panel"):
            model = engine.fit_panel(table, response, regs, entity=entity, time=time,
                                     effects=eff, intercept=bool(intercept), sample=sample)
        fkey = key_for("fit", spec_hash([key, response, regs, bool(intercept), str(sample),
                                         "panel", entity, time, list(eff)]))
        STORE.put(session, fkey, model)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return None, V.error_box(str(exc)), [], None, "", no_update
    p = model.panel
    focus = focus if focus in model.terms else \
        ([t for t in model.terms if t != engine.INTERCEPT] or model.terms)[0]
    r2 = V.fmt(model.r_squared, 3) or "n/a"
    msg = [f"N = {model.nobs} rows: {p.n_entities} entities x {p.n_periods} periods; k = "
           f"{model.k}; {'within ' if p.effects else ''}R² = {r2}", model.describe_method()]
    msg += model.sample.notes
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t} for t in model.terms], focus, text, None)


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
    panel = getattr(model, "panel", None) is not None
    return options, wanted if wanted in names else ("driscoll_kraay" if panel else "kernel")


@callback(Output("est-params", "children"), Input("est-name", "value"),
          Input("pending-settings", "data"))
def on_family(name, pending):
    if name not in FAMILIES:
        return []
    values = pending.get("params") if isinstance(pending, dict) \
        and pending.get("estimator") == name else None
    return estimator_controls(name, values if isinstance(values, dict) else None)


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
        wanted = pending.get("rule") if isinstance(pending, dict) \
            and pending.get("estimator") == name else None
        rule = wanted if wanted in keys else ("andrews" if "andrews" in keys else
                                             keys[1] if len(keys) > 1 else "fixed")
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
          State("session", "data"), State("compare-shown", "data"), prevent_initial_call=True,
          message=1)
def on_inference(fkey, name, values, rule, slider, reference, level, focus, method, ids, session,
                 shown):
    """One round trip per slider move. The rule and the slider are kept in step here: a rule
    places the slider where it landed; moving the slider switches to a value set by hand."""
    out_rule = out_slider = no_update
    if ctx.triggered_id == "tune-slider" and rule != "fixed":
        rule = out_rule = "fixed"
    model = stored(session, fkey)
    if model is None or focus not in getattr(model, "terms", []):
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
    if family.axis is not None and rule != "fixed" and res.long_run.tuning is not None:
        landed = float(np.clip(round(res.long_run.tuning), *family.axis.grid(model)[[0, -1]]))
        if landed != slider:
            out_slider = landed
    flip = _flip(session, fkey, model, est, focus, level, reference, method)
    title = family.axis.rules[rule][0] if family.axis and rule in family.axis.rules else None
    rejects, headline = V.headline(res, focus, V.flip_line(flip), title)
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
        rows = V.comparison_records(comp, focus, rejects)
    return (V.coefficient_records(res), res.describe(), [html.Li(n) for n in notes], headline,
            V.tuning_text(res, model), rows, out_rule, out_slider,
            signature if rows is not no_update else no_update)


def _flip(session, fkey, model, est, focus, level, reference, method="2sls"):
    """Where the current curve's conclusion changes; computed once per setting, not per move."""
    if est.family.axis is None:
        return None
    sweep = sweep_for(session, fkey, model, est, method)
    key = key_for(fkey, "flip", spec_hash([est.family.curve_label(est.params), focus, level,
                                           reference, method]))

    def build():
        ref = reference
        try:
            sweep.law(_current_curve(sweep, est), 0, reference)
        except engine.LagwiseError:
            ref = "auto"
        return engine.significance_flip(model, focus, level=level, reference=ref,
                                        sweep_result=sweep, curve=_current_curve(sweep, est))
    return STORE.derived(session, key, build)


@callback(Output("sens-graph", "figure", allow_duplicate=True),
          Input("tune-slider", "value"), prevent_initial_call=True)
def on_marker(slider):
    """Move the current-value marker only (a partial update of the figure)."""
    patch = Patch()
    patch["layout"]["shapes"][0]["x0"] = slider
    patch["layout"]["shapes"][0]["x1"] = slider
    return patch


@callback(Output("sens-graph", "figure"), Output("flip-text", "children"),
          Output("interval-graph", "figure"),
          Input("fit-key", "data"), Input("reference", "value"), Input("level", "value"),
          Input("focus", "value"), Input("chart-mode", "value"), Input("est-name", "value"),
          Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
          Input("iv-method", "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("tune-slider", "value"),
          State("session", "data"), message=1, running=RUNNING)
def on_sensitivity(fkey, reference, level, focus, mode, name, values, rule, method, ids, slider,
                   session):
    model = stored(session, fkey)
    if model is None or focus not in getattr(model, "terms", []):
        empty = F.empty_figure(no_model_message(session, fkey) if fkey else
                               "Load data and choose a model to see the sensitivity chart.")
        return empty, "", F.empty_figure("")
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
        if getattr(model, "panel", None) is not None and mode in ("t", "se"):
            lines += panel_reference_lines(session, fkey, model, focus, col, level,
                                           skip=res.label)
        ref = reference if np.isfinite(sweep.critical_values(level, reference, focus)).any() else "auto"
        fig = F.sensitivity_figure(sweep, focus, mode or "t", level, ref, slider,
                                   _current_curve(sweep, est) if sweep.family is est.family
                                   else None, rule_marks(session, fkey, model, est, sweep),
                                   reference_lines=lines, horizon=model.horizon)
        flips = [html.Li(engine.significance_flip(model, focus, level=level, reference=ref,
                                                  sweep_result=sweep, curve=c).sentence())
                 for c in range(len(sweep.labels))]
        flips = V.flagged_points_note(sweep) + flips
        gmm_key = spec_hash(est.settings()) if is_gmm(model, method) else ""
        comp = comparison_for(session, fkey, shown_model, level, reference, gmm_key)
    except engine.LagwiseError as exc:
        return F.empty_figure(str(exc)), V.error_box(str(exc)), F.empty_figure("")
    STORE.refresh(session, fkey)          # the fit now carries its caches: count them
    return fig, html.Ul(flips), F.interval_figure(comp, focus, level)


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
    resid = F.panel_residual_figure(model) if getattr(model, "panel", None) is not None \
        else F.residual_figure(model)
    return (resid, F.acf_figure(rep), F.fitted_scatter_figure(model),
            F.score_acf_figure(rep), V.diagnostics_records(rep), reading,
            f"ACF: {rep.bands['acf']}.")


def diagnostics_for(session, fkey, model):
    def build():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if getattr(model, "panel", None) is not None:
                return tracked(session, "Panel diagnostics",
                               lambda p: diagnose_panel(model, progress=p))
            return tracked(session, "Residual diagnostics",
                           lambda p: engine.diagnose(model, progress=p))
    return STORE.derived(session, key_for(fkey, "diagnostics"), build)


# --------------------------------------------------------------------------- instruments

@callback(Output("strength-card", "style"), Output("first-stage-table", "rowData"),
          Output("strength-list", "children"), Output("spec-table", "rowData"),
          Output("ar-text", "children"),
          Input("fit-key", "data"), Input("est-name", "value"),
          Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
          Input("iv-method", "value"), Input("level", "value"), Input("tune-slider", "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("session", "data"), message=4)
def on_strength(fkey, name, values, rule, method, level, slider, ids, session):
    """First stage, strength statistics, J and difference-in-J, and the Anderson-Rubin set,
    under the estimator of S chosen in the Sensitivity card."""
    model = stored(session, fkey)
    if not isinstance(model, engine.IVFit):
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


# --------------------------------------------------------------------------- clipboard

for _grid, _cols in (("coef-table", V.COEF_COLUMNS), ("compare-table", V.COMPARE_COLUMNS),
                     ("diag-table", V.DIAG_COLUMNS)):
    def _copy(_n, rows, columns=_cols):
        return V.tsv(rows if isinstance(rows, list) else [], columns)
    callback(Output({"type": "copy", "target": _grid}, "content"),
             Input({"type": "copy", "target": _grid}, "n_clicks"), State(_grid, "rowData"),
             prevent_initial_call=True)(_copy)
