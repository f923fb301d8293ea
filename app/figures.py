"""Pure builders: engine results -> plotly figures and table records (no Dash, no browser)."""

from __future__ import annotations

import math

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
KERNEL_COLORS = {"bartlett": "#0e6e64", "parzen": "#3d5a98", "quadratic_spectral": "#8a4f9e",
                 "tukey_hanning": "#b4541a", "truncated": "#7a8a3a"}
FONT = "Liberation Sans, Helvetica Neue, Arial, sans-serif"
KERNEL_SHORT = {"bartlett": "Bartlett", "parzen": "Parzen", "quadratic_spectral": "QS",
                "tukey_hanning": "Tukey-Hanning", "truncated": "Truncated"}


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


def sensitivity_figure(sweep, term: str, mode: str = "t", level: float = 0.95,
                       reference: str = "normal", current_b: float | None = None,
                       current_kernel: str | None = None, marks=None) -> go.Figure:
    """t statistic (mode "t"), standard error ("se") or interval ("ci") against bandwidth, one
    line per kernel; critical values (a curve under fixed-b); automatic bandwidths marked; the
    current bandwidth as the first layout shape (so a slider move only patches its x)."""
    j = sweep.terms.index(term)
    b = sweep.bandwidths
    cv = sweep.critical_values(level, "normal" if reference == "auto" else reference)
    fig = go.Figure()
    x_cur = float(current_b) if current_b is not None else float(b[0])
    fig.add_shape(type="line", x0=x_cur, x1=x_cur, y0=0, y1=1, yref="paper",
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    for i, kern in enumerate(sweep.kernels):
        color = KERNEL_COLORS.get(kern, ACCENT)
        width = 3 if kern == current_kernel else 1.6
        name = KERNEL_SHORT.get(kern, kern)
        if mode == "se":
            y = sweep.std_error[i, :, j]
        elif mode == "ci":
            y = None
        else:
            y = sweep.t_stat[i, :, j]
        if mode == "ci":
            half = cv[i] * sweep.std_error[i, :, j]
            est = sweep.estimate[j]
            if kern == current_kernel or (current_kernel not in sweep.kernels and i == 0):
                fig.add_trace(go.Scatter(x=np.r_[b, b[::-1]], y=np.r_[est + half, (est - half)[::-1]],
                                         fill="toself", fillcolor="rgba(14,110,100,0.12)",
                                         line={"width": 0}, name=f"{name} interval",
                                         hoverinfo="skip"))
            fig.add_trace(go.Scatter(x=b, y=est + half, mode="lines", name=f"{name} upper",
                                     line={"color": color, "width": width}))
            fig.add_trace(go.Scatter(x=b, y=est - half, mode="lines", name=f"{name} lower",
                                     line={"color": color, "width": width, "dash": "dash"},
                                     showlegend=False))
        else:
            fig.add_trace(go.Scatter(x=b, y=y, mode="lines", name=name,
                                     line={"color": color, "width": width},
                                     hovertemplate=f"{name}<br>b=%{{x}}<br>%{{y:.3f}}"
                                                   "<extra></extra>"))
        if mode == "t" and reference == "fixed-b" and np.isfinite(cv[i]).any():
            for sign in (1, -1):
                fig.add_trace(go.Scatter(x=b, y=sign * cv[i], mode="lines",
                                         line={"color": color, "width": 1, "dash": "dash"},
                                         name=f"fixed-b critical value ({name})",
                                         showlegend=sign == 1, hoverinfo="skip"))
    if mode == "t" and reference != "fixed-b":
        c = float(cv[0, 0])
        for sign in (1, -1):
            fig.add_hline(y=sign * c, line={"color": WARN, "width": 1.2, "dash": "dash"})
        fig.add_annotation(x=1, xref="paper", y=c, text=f"±{c:.2f} ({reference} critical value)",
                           showarrow=False, xanchor="right", yanchor="bottom",
                           font={"size": 11, "color": WARN})
    if mode == "ci":
        fig.add_hline(y=0, line={"color": WARN, "width": 1.2})
    for kern, rule, bw in (marks or []):
        if kern not in sweep.kernels or not (b[0] <= bw <= b[-1]):
            continue
        i = sweep.kernels.index(kern)
        series = sweep.std_error[i, :, j] if mode == "se" else sweep.t_stat[i, :, j]
        if mode == "ci":
            series = sweep.estimate[j] + cv[i] * sweep.std_error[i, :, j]
        yv = float(np.interp(bw, b, series))
        label = {"andrews": "Andrews", "newey-west": "NW94", "rule-of-thumb": "rule of thumb"}\
            .get(rule, rule)
        fig.add_trace(go.Scatter(x=[bw], y=[yv], mode="markers+text", text=[label],
                                 textposition="top center",
                                 name=f"{rule} ({KERNEL_SHORT.get(kern, kern)})",
                                 marker={"symbol": "diamond", "size": 10,
                                         "color": KERNEL_COLORS.get(kern, ACCENT),
                                         "line": {"color": INK, "width": 1}},
                                 textfont={"size": 10, "color": MUTED}, showlegend=False))
    ylab = {"t": f"t statistic of {term}", "se": f"standard error of {term}",
            "ci": f"{level:.0%} interval for {term}"}[mode]
    fig.update_xaxes(title_text="bandwidth b (lags used = ceil(b) - 1 for finite kernels)")
    fig.update_yaxes(title_text=ylab)
    return _base(fig, f"How {term} depends on the bandwidth", 400)


def interval_figure(comp: pd.DataFrame, term: str, level: float) -> go.Figure:
    rows = comp[(comp.term == term) & comp.std_error.notna()].iloc[::-1]
    fig = go.Figure()
    colors = [ACCENT if r else WARN for r in rows.rejects]
    fig.add_trace(go.Scatter(
        x=rows.estimate, y=rows.estimator, mode="markers",
        marker={"color": colors, "size": 8},
        error_x={"type": "data", "symmetric": False, "array": rows.ci_high - rows.estimate,
                 "arrayminus": rows.estimate - rows.ci_low, "color": MUTED, "thickness": 1.5},
        hovertemplate="%{y}<br>[%{customdata[0]:.4g}, %{customdata[1]:.4g}]<extra></extra>",
        customdata=np.c_[rows.ci_low, rows.ci_high], showlegend=False))
    fig.add_vline(x=0, line={"color": INK, "width": 1})
    fig.update_xaxes(title_text=f"{level:.0%} interval for {term} (green: excludes 0)")
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
    fig = make_subplots(rows=1, cols=2, subplot_titles=("ACF of residuals",
                                                       "ACF of squared residuals"))
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
    palette = list(KERNEL_COLORS.values())
    for i, term in enumerate(report.score_acf.columns):
        fig.add_trace(go.Scatter(x=report.score_acf.index, y=report.score_acf[term],
                                 mode="lines+markers", name=term,
                                 line={"color": palette[i % len(palette)], "width": 1.5},
                                 marker={"size": 4}))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    fig.update_xaxes(title_text="lag")
    fig.update_yaxes(title_text="autocorrelation of x_t e_t")
    return _base(fig, "What HAC corrects for: autocorrelation of each moment contribution", 280)


# --------------------------------------------------------------------------- tables

def fmt(x, digits=4):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return ""
    if isinstance(x, (bool, np.bool_)):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    return f"{x:.{digits}g}"


def fmt_p(p):
    if p is None or not math.isfinite(p):
        return ""
    return "≤0.001" if p <= 0.001 else f"{p:.3f}"


def coefficient_records(result) -> list[dict]:
    t = result.table
    return [{"term": term, "estimate": fmt(r.estimate), "std_error": fmt(r.std_error),
             "t_stat": fmt(r.t_stat, 3), "p_value": fmt_p(r.p_value),
             "interval": f"[{fmt(r.ci_low)}, {fmt(r.ci_high)}]"}
            for term, r in t.iterrows()]


COEF_COLUMNS = [{"name": "term", "id": "term"}, {"name": "estimate", "id": "estimate"},
                {"name": "std. error", "id": "std_error"}, {"name": "t", "id": "t_stat"},
                {"name": "p", "id": "p_value"}, {"name": "interval", "id": "interval"}]


def short_reference(text: str) -> str:
    """'Student t with 417 df' -> 't(417)', 'standard normal (large-sample)' -> 'normal'."""
    if not isinstance(text, str) or not text:
        return ""
    if text.startswith("standard normal"):
        return "normal"
    if text.startswith("Student t with"):
        df = text.split("with ")[1].split(" ")[0]
        return f"t({df})" + (" EWC" if "EWC" in text else "")
    if text.startswith("fixed-b"):
        return "fixed-b"
    return text


def comparison_records(comp: pd.DataFrame, term: str, current_rejects: bool | None) -> list[dict]:
    rows = comp[comp.term == term]
    out = []
    for _, r in rows.iterrows():
        ok = np.isfinite(r.std_error)
        verdict = ("rejects 0" if r.rejects else "keeps 0") if ok else "not available"
        out.append({"estimator": r.estimator, "b": fmt(r.bandwidth, 3) if ok else "",
                    "lags": fmt(r.lags) if ok and np.isfinite(r.lags) else "",
                    "std_error": fmt(r.std_error), "t_stat": fmt(r.t_stat, 3),
                    "p_value": fmt_p(r.p_value), "verdict": verdict,
                    "reference": short_reference(r.reference) if ok else "",
                    "differs": bool(ok and current_rejects is not None
                                    and bool(r.rejects) != current_rejects),
                    "note": "; ".join(x for x in (r.get("why"), r.note)
                                      if isinstance(x, str) and x)})
    return out


def differs_style(records: list[dict]) -> list[dict]:
    """DataTable styling that shades the rows whose conclusion differs from the current one."""
    rows = [i for i, r in enumerate(records) if r.get("differs")]
    if not rows:
        return []
    return [{"if": {"row_index": rows}, "backgroundColor": "#fbeee4", "color": "#7a3410"}]


COMPARE_COLUMNS = [{"name": "estimator", "id": "estimator"}, {"name": "b", "id": "b"},
                   {"name": "lags", "id": "lags"}, {"name": "std. error", "id": "std_error"},
                   {"name": "t", "id": "t_stat"}, {"name": "p", "id": "p_value"},
                   {"name": "conclusion", "id": "verdict"}, {"name": "law", "id": "reference"}]


def diagnostics_records(report) -> list[dict]:
    return [{"test": r.test, "statistic": fmt(r.statistic),
             "df": "" if pd.isna(r.df) else fmt(r.df), "p_value": fmt_p(r.p_value),
             "null": r.null, "convention": r.convention} for _, r in report.tests.iterrows()]


DIAG_COLUMNS = [{"name": "test", "id": "test"}, {"name": "statistic", "id": "statistic"},
                {"name": "df", "id": "df"}, {"name": "p", "id": "p_value"},
                {"name": "null hypothesis", "id": "null"}, {"name": "convention",
                                                            "id": "convention"}]
