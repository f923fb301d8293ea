"""Thin callbacks: read inputs, call the engine, hand results to figures and tables.

Big objects (tables, fits, sweeps) stay in app.state.STORE under session-scoped keys; the
browser holds only those keys and the settings. A slider move only reweights the fit's cached
autocovariances (engine: fit.infer) and patches the marker on the sensitivity chart.
"""

from __future__ import annotations

import base64
import json
import threading
import warnings

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from dash import ALL, Input, Output, Patch, State, ctx, html, no_update

from .. import engine
from ..engine.compare import compare
from ..engine.model import index_label
from ..engine.export import load_settings, render, settings_json
from ..engine.sweep import default_bandwidths, significance_flip

from . import figures as F
from .layout import estimator_controls
from .state import MAX_UPLOAD_BYTES, STORE, content_hash, key_for, owned, spec_hash

SWEEP_KERNELS = list(engine.KERNELS)
AUTO_RULES = ("andrews", "newey-west", "rule-of-thumb")
_EXPORT_LOCK = threading.Lock()
_KALEIDO = {"started": False}


# --------------------------------------------------------------------------- helpers

def _error(text: str):
    return html.Div(text, className="lw-error", role="alert")


def _ok(text: str):
    return html.Div(text, className="lw-ok")


def get_table(session, key):
    return STORE.get(key) if owned(session, key) else None


def get_fit(session, key):
    return STORE.get(key) if owned(session, key) else None


def dataset_from_bytes(session: str, raw: bytes, name: str):
    table = engine.load_table(raw, name=name, max_bytes=MAX_UPLOAD_BYTES)
    key = key_for(session, "data", content_hash(raw))
    STORE.put(key, table)
    return key, table


def app_cache(fit) -> dict:
    return fit.__dict__.setdefault("_app", {})


def sweep_for(fit, top: int, prewhiten: bool = False):
    """The sensitivity sweep over every kernel, computed once per fit (and prewhitening)."""
    cache = app_cache(fit).setdefault("sweeps", {})
    key = (top, bool(prewhiten))
    if key not in cache:
        cache[key] = fit.sweep(kernels=SWEEP_KERNELS, bandwidths=default_bandwidths(
            fit.nobs, top), prewhiten=bool(prewhiten))
    return cache[key]


def comparison_for(fit, level, reference):
    cache = app_cache(fit).setdefault("compare", {})
    key = (level, reference)
    if key not in cache:
        cache[key] = compare(fit, level=level, reference=reference)
    return cache[key]


def auto_marks(fit, kernel: str):
    cache = app_cache(fit).setdefault("marks", {})
    if kernel not in cache:
        marks = []
        for rule in AUTO_RULES:
            try:
                marks.append((kernel, rule, engine.select_bandwidth(fit, kernel, rule).b))
            except engine.LagwiseError:
                continue
        cache[kernel] = marks
    return cache[kernel]


def slider_top(nobs: int) -> int:
    return int(min(nobs, 120))


def param_values(name: str, values, ids) -> dict:
    spec = engine.ESTIMATORS[name]
    kinds = {p.name: p for p in spec.params}
    out = {}
    for pid, v in zip(ids or [], values or []):
        p = kinds.get(pid["name"])
        if p is None or p.kind == "bandwidth":
            continue
        if p.kind == "bool":
            v = bool(v) and "on" in v
        elif p.kind == "int" and v == "auto":
            v = None
        out[p.name] = v
    return out


def make_estimator(name, values, ids, rule, slider):
    params = param_values(name, values, ids)
    spec = engine.ESTIMATORS[name]
    if spec.has_bandwidth:
        params["bandwidth"] = rule if rule and rule != "fixed" else float(slider or 1)
    return engine.estimator(name, **params)


def current_kernel(name, values, ids) -> str:
    params = param_values(name, values, ids) if name in engine.ESTIMATORS else {}
    return params.get("kernel", "bartlett")


def settings_record(state: dict) -> dict:
    return {k: state.get(k) for k in (
        "dataset", "transforms", "response", "regressors", "intercept", "horizon", "window",
        "estimator", "params", "rule", "bandwidth", "reference", "level", "focus",
        "chart_mode")}


# --------------------------------------------------------------------------- registration

def register(app):  # noqa: C901 - one place that wires every callback

    @app.callback(
        Output("dataset-key", "data"), Output("upload-message", "children"),
        Output("upload", "contents"),
        Input("upload", "contents"), Input("load-demo", "n_clicks"),
        State("upload", "filename"), State("session", "data"), prevent_initial_call=True)
    def on_upload(contents, _demo, filename, session):
        # the file's bytes are not kept in the browser once the server has them
        key, message = _on_upload(contents, filename, session)
        return key, message, None

    def _on_upload(contents, filename, session):
        if ctx.triggered_id == "load-demo":
            from .._files import demo_file
            path = demo_file()
            key, table = dataset_from_bytes(session, path.read_bytes(), path.name)
            return key, _ok(f"loaded the demo data ({len(table.frame)} rows, simulated)")
        if not contents:
            return no_update, no_update
        try:
            _, b64 = contents.split(",", 1)
            raw = base64.b64decode(b64, validate=False)
        except (ValueError, TypeError):
            return no_update, _error(f"{filename}: the upload could not be decoded")
        try:
            key, table = dataset_from_bytes(session, raw, filename or "upload")
        except engine.LagwiseError as exc:
            return no_update, _error(str(exc))
        return key, _ok(f"loaded {filename}: {len(table.frame)} rows, "
                        f"{len(table.frame.columns)} numeric columns")

    @app.callback(
        Output("load-report", "children"), Output("preview", "data"),
        Output("preview", "columns"), Output("col-summary", "data"),
        Output("col-summary", "columns"), Output("response", "options"),
        Output("regressors", "options"), Output("tf-column", "options"),
        Output("response", "value"), Output("regressors", "value"),
        Output("window", "max"), Output("window", "value"), Output("window", "marks"),
        Input("dataset-key", "data"), State("session", "data"), State("response", "value"),
        State("regressors", "value"), State("initial-spec", "data"))
    def on_dataset(key, session, response, regressors, initial):
        table = get_table(session, key)
        if table is None:
            return ([], [], [], [], [], [], [], [], None, [], 1, [0, 1], None)
        frame = table.frame
        cols = list(frame.columns)
        opts = [{"label": c, "value": c} for c in cols]
        preview = frame.head(8).reset_index()
        preview.columns = [str(c) for c in preview.columns]
        pdata = json.loads(preview.to_json(orient="records", date_format="iso", double_precision=6))
        summary = table.summary().reset_index(names="column")
        sdata = [{"column": r.column, "count": int(r["count"]), "missing": int(r.missing),
                  "mean": F.fmt(r["mean"]), "sd": F.fmt(r.sd)} for _, r in summary.iterrows()]
        if response not in cols or any(r not in cols for r in (regressors or [])):
            spec = initial or {}
            if spec.get("response") in cols:
                response = spec["response"]
                regressors = [r for r in spec.get("regressors", []) if r in cols]
            else:
                response = cols[0]
                regressors = cols[1:2]
        n = len(frame)
        marks = None
        return ([html.Li(line) for line in table.report.lines()], pdata,
                [{"name": c, "id": c} for c in preview.columns], sdata,
                [{"name": c, "id": c} for c in ("column", "count", "missing", "mean", "sd")],
                opts, opts, opts, response, regressors, n - 1, [0, n - 1], marks)

    @app.callback(
        Output("dataset-key", "data", allow_duplicate=True), Output("tf-message", "children"),
        Output("response", "value", allow_duplicate=True),
        Output("horizon", "value", allow_duplicate=True),
        Input("tf-add", "n_clicks"), State("tf-kind", "value"), State("tf-column", "value"),
        State("tf-p", "value"), State("dataset-key", "data"), State("session", "data"),
        prevent_initial_call=True)
    def on_transform(_n, kind, column, p, key, session):
        table = get_table(session, key)
        if table is None or not column:
            return no_update, _error("load data and choose a column first"), no_update, no_update
        try:
            new, name = table.with_transform(kind, column, int(p or 1))
        except (engine.LagwiseError, ValueError, TypeError) as exc:
            return no_update, _error(str(exc)), no_update, no_update
        new_key = key_for(session, "data", spec_hash([key, kind, column, p]))
        STORE.put(new_key, new)
        if kind == "fsum":
            return new_key, _ok(f"added {name}; used as the response (h = {int(p)})"), name, \
                int(p)
        return new_key, _ok(f"added {name}"), no_update, no_update

    @app.callback(
        Output("fit-key", "data"), Output("fit-message", "children"),
        Output("focus", "options"), Output("focus", "value"), Output("bw-slider", "max"),
        Output("window-text", "children"), Output("horizon", "value"),
        Input("dataset-key", "data"), Input("response", "value"), Input("regressors", "value"),
        Input("intercept", "value"), Input("horizon", "value"), Input("window", "value"),
        State("focus", "value"), State("session", "data"))
    def on_spec(key, response, regressors, intercept, horizon, window, focus, session):
        table = get_table(session, key)
        if table is None or not response:
            return None, "", [], None, no_update, "", no_update
        frame = table.frame
        sample = None
        text = ""
        if window and len(frame) > 1:
            i0, i1 = int(window[0]), int(min(window[1], len(frame) - 1))
            if i0 > 0 or i1 < len(frame) - 1:
                sample = (frame.index[i0], frame.index[i1])
            text = f"{index_label(frame.index[i0])} to {index_label(frame.index[i1])}"
        if horizon in (None, "") and ctx.triggered_id == "response":
            horizon = table.horizons.get(response)
        h = int(horizon) if horizon not in (None, "") else None
        try:
            fit = engine.fit_ols(table, response, regressors or [], intercept=bool(intercept),
                                 sample=sample, horizon=h)
        except engine.LagwiseError as exc:
            return None, _error(str(exc)), [], None, no_update, text, no_update
        fkey = key_for(session, "fit", spec_hash([key, response, regressors, bool(intercept),
                                                   sample, h]))
        STORE.put(fkey, fit)
        slopes = [t for t in fit.terms if t != engine.INTERCEPT] or fit.terms
        focus = focus if focus in fit.terms else slopes[0]
        msg = [f"T = {fit.nobs}, k = {fit.k}, R² = {fit.r_squared:.3f}"]
        if fit.horizon:
            msg.append(f"overlapping {fit.horizon}-period response: errors are MA("
                       f"{fit.horizon - 1}) by construction")
        msg += fit.sample.notes
        return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
                [{"label": t, "value": t} for t in fit.terms], focus,
                slider_top(fit.nobs), text, h if h is not None else None)

    @app.callback(Output("est-params", "children"), Input("est-name", "value"),
                  Input("pending-settings", "data"))
    def on_estimator_name(name, pending):
        values = (pending or {}).get("params") if pending and pending.get("estimator") == name \
            else None
        return estimator_controls(name, values)

    @app.callback(
        Output("coef-table", "data"), Output("coef-table", "columns"),
        Output("coef-caption", "children"), Output("coef-notes", "children"),
        Output("headline", "children"), Output("bw-text", "children"),
        Output("compare-table", "data"), Output("compare-table", "columns"),
        Output("compare-table", "tooltip_data"), Output("compare-table", "style_data_conditional"),
        Output("bw-rule", "value"), Output("bw-slider", "value"), Output("bw-slider", "disabled"),
        Input("fit-key", "data"), Input("est-name", "value"),
        Input({"type": "est-param", "name": ALL}, "value"), Input("bw-rule", "value"),
        Input("bw-slider", "value"), Input("reference", "value"), Input("level", "value"),
        Input("focus", "value"), State({"type": "est-param", "name": ALL}, "id"),
        State("session", "data"), prevent_initial_call=True)
    def on_inference(fkey, name, values, rule, slider, reference, level, focus, ids, session):
        """The hot path of a slider move, in one round trip. The bandwidth rule and the slider
        are kept in step here (a callback may output its own inputs): a rule places the
        slider where it landed; moving the slider switches the rule to a fixed b."""
        has_bw = engine.ESTIMATORS[name].has_bandwidth
        out_rule, out_slider = no_update, no_update
        if ctx.triggered_id == "bw-slider" and rule != "fixed":
            rule = out_rule = "fixed"
        fit = get_fit(session, fkey)
        if fit is None or focus not in getattr(fit, "terms", []):
            return ([], F.COEF_COLUMNS, "", [], "Load data and choose a model.", "", [],
                    F.COMPARE_COLUMNS, [], [], out_rule, out_slider, not has_bw)
        try:
            est = make_estimator(name, values, ids, rule, slider)
            res = fit.infer(est, level=level, reference=reference)
        except engine.LagwiseError as exc:
            msg = _error(str(exc))
            return ([], F.COEF_COLUMNS, msg, [], msg, "", no_update, F.COMPARE_COLUMNS,
                    no_update, no_update, out_rule, out_slider, not has_bw)
        if has_bw and rule != "fixed" and res.long_run.bandwidth is not None:
            landed = int(min(max(round(res.long_run.bandwidth), 1), slider_top(fit.nobs)))
            if landed != slider:
                out_slider = landed
        row = res.table.loc[focus]
        rejects = bool(row.p_value < 1 - level) if np.isfinite(row.p_value) else None
        lr = res.long_run
        bw_text = ""
        if lr.bandwidth is not None:
            bw_text = f"b = {lr.bandwidth:.4g} · {lr.lags} lags used · b/T = " \
                      f"{lr.bandwidth / fit.nobs:.3f}" + (f" · {lr.rule}" if lr.rule else "")
        elif lr.rule:
            bw_text = lr.rule
        # where the conclusion flips, from the cached sweep (cheap after the first call)
        flip_line = ""
        kern = est.params.get("kernel") if est.spec.has_bandwidth else None
        if kern:
            # the flip does not depend on the slider: computed once per setting, not per move
            pre = bool(est.params.get("prewhiten", False))
            ref = "fixed-b" if res.reference == "fixed-b" else "normal"
            flips = app_cache(fit).setdefault("flips", {})
            key = (pre, focus, kern, level, ref)
            if key not in flips:
                sw = sweep_for(fit, slider_top(fit.nobs), pre)
                flips[key] = significance_flip(fit, focus, kern, level, ref,
                                               sweep_result=sw).sentence()
            flip_line = flips[key]
        verdict = ("rejects β = 0" if rejects else "does not reject β = 0") \
            if rejects is not None else "no usable standard error"
        headline = [
            html.Div([html.Span(focus, className="lw-hl-term"),
                      html.Span(f"estimate {F.fmt(row.estimate)}", className="lw-hl-num"),
                      html.Span(f"std. error {F.fmt(row.std_error)}", className="lw-hl-num"),
                      html.Span(f"t {F.fmt(row.t_stat, 3)}", className="lw-hl-num"),
                      html.Span(f"p {F.fmt_p(row.p_value)}", className="lw-hl-num")],
                     className="lw-hl-row"),
            html.Div(f"At {1 - level:.0%}: {verdict} under {res.describe()}.",
                     className="lw-hl-verdict " + ("lw-yes" if rejects else "lw-no")),
            html.Div(flip_line, className="lw-hl-flip")]
        # the comparison only changes when its inputs or the current conclusion change
        shown = (session, focus, level, reference, rejects)
        if app_cache(fit).get("compare_shown") == shown:
            crecs = tooltips = shading = no_update
        else:
            comp = comparison_for(fit, level, reference)
            crecs = F.comparison_records(comp, focus, rejects)
            tooltips = [{"estimator": {"value": r["note"] or "", "type": "text"}}
                        for r in crecs]
            shading = F.differs_style(crecs)
            app_cache(fit)["compare_shown"] = shown
        return (F.coefficient_records(res), F.COEF_COLUMNS, res.describe(),
                [html.Li(n) for n in res.notes], headline, bw_text, crecs,
                F.COMPARE_COLUMNS, tooltips, shading, out_rule, out_slider, not has_bw)

    @app.callback(Output("sens-graph", "figure", allow_duplicate=True),
                  Input("bw-slider", "value"), prevent_initial_call=True)
    def on_marker(slider):
        """Move the current-bandwidth marker only (a partial update of the figure)."""
        patch = Patch()
        patch["layout"]["shapes"][0]["x0"] = slider
        patch["layout"]["shapes"][0]["x1"] = slider
        return patch

    @app.callback(
        Output("sens-graph", "figure"), Output("flip-text", "children"),
        Output("interval-graph", "figure"),
        Input("fit-key", "data"), Input("reference", "value"), Input("level", "value"),
        Input("focus", "value"), Input("chart-mode", "value"), Input("est-name", "value"),
        Input({"type": "est-param", "name": ALL}, "value"),
        State({"type": "est-param", "name": ALL}, "id"), State("bw-slider", "value"),
        State("session", "data"))
    def on_sensitivity(fkey, reference, level, focus, mode, name, values, ids, slider, session):
        fit = get_fit(session, fkey)
        if fit is None or focus not in getattr(fit, "terms", []):
            empty = F.empty_figure("Load data and choose a model to see the sensitivity chart.")
            return empty, "", F.empty_figure("")
        kern = current_kernel(name, values, ids)
        prewhiten = bool(param_values(name, values, ids).get("prewhiten")) \
            if name in engine.ESTIMATORS else False
        sw = sweep_for(fit, slider_top(fit.nobs), prewhiten)
        # the fixed-b tables assume no prewhitening
        ref = "fixed-b" if reference == "fixed-b" and not prewhiten else "normal"
        fig = F.sensitivity_figure(sw, focus, mode or "t", level, ref, slider, kern,
                                   auto_marks(fit, kern) if not prewhiten else [])
        if prewhiten:
            fig.update_layout(title_text=fig.layout.title.text + " (prewhitened scores)")
        flips = []
        for k in ("bartlett", "parzen", "quadratic_spectral"):
            flips.append(html.Li(significance_flip(fit, focus, k, level, ref,
                                                   sweep_result=sw).sentence()))
        comp = comparison_for(fit, level, reference)
        STORE.refresh_size(fkey)          # the fit now carries its caches: count them
        return fig, html.Ul(flips), F.interval_figure(comp, focus, level)

    @app.callback(
        Output("resid-graph", "figure"), Output("acf-graph", "figure"),
        Output("scatter-graph", "figure"), Output("score-graph", "figure"),
        Output("diag-table", "data"), Output("diag-table", "columns"),
        Output("diag-reading", "children"), Output("acf-bands", "children"),
        Input("fit-key", "data"), State("session", "data"))
    def on_diagnostics(fkey, session):
        fit = get_fit(session, fkey)
        if fit is None:
            e = F.empty_figure("")
            return e, e, e, e, [], F.DIAG_COLUMNS, "", ""
        cache = app_cache(fit)
        try:
            if "diag" not in cache:
                from ..engine.diagnostics import diagnose
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    cache["diag"] = diagnose(fit)
            rep = cache["diag"]
        except engine.LagwiseError as exc:
            e = F.empty_figure(str(exc))
            return e, e, e, e, [], F.DIAG_COLUMNS, _error(str(exc)), ""
        reading = html.Ul([html.Li(s) for s in rep.reading + rep.notes])
        return (F.residual_figure(fit), F.acf_figure(rep), F.fitted_scatter_figure(fit),
                F.score_acf_figure(rep), F.diagnostics_records(rep), F.DIAG_COLUMNS, reading,
                f"ACF: {rep.bands['acf']}.")

    GRAPHS = ["sens-graph", "interval-graph", "resid-graph", "acf-graph", "scatter-graph",
              "score-graph"]
    TABLES = ["coef-table", "compare-table", "diag-table"]

    @app.callback(
        Output("download", "data"),
        Input({"type": "export", "target": ALL, "fmt": ALL}, "n_clicks"),
        [State(g, "figure") for g in GRAPHS] + [State(t, "data") for t in TABLES]
        + [State("coef-caption", "children"), State("focus", "value")],
        prevent_initial_call=True)
    def on_export(clicks, *states):
        trig = ctx.triggered_id
        if not trig or not any(clicks):
            return no_update
        figs = dict(zip(GRAPHS, states[: len(GRAPHS)]))
        tables = dict(zip(TABLES, states[len(GRAPHS): len(GRAPHS) + len(TABLES)]))
        caption = states[-2] if isinstance(states[-2], str) else ""
        target, fmt = trig["target"], trig["fmt"]
        if target in figs:
            if not figs[target]:
                return no_update
            data = export_figure(go.Figure(figs[target]), fmt)
            return {"content": base64.b64encode(data).decode(), "base64": True,
                    "filename": f"lagwise_{target}.{fmt}"}
        frame = pd.DataFrame(tables.get(target) or [])
        frame = frame.drop(columns=[c for c in ("differs",) if c in frame.columns])
        text = render(frame, fmt, index=False, caption=caption if target == "coef-table" else "")
        ext = {"csv": "csv", "markdown": "md", "latex": "tex"}[fmt]
        return {"content": text, "filename": f"lagwise_{target}.{ext}"}

    @app.callback(
        Output("download", "data", allow_duplicate=True), Input("export-report", "n_clicks"),
        [State(g, "figure") for g in GRAPHS] + [State(t, "data") for t in TABLES]
        + [State("coef-caption", "children"), State("headline", "children"),
           State("diag-reading", "children")],
        State("session", "data"), State("fit-key", "data"),
        prevent_initial_call=True)
    def on_report(_n, *states):
        figs = [go.Figure(f) for f in states[: len(GRAPHS)] if f]
        tables = states[len(GRAPHS): len(GRAPHS) + len(TABLES)]
        caption = states[len(GRAPHS) + len(TABLES)]
        session, fkey = states[-2], states[-1]
        fit = get_fit(session, fkey)
        html_text = report_html(fit, figs, tables, caption if isinstance(caption, str) else "")
        return {"content": html_text, "filename": "lagwise_report.html"}

    @app.callback(
        Output("download", "data", allow_duplicate=True),
        Output("settings-message", "children"),
        Input("save-settings", "n_clicks"),
        State("dataset-key", "data"), State("response", "value"), State("regressors", "value"),
        State("intercept", "value"), State("horizon", "value"), State("window", "value"),
        State("est-name", "value"), State({"type": "est-param", "name": ALL}, "value"),
        State({"type": "est-param", "name": ALL}, "id"), State("bw-rule", "value"),
        State("bw-slider", "value"), State("reference", "value"), State("level", "value"),
        State("focus", "value"), State("chart-mode", "value"), State("session", "data"),
        prevent_initial_call=True)
    def on_save(_n, dkey, response, regressors, intercept, horizon, window, name, values, ids,
                rule, slider, reference, level, focus, mode, session):
        table = get_table(session, dkey)
        record = settings_record({
            "dataset": table.report.source if table is not None else None,
            "transforms": [], "response": response, "regressors": regressors,
            "intercept": bool(intercept), "horizon": horizon, "window": window,
            "estimator": name, "params": param_values(name, values, ids), "rule": rule,
            "bandwidth": slider, "reference": reference, "level": level, "focus": focus,
            "chart_mode": mode})
        if table is not None:
            record["transforms"] = [list(step) for step in table.transforms]
        return ({"content": settings_json(record), "filename": "lagwise_settings.json"},
                _ok("settings saved to lagwise_settings.json"))

    @app.callback(
        Output("settings-message", "children", allow_duplicate=True),
        Output("pending-settings", "data"),
        Output("response", "value", allow_duplicate=True),
        Output("regressors", "value", allow_duplicate=True),
        Output("intercept", "value"), Output("horizon", "value", allow_duplicate=True),
        Output("est-name", "value"), Output("bw-rule", "value", allow_duplicate=True),
        Output("bw-slider", "value", allow_duplicate=True), Output("reference", "value"),
        Output("level", "value"), Output("chart-mode", "value"),
        Output("dataset-key", "data", allow_duplicate=True),
        Input("load-settings", "contents"), Input("pending-settings", "data"),
        State("load-settings", "filename"), State("dataset-key", "data"),
        State("session", "data"), prevent_initial_call="initial_duplicate")
    def on_load_settings(contents, pending, filename, dkey, session):
        """Apply a settings record (uploaded, or given to `lagwise serve --settings`): replay
        its transforms on the current data, then set the model and inference controls."""
        nothing = (no_update,) * 12
        if ctx.triggered_id == "load-settings":
            if not contents:
                return (no_update,) * 13
            try:
                text = base64.b64decode(contents.split(",", 1)[1]).decode("utf-8")
                s = load_settings(text)
            except (engine.LagwiseError, ValueError, UnicodeDecodeError, IndexError) as exc:
                return (_error(f"{filename}: {exc}"),) + nothing
        elif pending:
            s = pending
        else:
            return (no_update,) * 13
        table = get_table(session, dkey)
        new_key = no_update
        msg = _ok(f"settings applied ({s.get('estimator')}, rule {s.get('rule')})")
        steps = [tuple(x) for x in s.get("transforms") or [] if len(x) == 3]
        if table is not None and steps:
            try:
                replayed = table.replay(steps)
            except (engine.LagwiseError, ValueError, TypeError) as exc:
                replayed = None
                msg = _error(f"the saved transforms do not apply to this data: {exc}")
            if replayed is not None and replayed is not table:
                new_key = key_for(session, "data", spec_hash([dkey, steps]))
                STORE.put(new_key, replayed)
                table = replayed
        cols = set(table.frame.columns) if table is not None else set()
        wanted = [s.get("response")] + list(s.get("regressors") or [])
        ok_cols = not cols or all(c in cols for c in wanted)
        if not ok_cols:
            missing = [c for c in wanted if c not in cols]
            msg = _error(f"settings refer to column(s) {', '.join(map(repr, missing))}, which "
                         "this data does not have; model settings left as they were")
        return (msg, s,
                s.get("response") if ok_cols else no_update,
                s.get("regressors") if ok_cols else no_update,
                ["on"] if s.get("intercept", True) else [], s.get("horizon"),
                s.get("estimator", "kernel"), s.get("rule", "fixed"),
                s.get("bandwidth", 13), s.get("reference", "auto"), s.get("level", 0.95),
                s.get("chart_mode", "t"), new_key)


def export_figure(fig: go.Figure, fmt: str) -> bytes:
    """Static export with kaleido and the system chromium, one export at a time (kaleido's
    shared server is not thread-safe)."""
    import plotly.io as pio
    fig.update_layout(width=1000, height=max(int(fig.layout.height or 450), 360))
    with _EXPORT_LOCK:
        if not _KALEIDO["started"]:
            import kaleido
            kaleido.start_sync_server(silence_warnings=True)
            _KALEIDO["started"] = True
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pio.to_image(fig, format=fmt, scale=2 if fmt == "png" else 1)


def report_html(fit, figs, tables, caption: str) -> str:
    import html as _h
    parts = ["<!doctype html><html><head><meta charset='utf-8'><title>Lagwise report</title>",
             "<style>body{font-family:Liberation Sans,Arial,sans-serif;color:#1d2733;"
             "max-width:1050px;margin:24px auto;padding:0 16px}table{border-collapse:collapse;"
             "font-size:13px;margin:8px 0 20px}td,th{padding:4px 8px;border-bottom:1px solid "
             "#e7e4dc;text-align:right}th{background:#f1efe8}h1{color:#0e6e64}"
             "td:first-child,th:first-child,td:last-child{text-align:left}"
             ".note{color:#6b7480;font-size:13px}</style></head><body>",
             "<h1>Lagwise report</h1>"]
    if fit is not None:
        parts.append(f"<p>{_h.escape(fit.response)} on {_h.escape(', '.join(fit.terms))}; "
                     f"T = {fit.nobs}, sample {fit.sample.first} to {fit.sample.last}.</p>")
    parts.append(f"<p><strong>Current choice:</strong> {_h.escape(caption)}</p>")
    names = ["Coefficients", "Every estimator, coefficient in focus", "Diagnostic tests"]
    for title, data in zip(names, tables):
        frame = pd.DataFrame(data or [])
        frame = frame.drop(columns=[c for c in ("differs",) if c in frame.columns])
        parts.append(f"<h2>{title}</h2>" + render(frame, "html", index=False))
    for i, fig in enumerate(figs):
        parts.append(fig.to_html(full_html=False, include_plotlyjs="inline" if i == 0 else False))
    parts.append("<p class='note'>Standard errors rest on large-sample approximations unless a "
                 "t, F or fixed-b reference law is stated; kernel results depend on the bandwidth "
                 "b shown. Generated by Lagwise.</p></body></html>")
    return "\n".join(parts)
