"""The HTML report of the current view: the artefact that goes to a reviewer.

In this order: where it came from (Lagwise version, time, data file with rows and SHA-256),
the model in one line, the answer in one line, the headline, the sensitivity chart with its
conclusion strips and their summary (every change on demand), the coefficient table and the
comparison, the residual diagnostics with their reading, then whichever of the persistence,
instrument-strength and size-check results exist for this model and were computed. Tables are
the screen's own rows (the same formatting, headers in words); a chart that was not computed
is left out, never shown empty.
"""

from __future__ import annotations

import html
import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from .. import engine
from ..engine.kinds import kind_of, model_line
from . import answer as A
from . import views as V
from . import figures as F
from .derived import (comparison_for, diagnostics_for, flip_for, is_gmm, strength_for,
                      sweep_for)
from .state import STORE, key_for, spec_hash

STYLE = ("body{font-family:'Liberation Sans',Arial,sans-serif;color:#1d2733;max-width:1080px;"
         "margin:24px auto;padding:0 16px;line-height:1.45}h1{color:#0e6e64;margin-bottom:4px}"
         "h2{font-size:18px;margin:28px 0 8px;border-bottom:1px solid #e7e4dc;padding-bottom:4px}"
         "table{border-collapse:collapse;font-size:13px;margin:8px 0 14px}"
         "td,th{padding:4px 9px;border-bottom:1px solid #e7e4dc;text-align:right;"
         "white-space:nowrap}th{background:#f1efe8;font-weight:600}"
         "td.text,th.text{text-align:left;white-space:normal}"
         ".model{font-size:14px}.answer{font-size:17px;font-weight:600;margin:10px 0}"
         ".headline p{margin:3px 0}.note,.stamp{color:#6b7480;font-size:12.5px}"
         ".stamp{margin:0 0 14px}details{margin:6px 0 12px}summary{cursor:pointer;"
         "color:#0e6e64}ul{margin:4px 0 10px}")


def _p(text: str, cls: str = "") -> str:
    return f"<p{f' class={cls!r}' if cls else ''}>{html.escape(text)}</p>" if text else ""


def records_table(records: list[dict], columns: list[dict], headers: dict | None = None) -> str:
    """A table of the screen's rows: each cell's display text, each header the screen's (or
    its replacement in `headers`)."""
    headers = headers or {}
    def cell(rec, c):
        v = rec.get(c["field"] + "_txt", rec.get(c["field"], ""))
        if isinstance(v, float) and not math.isfinite(v):
            v = ""
        return "" if v is None else str(v)
    left = [c.get("cellStyle", {}).get("textAlign") == "left" or "valueFormatter" not in c
            for c in columns]
    head = "".join(f"<th class='{'text' if lft else ''}'>"
                   f"{html.escape(headers.get(c['field'], c['headerName']))}</th>"
                   for c, lft in zip(columns, left))
    body = "".join("<tr>" + "".join(
        f"<td class='{'text' if lft else ''}'>{html.escape(cell(r, c))}</td>"
        for c, lft in zip(columns, left)) + "</tr>" for r in records)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _computed(fig) -> bool:
    """A chart that shows something (not a placeholder or a hidden card's empty figure)."""
    return isinstance(fig, dict) and bool(fig.get("data"))


class _Charts:
    """Embeds figures; the first one carries plotly.js, the others reuse it."""

    def __init__(self):
        self.first = True

    def __call__(self, fig: dict) -> str:
        out = go.Figure(fig).to_html(full_html=False,
                                     include_plotlyjs="inline" if self.first else False,
                                     config={"displaylogo": False})
        self.first = False
        return out


def build_report(session, fkey, shown, res, base, est, focus, level, reference, method, rule,
                 figs: dict, size_data=None, stamp=None) -> str:
    """The report as one self-contained HTML page (see the module docstring)."""
    charts = _Charts()
    parts = ["<!doctype html><html><head><meta charset='utf-8'>",
             "<meta name='generator' content='" + html.escape(
                 f"Lagwise {stamp.version}" if stamp else "Lagwise") + "'>",
             f"<title>Lagwise report: {html.escape(focus)}</title><style>{STYLE}</style>"
             "</head><body>", "<h1>Lagwise report</h1>"]
    if stamp is not None:
        parts.append("<p class='stamp'>" + "<br>".join(html.escape(x) for x in stamp.lines())
                     + "</p>")
    parts.append(_p(model_line(shown), "model"))
    gmm_key = spec_hash(est.settings()) if is_gmm(base, method) else ""
    comp = comparison_for(session, fkey, shown, level, reference, gmm_key)
    parts.append(_p(A.answer_line(A.comparison_rows(comp, focus), level), "answer"))
    flip = flip_for(session, fkey, base, est, focus, level, reference, method)
    title = est.family.axis.rules[rule][0] if est.family.axis and rule in est.family.axis.rules \
        else None
    parts.append("<div class='headline'>" + "".join(
        _p(x) for x in A.headline_text(res, est, shown, focus, flip, title)) + "</div>")
    parts += _sensitivity(figs, charts, *_flips(session, fkey, base, est, focus, level,
                                                  reference, method))
    parts.append("<h2>Coefficients</h2>" + _p(res.describe(), "note")
                 + records_table(V.coefficient_records(res), V.COEF_COLUMNS,
                                 {"interval": f"{level:.0%} interval"})
                 + "".join(_p(n, "note") for n in res.notes))
    rejects = A.headline_parts(res, est, shown, focus, flip, title)["rejects"]
    parts.append(f"<h2>Every estimator: {html.escape(focus)}</h2>"
                 + _p("Marked rows (*) reach a different conclusion from the current choice; "
                      "a different conclusion is not an error of either estimator.", "note")
                 + _comparison(comp, focus, rejects))
    if _computed(figs.get("interval-graph")):
        parts.append(charts(figs["interval-graph"]))
    parts += _diagnostics(session, fkey, base, figs, charts)
    parts += _persistence(session, fkey, base, focus, level, figs, charts)
    parts += _instruments(session, fkey, base, method, est, level)
    parts += _size(size_data, figs, charts)
    parts.append(_p("Conventions: " + f"{level:.0%} confidence intervals; two-sided tests of "
                    f"beta = 0 at {1 - level:.0%}; {res.describe()}. Standard errors rest on "
                    "large-sample approximations unless a t, F or fixed-b reference law is "
                    "stated; kernel results depend on the bandwidth b shown.", "note"))
    if stamp is not None:
        parts.append(_p(stamp.text(), "stamp"))
    parts.append("</body></html>")
    return "\n".join(p for p in parts if p)


def _flips(session, fkey, base, est, focus, level, reference, method):
    """(summary sentence, every change curve by curve) as the sensitivity card shows them."""
    try:
        sweep = sweep_for(session, fkey, base, est, method)
        ref = reference if np.isfinite(sweep.critical_values(level, reference, focus)).any() \
            else "auto"
        states = F.conclusion_states(sweep, focus, level, ref)
        flips = [engine.significance_flip(base, focus, level=level, reference=ref,
                                          sweep_result=sweep, curve=c).sentence()
                 for c in range(len(sweep.labels))]
    except engine.LagwiseError:
        return "", []
    return V.conclusion_summary(sweep, states, level), flips


def _sensitivity(figs, charts, summary, flips) -> list[str]:
    out = []
    if _computed(figs.get("sens-graph")):
        out += ["<h2>Sensitivity</h2>", charts(figs["sens-graph"])]
    if _computed(figs.get("flip-graph")):
        out.append(charts(figs["flip-graph"]))
    if summary:
        out.append(_p(summary))
    if flips:
        out.append("<details><summary>every change of conclusion, curve by curve</summary><ul>"
                   + "".join(f"<li>{html.escape(x)}</li>" for x in flips) + "</ul></details>")
    return out


def _comparison(comp, focus, rejects) -> str:
    records = V.comparison_records(comp, focus, rejects)
    for r in records:
        if r.get("differs"):
            r["estimator"] = "* " + r["estimator"]
    return records_table(records, V.COMPARE_COLUMNS)


def _diagnostics(session, fkey, base, figs, charts) -> list[str]:
    if "diagnostics" not in kind_of(base).cards:
        return []
    try:
        rep = diagnostics_for(session, fkey, base)
    except engine.LagwiseError as exc:
        return ["<h2>Residual diagnostics</h2>", _p(f"not available: {exc}", "note")]
    out = ["<h2>Residual diagnostics</h2>",
           "<ul>" + "".join(f"<li>{html.escape(s)}</li>" for s in rep.reading + rep.notes)
           + "</ul>", records_table(V.diagnostics_records(rep), V.DIAG_COLUMNS)]
    for gid in ("resid-graph", "acf-graph", "scatter-graph", "score-graph"):
        if _computed(figs.get(gid)):
            out.append(charts(figs[gid]))
    return out


def _persistence(session, fkey, base, focus, level, figs, charts) -> list[str]:
    if "persistence" not in kind_of(base).cards:
        return []
    out = STORE.get(session, key_for(fkey, "persistence", focus, level))
    if not isinstance(out, dict) or "report" not in out:
        return []
    rep = out["report"]
    parts = [f"<h2>Persistence of {html.escape(rep.predictor)}</h2>",
             records_table(V.persistence_records(rep), V.PERSIST_COLUMNS),
             "<ul>" + "".join(f"<li>{html.escape(s)}</li>" for s in rep.reading) + "</ul>"]
    if _computed(figs.get("horizon-graph")):
        parts.append(charts(figs["horizon-graph"]))
    parts += [_p(n, "note") for n in out.get("notes", [])]
    return parts


def _instruments(session, fkey, base, method, est, level) -> list[str]:
    if "instruments" not in kind_of(base).cards:
        return []
    try:
        fs, tests, ar = strength_for(session, fkey, base, method, est, level)
    except engine.LagwiseError as exc:
        return ["<h2>Instruments</h2>", _p(f"not available: {exc}", "note")]
    out = ["<h2>Instruments: strength and specification</h2>",
           records_table(V.first_stage_records(fs), V.FIRST_STAGE_COLUMNS),
           "<ul>" + "".join(f"<li>{html.escape(_li_text(li))}</li>"
                            for li in V.strength_lines(fs)) + "</ul>",
           records_table(V.spec_records(tests), V.SPEC_COLUMNS)]
    if ar is not None:
        out += [_p(f"Anderson-Rubin {ar.level:.0%} set for {ar.term}: {ar.text()} "
                   f"({ar.estimator}; {ar.law})"), _p(ar.reading)]
    return out


def _li_text(li) -> str:
    children = li.children
    return children if isinstance(children, str) else " ".join(map(str, children or []))


def _size(size_data, figs, charts) -> list[str]:
    if not isinstance(size_data, dict) or not size_data.get("frame"):
        return []
    frame = pd.DataFrame(size_data["frame"])
    out = ["<h2>Size at this sample</h2>"]
    if _computed(figs.get("size-graph")):
        out.append(charts(figs["size-graph"]))
    out.append(records_table(V.size_records(frame), V.SIZE_COLUMNS))
    out += [_p(n, "note") for n in size_data.get("notes", [])]
    return out
