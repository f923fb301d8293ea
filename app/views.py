"""Engine results -> what the page shows in words and tables: the headline, flip sentences,
table rows (numbers for sorting, text for display), and the HTML report. No Dash callbacks here."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from dash import html

from ..engine.covariance.bandwidth import bandwidth_text, lags_text
from ..engine.io.tables import p_text

#: Transform pickers show these titles (engine names are the values).
TRANSFORM_TITLES = {"lag": "lag p", "lead": "lead p", "difference": "difference", "log": "log",
                    "log-difference": "log difference", "sum-next": "sum of next h"}
#: Rows whose conclusion differs from the current one: a neutral tint, not a verdict colour.
DIFFERS_STYLE = {"styleConditions": [{"condition": "params.data.differs",
                                      "style": {"backgroundColor": "#eceae3",
                                                "fontWeight": "600"}}]}


# --------------------------------------------------------------------------- formatting

def fmt(x, digits=4):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return ""
    if isinstance(x, (bool, np.bool_)):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    if isinstance(x, (float, np.floating)) and not np.isfinite(x):
        return ""
    return f"{x:.{digits}g}"


def fmt_p(p, mc_error: float | None = None):
    """p-values as everywhere: three decimals, "< 0.001" below that (never scientific)."""
    return p_text(p)


def _num(x):
    return float(x) if x is not None and np.isfinite(x) else None


def column(field, name, text=True, left=False, width=None, tooltip=None, wrap=False):
    """A grid column: sorted by the number in `field`, shown as the text in `field_txt`. Every
    header names itself on hover; a text column shows its cell's full text on hover (cells
    too narrow for it end in an ellipsis), or wraps (`wrap`: long sentences)."""
    out = {"field": field, "headerName": name, "minWidth": 80, "headerTooltip": name}
    if text:
        out["valueFormatter"] = {"function": f"params.data.{field}_txt"}
        out["type"] = "rightAligned"
    if left:
        out["cellStyle"] = {"textAlign": "left"}
    if width:
        out["minWidth"] = width
    if tooltip or not text:
        out["tooltipField"] = tooltip or field
    if wrap:
        out.update({"wrapText": True, "autoHeight": True,
                    "cellStyle": {"textAlign": "left", "lineHeight": "1.35",
                                  "paddingTop": "4px", "paddingBottom": "4px"}})
    return out


COEF_COLUMNS = [column("term", "term", text=False, left=True, width=120),
                column("estimate", "estimate", width=90), column("std_error", "std. error",
                                                                 width=95),
                column("t_stat", "t", width=70), column("p_value", "p", width=70),
                column("interval", "interval", text=False, width=160)]
COMPARE_COLUMNS = [column("estimator", "estimator", text=False, left=True, width=290,
                          tooltip="note"),
                   column("estimate", "estimate", width=85),
                   column("bandwidth", "b"), column("lags", "lags"),
                   column("std_error", "std. error"), column("t_stat", "t"),
                   column("p_value", "p"), column("verdict", "beta = 0", text=False, width=115),
                   column("law", "law", text=False, width=110)]
DIAG_COLUMNS = [column("test", "test", text=False, left=True, width=190),
                column("statistic", "statistic"), column("df", "df", text=False),
                column("p_value", "p"),
                column("null", "null hypothesis", text=False, width=200, wrap=True),
                column("method", "method", text=False, width=220, wrap=True)]
FIRST_STAGE_COLUMNS = [column("endogenous", "endogenous", text=False, left=True, width=150),
                       column("robust_f", "F (chosen S)"), column("robust_p", "p"),
                       column("homoskedastic_f", "F (homoskedastic)"),
                       column("partial_r2", "partial R²")]
SPEC_COLUMNS = [column("test", "test", text=False, left=True, width=220),
                column("statistic", "statistic"), column("df", "df", text=False),
                column("p_value", "p"), column("about", "what it uses", text=False, left=True,
                                               width=260, wrap=True)]
PERSIST_COLUMNS = [column("quantity", "quantity", text=False, left=True, width=230),
                   column("value", "value", width=90),
                   column("detail", "detail", text=False, left=True, width=330, wrap=True)]
SIZE_COLUMNS = [column("estimator", "estimator", text=False, left=True, width=290),
                column("rejection_rate", "rejection rate"),
                column("interval", "Monte Carlo 95%", text=False, width=130),
                column("nominal", "nominal"),
                column("size_adjusted_critical_value", "size-adjusted |t|"),
                column("typical_critical_value", "critical value used")]
CLUSTER_COLUMNS = [column("estimator", "estimator", text=False, left=True, width=260,
                          tooltip="note"),
                   column("std_error", "std. error"), column("t_stat", "t"),
                   column("df", "df"), column("p_value", "p"),
                   column("interval", "interval", text=False, width=150),
                   column("verdict", "beta = 0", text=False, width=110)]
SUMMARY_COLUMNS = [column("column", "column", text=False, left=True),
                   column("count", "count"), column("missing", "missing"),
                   column("mean", "mean"), column("sd", "sd")]


def _with_text(row: dict, fields: dict) -> dict:
    """Numbers for sorting plus their display text (field_txt)."""
    for name, (value, text) in fields.items():
        row[name] = _num(value)
        row[name + "_txt"] = text
    return row


#: A grid row: numbers for sorting plus their display text (for other app modules).
with_text = _with_text


# --------------------------------------------------------------------------- records

def coefficient_records(result) -> list[dict]:
    out = []
    for term, r in result.table.iterrows():
        out.append(_with_text({"term": term, "interval": f"[{fmt(r.ci_low)}, {fmt(r.ci_high)}]"},
                              {"estimate": (r.estimate, fmt(r.estimate)),
                               "std_error": (r.std_error, fmt(r.std_error)),
                               "t_stat": (r.t_stat, fmt(r.t_stat, 3)),
                               "p_value": (r.p_value, fmt_p(r.p_value))}))
    return out


def verdict(rejects) -> str:
    return {True: "rejected", False: "not rejected"}.get(rejects, "not available")


def comparison_records(comp: pd.DataFrame, term: str, current_rejects: bool | None) -> list[dict]:
    rows = comp[comp.term == term]
    out = []
    for _, r in rows.iterrows():
        ok = bool(np.isfinite(r.std_error))
        note = "; ".join(x for x in (r.get("why"), r.note) if isinstance(x, str) and x)
        out.append(_with_text(
            {"estimator": r.estimator, "verdict": verdict(r.rejects) if ok else "not available",
             "law": r.law if ok else "", "note": note,
             "differs": bool(ok and current_rejects is not None and r.rejects is not None
                             and bool(r.rejects) != current_rejects)},
            {"estimate": (r.estimate, fmt(r.estimate)),
             "bandwidth": (r.bandwidth, bandwidth_text(r.bandwidth)
                           if ok and np.isfinite(r.bandwidth) else ""),
             "lags": (r.lags, fmt(int(r.lags)) if ok and np.isfinite(r.lags) else ""),
             "std_error": (r.std_error, fmt(r.std_error)), "t_stat": (r.t_stat, fmt(r.t_stat, 3)),
             "p_value": (r.p_value, fmt_p(r.p_value))}))
    return out


def diagnostics_records(report) -> list[dict]:
    out = []
    for _, r in report.tests.iterrows():
        df = "" if pd.isna(r.df) else fmt(r.df)
        if isinstance(r.get("df2"), (int, float)) and not pd.isna(r.get("df2")):
            df = f"{fmt(r.df)}, {fmt(r.df2)}"
        out.append(_with_text({"test": r.test, "df": df, "null": r.null, "method": r.method},
                              {"statistic": (r.statistic, fmt(r.statistic)),
                               "p_value": (r.p_value, fmt_p(r.p_value))}))
    return out


def summary_records(table) -> list[dict]:
    summary = table.summary().reset_index(names="column")
    return [_with_text({"column": r.column},
                       {"count": (r["count"], fmt(int(r["count"]))),
                        "missing": (r.missing, fmt(int(r.missing))),
                        "mean": (r["mean"], fmt(r["mean"])), "sd": (r.sd, fmt(r.sd))})
            for _, r in summary.iterrows()]


def preview(table, rows: int = 8):
    import json
    frame = table.frame.head(rows).reset_index()
    frame.columns = [str(c) for c in frame.columns]
    data = json.loads(frame.to_json(orient="records", date_format="iso", double_precision=6))
    fields = [f"c{i}" for i in range(len(frame.columns))]    # names may hold dots or spaces
    records = [{f: rec[c] for f, c in zip(fields, frame.columns)} for rec in data]
    cols = [{"field": f, "headerName": c, "minWidth": 90} for f, c in zip(fields, frame.columns)]
    return records, cols


def tsv(records: list[dict], columns: list[dict]) -> str:
    """Grid rows as tab-separated text (what the table shows), for the clipboard."""
    def cell(rec, c):
        v = rec.get(c["field"] + "_txt", rec.get(c["field"], ""))
        return "" if v is None else str(v).replace("\t", " ").replace("\n", " ")
    lines = ["\t".join(c.get("headerName", c["field"]) for c in columns)]
    lines += ["\t".join(cell(r, c) for c in columns) for r in records or []]
    return "\n".join(lines) + "\n"


def first_stage_records(fs) -> list[dict]:
    return [_with_text({"endogenous": name},
                       {"robust_f": (r.robust_f, fmt(r.robust_f, 3)),
                        "robust_p": (r.robust_p, fmt_p(r.robust_p)),
                        "homoskedastic_f": (r.homoskedastic_f, fmt(r.homoskedastic_f, 3)),
                        "partial_r2": (r.partial_r2, fmt(r.partial_r2, 3))})
            for name, r in fs.table.iterrows()]


def strength_lines(fs) -> list:
    out = []
    for name, item in fs.strength.items():
        below = item["value"] < item["compare_with"]
        out.append(html.Li(f"{name} = {fmt(item['value'], 3)}: "
                           + ("below" if below else "above")
                           + f" {fmt(item['compare_with'], 3)} ({item['source']})."))
    return out


def spec_records(tests) -> list[dict]:
    """tests: [(name, JTest)]."""
    return [_with_text({"test": name, "df": str(j.df), "about": j.s_from},
                       {"statistic": (j.statistic, fmt(j.statistic, 4)),
                        "p_value": (j.p_value, fmt_p(j.p_value) if j.df else "n/a")})
            for name, j in tests]


# --------------------------------------------------------------------------- words

def tuning_text(res, model) -> str:
    """What the slider's value means under the current estimator, in one line."""
    lr = res.long_run
    if lr.bandwidth is not None:
        span = lr.span or model.nobs
        text = (f"b = {bandwidth_text(lr.bandwidth)} · {lags_text(lr.lags)} used · "
                + (f"b/T_p = {lr.bandwidth / span:.3g} ({span:,} periods)" if lr.span else
                   f"b/T = {lr.bandwidth / span:.3g}"))
        if lr.how:
            text += f" · {lr.how}"
        return text
    return lr.how or ""


def shortfall_note(res, model) -> str | None:
    """The warning for a kernel estimate with fewer than h - 1 lags under an overlapping
    h-period response (see engine.compare.lags_short_of_horizon)."""
    from ..engine.inference.compare import lags_short_of_horizon
    return lags_short_of_horizon(model, res.long_run)


def _runs(mask: np.ndarray, values: np.ndarray) -> list[tuple[float, float]]:
    """(first, last) value of each run of True."""
    out, start = [], None
    for i, m in enumerate(list(mask) + [False]):
        if m and start is None:
            start = i
        elif not m and start is not None:
            out.append((float(values[start]), float(values[i - 1])))
            start = None
    return out


def _ranges_text(runs, values, symbol) -> str:
    first, last = float(values[0]), float(values[-1])
    parts = []
    for a, b in runs:
        if a == first and b == last:
            parts.append(f"every {symbol}")
        elif a == b:
            parts.append(f"{symbol} = {a:g}")
        elif a == first:
            parts.append(f"{symbol} ≤ {b:g}")
        elif b == last:
            parts.append(f"{symbol} ≥ {a:g}")
        else:
            parts.append(f"{symbol} from {a:g} to {b:g}")
    return " and ".join(parts)


def conclusion_summary(sweep, states: np.ndarray, level: float) -> str:
    """One sentence over the strips: where every curve rejects, where none does, and how many
    changes of conclusion there are in all (states: curves x values, 1 / 0 / -1)."""
    values, sym = sweep.values, sweep.axis.symbol
    n = states.shape[0]
    avail = states >= 0
    some = avail.any(axis=0)
    every = some & np.all((states == 1) | ~avail, axis=0)
    none_ = some & np.all((states == 0) | ~avail, axis=0)
    changes = 0
    for row in states:
        seen = row[row >= 0]
        changes += int((np.diff(seen) != 0).sum())
    pct = f"{1 - level:.0%}"
    who = "the curve" if n == 1 else f"all {n} curves"
    if not some.any():
        return "No curve has a usable standard error along the axis."
    if every[some].all():
        return f"beta = 0 is rejected at {pct} by {who} at every {sym} shown."
    if none_[some].all():
        return f"beta = 0 is not rejected at {pct} by {who} at any {sym} shown."
    parts = []
    if every.any():
        parts.append(f"rejected by {who} for {_ranges_text(_runs(every, values), values, sym)}")
    if none_.any():
        parts.append(f"by none for {_ranges_text(_runs(none_, values), values, sym)}")
    mixed = some & ~every & ~none_
    if mixed.any() and n > 1:
        parts.append("by some of them elsewhere" if parts else
                     f"rejected by some curves and not others for "
                     f"{_ranges_text(_runs(mixed, values), values, sym)}")
    text = f"beta = 0 at {pct}: " + "; ".join(parts)
    return text + (f" ({changes} change{'s' if changes != 1 else ''} of conclusion in all; "
                   "the full list below)." if changes else ".")


def flagged_points_note(sweep) -> list:
    """A line under the chart for each kind of flagged point it draws hollow."""
    from ..engine.inference.sweep import STATUS_TEXT
    out = []
    for status in sorted({x for x in sweep.status.ravel() if x}):
        curves = [lab for lab, row in zip(sweep.labels, sweep.status) if (row == status).any()]
        out.append(html.Li(f"Hollow points ({', '.join(curves)}): {STATUS_TEXT[status]}; the "
                           "vertical axis keeps to the other points.", className="lw-flag"))
    return out


def error_box(text: str):
    return html.Div(text, className="lw-error", role="alert")


def ok_box(text: str):
    return html.Div(text, className="lw-ok")


# --------------------------------------------------------------------------- predictive

def persistence_records(rep) -> list[dict]:
    lo, hi = rep.rho_interval
    rows = [("AR(1) coefficient of " + rep.predictor, rep.rho,
             f"bias-adjusted {rep.rho_bias_adjusted:.3f}; {lo:.3f} to {hi:.3f} (normal "
             "approximation)"),
            ("correlation of its innovations with the errors", rep.corr_uv,
             "Stambaugh's bias is proportional to it"),
            ("least-squares slope (one period)", rep.slope, ""),
            ("small-sample bias of that slope", rep.bias, "Stambaugh (1999), Kendall's "
             "approximation"),
            ("reduced-bias slope", rep.reduced_bias_slope,
             f"standard error {rep.reduced_bias_se:.3g} (Amihud & Hurvich 2004)")]
    for test in (rep.ivx, rep.ivx_long):
        if test is not None:
            rows.append((f"IVX Wald{'' if test.horizon == 1 else f', {test.horizon} periods'}",
                         test.statistic, f"p {fmt_p(test.p_value)}; chi-square({test.df}); "
                         f"c_z = {test.tuning['c_z']:g}, beta = {test.tuning['beta']:g}, "
                         f"{test.tuning['lags']} lags"))
    return [_with_text({"quantity": q, "detail": d}, {"value": (v, fmt(v, 4))})
            for q, v, d in rows]


def size_records(frame: pd.DataFrame) -> list[dict]:
    out = []
    for _, r in frame.iterrows():
        out.append(_with_text(
            {"estimator": r.estimator, "interval": f"[{r.ci_low:.3f}, {r.ci_high:.3f}]"},
            {"rejection_rate": (r.rejection_rate, f"{r.rejection_rate:.3f}"),
             "nominal": (r.nominal, f"{r.nominal:.2f}"),
             "size_adjusted_critical_value": (r.size_adjusted_critical_value,
                                              fmt(r.size_adjusted_critical_value, 3)),
             "typical_critical_value": (r.typical_critical_value,
                                        fmt(r.typical_critical_value, 3))}))
    return out


def work_strip(steps) -> list:
    """One line per running step: its name, a bar (filled when the step reports its units,
    moving when it cannot), the stage under way and the seconds spent."""
    out = []
    for st in steps:
        frac = st.fraction
        bar = html.Progress(value=str(st.done), max=str(st.total)) if frac is not None \
            else html.Progress()
        parts = []
        if frac is not None and st.total > 1:
            parts.append(f"{st.done} of {st.total}")
        if st.what:
            parts.append(st.what)
        parts.append(f"{st.elapsed:.1f} s")
        out.append(html.Div([html.Span(st.label, className="lw-work-label"), bar,
                             html.Span(" · ".join(parts), className="lw-work-detail")],
                            className="lw-work-step"))
    return out
