"""Page structure only. Controls for estimator parameters are generated from the registry."""

from __future__ import annotations

from dash import dash_table, dcc, html

from ..engine import BANDWIDTH_RULES, ESTIMATORS, KERNELS, TRANSFORMS
from ..engine.covariance import Param

from .state import MAX_UPLOAD_BYTES

REFERENCE_OPTIONS = [
    {"label": "auto (the estimator's own law)", "value": "auto"},
    {"label": "normal (large sample)", "value": "normal"},
    {"label": "Student t, T - k df", "value": "t"},
    {"label": "fixed-b (Kiefer-Vogelsang)", "value": "fixed-b"},
]
RULE_OPTIONS = [{"label": "fixed (slider)", "value": "fixed"}] + [
    {"label": {"rule-of-thumb": "rule of thumb", "textbook": "0.75 T^(1/3)",
               "llsw": "1.3 T^(1/2) (LLSW)", "andrews": "Andrews (1991)",
               "newey-west": "Newey-West (1994)"}[k], "value": k} for k in BANDWIDTH_RULES]
TABLE_STYLE = dict(
    style_as_list_view=True, style_table={"overflowX": "auto"},
    style_header={"fontWeight": "600", "backgroundColor": "#f1efe8", "color": "#1d2733",
                  "border": "none", "fontSize": "12px"},
    style_cell={"fontFamily": "Liberation Sans, Helvetica Neue, Arial, sans-serif",
                "fontSize": "13px", "padding": "5px 8px",
                "textAlign": "right", "border": "none", "borderBottom": "1px solid #ece9e1",
                "whiteSpace": "normal", "height": "auto"},
    style_cell_conditional=[{"if": {"column_id": c}, "textAlign": "left"}
                            for c in ("term", "estimator", "test", "null", "convention",
                                      "verdict", "reference", "column")],
)
HELP = {
    "upload": f"CSV (comma, semicolon, tab or pipe; decimal commas and thousands separators "
              f"are recognised) or Parquet, up to {MAX_UPLOAD_BYTES // 2**20} MB. A date column is "
              "used as the time index. Nothing leaves this computer.",
    "slider": "The real bandwidth b: lag j gets weight k(j/b). Kernels that vanish beyond "
              "|x| = 1 use ceil(b) - 1 lags, so Newey-West with L lags is b = L + 1. Quadratic "
              "Spectral uses every lag.",
    "rule": "How b is chosen. Rules of thumb are common practice, not optimal; Andrews and "
            "Newey-West plug-ins estimate the autocorrelation of the scores. With a rule chosen "
            "the slider shows where it landed; moving the slider switches to a fixed b.",
    "reference": "Normal critical values are a large-sample approximation and are too small "
                 "when b/T is not small; fixed-b values account for the bandwidth; EWC's t(B) "
                 "law is exact for Gaussian location models. 'auto' uses the law each "
                 "estimator's theory gives.",
    "level": "Confidence level for intervals; tests are two-sided at 1 - level.",
    "transform": "Adds a column: lag/lead p, first difference, log, log difference, or the "
                 "forward sum of the next h values (an overlapping h-period response, whose "
                 "errors are MA(h-1)).",
    "window": "Sample window over the time index (both ends included).",
    "headline": "All numbers assume a correctly specified linear model and stationary data; "
                "the p-value is only as good as the reference law and bandwidth behind it.",
}


def card(title: str, body, export=None, help_text: str | None = None, card_id=None, cls=""):
    head = [html.H3(title, className="lw-card-title")]
    if export:
        head.append(export)
    children = [html.Div(head, className="lw-card-head")]
    if help_text:
        children.append(html.P(help_text, className="lw-help"))
    children += body if isinstance(body, list) else [body]
    return html.Section(children, className=f"lw-card {cls}", **({"id": card_id} if card_id
                                                                  else {}))


def export_menu(target: str, formats) -> html.Div:
    return html.Div([html.Span("export", className="lw-export-label")] + [
        html.Button(fmt.upper() if fmt != "markdown" else "MD",
                    id={"type": "export", "target": target, "fmt": fmt}, n_clicks=0,
                    className="lw-export-btn", title=f"download as {fmt}")
        for fmt in formats], className="lw-export")


CHART_FORMATS = ("png", "svg", "pdf")
TABLE_FORMATS = ("csv", "markdown", "latex")


def graph(gid: str, height: int = 360):
    from .figures import empty_figure
    return dcc.Loading(dcc.Graph(
        id=gid, style={"height": f"{height}px"}, figure=empty_figure("computing...", height),
        config={"displaylogo": False, "toImageButtonOptions": {
            "format": "png", "filename": f"lagwise_{gid}", "scale": 2}}),
        type="dot", color="#0e6e64")


def param_control(spec_name: str, p: Param, value=None):
    """One control for an estimator parameter, chosen by the parameter's kind."""
    pid = {"type": "est-param", "name": p.name}
    value = p.default if value is None else value
    if p.kind == "choice":
        labels = {k: v.display_name for k, v in KERNELS.items()} if p.name == "kernel" else {}
        ctrl = dcc.Dropdown(id=pid, options=[{"label": labels.get(c, str(c)), "value": c}
                                             for c in p.choices], value=value, clearable=False)
    elif p.kind == "bool":
        ctrl = dcc.Checklist(id=pid, options=[{"label": " " + p.name.replace("_", " "),
                                               "value": "on"}],
                             value=["on"] if value else [], className="lw-check")
    elif p.kind in ("int", "int_or_rule"):
        opts = [{"label": "auto", "value": "auto"}] if p.kind == "int" else \
            [{"label": c, "value": c} for c in p.choices]
        lo = int(p.minimum or 0)
        opts += [{"label": str(i), "value": i} for i in
                 ([*range(lo, 13)] if p.kind == "int" else [2, 4, 6, 8, 10, 12, 16, 20, 24, 32,
                                                            48, 64])]
        ctrl = dcc.Dropdown(id=pid, options=opts, value="auto" if value is None else value,
                            clearable=False)
    else:
        ctrl = dcc.Input(id=pid, type="number", value=value, debounce=True)
    label = p.name.replace("_", " ") if p.kind != "bool" else None
    return html.Div([html.Label(label, className="lw-label") if label else None, ctrl,
                     html.P(p.help, className="lw-help")], className="lw-field")


def estimator_controls(name: str, values: dict | None = None):
    spec = ESTIMATORS[name]
    values = values or {}
    return [param_control(name, p, values.get(p.name)) for p in spec.params
            if p.kind != "bandwidth"] + [html.P(spec.assumptions, className="lw-help lw-assume")]


def sidebar(initial_horizon=None):
    return html.Aside([
        html.H2("Data & model", className="lw-side-title"),
        html.Div(dcc.Upload(id="upload", children=html.Div([
            html.Strong("Drop a CSV or Parquet file"), html.Span(" or click to choose")]),
            className="lw-upload", max_size=MAX_UPLOAD_BYTES, multiple=False),
            **{"data-max-bytes": str(MAX_UPLOAD_BYTES)}),
        html.Div(id="upload-limit-note", className="lw-message", role="alert"),
        html.P(HELP["upload"], className="lw-help"),
        html.Button("Use the demo data", id="load-demo", n_clicks=0, className="lw-btn-quiet"),
        dcc.Loading(html.Div(id="upload-message", className="lw-message"), type="dot",
                    color="#0e6e64"),
        html.Ul(id="load-report", className="lw-report"),
        html.Details([html.Summary("Preview and column summary"),
                      dash_table.DataTable(id="col-summary", page_size=12, **TABLE_STYLE),
                      dash_table.DataTable(id="preview", page_size=8, **TABLE_STYLE)],
                     className="lw-details"),
        html.Label("response", className="lw-label"),
        dcc.Dropdown(id="response", clearable=False),
        html.Label("regressors", className="lw-label"),
        dcc.Dropdown(id="regressors", multi=True),
        dcc.Checklist(id="intercept", options=[{"label": " intercept", "value": "on"}],
                      value=["on"], className="lw-check"),
        html.Details([
            html.Summary("Transforms"),
            html.P(HELP["transform"], className="lw-help"),
            html.Div([
                dcc.Dropdown(id="tf-kind", options=[{"label": k, "value": k} for k in TRANSFORMS],
                             value="fsum", clearable=False, className="lw-tf-kind"),
                dcc.Dropdown(id="tf-column", placeholder="column", className="lw-tf-col"),
                dcc.Input(id="tf-p", type="number", value=12, min=1, step=1,
                          className="lw-tf-p"),
                html.Button("add", id="tf-add", n_clicks=0, className="lw-btn")],
                className="lw-row"),
            html.Div(id="tf-message", className="lw-message")], className="lw-details",
            open=False),
        html.Label("overlap horizon h (periods summed by the response)", className="lw-label"),
        dcc.Input(id="horizon", type="number", min=1, step=1, debounce=True,
                  placeholder="none", className="lw-input", value=initial_horizon),
        html.Label("sample window", className="lw-label"),
        dcc.RangeSlider(id="window", min=0, max=1, step=1, value=[0, 1], allowCross=False,
                        marks=None, tooltip=None, className="lw-window"),
        html.Div(id="window-text", className="lw-help"),
        html.Div(id="fit-message", className="lw-message"),
        html.H2("Settings", className="lw-side-title"),
        html.Div([html.Button("save settings", id="save-settings", n_clicks=0,
                              className="lw-btn-quiet"),
                  dcc.Upload(id="load-settings", children=html.Span("load settings"),
                             className="lw-btn-quiet lw-upload-small", max_size=200_000)],
                 className="lw-row"),
        html.Div(id="settings-message", className="lw-message"),
    ], className="lw-sidebar")


def main_area():
    est_options = [{"label": s.display_name, "value": s.name} for s in ESTIMATORS.values()]
    return html.Main([
        html.Section([
            html.Div([html.Label("coefficient in focus", className="lw-label"),
                      dcc.Dropdown(id="focus", clearable=False, className="lw-focus")],
                     className="lw-headline-pick"),
            html.Div(id="headline", className="lw-headline-text"),
            html.P(HELP["headline"], className="lw-help")],
            className="lw-card lw-headline", id="headline-card"),
        card("Sensitivity", [html.Div([
            html.Div([
                graph("sens-graph", 400),
                html.Div([html.Label("show", className="lw-label"),
                          dcc.RadioItems(id="chart-mode", options=[
                              {"label": " t statistic", "value": "t"},
                              {"label": " standard error", "value": "se"},
                              {"label": " interval", "value": "ci"}],
                              value="t", inline=True, className="lw-radio")], className="lw-row"),
                html.Div(id="flip-text", className="lw-flip"),
            ], className="lw-chart-col"),
            html.Div([
                html.Div([
                    html.Label("bandwidth b", className="lw-label"),
                    dcc.Slider(id="bw-slider", min=1, max=60, step=1, value=13,
                               marks=None, updatemode="drag",
                               tooltip={"placement": "bottom", "always_visible": False}),
                    html.Div(id="bw-text", className="lw-bw-text"),
                    html.P(HELP["slider"], className="lw-help")], className="lw-slider-box"),
                html.Div([
                    html.Div([html.Label("estimator", className="lw-label"),
                              dcc.Dropdown(id="est-name", options=est_options, value="kernel",
                                           clearable=False)], className="lw-field"),
                    html.Div([html.Label("bandwidth rule", className="lw-label"),
                              dcc.Dropdown(id="bw-rule", options=RULE_OPTIONS, value="fixed",
                                           clearable=False),
                              html.P(HELP["rule"], className="lw-help")], className="lw-field"),
                ], className="lw-grid"),
                html.Div(id="est-params", className="lw-grid"),
                html.Div([
                    html.Div([html.Label("reference law", className="lw-label"),
                              dcc.Dropdown(id="reference", options=REFERENCE_OPTIONS,
                                           value="auto", clearable=False),
                              html.P(HELP["reference"], className="lw-help")],
                             className="lw-field"),
                    html.Div([html.Label("confidence level", className="lw-label"),
                              dcc.Dropdown(id="level", options=[
                                  {"label": f"{x:.0%}", "value": x} for x in (0.9, 0.95, 0.99)],
                                  value=0.95, clearable=False),
                              html.P(HELP["level"], className="lw-help")], className="lw-field"),
                ], className="lw-grid"),
            ], className="lw-control-col"),
        ], className="lw-sens")], export=export_menu("sens-graph", CHART_FORMATS)),
        html.Div([
            card("Coefficients", [html.Div(id="coef-caption", className="lw-caption"),
                                  dash_table.DataTable(id="coef-table", **TABLE_STYLE),
                                  html.Ul(id="coef-notes", className="lw-notes")],
                 export=export_menu("coef-table", TABLE_FORMATS)),
            card("Every estimator, coefficient in focus", [
                html.P("Shaded rows reach a different conclusion from the current choice; "
                       "hover an estimator for its notes.", className="lw-help"),
                dcc.Loading(dash_table.DataTable(id="compare-table", tooltip_duration=None,
                                                 **TABLE_STYLE),
                            type="dot", color="#0e6e64")],
                 export=export_menu("compare-table", TABLE_FORMATS)),
        ], className="lw-results"),
        card("Interval across estimators", [graph("interval-graph", 420)],
             export=export_menu("interval-graph", CHART_FORMATS)),
        html.H2("Residual diagnostics", className="lw-section-title"),
        html.Div(id="diag-reading", className="lw-reading"),
        html.Div([
            card("Residuals", [graph("resid-graph", 280)],
                 export=export_menu("resid-graph", CHART_FORMATS)),
            card("Autocorrelation", [graph("acf-graph", 280),
                                     html.P(id="acf-bands", className="lw-help")],
                 export=export_menu("acf-graph", CHART_FORMATS)),
            card("Variance against fit", [graph("scatter-graph", 280)],
                 export=export_menu("scatter-graph", CHART_FORMATS)),
            card("Moment contributions", [graph("score-graph", 280)],
                 export=export_menu("score-graph", CHART_FORMATS)),
        ], className="lw-diag-grid"),
        card("Diagnostic tests", [dash_table.DataTable(id="diag-table", page_size=30,
                                                       **TABLE_STYLE)],
             export=export_menu("diag-table", TABLE_FORMATS)),
        html.Div([html.Button("download an HTML report of this view", id="export-report",
                              n_clicks=0, className="lw-btn")], className="lw-report-row"),
    ], className="lw-main")


def build_layout(session: str, initial: dict):
    return html.Div([
        dcc.Store(id="session", data=session),
        dcc.Store(id="dataset-key", data=initial.get("dataset_key")),
        dcc.Store(id="fit-key"),
        dcc.Store(id="pending-settings", data=initial.get("settings")),
        dcc.Store(id="initial-spec", data=initial.get("spec")),
        dcc.Download(id="download"),
        html.Header([
            html.Div([html.Span("Lagwise", className="lw-brand"),
                      html.Span("does the t-statistic survive the lag choice?",
                                className="lw-tagline")]),
            html.Span("local session · 127.0.0.1", className="lw-badge")],
            className="lw-header"),
        html.Div([sidebar((initial.get("spec") or {}).get("horizon")), main_area()],
                 className="lw-body"),
    ], className="lw-page")
