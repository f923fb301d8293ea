"""Tables for memos and papers: CSV, Markdown, LaTeX and HTML renderings of a result frame, with
notes and a provenance stamp (engine.io.provenance). Text that a spreadsheet would read as a
formula is neutralised. CSV keeps the frame's column names and numbers for machines; Markdown,
LaTeX and HTML are for readers: columns named in words ("std. error", "t", "p", "95%
interval"), p-values as on screen ("< 0.001", never scientific notation), booktabs rules in
LaTeX."""

from __future__ import annotations

import html
import io
import math
import re

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
        return f"{value:.{digits}g}"
    return "" if value is None else _oneline(value)


#: Column names of the engine's frames, in words (the reader's formats).
COLUMN_WORDS = {"std_error": "std. error", "t_stat": "t", "p_value": "p", "ci_low": "interval low",
                "ci_high": "interval high", "bandwidth": "b", "reference": "reference law",
                "rejects": "beta = 0 rejected", "df2": "df (second)", "null": "null hypothesis",
                "rejection_rate": "rejection rate", "ci_low_mc": "Monte Carlo low",
                "size_adjusted_critical_value": "size-adjusted |t|",
                "typical_critical_value": "critical value used", "robust_f": "F (chosen S)",
                "robust_p": "p (chosen S)", "homoskedastic_f": "F (homoskedastic)",
                "homoskedastic_p": "p (homoskedastic)", "partial_r2": "partial R²"}


def p_text(p) -> str:
    """A p-value as the screen shows it: three decimals, "< 0.001" below that."""
    if p is None or not isinstance(p, (int, float, np.integer, np.floating)) \
            or not math.isfinite(p):
        return ""
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def in_words(frame: pd.DataFrame, level: float | None = None) -> pd.DataFrame:
    """The frame for a reader: p-values as text, an interval's two ends as one "[a, b]" column
    named by its level, every column named in words (snake_case names spelled out)."""
    names = [str(c) for c in frame.columns]
    cols, out_names = [], []
    for i, name in enumerate(names):
        col = frame.iloc[:, i]
        if name == "ci_high" and "ci_low" in names:
            continue
        if name == "ci_low" and "ci_high" in names:
            high = frame.iloc[:, names.index("ci_high")]
            col = pd.Series([f"[{_cell(a, 4)}, {_cell(b, 4)}]" if _cell(a, 4) and _cell(b, 4)
                             else "" for a, b in zip(col, high)], index=frame.index, dtype=object)
            name = f"{level:.0%} interval" if level is not None else "interval"
        elif name == "p_value" or name.endswith("_p"):
            col = col.map(p_text).astype(object)
        elif name == "rejects":
            col = col.map(lambda r: {True: "rejected", False: "not rejected"}.get(
                r, "not available") if r is None or isinstance(r, (bool, np.bool_)) else r)
            name = "beta = 0"
        cols.append(col.reset_index(drop=True))
        out_names.append(COLUMN_WORDS.get(name, name.replace("_", " ")))
    out = pd.concat(cols, axis=1, ignore_index=True) if cols else pd.DataFrame(index=frame.index)
    out.columns = out_names
    out.index = frame.index
    if frame.index.name:
        out.index.name = COLUMN_WORDS.get(str(frame.index.name),
                                          str(frame.index.name).replace("_", " "))
    return out


def _safe_text(value):
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def to_csv(frame: pd.DataFrame, index: bool = True, notes=()) -> str:
    """Numbers stay numbers; the notes (and the provenance stamp) come first as "# " lines."""
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


_NUMBER_LIKE = re.compile(r"^[\s<>\[\](),.+\-0-9eE]*$")


def _is_text(series: pd.Series) -> bool:
    """Words (aligned left) rather than numbers, p-values or intervals (aligned right)."""
    if pd.api.types.is_bool_dtype(series):
        return True
    if pd.api.types.is_numeric_dtype(series):
        return False
    cells = [str(v) for v in series if v is not None and str(v) != ""]
    return not cells or not all(_NUMBER_LIKE.match(v) for v in cells)


def to_markdown(frame: pd.DataFrame, index: bool = True, digits: int = 4, notes=()) -> str:
    """Text columns aligned left, numbers right."""
    header, rows = _rows(frame, index, digits)
    align = ([":---"] if index else []) + [":---" if _is_text(frame.iloc[:, i]) else "---:"
                                           for i in range(frame.shape[1])]
    lines = ["| " + " | ".join(markdown_cell(h) for h in header) + " |",
             "| " + " | ".join(align) + " |"]
    lines += ["| " + " | ".join(markdown_cell(c) for c in r) + " |" for r in rows]
    out = "\n".join(lines) + "\n"
    if notes:
        out += "\n" + "\n".join(markdown_cell(_oneline(n)) for n in notes) + "\n"
    return out


def latex_escape(text: str) -> str:
    return "".join(_LATEX_ESCAPES.get(ch, ch) for ch in _oneline(text))


#: The comment every LaTeX export opens with: the packages its rules need.
LATEX_PACKAGES = "% needs \\usepackage{booktabs} (\\toprule, \\midrule, \\bottomrule)"


def latex_comments(lines) -> list[str]:
    return ["% " + _oneline(line).replace("%", "\\%") for line in lines]


def to_latex(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "",
             notes=(), stamp=()) -> str:
    """A table environment with booktabs rules; text columns left, numbers right; the stamp
    and the packages needed as comments at the top."""
    header, rows = _rows(frame, index, digits)
    align = ("l" if index else "") + "".join("l" if _is_text(frame.iloc[:, i]) else "r"
                                             for i in range(frame.shape[1]))
    out = [LATEX_PACKAGES, *latex_comments(stamp), "\\begin{table}[ht]", "\\centering"]
    if caption:
        out.append(f"\\caption{{{latex_escape(caption)}}}")
    out += [f"\\begin{{tabular}}{{{align}}}", "\\toprule",
            " & ".join(latex_escape(h) for h in header) + " \\\\", "\\midrule"]
    out += [" & ".join(latex_escape(c) for c in r) + " \\\\" for r in rows]
    out += ["\\bottomrule", "\\end{tabular}"]
    for note in notes:
        out.append(f"\\par\\smallskip{{\\footnotesize {latex_escape(note)}}}")
    out.append("\\end{table}")
    return "\n".join(out) + "\n"


def to_html(frame: pd.DataFrame, index: bool = True, digits: int = 4, caption: str = "",
            notes=(), stamp=()) -> str:
    header, rows = _rows(frame, index, digits)
    out = ["<table class='lw-table'>"]
    if caption:
        out.append(f"<caption>{html.escape(caption)}</caption>")
    out.append("<thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in header)
               + "</tr></thead><tbody>")
    out += ["<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in rows]
    out.append("</tbody></table>")
    out += [f"<p class='note'>{html.escape(_oneline(n))}</p>" for n in notes]
    out += [f"<p class='note lw-stamp'>{html.escape(_oneline(n))}</p>" for n in stamp]
    return "\n".join(out) + "\n"


def render(frame: pd.DataFrame, fmt: str, index: bool = True, caption: str = "",
           notes=(), stamp=(), level: float | None = None) -> str:
    """The frame in a format: CSV as it is (numbers and the frame's names, for machines), the
    others in words (`in_words`). stamp: the provenance lines (engine.io.provenance), stated
    in every format (CSV and Markdown as lines, LaTeX as comments, HTML as notes). level: the
    confidence level, which names the interval column."""
    stamp = list(stamp)
    if fmt not in FORMATS:
        raise ValueError(f"unknown table format {fmt!r}; choose one of {', '.join(FORMATS)}")
    if fmt == "csv":
        return to_csv(frame, index=index,
                      notes=stamp + ([caption] if caption else []) + list(notes))
    frame = in_words(frame, level)
    if fmt == "markdown":
        return to_markdown(frame, index=index,
                           notes=([caption] if caption else []) + list(notes) + stamp)
    if fmt == "latex":
        return to_latex(frame, index=index, caption=caption, notes=notes, stamp=stamp)
    return to_html(frame, index=index, caption=caption, notes=notes, stamp=stamp)
