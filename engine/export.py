"""Tables out: CSV, Markdown, LaTeX and HTML, plus a replayable settings record.

CSV cells that are text and would start a spreadsheet formula (=, +, -, @, tab, CR) are
prefixed with an apostrophe; numbers are written as numbers.
"""

from __future__ import annotations

import html
import io
import json
import math

import numpy as np
import pandas as pd

FORMATS = ("csv", "markdown", "latex", "html")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_LATEX_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}"}


def _cell(value, digits: int) -> str:
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        if math.isnan(value):
            return ""
        return f"{value:.{digits}g}" if abs(value) >= 1e-4 or value == 0 else f"{value:.{digits}e}"
    return "" if value is None else str(value)


def _safe_text(value):
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def to_csv(frame: pd.DataFrame, index: bool = True) -> str:
    safe = frame.copy()
    for col in safe.columns:
        if safe[col].dtype == object or pd.api.types.is_string_dtype(safe[col]):
            safe[col] = safe[col].map(_safe_text)
    if index:
        safe.index = safe.index.map(lambda v: _safe_text(str(v)))
    safe.columns = [_safe_text(str(c)) for c in safe.columns]
    buf = io.StringIO()
    safe.to_csv(buf, index=index, float_format="%.10g")
    return buf.getvalue()


def _rows(frame: pd.DataFrame, index: bool, digits: int):
    header = ([frame.index.name or ""] if index else []) + [str(c) for c in frame.columns]
    rows = []
    for label, row in zip(frame.index, frame.itertuples(index=False)):
        cells = [_cell(v, digits) for v in row]
        rows.append(([str(label)] if index else []) + cells)
    return header, rows


def to_markdown(frame: pd.DataFrame, index: bool = True, digits: int = 4) -> str:
    header, rows = _rows(frame, index, digits)
    esc = lambda s: s.replace("|", r"\|")
    lines = ["| " + " | ".join(esc(h) for h in header) + " |",
             "| " + " | ".join("---" if i == 0 and index else "---:" for i in range(len(header)))
             + " |"]
    lines += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
    return "\n".join(lines) + "\n"


def latex_escape(text: str) -> str:
    return "".join(_LATEX_ESCAPES.get(ch, ch) for ch in str(text))


def to_latex(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "") -> str:
    header, rows = _rows(frame, index, digits)
    align = ("l" if index else "") + "r" * len(frame.columns)
    out = ["\\begin{table}[ht]", "\\centering"]
    if caption:
        out.append(f"\\caption{{{latex_escape(caption)}}}")
    out += [f"\\begin{{tabular}}{{{align}}}", "\\hline",
            " & ".join(latex_escape(h) for h in header) + " \\\\", "\\hline"]
    out += [" & ".join(latex_escape(c) for c in r) + " \\\\" for r in rows]
    out += ["\\hline", "\\end{tabular}", "\\end{table}"]
    return "\n".join(out) + "\n"


def to_html(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "") -> str:
    header, rows = _rows(frame, index, digits)
    out = ["<table class='lw-table'>"]
    if caption:
        out.append(f"<caption>{html.escape(caption)}</caption>")
    out.append("<thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in header)
               + "</tr></thead><tbody>")
    out += ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in rows]
    out.append("</tbody></table>")
    return "\n".join(out) + "\n"


def render(frame: pd.DataFrame, fmt: str, index: bool = True, caption: str = "") -> str:
    if fmt == "csv":
        return to_csv(frame, index=index)
    if fmt == "markdown":
        return to_markdown(frame, index=index)
    if fmt == "latex":
        return to_latex(frame, index=index, caption=caption)
    if fmt == "html":
        return to_html(frame, index=index, caption=caption)
    raise ValueError(f"unknown table format {fmt!r}; choose one of {', '.join(FORMATS)}")


def settings_json(settings: dict) -> str:
    """A replayable settings record (plain JSON, versioned)."""
    return json.dumps({"lagwise_settings": 1, **settings}, indent=2, sort_keys=True, default=str)


def load_settings(text: str) -> dict:
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        from .errors import DataError
        raise DataError(f"settings file is not valid JSON: {exc}") from None
    if not isinstance(data, dict) or data.get("lagwise_settings") != 1:
        from .errors import DataError
        raise DataError("not a Lagwise settings file (missing 'lagwise_settings': 1)")
    data.pop("lagwise_settings")
    return data
