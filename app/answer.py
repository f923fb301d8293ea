"""The first read: the model in one line, the answer in one line, and a headline that says each
thing once.

- `answer_line(rows, level)`: over every estimator the comparison runs, the range of the
  coefficient's t with the estimators at both ends and how many reject beta = 0. It states
  the spread; it does not pick a winner.
- `headline(...)`: the current estimate, its verdict under the current estimator (named once,
  with its tuning value and how that value was chosen), where along the tuning axis the
  verdict holds ("rejected only for b <= 21"), and, under normal critical values with a b/T
  that is not small, what fixed-b critical values say where they change the conclusion.
- `region_sentence(flip, rejects)`: that middle part alone (also used by the report).

Pure functions of engine results; the callbacks that place them on the page are at the end.
"""

from __future__ import annotations

import math

import numpy as np
from dash import ALL, Input, Output, State, html
from dash.exceptions import PreventUpdate

from .. import engine
from ..engine.covariance.bandwidth import lags_text
from ..engine.io.tables import p_text
from ..engine.kinds import model_line
from .figures import LAW_WORDS
from .derived import is_gmm, make_estimator, no_model_message, stored, view_model
from .wiring import callback

#: b/T at or above which normal and fixed-b critical values differ enough to say so (common
#: practice: at b/T = 0.02 the Bartlett fixed-b 5% value is already about 2.0 against 1.96).
FIXED_B_FROM = 0.02


def t_text(t) -> str:
    return "" if t is None or not math.isfinite(t) else f"{t:.2f}"


def verdict_words(rejects) -> str:
    return {True: "rejected", False: "not rejected"}.get(rejects, "not available")


# --------------------------------------------------------------------------- the answer

def answer_line(rows, level: float) -> str:
    """rows: the comparison for the coefficient in focus, as records with `estimator`,
    `t_stat` (a number or None) and `verdict` ("rejected", "not rejected", "not available")."""
    usable = [r for r in rows or [] if isinstance(r.get("t_stat"), (int, float))
              and math.isfinite(r["t_stat"]) and r.get("verdict") in ("rejected", "not rejected")]
    if not usable:
        return "No estimator gives a usable standard error for this coefficient."
    lo = min(usable, key=lambda r: r["t_stat"])
    hi = max(usable, key=lambda r: r["t_stat"])
    n = len(usable)
    k = sum(r["verdict"] == "rejected" for r in usable)
    missing = len(rows) - n
    pct = f"{1 - level:.0%}"
    spread = (f"t = {t_text(lo['t_stat'])} under every estimator" if lo is hi else
              f"t from {t_text(lo['t_stat'])} ({lo['estimator']}) to {t_text(hi['t_stat'])} "
              f"({hi['estimator']})")
    count = {0: f"by none of the {n} estimators", n: f"by all {n} estimators"}.get(
        k, f"by {k} of {n} estimators")
    tail = f" ({missing} not available)" if missing else ""
    return f"{spread}; beta = 0 rejected {count} at {pct}{tail}."


def comparison_rows(comp, term: str) -> list[dict]:
    """The engine's comparison frame as the records `answer_line` reads."""
    rows = comp[comp.term == term]
    return [{"estimator": r.estimator,
             "t_stat": float(r.t_stat) if np.isfinite(r.t_stat) else None,
             "verdict": verdict_words(r.rejects) if np.isfinite(r.std_error)
             else "not available"} for _, r in rows.iterrows()]


# --------------------------------------------------------------------------- the headline

def _range(a: float, b: float, first: float, last: float, symbol: str) -> str:
    if a == first and b == last:
        return f"every {symbol} from {a:g} to {b:g}"
    if a == b:
        return f"{symbol} = {a:g}"
    if a == first:
        return f"{symbol} ≤ {b:g}"
    if b == last:
        return f"{symbol} ≥ {a:g}"
    return f"{symbol} from {a:g} to {b:g}"


def region_sentence(flip, rejects, law_words: str | None = None) -> str:
    """Where along the axis the current verdict holds, said from the current verdict's side:
    "Not rejected for b ≥ 22; rejected only for b ≤ 21 (Bartlett, normal critical values)."
    law_words names the critical values (the headline's law), else the flip's request."""
    if flip is None or flip.rejects_at_start is None:
        return ""
    segs = flip.segments
    first, last = float(flip.values[0]), float(flip.values[-1])
    tail = f" ({flip.curve}, {law_words or flip.reference} critical values)"
    mine = [s for s in segs if s[2] is rejects]
    if rejects is None or not mine:
        parts = [f"{verdict_words(s)} for {_range(a, b, first, last, flip.symbol)}"
                 for a, b, s in segs]
        text = "; ".join(parts)
        return text[0].upper() + text[1:] + tail + "."

    def ranges(items):
        return " and ".join(_range(a, b, first, last, flip.symbol) for a, b, _ in items)
    other = [s for s in segs if s[2] is (not rejects)]
    gaps = [s for s in segs if s[2] is None]
    text = f"{verdict_words(rejects).capitalize()} for {ranges(mine)}"
    if other:
        text += f"; {verdict_words(not rejects)} only for {ranges(other)}"
    if gaps:
        text += f"; not available for {ranges(gaps)}"
    return text + tail + "."


def choice_text(res, est, rule_title: str | None) -> str:
    """The estimator, its tuning value and how that value was chosen, each said once."""
    lr = res.long_run
    family = est.family
    if family.axis is None or lr.tuning is None or not np.isfinite(lr.tuning):
        return res.label
    try:
        name = est.at(float(lr.tuning)).label
    except engine.LagwiseError:
        name = res.label
    if lr.bandwidth is not None and lr.lags is not None:
        name += f" ({lags_text(lr.lags)})"
    how = f"value chosen by {rule_title}" if rule_title else "set by hand"
    return f"{name}, {how}"


def fixed_b_note(res, est, model, term: str) -> str:
    """Under normal critical values with b/T not small: what fixed-b critical values say about
    the same estimate, when they change the conclusion (else empty). A table lookup (about
    0.3 ms), no pass over the data."""
    lr = res.long_run
    if res.law.key != "normal" or est.family.fixed_b is None or lr.bandwidth is None:
        return ""
    span = lr.span or model.nobs
    ratio = lr.bandwidth / span if span else 0.0
    if ratio < FIXED_B_FROM:
        return ""
    try:
        cv = np.ravel(est.family.law("fixed-b", est.params, lr, model)
                      .critical_value(res.level))
    except engine.LagwiseError:
        return ""
    cv = float(cv[res.table.index.get_loc(term)] if cv.size > 1 else cv[0])
    t = float(res.table.loc[term, "t_stat"])
    p = float(res.table.loc[term, "p_value"])
    if not (np.isfinite(t) and np.isfinite(cv) and np.isfinite(p)):
        return ""
    fixed = abs(t) > cv
    if fixed == (p < 1 - res.level):
        return ""
    return (f"Fixed-b critical values (±{cv:.2f} at b/T = {ratio:.3g}) would "
            f"{'reject' if fixed else 'not reject'} beta = 0 with the same t = {t:.2f}.")


def headline_parts(res, est, model, term: str, flip, rule_title: str | None) -> dict:
    """The headline's pieces as text: numbers, verdict, choice, region, fixed-b note."""
    row = res.table.loc[term]
    level = res.level
    rejects = bool(row.p_value < 1 - level) if np.isfinite(row.p_value) else None
    verdict = {True: "beta = 0 is rejected", False: "beta = 0 is not rejected",
               None: "no test: the standard error is not available"}[rejects]
    mc = res.law.mc_error(level)
    law = f"reference law: {res.law.label}" + ("" if mc is None else
                                              f" (simulated; Monte Carlo s.e. {mc:.3f})")
    p = p_text(row.p_value)
    return {"rejects": rejects, "term": term,
            "numbers": [f"estimate {_num(row.estimate)}", f"SE {_num(row.std_error)}",
                        f"t {t_text(row.t_stat)}",
                        f"p {p}" if p.startswith("<") else f"p = {p}" if p else "p n/a"],
            "verdict": f"{verdict} at {1 - level:.0%}",
            "choice": f"under {choice_text(res, est, rule_title)}; {law}.",
            "region": region_sentence(flip, rejects, LAW_WORDS.get(res.law.key)),
            "fixed_b": fixed_b_note(res, est, model, term)}


def headline(res, est, model, term: str, flip, rule_title: str | None):
    """(rejects, children) for the headline card."""
    h = headline_parts(res, est, model, term, flip, rule_title)
    out = [html.Div([html.Span(term, className="lw-hl-term")]
                    + [html.Span(x, className="lw-hl-num") for x in h["numbers"]],
                    className="lw-hl-row"),
           html.Div([html.Strong(h["verdict"]), html.Span(" " + h["choice"])],
                    className="lw-hl-verdict")]
    if h["region"]:
        out.append(html.Div(h["region"], className="lw-hl-flip"))
    if h["fixed_b"]:
        out.append(html.Div(h["fixed_b"], className="lw-hl-fixedb"))
    return h["rejects"], out


def headline_text(res, est, model, term, flip, rule_title) -> list[str]:
    """The headline as plain sentences (the HTML report)."""
    h = headline_parts(res, est, model, term, flip, rule_title)
    return [f"{term}: " + ", ".join(h["numbers"]), f"{h['verdict']} {h['choice']}",
            h["region"], h["fixed_b"]]


def _num(x) -> str:
    return "" if x is None or not np.isfinite(x) else f"{x:.4g}"


# --------------------------------------------------------------------------- the page

@callback(Output("answer-line", "children"), Input("compare-table", "rowData"),
          State("level", "value"), prevent_initial_call=True)
def on_answer(rows, level):
    """The answer in one line, from the comparison the page already holds (no engine work)."""
    if not isinstance(rows, list) or not rows:
        return ""
    records = [{"estimator": r.get("estimator", ""), "t_stat": r.get("t_stat"),
                "verdict": r.get("verdict")} for r in rows if isinstance(r, dict)]
    return answer_line(records, float(level or 0.95))


@callback(Output("model-line", "children"), Output("coef-model", "children"),
          Input("fit-key", "data"), Input("iv-method", "value"),
          State("est-name", "value"), State({"type": "est-param", "name": ALL}, "value"),
          State({"type": "est-param", "name": ALL}, "id"), State("tune-rule", "value"),
          State("tune-slider", "value"), State("session", "data"))
def on_model_line(fkey, method, name, values, ids, rule, slider, session):
    """The model in one line above the headline and the coefficient table (for GMM, the
    weighted fit's line, which names the method)."""
    model = stored(session, fkey)
    if model is None:
        text = no_model_message(session, fkey) if fkey else ""
        return text, text
    shown = model
    if is_gmm(model, method):
        try:
            shown = view_model(session, fkey, model, method,
                               make_estimator(name, values, ids, rule, slider))
        except engine.LagwiseError:
            shown = model
    text = model_line(shown)
    if not text:
        raise PreventUpdate
    return text, text
