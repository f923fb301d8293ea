"""The robustness table for a paper: specifications side by side under several estimators, as
LaTeX, Markdown, HTML or an Excel workbook."""

from __future__ import annotations

import html
import warnings

import numpy as np
import pandas as pd
from openpyxl import Workbook
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Alignment, Font

from ..covariance.registry import as_estimator
from ..errors import SpecificationError
from .provenance import combined, stamp_lines
from .tables import LATEX_PACKAGES, latex_comments, latex_escape as esc, markdown_cell, p_text

#: What can stand beneath each estimate, and the footnote that says so.
BENEATH = {"std_error": "beneath each estimate: its standard error, in parentheses",
           "t": "beneath each estimate: its t statistic, in square brackets",
           "p": "beneath each estimate: its p-value (p = ...)",
           "interval": "beneath each estimate: its confidence interval, in square brackets"}
#: Older option values (`show=`), accepted with a deprecation warning.
_OLD_SHOW = {"se": "std_error", "t": "t", "p": "p", "ci": "interval"}


def _labelled(items, what):
    if isinstance(items, dict):
        return [(str(k), v) for k, v in items.items()]
    if not isinstance(items, (list, tuple)):
        items = [items]
    if not items:
        raise SpecificationError(f"give at least one {what}")
    return [(None, v) for v in items]


class RobustnessTable:
    """Coefficients (rows) by specifications or estimators (columns), the chosen statistic
    beneath each estimate, and every convention in the notes at the foot.

    `.frame` holds the numbers (long: column, term, estimate, std_error, t_stat, p_value,
    ci_low, ci_high); `to_latex()`, `to_markdown()`, `to_html()` return text; `to_excel(path)`
    writes a workbook (the table with numbers kept numeric, and the long numbers)."""

    def __init__(self, frame, columns, specs, estimators, terms, beneath, level, notes, extra,
                 stamps=()):
        self.frame = frame
        self.columns = columns              # column headers "(1)", "(2)", ...
        self.specs = specs                  # per column: specification label
        self.estimators = estimators        # per column: estimator label
        self.terms = terms
        self.beneath = beneath              # a key of BENEATH
        self.level = level
        self.notes = notes
        self.extra = extra                  # per column: {"N": .., "R2": ..}
        self.stamps = list(stamps)          # provenance of each data source (and when made)

    def stamp(self) -> list[str]:
        """Which Lagwise made the table, when, and from which data (file, rows, SHA-256)."""
        return stamp_lines(self.stamps)

    # cells
    def _value(self, col, term, field):
        row = self.frame[(self.frame.column == col) & (self.frame.term == term)]
        return None if row.empty else row.iloc[0][field]

    def _stat_text(self, col, term, digits):
        row = self.frame[(self.frame.column == col) & (self.frame.term == term)]
        if row.empty:
            return ""
        r = row.iloc[0]
        if not np.isfinite(r.std_error):
            return "(n/a)"
        if self.beneath == "std_error":
            return f"({r.std_error:.{digits}f})"
        if self.beneath == "t":
            return f"[{r.t_stat:.2f}]"
        if self.beneath == "p":
            p = p_text(r.p_value)
            return f"p {p}" if p.startswith("<") else f"p = {p}"
        return f"[{r.ci_low:.{digits}f}, {r.ci_high:.{digits}f}]"

    def grid(self, digits: int = 3) -> list[list[str]]:
        """The table as text cells: a header row of specifications, one of estimators, then
        two rows per coefficient, then the sample rows."""
        out = [[""] + self.specs, [""] + self.estimators, [""] + self.columns]
        for term in self.terms:
            est = [self._value(c, term, "estimate") for c in self.columns]
            out.append([term] + ["" if v is None else f"{v:.{digits}f}" for v in est])
            out.append([""] + [self._stat_text(c, term, digits) for c in self.columns])
        out.append(["observations"] + [str(self.extra[c]["N"]) for c in self.columns])
        out.append(["R²"] + [("" if not np.isfinite(self.extra[c]["R2"]) else
                              f"{self.extra[c]['R2']:.3f}") for c in self.columns])
        return out

    def foot(self) -> list[str]:
        first = BENEATH[self.beneath]
        return [first[0].upper() + first[1:] + f"; {self.level:.0%} level, two-sided tests of "
                "beta = 0."] + self.notes

    def to_markdown(self, digits: int = 3) -> str:
        g = self.grid(digits)
        head = "| " + " | ".join(markdown_cell(h) for h in [""] + [
            f"{c} {s}".strip() for c, s in zip(self.columns, self.specs)]) + " |"
        lines = [head, "|" + "---|" * len(g[0]),
                 "| | " + " | ".join(markdown_cell(e) for e in self.estimators) + " |"]
        lines += ["| " + " | ".join(markdown_cell(c) for c in row) + " |" for row in g[3:]]
        return "\n".join(lines) + "\n\n" + "\n\n".join(markdown_cell(n) for n in
                                                    self.foot() + self.stamp()) + "\n"

    def to_latex(self, digits: int = 3, caption: str = "") -> str:
        g = self.grid(digits)
        n = len(self.columns)
        out = [LATEX_PACKAGES, *latex_comments(self.stamp()), "\\begin{table}[ht]",
               "\\centering"]
        if caption:
            out.append(f"\\caption{{{esc(caption)}}}")
        out += [f"\\begin{{tabular}}{{l{'c' * n}}}", "\\toprule"]
        for row in g[:3]:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out.append("\\midrule")
        body = g[3:-2]
        for row in body:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out.append("\\midrule")
        for row in g[-2:]:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out += ["\\bottomrule", "\\end{tabular}"]
        for note in self.foot():
            out.append(f"\\par\\smallskip{{\\footnotesize {esc(note)}}}")
        out.append("\\end{table}")
        return "\n".join(out) + "\n"

    def to_html(self, digits: int = 3) -> str:
        g = self.grid(digits)
        esc = html.escape
        out = ["<table class='lw-robustness'>", "<thead>"]
        for row in g[:3]:
            out.append("<tr>" + "".join(f"<th>{esc(c)}</th>" for c in row) + "</tr>")
        out.append("</thead><tbody>")
        for row in g[3:]:
            out.append("<tr>" + "".join(f"<td>{esc(c)}</td>" for c in row) + "</tr>")
        out.append("</tbody><tfoot>")
        for note in self.foot() + self.stamp():
            out.append(f"<tr><td colspan='{len(g[0])}'>{esc(note)}</td></tr>")
        out.append("</tfoot></table>")
        return "\n".join(out) + "\n"

    def to_excel(self, path, digits: int = 3) -> None:
        """A workbook: sheet "table" laid out like the paper's table with estimates and
        statistics as numbers (number formats add the brackets), sheet "numbers" the long
        frame, and the notes under the table."""
        wb = Workbook()
        ws = wb.active
        ws.title = "table"
        fmt_est = "0." + "0" * digits
        fmt_stat = {"std_error": f"(0.{'0' * digits})", "t": "[0.00]",
                    "p": '"p = "0.000'}.get(self.beneath)
        header = [[""] + self.specs, [""] + self.estimators, [""] + self.columns]
        for r, row in enumerate(header, start=1):
            for c, v in enumerate(row, start=1):
                cell = _put(ws, r, c, v)
                cell.font = Font(bold=(r == 3))
                cell.alignment = Alignment(horizontal="center")
        r = 4
        field = {"std_error": "std_error", "t": "t_stat", "p": "p_value"}.get(self.beneath)
        for term in self.terms:
            _put(ws, r, 1, term)
            for c, col in enumerate(self.columns, start=2):
                v = self._value(col, term, "estimate")
                if v is not None:
                    ws.cell(row=r, column=c, value=float(v)).number_format = fmt_est
                if field is not None:
                    s = self._value(col, term, field)
                    if s is not None and np.isfinite(s) and not (field == "p_value" and s < 0.001):
                        ws.cell(row=r + 1, column=c, value=float(s)).number_format = fmt_stat
                    elif s is not None and np.isfinite(s):
                        ws.cell(row=r + 1, column=c, value=self._stat_text(col, term, digits))
                else:
                    _put(ws, r + 1, c, self._stat_text(col, term, digits))
            r += 2
        _put(ws, r, 1, "observations")
        _put(ws, r + 1, 1, "R²")
        for c, col in enumerate(self.columns, start=2):
            ws.cell(row=r, column=c, value=int(self.extra[col]["N"]))
            r2 = self.extra[col]["R2"]
            if np.isfinite(r2):
                ws.cell(row=r + 1, column=c, value=float(r2)).number_format = "0.000"
        r += 3
        for note in self.foot() + self.stamp():
            _put(ws, r, 1, note)
            r += 1
        if self.stamps:
            first = self.stamps[0]
            wb.properties.creator = f"Lagwise {first.version}"
            wb.properties.description = "; ".join(self.stamp())
            wb.properties.title = "Lagwise robustness table"
        ws2 = wb.create_sheet("numbers")
        for c, name in enumerate(self.frame.columns, start=1):
            _put(ws2, 1, c, str(name))
        for r, rec in enumerate(self.frame.itertuples(index=False), start=2):
            for c, v in enumerate(rec, start=1):
                _put(ws2, r, c, float(v) if isinstance(v, (float, np.floating)) else
                     int(v) if isinstance(v, np.integer) else v)
        wb.save(path)

    def _repr_html_(self) -> str:
        return self.to_html()

    def __repr__(self):
        return self.to_markdown()


def robustness_table(fits, estimators, beneath: str = "std_error", level: float = 0.95,
                     reference: str = "auto", terms=None, show: str | None = None
                     ) -> RobustnessTable:
    """Coefficients of one or more fits under one or more estimators, side by side.

    fits: a fit, a list of fits, or {label: fit}; estimators: an Estimator (or name), a list, or
    {label: estimator}. With one fit the columns are estimators; with one estimator they are
    specifications; with several of each, every (specification, estimator) pair. beneath:
    what stands beneath each estimate, "std_error", "t", "p" or "interval" (`show=` with the
    older values "se", "t", "p", "ci" still works and warns). terms: the rows (default every
    term, in order of first appearance). The notes at the foot state each column's estimator,
    tuning value and how it was chosen, small-sample factor, reference law and method; the
    stamp states the Lagwise version, when the table was made and each data file (name, rows,
    SHA-256)."""
    if show is not None:
        warnings.warn("robustness_table(show=...) is deprecated; use beneath='std_error', 't', "
                      "'p' or 'interval'", DeprecationWarning, stacklevel=2)
        beneath = _OLD_SHOW.get(show, show)
    if beneath not in BENEATH:
        raise SpecificationError(f"beneath must be one of {', '.join(BENEATH)}")
    fit_items = _labelled(fits, "fit")
    est_items = [(lab, as_estimator(e)) for lab, e in _labelled(estimators, "estimator")]
    pairs = [(fl, f, el, e) for fl, f in fit_items for el, e in est_items]
    rows, specs, ests, notes, extra, columns = [], [], [], [], {}, []
    for i, (fl, f, el, e) in enumerate(pairs, start=1):
        col = f"({i})"
        res = f.infer(e, level=level, reference=reference)
        columns.append(col)
        spec = fl or f"{f.response}" + (f", h = {f.horizon}" if f.horizon else "")
        specs.append(spec if len(fit_items) > 1 or fl else f.response)
        ests.append(el or res.label)
        notes.append(f"{col} {res.describe()}")
        r2 = f.r_squared
        extra[col] = {"N": int(f.nobs), "R2": float(r2) if r2 is not None else float("nan")}
        for term, r in res.table.iterrows():
            rows.append({"column": col, "specification": specs[-1], "estimator": ests[-1],
                         "term": term, **{k: float(r[k]) for k in res.table.columns}})
    frame = pd.DataFrame(rows)
    order = list(dict.fromkeys(frame.term)) if terms is None else list(terms)
    unknown = [t for t in order if t not in set(frame.term)]
    if unknown:
        raise SpecificationError(f"no coefficient named {unknown[0]!r} in these fits")
    return RobustnessTable(frame[frame.term.isin(order)].reset_index(drop=True), columns,
                           specs, ests, order, beneath, level, notes, extra,
                           combined(f for _, f in fit_items))


#: Text a spreadsheet would take for a formula or a command if it were typed in (the same
#: characters the CSV export neutralises).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _put(ws, row: int, column: int, value):
    """Write one cell: numbers as numbers, every text as text (type "s", never a formula;
    text that a spreadsheet would read as a formula when typed also gets the quote prefix, so
    editing the cell keeps it text)."""
    cell = ws.cell(row=row, column=column)
    if isinstance(value, str):
        value = ILLEGAL_CHARACTERS_RE.sub("\ufffd", value)   # control characters XML refuses
        cell.value = value
        cell.data_type = "s"
        if value.startswith(_FORMULA_START):
            cell.quotePrefix = True
    elif isinstance(value, (bool, np.bool_)):
        cell.value = bool(value)
    elif value is None or isinstance(value, (int, float)):
        cell.value = value
    else:
        cell.value = ILLEGAL_CHARACTERS_RE.sub("\ufffd", str(value))
        cell.data_type = "s"
    return cell
