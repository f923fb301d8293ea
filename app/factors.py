"""The factor-model mode: many test assets on a few factors at once.

The sidebar gains a section (pick the test assets, the factors and a risk-free column; the
factor demo) and the page gains four cards, shown for a factor model's kind ("factors" in its
cards): every asset's alpha with its interval under the estimator chosen in the Sensitivity
card (sortable by asset, alpha or t); the joint test that all alphas are zero along the
bandwidth for every kernel (along B for EWC, the order for VAR-HAC), with GRS as a reference
line, where each automatic rule lands and where the 5% conclusion flips; the alphas under every
estimator; and the risk premia with each error correction side by side. Every chart and table
exports, the alphas by estimator also as the paper table (`lagwise.robustness_table`), and the
analysis as a script.

The factor model is fitted by the page's one model callback (app.callbacks.on_spec calls
`factor_fit` when the mode is on), so the coefficient table, the sensitivity chart and the
comparison work on it as on any other model. Layout pieces are registered with app.layout's
SIDEBAR_EXTRAS / MAIN_EXTRAS; callbacks are recorded with app.wiring.callback.
"""

from __future__ import annotations

import base64
import io

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from dash import ALL, Input, Output, Patch, State, ctx, dcc, html, no_update
from dash.exceptions import PreventUpdate

from .. import engine
from ..engine.covariance.registry import FAMILIES
from ..engine.data.columns import index_label
from ..engine.inference.compare import family_presets
from ..engine.io.provenance import provenance
from ..engine.io.tables import FORMATS, render
from ..engine.kinds import kind_of, model_line
from ..engine.models.risk_premia import CORRECTIONS, risk_premia_of
from . import views as V
from .._files import demo_file
from .derived import dataset_from_path, make_estimator, stored
from .exports import export_figure, view_script
from .figures import ACCENT, FONT, GRID, INK, MUTED, PAPER, WARN, empty_figure
from .layout import CHART_FORMATS, MAIN_EXTRAS, SIDEBAR_EXTRAS, TABLE_FORMATS, card, graph, grid
from .state import STORE, key_for, spec_hash
from .wiring import RUNNING, callback
from .work import WORK, tracked

#: The simulated factor demo and the model it opens with.
DEMO = "strategy_portfolios.csv"
DEMO_SPEC = {"assets": [f"P{i:02d}" for i in range(1, 26)],
             "factors": ["market", "carry", "defensive"], "risk_free": "rf"}
HELP = ("Each test asset's excess return (minus the risk-free column, if one is chosen) is "
        "regressed on a constant and the factors; the alphas are the constants. The N "
        "regressions form one moment model, so every estimator gives the joint covariance of "
        "all alphas and the test that they are all zero. An asset that starts late or has "
        "gaps keeps its own sample; periods with a missing factor are dropped for every asset.")
JOINT_HELP = ("The p-value of the Wald test that all alphas are zero, along the bandwidth for "
              "every kernel (the estimator's own axis for EWC and VAR-HAC), under the reference "
              "law chosen above: chi-square(N) for large-sample laws, EWC's F(N, B - N + 1). "
              "With many assets the chi-square reference treats an estimated N x N covariance "
              "as known and tends to reject too often; EWC's F law accounts for it. GRS is exact "
              "only under iid normal errors. Hollow markers at the top: no test at that value "
              "(singular or not positive definite covariance, or no law for N restrictions).")
PREMIA_HELP = ("Two-pass risk premia on the balanced subsample: betas from the time series, then "
               "the cross-section of mean excess returns on the betas. Standard errors under the "
               "estimator chosen above: Fama-MacBeth (betas taken as known), Shanken's (1992) "
               "errors-in-variables correction, Kan, Robotti & Shanken's (2013) "
               "misspecification-robust errors; the time-series mean prices a traded factor.")
SORTS = {"asset": "asset", "alpha": "alpha", "t": "t statistic"}
SHOWS = {"t_stat": "t", "p_value": "p", "std_error": "std. error"}


def _menu(target: str, formats) -> html.Div:
    """Export buttons of a factor card (handled by this module's own export callback)."""
    return html.Div([html.Span("export", className="lw-export-label")] + [
        html.Button(fmt.upper() if fmt != "markdown" else "MD",
                    id={"type": "fm-export", "target": target, "format": fmt}, n_clicks=0,
                    className="lw-export-btn", title=f"download as {fmt}")
        for fmt in formats], className="lw-export")


# --------------------------------------------------------------------------- layout

def sidebar_section():
    return html.Details([
        html.Summary("Factor model (many assets)", id="fm-summary"),
        html.P(HELP, className="lw-help"),
        html.Button("Use the factor demo", id="fm-demo", n_clicks=0, className="lw-btn-quiet"),
        dcc.Checklist(id="fm-mode", options=[{"label": " fit a factor model of the assets below",
                                              "value": "on"}], value=[], className="lw-check"),
        html.Label("test assets", className="lw-label"),
        dcc.Dropdown(id="fm-assets", multi=True, placeholder="choose two or more"),
        html.Label("factors", className="lw-label"),
        dcc.Dropdown(id="fm-factors", multi=True),
        html.Label("risk-free column (subtracted from every asset)", className="lw-label"),
        html.Div(dcc.Dropdown(id="fm-rf", placeholder="none (excess returns)"),
                 title="none: the assets are excess returns already"),
        dcc.Checklist(id="fm-balanced", options=[
            {"label": " balanced subsample (only periods with every asset)", "value": "on"}],
            value=[], className="lw-check"),
        html.Div(id="fm-message", className="lw-message"),
        dcc.Store(id="fm-spec")], className="lw-details", id="fm-details")


def factor_cards():
    return html.Div([
        card("Alphas of every asset", [
            html.Div([html.Label("order", className="lw-label"),
                      dcc.RadioItems(id="fm-sort", options=[{"label": f" {v}", "value": k}
                                                            for k, v in SORTS.items()],
                                     value="asset", inline=True, className="lw-radio")],
                     className="lw-row"),
            graph("fm-alpha-graph", 380),
            html.Div(id="fm-joint-text", className="lw-reading", **{"aria-live": "polite"})],
            export=html.Div([_menu("fm-alpha-graph", CHART_FORMATS),
                             _menu("fm-alpha-table", TABLE_FORMATS)], className="lw-row"),
            help_text="Under the estimator, bandwidth and reference law chosen in the "
                      "Sensitivity card."),
        card("Joint test that all alphas are zero, along the bandwidth", [
            graph("fm-joint-graph", 400), html.Ul(id="fm-joint-flips", className="lw-notes")],
            export=html.Div([_menu("fm-joint-graph", CHART_FORMATS),
                             _menu("fm-joint-table", TABLE_FORMATS)], className="lw-row"),
            help_text=JOINT_HELP),
        card("Alphas under every estimator", [
            html.Div([html.Label("cells show", className="lw-label"),
                      dcc.RadioItems(id="fm-show", options=[{"label": f" {v}", "value": k}
                                                            for k, v in SHOWS.items()],
                                     value="t_stat", inline=True, className="lw-radio")],
                     className="lw-row"),
            dcc.Loading(grid("fm-every-table", [], height="420px"), type="dot", color=ACCENT),
            html.Ul(id="fm-every-notes", className="lw-notes")],
            export=html.Div([_menu("fm-every-table", TABLE_FORMATS),
                             _menu("fm-paper", ("latex", "markdown", "html", "xlsx"))],
                            className="lw-row"),
            help_text="One column per estimator (each family's presets); the last rows hold "
                      "the joint test's p-value under each. The paper table exports the alphas "
                      "with standard errors under the classical, HC1, current and EWC "
                      "estimators."),
        card("Risk premia", [
            dcc.Checklist(id="fm-zero-beta", options=[
                {"label": " zero-beta rate (an intercept in the cross-section)", "value": "on"}],
                value=[], className="lw-check"),
            dcc.Loading(grid("fm-premia-table", PREMIA_COLUMNS), type="dot", color=ACCENT),
            html.Ul(id="fm-premia-notes", className="lw-notes")],
            export=_menu("fm-premia-table", TABLE_FORMATS), help_text=PREMIA_HELP),
        html.Div([html.Button("download a Python script of this factor analysis",
                              id="fm-script", n_clicks=0, className="lw-btn-quiet")],
                 className="lw-report-row"),
    ], id="fm-cards", className="lw-factor-cards", style={"display": "none"})


PREMIA_COLUMNS = [V.column("premium", "premium", text=False, left=True, width=110),
                  V.column("estimate", "estimate", width=90)] + [
    V.column(c, title, text=False, width=150) for c, title in
    (("none", "Fama-MacBeth"), ("shanken", "Shanken"), ("krs", "KRS robust"),
     ("mean", "time-series mean"), ("gmm", "joint GMM"))]

SIDEBAR_EXTRAS.append(sidebar_section)
MAIN_EXTRAS.append(factor_cards)


# --------------------------------------------------------------------------- fitting

def sample_window(frame, window):
    """(sample labels or None, words) for the sidebar's window slider over the table's rows."""
    if not (isinstance(window, list) and len(window) == 2 and len(frame) > 1):
        return None, ""
    try:
        i0, i1 = int(window[0]), int(min(window[1], len(frame) - 1))
    except (TypeError, ValueError):
        return None, ""
    i0 = max(0, min(i0, i1))
    sample = (frame.index[i0], frame.index[i1]) if i0 > 0 or i1 < len(frame) - 1 else None
    return sample, f"{index_label(frame.index[i0])} to {index_label(frame.index[i1])}"


def factor_fit(session, key, spec, window, focus):
    """The outputs of app.callbacks.on_spec for the factor-model mode: the fit's key, the
    message, the coefficient choices and the window text."""
    table = stored(session, key)
    if table is None:
        return None, "", [], None, "", no_update, no_update
    sample, text = sample_window(table.frame, window)
    assets, factors = spec.get("assets") or [], spec.get("factors") or []
    rf = spec.get("risk_free") or None
    balanced = bool(spec.get("balanced"))
    fkey = key_for("fit", spec_hash([key, "factors", assets, factors, rf, str(sample),
                                     balanced]))
    try:
        model = stored(session, fkey)            # the same specification: keep its caches
        if model is None:
            with WORK.step(session, "Fitting the factor model"):
                model = engine.fit_factor_model(table, assets, factors, risk_free=rf,
                                                sample=sample, balanced=balanced)
            STORE.put(session, fkey, model)
    except (engine.LagwiseError, ValueError, TypeError) as exc:
        return None, V.error_box(str(exc)), [], None, text, no_update, None
    focus = focus if focus in model.terms else model.alpha_terms[0]
    msg = [model_line(model), *model.sample.notes]
    return (fkey, html.Div([html.Div(m) for m in msg], className="lw-ok"),
            [{"label": t, "value": t} for t in model.terms], focus, text, None, None)


# --------------------------------------------------------------------------- derived results

def _factor_model(session, fkey):
    """The stored fit when it is a factor model (its kind has the factor cards), else None."""
    model = stored(session, fkey)
    if model is None or "factors" not in kind_of(model).cards:
        return None
    return model


def chart_estimators(model, est):
    """The curves of the joint chart for the estimator on screen: every kernel with its
    options when it is a kernel estimator, its own family along its axis otherwise (EWC along
    B, VAR-HAC along the order), every kernel with default options for a family without an
    axis (classical, HC)."""
    family = est.family
    if family.companions is not None:
        return [engine.estimator(family.name, **p) for p in family.companions(est.params)]
    if family.axis is not None:
        return [est.at(family.axis.grid(model)[0])]
    return model.kernel_estimators()


def joint_for(session, fkey, model, est, reference):
    """The joint sweep, the rules' landings and GRS for the chart, computed once per setting."""
    curves = chart_estimators(model, est)
    key = key_for(fkey, "fm-joint", reference, spec_hash([c.settings() for c in curves]))

    def build():
        sweep = model.joint_sweep(curves, reference=reference)
        marks = model.rule_landings(curves)
        try:
            grs = model.grs()
        except engine.LagwiseError:
            grs = None
        return sweep, marks, grs
    return STORE.derived(session, key, lambda: tracked(
        session, "Joint alpha test along the axis", lambda _p: build()))


def every_for(session, fkey, model, level, reference):
    """(estimator labels, {label: alpha table}, {label: joint test or reason}) over every
    family's presets, computed once per setting."""
    key = key_for(fkey, "fm-every", level, reference)

    def build(progress):
        items = family_presets(model)
        labels, tables, tests = [], {}, {}
        for i, item in enumerate(items):
            est, ref, _ = item if isinstance(item, tuple) else (item, None, "")
            progress(i, len(items), est.label)
            try:
                part = model.alpha_inference(est, level, ref or reference)
            except engine.LagwiseError as exc:
                labels.append(est.label)
                tables[est.label] = None
                tests[est.label] = str(exc)
                continue
            label = part.label + ("" if not ref else f", {ref}")
            if label in tables:
                continue
            labels.append(label)
            tables[label] = part.table(pd.Index(model.assets, name="asset"), level, model.k)
            try:
                tests[label] = model.alpha_test(est, ref or reference, level)
            except engine.LagwiseError as exc:
                tests[label] = str(exc)
        progress(len(items), len(items), "")
        return labels, tables, tests
    return STORE.derived(session, key, lambda: tracked(
        session, "Alphas under every estimator", build))


def premia_for(session, fkey, model, est, level, reference, zero_beta):
    """The premia under `est` with every correction, the factor means and the joint GMM."""
    key = key_for(fkey, "fm-premia", level, reference, zero_beta, spec_hash(est.settings()))

    def build():
        rp = STORE.derived(session, key_for(fkey, "fm-two-pass", zero_beta),
                           lambda: risk_premia_of(model, zero_beta=zero_beta))
        tab = rp.corrections(est, level, reference)
        gmm, gmm_note = None, ""
        if not zero_beta:
            try:
                fit = STORE.derived(session, key_for(fkey, "fm-gmm"),
                                    lambda: risk_premia_of(model, method="gmm"))
                gmm = fit.infer(est, level=level, reference=reference).table
            except engine.LagwiseError as exc:
                gmm_note = f"joint GMM not available: {exc}"
        else:
            gmm_note = "joint GMM: without a zero-beta rate only"
        tests = {}
        for corr in CORRECTIONS:
            try:
                tests[corr] = rp.pricing_error_test(est, corr, reference)
            except engine.LagwiseError as exc:
                tests[corr] = str(exc)
        return rp, tab, gmm, gmm_note, tests
    return STORE.derived(session, key, lambda: tracked(session, "Risk premia", lambda _p:
                                                       build()))


# --------------------------------------------------------------------------- figures

def _style(fig: go.Figure, title: str, height: int) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15, "color": INK}},
        font={"family": FONT, "size": 12, "color": INK}, paper_bgcolor=PAPER,
        plot_bgcolor=PAPER, height=height, margin={"l": 64, "r": 16, "t": 48, "b": 56},
        legend={"orientation": "h", "y": -0.22, "x": 0, "font": {"size": 11}},
        hoverlabel={"font": {"family": FONT}})
    fig.update_xaxes(gridcolor=GRID, zerolinecolor=GRID, linecolor=GRID)
    fig.update_yaxes(gridcolor=GRID, zerolinecolor="#c9c4b8", linecolor=GRID)
    return fig


def sort_alphas(table: pd.DataFrame, how: str) -> pd.DataFrame:
    if how == "alpha":
        return table.sort_values("estimate", ascending=False)
    if how == "t":
        return table.sort_values("t_stat", ascending=False, na_position="last")
    return table


def alpha_figure(table: pd.DataFrame, label: str, level: float, how: str = "asset",
                 joint=None) -> go.Figure:
    """Every asset's alpha with its interval (one marker and whisker per asset), in the order
    asked for; intervals that exclude zero are drawn in the accent colour."""
    tab = sort_alphas(table, how)
    x = [str(a) for a in tab.index]
    excl = (tab.ci_low > 0) | (tab.ci_high < 0)
    fig = go.Figure()
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    for mask, color, name in ((~excl, MUTED, f"{level:.0%} interval includes 0"),
                              (excl, ACCENT, f"{level:.0%} interval excludes 0")):
        sub = tab[mask.to_numpy()]
        if sub.empty:
            continue
        fig.add_trace(go.Scatter(
            x=[str(a) for a in sub.index], y=sub.estimate.tolist(), mode="markers", name=name,
            marker={"color": color, "size": 8},
            error_y={"type": "data", "symmetric": False,
                     "array": (sub.ci_high - sub.estimate).tolist(),
                     "arrayminus": (sub.estimate - sub.ci_low).tolist(), "color": color,
                     "thickness": 1.5, "width": 3},
            customdata=np.column_stack([sub.std_error, sub.t_stat, sub.p_value, sub.ci_low,
                                        sub.ci_high]),
            hovertemplate="%{x}<br>alpha %{y:.4g}<br>std. error %{customdata[0]:.3g}<br>"
                          "t %{customdata[1]:.2f}, p %{customdata[2]:.3f}<br>interval "
                          "[%{customdata[3]:.4g}, %{customdata[4]:.4g}]<extra></extra>"))
    fig.update_xaxes(title_text=f"asset ({SORTS.get(how, how)} order)", categoryorder="array",
                     categoryarray=x, tickangle=-45 if len(x) > 12 else 0)
    fig.update_yaxes(title_text="alpha (per period)")
    sub = f"under {label}"
    if joint is not None:
        sub += f"; joint test {p_words(joint.p_value)}"
    return _style(fig, f"Alphas and {level:.0%} intervals {sub}", 420)


#: p-values below this are drawn at it (the log axis needs a floor; the hover shows the value).
P_FLOOR = 1e-6
P_TICKS = [1e-6, 1e-5, 1e-4, 1e-3, 0.01, 0.05, 0.2, 1.0]


def p_words(p) -> str:
    """'p < 0.001' or 'p = 0.123' (V.fmt_p's text after the right sign)."""
    text = V.fmt_p(p)
    return f"p {text[0]} {text[1:]}" if text.startswith("<") else f"p = {text}"


def joint_figure(sweep, level: float, grs=None, marks=(), current=None,
                 current_curve: int | None = None) -> go.Figure:
    """The joint test's p-value (log scale) along the axis, a line per curve; the 1 - level
    line, GRS's p-value as a reference line, the rules' landings on the current curve, the
    current value as layout shape 0 (a slider move patches its x), and points without a test
    as hollow markers at the top."""
    fig = go.Figure()
    x0 = float(current) if current is not None else float(sweep.values[0])
    fig.add_shape(type="line", x0=x0, x1=x0, y0=0, y1=1, yref="paper",
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    x = sweep.values
    for c, est in enumerate(sweep.estimators):
        kernel = est.params.get("kernel")
        k = engine.KERNELS.get(kernel) if kernel else None
        color = k.color if k is not None else ACCENT
        short = k.short if k is not None else sweep.labels[c]
        p = sweep.p_value[c]
        shown = np.where(np.isfinite(p), np.maximum(p, P_FLOOR), np.nan)
        width = 3 if c == current_curve else 1.6
        fig.add_trace(go.Scatter(x=x.tolist(), y=shown.tolist(), mode="lines", name=short,
                                 line={"color": color, "width": width},
                                 customdata=np.column_stack([sweep.statistic[c], p]),
                                 hovertemplate=f"{short}<br>{sweep.symbol}=%{{x}}<br>W "
                                               "%{customdata[0]:.4g}<br>p %{customdata[1]:.3g}"
                                               "<extra></extra>"))
        odd = sweep.status[c] != ""
        if odd.any():
            fig.add_trace(go.Scatter(
                x=x[odd], y=np.ones(int(odd.sum())), mode="markers",
                name=f"{short}: no test", customdata=sweep.reasons[c][odd],
                marker={"symbol": "circle-open", "size": 7, "color": color},
                hovertemplate=f"{short}<br>{sweep.symbol}=%{{x}}<br>%{{customdata}}"
                              "<extra></extra>"))
    fig.add_hline(y=1 - level, line={"color": WARN, "width": 1.2, "dash": "dash"},
                  annotation_text=f"{1 - level:.0%} level", annotation_position="bottom left",
                  annotation_font={"size": 10, "color": WARN})
    if grs is not None and np.isfinite(grs.p_value):
        fig.add_hline(y=max(grs.p_value, P_FLOOR), line={"color": INK, "width": 1,
                                                          "dash": "dot"},
                      annotation_text=f"GRS {p_words(grs.p_value)} (iid normal errors)",
                      annotation_position="top right", annotation_font={"size": 10,
                                                                        "color": INK})
    cur = current_curve if current_curve is not None else 0
    for c, rule, title, value in marks:
        if c != cur or not np.isfinite(value):
            continue
        p = sweep.p_value[c]
        ok = np.isfinite(p)
        if not ok.any() or value < x[0] or value > x[-1]:
            continue
        y = float(np.exp(np.interp(value, x[ok], np.log(np.maximum(p[ok], P_FLOOR)))))
        fig.add_trace(go.Scatter(x=[value], y=[y], mode="markers+text", text=[rule],
                                 textposition="top right", textfont={"size": 10,
                                                                     "color": MUTED},
                                 marker={"symbol": "diamond", "size": 9, "color": INK},
                                 name=title, showlegend=False,
                                 hovertemplate=f"{title}: {sweep.symbol} = {value:.3g}"
                                               "<extra></extra>"))
    finite = sweep.p_value[np.isfinite(sweep.p_value)]
    low = np.log10(max(min(finite.min() if finite.size else 1e-3, 1 - level) * 0.5, P_FLOOR))
    ticks = [t for t in P_TICKS if t >= 10 ** low * 0.999]
    fig.update_yaxes(type="log", range=[low - 0.05, 0.05], tickvals=ticks,
                     ticktext=[f"{t:g}" if t >= 1e-3 else f"1e{int(np.log10(t))}"
                               for t in ticks],
                     title_text="p-value of the joint test (log scale)")
    if finite.size and finite.min() < P_FLOOR:
        fig.add_annotation(x=1, xref="paper", y=0, yref="paper", xanchor="right",
                           yanchor="bottom", yshift=4, showarrow=False,
                           text=f"p-values below {P_FLOOR:g} are drawn at {P_FLOOR:g}",
                           font={"size": 10, "color": MUTED}, bgcolor="rgba(255,255,255,0.85)")
    fig.update_xaxes(title_text=sweep.title)
    n = sweep.df
    return _style(fig, f"Joint test that all {n} alphas are zero, along the {sweep.title}", 440)


# --------------------------------------------------------------------------- records

def _num(x):
    return float(x) if x is not None and np.isfinite(x) else None


def every_records(labels, tables, tests, show: str, assets):
    """Rows of the every-estimator grid (one per asset; numbers to sort by, text to show),
    the bottom rows (joint p and W per estimator) and the column definitions."""
    cols = [V.column("asset", "asset", text=False, left=True, width=90),
            V.column("alpha", "alpha", width=90)]
    fields = {}
    for i, lab in enumerate(labels):
        f = f"e{i}"
        fields[lab] = f
        cols.append({**V.column(f, lab, width=120), "headerTooltip": lab})
    rows = []
    first = next((t for t in tables.values() if t is not None), None)
    for a in assets:
        row = {"asset": str(a)}
        if first is not None:
            row["alpha"], row["alpha_txt"] = _num(first.loc[a, "estimate"]), \
                V.fmt(first.loc[a, "estimate"])
        for lab, f in fields.items():
            tab = tables[lab]
            value = None if tab is None else tab.loc[a, show]
            row[f] = _num(value) if value is not None else None
            row[f + "_txt"] = "" if value is None else (V.fmt_p(value) if show == "p_value"
                                                      else V.fmt(value, 3))
        rows.append(row)
    bottom = [{"asset": "joint test p", "alpha_txt": ""}, {"asset": "joint W", "alpha_txt": ""}]
    for lab, f in fields.items():
        jt = tests.get(lab)
        ok = not isinstance(jt, str) and jt is not None
        bottom[0][f], bottom[0][f + "_txt"] = (_num(jt.p_value), V.fmt_p(jt.p_value)) if ok \
            else (None, "n/a")
        bottom[1][f], bottom[1][f + "_txt"] = (_num(jt.statistic), V.fmt(jt.statistic, 4)) \
            if ok else (None, "n/a")
    return rows, bottom, cols


def premia_records(rp, tab, gmm):
    rows = []
    for name in list(rp.premia.index):
        row = {"premium": name, "estimate": _num(rp.premia[name]),
               "estimate_txt": V.fmt(rp.premia[name])}
        for corr in ("none", "shanken", "krs", "mean"):
            hit = tab[(tab.premium == name) & (tab.correction == corr)]
            if hit.empty:
                row[corr] = ""
                continue
            r = hit.iloc[0]
            row[corr] = f"{V.fmt(r.std_error, 3)} (t {V.fmt(r.t_stat, 3)})"
            if corr == "mean":                      # the premium itself differs: show it
                row[corr] = f"{V.fmt(r.estimate)}: " + row[corr]
        if gmm is not None and name in gmm.index:
            r = gmm.loc[name]
            row["gmm"] = f"{V.fmt(r.estimate)}: {V.fmt(r.std_error, 3)} (t {V.fmt(r.t_stat, 3)})"
        else:
            row["gmm"] = ""
        rows.append(row)
    return rows


def premia_notes(rp, tests, gmm_note, est_label):
    out = [f"standard errors (t) under {est_label}; cross-sectional R² = "
           f"{V.fmt(rp.r_squared, 3)}; Shanken's c = {V.fmt(rp.shanken_c, 3)}; "
           f"{rp.nobs} periods (balanced subsample)"]
    for corr, title in CORRECTIONS.items():
        jt = tests.get(corr)
        if isinstance(jt, str) or jt is None:
            out.append(f"pricing errors jointly zero, {title}: not available ({jt})")
        else:
            out.append(f"pricing errors jointly zero, {title}: W = {V.fmt(jt.statistic, 4)}, "
                       f"{jt.law}, p = {V.fmt_p(jt.p_value)}")
    out.append("time-series mean: the premium of a traded factor as its mean excess return "
               "(valid when the model prices the factor itself with zero alpha); joint GMM: "
               "betas, premia and factor means estimated together, weighted by the estimator "
               "above (two-step)")
    if gmm_note:
        out.append(gmm_note)
    return out


def _grs_or_reason(model):
    """(GRS, None) or (None, why not with the large-N test's summary when it applies)."""
    try:
        return model.grs(), None
    except engine.LagwiseError as exc:
        why = f"GRS not available: {exc}"
        try:
            why += f". {model.large_n_test().summary()}"
        except engine.LagwiseError:
            pass
        return None, why


def joint_text(model, jt, grs, level):
    """The joint test at the current setting (a JointTest or why there is none), GRS (or why
    not, with the large-N test when N >= T - K)."""
    lines = []
    if isinstance(jt, str):
        lines.append(html.Li(f"Joint test under this estimator: not available. {jt}"))
    else:
        verdict = "rejected" if jt.rejects(level) else "not rejected"
        lines.append(html.Li([html.Strong(f"All {model.n_assets} alphas zero: {verdict} at "
                                          f"{1 - level:.0%}"),
                              f" (W = {V.fmt(jt.statistic, 4)}, {jt.law}, "
                              f"{p_words(jt.p_value)}; {jt.estimator})"]))
    g, why = grs
    if g is None:
        lines.append(html.Li(why))
    else:
        lines.append(html.Li(f"GRS = {V.fmt(g.statistic, 4)}, F({g.df[0]}, {g.df[1]}), "
                             f"{p_words(g.p_value)}. {g.assumptions}"
                             + (f"; {g.notes[0]}" if len(g.notes) > 1 else "")))
    return html.Ul(lines, className="lw-reading-list")


# --------------------------------------------------------------------------- callbacks

@callback(Output("dataset-key", "data", allow_duplicate=True),
          Output("upload-message", "children", allow_duplicate=True),
          Input("fm-demo", "n_clicks"), State("session", "data"), prevent_initial_call=True,
          message=1, running=RUNNING)
def on_factor_demo(n, session):
    """Load the simulated factor demo (the factor section then opens on its model)."""
    if not n:
        raise PreventUpdate
    try:
        key, table = dataset_from_path(session, demo_file(DEMO))
    except engine.LagwiseError as exc:
        return no_update, V.error_box(str(exc))
    return key, V.ok_box(f"loaded the factor demo ({len(table.frame)} months, simulated)")


@callback(Output("fm-assets", "options"), Output("fm-assets", "value"),
          Output("fm-factors", "options"), Output("fm-factors", "value"),
          Output("fm-rf", "options"), Output("fm-rf", "value"), Output("fm-mode", "value"),
          Output("fm-details", "open"),
          Input("dataset-key", "data"), State("session", "data"), State("fm-assets", "value"),
          State("fm-factors", "value"), State("fm-rf", "value"), State("fm-mode", "value"),
          message=None)
def on_factor_options(key, session, assets, factors, rf, mode):
    """The columns of new data as choices; the factor demo opens in the factor-model mode with
    its portfolios, factors and risk-free rate."""
    table = stored(session, key)
    if table is None:
        return [], [], [], [], [], None, [], no_update
    cols = [str(c) for c in table.frame.columns]
    opts = [{"label": c, "value": c} for c in cols]
    if table.report.source == DEMO:
        return (opts, DEMO_SPEC["assets"], opts, DEMO_SPEC["factors"], opts,
                DEMO_SPEC["risk_free"], ["on"], True)
    keep = lambda values: [v for v in (values or []) if v in cols]   # noqa: E731
    assets, factors = keep(assets), keep(factors)
    on = mode if isinstance(mode, list) and assets and factors else []
    return opts, assets, opts, factors, opts, rf if rf in cols else None, on, no_update


@callback(Output("fm-spec", "data"), Output("fm-message", "children"),
          Input("fm-mode", "value"), Input("fm-assets", "value"), Input("fm-factors", "value"),
          Input("fm-rf", "value"), Input("fm-balanced", "value"), State("fm-spec", "data"),
          message=1)
def on_factor_spec(mode, assets, factors, rf, balanced, current):
    """The factor-model specification the model callback reads (on, assets, factors, rf)."""
    on = isinstance(mode, list) and "on" in mode
    assets = [a for a in (assets or []) if isinstance(a, str)]
    factors = [f for f in (factors or []) if isinstance(f, str)]
    spec = {"on": on, "assets": assets, "factors": factors,
            "risk_free": rf if isinstance(rf, str) and rf else None,
            "balanced": isinstance(balanced, list) and "on" in balanced}
    if not on:
        spec = {"on": False}
    msg = ""
    if on and (len(assets) < 2 or not factors):
        msg = V.error_box("choose at least two test assets and one factor")
    if spec == current:
        return no_update, msg
    return spec, msg


CARD_INPUTS = [Input("fit-key", "data"), Input("est-name", "value"),
               Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
               Input("slider-fm", "data"), Input("reference", "value"),
               Input("level", "value")]


def _view(session, fkey, name, values, ids, rule, slider):
    model = _factor_model(session, fkey)
    if model is None:
        return None, None
    if FAMILIES.get(name) is None or FAMILIES[name].applies(model) is not None:
        raise PreventUpdate          # the picker is switching to a family that applies
    return model, make_estimator(name, values, ids, rule, slider)


@callback(Output("fm-cards", "style"), Output("fm-alpha-graph", "figure"),
          Output("fm-joint-text", "children"),
          *CARD_INPUTS, Input("fm-sort", "value"), State({"type": "est-param", "name": ALL}, "id"),
          State("session", "data"), State("tune-slider", "value"), message=2)
def on_factor_alphas(fkey, name, values, rule, _press, reference, level, sort, ids, session,
                     slider):
    """Every asset's alpha under the estimator on screen, and the joint test there."""
    model, est = _view(session, fkey, name, values, ids, rule, slider)
    if model is None:
        return {"display": "none"}, empty_figure(""), ""
    try:
        part = model.alpha_inference(est, level, reference)
        table = part.table(pd.Index(model.assets, name="asset"), level, model.k)
        try:
            jt = model.alpha_test_from(part)
        except engine.LagwiseError as exc:
            jt = str(exc)
        grs = STORE.derived(session, key_for(fkey, "fm-grs"), lambda: _grs_or_reason(model))
        fig = alpha_figure(table, part.label, level, sort or "asset",
                           None if isinstance(jt, str) else jt)
        text = joint_text(model, jt, grs, level)
    except engine.LagwiseError as exc:
        return {}, empty_figure(str(exc)), V.error_box(str(exc))
    return {}, fig, text


@callback(Output("fm-joint-graph", "figure"), Output("fm-joint-flips", "children"),
          Input("fit-key", "data"), Input("est-name", "value"),
          Input({"type": "est-param", "name": ALL}, "value"), Input("tune-rule", "value"),
          Input("reference", "value"), Input("level", "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("tune-slider", "value"),
          State("session", "data"), message=1, running=RUNNING)
def on_factor_joint(fkey, name, values, rule, reference, level, ids, slider, session):
    """The joint test along the axis for every curve, GRS, rules and flips."""
    model, est = _view(session, fkey, name, values, ids, rule, slider)
    if model is None:
        return empty_figure(""), []
    try:
        sweep, marks, grs = joint_for(session, fkey, model, est, reference)
    except engine.LagwiseError as exc:
        return empty_figure(str(exc)), [html.Li(str(exc))]
    kernel = est.params.get("kernel")
    cur = sweep.curve_index(kernel) if kernel in [e.params.get("kernel")
                                                  for e in sweep.estimators] else 0
    x = slider if isinstance(slider, (int, float)) and est.family is sweep.family else None
    fig = joint_figure(sweep, level, grs, marks, x, cur)
    what = f"all {model.n_assets} alphas zero"
    items = [html.Li(f.sentence()) for f in sweep.flips(level, what)]
    landed = [f"{title}: {sweep.symbol} = {value:.3g}" for c, _, title, value in marks
              if c == cur]
    if landed:
        items.append(html.Li(f"automatic choices ({sweep.labels[cur]}): " + "; ".join(landed)))
    return fig, items


@callback(Output("fm-joint-graph", "figure", allow_duplicate=True),
          Input("slider-fm", "data"), State("fit-key", "data"), State("session", "data"),
          prevent_initial_call=True)
def on_factor_marker(slider, fkey, session):
    """Move the current-value line of the joint chart (a partial update of the figure)."""
    if _factor_model(session, fkey) is None or not isinstance(slider, (int, float)):
        raise PreventUpdate
    patch = Patch()
    patch["layout"]["shapes"][0]["x0"] = slider
    patch["layout"]["shapes"][0]["x1"] = slider
    return patch


@callback(Output("fm-every-table", "rowData"), Output("fm-every-table", "columnDefs"),
          Output("fm-every-table", "dashGridOptions"), Output("fm-every-notes", "children"),
          Input("fit-key", "data"), Input("reference", "value"), Input("level", "value"),
          Input("fm-show", "value"), State("fm-every-table", "dashGridOptions"),
          State("session", "data"), message=3, running=RUNNING)
def on_factor_every(fkey, reference, level, show, options, session):
    model = _factor_model(session, fkey)
    if model is None:
        return [], [], no_update, []
    try:
        labels, tables, tests = every_for(session, fkey, model, level, reference)
    except engine.LagwiseError as exc:
        return [], [], no_update, [html.Li(str(exc))]
    show = show if show in SHOWS else "t_stat"
    rows, bottom, cols = every_records(labels, tables, tests, show, model.assets)
    notes = [html.Li(f"{lab}: {tests[lab]}") for lab in labels if isinstance(tests[lab], str)]
    opts = {**(options or {}), "pinnedBottomRowData": bottom}
    return rows, cols, opts, notes


@callback(Output("fm-premia-table", "rowData"), Output("fm-premia-notes", "children"),
          *CARD_INPUTS, Input("fm-zero-beta", "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("session", "data"),
          State("tune-slider", "value"), message=1, running=RUNNING)
def on_factor_premia(fkey, name, values, rule, _press, reference, level, zero_beta, ids,
                     session, slider):
    model, est = _view(session, fkey, name, values, ids, rule, slider)
    if model is None:
        return [], []
    zb = isinstance(zero_beta, list) and "on" in zero_beta
    try:
        rp, tab, gmm, gmm_note, tests = premia_for(session, fkey, model, est, level, reference,
                                                   zb)
    except engine.LagwiseError as exc:
        return [], [html.Li(str(exc))]
    return premia_records(rp, tab, gmm), [html.Li(n) for n in premia_notes(
        rp, tests, gmm_note, est.label)]


# --------------------------------------------------------------------------- exports

def factor_table(target, session, fkey, model, est, level, reference, zero_beta=False):
    """(frame, caption, notes) of a factor card's table, from the engine's numbers."""
    if target == "fm-alpha-table":
        part = model.alpha_inference(est, level, reference)
        frame = part.table(pd.Index(model.assets, name="asset"), level, model.k).reset_index()
        notes = [f"{level:.0%} intervals; {part.label}; reference law: {part.law.describe()}"]
        try:
            notes.append(model.alpha_test(est, reference, level).summary())
        except engine.LagwiseError as exc:
            notes.append(f"joint test not available: {exc}")
        return frame, f"{model_line(model)}: alphas", notes + list(part.notes)
    if target == "fm-joint-table":
        sweep, marks, grs = joint_for(session, fkey, model, est, reference)
        notes = [f"Wald test that all {model.n_assets} alphas are zero along the "
                 f"{sweep.title}; each row's law is stated in its row"]
        if grs is not None:
            notes.append(grs.summary())
        notes += [f"{sweep.labels[c]}: {title} = {value:.4g}" for c, _, title, value in marks]
        return sweep.frame, f"{model_line(model)}: joint alpha test", notes
    if target == "fm-every-table":
        labels, tables, tests = every_for(session, fkey, model, level, reference)
        parts = []
        for lab in labels:
            if tables[lab] is None:
                continue
            t = tables[lab].reset_index()
            t.insert(1, "estimator", lab)
            jt = tests[lab]
            t["joint_p_value"] = np.nan if isinstance(jt, str) else jt.p_value
            parts.append(t)
        return pd.concat(parts, ignore_index=True), f"{model_line(model)}: alphas under every " \
            "estimator", [f"{level:.0%} intervals; joint_p_value: the Wald test that all alphas "
                          "are zero under the row's estimator"]
    rp, tab, gmm, gmm_note, tests = premia_for(session, fkey, model, est, level, reference,
                                               zero_beta)
    frame = tab.copy()
    if gmm is not None:
        g = gmm.reset_index().rename(columns={"index": "premium"})
        g["correction"], g["title"] = "gmm", "joint GMM (two-step)"
        frame = pd.concat([frame, g[frame.columns]], ignore_index=True)
    return frame, f"{model_line(model)}: risk premia", premia_notes(rp, tests, gmm_note,
                                                                    est.label)


def paper_table(model, est, level):
    """The alphas with standard errors under classical, HC1, the current estimator and EWC
    (when it can refer N restrictions), as lagwise.robustness_table; the joint tests in the
    notes."""
    ests = {}
    for e in (engine.estimator("classical"), engine.estimator("hc1"), est):
        ests.setdefault(e.label, e)
    tab = engine.robustness_table(model, ests, beneath="std_error", level=level,
                                  terms=model.alpha_terms)
    for lab, e in ests.items():
        try:
            tab.notes.append(f"{lab}: " + model.alpha_test(e, level=level).summary())
        except engine.LagwiseError as exc:
            tab.notes.append(f"{lab}: joint test not available ({exc})")
    try:
        tab.notes.append(model.grs().summary())
    except engine.LagwiseError:
        pass
    return tab


EXPORT_STATE = [State("session", "data"), State("fit-key", "data"), State("est-name", "value"),
                State({"type": "est-param", "name": ALL}, "value"),
                State({"type": "est-param", "name": ALL}, "id"), State("tune-rule", "value"),
                State("tune-slider", "value"), State("reference", "value"),
                State("level", "value"), State("fm-zero-beta", "value")]


@callback(Output("download", "data", allow_duplicate=True),
          Input({"type": "fm-export", "target": ALL, "format": ALL}, "n_clicks"),
          State("fm-alpha-graph", "figure"), State("fm-joint-graph", "figure"), *EXPORT_STATE,
          prevent_initial_call=True)
def on_factor_export(clicks, alpha_fig, joint_fig, session, fkey, name, values, ids, rule,
                     slider, reference, level, zero_beta):
    trig = ctx.triggered_id
    if not isinstance(trig, dict) or not any(c for c in clicks or [] if c):
        raise PreventUpdate
    target, fmt = trig.get("target"), trig.get("format")
    try:
        model = _factor_model(session, fkey)
        if model is None:
            raise engine.SpecificationError("nothing to export yet: fit a factor model")
        if target in ("fm-alpha-graph", "fm-joint-graph"):
            fig = alpha_fig if target == "fm-alpha-graph" else joint_fig
            if not isinstance(fig, dict):
                raise engine.SpecificationError("the chart is not drawn yet")
            data = export_figure(go.Figure(fig), fmt, subtitle=model_line(model),
                                 stamp=provenance(model))
            return {"content": base64.b64encode(data).decode(), "base64": True,
                    "filename": f"lagwise_{target}.{fmt}"}
        est = make_estimator(name, values, ids, rule, slider)
        if target == "fm-paper":
            tab = paper_table(model, est, level)
            if fmt == "xlsx":
                buf = io.BytesIO()
                tab.to_excel(buf)
                return {"content": base64.b64encode(buf.getvalue()).decode(), "base64": True,
                        "filename": "lagwise_alphas_paper_table.xlsx"}
            text = {"latex": tab.to_latex, "markdown": tab.to_markdown,
                    "html": tab.to_html}[fmt]()
            ext = {"latex": "tex", "markdown": "md", "html": "html"}[fmt]
            return {"content": text, "filename": f"lagwise_alphas_paper_table.{ext}"}
        if fmt not in FORMATS:
            raise PreventUpdate
        zb = isinstance(zero_beta, list) and "on" in zero_beta
        frame, caption, notes = factor_table(target, session, fkey, model, est, level,
                                             reference, zb)
        text = render(frame, fmt, index=False, caption=caption, notes=notes,
                      stamp=provenance(model).lines(), level=level)
    except (engine.LagwiseError, ValueError) as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    ext = {"csv": "csv", "markdown": "md", "latex": "tex", "html": "html"}[fmt]
    return {"content": text, "filename": f"lagwise_{target}.{ext}"}


def factor_script(table, model, est, level, reference) -> str:
    """A short script using the public API that reproduces the factor analysis on screen."""
    base = view_script(table, model, est, level, reference).rstrip().splitlines()
    base = [line for line in base if not line.startswith("print(res.summary())")]
    extra = ["", "print(res.summary())",
             "print(fit.alphas(est))                       # every asset's alpha",
             "print(fit.alpha_test(est, reference=" + repr(reference) + "))",
             "print(fit.grs())                             # exact under iid normal errors",
             "sweep = fit.joint_sweep()                    # every kernel along the bandwidth",
             "for flip in sweep.flips(" + repr(level) + "):",
             "    print(flip.sentence())",
             "rp = lagwise.fit_risk_premia(table, " + repr(list(model.assets))
             + ", " + repr(list(model.factors)) + ", risk_free=" + repr(model.risk_free) + ")",
             "for correction in ('none', 'shanken', 'krs'):",
             "    print(correction, rp.infer(est, correction=correction).table)", ""]
    return "\n".join(base + extra)


@callback(Output("download", "data", allow_duplicate=True), Input("fm-script", "n_clicks"),
          State("dataset-key", "data"), *EXPORT_STATE, prevent_initial_call=True)
def on_factor_script(_n, dkey, session, fkey, name, values, ids, rule, slider, reference, level,
                     _zero_beta):
    try:
        table = stored(session, dkey)
        model = _factor_model(session, fkey)
        if table is None or model is None:
            raise engine.SpecificationError("nothing to export yet: fit a factor model")
        text = factor_script(table, model, make_estimator(name, values, ids, rule, slider),
                             level, reference)
    except engine.LagwiseError as exc:
        return {"content": f"export failed: {exc}\n", "filename": "lagwise_export_error.txt"}
    return {"content": text, "filename": "lagwise_factor_analysis.py"}
