"""Tables out: CSV, Markdown, LaTeX and HTML, plus a validated, replayable settings record.

CSV: numbers are written as numbers; text cells that would start a spreadsheet formula
(=, +, -, @, tab, CR) are prefixed with an apostrophe. Markdown and HTML escape HTML specials,
LaTeX escapes its specials (and comparison signs) so the output compiles under pdflatex; line
breaks inside names become spaces. `notes` are written under the table (CSV: '#' lines above it).
"""

from __future__ import annotations

import html
import io
import json
import math

import numpy as np
import pandas as pd

from .errors import DataError

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


def _md(text: str) -> str:
    return html.escape(text, quote=False).replace("|", r"\|")


def to_markdown(frame: pd.DataFrame, index: bool = True, digits: int = 4, notes=()) -> str:
    header, rows = _rows(frame, index, digits)
    lines = ["| " + " | ".join(_md(h) for h in header) + " |",
             "| " + " | ".join("---" if i == 0 and index else "---:" for i in range(len(header)))
             + " |"]
    lines += ["| " + " | ".join(_md(c) for c in r) + " |" for r in rows]
    out = "\n".join(lines) + "\n"
    if notes:
        out += "\n" + "\n".join(_md(_oneline(n)) for n in notes) + "\n"
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


# --------------------------------------------------------------------------- settings

SETTINGS_VERSION = 2
#: Largest settings file accepted (bytes) and deepest nesting.
SETTINGS_MAX_BYTES = 100_000
_MAX_DEPTH = 4
_SCALAR = (str, int, float, bool, type(None))
#: key -> (accepted types, check) for a settings record
_FIELDS = {
    "dataset": ((str, type(None)), None),
    "transforms": ((list,), "transforms"),
    "response": ((str, type(None)), None),
    "regressors": ((list,), "names"),
    "intercept": ((bool,), None),
    "horizon": ((int, type(None)), "positive"),
    "window": ((list, type(None)), "window"),
    "estimator": ((str,), None),
    "params": ((dict,), None),
    "rule": ((str,), None),
    "value": ((int, float, type(None)), None),
    "reference": ((str,), None),
    "level": ((float, int), "level"),
    "focus": ((str, type(None)), None),
    "chart_mode": ((str,), None),
    "endogenous": ((list,), "names"),
    "instruments": ((list,), "names"),
    "method": ((str,), None),
    "entity": ((str, type(None)), None),
    "time": ((str, type(None)), None),
    "effects": ((list,), "effects"),
}
#: names used by version 1 files
_OLD_KEYS = {"bandwidth": "value"}
_OLD_PARAMS = {"terms": "cosines", "max_lag": "max_order"}


def settings_json(settings: dict) -> str:
    """A replayable settings record (plain JSON, versioned)."""
    return json.dumps({"lagwise_settings": SETTINGS_VERSION, **settings}, indent=2,
                      sort_keys=True, default=str)


def _depth(obj, level=0) -> int:
    if isinstance(obj, dict):
        return max([level] + [_depth(v, level + 1) for v in obj.values()])
    if isinstance(obj, list):
        return max([level] + [_depth(v, level + 1) for v in obj])
    return level


def load_settings(text) -> dict:
    """Parse and validate a settings record: known keys with the right types and sizes, a
    known estimator with valid parameters, names of transforms the engine has. Version-1 files
    (older names) load through a mapping. Raises DataError with one clear message."""
    if isinstance(text, bytes):
        if len(text) > SETTINGS_MAX_BYTES:
            raise DataError(f"a settings file is at most {SETTINGS_MAX_BYTES // 1000} kB")
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise DataError("settings file is not UTF-8 text") from None
    if not isinstance(text, str) or len(text) > SETTINGS_MAX_BYTES:
        raise DataError(f"a settings file is text of at most {SETTINGS_MAX_BYTES // 1000} kB")
    try:
        data = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as exc:
        raise DataError(f"settings file is not valid JSON: {exc}") from None
    if not isinstance(data, dict) or data.get("lagwise_settings") not in (1, SETTINGS_VERSION):
        raise DataError("not a Lagwise settings file (missing 'lagwise_settings': 2)")
    if _depth(data) > _MAX_DEPTH:
        raise DataError("settings file is nested too deeply")
    version = data.pop("lagwise_settings")
    return validate_settings(_upgrade(data) if version == 1 else data)


def _upgrade(data: dict) -> dict:
    from .data import OLD_TRANSFORM_NAMES, current_column_name
    out = {_OLD_KEYS.get(k, k): v for k, v in data.items()}
    if isinstance(out.get("params"), dict):
        out["params"] = {_OLD_PARAMS.get(k, k): v for k, v in out["params"].items()}
    if isinstance(out.get("transforms"), list):
        out["transforms"] = [[OLD_TRANSFORM_NAMES.get(s[0], s[0]), *s[1:]]
                             if isinstance(s, list) and s else s for s in out["transforms"]]
    for key in ("response", "focus"):
        if isinstance(out.get(key), str):
            out[key] = current_column_name(out[key])
    if isinstance(out.get("regressors"), list):
        out["regressors"] = [current_column_name(r) if isinstance(r, str) else r
                             for r in out["regressors"]]
    if out.get("estimator") in ("hc0", "hc1", "hc2", "hc3"):
        out["params"] = {"kind": out["estimator"]}
        out["estimator"] = "hc"
    return out


def validate_settings(data: dict) -> dict:
    from .covariance import FAMILIES, estimator
    from .data import TRANSFORMS, transform_kind
    from .errors import LagwiseError
    from .laws import REQUESTS
    unknown = sorted(set(data) - set(_FIELDS))
    if unknown:
        raise DataError(f"settings file has unknown entries: {', '.join(map(str, unknown[:5]))}")
    for key, (types, check) in _FIELDS.items():
        if key not in data:
            continue
        value = data[key]
        if isinstance(value, bool) and bool not in types:
            raise DataError(f"settings: '{key}' has the wrong type")
        if not isinstance(value, types):
            raise DataError(f"settings: '{key}' should be {' or '.join(t.__name__ for t in types)}")
        if isinstance(value, str) and len(value) > 500:
            raise DataError(f"settings: '{key}' is too long")
        if check == "names" and (len(value) > 200 or not all(isinstance(v, str) and len(v) < 500
                                                             for v in value)):
            raise DataError(f"settings: '{key}' must be a short list of column names")
        if check == "effects" and not all(v in ("entity", "time") for v in value):
            raise DataError("settings: 'effects' may hold 'entity' and 'time' only")
        if check == "positive" and value is not None and value < 1:
            raise DataError("settings: 'horizon' must be a whole number >= 1")
        if check == "level" and not 0.5 <= float(value) < 1:
            raise DataError("settings: 'level' must be between 0.5 and 1")
        if check == "window" and value is not None and (
                len(value) != 2 or not all(isinstance(v, int) and not isinstance(v, bool)
                                           for v in value)):
            raise DataError("settings: 'window' must be two row positions")
        if check == "transforms":
            if len(value) > 50:
                raise DataError("settings: at most 50 transforms")
            for step in value:
                if not (isinstance(step, list) and len(step) == 3 and isinstance(step[0], str)
                        and isinstance(step[1], str) and isinstance(step[2], int)
                        and not isinstance(step[2], bool)):
                    raise DataError("settings: each transform is [kind, column, periods]")
                try:
                    transform_kind(step[0])
                except LagwiseError:
                    raise DataError(f"settings: unknown transform {step[0]!r}; known: "
                                    + ", ".join(TRANSFORMS)) from None
    if "reference" in data and data["reference"] not in REQUESTS:
        raise DataError(f"settings: unknown reference law {data['reference']!r}")
    if "estimator" in data:
        if data["estimator"] not in FAMILIES:
            raise DataError(f"settings: unknown estimator {data['estimator']!r}")
        params = data.get("params") or {}
        if not all(isinstance(v, _SCALAR) for v in params.values()):
            raise DataError("settings: estimator parameters must be plain values")
        try:
            estimator(data["estimator"], **params)
        except LagwiseError as exc:
            raise DataError(f"settings: {exc}") from None
        family = FAMILIES[data["estimator"]]
        rules = set(family.axis.rules) if family.axis else set()
        if data.get("rule", "fixed") not in rules | {"fixed"}:
            raise DataError(f"settings: rule {data.get('rule')!r} does not belong to "
                            f"{family.title}")
    if data.get("chart_mode", "t") not in ("t", "se", "ci", "estimate"):
        raise DataError("settings: 'chart_mode' is t, estimate, se or ci")
    from .gmm import METHODS
    if data.get("method", "2sls") not in METHODS:
        raise DataError(f"settings: unknown estimation method {data.get('method')!r}")
    return data
