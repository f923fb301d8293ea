"""Page structure of the local-projection mode: the sidebar section (response from the model
card, shock, controls, lags, horizons, long difference, the demo) and the result cards (the
impulse response with its bands, the table by horizon, where each horizon's conclusion flips,
every estimator's conclusion). The card helpers are handed in by app.layout, so this module
does not import it."""

from __future__ import annotations

from dash import dcc, html

from . import views as V

LP_HELP = (
    "One regression per horizon h = 0..H of the response h periods ahead on the shock today, "
    "with lags 1..p of the shock, the response and each control (the shock is ordered first: no "
    "control enters at t). The residual at horizon h is serially correlated by construction, so "
    "each band is a question about HAC: the chart shows the bands under the estimator chosen in "
    "the Sensitivity card (its slider moves every horizon's band), pointwise and simultaneous "
    "(sup-t) over the horizons.")
BAND_HELP = {
    "current": "the estimator, its options and its value from the Sensitivity card, applied to "
               "each horizon's own fit (a rule is applied to each horizon's fit)",
    "horizon-rule": "Bartlett with lags growing with the horizon: max(h, floor(4 (n_h/100)^(2/9))) "
                    "(common practice)",
    "lag-augmented": "one more lag of every variable, heteroskedasticity-robust (HC0) errors "
                     "without HAC (Montiel Olea & Plagborg-Moller 2021; valid when the lags go "
                     "beyond the order of the VAR generating the data)",
}

LP_COLUMNS = [V.column("horizon", "h", text=False, width=50),
              V.column("nobs", "n_h", text=False, width=60),
              V.column("estimate", "response", width=90),
              V.column("std_error", "std. error", width=90),
              V.column("t_stat", "t", width=70),
              V.column("tuning", "lags / B", text=False, width=80),
              V.column("pointwise", "pointwise", text=False, width=140),
              V.column("simultaneous", "sup-t", text=False, width=140),
              V.column("verdict", "beta_h = 0", text=False, width=165)]
LP_COMPARE_COLUMNS = [V.column("estimator", "estimator", text=False, left=True, width=300,
                               tooltip="assumes"),
                      V.column("significant_at", "significant at h", text=False, width=150),
                      V.column("stops_at", "stops at h", text=False, width=90),
                      V.column("simultaneous", "sup-t band excludes 0 at h", text=False,
                               width=170)]


def lp_sidebar():
    """The sidebar section that switches the mode on and specifies the projections."""
    return html.Details([
        html.Summary("Local projections (impulse responses)"),
        html.P("The response is the one chosen above; the regressors above are not used here.",
               className="lw-help"),
        dcc.Checklist(id="lp-on", options=[{"label": " show impulse responses by local "
                                                     "projections", "value": "on"}],
                      value=[], className="lw-check"),
        html.Label("shock (ordered first)", className="lw-label"),
        dcc.Dropdown(id="lp-shock", placeholder="choose the shock"),
        html.Label("controls (their lags enter)", className="lw-label"),
        dcc.Dropdown(id="lp-controls", multi=True, placeholder="none"),
        html.Div([
            html.Div([html.Label("lags p of every variable", className="lw-label"),
                      dcc.Input(id="lp-lags", type="number", min=0, max=24, step=1, value=1,
                                debounce=True, className="lw-input")], className="lw-field"),
            html.Div([html.Label("horizons H", className="lw-label"),
                      dcc.Input(id="lp-horizons", type="number", min=0, max=60, step=1,
                                value=12, debounce=True, className="lw-input")],
                     className="lw-field")], className="lw-grid"),
        dcc.Checklist(id="lp-cumulative", options=[
            {"label": " long difference y(t+h) - y(t-1) as the response", "value": "on"}],
            value=[], className="lw-check"),
        html.Button("Use the impulse-response demo", id="load-demo-lp", n_clicks=0,
                    className="lw-btn-quiet"),
        html.Div(id="lp-message", className="lw-message"),
    ], className="lw-details", id="lp-details")


def lp_cards(card, graph, grid, chart_formats, table_formats):
    """The result cards (hidden until the mode is on)."""
    paper = html.Div([html.Span("paper table", className="lw-export-label")] + [
        html.Button(label, id={"type": "export-lp", "target": "lp-paper", "fmt": fmt},
                    n_clicks=0, className="lw-export-btn")
        for fmt, label in (("latex", "LATEX"), ("markdown", "MD"), ("csv", "CSV"))]
        + [html.Button("SCRIPT", id={"type": "export-lp", "target": "lp-script", "fmt": "py"},
                       n_clicks=0, className="lw-export-btn",
                       title="a Python script reproducing these bands with the lagwise API")],
        className="lw-export")

    def table(gid, columns):
        # the cards start hidden: size the columns to the card whenever it is shown or resized
        g = grid(gid, columns, suppressColumnVirtualisation=True)
        g.columnSize = "responsiveSizeToFit"
        return g

    def menu(target, formats):
        return html.Div([html.Span("export", className="lw-export-label")] + [
            html.Button(f.upper() if f != "markdown" else "MD",
                        id={"type": "export-lp", "target": target, "fmt": f}, n_clicks=0,
                        className="lw-export-btn") for f in formats], className="lw-export")

    return html.Div([
        card("Impulse response by local projections", [
            html.P(LP_HELP, className="lw-help"),
            html.Div(id="lp-line", className="lw-caption"),
            graph("lp-graph", 420),
            html.Div([
                html.Div([html.Label("bands from", className="lw-label"),
                          dcc.RadioItems(id="lp-band-est", options=[
                              {"label": " the Sensitivity card's estimator", "value": "current",
                               "title": BAND_HELP["current"]},
                              {"label": " lags growing with h", "value": "horizon-rule",
                               "title": BAND_HELP["horizon-rule"]},
                              {"label": " lag-augmented HC0", "value": "lag-augmented",
                               "title": BAND_HELP["lag-augmented"]}],
                              value="current", className="lw-radio")], className="lw-field"),
                html.Div([html.Label("show", className="lw-label"),
                          dcc.Checklist(id="lp-show", options=[
                              {"label": " sup-t band (simultaneous over h)", "value": "supt"},
                              {"label": " every estimator's band", "value": "overlay"},
                              {"label": " cumulative response (sum over h)",
                               "value": "cumulative"}],
                              value=["supt"], className="lw-check")], className="lw-field"),
            ], className="lw-grid"),
            html.P(id="lp-assumes", className="lw-help lw-assume"),
            html.Ul(id="lp-reading", className="lw-reading-list"),
            table("lp-table", LP_COLUMNS),
            html.Ul(id="lp-notes", className="lw-notes")],
            export=html.Div([menu("lp-graph", chart_formats), menu("lp-table", table_formats)],
                            className="lw-row")),
        card("Where each horizon's conclusion changes", [
            html.P("Left: every horizon (rows) along the bandwidth b (columns) for the kernel "
                   "chosen in the Sensitivity card, shaded where the pointwise test rejects "
                   "beta_h = 0 (normal critical values); the dotted line is the slider's b. "
                   "Below: where the response is significant, and where it stops being "
                   "significant, under each estimator.", className="lw-help"),
            graph("lp-flip-graph", 360),
            table("lp-compare", LP_COMPARE_COLUMNS),
            html.Ul(id="lp-flip-notes", className="lw-notes")],
            export=html.Div([menu("lp-flip-graph", chart_formats),
                             menu("lp-compare", table_formats), paper], className="lw-row")),
        dcc.Store(id="lp-key"),
    ], id="lp-card", className="lw-results lw-lp", style={"display": "none"})
