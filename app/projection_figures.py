"""Pure builders for the local-projection mode: the impulse response with its bands, and the
map of where each horizon's conclusion changes along the bandwidth."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ..engine.covariance.kernels import PALETTE
from .figures import ACCENT, FONT, GRID, INK, MUTED, PAPER, WARN

#: Colours of the overlaid estimators' bands (the current band is ACCENT).
OVERLAY = ["#8a5a9e", "#b4541a", "#3b6fb6", "#6b8e23", "#a0522d", "#2f4f4f"]


def _layout(fig: go.Figure, title: str, height: int) -> go.Figure:
    """The page's chart style (the same settings as the other charts)."""
    fig.update_layout(
        title={"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15, "color": INK}},
        font={"family": FONT, "size": 12, "color": INK}, paper_bgcolor=PAPER,
        plot_bgcolor=PAPER, height=height, margin={"l": 56, "r": 16, "t": 48, "b": 44},
        legend={"orientation": "h", "y": -0.2, "x": 0, "font": {"size": 11}},
        hoverlabel={"font": {"family": FONT}})
    fig.update_xaxes(gridcolor=GRID, zerolinecolor=GRID, linecolor=GRID)
    fig.update_yaxes(gridcolor=GRID, zerolinecolor="#c9c4b8", linecolor=GRID)
    return fig


def _rgba(hex_colour: str, alpha: float) -> str:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i: i + 2], 16) for i in (0, 2, 4))
    return f"rgba({r},{g},{b},{alpha})"


def irf_figure(bands: pd.DataFrame, title: str, simultaneous: pd.DataFrame | None = None,
               overlays=(), ylabel: str = "response") -> go.Figure:
    """The response by horizon with its pointwise band (shaded), the sup-t band (dashed) and,
    on request, other estimators' pointwise bands (dotted, one colour each). overlays:
    [(label, bands)]."""
    h = bands.index.to_numpy()
    fig = go.Figure()
    lo, hi = bands["ci_low"].to_numpy(dtype=float), bands["ci_high"].to_numpy(dtype=float)
    level = bands.attrs.get("level", 0.9)
    fig.add_trace(go.Scatter(x=h, y=hi, mode="lines", line={"width": 0}, hoverinfo="skip",
                             showlegend=False, name="upper"))
    fig.add_trace(go.Scatter(x=h, y=lo, mode="lines", line={"width": 0}, fill="tonexty",
                             fillcolor=_rgba(ACCENT, 0.18), name=f"pointwise {level:.0%}",
                             hovertemplate="h = %{x}: pointwise [%{y:.4g}, "
                                           "%{customdata:.4g}]<extra></extra>",
                             customdata=hi))
    if simultaneous is not None:
        for col, show in (("ci_low", True), ("ci_high", False)):
            fig.add_trace(go.Scatter(
                x=h, y=simultaneous[col].to_numpy(dtype=float), mode="lines",
                line={"color": ACCENT, "dash": "dash", "width": 1.5},
                name=f"sup-t {level:.0%} (simultaneous)", legendgroup="supt",
                showlegend=show, hovertemplate="h = %{x}: sup-t %{y:.4g}<extra></extra>"))
    for i, (label, other) in enumerate(overlays):
        colour = OVERLAY[i % len(OVERLAY)] if i < len(OVERLAY) else PALETTE[i % len(PALETTE)]
        for col, show in (("ci_low", True), ("ci_high", False)):
            fig.add_trace(go.Scatter(
                x=other.index.to_numpy(), y=other[col].to_numpy(dtype=float),
                mode="lines", line={"color": colour, "dash": "dot", "width": 1.3},
                name=label, legendgroup=f"o{i}", showlegend=show,
                hovertemplate=f"{label}<br>h = %{{x}}: %{{y:.4g}}<extra></extra>"))
    fig.add_trace(go.Scatter(x=h, y=bands["estimate"].to_numpy(dtype=float),
                             mode="lines+markers", line={"color": INK, "width": 2},
                             marker={"size": 6}, name="estimate",
                             hovertemplate="h = %{x}: %{y:.4g}<extra></extra>"))
    fig.add_hline(y=0, line={"color": MUTED, "width": 1})
    _layout(fig, title, 440 if overlays else 420)
    fig.update_xaxes(title_text="horizon h (periods after the shock)", dtick=1 if len(h) <= 24
                     else None)
    fig.update_yaxes(title_text=ylabel)
    return fig


def flip_map_figure(rejects: np.ndarray, valid: np.ndarray, bandwidths: np.ndarray,
                    current: float, title: str) -> go.Figure:
    """Horizons (rows) by bandwidth (columns): shaded where beta_h = 0 is rejected, pale where
    it is not, blank where there is no standard error; the current b as shape 0 (a slider move
    can patch it)."""
    z = np.where(valid, rejects.astype(float), np.nan)
    nh = z.shape[0]
    fig = go.Figure()
    fig.add_shape(type="line", x0=current, x1=current, y0=-0.5, y1=nh - 0.5,
                  line={"color": INK, "width": 1.5, "dash": "dot"}, name="current")
    fig.add_trace(go.Heatmap(
        z=z, x=bandwidths, y=np.arange(nh), zmin=0, zmax=1, showscale=False,
        colorscale=[[0.0, "#f1efe9"], [0.5, "#f1efe9"], [0.5, _rgba(WARN, 0.75)],
                    [1.0, _rgba(WARN, 0.75)]], xgap=1, ygap=1,
        customdata=np.where(valid, np.where(rejects, "rejected", "not rejected"),
                            "no standard error"),
        hovertemplate="h = %{y}, b = %{x}: %{customdata}<extra></extra>"))
    _layout(fig, title, max(260, 22 * nh + 110))
    fig.update_xaxes(title_text="bandwidth b (lags = b - 1 for finite kernels)",
                     gridcolor=GRID)
    fig.update_yaxes(title_text="horizon h", autorange="reversed", dtick=1 if nh <= 25 else None)
    return fig
