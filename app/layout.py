"""Page structure only. Estimator controls, the tuning slider and its rules are generated from
the engine's family registry."""

from __future__ import annotations

import dash_ag_grid as dag
from dash import dcc, html

from ..engine import FAMILIES, KERNELS, TRANSFORMS
from ..engine.models.iv import METHODS
from ..engine.covariance.registry import Param
from ..engine.laws.reference import REQUEST_LABELS, REQUESTS
from .state import MAX_UPLOAD_BYTES
from ..engine.data.reading import MAX_CELLS, MAX_COLUMNS, MAX_LINE_CHARS
from . import views
from .work import POLL_MS
from .projection_cards import lp_cards, lp_sidebar   # the local-projection mode

REFERENCE_OPTIONS = [{"label": REQUEST_LABELS[k], "value": k, "title": text}
                     for k, text in REQUESTS.items()]
#: The picker's first family before a model exists: the first registered family with a tuning
#: axis (a fitted model's kind then chooses its own).
DEFAULT_FAMILY = next(f.name for f in FAMILIES.values() if f.axis is not None)
DEFAULT_RULE = "andrews"
HELP = {
    "upload": f"CSV (comma, semicolon, tab or pipe; decimal commas and thousands separators "
              f"are recognised) or Parquet, up to {MAX_UPLOAD_BYTES // 2**20} MB, "
              f"{MAX_COLUMNS} columns, {MAX_LINE_CHARS:,} characters in a row and "
              f"{MAX_CELLS // 1_000_000} million cells (rows x columns, after decompression). A "
              "date column is used as the time index.",
    "rule": "How the value is chosen. Rules of thumb are common practice, not optimal; the "
            "Andrews and Newey-West plug-ins aim at the mean squared error of the variance "
            "estimate, not at the size of the test. With a rule chosen the slider shows where "
            "it landed; moving the slider switches to a value set by hand.",
    "reference": "Normal critical values are a large-sample approximation and are too small "
                 "when b/T is not small; fixed-b values account for the bandwidth; EWC's t(B) "
                 "law is exact for Gaussian location models. 'auto' uses the law each "
                 "estimator's theory gives.",
    "level": "Confidence level for intervals; tests are two-sided at 1 - level.",
    "transform": "Adds a column: lag/lead p, first difference, log, log difference, or the "
                 "sum of the next h values (an overlapping h-period response, whose errors are "
                 "MA(h-1)).",
    "window": "Sample window over the time index, or over the periods of a panel (both ends "
              "included).",
    "iv": "Mark regressors as endogenous and choose excluded instruments (the exogenous "
          "regressors instrument themselves). Two-step, iterated and continuously updated GMM "
          "weight the moments by the estimator chosen in the Sensitivity card, so the estimate "
          "itself moves with the kernel and bandwidth.",
    "panel": "A stacked panel has one row per entity (a firm, a fund) and period. Choose both "
             "columns to fit a panel: the estimators then include clustering by entity, by time "
             "or both, Driscoll-Kraay (a kernel over periods applied to the per-period sums) and "
             "Fama-MacBeth, side by side. Fixed effects are removed by demeaning (the intercept "
             "is then absorbed; the degrees of freedom they use are stated). The sample window "
             "runs over periods.",
    "persistence": "A persistent predictor whose innovations are correlated with the "
                   "response's errors biases the least-squares slope in small samples and "
                   "distorts its t test whatever the kernel. The reduced-bias slope corrects "
                   "the bias; IVX tests no predictability validly whether the predictor is "
                   "stationary, near a unit root or integrated. The chart fits the regression "
                   "at every horizon from the one-period series.",
    "size": "Simulates data like yours under beta = 0 for the coefficient in focus, at your T, "
            "and counts how often each estimator's nominal test rejects: from a VAR of the "
            "regressors and the estimated errors (the errors not predicted by past regressors), "
            "or by resampling blocks of the data. An overlapping response keeps its overlap. "
            "Each run is seeded, so it repeats exactly; the Monte Carlo interval says how "
            "precise each rate is. The simulation is only as close to your data as its model.",
    "clusters": "With few clusters, or clusters of very unequal size or leverage, the usual "
                "clustered t statistic (CR1 referred to t(G - 1)) rejects too often. CR2 "
                "(Bell & McCaffrey's bias-reduced linearisation) with its own degrees of freedom "
                "per coefficient, CR3 (the cluster jackknife) and the wild cluster bootstrap "
                "keep closer to their nominal level. Rules of thumb (30 clusters) are common "
                "practice, not tests. Text columns of the file are offered as groupings.",
    "headline": "All numbers assume a correctly specified linear model and stationary data; "
                "the p-value is only as good as the reference law and bandwidth behind it. "
                "Choose the estimator before looking at the results, and report the range "
                "the sensitivity chart shows.",
}
#: Sidebar sections and main-area cards of optional modes: builders (no arguments) that modules
#: register at import (app/factors.py: the factor-model mode); called on every page build.
SIDEBAR_EXTRAS: list = []
MAIN_EXTRAS: list = []
CHART_FORMATS = ("png", "svg", "pdf")
TABLE_FORMATS = ("csv", "markdown", "latex")


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


def export_menu(target: str, formats, copy: bool = False) -> html.Div:
    items = [html.Span("export", className="lw-export-label")] + [
        html.Button(fmt.upper() if fmt != "markdown" else "MD",
                    id={"type": "export", "target": target, "fmt": fmt}, n_clicks=0,
                    className="lw-export-btn", title=f"download as {fmt}")
        for fmt in formats]
    if copy:
        items.append(dcc.Clipboard(id={"type": "copy", "target": target},
                                   title="copy the table (tab-separated) to the clipboard",
                                   className="lw-export-btn lw-copy"))
    return html.Div(items, className="lw-export")


#: Spinners of cards a slider press updates show only when an update takes longer than this
#: (a spinner shown and hidden on every press costs the page a style and layout pass).
LOADING_DELAY_MS = 300


def graph(gid: str, height: int = 360):
    """A chart that reserves `height` pixels while computing and then takes the height of its
    figure (a comparison of many estimators or a chart with a J panel is taller)."""
    from .figures import empty_figure
    return dcc.Loading(dcc.Graph(
        id=gid, style={"minHeight": f"{height}px"}, figure=empty_figure("computing...", height),
        config={"displaylogo": False, "toImageButtonOptions": {
            "format": "png", "filename": f"lagwise_{gid}", "scale": 2}}),
        type="dot", color="#0e6e64", delay_show=LOADING_DELAY_MS)


def grid(gid: str, columns: list[dict], height: str | None = None, **grid_options):
    """An AG Grid table: sortable, resizable columns, selectable text, rows in DOM order."""
    options = {"ensureDomOrder": True, "enableCellTextSelection": True, "tooltipShowDelay": 150,
               "suppressCellFocus": True, **grid_options}
    if height is None:
        options["domLayout"] = "autoHeight"
    return dag.AgGrid(id=gid, columnDefs=columns, rowData=[], columnSize="sizeToFit",
                      defaultColDef={"sortable": True, "resizable": True, "minWidth": 60,
                                     "wrapHeaderText": True, "autoHeaderHeight": True},
                      dashGridOptions=options, className="ag-theme-quartz lw-grid-table",
                      style={"height": height} if height else {"width": "100%"},
                      getRowStyle=views.DIFFERS_STYLE)


def param_control(p: Param, value=None):
    """One control for an estimator parameter, chosen by the parameter's kind."""
    pid = {"type": "est-param", "name": p.name}
    value = p.default if value is None else value
    if p.kind in ("choice", "kernel", "grouping"):
        labels = {k: v.label for k, v in KERNELS.items()} if p.kind == "kernel" else {}
        ctrl = dcc.Dropdown(id=pid, options=[{"label": labels.get(c, str(c)), "value": c,
                                              "title": labels.get(c, str(c))}
                                             for c in p.options], value=value, clearable=False)
    elif p.kind == "bool":
        ctrl = dcc.Checklist(id=pid, options=[{"label": " " + (p.title or p.name), "value": "on"}],
                             value=["on"] if value else [], className="lw-check")
    elif p.kind in ("int", "int_or_rule"):
        opts = [{"label": "automatic", "value": "auto"}] if p.kind == "int" else \
            [{"label": c, "value": c} for c in p.choices]
        lo = int(p.minimum or 0)
        opts += [{"label": str(i), "value": i} for i in range(lo, 25)]
        ctrl = dcc.Dropdown(id=pid, options=opts, value="auto" if value is None else value,
                            clearable=False)
    else:
        ctrl = dcc.Input(id=pid, type="number", value=value, debounce=True)
    label = (p.title or p.name.replace("_", " ")) if p.kind != "bool" else None
    return html.Div([html.Label(label, className="lw-label") if label else None, ctrl,
                     html.P(p.help, className="lw-help")], className="lw-field")


def estimator_controls(name: str, values: dict | None = None):
    """Controls of a family's parameters, except those its tuning axis sets."""
    family = FAMILIES[name]
    values = values or {}
    skip = family.axis.controlled if family.axis else set()
    return [param_control(p, values.get(p.name)) for p in family.params
            if p.name not in skip and p.kind != "bandwidth"] \
        + [html.P(family.assumptions, className="lw-help lw-assume")]


def rule_options(name: str) -> list[dict]:
    family = FAMILIES[name]
    if family.axis is None:
        return [{"label": "no tuning value", "value": "fixed"}]
    return [{"label": f"set by hand ({family.axis.symbol} on the slider)", "value": "fixed",
             "title": f"set by hand ({family.axis.symbol} on the slider)"}] + [
        {"label": title, "value": key, "title": title}
        for key, (title, _) in family.axis.rules.items()]


def _model_sections() -> list:
    """The folding sections of the sidebar: panel, instruments, transforms."""
    return [
        html.Details([
            html.Summary("Panel (entity by time)"),
            html.P(HELP["panel"], className="lw-help"),
            html.Label("entity column", className="lw-label"),
            dcc.Dropdown(id="entity", placeholder="none: one time series"),
            html.Label("time column", className="lw-label"),
            dcc.Dropdown(id="time-col", placeholder="none"),
            dcc.Checklist(id="effects", options=[
                {"label": " entity fixed effects", "value": "entity"},
                {"label": " time fixed effects", "value": "time"}], value=[],
                className="lw-check")],
            className="lw-details", id="panel-details"),
        html.Details([
            html.Summary("Instruments (IV / GMM)"),
            html.P(HELP["iv"], className="lw-help"),
            html.Label("endogenous regressors", className="lw-label"),
            dcc.Dropdown(id="endogenous", multi=True, placeholder="none: least squares"),
            html.Label("excluded instruments", className="lw-label"),
            dcc.Dropdown(id="instruments", multi=True),
            html.Label("estimation", className="lw-label"),
            dcc.Dropdown(id="iv-method", options=[{"label": v.split(" (")[0], "value": k,
                                                   "title": v} for k, v in METHODS.items()],
                         value="2sls", clearable=False)],
            className="lw-details", id="iv-details"),
        html.Details([
            html.Summary("Transforms"),
            html.P(HELP["transform"], className="lw-help"),
            html.Div([
                dcc.Dropdown(id="tf-kind", options=[{"label": text, "value": k, "title": text}
                                                    for k, text in views.TRANSFORM_TITLES.items()
                                                    if k in TRANSFORMS],
                             value="sum-next", clearable=False, className="lw-tf-kind"),
                dcc.Dropdown(id="tf-column", placeholder="column", className="lw-tf-col"),
                dcc.Input(id="tf-p", type="number", value=12, min=1, step=1,
                          className="lw-tf-p"),
                html.Button("add", id="tf-add", n_clicks=0, className="lw-btn")],
                className="lw-row"),
            html.Div(id="tf-message", className="lw-message")], className="lw-details",
            open=False),
    ]


def sidebar(initial_horizon=None, where: str = "this computer"):
    return html.Aside([
        html.H2("Data & model", className="lw-side-title"),
        html.Div(dcc.Upload(id="upload", children=html.Div([
            html.Strong("Drop a CSV or Parquet file"), html.Span(" or click to choose")]),
            className="lw-upload", max_size=MAX_UPLOAD_BYTES, multiple=False),
            **{"data-max-bytes": str(MAX_UPLOAD_BYTES)}),
        html.Div(id="upload-limit-note", className="lw-message", role="alert"),
        html.P(HELP["upload"] + f" The file goes to the Lagwise server on {where}.",
               className="lw-help", id="upload-help"),
        html.Div([html.Button("Use the demo data", id="load-demo", n_clicks=0,
                              className="lw-btn-quiet"),
                  html.Button("Use the panel demo", id="load-demo-panel", n_clicks=0,
                              className="lw-btn-quiet"),
                  html.Button("Use the few-cluster demo", id="load-demo-few", n_clicks=0,
                              className="lw-btn-quiet",
                              title="a simulated panel of firms in 14 regions of very unequal "
                                    "size")], className="lw-row"),
        dcc.Loading(html.Div(id="upload-message", className="lw-message"), type="dot",
                    color="#0e6e64"),
        html.Ul(id="load-report", className="lw-report"),
        html.Details([html.Summary("Preview and column summary"),
                      grid("col-summary", views.SUMMARY_COLUMNS),
                      grid("preview", [], height="260px")],
                     className="lw-details"),
        html.Label("response", className="lw-label"),
        dcc.Dropdown(id="response", clearable=False),
        html.Label("regressors", className="lw-label"),
        dcc.Dropdown(id="regressors", multi=True),
        dcc.Checklist(id="intercept", options=[{"label": " intercept", "value": "on"}],
                      value=["on"], className="lw-check"),
        *_model_sections(),
        lp_sidebar(),
        *[build() for build in SIDEBAR_EXTRAS],
        html.Label("overlap horizon h (periods summed by the response)", className="lw-label"),
        dcc.Input(id="horizon", type="number", min=1, step=1, debounce=True,
                  placeholder="none", className="lw-input", value=initial_horizon),
        html.Label("one-period series (its sum over the next h periods is the response)",
                   className="lw-label"),
        dcc.Dropdown(id="one-period", placeholder="not known", className="lw-input"),
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


def sensitivity_card():
    est_options = [{"label": f.title, "value": f.name, "title": f.title}
                   for f in FAMILIES.values()]
    chart = html.Div([
        graph("sens-graph", 460),
        html.Div([html.Label("show", className="lw-label"),
                  dcc.RadioItems(id="chart-mode", options=[
                      {"label": " t statistic", "value": "t"},
                      {"label": " standard error", "value": "se"},
                      {"label": " interval", "value": "ci"}],
                      value="t", inline=True, className="lw-radio")], className="lw-row"),
        html.P("Kernels that are not positive semi-definite by construction (truncated, "
               "Tukey-Hanning) start hidden: click their names in the legend to show them. "
               "Triangles at the edge mark points beyond the vertical range.",
               className="lw-help"),
        graph("flip-graph", 220),
        html.Div(id="flip-summary", className="lw-flip-summary", **{"aria-live": "polite"}),
        html.Details([html.Summary("every change of conclusion, curve by curve"),
                      html.Div(id="flip-text", className="lw-flip")], className="lw-details"),
    ], className="lw-chart-col")
    controls = html.Div([
        html.Div([
            html.Label(id="tune-title", children="bandwidth b", className="lw-label"),
            dcc.Slider(id="tune-slider", min=1, max=60, step=1, value=13, marks=None,
                       updatemode="drag",
                       tooltip={"placement": "bottom", "always_visible": False}),
            html.Div(id="tune-text", className="lw-bw-text"),
            html.P(id="tune-help", className="lw-help")], className="lw-slider-box"),
        html.Div([
            html.Div([html.Label("estimator", className="lw-label"),
                      dcc.Dropdown(id="est-name", options=est_options, value=DEFAULT_FAMILY,
                                   clearable=False)], className="lw-field"),
            html.Div([html.Label("value chosen by", className="lw-label"),
                      dcc.Dropdown(id="tune-rule", options=rule_options(DEFAULT_FAMILY),
                                   value=DEFAULT_RULE, clearable=False),
                      html.P(HELP["rule"], className="lw-help")], className="lw-field"),
        ], className="lw-grid"),
        html.Div(estimator_controls(DEFAULT_FAMILY), id="est-params", className="lw-grid"),
        html.Div([
            html.Div([html.Label("reference law", className="lw-label"),
                      dcc.Dropdown(id="reference", options=REFERENCE_OPTIONS,
                                   value="auto", clearable=False),
                      html.P(HELP["reference"], className="lw-help")],
                     className="lw-field lw-wide"),
            html.Div([html.Label("confidence level", className="lw-label"),
                      dcc.Dropdown(id="level", options=[
                          {"label": f"{x:.0%}", "value": x} for x in (0.9, 0.95, 0.99)],
                          value=0.95, clearable=False),
                      html.P(HELP["level"], className="lw-help")], className="lw-field"),
        ], className="lw-grid"),
    ], className="lw-control-col")
    return card("Sensitivity", [html.Div([chart, controls], className="lw-sens")],
                export=export_menu("sens-graph", CHART_FORMATS))


def few_clusters_card():
    """Few clusters: the cluster summary, CR1/CR2/CR3 with their degrees of freedom, and the
    wild cluster bootstrap on request (shown for fits that offer groupings; app/clusters.py)."""
    buttons = html.Div([html.Span("table", className="lw-export-label")] + [
        html.Button(f.upper() if f != "markdown" else "MD", id={"type": "export-fc", "fmt": f},
                    n_clicks=0, className="lw-export-btn") for f in TABLE_FORMATS],
        className="lw-export")
    boot = html.Div([
        html.Div([
            html.Div([html.Label("replications", className="lw-label"),
                      dcc.Dropdown(id="fc-reps", options=[
                          {"label": f"{n:,}", "value": n} for n in (999, 9999, 99999)],
                          value=9999, clearable=False)], className="lw-field"),
            html.Div([html.Label("weights", className="lw-label"),
                      dcc.Dropdown(id="fc-weights", options=[
                          {"label": "Rademacher (+-1)", "value": "rademacher"},
                          {"label": "Webb (six points)", "value": "webb"},
                          {"label": "Mammen (two points)", "value": "mammen"}],
                          value="rademacher", clearable=False)], className="lw-field"),
            html.Div([html.Label("null value", className="lw-label"),
                      dcc.Input(id="fc-null", type="number", value=0, debounce=True,
                                className="lw-input")], className="lw-field")],
            className="lw-grid"),
        html.Div([html.Button("run the wild cluster bootstrap", id="fc-boot-run", n_clicks=0,
                              className="lw-btn"),
                  html.Button("cancel", id="fc-boot-cancel", n_clicks=0, disabled=True,
                              className="lw-btn-quiet")], className="lw-row"),
        html.Progress(id="fc-boot-progress", value="0", max="1", className="lw-progress"),
        html.Div(id="fc-boot-progress-text", className="lw-help", **{"aria-live": "polite"}),
        html.Div(id="fc-boot-status", className="lw-message"),
        html.Div(id="fc-boot-result", className="lw-reading"),
        dcc.Store(id="fc-boot-job"), dcc.Store(id="fc-boot-data")])
    return html.Div(card("Few clusters: can the clustered t be trusted?", [
        html.P(HELP["clusters"], className="lw-help"),
        html.Div([html.Label("cluster by", className="lw-label"),
                  dcc.Dropdown(id="fc-by", clearable=False)], className="lw-field"),
        html.Ul(id="fc-reading", className="lw-reading-list"),
        html.Div(id="fc-facts", className="lw-help"),
        dcc.Loading(grid("fc-table", views.CLUSTER_COLUMNS, suppressColumnVirtualisation=True),
                    type="dot", color="#0e6e64"),
        html.Ul(id="fc-notes", className="lw-notes"),
        html.H4("Wild cluster bootstrap of the coefficient in focus", className="lw-subtitle"),
        boot], export=buttons), id="fc-card", style={"display": "none"})


def strength_card():
    """Instrument strength and specification (shown for IV / GMM fits)."""
    return html.Div(card("Instruments: strength and specification", [
        html.P("First-stage strength and the J test use the estimator of S chosen above. "
               "Rules of thumb are common practice, not tests with a known size; the "
               "Anderson-Rubin set is valid however weak the instruments are.",
               className="lw-help"),
        grid("first-stage-table", views.FIRST_STAGE_COLUMNS),
        html.Ul(id="strength-list", className="lw-reading-list"),
        grid("spec-table", views.SPEC_COLUMNS),
        html.Div(id="ar-text", className="lw-reading")],
        export=export_menu("spec-table", TABLE_FORMATS, copy=True)),
        id="strength-card", style={"display": "none"})


def predictive_cards():
    """Persistence and horizon (shown for overlapping responses and persistent predictors)."""
    return html.Div([
        card("Persistence of the predictor", [
            html.P(HELP["persistence"], className="lw-help"),
            grid("persistence-table", views.PERSIST_COLUMNS),
            html.Ul(id="persistence-reading", className="lw-reading-list")],
            export=export_menu("persistence-table", TABLE_FORMATS, copy=True)),
        card("Slope across horizons", [graph("horizon-graph", 380),
                                       html.Ul(id="horizon-notes", className="lw-notes")],
             export=export_menu("horizon-graph", CHART_FORMATS)),
    ], id="predictive-card", className="lw-results", style={"display": "none"})


def memo_card():
    """A robustness table for a memo or paper: specifications by estimators."""
    buttons = [html.Button(label, id={"type": "export-memo", "fmt": fmt}, n_clicks=0,
                           className="lw-export-btn")
               for fmt, label in (("latex", "LATEX"), ("markdown", "MD"), ("html", "HTML"),
                                  ("xlsx", "XLSX"))]
    return card("Memo table", [
        html.P("Add specifications as you go (each is the model on screen when you add it), "
               "choose estimators and the statistic shown beneath each estimate; the notes "
               "state every convention.", className="lw-help"),
        html.Div([html.Button("add this specification", id="memo-add", n_clicks=0,
                              className="lw-btn"),
                  html.Button("clear", id="memo-clear", n_clicks=0,
                              className="lw-btn-quiet")], className="lw-row"),
        html.Div(id="memo-message", className="lw-message"),
        html.Div([
            html.Div([html.Label("estimators (columns)", className="lw-label"),
                      dcc.Dropdown(id="memo-ests", multi=True)], className="lw-field"),
            html.Div([html.Label("beneath each estimate", className="lw-label"),
                      dcc.RadioItems(id="memo-show", options=[
                          {"label": " standard error", "value": "std_error"},
                          {"label": " t", "value": "t"}, {"label": " p", "value": "p"},
                          {"label": " interval", "value": "interval"}],
                          value="std_error", inline=True, className="lw-radio")],
                     className="lw-field")], className="lw-grid"),
        html.Div(id="memo-preview", className="lw-memo"),
        dcc.Store(id="memo-specs", data=[])],
        export=html.Div([html.Span("export", className="lw-export-label")] + buttons,
                        className="lw-export"), card_id="memo-card")


def size_card():
    return card("Size at this sample", [
        html.P(HELP["size"], className="lw-help"),
        html.Div([
            html.Div([html.Label("replications", className="lw-label"),
                      dcc.Dropdown(id="size-reps", options=[
                          {"label": str(n), "value": n} for n in (200, 500, 1000, 2000)],
                          value=500, clearable=False)], className="lw-field"),
            html.Div([html.Label("simulated from", className="lw-label"),
                      dcc.Dropdown(id="size-method", options=[
                          {"label": "a VAR of the regressors and errors", "value": "var",
                           "title": "a VAR of the regressors and errors"},
                          {"label": "blocks of the data", "value": "block",
                           "title": "blocks of the data"}],
                          value="var", clearable=False)], className="lw-field"),
        ], className="lw-grid"),
        html.Div([html.Button("run the size check", id="size-run", n_clicks=0,
                              className="lw-btn"),
                  html.Button("cancel", id="size-cancel", n_clicks=0, disabled=True,
                              className="lw-btn-quiet")], className="lw-row"),
        html.Progress(id="size-progress", value="0", max="1", className="lw-progress"),
        html.Div(id="size-progress-text", className="lw-help", **{"aria-live": "polite"}),
        html.Div(id="size-status", className="lw-message"),
        html.Div([graph("size-graph", 320), grid("size-table", views.SIZE_COLUMNS)],
                 id="size-results", style={"display": "none"}),
        dcc.Store(id="size-job"), dcc.Store(id="size-data")],
        export=html.Div([export_menu("size-graph", CHART_FORMATS),
                         html.Div([html.Span("table", className="lw-export-label")] + [
                             html.Button(f.upper() if f != "markdown" else "MD",
                                         id={"type": "export-size", "fmt": f}, n_clicks=0,
                                         className="lw-export-btn")
                             for f in TABLE_FORMATS], className="lw-export")],
            className="lw-row"),
        card_id="size-card")


def main_area():
    return html.Main([
        html.Section([
            html.Div(id="model-line", className="lw-model-line"),
            html.Div([html.Label("coefficient in focus", className="lw-label"),
                      dcc.Dropdown(id="focus", clearable=False, className="lw-focus")],
                     className="lw-headline-pick"),
            html.Div([html.Div(id="answer-line", className="lw-answer",
                               **{"aria-live": "polite"}),
                      html.Div(id="headline", className="lw-headline-text",
                               **{"aria-live": "polite"})], className="lw-headline-main"),
            html.P(HELP["headline"], className="lw-help")],
            className="lw-card lw-headline", id="headline-card"),
        *[build() for build in MAIN_EXTRAS],
        sensitivity_card(),
        lp_cards(card, graph, grid, CHART_FORMATS, TABLE_FORMATS),
        html.Div([
            card("Coefficients", [html.Div(id="coef-model", className="lw-model-line"),
                                  html.Div(id="coef-caption", className="lw-caption"),
                                  grid("coef-table", views.COEF_COLUMNS),
                                  html.Ul(id="coef-notes", className="lw-notes")],
                 export=export_menu("coef-table", TABLE_FORMATS, copy=True)),
            card("Every estimator, coefficient in focus", [
                html.P("Shaded rows reach a different conclusion from the current choice; "
                       "hover an estimator for its notes. A different conclusion is not an "
                       "error of either estimator: it shows how much the answer depends on "
                       "the choice.", className="lw-help"),
                # a slider press answers in well under the delay: no spinner toggled per press
                dcc.Loading(grid("compare-table", views.COMPARE_COLUMNS),
                            type="dot", color="#0e6e64", delay_show=LOADING_DELAY_MS)],
                 export=export_menu("compare-table", TABLE_FORMATS, copy=True)),
        ], className="lw-results"),
        few_clusters_card(),
        strength_card(),
        predictive_cards(),
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
        card("Diagnostic tests", [grid("diag-table", views.DIAG_COLUMNS)],
             export=export_menu("diag-table", TABLE_FORMATS, copy=True)),
        size_card(),
        memo_card(),
        html.Div([html.Button("download an HTML report of this view", id="export-report",
                              n_clicks=0, className="lw-btn",
                              title="everything computed for this view in one file: the model, "
                                    "the answer, the charts, tables and readings"),
                  html.Button("download a Python script of this view", id="export-script",
                              n_clicks=0, className="lw-btn",
                              title="a short script using the lagwise API that reproduces "
                                    "the coefficient table")],
                 className="lw-report-row lw-row"),
    ], className="lw-main")


def build_layout(session: str, initial: dict, where: str = "this computer", badge: str = ""):
    spec = initial.get("spec") or {}
    return html.Div([
        dcc.Store(id="session", data=session),
        dcc.Store(id="dataset-key", data=initial.get("dataset_key")),
        dcc.Store(id="fit-key", data=initial.get("fit_key")),
        dcc.Store(id="compare-shown"),
        # the slider, passed on in the page only to the cards the current model has (see
        # app.callbacks.on_fit_cards): a press on a plain regression sends one request
        dcc.Store(id="fit-cards", data=[]), dcc.Store(id="slider-iv"),
        dcc.Store(id="slider-fm"), dcc.Store(id="slider-lp"),
        dcc.Store(id="pending-settings", data=initial.get("settings")),
        dcc.Store(id="initial-spec", data=spec),
        dcc.Download(id="download"),
        html.Header([
            html.Div([html.Span("Lagwise", className="lw-brand"),
                      html.Span("does the t-statistic survive the lag choice?",
                                className="lw-tagline")]),
            html.Span(badge, className="lw-badge", id="badge")],
            className="lw-header"),
        html.Div(initial.get("message") or "", id="page-message", className="lw-message"),
        html.Div([sidebar(spec.get("horizon"), where), main_area()], className="lw-body"),
        # progress of steps that take more than a moment (see app/work.py)
        dcc.Interval(id="work-poll", interval=POLL_MS, disabled=True, n_intervals=0),
        html.Div(id="work-strip", className="lw-work lw-hidden", role="status",
                 **{"aria-live": "polite"}),
    ], className="lw-page")
