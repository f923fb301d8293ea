"""Pure builders: engine results -> plotly figures and table records (no Dash, no browser)."""

from __future__ import annotations

import re

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
from ..engine.errors import LagwiseError  # noqa: E402


def _base(fig: go.Figure, title: str, height: int = 360) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15, "color": INK}},
        font={"family": FONT, "size": 12, "color": INK}, paper_bgcolor=PAPER,
        plot_bgcolor=PAPER, height=height, margin={"l": 56, "r": 16, "t": 48, "b": 44},
        # the legend at the foot of the figure (container coordinates): plotly then makes room
        # for it under the axis title instead of placing it by a fraction of the plot height
        legend={"orientation": "h", "yref": "container", "y": 0, "yanchor": "bottom", "x": 0,
                "font": {"size": 11}},
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
    return [float(lo - 0.12 * span), float(hi + 0.12 * span)]


#: Rule labels sit in a strip above the plotting area: rows this many pixels apart, judged
#: against a plot at least this wide (the chart is responsive: narrower plots are rare) with
#: this many pixels per character at font size 10 (Liberation Sans measures about 5.1).
STRIP_ROW_PX, PLOT_PX, CHAR_PX = 17, 480.0, 5.6
#: Rules landing closer than this (pixels at PLOT_PX) share one label with a leader to each.
CLUSTER_PX = 24
#: The title's share of the top margin, in pixels.
TITLE_PX = 34
SUBTITLE_PX = 16                     # a title's second line (which S the curves show)


#: A law's key in words, for "... critical values".
LAW_WORDS = {"normal": "normal", "t": "Student t", "ewc": "EWC's t(B)", "fixed-b": "fixed-b"}


def reference_words(sweep, reference: str) -> str:
    """The critical values a sweep is judged by, in words: the law each curve's request
    resolves to ("normal", "fixed-b"), or "each estimator's own" when they differ."""
    keys = set()
    for c in range(len(sweep.labels)):
        try:
            keys.add(sweep.law(c, 0, reference).key)
        except LagwiseError:
            continue
    return LAW_WORDS.get(keys.pop(), "its own") if len(keys) == 1 else "each estimator's own"


def shown_by_default(sweep, c: int, current_curve) -> bool:
    """Curves of kernels that are positive semi-definite by construction are shown; the others
    (truncated, Tukey-Hanning) are one legend click away, unless one is the current choice."""
    from ..engine.covariance.kernels import KERNELS
    kern = KERNELS.get(sweep.estimators[c].params.get("kernel", ""))
    return c == current_curve or kern is None or bool(kern.psd)


def sensitivity_figure(sweep, term: str, mode: str = "t", level: float = 0.95,
                       reference: str = "normal", current: float | None = None,
                       current_curve: int | None = 0, marks=None,
                       reference_lines=None, horizon: int | None = None) -> go.Figure:
    """t statistic (mode "t"), standard error ("se"), estimate or interval ("ci") of `term`
    along the sweep's tuning axis, one line per curve; critical values under `reference`;
    where each automatic rule lands, labelled in a strip above the plotting area (never over
    the curves; the full wording on hover); the current value as the first layout shape (a
    slider move only patches its x).

    Curves of kernels that are not positive semi-definite by construction start hidden (a
    legend click shows them). The vertical range follows the curves shown; points beyond it
    are marked at the edge (triangles, their value on hover). Points where S was repaired or
    is not PSD are drawn hollow, unavailable ones leave a gap. Every label lives in the
    legend or the strip, none inside the plotting area. reference_lines: [(label, value)]
    horizontal lines (e.g. an estimator without an axis); horizon: an overlapping response's
    h (bandwidths whose lags fall short of h - 1 are shaded)."""
    j = sweep.terms.index(term)
    cv = sweep.critical_values(level, reference, term)
    fig = go.Figure()
    x_cur = float(current) if current is not None else float(sweep.values[0])
    fig.add_shape(type="line", x0=x_cur, x1=x_cur, y0=0, y1=1, yref="paper",
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    shown = [shown_by_default(sweep, c, current_curve) for c in range(len(sweep.labels))]
    series = [_curve_values(sweep, c, j, mode, cv) for c in range(len(sweep.labels))]
    rng = _finite_range(np.concatenate([y for (y, _), on in zip(series, shown) if on]),
                        np.concatenate([k for (_, k), on in zip(series, shown) if on]))
    rng = _range_with_lines(rng, reference_lines or [], cv if mode == "t" else None)
    for c in range(len(sweep.labels)):
        _add_curve(fig, sweep, c, j, mode, cv, c == current_curve, shown[c], rng)
    _add_critical_lines(fig, sweep, cv, mode, reference_words(sweep, reference), rng)
    _add_reference_lines(fig, sweep, reference_lines or [], rng)
    _add_shortfall(fig, sweep, horizon)
    if rng is not None:
        fig.update_yaxes(range=rng)
    rows = _add_marks(fig, sweep, j, mode, cv, marks, rng, current_curve)
    ylab = {"t": f"t statistic of {term}", "se": f"standard error of {term}",
            "estimate": f"estimate of {term}", "ci": f"{level:.0%} interval for {term}"}[mode]
    xlab = sweep.axis.title + (" (lags used = ceil(b) - 1 for finite kernels)"
                               if sweep.axis.symbol == "b" else "")
    # the x range is the axis's own (no padding), so the strip's label positions, computed as
    # fractions of it, are fractions of the plot's width
    fig.update_xaxes(title_text=xlab, range=[float(sweep.values[0]), float(sweep.values[-1])])
    fig.update_yaxes(title_text=ylab)
    what = "bandwidth" if sweep.axis.symbol == "b" else sweep.axis.title
    note = sweep.extras.get("chart_note")            # which estimator and S the curves show
    sub = f"<br><span style='font-size:11px;color:{MUTED}'>{note}</span>" if note else ""
    top = TITLE_PX + (SUBTITLE_PX if sub else 0) + (rows * STRIP_ROW_PX + 10 if rows else 0)
    if "j_p_value" in sweep.extras and np.isfinite(sweep.extras["j_p_value"]).any():
        fig = _with_j_panel(fig, sweep, current_curve, xlab, shown)
        return _strip_margin(_base(fig, f"How {term} and the J test depend on the {what}{sub}",
                                   560 + top), top)
    return _strip_margin(_base(fig, f"How {term} depends on the {what}{sub}", 420 + top), top)


def _strip_margin(fig, top: int):
    """Room at the top for the title and the rule strip; the title pinned to the top."""
    fig.update_layout(margin={"t": top + 8},
                      title={"y": 1, "yref": "container", "yanchor": "top", "pad": {"t": 8}})
    return fig


def _range_with_lines(rng, lines, cv):
    """The curves' range, widened to hold reference lines close to it and the critical values
    when the curves come near them (the lines say where the conclusion changes)."""
    if rng is None:
        values = [v for _, v in lines if np.isfinite(v)]
        if cv is not None and np.isfinite(cv).any():
            values += [float(np.nanmax(cv)), -float(np.nanmax(cv))]
        if len(values) < 1:
            return None
        lo, hi = min(values), max(values)
        span = max(hi - lo, 1.0)
        return [lo - 0.15 * span, hi + 0.15 * span]
    lo, hi = rng
    span = max(hi - lo, 1e-12)
    extra = [v for _, v in lines if np.isfinite(v) and lo - 0.6 * span <= v <= hi + 0.6 * span]
    if cv is not None and np.isfinite(cv).any():
        c = float(np.nanmedian(cv[np.isfinite(cv)]))
        extra += [v for v in (c, -c) if lo - 0.6 * span <= v <= hi + 0.6 * span]
    if extra:
        lo, hi = min(lo, min(extra) - 0.05 * span), max(hi, max(extra) + 0.05 * span)
    return [lo, hi]


def _legend_only_entry(fig, name, marker, group=None, visible=True):
    """A legend entry with nothing drawn in the plotting area."""
    fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name=name, marker=marker,
                             hoverinfo="skip", legendgroup=group, visible=visible))


def _add_reference_lines(fig, sweep, lines, rng):
    """Horizontal lines for results without a tuning axis (e.g. clustered standard errors),
    named in the legend; lines that read the same share an entry. A line outside the range
    is marked at the edge with its value on hover."""
    merged: dict = {}
    for label, value in lines:
        if np.isfinite(value):
            key = float(f"{value:.3g}")          # lines that read the same share an entry
            merged.setdefault(key, []).append(label)
    x0, x1 = float(sweep.values[0]), float(sweep.values[-1])
    for value, labels in sorted(merged.items()):
        text = "; ".join(labels)
        if rng is not None and not (rng[0] <= value <= rng[1]):
            edge = rng[1] if value > rng[1] else rng[0]
            fig.add_trace(go.Scatter(
                x=[x1], y=[edge], mode="markers", cliponaxis=False,
                name=f"{text} ({'above' if value > rng[1] else 'below'} the chart)",
                marker={"symbol": "triangle-up" if value > rng[1] else "triangle-down",
                        "size": 9, "color": INK},
                hovertemplate=f"{text}<extra></extra>"))
            continue
        fig.add_trace(go.Scatter(x=[x0, x1], y=[value, value], mode="lines", name=text,
                                 line={"color": INK, "width": 1.2, "dash": "dot"},
                                 hovertemplate=f"{text}<extra></extra>"))


def _add_shortfall(fig, sweep, horizon):
    """Shade the bandwidths whose lags fall short of h - 1 under an overlapping response; the
    shade is named in the legend."""
    if not (horizon and horizon > 1 and sweep.axis.symbol == "b"
            and sweep.values[0] <= horizon - 1):
        return
    fig.add_vrect(x0=float(sweep.values[0]), x1=horizon - 1, fillcolor="rgba(29,39,51,0.07)",
                  line_width=0, layer="below")
    _legend_only_entry(fig, f"shaded: fewer than h - 1 = {horizon - 1} lags",
                       {"symbol": "square", "size": 12, "color": "rgba(29,39,51,0.18)"})


def _with_j_panel(fig, sweep, current_curve, xlab, shown):
    """The same chart above a second panel: the p-value of Hansen's J at each point."""
    out = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.7, 0.3],
                        vertical_spacing=0.08)
    for trace in fig.data:
        out.add_trace(trace, row=1, col=1)
    out.layout.shapes = fig.layout.shapes            # the current-value line stays shape 0
    out.layout.annotations = fig.layout.annotations
    out.update_yaxes(range=fig.layout.yaxis.range, title_text=fig.layout.yaxis.title.text,
                     row=1, col=1)
    out.update_xaxes(range=[float(sweep.values[0]), float(sweep.values[-1])])
    p = sweep.extras["j_p_value"]
    for c in range(len(sweep.labels)):
        color, short, width = _curve_style(sweep, c, c == current_curve)
        out.add_trace(go.Scatter(x=sweep.values, y=p[c], mode="lines", name=f"{short}: J p",
                                 line={"color": color, "width": width}, showlegend=False,
                                 legendgroup=f"curve{c}",
                                 visible=True if shown[c] else "legendonly",
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
    elif kern is not None and not kern.psd:
        short += " (not PSD)"
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


def _curve_values(sweep, c, j, mode, cv):
    """(every value the curve draws, which of them are ordinary points)."""
    odd = sweep.status[c] != ""
    if mode == "ci":
        est, se = sweep.estimate[c, :, j], sweep.std_error[c, :, j]
        return np.r_[est + cv[c] * se, est - cv[c] * se], np.r_[~odd, ~odd]
    return _values(sweep, c, j, mode, cv), ~odd


def _edge_markers(fig, x, y, rng, color, name, group, visible, symbol_x):
    """Points beyond the y range, marked at the edge they leave by (their value on hover)."""
    if rng is None:
        return
    y = np.asarray(y, dtype=float)
    for above in (True, False):
        out = (y > rng[1]) if above else (y < rng[0])
        out &= np.isfinite(y)
        if not out.any():
            continue
        fig.add_trace(go.Scatter(
            x=x[out], y=np.full(out.sum(), rng[1] if above else rng[0]), mode="markers",
            cliponaxis=False, showlegend=False, legendgroup=group, visible=visible,
            name=f"{name}: beyond the chart", customdata=y[out],
            marker={"symbol": "triangle-up" if above else "triangle-down", "size": 7,
                    "color": color},
            hovertemplate=f"{name}<br>{symbol_x}=%{{x}}<br>%{{customdata:.3f}} (beyond the "
                          "chart)<extra></extra>"))


def _add_curve(fig, sweep, c, j, mode, cv, current, shown, rng):
    """One curve (and its flagged points and edge marks), in one legend group."""
    from ..engine.inference.sweep import STATUS_TEXT
    color, short, width = _curve_style(sweep, c, current)
    group, visible = f"curve{c}", True if shown else "legendonly"
    x, se, est = sweep.values, sweep.std_error[c, :, j], sweep.estimate[c, :, j]
    odd = sweep.status[c] != ""
    sym = sweep.axis.symbol
    if mode == "ci":
        y, y2 = est + cv[c] * se, est - cv[c] * se
        if current:
            fig.add_trace(go.Scatter(x=np.r_[x, x[::-1]], y=np.r_[y, y2[::-1]], fill="toself",
                                     fillcolor="rgba(29,39,51,0.08)", line={"width": 0},
                                     name=f"{short} interval", hoverinfo="skip",
                                     legendgroup=group, visible=visible))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{short} upper",
                                 line={"color": color, "width": width}, legendgroup=group,
                                 visible=visible))
        fig.add_trace(go.Scatter(x=x, y=y2, mode="lines", name=f"{short} lower",
                                 line={"color": color, "width": width, "dash": "dash"},
                                 showlegend=False, legendgroup=group, visible=visible))
        _edge_markers(fig, x, np.where(odd, np.nan, y), rng, color, short, group, visible, sym)
        _edge_markers(fig, x, np.where(odd, np.nan, y2), rng, color, short, group, visible,
                      sym)
        return
    y = _values(sweep, c, j, mode, cv)
    fig.add_trace(go.Scatter(x=x, y=np.where(odd, np.nan, y), mode="lines", name=short,
                             legendgroup=group, visible=visible,
                             line={"color": color, "width": width,
                                   "dash": _curve_dash(sweep, c)},
                             hovertemplate=f"{short}<br>{sym}=%{{x}}<br>%{{y:.3f}}"
                                           "<extra></extra>"))
    inside = np.ones_like(odd) if rng is None else (y >= rng[0]) & (y <= rng[1])
    if (odd & inside).any():
        keep = odd & inside
        why = [STATUS_TEXT.get(s, "") + (f": {r}" if r else "")
               for s, r in zip(sweep.status[c][keep], sweep.reasons[c][keep])]
        fig.add_trace(go.Scatter(
            x=x[keep], y=y[keep], mode="markers", name=f"{short}: flagged points",
            customdata=why, showlegend=False, legendgroup=group, visible=visible,
            marker={"symbol": "circle-open", "size": 5, "color": color},
            hovertemplate=f"{short}<br>{sym}=%{{x}}<br>%{{y:.3f}}<br>"
                          "%{customdata}<extra></extra>"))
    _edge_markers(fig, x, y, rng, color, short, group, visible, sym)
    finite = np.isfinite(cv[c])
    if mode == "t" and finite.any() and np.ptp(cv[c][finite]) > 1e-9:
        for sign in (1, -1):
            fig.add_trace(go.Scatter(x=x, y=sign * cv[c], mode="lines",
                                     line={"color": color, "width": 1, "dash": "dash"},
                                     name=f"critical value ({short})", showlegend=sign == 1,
                                     legendgroup=group, visible=visible, hoverinfo="skip"))


def _add_critical_lines(fig, sweep, cv, mode, reference, rng):
    """One pair of lines, named in the legend, when the critical value is the same
    everywhere; zero for intervals."""
    x0, x1 = float(sweep.values[0]), float(sweep.values[-1])
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
        fig.add_trace(go.Scatter(x=[x0, x1], y=[sign * value] * 2, mode="lines",
                                 line={"color": MUTED, "width": 1.2, "dash": "dash"},
                                 name=f"±{value:.2f}: {reference} critical value",
                                 legendgroup="critical", showlegend=sign == 1,
                                 hovertemplate=f"critical value ±{value:.2f} ({reference})"
                                               "<extra></extra>"))


def _add_marks(fig, sweep, j, mode, cv, marks, rng, current_curve=0) -> int:
    """Where automatic rules land: marks = [(curve, title, value[, full wording])]. Each rule
    is labelled in a strip above the plotting area (rows as needed so labels never overlap),
    joined by a thin leader to a dotted drop line and a diamond on the curve; the full wording
    shows on hover. Returns the number of label rows."""
    x = sweep.values
    points = []
    for item in marks or []:
        c, title, value = item[:3]
        full = item[3] if len(item) > 3 and item[3] else title
        if value is None or not np.isfinite(value) or not (x[0] <= value <= x[-1]):
            continue
        series = _values(sweep, c, j, mode, cv)
        ok = np.isfinite(series)
        if ok.sum() < 1:
            continue
        points.append((float(value), float(np.interp(value, x[ok], series[ok])), title, full))
    if not points:
        return 0
    span = max(float(x[-1] - x[0]), 1e-12)
    points.sort()
    clusters: list[list] = []             # rules landing closer than CLUSTER_PX share a label
    for p in points:
        if clusters and (p[0] - clusters[-1][-1][0]) / span * PLOT_PX < CLUSTER_PX:
            clusters[-1].append(p)
        else:
            clusters.append([p])
    titles = [strip_label([p[2] for p in cl]) for cl in clusters]
    halves = [(len(t) * CHAR_PX + 16) / (2 * PLOT_PX) for t in titles]      # axis fractions
    rows = 1 if 2 * sum(halves) <= 0.98 + sum(STRIP_REACH) else 2
    centres = [0.0] * len(clusters)
    for r in range(rows):
        idx = list(range(r, len(clusters), rows))
        wanted = [(float(np.mean([p[0] for p in clusters[i]])) - x[0]) / span for i in idx]
        for i, c in zip(idx, _spread(wanted, [halves[i] for i in idx])):
            centres[i] = c
    for i, cluster in enumerate(clusters):
        row = i % rows
        for value, yv, title, full in cluster:
            y_on = yv if rng is None else float(np.clip(yv, rng[0], rng[1]))
            top = y_on if rng is None else rng[1]
            fig.add_shape(type="line", x0=value, x1=value, y0=y_on, y1=top, yref="y",
                          line={"color": MUTED, "width": 1, "dash": "dot"}, layer="below")
            fig.add_trace(go.Scatter(x=[value], y=[y_on], mode="markers", name=title,
                                     hovertemplate=f"{full}<extra></extra>", showlegend=False,
                                     marker={"symbol": "diamond", "size": 9, "color": PAPER,
                                             "line": {"color": INK, "width": 1.5}}))
            fig.add_annotation(x=value, xref="x", y=1, yref="paper", text=titles[i],
                               hovertext="<br>".join(p[3] for p in cluster), showarrow=True,
                               arrowhead=0, arrowwidth=1, arrowcolor=MUTED, axref="x",
                               ax=float(x[0] + centres[i] * span),
                               ay=-(10 + STRIP_ROW_PX * row), yanchor="bottom",
                               font={"size": 10, "color": INK},
                               bgcolor="rgba(255,255,255,0.95)", borderpad=1, name="rule")
    return rows


#: How far (axis fractions at PLOT_PX) a strip label may reach past the plot's left and right
#: edges: over the margins, above the tick labels.
STRIP_REACH = (56 / PLOT_PX, 16 / PLOT_PX)


def strip_label(titles: list[str]) -> str:
    """A rule's name in the strip: without its year ("Andrews" for "Andrews (1991)"); rules
    sharing a label are named together when short, else the first and how many more."""
    short = [re.sub(r" \(\d{4}\)$", "", t) for t in titles]
    joined = ", ".join(short)
    return joined if len(short) == 1 or len(joined) <= 18 else f"{short[0]} +{len(short) - 1}"


def _spread(wanted: list[float], halves: list[float]) -> list[float]:
    """Centres (axis fractions, in order) as close as possible to the wanted ones, with labels
    of the given half-widths side by side without overlap, reaching at most STRIP_REACH past
    the plot's edges."""
    left, right = -STRIP_REACH[0], 1.0 + STRIP_REACH[1]
    out = []
    for w, h in zip(wanted, halves):
        c = max(w, left + h)
        if out:
            c = max(c, out[-1] + halves[len(out) - 1] + h)
        out.append(c)
    if out:                                           # pushed past the right end: back
        out[-1] = min(out[-1], right - halves[-1])
        for i in range(len(out) - 2, -1, -1):
            out[i] = min(out[i], out[i + 1] - halves[i + 1] - halves[i])
    return out


#: Shades of the conclusion strips: rejected, not rejected, not available.
STRIP_COLORS = {1.0: "#2f7d73", 0.0: "#e4e0d6", -1.0: "#ffffff"}


def conclusion_states(sweep, term: str, level: float, reference: str) -> np.ndarray:
    """Curves x values: 1 where beta = 0 is rejected at 1 - level, 0 where it is not, -1 where
    no standard error or critical value exists (as engine.significance_flip decides)."""
    j = sweep.terms.index(term)
    cv = sweep.critical_values(level, reference, term)
    t = np.abs(sweep.t_stat[:, :, j])
    valid = np.isfinite(t) & np.isfinite(cv)
    return np.where(valid, (t > np.where(valid, cv, 0.0)).astype(float), -1.0)


def flip_strip_figure(sweep, term: str, level: float = 0.95, reference: str = "normal",
                      current: float | None = None, current_curve: int | None = 0) -> go.Figure:
    """Where the conclusion changes, as one picture: a strip per curve along the tuning axis,
    shaded where beta = 0 is rejected, not rejected or not available; the current value as the
    first shape (patched by a slider move, like the sensitivity chart's)."""
    states = conclusion_states(sweep, term, level, reference)
    x = sweep.values
    names = [_curve_style(sweep, c, c == current_curve)[1] for c in range(len(sweep.labels))]
    fig = go.Figure()
    x_cur = float(current) if current is not None else float(x[0])
    fig.add_shape(type="line", x0=x_cur, x1=x_cur, y0=0, y1=1, yref="paper",
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    words = {1.0: "rejected", 0.0: "not rejected", -1.0: "not available"}
    text = [[f"{names[c]}, {sweep.axis.symbol} = {v:g}: {words[s]}"
             for v, s in zip(x, states[c])] for c in range(len(names))]
    scale = [[0.0, STRIP_COLORS[-1.0]], [0.33, STRIP_COLORS[-1.0]], [0.34, STRIP_COLORS[0.0]],
             [0.66, STRIP_COLORS[0.0]], [0.67, STRIP_COLORS[1.0]], [1.0, STRIP_COLORS[1.0]]]
    fig.add_trace(go.Heatmap(z=states[::-1], x=x, y=names[::-1], zmin=-1, zmax=1,
                             colorscale=scale, showscale=False, xgap=0, ygap=3,
                             text=[row for row in text[::-1]],
                             hovertemplate="%{text}<extra></extra>"))
    pct = f"{1 - level:.0%}"
    for value, name in ((1.0, f"beta = 0 rejected at {pct}"), (0.0, "not rejected"),
                        (-1.0, "not available")):
        _legend_only_entry(fig, name, {"symbol": "square", "size": 12,
                                       "color": STRIP_COLORS[value],
                                       "line": {"color": "#c9c4b8", "width": 1}})
    fig.update_xaxes(title_text=sweep.axis.title, range=[float(x[0]) - 0.5, float(x[-1]) + 0.5],
                     showgrid=False)
    fig.update_yaxes(showgrid=False, automargin=True, tickfont={"size": 11})
    fig = _base(fig, f"Where the conclusion about {term} changes "
                     f"({reference_words(sweep, reference)} critical values)",
                96 + 24 * len(names))
    fig.update_layout(plot_bgcolor="#ffffff", margin={"l": 10, "t": 64, "b": 40},
                      title={"y": 1, "yref": "container", "yanchor": "top", "pad": {"t": 8}},
                      legend={"orientation": "h", "x": 1, "xanchor": "right", "y": 1,
                              "yanchor": "bottom", "yref": "paper"})
    return fig


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
                                 name="95% band (Bartlett)", showlegend=False), row=1, col=col)
        fig.add_trace(go.Scatter(x=lags, y=-report.acf[band], mode="lines",
                                 line={"color": WARN, "dash": "dash", "width": 1},
                                 showlegend=False), row=1, col=col)
        fig.update_xaxes(title_text="lag", row=1, col=col)
    # the dashed band is described beneath the chart (its legend would sit on the axis titles)
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
