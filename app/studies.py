"""The predictive-regression cards: persistence and horizons (computed with the fit), and the
size check (a background job with progress and cancel: Dash background callbacks with a disk
cache manager). The job reads a lean copy of the fit from the job cache, not the session store,
so a forked job never touches the store's lock."""

from __future__ import annotations

import atexit
import pickle
import secrets
import shutil
import tempfile

import numpy as np
import pandas as pd
from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from .. import engine
from ..engine.data.columns import INTERCEPT, SampleInfo
from ..engine.models.ols import OLSFit
from ..engine.studies.predictive import horizon_sweep, persistence_report
from ..engine.studies.size_check import size_check
from . import figures as F
from . import views as V
from ..engine.kinds import kind_of
from .derived import stored
from .wiring import RUNNING, callback
from .state import STORE, key_for
from .work import tracked

#: The size check's replications are bounded per run.
MAX_REPS = 2000
#: Bytes the job cache may hold on disk (entries are removed when a job starts).
JOB_CACHE_BYTES = 512 * 2**20
_JOBS = {"cache": None}


def job_manager():
    """The disk-cache manager behind the background callbacks (one temporary folder per
    process, removed at exit)."""
    import diskcache
    from dash import DiskcacheManager
    if _JOBS["cache"] is None:
        folder = tempfile.mkdtemp(prefix="lagwise-jobs-")
        atexit.register(shutil.rmtree, folder, ignore_errors=True)
        _JOBS["cache"] = diskcache.Cache(folder, size_limit=JOB_CACHE_BYTES)
    return DiskcacheManager(_JOBS["cache"], expire=3600)


def job_cache():
    """The disk cache behind the background jobs (None until the app is created)."""
    return _JOBS["cache"]


def lean_copy(fit) -> OLSFit:
    """The fit without its table and caches (what the size check needs)."""
    copy = OLSFit(X=np.array(fit.X), y=np.array(fit.y), terms=fit.terms,
                  index=pd.RangeIndex(fit.nobs), response=fit.response,
                  sample=SampleInfo(fit.nobs, fit.nobs), horizon=fit.horizon)
    if fit.capabilities.one_period:
        pos = fit.one_period.index.get_indexer(fit.index)
        src = fit.one_period.to_numpy()
        if (pos >= 0).all() and (np.diff(pos) == 1).all():
            copy.one_period = pd.Series(src[pos[0]: pos[0] + fit.nobs + (fit.horizon or 1) + 1],
                                        name=fit.one_period.name)
    return copy


def _has_card(model, card: str) -> bool:
    return model is not None and card in kind_of(model).cards


# --------------------------------------------------------------------------- persistence

@callback(Output("predictive-card", "style"), Output("persistence-table", "rowData"),
          Output("persistence-reading", "children"), Output("horizon-graph", "figure"),
          Output("horizon-notes", "children"),
          Input("fit-key", "data"), Input("focus", "value"), Input("level", "value"),
          State("session", "data"), message=2, running=RUNNING)
def on_persistence(fkey, focus, level, session):
    model = stored(session, fkey)
    hidden = {"display": "none"}
    if not _has_card(model, "persistence") or focus not in model.terms:
        return hidden, [], [], F.empty_figure(""), []
    key = key_for(fkey, "persistence", focus, level)

    def build(progress):
        slopes = [t for t in model.terms if t != INTERCEPT]
        if not slopes:
            return None
        predictor = focus if focus != INTERCEPT else None
        overlapping = bool(model.horizon and model.horizon > 1)
        try:
            progress(0, 1, "the predictor's persistence and IVX")
            rep = persistence_report(model, predictor, level=level)
        except engine.LagwiseError as exc:
            if not overlapping:
                return None
            return {"error": str(exc)}
        if not overlapping and not rep.persistent:
            return None
        source = model.one_period.name if model.capabilities.one_period \
            else (model.response if not overlapping else None)
        sweep = None
        notes = list(rep.notes)
        if source is not None and model.table is not None and source in model.table.frame:
            top = int(min(36, max(12, 3 * (model.horizon or 1)), model.nobs // 5))
            regs = [t for t in model.terms if t != INTERCEPT]
            try:
                sweep = horizon_sweep(
                    model.table, source, regs, horizons=range(1, top + 1),
                    intercept=INTERCEPT in model.terms, level=level,
                    progress=lambda d, n: progress(d, n, f"horizon {min(d + 1, n)} of {n}"))
                notes += sweep.notes
            except engine.LagwiseError as exc:
                notes.append(f"horizon chart not available: {exc}")
        else:
            notes.append("the horizon chart needs the one-period series: choose it under the "
                         "overlap horizon")
        return {"report": rep, "sweep": sweep, "notes": notes}
    out = STORE.derived(session, key, lambda: tracked(session, "Persistence and horizons", build))
    if out is None:
        return hidden, [], [], F.empty_figure(""), []
    if "error" in out:
        return {}, [], [html.Li(out["error"])], F.empty_figure(out["error"]), []
    rep, sweep = out["report"], out["sweep"]
    fig = F.horizon_figure(sweep, focus if focus != INTERCEPT else rep.predictor, level) \
        if sweep is not None else F.empty_figure("choose the one-period series to see horizons")
    return ({}, V.persistence_records(rep), [html.Li(s) for s in rep.reading], fig,
            [html.Li(n) for n in out["notes"]])


# --------------------------------------------------------------------------- size check

@callback(Output("size-job", "data"), Output("size-status", "children"),
          Input("size-run", "n_clicks"), State("fit-key", "data"), State("focus", "value"),
          State("size-reps", "value"), State("size-method", "value"), State("level", "value"),
          State("session", "data"), prevent_initial_call=True, message=1)
def on_size_request(_n, fkey, focus, reps, method, level, session):
    """Put a lean copy of the fit in the job cache and hand the job its token."""
    model = stored(session, fkey)
    if not _has_card(model, "size-check"):
        return no_update, V.error_box("the size check is for least-squares time-series fits")
    if focus not in model.terms or focus == INTERCEPT:
        return no_update, V.error_box("choose a slope as the coefficient in focus")
    if not isinstance(reps, int) or not 20 <= reps <= MAX_REPS or method not in ("var", "block"):
        return no_update, V.error_box("choose the replications and the simulation")
    token = secrets.token_urlsafe(16)
    cache = _JOBS["cache"]
    if cache is None:
        return no_update, V.error_box("background jobs are not available in this server")
    cache.set(f"size-input-{token}", pickle.dumps({
        "fit": lean_copy(model), "focus": focus, "reps": reps, "method": method,
        "level": float(level)}), expire=3600)
    return token, html.Div(f"running {reps} replications...", className="lw-help")


@callback(Output("size-card", "style"), Output("size-results", "style"),
          Output("size-graph", "figure", allow_duplicate=True),
          Output("size-table", "rowData", allow_duplicate=True),
          Output("size-status", "children", allow_duplicate=True),
          Output("size-progress", "value", allow_duplicate=True),
          Output("size-progress-text", "children", allow_duplicate=True),
          Output("size-data", "data", allow_duplicate=True),
          Input("fit-key", "data"), State("session", "data"), prevent_initial_call=True)
def on_size_reset(fkey, session):
    """A new model clears the last size check (its numbers belonged to the old one); the card
    is shown for least-squares time-series fits only."""
    model = stored(session, fkey)
    style = {} if _has_card(model, "size-check") else {"display": "none"}
    return style, {"display": "none"}, F.empty_figure(""), [], "", "0", "", None


@callback(Output("size-status", "children", allow_duplicate=True),
          Input("size-cancel", "n_clicks"), prevent_initial_call=True)
def on_size_cancel(n):
    if not n:
        raise PreventUpdate
    return V.ok_box("cancelled: the chart and table show the last completed run, if any")


@callback(Output("size-graph", "figure"), Output("size-table", "rowData"),
          Output("size-data", "data"), Output("size-status", "children", allow_duplicate=True),
          Output("size-results", "style", allow_duplicate=True),
          Input("size-job", "data"), background=True,
          running=[(Output("size-run", "disabled"), True, False),
                   (Output("size-cancel", "disabled"), False, True)],
          cancel=[Input("size-cancel", "n_clicks"), Input("fit-key", "data")],
          progress=[Output("size-progress", "value"), Output("size-progress", "max"),
                    Output("size-progress-text", "children")],
          prevent_initial_call=True, message=3)
def on_size_job(set_progress, token):
    if not isinstance(token, str):
        raise PreventUpdate
    cache = _JOBS["cache"]
    raw = cache.pop(f"size-input-{token}") if cache is not None else None
    if raw is None:
        return no_update, no_update, no_update, V.error_box("the size check's input expired; "
                                                            "run it again"), no_update
    job = pickle.loads(raw)         # written by this server for this job only
    fit = job["fit"]

    def progress(done, total):
        set_progress((str(done), str(total), f"{done} of {total} replications"))
    res = size_check(fit, reps=job["reps"], method=job["method"], seed=0, level=job["level"],
                     focus=job["focus"], progress=progress)
    fig = F.size_figure(res.frame, 1.0 - res.level, res.done, fit.nobs)
    data = {"frame": res.frame.to_dict("records"), "notes": res.notes, "focus": res.focus,
            "response": fit.response}
    return fig, V.size_records(res.frame), data, html.Ul([html.Li(n) for n in res.notes]), {}


@callback(Output("download", "data", allow_duplicate=True),
          Input({"type": "export-size", "fmt": ALL}, "n_clicks"), State("size-data", "data"),
          State("fit-key", "data"), State("session", "data"), prevent_initial_call=True)
def on_size_export(clicks, data, fkey=None, session=None):
    from ..engine.io.provenance import provenance
    from ..engine.io.tables import render
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        raise PreventUpdate
    if not isinstance(data, dict) or not data.get("frame"):
        return {"content": "export failed: run the size check first\n",
                "filename": "lagwise_export_error.txt"}
    fmt = trig.get("fmt")
    frame = pd.DataFrame(data["frame"])[["estimator", "reference", "nominal", "rejection_rate",
                                         "ci_low", "ci_high", "size_adjusted_critical_value",
                                         "typical_critical_value", "replications"]]
    model = stored(session, fkey)
    text = render(frame, fmt, index=False,
                  caption=f"{data.get('response')}: size of each nominal test of "
                          f"{data.get('focus')} = 0 at this sample",
                  notes=([engine.model_line(model)] if model is not None else [])
                  + list(data.get("notes") or []), stamp=provenance(model).lines())
    ext = {"csv": "csv", "markdown": "md", "latex": "tex"}.get(fmt, "txt")
    return {"content": text, "filename": f"lagwise_size_check.{ext}"}


# --------------------------------------------------------------------------- memo table

def _estimator_options(model) -> list[dict]:
    import json
    from ..engine.inference.compare import family_presets
    seen, out = set(), []
    for item in family_presets(model):
        est = item[0] if isinstance(item, tuple) else item
        key = json.dumps(est.settings(), sort_keys=True)
        if key in seen:
            continue
        seen.add(key)
        out.append({"label": est.label, "value": key, "title": est.label,
                    "axis": est.family.axis is not None})
    return out


@callback(Output("memo-ests", "options"), Output("memo-ests", "value"),
          Input("fit-key", "data"), State("memo-ests", "value"), State("session", "data"),
          message=None)
def on_memo_options(fkey, chosen, session):
    model = stored(session, fkey)
    if model is None:
        raise PreventUpdate
    options = _estimator_options(model)
    values = [o["value"] for o in options]
    chosen = [c for c in (chosen or []) if c in values]
    if not chosen:
        chosen = values[:1] + [o["value"] for o in options if o["axis"]][:1]
    return options, chosen


@callback(Output("memo-specs", "data"), Output("memo-message", "children"),
          Input("memo-add", "n_clicks"), Input("memo-clear", "n_clicks"),
          State("memo-specs", "data"), State("fit-key", "data"), State("session", "data"),
          prevent_initial_call=True, message=1)
def on_memo_specs(_add, _clear, specs, fkey, session):
    specs = [s for s in (specs or []) if isinstance(s, dict)]
    if ctx.triggered_id == "memo-clear":
        return [], ""
    model = stored(session, fkey)
    if model is None:
        return no_update, V.error_box("choose a model first")
    if any(s.get("key") == fkey for s in specs):
        return no_update, V.ok_box("this specification is already in the table")
    if len(specs) >= 8:
        return no_update, V.error_box("the memo table holds at most 8 specifications")
    regs = ", ".join(t for t in model.terms if t != INTERCEPT)
    label = f"{model.response} on {regs}" + (f" (h = {model.horizon})" if model.horizon else "")
    return specs + [{"key": fkey, "label": label}], ""


def memo_table(session, specs, est_values, show, level):
    import json
    fits = {}
    for i, s in enumerate(specs, start=1):
        model = stored(session, s.get("key"))
        if model is None:
            raise engine.SpecificationError(f"specification {i} ({s.get('label')}) is no longer "
                                            "in this session's memory: add it again")
        fits[f"[{i}] {s.get('label')}"] = model
    ests = {}
    for v in est_values or []:
        rec = json.loads(v)
        est = engine.estimator(rec["estimator"], **rec["params"])
        ests[est.label] = est
    if not fits or not ests:
        raise engine.SpecificationError("add a specification and choose at least one estimator")
    return engine.robustness_table(fits, ests, beneath=show, level=level)


@callback(Output("memo-preview", "children"), Input("memo-specs", "data"),
          Input("memo-ests", "value"), Input("memo-show", "value"), Input("level", "value"),
          State("session", "data"), message=0)
def on_memo_preview(specs, est_values, show, level, session):
    if not specs:
        return html.P("Add the current specification, then others, and choose estimators.",
                      className="lw-help")
    try:
        tab = memo_table(session, specs, est_values, show, level)
    except engine.LagwiseError as exc:
        return V.error_box(str(exc))
    grid = tab.grid()
    head = [html.Tr([html.Th(c) for c in row]) for row in grid[:3]]
    body = [html.Tr([html.Td(c) for c in row]) for row in grid[3:]]
    foot = [html.Li(n) for n in tab.foot()]
    return [html.Table([html.Thead(head), html.Tbody(body)], className="lw-memo-table"),
            html.Ul(foot, className="lw-notes")]


@callback(Output("download", "data", allow_duplicate=True),
          Input({"type": "export-memo", "fmt": ALL}, "n_clicks"), State("memo-specs", "data"),
          State("memo-ests", "value"), State("memo-show", "value"), State("level", "value"),
          State("session", "data"), prevent_initial_call=True)
def on_memo_export(clicks, specs, est_values, show, level, session):
    import base64
    import io
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        raise PreventUpdate
    try:
        tab = memo_table(session, specs or [], est_values, show, level)
    except engine.LagwiseError as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    fmt = trig.get("fmt")
    if fmt == "xlsx":
        buf = io.BytesIO()
        tab.to_excel(buf)
        return {"content": base64.b64encode(buf.getvalue()).decode(), "base64": True,
                "filename": "lagwise_memo_table.xlsx"}
    text = {"latex": tab.to_latex, "markdown": tab.to_markdown, "html": tab.to_html}[fmt]()
    ext = {"latex": "tex", "markdown": "md", "html": "html"}[fmt]
    return {"content": text, "filename": f"lagwise_memo_table.{ext}"}
