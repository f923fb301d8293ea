"""Downloads: charts (PNG, SVG, PDF through kaleido), tables (CSV, Markdown, LaTeX, built from the
engine's numbers, never from the formatted screen), the HTML report, and settings files."""

from __future__ import annotations

import base64
import threading
import warnings

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from dash import ALL, Input, Output, State, ctx, no_update

from .. import engine
from ..engine.io.provenance import chart_fields, provenance, stamp_chart
from ..engine.io.settings import (SETTINGS_VERSION, check_against_sample, load_settings,
                                  settings_json)
from ..engine.io.tables import FORMATS, render
from . import views as V
from ..engine.kinds import kind_of, model_line
from .report import build_report
from .derived import (comparison_for, diagnostics_for, is_gmm, make_estimator, param_values,
                      stored, strength_for, view_inference)
from .layout import CHART_FORMATS
from .state import STORE, key_for, spec_hash
from .wiring import callback

_EXPORT_LOCK = threading.Lock()
_KALEIDO = {"started": False}
GRAPHS = ["sens-graph", "interval-graph", "resid-graph", "acf-graph", "scatter-graph",
          "score-graph", "horizon-graph", "size-graph", "flip-graph"]
TABLES = ["coef-table", "compare-table", "diag-table", "spec-table", "persistence-table"]
VIEW_STATE = [State("session", "data"), State("fit-key", "data"), State("est-name", "value"),
              State({"type": "est-param", "name": ALL}, "value"),
              State({"type": "est-param", "name": ALL}, "id"), State("tune-rule", "value"),
              State("tune-slider", "value"), State("reference", "value"),
              State("level", "value"), State("focus", "value"), State("iv-method", "value")]


#: Width of exported charts (pixels; PNG at twice this) and characters per subtitle line.
EXPORT_WIDTH, SUBTITLE_CHARS = 1000, 150


def _wrap(text: str, width: int = SUBTITLE_CHARS) -> list[str]:
    """Lines of at most `width` characters, broken after "; " or ", " where possible."""
    out, line = [], ""
    for piece in text.replace("; ", ";\0").replace(", ", ",\0").split("\0"):
        if line and len(line) + 1 + len(piece) > width:
            out.append(line)
            line = piece
        else:
            line = f"{line} {piece}" if line else piece
    return out + ([line] if line else [])


def export_layout(fig: go.Figure, subtitle: str = "") -> go.Figure:
    """The figure as it is exported: a fixed width, its own height, and the model line as a
    subtitle under the title (the top margin grows by the subtitle's lines)."""
    height = max(int(fig.layout.height or 450), 360)
    fig.update_layout(width=EXPORT_WIDTH, height=height)
    if subtitle:
        lines = _wrap(subtitle)
        extra = 17 * len(lines) + 4
        top = int(fig.layout.margin.t if fig.layout.margin.t is not None else 48)
        title = fig.layout.title.text or ""
        fig.update_layout(height=height + extra, margin={"t": top + extra},
                          title={"text": title, "y": 1, "yref": "container", "yanchor": "top",
                                 "pad": {"t": 8},
                                 "subtitle": {"text": "<br>".join(lines),
                                              "font": {"size": 11, "color": "#6b7480"}}})
    return fig


def export_figure(fig: go.Figure, fmt: str, subtitle: str = "", stamp=None) -> bytes:
    """Static export with kaleido and the system chromium, one export at a time (kaleido's
    shared server is not thread-safe). subtitle: the model line; stamp: the provenance
    (engine.io.provenance), written into the file's own metadata (PNG text chunks, SVG
    metadata, the PDF's document information)."""
    import plotly.io as pio
    if fmt not in CHART_FORMATS:
        raise engine.SpecificationError(f"charts export as {', '.join(CHART_FORMATS)}")
    export_layout(fig, subtitle)
    data = _render(pio, fig, fmt)
    if stamp is None:
        return data
    fields = chart_fields(stamp, fig.layout.title.text or "", subtitle)
    return stamp_chart(data, fmt, fields)


def _render(pio, fig, fmt) -> bytes:
    with _EXPORT_LOCK:
        if not _KALEIDO["started"]:
            import kaleido
            kaleido.start_sync_server(silence_warnings=True)
            _KALEIDO["started"] = True
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pio.to_image(fig, format=fmt, scale=2 if fmt == "png" else 1)


def _line_and_stamp(session, fkey, name, values, ids, rule, slider, reference, level, method):
    """The model line of the view (the weighted fit's for GMM) and the provenance stamp."""
    model = stored(session, fkey)
    if model is None:
        return "", provenance(None)
    try:
        shown, _, base, _ = current_view(session, fkey, name, values, ids, rule, slider,
                                         reference, level, None, method)
    except engine.LagwiseError:
        shown = base = model
    return model_line(shown), provenance(base)


def current_view(session, fkey, name, values, ids, rule, slider, reference, level, focus,
                 method="2sls"):
    """(model shown, Inference, base fit, estimator) of what the screen shows; raises
    LagwiseError when there is none."""
    model = stored(session, fkey)
    if model is None:
        raise engine.SpecificationError("nothing to export yet: load data and choose a model")
    est = make_estimator(name, values, ids, rule, slider)
    shown, res = view_inference(session, fkey, model, method, est, level, reference)
    return shown, res, model, est


def conventions(res) -> str:
    """The line every exported table carries."""
    return (f"{res.level:.0%} confidence intervals; two-sided tests of beta = 0 at "
            f"{1 - res.level:.0%}; {res.describe()}")


def table_frame(target, session, fkey, model, res, focus, reference, base=None, est=None,
                method="2sls"):
    """(frame, caption, notes) for a table, from the engine's numbers."""
    if target == "coef-table":
        frame = res.table.reset_index()
        if res.law.per_coefficient:          # degrees of freedom per coefficient
            frame["df"] = [float(law.df) for law in res.term_laws()]
        return frame, f"{model.response}: {res.label}", [model_line(model), conventions(res)] \
            + res.notes
    if target == "compare-table":
        from .state import spec_hash
        comp = comparison_for(session, fkey, model, res.level, reference,
                              spec_hash(est.settings()) if is_gmm(base, method) else "")
        rows = comp[comp.term == focus].copy()
        rows["beta = 0"] = rows.rejects.map(V.verdict)
        frame = rows[["estimator", "estimate", "bandwidth", "lags", "std_error", "t_stat",
                      "p_value", "ci_low", "ci_high", "reference", "beta = 0", "note"]]
        return frame, f"{focus}: every estimator", \
            [model_line(model), f"{res.level:.0%} confidence intervals; two-sided tests at "
             f"{1 - res.level:.0%}; each row's reference law is stated in its row"]
    if target == "spec-table":
        if "instruments" not in kind_of(base).cards:
            raise engine.SpecificationError("the model has no instruments")
        fs, tests, ar = strength_for(session, fkey, base, method, est, res.level)
        rows = [{"test": n, "statistic": j.statistic, "df": j.df, "p_value": j.p_value,
                 "S": j.s_from} for n, j in tests]
        rows += [{"test": f"first stage F, {e}", "statistic": r.robust_f,
                  "df": r.instruments, "p_value": r.robust_p, "S": fs.estimator}
                 for e, r in fs.table.iterrows()]
        rows += [{"test": name, "statistic": item["value"], "df": None, "p_value": None,
                  "S": f"compare with {item['compare_with']:g}: {item['source']}"}
                 for name, item in fs.strength.items()]
        notes = [] if ar is None else [f"Anderson-Rubin {ar.level:.0%} set for {ar.term}: "
                                       f"{ar.text()}. {ar.reading}"]
        import pandas as pd
        return pd.DataFrame(rows), f"{base.response}: instrument strength and specification", \
            notes
    if target == "persistence-table":
        from ..engine.studies.predictive import persistence_report
        rep = persistence_report(base if base is not None else model,
                                 focus if focus != engine.INTERCEPT else None, level=res.level)
        rows = [{"quantity": r["quantity"], "value": r["value"], "detail": r["detail"]}
                for r in V.persistence_records(rep)]
        import pandas as pd
        return pd.DataFrame(rows), f"{model.response}: persistence of {rep.predictor}", \
            rep.reading + rep.notes
    rep = diagnostics_for(session, fkey, model)
    frame = rep.tests[["test", "statistic", "df", "df2", "p_value", "null", "method"]]
    return frame, f"{model.response}: residual diagnostics", \
        ["p-values under each test's null, as stated"] + rep.notes


@callback(Output("download", "data"),
          Input({"type": "export", "target": ALL, "fmt": ALL}, "n_clicks"),
          *[State(g, "figure") for g in GRAPHS], *VIEW_STATE, prevent_initial_call=True)
def on_export(clicks, *states):
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        return no_update
    figs = dict(zip(GRAPHS, states[: len(GRAPHS)]))
    session, fkey, name, values, ids, rule, slider, reference, level, focus, method = \
        states[len(GRAPHS):]
    target, fmt = trig.get("target"), trig.get("fmt")
    try:
        if target in figs:
            if not isinstance(figs[target], dict):
                return no_update
            line, stamp = _line_and_stamp(session, fkey, name, values, ids, rule, slider,
                                          reference, level, method)
            data = export_figure(go.Figure(figs[target]), fmt, subtitle=line, stamp=stamp)
            return {"content": base64.b64encode(data).decode(), "base64": True,
                    "filename": f"lagwise_{target}.{fmt}"}
        if target not in TABLES or fmt not in FORMATS:
            return no_update
        model, res, base, est = current_view(session, fkey, name, values, ids, rule, slider,
                                             reference, level, focus, method)
        frame, caption, notes = table_frame(target, session, fkey, model, res, focus, reference,
                                            base, est, method)
        text = render(frame, fmt, index=False, caption=caption, notes=notes,
                      stamp=provenance(base).lines(), level=res.level)
    except (engine.LagwiseError, ValueError) as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    ext = {"csv": "csv", "markdown": "md", "latex": "tex", "html": "html"}[fmt]
    return {"content": text, "filename": f"lagwise_{target}.{ext}"}


@callback(Output("download", "data", allow_duplicate=True), Input("export-report", "n_clicks"),
          *[State(g, "figure") for g in GRAPHS], *VIEW_STATE, State("size-data", "data"),
          prevent_initial_call=True)
def on_report(_n, *states):
    """The HTML report of this view (app.report): every card that was computed, opening with
    where it came from, the model and the answer."""
    figs = dict(zip(GRAPHS, states[: len(GRAPHS)]))
    session, fkey, name, values, ids, rule, slider, reference, level, focus, method, size = \
        states[len(GRAPHS):]
    try:
        model, res, base, est = current_view(session, fkey, name, values, ids, rule, slider,
                                             reference, level, focus, method)
        if focus not in model.terms:
            raise engine.SpecificationError("choose a coefficient in focus first")
        text = build_report(session, fkey, model, res, base, est, focus, level, reference,
                            method or "2sls", rule, figs, size, provenance(base))
    except engine.LagwiseError as exc:
        return {"content": f"report failed: {exc}\n", "filename": "lagwise_report_error.txt"}
    return {"content": text, "filename": "lagwise_report.html"}


# --------------------------------------------------------------------------- settings

@callback(Output("download", "data", allow_duplicate=True),
          Output("settings-message", "children"), Input("save-settings", "n_clicks"),
          State("dataset-key", "data"), State("response", "value"), State("regressors", "value"),
          State("intercept", "value"), State("horizon", "value"), State("window", "value"),
          State("chart-mode", "value"), State("endogenous", "value"),
          State("instruments", "value"), State("entity", "value"), State("time-col", "value"),
          State("effects", "value"), *VIEW_STATE, prevent_initial_call=True, message=1)
def on_save(_n, dkey, response, regressors, intercept, horizon, window, mode, endogenous,
            instruments, entity, time, effects, session, fkey, name, values, ids, rule, slider,
            reference, level, focus, method):
    table = stored(session, dkey)
    family = engine.FAMILIES.get(name)
    params = param_values(family, values, ids) if family else {}
    record = {"dataset": table.report.source if table is not None else None,
              "transforms": [list(step) for step in table.transforms] if table is not None
              else [], "response": response, "regressors": regressors,
              "intercept": bool(intercept), "horizon": horizon, "window": window,
              "estimator": name, "params": params, "rule": rule, "value": slider,
              "reference": reference, "level": level, "focus": focus, "chart_mode": mode,
              "endogenous": endogenous or [], "instruments": instruments or [],
              "method": method or "2sls", "entity": entity or None, "time": time or None,
              "effects": [e for e in (effects or []) if e in ("entity", "time")],
              "made_by": provenance(table).record()}
    return ({"content": settings_json(record), "filename": "lagwise_settings.json"},
            V.ok_box("settings saved to lagwise_settings.json"))


SETTINGS_OUTPUTS = [Output("settings-message", "children", allow_duplicate=True),
                    Output("pending-settings", "data"),
                    Output("response", "value", allow_duplicate=True),
                    Output("regressors", "value", allow_duplicate=True),
                    Output("intercept", "value"), Output("horizon", "value", allow_duplicate=True),
                    Output("est-name", "value"), Output("tune-rule", "value", allow_duplicate=True),
                    Output("tune-slider", "value", allow_duplicate=True),
                    Output("reference", "value"), Output("level", "value"),
                    Output("chart-mode", "value"),
                    Output("dataset-key", "data", allow_duplicate=True),
                    Output("endogenous", "value", allow_duplicate=True),
                    Output("instruments", "value", allow_duplicate=True),
                    Output("iv-method", "value"),
                    Output("entity", "value", allow_duplicate=True),
                    Output("time-col", "value", allow_duplicate=True),
                    Output("effects", "value")]


@callback(*SETTINGS_OUTPUTS, Input("load-settings", "contents"), Input("pending-settings", "data"),
          State("load-settings", "filename"), State("dataset-key", "data"),
          State("session", "data"), prevent_initial_call="initial_duplicate", message=0)
def on_load_settings(contents, pending, filename, dkey, session):
    """Apply a settings record (uploaded, or given to `lagwise serve --settings`): validated as
    a whole first (a bad file changes nothing), then its transforms are replayed on the current
    data and the model and inference controls set."""
    nothing = (no_update,) * len(SETTINGS_OUTPUTS)
    if ctx.triggered_id == "load-settings":
        if not contents:
            return nothing
        try:
            if not isinstance(contents, str) or "," not in contents:
                raise engine.DataError("the file could not be read")
            s = load_settings(base64.b64decode(contents.split(",", 1)[1]))
        except (engine.LagwiseError, ValueError) as exc:
            return (V.error_box(f"{filename}: {exc}; nothing was changed"),) + nothing[1:]
    elif isinstance(pending, dict) and pending:
        s = pending
    else:
        return nothing
    table = stored(session, dkey)
    if table is not None:
        try:
            check_against_sample(s, len(table.frame))
        except engine.LagwiseError as exc:
            return (V.error_box(f"{exc}; nothing was changed"),) + nothing[1:]
    new_key = no_update
    steps = [tuple(x) for x in s.get("transforms") or []]
    if table is not None and steps:
        try:
            replayed = table.replay(steps)
        except (engine.LagwiseError, ValueError, TypeError) as exc:
            return (V.error_box(f"the saved transforms do not apply to this data: {exc}; "
                                "nothing was changed"),) + nothing[1:]
        if replayed is not table:
            new_key = key_for("data", spec_hash([dkey, steps]))
            STORE.put(session, new_key, replayed)
            table = replayed
    cols = set(table.frame.columns) if table is not None else set()
    wanted = [c for c in [s.get("response")] + list(s.get("regressors") or [])
              + list(s.get("instruments") or []) if c]
    missing = [c for c in wanted if cols and c not in cols]
    if missing:
        return (V.error_box(f"settings refer to column(s) {', '.join(map(repr, missing))}, which "
                            "this data does not have; nothing was changed"),) + nothing[1:]
    msg = V.ok_box(f"settings applied ({engine.FAMILIES[s.get('estimator', 'kernel')].title})")
    return (msg, {**s, "lagwise_settings": SETTINGS_VERSION},
            s.get("response") or no_update, s.get("regressors", no_update),
            ["on"] if s.get("intercept", True) else [], s.get("horizon"),
            s.get("estimator", "kernel"), s.get("rule", "fixed"),
            s.get("value") if s.get("value") is not None else no_update,
            s.get("reference", "auto"), s.get("level", 0.95), s.get("chart_mode", "t"), new_key,
            s.get("endogenous", []), s.get("instruments", []), s.get("method", "2sls"),
            s.get("entity"), s.get("time"), s.get("effects", []))


# --------------------------------------------------------------------------- script

def _literal(value) -> str:
    """A Python literal for a setting (repr of plain values only; never user code)."""
    if isinstance(value, (bool, int, float, str, type(None))):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_literal(v) for v in value) + "]"
    if isinstance(value, np.generic):
        return repr(value.item())
    if isinstance(value, pd.Timestamp):
        return repr(value.date().isoformat() if value == value.normalize() else str(value))
    return repr(str(value))


def view_script(table, model, est, level, reference, method="2sls") -> str:
    """A short script using the public API that reproduces the current view."""
    from .._files import demo_dir
    source = table.report.source or "data.csv"
    bundled = (demo_dir() / source).is_file()
    stamp = provenance(table)
    lines = ['"""Reproduces a Lagwise view: the model, the estimator and its settings, the',
             'reference law and the level. Generated by the Lagwise dashboard."""', "",
             *[f"# {x}" for x in stamp.lines()], f"# model: {model_line(model)}", "",
             "import lagwise", ""]
    if bundled:
        lines.append(f"table = lagwise.load_table(lagwise.demo_file({source!r}))   "
                     "# simulated demo data")
    else:
        lines.append(f"table = lagwise.load_table({source!r})   # the file you loaded; "
                     "give its path")
    for kind, column, p in table.transforms:
        lines.append(f"table, _ = table.with_transform({kind!r}, {column!r}, {int(p)})")
    recipe = kind_of(model).recipe
    if recipe is None:
        raise engine.SpecificationError(f"a {kind_of(model).title} fit is not rebuilt from "
                                        "its data by a script")
    function, args = recipe(model)
    args = {k: v for k, v in args.items() if v is not None}
    call = f"fit = lagwise.{function}(table, "
    parts = [f"{k}={_literal(v)}" for k, v in args.items()]
    lines.append(call + ",\n    ".join(parts) + ")")
    params = ", ".join(f"{k}={_literal(v)}" for k, v in est.params.items())
    lines.append(f"est = lagwise.estimator({est.name!r}{', ' + params if params else ''})")
    if is_gmm(model, method):
        call = {"two-step": "fit.two_step(est)", "iterated": "fit.iterated(est)",
                "cue": "fit.cue(est)"}[method]
        lines.append(f"gmm = {call}          # the weighting follows the estimator")
        lines.append(f"res = gmm.infer_weighting(level={level!r}, reference={reference!r})")
    else:
        lines.append(f"res = fit.infer(est, level={level!r}, reference={reference!r})")
    lines += ["", "print(res.summary())", ""]
    return "\n".join(lines)


@callback(Output("download", "data", allow_duplicate=True), Input("export-script", "n_clicks"),
          State("dataset-key", "data"), *VIEW_STATE, prevent_initial_call=True)
def on_script(_n, dkey, session, fkey, name, values, ids, rule, slider, reference, level, focus,
              method):
    try:
        table = stored(session, dkey)
        model = stored(session, fkey)
        if table is None or model is None:
            raise engine.SpecificationError("nothing to export yet: load data and choose a model")
        est = make_estimator(name, values, ids, rule, slider)
        text = view_script(table, model, est, level, reference, method or "2sls")
    except engine.LagwiseError as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    return {"content": text, "filename": "lagwise_view.py"}
