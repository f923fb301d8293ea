"""The few-cluster card: the cluster summary in plain words, CR1/CR2/CR3 with their degrees of
freedom side by side for the coefficient in focus, and the wild cluster bootstrap computed on
request (a background job with progress and cancel: Dash background callbacks with the disk-cache
manager of app.studies; the job reads a prepared setup from the job cache, never the session
store). The bootstrap's result joins the estimator comparison as a row. Also: the few-cluster
demo and the groupings the app's fits offer."""

from __future__ import annotations

import pickle
import secrets

import numpy as np
import pandas as pd
from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from .. import engine
from .._files import demo_file
from ..engine.covariance.cluster import CORRECTION_TITLES, DF_TITLES
from ..engine.studies.wild_bootstrap import WildBootstrapResult, prepare_bootstrap
from . import views as V
from .derived import dataset_from_path, stored
from .state import STORE, key_for
from .studies import job_cache
from .wiring import RUNNING, callback
from .work import tracked

#: Replications the dashboard runs at most per bootstrap (the per-session bound of the work).
MAX_BOOT_REPS = 99_999
#: A text column is offered as a grouping when it has at most this many distinct labels.
MAX_GROUPS = 5000
FEW_DEMO = "regional_panel.csv"
FEW_DEMO_SPEC = {"response": "growth", "regressors": ["subsidy", "size"]}
FEW_DEMO_PANEL = {"entity": "firm", "time": "year"}
#: The settings of the card's table: (correction, df rule)
SETTINGS = [(c, d) for c in ("cr1", "cr2", "cr3")
            for d in ("clusters", "bell-mccaffrey", "imbens-kolesar")]


def grouping_columns(table, exclude=()) -> list[str]:
    """The text columns of a table that can group a fit's rows: no missing labels, at least two
    and at most MAX_GROUPS distinct labels (and fewer than half the rows)."""
    labels = table.labels if table is not None else None
    if labels is None:
        return []
    out = []
    for col in labels.columns:
        s = labels[col]
        if col in exclude or s.isna().any():
            continue
        n = s.nunique()
        if 2 <= n <= min(MAX_GROUPS, len(s) // 2):
            out.append(str(col))
    return out


def _offered(model) -> list:
    caps = model.capabilities if model is not None else None
    if caps is None or not caps.clusters:
        return []
    out = list(caps.clusters)
    if "entity" in out and "time" in out:
        out.insert(2, "both")
    return out


# --------------------------------------------------------------------------- the demo

@callback(Output("dataset-key", "data", allow_duplicate=True),
          Output("upload-message", "children", allow_duplicate=True),
          Output("initial-spec", "data", allow_duplicate=True),
          Output("pending-settings", "data", allow_duplicate=True),
          Input("load-demo-few", "n_clicks"), State("session", "data"),
          prevent_initial_call=True, message=1, running=RUNNING)
def on_few_demo(n, session):
    """The few-cluster demo: a simulated panel of firms in 14 regions of very unequal size."""
    if not n:
        raise PreventUpdate
    try:
        key, table = dataset_from_path(session, demo_file(FEW_DEMO))
    except engine.LagwiseError as exc:
        return no_update, V.error_box(str(exc)), no_update, no_update
    return key, V.ok_box(f"loaded the few-cluster demo ({len(table.frame)} rows, simulated): "
                         "firms in 14 regions; see the few-cluster card, clustered by "
                         "region"), dict(FEW_DEMO_SPEC), dict(FEW_DEMO_PANEL)


# --------------------------------------------------------------------------- the picker

@callback(Output({"type": "est-param", "name": "by"}, "options"),
          Output({"type": "est-param", "name": "by"}, "value"),
          Input("est-params", "children"), Input("fit-key", "data"),
          State({"type": "est-param", "name": "by"}, "value"), State("session", "data"),
          prevent_initial_call=True)
def on_grouping_options(_children, fkey, by, session):
    """The estimator picker's `cluster by` offers the groupings of the fit on screen (a
    column named in a fit's `clusters=`, a panel's entities and periods)."""
    offered = _offered(stored(session, fkey))
    if not offered:
        raise PreventUpdate
    named = [g for g in offered if g not in ("entity", "time", "both")]
    return [{"label": g, "value": g} for g in offered], \
        by if by in offered else (named or offered)[0]


# --------------------------------------------------------------------------- the card

@callback(Output("fc-card", "style"), Output("fc-by", "options"), Output("fc-by", "value"),
          Input("fit-key", "data"), State("fc-by", "value"), State("session", "data"))
def on_fc_options(fkey, by, session):
    """The card shows for fits that offer groupings; a named grouping comes first."""
    offered = _offered(stored(session, fkey))
    if not offered:
        return {"display": "none"}, [], None
    named = [g for g in offered if g not in ("entity", "time", "both")]
    value = by if by in offered else (named or offered)[0]
    return {}, [{"label": g, "value": g} for g in offered], value


@callback(Output("fc-reading", "children"), Output("fc-facts", "children"),
          Output("fc-table", "rowData"), Output("fc-notes", "children"),
          Input("fit-key", "data"), Input("fc-by", "value"), Input("focus", "value"),
          Input("level", "value"), State("session", "data"), message=0, running=RUNNING)
def on_fc_view(fkey, by, focus, level, session):
    model = stored(session, fkey)
    if model is None or by not in _offered(model) or focus not in model.terms:
        return [], "", [], []
    key = key_for(fkey, "few-clusters", by, focus, level)
    view = STORE.derived(session, key, lambda: tracked(
        session, f"Few clusters by {by}", lambda p: few_cluster_view(model, by, focus, level, p)))
    return ([html.Li(s) for s in view["reading"]], view["facts"], view["rows"],
            [html.Li(n) for n in view["notes"]])


def few_cluster_view(model, by, focus, level, progress=None) -> dict:
    """The card's numbers for one grouping and coefficient (engine results only)."""
    step = progress or (lambda done, total, what: None)
    notes, reading, facts = [], [], ""
    if by != "both":
        try:
            step(0, 2, "cluster summary")
            s = engine.cluster_summary(model, by)
            reading = list(s.reading)
            r = s.coefficients.loc[focus]
            gstar = "undefined" if not np.isfinite(r.effective_clusters) else \
                f"{r.effective_clusters:.3g}"
            facts = (f"{s.n_clusters} clusters; sizes {s.sizes['min']} to {s.sizes['max']} "
                     f"(median {s.sizes['median']:g}); effective clusters for {focus}: {gstar}; "
                     f"largest leverage {s.leverage_max:.3g} ({s.leverage_max_cluster}) against "
                     f"k/G = {s.leverage_mean:.3g}")
            if r.most_influential is not None and np.isfinite(r.largest_change):
                facts += (f"; leaving out {r.most_influential} moves {focus} by "
                          f"{r.largest_change:.3g}")
            notes += s.notes
        except engine.LagwiseError as exc:
            notes.append(f"cluster summary not available: {exc}")
    step(1, 2, "CR1, CR2, CR3")
    rows = [_row(model, by, c, d, focus, level) for c, d in SETTINGS]
    return {"reading": reading, "facts": facts, "rows": rows, "notes": notes}


def _row(model, by, correction, rule, focus, level) -> dict:
    label = f"{CORRECTION_TITLES[correction]}, {DF_TITLES[rule]}"
    try:
        res = model.infer(engine.estimator("cluster", by=by, correction=correction, df=rule),
                          level=level)
    except engine.LagwiseError as exc:
        return V.with_text({"estimator": label, "interval": "", "verdict": "not available",
                             "note": str(exc)},
                            {k: (None, "") for k in ("std_error", "t_stat", "df", "p_value")})
    r = res.table.loc[focus]
    law = res.term_laws()[list(res.table.index).index(focus)]
    ok = bool(np.isfinite(r.p_value))
    return V.with_text(
        {"estimator": label, "interval": f"[{V.fmt(r.ci_low)}, {V.fmt(r.ci_high)}]",
         "verdict": V.verdict(bool(r.p_value < 1 - level)) if ok else "not available",
         "note": "; ".join(res.notes[len(model.sample.notes):])},
        {"std_error": (r.std_error, V.fmt(r.std_error)), "t_stat": (r.t_stat, V.fmt(r.t_stat, 3)),
         "df": (law.df, V.fmt(law.df, 4)), "p_value": (r.p_value, V.fmt_p(r.p_value))})


# --------------------------------------------------------------------------- the bootstrap

@callback(Output("fc-boot-job", "data"), Output("fc-boot-status", "children"),
          Input("fc-boot-run", "n_clicks"), State("fit-key", "data"), State("focus", "value"),
          State("fc-by", "value"), State("fc-reps", "value"), State("fc-weights", "value"),
          State("fc-null", "value"), State("level", "value"), State("session", "data"),
          prevent_initial_call=True, message=1)
def on_fc_boot_request(n, fkey, focus, by, reps, weights, null, level, session):
    """Check the request and prepare the setup here (typed errors shown at once); the
    replications run in a background job."""
    model = stored(session, fkey)
    if not n or model is None:
        raise PreventUpdate
    if not isinstance(reps, int) or reps > MAX_BOOT_REPS:
        return no_update, V.error_box(f"choose at most {MAX_BOOT_REPS:,} replications")
    cache = job_cache()
    if cache is None:
        return no_update, V.error_box("background jobs are not available in this server")
    try:
        job = prepare_bootstrap(model, focus, by=by, reps=reps, weights=weights,
                                null=0.0 if null in (None, "") else null, level=level)
    except engine.LagwiseError as exc:
        return no_update, V.error_box(str(exc))
    token = secrets.token_urlsafe(16)
    cache.set(f"fc-input-{token}", pickle.dumps({"job": job, "fkey": fkey}), expire=3600)
    return token, html.Div(f"running {reps:,} replications...", className="lw-help")


@callback(Output("fc-boot-result", "children"), Output("fc-boot-data", "data"),
          Output("fc-boot-status", "children", allow_duplicate=True),
          Input("fc-boot-job", "data"), background=True,
          running=[(Output("fc-boot-run", "disabled"), True, False),
                   (Output("fc-boot-cancel", "disabled"), False, True)],
          cancel=[Input("fc-boot-cancel", "n_clicks"), Input("fit-key", "data")],
          progress=[Output("fc-boot-progress", "value"), Output("fc-boot-progress", "max"),
                    Output("fc-boot-progress-text", "children")],
          prevent_initial_call=True, message=2)
def on_fc_boot_job(set_progress, token):
    if not isinstance(token, str):
        raise PreventUpdate
    cache = job_cache()
    raw = cache.pop(f"fc-input-{token}") if cache is not None else None
    if raw is None:
        return no_update, no_update, V.error_box("the bootstrap's input expired; run it again")
    request = pickle.loads(raw)          # written by this server for this job only

    def progress(done, total):
        set_progress((str(done), str(total), f"{done:,} of {total:,} replications"))
    try:
        res = request["job"].run(progress)
    except engine.LagwiseError as exc:
        return no_update, no_update, V.error_box(str(exc))
    data = {**res.to_dict(), "fkey": request["fkey"]}
    for side in ("ci_low", "ci_high"):          # JSON has no infinity: an open side is None
        if data[side] is not None and not np.isfinite(data[side]):
            data[side] = None
    return boot_text(data), data, ""


def boot_text(d: dict):
    pct = f"{d['level']:.0%}"
    how = (f"all 2^{d['n_clusters']} = {d['reps']:,} sign vectors (exact)" if d["enumerated"]
           else f"{d['reps']:,} replications, {d['weights']} weights, seed {d['seed']}")
    ci = ("not bounded on at least one side" if d["ci_low"] is None or d["ci_high"] is None
          else f"[{d['ci_low']:.4g}, {d['ci_high']:.4g}]")
    return [html.P(f"{d['coefficient']} = {d['null']:g}: bootstrap p = {V.fmt_p(d['p_value'])} "
                   f"({d['p_kind']}); {pct} interval by test inversion {ci}; t = "
                   f"{d['t_stat']:.3f} (CR1)", className="lw-ar-set"),
            html.P(f"{d['method']} bootstrap clustered by {d['by']}"
                   + (f", weights by {d['boot_by']}" if d['boot_by'] != d['by'] else "")
                   + f", {d['n_clusters']} bootstrap clusters; {how}.", className="lw-help")] + \
        [html.P(n, className="lw-help") for n in d["notes"]]


@callback(Output("compare-table", "rowData", allow_duplicate=True),
          Input("fc-boot-data", "data"), State("compare-table", "rowData"),
          State("fit-key", "data"), State("focus", "value"), State("session", "data"),
          prevent_initial_call=True)
def on_fc_boot_done(data, rows, fkey, focus, session):
    """Keep the result for this fit and show it as a row of the comparison."""
    if not isinstance(data, dict) or data.get("fkey") != fkey:
        raise PreventUpdate
    STORE.put(session, key_for(fkey, "bootstrap", data["coefficient"]), data)
    if data["coefficient"] != focus:
        raise PreventUpdate
    rows = [r for r in (rows or []) if isinstance(r, dict) and not r.get("bootstrap")]
    return rows + [bootstrap_row(data)]


def bootstrap_rows(session, fkey, focus) -> list[dict]:
    """The comparison row of this fit's last bootstrap of the coefficient, if any."""
    data = stored(session, key_for(fkey, "bootstrap", focus))
    return [bootstrap_row(data)] if isinstance(data, dict) else []


def bootstrap_row(d: dict) -> dict:
    label = (f"Wild cluster bootstrap ({d['method']}, by {d['by']}, {d['weights']}, "
             f"{d['reps']:,} reps{', exact' if d['enumerated'] else ''})")
    ci = "" if d["ci_low"] is None or d["ci_high"] is None else \
        f"{d['level']:.0%} interval by inversion [{V.fmt(d['ci_low'])}, {V.fmt(d['ci_high'])}]"
    note = "; ".join(x for x in [f"p for {d['coefficient']} = {d['null']:g}", ci, *d["notes"]]
                     if x)
    return V.with_text({"estimator": label, "verdict": V.verdict(d["p_value"] < 1 - d["level"]),
                         "law": "bootstrap", "note": note, "differs": False, "bootstrap": True},
                        {"estimate": (d["estimate"], V.fmt(d["estimate"])),
                         "bandwidth": (None, ""), "lags": (None, ""),
                         "std_error": (d["std_error"], V.fmt(d["std_error"])),
                         "t_stat": (d["t_stat"], V.fmt(d["t_stat"], 3)),
                         "p_value": (d["p_value"], V.fmt_p(d["p_value"]))})


# --------------------------------------------------------------------------- export

@callback(Output("download", "data", allow_duplicate=True),
          Input({"type": "export-fc", "fmt": ALL}, "n_clicks"), State("fit-key", "data"),
          State("fc-by", "value"), State("focus", "value"), State("level", "value"),
          State("fc-boot-data", "data"), State("session", "data"), prevent_initial_call=True)
def on_fc_export(clicks, fkey, by, focus, level, boot, session):
    from ..engine.io.provenance import provenance
    from ..engine.io.tables import render
    from ..engine.kinds import model_line
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        raise PreventUpdate
    model = stored(session, fkey)
    if model is None or by not in _offered(model):
        return {"content": "export failed: choose a model that offers clusters\n",
                "filename": "lagwise_export_error.txt"}
    view = STORE.derived(session, key_for(fkey, "few-clusters", by, focus, level),
                         lambda: few_cluster_view(model, by, focus, level))
    frame = pd.DataFrame([{"estimator": r["estimator"], "std_error": r["std_error"],
                           "t_stat": r["t_stat"], "df": r["df"], "p_value": r["p_value"],
                           "interval": r["interval"], "beta = 0": r["verdict"],
                           "note": r.get("note", "")} for r in view["rows"]])
    notes = view["reading"] + ([view["facts"]] if view["facts"] else [])
    if isinstance(boot, dict) and boot.get("fkey") == fkey:
        notes.append(WildBootstrapResult(**{k: boot[k] for k in (
            "coefficient", "by", "boot_by", "method", "estimate", "std_error", "t_stat", "null",
            "p_value", "p_kind", "level", "reps", "enumerated", "weights", "seed",
            "n_clusters")}, ci=None if boot["ci_low"] is None or boot["ci_high"] is None else
            (boot["ci_low"], boot["ci_high"])).summary())
    fmt = trig.get("fmt")
    text = render(frame, fmt, index=False, caption=f"{focus}: clustered by {by}, CR1/CR2/CR3 "
                  f"with their degrees of freedom ({level:.0%} intervals)",
                  notes=[model_line(model), *notes], stamp=provenance(model).lines())
    ext = {"csv": "csv", "markdown": "md", "latex": "tex"}.get(fmt, "txt")
    return {"content": text, "filename": f"lagwise_few_clusters.{ext}"}
