"""Pure builders: engine results -> plotly figures and table records (no Dash, no browser)."""

from __future__ import annotations


import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

# Lagwise palette (assets/lagwise.css uses the same values)
INK = "#1d2733"
MUTED = "#6b7480"
PAPER = "#ffffff"
GRID = "#e7e4dc"
ACCENT = "#0e6e64"
WARN = "#b4541a"
FONT = "Liberation Sans, Helvetica Neue, Arial, sans-serif"
from ..engine.covariance.kernels import PALETTE  # noqa: E402 - the engine's palette for unnamed curves


def _base(fig: go.Figure, title: str, height: int = 360) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15, "color": INK}},
        font={"family": FONT, "size": 12, "color": INK}, paper_bgcolor=PAPER,
        plot_bgcolor=PAPER, height=height, margin={"l": 56, "r": 16, "t": 48, "b": 44},
        legend={"orientation": "h", "y": -0.2, "x": 0, "font": {"size": 11}},
        hoverlabel={"font": {"family": FONT}})
    fig.update_xaxes(gridcolor=GRID, zerolinecolor=GRID, linecolor=GRID)
    fig.update_yaxes(gridcolor=GRID, zerolinecolor="#c9c4b8", linecolor=GRID)
    return fig


def empty_figure(message: str, height: int = 300) -> go.Figure:
    """A placeholder; it carries one invisible shape so a later patch of shape 0 (the
    sensitivity chart's bandwidth marker) always has a target."""
    fig = go.Figure()
    fig.add_shape(type="line", x0=0, x1=0, y0=0, y1=0, line={"width": 0}, visible=False)
    fig.add_annotation(text=message, showarrow=False, x=0.5, y=0.5, xref="paper",
                       yref="paper", font={"color": MUTED, "size": 13})
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return _base(fig, "", height)


def _finite_range(values: np.ndarray, keep: np.ndarray):
    """A y range holding the informative points (keep) with a margin, or None."""
    v = values[keep & np.isfinite(values)]
    if v.size < 2:
        return None
    lo, hi = np.percentile(v, [1, 99]) if v.size > 20 else (v.min(), v.max())
    span = max(hi - lo, 1e-12)
    return [lo - 0.15 * span, hi + 0.15 * span]


def sensitivity_figure(sweep, term: str, mode: str = "t", level: float = 0.95,
                       reference: str = "normal", current: float | None = None,
                       current_curve: int | None = 0, marks=None,
                       reference_lines=None, horizon: int | None = None) -> go.Figure:
    """t statistic (mode "t"), standard error ("se") or interval ("ci") of `term` along the
    sweep's tuning axis, one line per curve; critical values under `reference` (a curve where
    they vary along the axis); automatic choices marked; the current value as the first layout
    shape (a slider move only patches its x). Points where S was repaired or is not PSD are
    drawn hollow, unavailable ones leave a gap, and the y axis keeps to the ordinary points.
    reference_lines: [(label, value)] horizontal lines (e.g. an estimator without an axis).
    horizon: an overlapping response's h; bandwidths whose lags fall short of h - 1 are shaded."""
    j = sweep.terms.index(term)
    cv = sweep.critical_values(level, reference, term)
    fig = go.Figure()
    x_cur = float(current) if current is not None else float(sweep.values[0])
    fig.add_shape(type="line", x0=x_cur, x1=x_cur, y0=0, y1=1, yref="paper",
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    shown = [_add_curve(fig, sweep, c, j, mode, cv, c == current_curve)
             for c in range(len(sweep.labels))]
    _add_critical_lines(fig, cv, mode, reference)
    if horizon and horizon > 1 and sweep.axis.symbol == "b" and sweep.values[0] <= horizon - 1:
        fig.add_vrect(x0=sweep.values[0], x1=horizon - 1, fillcolor="rgba(29,39,51,0.06)",
                      line_width=0, annotation_text=f"fewer than h - 1 = {horizon - 1} lags",
                      annotation_position="top left",
                      annotation_font={"size": 10, "color": MUTED})
    rng = _finite_range(np.concatenate([a for a, _ in shown]),
                        np.concatenate([k for _, k in shown]))
    rng = _add_reference_lines(fig, reference_lines or [], rng)
    if rng is not None:
        fig.update_yaxes(range=rng)
    _add_marks(fig, sweep, j, mode, cv, marks, rng)
    ylab = {"t": f"t statistic of {term}", "se": f"standard error of {term}",
            "estimate": f"estimate of {term}", "ci": f"{level:.0%} interval for {term}"}[mode]
    xlab = sweep.axis.title + (" (lags used = ceil(b) - 1 for finite kernels)"
                               if sweep.axis.symbol == "b" else "")
    fig.update_xaxes(title_text=xlab)
    fig.update_yaxes(title_text=ylab)
    what = "bandwidth" if sweep.axis.symbol == "b" else sweep.axis.title
    note = sweep.extras.get("chart_note")            # which estimator and S the curves show
    sub = f"<br><span style='font-size:11px;color:{MUTED}'>{note}</span>" if note else ""
    if "j_p_value" in sweep.extras and np.isfinite(sweep.extras["j_p_value"]).any():
        fig = _with_j_panel(fig, sweep, current_curve, xlab)
        return _top_room(_base(fig, f"How {term} and the J test depend on the {what}{sub}",
                               520), sub)
    return _top_room(_base(fig, f"How {term} depends on the {what}{sub}", 400), sub)


def _top_room(fig: go.Figure, sub: str) -> go.Figure:
    """Room above the plot for a title's second line."""
    if sub:
        fig.update_layout(margin={"t": 66})
    return fig


def _add_reference_lines(fig, lines, rng):
    """Horizontal lines for results without a tuning axis (e.g. clustered standard errors),
    labelled at the right; lines with the same value share a label. A line far outside the
    curves' range is named in a note at the top instead of squeezing the curves."""
    merged: dict = {}
    for label, value in lines:
        if np.isfinite(value):
            key = float(f"{value:.3g}")          # lines that read the same share a label
            merged.setdefault(key, []).append(label)
    if not merged:
        return rng
    lo, hi = rng if rng is not None else (min(merged), max(merged))
    span = max(hi - lo, 1e-12)
    off = []
    for n, (value, labels) in enumerate(sorted(merged.items())):
        text = "; ".join(labels)
        if not (lo - 0.6 * span <= value <= hi + 0.6 * span):
            off.append(text)
            continue
        lo, hi = min(lo, value - 0.05 * span), max(hi, value + 0.05 * span)
        fig.add_hline(y=value, line={"color": INK, "width": 1, "dash": "dot"})
        fig.add_annotation(x=1, xref="paper", y=value, showarrow=False, xanchor="right",
                           yanchor="bottom" if n % 2 == 0 else "top", text=text,
                           font={"size": 10, "color": INK}, bgcolor="rgba(255,255,255,0.8)")
    if off:
        fig.add_annotation(x=0, xref="paper", y=1, yref="paper", showarrow=False,
                           xanchor="left", yanchor="top", text="off the chart: " + "; ".join(off),
                           font={"size": 10, "color": MUTED}, bgcolor="rgba(255,255,255,0.8)")
    return [lo, hi]


def _with_j_panel(fig, sweep, current_curve, xlab):
    """The same chart above a second panel: the p-value of Hansen's J at each point."""
    out = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.7, 0.3],
                        vertical_spacing=0.08)
    for trace in fig.data:
        out.add_trace(trace, row=1, col=1)
    out.layout.shapes = fig.layout.shapes            # the current-value line stays shape 0
    out.layout.annotations = fig.layout.annotations
    out.update_yaxes(range=fig.layout.yaxis.range, title_text=fig.layout.yaxis.title.text,
                     row=1, col=1)
    p = sweep.extras["j_p_value"]
    for c in range(len(sweep.labels)):
        color, short, width = _curve_style(sweep, c, c == current_curve)
        out.add_trace(go.Scatter(x=sweep.values, y=p[c], mode="lines", name=f"{short}: J p",
                                 line={"color": color, "width": width}, showlegend=False,
                                 hovertemplate=f"{short}<br>%{{x}}<br>J p-value %{{y:.3f}}"
                                               "<extra></extra>"), row=2, col=1)
    out.add_hline(y=0.05, line={"color": MUTED, "width": 1, "dash": "dash"}, row=2, col=1)
    out.update_yaxes(title_text=f"J p-value ({sweep.extras['j_df']} df)", range=[0, 1],
                     row=2, col=1)
    out.update_xaxes(title_text=xlab, row=2, col=1)
    return out


def _curve_style(sweep, c, current: bool):
    """(colour, legend name, width) of a curve; a curve of another group than the first (the
    Fama-MacBeth curve of a panel sweep) is named by its group and drawn in ink."""
    from ..engine.covariance.kernels import KERNELS
    kern = KERNELS.get(sweep.estimators[c].params.get("kernel", ""))
    color = kern.color if kern else PALETTE[c % len(PALETTE)]
    short = (kern.short if kern else sweep.labels[c]) + sweep.extras.get("curve_suffix", "")
    groups = sweep.extras.get("curve_group")
    if groups and groups[c] != groups[0]:
        color, short = INK, f"{groups[c]} ({short})"
    return color, short, 3 if current else 1.6


def _curve_dash(sweep, c) -> str:
    groups = sweep.extras.get("curve_group")
    return "dashdot" if groups and groups[c] != groups[0] else "solid"


def _values(sweep, c, j, mode, cv):
    """What curve c shows for term j in `mode` (for "ci": the upper end of the interval)."""
    if mode == "se":
        return sweep.std_error[c, :, j]
    if mode == "estimate":
        return sweep.estimate[c, :, j]
    if mode == "ci":
        return sweep.estimate[c, :, j] + cv[c] * sweep.std_error[c, :, j]
    return sweep.t_stat[c, :, j]


def _add_curve(fig, sweep, c, j, mode, cv, current):
    """One curve (and its flagged points); returns (its y values, which are ordinary)."""
    from ..engine.inference.sweep import STATUS_TEXT
    color, short, width = _curve_style(sweep, c, current)
    x, se, est = sweep.values, sweep.std_error[c, :, j], sweep.estimate[c, :, j]
    odd = sweep.status[c] != ""
    if mode == "ci":
        y, y2 = est + cv[c] * se, est - cv[c] * se
        if current:
            fig.add_trace(go.Scatter(x=np.r_[x, x[::-1]], y=np.r_[y, y2[::-1]], fill="toself",
                                     fillcolor="rgba(29,39,51,0.08)", line={"width": 0},
                                     name=f"{short} interval", hoverinfo="skip"))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{short} upper",
                                 line={"color": color, "width": width}))
        fig.add_trace(go.Scatter(x=x, y=y2, mode="lines", name=f"{short} lower",
                                 line={"color": color, "width": width, "dash": "dash"},
                                 showlegend=False))
        return np.r_[y, y2], np.r_[~odd, ~odd]
    y = _values(sweep, c, j, mode, cv)
    fig.add_trace(go.Scatter(x=x, y=np.where(odd, np.nan, y), mode="lines", name=short,
                             line={"color": color, "width": width,
                                   "dash": _curve_dash(sweep, c)},
                             hovertemplate=f"{short}<br>{sweep.axis.symbol}=%{{x}}<br>%{{y:.3f}}"
                                           "<extra></extra>"))
    if odd.any():
        why = [STATUS_TEXT.get(s, "") + (f": {r}" if r else "")
               for s, r in zip(sweep.status[c][odd], sweep.reasons[c][odd])]
        fig.add_trace(go.Scatter(
            x=x[odd], y=y[odd], mode="markers", name=f"{short}: flagged points", customdata=why,
            marker={"symbol": "circle-open", "size": 7, "color": color},
            hovertemplate=f"{short}<br>{sweep.axis.symbol}=%{{x}}<br>%{{y:.3f}}<br>"
                          "%{customdata}<extra></extra>"))
    finite = np.isfinite(cv[c])
    if mode == "t" and finite.any() and np.ptp(cv[c][finite]) > 1e-9:
        for sign in (1, -1):
            fig.add_trace(go.Scatter(x=x, y=sign * cv[c], mode="lines",
                                     line={"color": color, "width": 1, "dash": "dash"},
                                     name=f"critical value ({short})", showlegend=sign == 1,
                                     hoverinfo="skip"))
    return y, ~odd


def _add_critical_lines(fig, cv, mode, reference):
    """One pair of horizontal lines when the critical value is the same everywhere."""
    if mode == "ci":
        fig.add_hline(y=0, line={"color": MUTED, "width": 1.2})
        return
    if mode != "t" or not np.isfinite(cv).any():
        return
    rows = [r[np.isfinite(r)] for r in cv if np.isfinite(r).any()]
    if any(np.ptp(r) > 1e-9 for r in rows):
        return
    value = float(rows[0][0])
    for sign in (1, -1):
        fig.add_hline(y=sign * value, line={"color": MUTED, "width": 1.2, "dash": "dash"})
    fig.add_annotation(x=1, xref="paper", y=value, showarrow=False, xanchor="right",
                       yanchor="bottom", text=f"±{value:.2f} ({reference} critical value)",
                       font={"size": 11, "color": MUTED})


#: For stacking rule labels: the plot's usual width in pixels and a label's width per character
#: at font size 10 (estimates: the chart is responsive, so overlap is judged approximately).
PLOT_PX, CHAR_PX = 560.0, 5.8


def _add_marks(fig, sweep, j, mode, cv, marks, rng=None):
    """Markers where automatic rules land: marks = [(curve index, title, value)]. Each label
    sits on a short leader line, below its marker in the upper half of the y range `rng` and
    above it otherwise (into the emptier half); labels that would overlap are stacked."""
    x = sweep.values
    points = []
    for c, title, value in marks or []:
        if value is None or not (x[0] <= value <= x[-1]):
            continue
        series = _values(sweep, c, j, mode, cv)
        ok = np.isfinite(series)
        if ok.sum() < 1:
            continue
        points.append((float(value), float(np.interp(value, x[ok], series[ok])), title))
    if not points:
        return
    span = max(float(x[-1] - x[0]), 1e-12)
    ys = [yv for _, yv, _ in points]
    lo, hi = rng if rng is not None else (min(ys), max(ys))
    height = max(hi - lo, 1e-12)
    middle = 0.5 * (lo + hi)
    # labels go into the emptier half: below markers in the upper half, above the others;
    # rows of labels at fixed heights (in data units) so labels of one row never overlap
    sides = {1: [p for p in points if p[1] > middle], -1: [p for p in points if p[1] <= middle]}
    for side, group in sides.items():
        if not group:
            continue
        start_y = (min(p[1] for p in group) - 0.12 * height) if side == 1 else \
            (max(p[1] for p in group) + 0.12 * height)
        ends: list[float] = []            # right edge (axis fraction) of the last label per row
        for value, yv, title in sorted(group):
            centre = (value - x[0]) / span
            half = (len(title) * CHAR_PX + 10) / (2 * PLOT_PX)
            level = next((r for r, end in enumerate(ends) if end < centre - half), len(ends))
            if level == len(ends):
                ends.append(0.0)
            ends[level] = centre + half
            fig.add_trace(go.Scatter(x=[value], y=[yv], mode="markers", name=title,
                                     hovertemplate=f"{title}: %{{x:.3g}}<extra></extra>",
                                     marker={"symbol": "diamond", "size": 10, "color": PAPER,
                                             "line": {"color": INK, "width": 1.5}},
                                     showlegend=False))
            fig.add_annotation(x=value, y=yv, text=title, showarrow=True, arrowhead=0,
                               arrowwidth=1, arrowcolor=MUTED, axref="x", ax=value, ayref="y",
                               ay=start_y - side * 0.08 * height * level,
                               font={"size": 10, "color": MUTED},
                               bgcolor="rgba(255,255,255,0.85)", borderpad=1)


def interval_figure(comp: pd.DataFrame, term: str, level: float) -> go.Figure:
    rows = comp[(comp.term == term) & comp.std_error.notna()].iloc[::-1]
    fig = go.Figure()
    colors = [INK if r else MUTED for r in rows.rejects]
    fig.add_trace(go.Scatter(
        x=rows.estimate, y=rows.estimator, mode="markers",
        marker={"color": colors, "size": 8},
        error_x={"type": "data", "symmetric": False, "array": rows.ci_high - rows.estimate,
                 "arrayminus": rows.estimate - rows.ci_low, "color": MUTED, "thickness": 1.5},
        hovertemplate="%{y}<br>[%{customdata[0]:.4g}, %{customdata[1]:.4g}]<extra></extra>",
        customdata=np.c_[rows.ci_low, rows.ci_high], showlegend=False))
    fig.add_vline(x=0, line={"color": INK, "width": 1})
    fig.update_xaxes(title_text=f"{level:.0%} interval for {term} (dark: excludes 0, grey: "
                     "includes 0)")
    return _base(fig, f"Interval for {term} across estimators", max(300, 26 * len(rows) + 90))


#: Charts of per-observation data show at most this many points; the browser holds every figure
#: it shows, and hundreds of thousands of points make every interaction slow.
MAX_POINTS = 4000


def envelope(y: np.ndarray, max_points: int = MAX_POINTS):
    """Indices keeping each bucket's minimum and maximum: the line's envelope is preserved."""
    n = len(y)
    if n <= max_points:
        return np.arange(n)
    buckets = np.array_split(np.arange(n), max_points // 2)
    keep = []
    for b in buckets:
        seg = y[b]
        keep += sorted({int(b[np.argmin(seg)]), int(b[np.argmax(seg)])})
    return np.array(keep)


def residual_chart(fit, kind: str | None) -> go.Figure:
    """The residual chart a model kind declares: over time ("series"), by period ("panel")."""
    if kind == "series":
        return residual_figure(fit)
    if kind == "panel":
        return panel_residual_figure(fit)
    return empty_figure("no residual chart for this kind of model")


def residual_figure(fit) -> go.Figure:
    fig = go.Figure()
    idx = envelope(fit.resid)
    x = fit.index[idx]
    x = x.astype(str) if not isinstance(fit.index, pd.DatetimeIndex) else x
    fig.add_trace(go.Scatter(x=x, y=fit.resid[idx], mode="lines",
                             line={"color": ACCENT, "width": 1}, name="residual"))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    fig.update_yaxes(title_text="residual")
    title = "Residuals over time"
    if len(idx) < fit.nobs:
        title += f" (min/max envelope of {fit.nobs:,} points)"
    return _base(fig, title, 280)


def acf_figure(report) -> go.Figure:
    titles = report.bands.get("titles", ("ACF of residuals", "ACF of squared residuals"))
    fig = make_subplots(rows=1, cols=2, subplot_titles=tuple(titles))
    for col, (name, band) in enumerate((("resid", "resid_band"), ("resid_sq", "resid_sq_band")),
                                       start=1):
        lags = report.acf.index.to_numpy()
        fig.add_trace(go.Bar(x=lags, y=report.acf[name], marker_color=ACCENT, name=name,
                             showlegend=False), row=1, col=col)
        fig.add_trace(go.Scatter(x=lags, y=report.acf[band], mode="lines",
                                 line={"color": WARN, "dash": "dash", "width": 1},
                                 name="95% band (Bartlett)", showlegend=col == 1), row=1, col=col)
        fig.add_trace(go.Scatter(x=lags, y=-report.acf[band], mode="lines",
                                 line={"color": WARN, "dash": "dash", "width": 1},
                                 showlegend=False), row=1, col=col)
        fig.update_xaxes(title_text="lag", row=1, col=col)
    return _base(fig, "", 280)


def fitted_scatter_figure(fit) -> go.Figure:
    n = fit.nobs
    idx = np.arange(n) if n <= MAX_POINTS else \
        np.sort(np.random.default_rng(0).choice(n, MAX_POINTS, replace=False))
    fig = go.Figure(go.Scatter(x=fit.fitted_values[idx], y=fit.resid[idx] ** 2, mode="markers",
                               marker={"color": ACCENT, "size": 5, "opacity": 0.6},
                               name="e^2"))
    fig.update_xaxes(title_text="fitted value")
    fig.update_yaxes(title_text="squared residual")
    title = "Squared residuals against fitted values"
    if n > MAX_POINTS:
        title += f" ({MAX_POINTS:,} of {n:,} points, random sample)"
    return _base(fig, title, 280)


def score_acf_figure(report) -> go.Figure:
    fig = go.Figure()
    palette = list(PALETTE)
    for i, term in enumerate(report.score_acf.columns):  # one line per moment
        fig.add_trace(go.Scatter(x=report.score_acf.index, y=report.score_acf[term],
                                 mode="lines+markers", name=term,
                                 line={"color": palette[i % len(palette)], "width": 1.5},
                                 marker={"size": 4}))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    fig.update_xaxes(title_text="lag")
    fig.update_yaxes(title_text=report.bands.get("score_axis", "autocorrelation of x_t e_t"))
    return _base(fig, report.bands.get(
        "score_title", "What HAC corrects for: autocorrelation of each moment contribution"), 280)


def panel_residual_figure(fit) -> go.Figure:
    """A panel's residuals by period: the cross-sectional mean and the 10-90% range."""
    p = fit.panel
    frame = pd.DataFrame({"t": p.time_codes, "e": fit.resid})
    g = frame.groupby("t").e
    stats = pd.DataFrame({"mean": g.mean(), "lo": g.quantile(0.1), "hi": g.quantile(0.9)})
    x = p.periods[stats.index.to_numpy()]
    x = x if isinstance(x, pd.DatetimeIndex) else x.astype(str)
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=np.r_[x, x[::-1]], y=np.r_[stats.hi, stats.lo[::-1]],
                             fill="toself", fillcolor="rgba(14,110,100,0.15)",
                             line={"width": 0}, name="10-90% across entities",
                             hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=x, y=stats["mean"], mode="lines",
                             line={"color": ACCENT, "width": 1.5}, name="mean across entities"))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    fig.update_yaxes(title_text="residual")
    return _base(fig, "Residuals by period (a common component moves the mean)", 280)


def horizon_figure(sweep, term: str, level: float) -> go.Figure:
    """The slope at every horizon h with each estimator's interval as a band."""
    frame = sweep.term(term)
    fig = go.Figure()
    if frame.empty:
        return empty_figure("no horizons to show")
    palette = [ACCENT, WARN, "#3b5b92", "#8a6d1d", "#7a3b69"]
    for i, label in enumerate(sweep.estimators):
        rows = frame[frame.estimator == label].sort_values("h")
        color = palette[i % len(palette)]
        rgb = tuple(int(color[k:k + 2], 16) for k in (1, 3, 5))
        ok = rows.ci_low.notna()
        fig.add_trace(go.Scatter(
            x=np.r_[rows.h[ok], rows.h[ok][::-1]], y=np.r_[rows.ci_high[ok], rows.ci_low[ok][::-1]],
            fill="toself", fillcolor=f"rgba({rgb[0]},{rgb[1]},{rgb[2]},0.08)",
            line={"color": color, "width": 1.5, "dash": ["solid", "dash", "dot"][i % 3]},
            name=f"{level:.0%} interval, {label}",
            hoverinfo="skip"))
    first = frame[frame.estimator == sweep.estimators[0]].sort_values("h")
    fig.add_trace(go.Scatter(x=first.h, y=first.estimate, mode="lines+markers", name="slope",
                             line={"color": INK, "width": 2}, marker={"size": 4},
                             hovertemplate="h = %{x}<br>slope %{y:.4g}<extra></extra>"))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    fig.update_xaxes(title_text="horizon h (periods summed by the response)")
    fig.update_yaxes(title_text=f"slope on {term}")
    return _base(fig, f"The slope on {term} at every horizon, with intervals", 380)


def size_figure(frame: pd.DataFrame, nominal: float, done: int, nobs: int) -> go.Figure:
    """Actual rejection rate of each nominal test (with its Monte Carlo interval) against the
    nominal rate: a rate above the nominal line over-rejects."""
    rows = frame.iloc[::-1]
    over = rows.ci_low > nominal
    under = rows.ci_high < nominal
    colors = [WARN if o else (ACCENT if u else INK) for o, u in zip(over, under)]
    fig = go.Figure(go.Scatter(
        x=rows.rejection_rate, y=rows.estimator, mode="markers",
        marker={"color": colors, "size": 9},
        error_x={"type": "data", "symmetric": False, "array": rows.ci_high - rows.rejection_rate,
                 "arrayminus": rows.rejection_rate - rows.ci_low, "color": MUTED,
                 "thickness": 1.5},
        customdata=np.c_[rows.ci_low, rows.ci_high, rows.size_adjusted_critical_value],
        hovertemplate="%{y}<br>rejects %{x:.3f} [%{customdata[0]:.3f}, %{customdata[1]:.3f}]"
                      "<br>size-adjusted |t| %{customdata[2]:.3f}<extra></extra>",
        showlegend=False))
    fig.add_vline(x=nominal, line={"color": INK, "width": 1.2, "dash": "dash"},
                  annotation_text=f"nominal {nominal:.0%}", annotation_position="top",
                  annotation_font={"size": 11, "color": INK})
    fig.update_xaxes(title_text="actual rejection rate of a true null (orange: above nominal "
                                "beyond Monte Carlo error; teal: below)", rangemode="tozero")
    return _base(fig, f"How often each nominal {nominal:.0%} test rejects a true null at "
                      f"T = {nobs} ({done} simulated samples)",
                 min(640, max(320, 24 * len(rows) + 110)))
