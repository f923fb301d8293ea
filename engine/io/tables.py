"""Tables for memos and papers: CSV, Markdown, LaTeX and HTML renderings of a result frame, with
notes. Text that a spreadsheet would read as a formula is neutralised."""

from __future__ import annotations

import html
import io
import math

import numpy as np
import pandas as pd

FORMATS = ("csv", "markdown", "latex", "html")

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

_LATEX_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "<": r"$<$", ">": r"$>$", "|": r"$|$",
                  "≤": r"$\leq$", "≥": r"$\geq$", "±": r"$\pm$", "²": r"$^2$", "·": r"$\cdot$",
                  "−": "-", "β": r"$\beta$"}


def _oneline(text) -> str:
    return " ".join(str(text).split())


def _cell(value, digits: int) -> str:
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(value):
            return ""
        return f"{value:.{digits}g}" if abs(value) >= 1e-4 or value == 0 else f"{value:.{digits}e}"
    return "" if value is None else _oneline(value)


def _safe_text(value):
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def to_csv(frame: pd.DataFrame, index: bool = True, notes=()) -> str:
    safe = frame.copy()
    for col in safe.columns:
        if safe[col].dtype == object or pd.api.types.is_string_dtype(safe[col]):
            safe[col] = safe[col].map(lambda v: _safe_text(_oneline(v)) if isinstance(v, str)
                                      else v)
    if index:
        safe.index = safe.index.map(lambda v: _safe_text(_oneline(v)))
    safe.columns = [_safe_text(_oneline(c)) for c in safe.columns]
    buf = io.StringIO()
    for note in notes:
        buf.write("# " + _oneline(note) + "\n")
    safe.to_csv(buf, index=index, float_format="%.10g")
    return buf.getvalue()


def _rows(frame: pd.DataFrame, index: bool, digits: int):
    header = ([_oneline(frame.index.name or "")] if index else []) \
        + [_oneline(c) for c in frame.columns]
    rows = []
    for label, row in zip(frame.index, frame.itertuples(index=False)):
        cells = [_cell(v, digits) for v in row]
        rows.append(([_oneline(label)] if index else []) + cells)
    return header, rows


def markdown_cell(text: str) -> str:
    return html.escape(text, quote=False).replace("|", r"\|")


def to_markdown(frame: pd.DataFrame, index: bool = True, digits: int = 4, notes=()) -> str:
    header, rows = _rows(frame, index, digits)
    lines = ["| " + " | ".join(markdown_cell(h) for h in header) + " |",
             "| " + " | ".join("---" if i == 0 and index else "---:" for i in range(len(header)))
             + " |"]
    lines += ["| " + " | ".join(markdown_cell(c) for c in r) + " |" for r in rows]
    out = "\n".join(lines) + "\n"
    if notes:
        out += "\n" + "\n".join(markdown_cell(_oneline(n)) for n in notes) + "\n"
    return out


def latex_escape(text: str) -> str:
    return "".join(_LATEX_ESCAPES.get(ch, ch) for ch in _oneline(text))


def to_latex(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "",
             notes=()) -> str:
    header, rows = _rows(frame, index, digits)
    align = ("l" if index else "") + "r" * len(frame.columns)
    out = ["\\begin{table}[ht]", "\\centering"]
    if caption:
        out.append(f"\\caption{{{latex_escape(caption)}}}")
    out += [f"\\begin{{tabular}}{{{align}}}", "\\hline",
            " & ".join(latex_escape(h) for h in header) + " \\\\", "\\hline"]
    out += [" & ".join(latex_escape(c) for c in r) + " \\\\" for r in rows]
    out += ["\\hline", "\\end{tabular}"]
    for note in notes:
        out.append(f"\\par\\smallskip{{\\footnotesize {latex_escape(note)}}}")
    out.append("\\end{table}")
    return "\n".join(out) + "\n"


def to_html(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "",
            notes=()) -> str:
    header, rows = _rows(frame, index, digits)
    out = ["<table class='lw-table'>"]
    if caption:
        out.append(f"<caption>{html.escape(caption)}</caption>")
    out.append("<thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in header)
               + "</tr></thead><tbody>")
    out += ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in rows]
    out.append("</tbody></table>")
    out += [f"<p class='note'>{html.escape(_oneline(n))}</p>" for n in notes]
    return "\n".join(out) + "\n"


def render(frame: pd.DataFrame, fmt: str, index: bool = True, caption: str = "",
           notes=()) -> str:
    if fmt == "csv":
        return to_csv(frame, index=index, notes=([caption] if caption else []) + list(notes))
    if fmt == "markdown":
        return to_markdown(frame, index=index, notes=([caption] if caption else []) + list(notes))
    if fmt == "latex":
        return to_latex(frame, index=index, caption=caption, notes=notes)
    if fmt == "html":
        return to_html(frame, index=index, caption=caption, notes=notes)
    raise ValueError(f"unknown table format {fmt!r}; choose one of {', '.join(FORMATS)}")
