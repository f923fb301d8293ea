"""The local-projection mode: callbacks that fit the projections, draw the impulse response
with its bands under the Sensitivity card's estimator (its slider moves every horizon's band:
each move reweights the horizons' cached autocovariances, no refit), the table by horizon,
where each horizon's conclusion changes along the bandwidth, every estimator's conclusion, and
the exports (charts, tables, the paper table, the script).

Big objects stay in the session's store (app.state); the page holds the key `lp-key`."""

from __future__ import annotations

import base64

import numpy as np
import plotly.graph_objects as go
from dash import ALL, Input, Output, State, ctx, html, no_update

from .. import engine
from .._files import demo_dir, demo_file
from ..engine.io.lp_tables import lp_script, paper_table
from ..engine.io.provenance import provenance
from ..engine.io.tables import FORMATS, render
from ..engine.models.lp_inference import (default_estimators, horizon_rule, irf_table,
                                          lag_augmented, pointwise_bands, runs_text,
                                          significant, stop_horizon)
from ..engine.models.lp_inference import PerHorizon
from . import views as V
from .derived import dataset_from_path, make_estimator, stored
from .exports import export_figure
from .figures import empty_figure
from .projection_figures import flip_map_figure, irf_figure
from .state import STORE, key_for, spec_hash
from .wiring import RUNNING, callback
from .work import WORK, tracked

#: The simulated demo for this mode and the projections it opens with.
LP_DEMO = "fuel_freight.csv"
LP_DEMO_SPEC = {"response": "freight_activity", "shock": "fuel_shock", "controls": [],
                "lags": 0, "horizons": 12, "level": 0.9}
#: Bounded work per session: the longest horizon and lag count the page fits.
MAX_HORIZONS, MAX_LAGS = 60, 24
#: Draws of the sup-t simulation on the page (Monte Carlo s.e. about 0.01 at 90%).
PAGE_SUP_T_REPS = 50_000

EST_STATE = [State({"type": "est-param", "name": ALL}, "id")]


def _whole(value, default):
    try:
        v = float(value)
    except (TypeError, ValueError):
        return default
    return int(v) if np.isfinite(v) and v == int(v) else default


# --------------------------------------------------------------------------- data and model

@callback(Output("dataset-key", "data", allow_duplicate=True),
          Output("upload-message", "children", allow_duplicate=True),
          Output("lp-on", "value"), Output("level", "value", allow_duplicate=True),
          Output("lp-lags", "value"), Output("lp-horizons", "value"),
          Input("load-demo-lp", "n_clicks"), State("session", "data"),
          prevent_initial_call=True, message=1, running=RUNNING)
def on_lp_demo(_n, session):
    """Load the simulated impulse-response demo and switch the mode on."""
    try:
        key, table = dataset_from_path(session, demo_file(LP_DEMO))
    except engine.LagwiseError as exc:
        return no_update, V.error_box(str(exc)), no_update, no_update, no_update, no_update
    return (key, V.ok_box(f"loaded the impulse-response demo ({len(table.frame)} months, "
                          "simulated)"), ["on"], LP_DEMO_SPEC["level"], LP_DEMO_SPEC["lags"],
            LP_DEMO_SPEC["horizons"])


@callback(Output("lp-shock", "options"), Output("lp-shock", "value"),
          Output("lp-controls", "options"), Output("lp-controls", "value"),
          Output("response", "value", allow_duplicate=True),
          Input("dataset-key", "data"), State("session", "data"), State("lp-shock", "value"),
          State("lp-controls", "value"), prevent_initial_call=True, message=None)
def on_lp_options(key, session, shock, controls):
    """The shock and controls come from the table's columns; the demo opens on its own."""
    table = stored(session, key)
    if table is None:
        return [], None, [], [], no_update
    cols = [str(c) for c in table.frame.columns]
    opts = [{"label": c, "value": c} for c in cols]
    controls = [c for c in (controls if isinstance(controls, list) else []) if c in cols]
    response = no_update
    if table.report.source == LP_DEMO:
        shock, controls = LP_DEMO_SPEC["shock"], list(LP_DEMO_SPEC["controls"])
        response = LP_DEMO_SPEC["response"]
    elif shock not in cols:
        shock = cols[1] if len(cols) > 1 else None
    return opts, shock, opts, controls, response


def _lp_spec(response, shock, controls, lags, horizons, cumulative):
    controls = [c for c in (controls if isinstance(controls, list) else []) if isinstance(c, str)]
    return {"response": response, "shock": shock, "controls": controls,
            "lags": _whole(lags, -1), "horizons": _whole(horizons, -1),
            "cumulative": isinstance(cumulative, list) and "on" in cumulative}


@callback(Output("lp-key", "data"), Output("lp-message", "children"),
          Output("lp-card", "style"), Output("lp-line", "children"),
          Input("dataset-key", "data"), Input("response", "value"), Input("lp-on", "value"),
          Input("lp-shock", "value"), Input("lp-controls", "value"), Input("lp-lags", "value"),
          Input("lp-horizons", "value"), Input("lp-cumulative", "value"),
          State("session", "data"), message=1, running=RUNNING)
def on_lp_fit(key, response, on, shock, controls, lags, horizons, cumulative, session):
    """Fit the projections (one least-squares fit per horizon) when the mode is on."""
    hidden = {"display": "none"}
    if not (isinstance(on, list) and "on" in on):
        return None, "", hidden, ""
    table = stored(session, key)
    if table is None:
        return None, V.error_box("load data first"), hidden, ""
    spec = _lp_spec(response, shock, controls, lags, horizons, cumulative)
    if not shock:
        return None, V.error_box("choose the shock"), hidden, ""
    if not 0 <= spec["lags"] <= MAX_LAGS:
        return None, V.error_box(f"lags must be a whole number from 0 to {MAX_LAGS}"), hidden, ""
    if not 0 <= spec["horizons"] <= MAX_HORIZONS:
        return None, V.error_box(f"horizons must be a whole number from 0 to {MAX_HORIZONS} "
                                 "here"), hidden, ""
    lkey = key_for("lp", spec_hash([key, spec]))
    lp = stored(session, lkey)
    if lp is None:
        try:
            with WORK.step(session, "Fitting the local projections"):
                lp = engine.fit_local_projections(table, **spec)
            STORE.put(session, lkey, lp)
        except (engine.LagwiseError, ValueError, TypeError) as exc:
            return None, V.error_box(str(exc)), hidden, ""
    lines = [lp.line] + lp.notes
    return lkey, V.ok_box(f"{lp.H + 1} horizons fitted"), {}, html.Div(
        [html.Div(x) for x in lines])


def lp_estimator(choice, name, values, ids, rule, slider):
    """The bands' estimator: the Sensitivity card's (each horizon's own fit), the horizon
    rule, or the lag-augmented regression."""
    if choice == "horizon-rule":
        return horizon_rule()
    if choice == "lag-augmented":
        return lag_augmented()
    return PerHorizon(make_estimator(name, values, ids, rule, slider))


def _interval(lo, hi) -> str:
    return f"[{V.fmt(lo)}, {V.fmt(hi)}]" if np.isfinite(lo) and np.isfinite(hi) else ""


def table_records(point, sup) -> list[dict]:
    sp, ss = significant(point), significant(sup)
    rows = []
    for i, h in enumerate(point.index):
        r = point.iloc[i]
        tuning = "" if not np.isfinite(r["df"]) else f"B = {r['df']:g}"
        if not tuning and np.isfinite(r["lags"]):
            tuning = f"{r['lags']:g}"
        verdict = "rejected" + (" (sup-t too)" if ss[i] else "") if sp[i] else "not rejected"
        row = {"horizon": int(h), "nobs": int(r["nobs"]), "tuning": tuning,
               "pointwise": _interval(r["ci_low"], r["ci_high"]),
               "simultaneous": _interval(sup["ci_low"].iloc[i], sup["ci_high"].iloc[i]),
               "verdict": verdict, "differs": bool(sp[i])}
        rows.append(_with_text(row, r))
    return rows


def _with_text(row: dict, r) -> dict:
    for name, digits in (("estimate", 4), ("std_error", 4), ("t_stat", 3)):
        value = float(r[name])
        row[name] = value if np.isfinite(value) else None
        row[name + "_txt"] = V.fmt(value, digits)
    return row


def reading(label, point, sup, level) -> list:
    sp, ss = significant(point), significant(sup)
    first, stop = stop_horizon(sp)
    pct = f"{level:.0%}"
    if first is None:
        head = f"Under {label}, no horizon's {pct} pointwise band excludes zero."
    else:
        head = (f"Under {label}, the {pct} pointwise band excludes zero at h = "
                f"{runs_text(sp, point.index)}; " + (
                    f"the response stops being significant at h = {stop}." if stop is not None
                    else "it stays significant through the last horizon."))
    st = sup.attrs["sup_t"]
    where = f"at h = {runs_text(ss, sup.index)}" if ss.any() else "at no horizon"
    tail = (f"The sup-t band (simultaneous over h = 0..{len(sp) - 1}, critical value "
            f"{st.value:.3f} against {st.pointwise:.3f} pointwise; {st.reps:,} draws, Monte "
            f"Carlo s.e. {st.mc_se:.3f}) excludes zero {where}.")
    return [html.Li(head), html.Li(tail)]


def _overlays(session, lkey, lp, level, reference):
    key = key_for(lkey, "lp-overlays", level, reference)

    def build():
        out = []
        for e in default_estimators(lp):
            try:
                out.append((e.short, lp.bands(e, level, "pointwise", reference)))
            except engine.LagwiseError:
                continue
        return out
    return STORE.derived(session, key, lambda: tracked(
        session, "Every estimator's band", lambda _p: build()))


VIEW_INPUTS = [Input("lp-key", "data"), Input("est-name", "value"),
               Input({"type": "est-param", "name": ALL}, "value"),
               Input("tune-rule", "value"), Input("slider-lp", "data"),
               Input("level", "value"), Input("reference", "value"),
               Input("lp-band-est", "value")]


@callback(Output("lp-graph", "figure"), Output("lp-table", "rowData"),
          Output("lp-reading", "children"), Output("lp-assumes", "children"),
          Output("lp-notes", "children"), *VIEW_INPUTS, Input("lp-show", "value"),
          *EST_STATE, State("session", "data"), State("tune-slider", "value"),
          prevent_initial_call=True, message=3)
def on_lp_view(lkey, name, values, rule, _press, level, reference, choice, show, ids, session,
               slider):
    """The hot path: every horizon's band under the current estimator (a slider move
    reweights each horizon's cached autocovariances), the sup-t band and the table."""
    lp = stored(session, lkey)
    if lp is None:
        return empty_figure(""), [], [], "", []
    show = show if isinstance(show, list) else []
    level = level if isinstance(level, float) else 0.9
    reference = reference if isinstance(reference, str) else "auto"
    try:
        est = lp_estimator(choice, name, values, ids, rule, slider)
        table = irf_table(lp, est, level, reference)       # one pass over the horizons
        point = pointwise_bands(lp, est, level, "pointwise", reference, table=table)
        sup = pointwise_bands(lp, est, level, "sup-t", reference, PAGE_SUP_T_REPS, table=table)
        shown_point, shown_sup, ylabel = point, sup, f"response of {lp.response}"
        if "cumulative" in show:
            cum = lp.cumulative_irf(est, level, reference)
            shown_point = cum
            shown_sup = None
            ylabel = f"cumulative response of {lp.response}"
        overlays = []
        if "overlay" in show and "cumulative" not in show:
            overlays = [(lab, b) for lab, b in _overlays(session, lkey, lp, level, reference)]
        title = f"{lp.response} after a unit {lp.shock} shock: {est.short}"
        fig = irf_figure(shown_point, title, shown_sup if "supt" in show else None, overlays,
                         ylabel)
    except engine.LagwiseError as exc:
        return empty_figure(str(exc)), [], [html.Li(V.error_box(str(exc)))], "", []
    texts = list(point.attrs.get("notes", []))
    texts += [n for n in sup.attrs.get("notes", []) if n not in texts]
    notes = [html.Li(n) for n in texts]
    notes += [html.Li(f"sup-t: {sup.attrs['how']}")]
    if "cumulative" in show:
        notes.append(html.Li(f"cumulative response: the sum of the responses at h = 0..h with "
                             f"its standard error from the joint covariance "
                             f"({cum.attrs['how']}); pointwise band shown"))
    STORE.refresh(session, lkey)
    return (fig, table_records(point, sup), reading(est.label, point, sup, level),
            est.assumes, notes)


@callback(Output("lp-flip-graph", "figure"), Output("lp-compare", "rowData"),
          Output("lp-flip-notes", "children"), *VIEW_INPUTS, *EST_STATE,
          State("session", "data"), State("tune-slider", "value"), prevent_initial_call=True,
          message=2)
def on_lp_flips(lkey, name, values, rule, _press, level, reference, choice, ids, session,
                slider):
    """Where each horizon's conclusion changes along b (the current kernel), and where the
    response stops being significant under every estimator."""
    lp = stored(session, lkey)
    if lp is None:
        return empty_figure(""), [], []
    level = level if isinstance(level, float) else 0.9
    reference = reference if isinstance(reference, str) else "auto"
    try:
        est = make_estimator(name, values, ids, rule, slider)
        kernel = est.params.get("kernel") if isinstance(est.params.get("kernel"), str) \
            else None
        kernel = kernel or next(iter(engine.KERNELS))
        top = int(max(8, min(60, lp.nobs[-1] // 3)))
        grid = np.arange(1.0, top + 1.0)
        sw = STORE.derived(session, key_for(lkey, "lp-sweep", kernel, top), lambda: tracked(
            session, "Every horizon along the bandwidth",
            lambda _p: lp.sweep([kernel], grid)))
        rej, valid = sw.rejects(level)
        current = float(slider) if isinstance(slider, (int, float)) else 1.0
        fig = flip_map_figure(rej[0].T, valid[0].T, grid, current,
                              f"{sw.labels[0]}: where beta_h = 0 is rejected at "
                              f"{1 - level:.0%} (normal critical values)")
        ests = [lp_estimator(choice, name, values, ids, rule, slider)]
        ests += [e for e in default_estimators(lp) if e != ests[0]]
        rows = _compare_rows(session, lkey, lp, ests, level, reference)
        table = sw.flip_table(level)
        changing = [f"h = {h}: {w}" for h, w in zip(table.index, table.iloc[:, 0])
                    if w not in ("every b", "no b")]
        notes = [html.Li(f"{sw.labels[0]}, b = 1..{top}: the conclusion changes along b at " +
                         ("; ".join(changing) if changing else "no horizon")
                         + " (where the response is significant)")]
    except engine.LagwiseError as exc:
        return empty_figure(str(exc)), [], [html.Li(str(exc))]
    return fig, rows, notes


def _compare_rows(session, lkey, lp, ests, level, reference) -> list[dict]:
    def one(e):
        key = key_for(lkey, "lp-sig", spec_hash(e.settings()), level, reference)

        def build():
            table = irf_table(lp, e, level, reference)
            p = pointwise_bands(lp, e, level, "pointwise", reference, table=table)
            s = pointwise_bands(lp, e, level, "sup-t", reference, PAGE_SUP_T_REPS, table=table)
            sp, ss = significant(p), significant(s)
            _, stop = stop_horizon(sp)
            return {"estimator": e.short, "assumes": f"{e.label}: {e.assumes}",
                    "significant_at": runs_text(sp, p.index),
                    "stops_at": "" if stop is None else str(stop),
                    "simultaneous": runs_text(ss, s.index)}
        return STORE.derived(session, key, build)
    rows = []
    for i, e in enumerate(ests):
        try:
            row = dict(one(e))
        except engine.LagwiseError as exc:
            row = {"estimator": e.short, "assumes": str(exc), "significant_at": "not available",
                   "stops_at": "", "simultaneous": ""}
        if i == 0:
            row["estimator"] += " (the chart's)"
        rows.append(row)
    return rows


# --------------------------------------------------------------------------- exports

@callback(Output("download", "data", allow_duplicate=True),
          Input({"type": "export-lp", "target": ALL, "fmt": ALL}, "n_clicks"),
          State("lp-graph", "figure"), State("lp-flip-graph", "figure"),
          State("lp-key", "data"), State("dataset-key", "data"), State("est-name", "value"),
          State({"type": "est-param", "name": ALL}, "value"), *EST_STATE,
          State("tune-rule", "value"), State("tune-slider", "value"), State("level", "value"),
          State("reference", "value"), State("lp-band-est", "value"),
          State("session", "data"), prevent_initial_call=True)
def on_lp_export(clicks, graph, flip_graph, lkey, dkey, name, values, ids, rule, slider, level,
                 reference, choice, session):
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        return no_update
    target, fmt = trig.get("target"), trig.get("fmt")
    try:
        figs = {"lp-graph": graph, "lp-flip-graph": flip_graph}
        lp = stored(session, lkey)
        if lp is None:
            raise engine.SpecificationError("nothing to export yet: switch the local-projection "
                                            "mode on")
        stamp = provenance(lp.table)
        if target in figs:
            if not isinstance(figs[target], dict):
                return no_update
            data = export_figure(go.Figure(figs[target]), fmt, subtitle=lp.line, stamp=stamp)
            return {"content": base64.b64encode(data).decode(), "base64": True,
                    "filename": f"lagwise_{target}.{fmt}"}
        level = level if isinstance(level, float) else 0.9
        reference = reference if isinstance(reference, str) else "auto"
        est = lp_estimator(choice, name, values, ids, rule, slider)
        if target == "lp-script":
            table = stored(session, dkey)
            if table is None:
                raise engine.SpecificationError("the data of this view is not loaded any more")
            source = table.report.source or "data.csv"
            text = lp_script(source, (demo_dir() / source).is_file(), table.transforms, lp,
                             est, level, reference, stamp=provenance(table).lines())
            return {"content": text, "filename": "lagwise_impulse_response.py"}
        if fmt not in FORMATS:
            return no_update
        frame, caption, notes = lp_table_frame(target, lp, est, level, reference)
        text = render(frame, fmt, index=False, caption=caption, notes=[lp.line, *notes],
                      stamp=stamp.lines(), level=level)
    except (engine.LagwiseError, ValueError) as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    ext = {"csv": "csv", "markdown": "md", "latex": "tex", "html": "html"}[fmt]
    return {"content": text, "filename": f"lagwise_{target}.{ext}"}


def lp_table_frame(target, lp, est, level, reference):
    """(frame, caption, notes) of an exported table, from the engine's numbers."""
    if target == "lp-paper":
        ests = [est] + [e for e in default_estimators(lp) if e != est]
        return paper_table(lp, ests, level, reference)
    if target == "lp-compare":
        ests = [est] + [e for e in default_estimators(lp) if e != est]
        frame = lp.significance(ests, level, "pointwise", reference)
        sup = lp.significance(ests, level, "sup-t", reference)
        frame["sup_t_significant_at"] = sup["significant_at"].to_numpy()
        return frame, f"{lp.response} on {lp.shock}: where the response is significant", \
            [f"{level:.0%} bands; {lp.line}"]
    point = lp.bands(est, level, "pointwise", reference)
    sup = lp.bands(est, level, "sup-t", reference)
    frame = point.reset_index()[["horizon", "nobs", "estimate", "std_error", "critical_value",
                                 "ci_low", "ci_high"]]
    frame["sup_t_low"] = sup["ci_low"].to_numpy()
    frame["sup_t_high"] = sup["ci_high"].to_numpy()
    st = sup.attrs["sup_t"]
    return frame, f"{lp.response} after a unit {lp.shock} shock: {est.label}", [
        f"{level:.0%} pointwise and sup-t bands; sup-t critical value {st.value:.4f} "
        f"({st.reps:,} draws, seed {st.seed}, Monte Carlo s.e. {st.mc_se:.4f}); {sup.attrs['how']}",
        est.assumes, lp.line]
