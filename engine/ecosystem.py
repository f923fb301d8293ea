"""Meeting the analyst's tools: formulas (formulaic), fits from statsmodels, and the
robustness table for a paper.

`fit(formula, data, ...)`: "y ~ x1 + x2" evaluated by formulaic (intercept handling,
categorical expansion, functions such as np.log), with Lagwise's transforms available inside
formulas under their plain names: lag(x, p), lead(x, p), difference(x), log_difference(x),
sum_next(x, h). A response written as sum_next(x, h) declares the horizon h and the one-period
series x. `from_statsmodels(results)` turns a fitted statsmodels OLS into a Lagwise fit with the
same coefficients.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from .data import Table, as_table
from .errors import DataError, SpecificationError
from .model import INTERCEPT, fit_ols

_SUM_NEXT = re.compile(r"^\s*sum_next\(\s*([^,()]+?)\s*,\s*(\d+)\s*\)\s*$")


def _shift(x, p):
    return pd.Series(np.asarray(x, dtype=float)).shift(p).to_numpy()


def formula_context() -> dict:
    """Functions a formula may call (besides formulaic's own and numpy as np)."""
    def lag(x, p=1):
        return _shift(x, int(p))

    def lead(x, p=1):
        return _shift(x, -int(p))

    def difference(x):
        return np.diff(np.asarray(x, dtype=float), prepend=np.nan)

    def log_difference(x):
        v = np.asarray(x, dtype=float)
        if (v[np.isfinite(v)] <= 0).any():
            raise DataError("log_difference needs positive values")
        return np.diff(np.log(v), prepend=np.nan)

    def sum_next(x, h):
        s = pd.Series(np.asarray(x, dtype=float))
        return s[::-1].rolling(int(h), min_periods=int(h)).sum()[::-1].shift(-1).to_numpy()
    return {"lag": lag, "lead": lead, "difference": difference,
            "log_difference": log_difference, "sum_next": sum_next, "np": np}


def _frame_of(data) -> pd.DataFrame:
    if isinstance(data, Table):
        frame = data.frame.copy()
        if data.labels is not None and len(data.labels.columns):
            for c in data.labels.columns:
                if c not in frame.columns:
                    frame[c] = data.labels[c].to_numpy()
        return frame
    if isinstance(data, pd.DataFrame):
        return data
    raise DataError(f"expected a Table or a pandas DataFrame, got {type(data).__name__}")


def design(formula: str, data):
    """(response Series, regressor DataFrame, has_intercept, horizon, one-period column) from a
    formula, evaluated by formulaic with missing values kept (the fit drops and counts them)."""
    from formulaic import model_matrix
    from formulaic.errors import FormulaicError
    if not isinstance(formula, str) or "~" not in formula:
        raise SpecificationError("a formula looks like 'y ~ x1 + x2'")
    if len(formula) > 2000:
        raise SpecificationError("the formula is too long")
    lhs_text = formula.split("~", 1)[0]
    frame = _frame_of(data)
    try:
        mm = model_matrix(formula, frame, context=formula_context(), na_action="ignore")
    except FormulaicError as exc:
        raise SpecificationError(f"the formula cannot be read: {exc}") from None
    except (NameError, KeyError) as exc:
        raise SpecificationError(f"the formula names something the data do not have: "
                                 f"{exc}") from None
    except Exception as exc:           # noqa: BLE001 - a term that fails to evaluate
        term = getattr(exc, "factor", None)
        raise SpecificationError(f"the formula could not be evaluated"
                                 + (f" (term {term})" if term else "") + f": "
                                 f"{' '.join(str(exc).split())[:300]}") from None
    lhs, rhs = mm.lhs, mm.rhs
    if lhs.shape[1] != 1:
        raise SpecificationError("the formula needs exactly one response on the left of ~")
    y = pd.Series(np.asarray(lhs.iloc[:, 0], dtype=float), index=frame.index,
                  name=str(lhs.columns[0]))
    X = pd.DataFrame(np.asarray(rhs, dtype=float), index=frame.index,
                     columns=[str(c) for c in rhs.columns])
    has_intercept = "Intercept" in X.columns
    if has_intercept:
        X = X.drop(columns="Intercept")
    horizon = one_period = None
    m = _SUM_NEXT.match(lhs_text)
    if m:
        one_period, horizon = m.group(1).strip(), int(m.group(2))
        if one_period not in frame.columns:
            one_period = None
    return y, X, has_intercept, horizon, one_period


def fit(formula: str, data, *, endogenous=None, instruments: str | None = None,
        entity: str | None = None, time: str | None = None, effects=(), sample=None,
        horizon: int | None = None, **kwargs):
    """Fit a model written as a formula: least squares, or with `instruments` (a formula of the
    excluded instruments, e.g. "z1 + z2") and `endogenous` (regressor names) linear IV/GMM, or
    with `entity` and `time` a panel. Transforms inside formulas: lag(x, p), lead(x, p),
    difference(x), log_difference(x), sum_next(x, h), np.log(x), C(group) for categories."""
    from .gmm import fit_iv
    from .panel import fit_panel
    y, X, has_intercept, h, one = design(formula, data)
    if y.name in X.columns:
        raise SpecificationError(f"'{y.name}' is on both sides of the formula")
    frame = pd.concat([y, X], axis=1)
    regs = list(X.columns)
    if instruments is not None:
        if entity is not None:
            raise SpecificationError("instruments are not offered for panels")
        _, Z, _, _, _ = design("__lhs__ ~ " + instruments, _frame_of(data).assign(__lhs__=0.0))
        Z = Z.drop(columns=[c for c in Z.columns if c in X.columns])
        frame = pd.concat([frame, Z], axis=1)
        endog = [endogenous] if isinstance(endogenous, str) else list(endogenous or [])
        missing = [e for e in endog if e not in regs]
        if missing:
            raise SpecificationError(f"endogenous regressor '{missing[0]}' is not a term of the "
                                     f"formula; its terms are {', '.join(regs)}")
        return fit_iv(frame, y.name, regs, endog, list(Z.columns), intercept=has_intercept,
                      sample=sample, horizon=horizon or h, **kwargs)
    if entity is not None or time is not None:
        src = _frame_of(data)
        for col in (entity, time):
            if col is not None and col in src.columns:
                frame[col] = src[col].to_numpy()
        return fit_panel(frame, y.name, regs, entity=entity, time=time, effects=effects,
                         intercept=has_intercept, sample=sample, **kwargs)
    table = Table(frame=frame)
    if one is not None:
        src = _frame_of(data)
        table.frame[one] = np.asarray(src[one], dtype=float) if one not in frame else frame[one]
    return fit_ols(table, y.name, regs, intercept=has_intercept, sample=sample,
                   horizon=horizon or h, one_period=one if (horizon or h) else None)


# --------------------------------------------------------------------------- statsmodels

def from_statsmodels(results):
    """A Lagwise least-squares fit from a fitted statsmodels OLS results object (from
    `sm.OLS(...).fit()` or `smf.ols(...).fit()`): the same rows, columns and coefficients (any
    covariance type the results carry is ignored; choose a Lagwise estimator). Weighted, GLS
    and other models are refused: their moment conditions differ."""
    model = getattr(results, "model", None)
    name = type(model).__name__ if model is not None else type(results).__name__
    if name != "OLS":
        raise SpecificationError(f"from_statsmodels takes a fitted statsmodels OLS; got {name} "
                                 "(WLS, GLS, GLM and discrete models have other moment "
                                 "conditions)")
    exog = np.asarray(model.exog, dtype=float)
    endog = np.asarray(model.endog, dtype=float)
    names = list(model.exog_names)
    yname = str(model.endog_names)
    data = getattr(model, "data", None)
    index = getattr(data, "row_labels", None)
    index = pd.Index(index) if index is not None else pd.RangeIndex(len(endog))
    const = [i for i in range(exog.shape[1])
             if np.all(exog[:, i] == 1.0)]
    renamed = [INTERCEPT if i in const[:1] else (n if n != INTERCEPT else f"{n} (column)")
               for i, n in enumerate(names)]
    frame = pd.DataFrame(exog, index=index, columns=renamed)
    frame[yname] = endog
    regs = [n for i, n in enumerate(renamed) if i not in const[:1]]
    out = fit_ols(Table(frame=frame.drop(columns=[INTERCEPT], errors="ignore")), yname, regs,
                  intercept=bool(const))
    order = [renamed.index(t) for t in out.terms]
    diff = np.max(np.abs(out.beta - np.asarray(results.params)[order])
                  / np.maximum(np.abs(out.beta), 1e-300))
    if not np.isfinite(diff) or diff > 1e-8:
        raise SpecificationError("the statsmodels coefficients could not be reproduced (the "
                                 "design is too ill-conditioned); fit with lagwise.fit_ols")
    return out


# --------------------------------------------------------------------------- robustness table

SHOW = {"se": "standard errors in parentheses", "t": "t statistics in brackets",
        "p": "p-values in braces", "ci": "confidence intervals in brackets"}


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

    def __init__(self, frame, columns, specs, estimators, terms, show, level, notes, extra):
        self.frame = frame
        self.columns = columns              # column headers "(1)", "(2)", ...
        self.specs = specs                  # per column: specification label
        self.estimators = estimators        # per column: estimator label
        self.terms = terms
        self.show = show
        self.level = level
        self.notes = notes
        self.extra = extra                  # per column: {"N": .., "R2": ..}

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
        if self.show == "se":
            return f"({r.std_error:.{digits}f})"
        if self.show == "t":
            return f"[{r.t_stat:.2f}]"
        if self.show == "p":
            return "{<0.001}" if r.p_value < 0.001 else f"{{{r.p_value:.3f}}}"
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
        return [f"Estimates with {SHOW[self.show]}; {self.level:.0%} level, two-sided tests of "
                "beta = 0."] + self.notes

    def to_markdown(self, digits: int = 3) -> str:
        from .export import _md
        g = self.grid(digits)
        head = "| " + " | ".join(_md(h) for h in [""] + [
            f"{c} {s}".strip() for c, s in zip(self.columns, self.specs)]) + " |"
        lines = [head, "|" + "---|" * len(g[0]),
                 "| | " + " | ".join(_md(e) for e in self.estimators) + " |"]
        lines += ["| " + " | ".join(_md(c) for c in row) + " |" for row in g[3:]]
        return "\n".join(lines) + "\n\n" + "\n\n".join(_md(n) for n in self.foot()) + "\n"

    def to_latex(self, digits: int = 3, caption: str = "") -> str:
        from .export import latex_escape as esc
        g = self.grid(digits)
        n = len(self.columns)
        out = ["\\begin{table}[ht]", "\\centering"]
        if caption:
            out.append(f"\\caption{{{esc(caption)}}}")
        out += [f"\\begin{{tabular}}{{l{'c' * n}}}", "\\hline"]
        for row in g[:3]:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out.append("\\hline")
        body = g[3:-2]
        for row in body:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out.append("\\hline")
        for row in g[-2:]:
            out.append(" & ".join(esc(c) for c in row) + " \\\\")
        out += ["\\hline", "\\end{tabular}"]
        for note in self.foot():
            out.append(f"\\par\\smallskip{{\\footnotesize {esc(note)}}}")
        out.append("\\end{table}")
        return "\n".join(out) + "\n"

    def to_html(self, digits: int = 3) -> str:
        import html
        g = self.grid(digits)
        esc = html.escape
        out = ["<table class='lw-robustness'>", "<thead>"]
        for row in g[:3]:
            out.append("<tr>" + "".join(f"<th>{esc(c)}</th>" for c in row) + "</tr>")
        out.append("</thead><tbody>")
        for row in g[3:]:
            out.append("<tr>" + "".join(f"<td>{esc(c)}</td>" for c in row) + "</tr>")
        out.append("</tbody><tfoot>")
        for note in self.foot():
            out.append(f"<tr><td colspan='{len(g[0])}'>{esc(note)}</td></tr>")
        out.append("</tfoot></table>")
        return "\n".join(out) + "\n"

    def to_excel(self, path, digits: int = 3) -> None:
        """A workbook: sheet "table" laid out like the paper's table with estimates and
        statistics as numbers (number formats add the brackets), sheet "numbers" the long
        frame, and the notes under the table."""
        from openpyxl import Workbook
        from openpyxl.styles import Alignment, Font
        wb = Workbook()
        ws = wb.active
        ws.title = "table"
        fmt_est = "0." + "0" * digits
        fmt_stat = {"se": f"(0.{'0' * digits})", "t": "[0.00]", "p": '"{"0.000"}"'}.get(self.show)
        header = [[""] + self.specs, [""] + self.estimators, [""] + self.columns]
        for r, row in enumerate(header, start=1):
            for c, v in enumerate(row, start=1):
                cell = ws.cell(row=r, column=c, value=v)
                cell.font = Font(bold=(r == 3))
                cell.alignment = Alignment(horizontal="center")
        r = 4
        field = {"se": "std_error", "t": "t_stat", "p": "p_value"}.get(self.show)
        for term in self.terms:
            ws.cell(row=r, column=1, value=term)
            for c, col in enumerate(self.columns, start=2):
                v = self._value(col, term, "estimate")
                if v is not None:
                    ws.cell(row=r, column=c, value=float(v)).number_format = fmt_est
                if field is not None:
                    s = self._value(col, term, field)
                    if s is not None and np.isfinite(s):
                        ws.cell(row=r + 1, column=c, value=float(s)).number_format = fmt_stat
                else:
                    ws.cell(row=r + 1, column=c, value=self._stat_text(col, term, digits))
            r += 2
        ws.cell(row=r, column=1, value="observations")
        ws.cell(row=r + 1, column=1, value="R²")
        for c, col in enumerate(self.columns, start=2):
            ws.cell(row=r, column=c, value=int(self.extra[col]["N"]))
            r2 = self.extra[col]["R2"]
            if np.isfinite(r2):
                ws.cell(row=r + 1, column=c, value=float(r2)).number_format = "0.000"
        r += 3
        for note in self.foot():
            ws.cell(row=r, column=1, value=note)
            r += 1
        ws2 = wb.create_sheet("numbers")
        cols = list(self.frame.columns)
        ws2.append(cols)
        for rec in self.frame.itertuples(index=False):
            ws2.append([(float(v) if isinstance(v, (float, np.floating)) else
                         (int(v) if isinstance(v, (np.integer,)) else v)) for v in rec])
        wb.save(path)

    def _repr_html_(self) -> str:
        return self.to_html()

    def __repr__(self):
        return self.to_markdown()


def robustness_table(fits, estimators, show: str = "se", level: float = 0.95,
                     reference: str = "auto", terms=None) -> RobustnessTable:
    """Coefficients of one or more fits under one or more estimators, side by side.

    fits: a fit, a list of fits, or {label: fit}; estimators: an Estimator (or name), a list, or
    {label: estimator}. With one fit the columns are estimators; with one estimator they are
    specifications; with several of each, every (specification, estimator) pair. show: "se",
    "t", "p" or "ci" beneath each estimate. terms: the rows (default every term, in order of
    first appearance). The notes at the foot state each column's estimator, tuning value and
    how it was chosen, small-sample factor, reference law and method."""
    from .covariance import as_estimator
    if show not in SHOW:
        raise SpecificationError(f"show must be one of {', '.join(SHOW)}")
    fit_items = _labelled(fits, "fit")
    est_items = [(lab, as_estimator(e)) for lab, e in _labelled(estimators, "estimator")]
    pairs = [(fl, f, el, e) for fl, f in fit_items for el, e in est_items]
    rows, specs, ests, notes, extra, columns = [], [], [], [], {}, []
    for i, (fl, f, el, e) in enumerate(pairs, start=1):
        col = f"({i})"
        res = f.infer(e, level=level, reference=reference)
        columns.append(col)
        spec = fl or f"{f.response}" + (f", h = {f.horizon}" if getattr(f, "horizon", None)
                                        else "")
        specs.append(spec if len(fit_items) > 1 or fl else f.response)
        ests.append(el or res.label)
        notes.append(f"{col} {res.describe()}")
        r2 = getattr(f, "r_squared", float("nan"))
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
                           specs, ests, order, show, level, notes, extra)
