"""Formulas: `fit("y ~ x1 + x2", data, ...)` read by formulaic (intercept handling, categorical
expansion, interactions), with Lagwise's transforms available inside formulas under their plain
names: lag(x, p), lead(x, p), difference(x), log_difference(x), sum_next(x, h). A response written
as sum_next(x, h) declares the horizon h and the one-period series x.

A formula cannot run code. formulaic evaluates each factor of a formula as Python, so every factor
is checked BEFORE anything is evaluated, on Python's own syntax tree of its text (`ast`; the text
is never evaluated by this module): it may hold only

* column names of the data (backtick-quoted names such as `my col` included) and numbers;
* the arithmetic operators + - * / and ** (the exponent a number between -MAX_POWER and
  MAX_POWER), unary + and -;
* formulaic's categorical wrapper C(expr) and identity wrapper I(expr), over such arithmetic;
* our transforms lag(expr, p), lead(expr, p), difference(expr), log_difference(expr),
  sum_next(expr, h), with p and h whole numbers written as numbers;
* the numpy functions in NUMPY_FUNCTIONS, written np.<name>(expr).

Anything else (other names, attribute access, subscripts, strings, lambdas, comprehensions,
keyword arguments, {...} blocks holding such things) is refused with a SpecificationError naming
the term. The formula's own operators (+, -, *, :, /, %in%, ** on terms) are bounded before they
are expanded: at most MAX_TERMS terms, and ** on terms with an exponent of at most MAX_POWER.
"""

from __future__ import annotations

import ast
import math
import re
import types

import numpy as np
import pandas as pd
from formulaic import Formula, model_matrix
from formulaic.errors import FormulaicError
from formulaic.parser import DefaultFormulaParser
from formulaic.parser.types import ASTNode, Term
from formulaic.utils.code import sanitize_variable_names
from formulaic.utils.structured import Structured

from ..data.table import Table
from ..data.transforms import check_periods
from ..errors import DataError, LagwiseError, SpecificationError
from ..models.iv import fit_iv
from ..models.ols import fit_ols
from ..models.panel import fit_panel

_SUM_NEXT = re.compile(r"^\s*sum_next\(\s*([^,()]+?)\s*,\s*(\d+)\s*\)\s*$")

#: numpy functions a formula may call, as np.<name>(x): elementwise and without side effects.
NUMPY_FUNCTIONS = ("log", "log1p", "exp", "sqrt", "abs", "square")

#: our transforms: name -> (least, most) positional arguments; the second is a whole number
TRANSFORM_ARITY = {"lag": (1, 2), "lead": (1, 2), "difference": (1, 1),
                   "log_difference": (1, 1), "sum_next": (2, 2)}

#: formulaic's wrappers a formula may use (one argument each)
WRAPPERS = ("C", "I")

#: the largest number of terms a formula may expand to, and the largest exponent of ** (on terms
#: in the formula, and on numbers inside a term)
MAX_TERMS = 500
MAX_POWER = 8


def _shift(x, p):
    return pd.Series(np.asarray(x, dtype=float)).shift(p).to_numpy()


def formula_context() -> dict:
    """The names a formula may call (besides formulaic's C and I): our transforms and a numpy
    namespace holding only NUMPY_FUNCTIONS."""
    def lag(x, p=1):
        return _shift(x, check_periods("lag", p, len(x)))

    def lead(x, p=1):
        return _shift(x, -check_periods("lead", p, len(x)))

    def difference(x):
        return np.diff(np.asarray(x, dtype=float), prepend=np.nan)

    def log_difference(x):
        v = np.asarray(x, dtype=float)
        if (v[np.isfinite(v)] <= 0).any():
            raise DataError("log_difference needs positive values")
        return np.diff(np.log(v), prepend=np.nan)

    def sum_next(x, h):
        h = check_periods("sum-next", h, len(x))
        s = pd.Series(np.asarray(x, dtype=float))
        return s[::-1].rolling(h, min_periods=h).sum()[::-1].shift(-1).to_numpy()
    numpy = types.SimpleNamespace(**{name: getattr(np, name) for name in NUMPY_FUNCTIONS})
    return {"lag": lag, "lead": lead, "difference": difference,
            "log_difference": log_difference, "sum_next": sum_next, "np": numpy}


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


# --------------------------------------------------------------------------- the allow-list

def _short(text: str, limit: int = 80) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


class _Refused(Exception):
    """Why a factor is refused (turned into a SpecificationError naming the term)."""


_ARITHMETIC = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)


def _number(node) -> float | None:
    """The value of a number literal (with an optional sign), or None."""
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
        inner = _number(node.operand)
        return None if inner is None else (-inner if isinstance(node.op, ast.USub) else inner)
    if isinstance(node, ast.Constant) and type(node.value) in (int, float):
        return node.value
    return None


class _FactorCheck:
    """Walks one factor's syntax tree; raises _Refused at the first node not allowed."""

    def __init__(self, columns, aliases):
        self.columns = columns
        self.aliases = aliases            # sanitised identifier -> the backtick-quoted name

    def column(self, name: str) -> str:
        original = self.aliases.get(name, name)
        if original not in self.columns:
            raise _Refused(f"'{_short(original, 40)}' is not a column of the data")
        return original

    def expr(self, node) -> None:
        if isinstance(node, ast.Expression):
            return self.expr(node.body)
        if isinstance(node, ast.Constant):
            if type(node.value) not in (int, float):
                raise _Refused(f"{type(node.value).__name__} values are not allowed, only numbers")
            return None
        if isinstance(node, ast.Name):
            self.column(node.id)
            return None
        if isinstance(node, ast.UnaryOp):
            if not isinstance(node.op, (ast.UAdd, ast.USub)):
                raise _Refused("only the signs + and - may stand before a value")
            return self.expr(node.operand)
        if isinstance(node, ast.BinOp):
            if not isinstance(node.op, _ARITHMETIC):
                raise _Refused("only the arithmetic operators + - * / ** are allowed")
            if isinstance(node.op, ast.Pow):
                power = _number(node.right)
                if power is None or not abs(power) <= MAX_POWER:
                    raise _Refused(f"the exponent of ** must be a number between -{MAX_POWER} "
                                   f"and {MAX_POWER}")
            self.expr(node.left)
            return self.expr(node.right)
        if isinstance(node, ast.Call):
            return self.call(node)
        raise _Refused(f"{type(node).__name__} expressions are not allowed")

    def call(self, node: ast.Call) -> None:
        if node.keywords:
            raise _Refused("keyword arguments are not allowed")
        func, args = node.func, node.args
        if any(isinstance(a, ast.Starred) for a in args):
            raise _Refused("starred arguments are not allowed")
        if isinstance(func, ast.Attribute):
            if not (isinstance(func.value, ast.Name) and func.value.id == "np"
                    and func.attr in NUMPY_FUNCTIONS):
                raise _Refused("the only functions with a dot allowed are "
                               + ", ".join(f"np.{f}" for f in NUMPY_FUNCTIONS))
            least = most = 1
            name = f"np.{func.attr}"
        elif isinstance(func, ast.Name) and func.id in WRAPPERS:
            least = most = 1
            name = func.id
        elif isinstance(func, ast.Name) and func.id in TRANSFORM_ARITY:
            least, most = TRANSFORM_ARITY[func.id]
            name = func.id
        else:
            raise _Refused("the functions allowed are C, I, " + ", ".join(TRANSFORM_ARITY)
                           + " and " + ", ".join(f"np.{f}" for f in NUMPY_FUNCTIONS))
        if not least <= len(args) <= most:
            raise _Refused(f"{name} takes {least if least == most else f'{least} or {most}'} "
                           "argument" + ("" if most == 1 else "s"))
        self.expr(args[0])
        if len(args) > 1:
            p = _number(args[1])
            if not isinstance(p, int) or isinstance(p, bool):
                raise _Refused(f"the periods of {name} must be a whole number written as a "
                               "number")
        return None


def check_factor(expr: str, method: str, columns) -> None:
    """Refuse a formula factor outside the allow-list (module docstring). `method` is
    formulaic's evaluation method ("lookup", "literal" or "python")."""
    if method == "lookup":
        if expr not in columns:
            raise _Refused(f"'{_short(expr, 40)}' is not a column of the data")
        return
    if method == "literal":
        try:
            tree = ast.parse(expr.strip(), mode="eval")
        except (SyntaxError, ValueError):
            raise _Refused("only numbers may stand alone") from None
        if _number(tree.body) is None:
            raise _Refused("only numbers may stand alone")
        return
    if method != "python":
        raise _Refused(f"a factor evaluated by {method!r} is not allowed")
    aliases: dict = {}
    try:
        # the backtick-quoted names, renamed exactly as formulaic renames them for evaluation
        text = sanitize_variable_names(expr, {}, aliases)
        tree = ast.parse(text, mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError):
        raise _Refused("it is not a valid expression") from None
    try:
        _FactorCheck(set(columns), aliases).expr(tree)
    except RecursionError:
        raise _Refused("it is nested too deeply") from None


def _terms_of(obj):
    """Every Term of a parsed formula (nested parts included); anything unexpected fails
    closed."""
    if isinstance(obj, Term):
        yield obj
    elif isinstance(obj, Structured):
        for value in obj._structure.values():
            yield from _terms_of(value)
    elif isinstance(obj, (list, tuple, set, frozenset)) or type(obj).__name__ in (
            "SimpleFormula", "OrderedSet"):
        for value in obj:
            yield from _terms_of(value)
    else:
        raise SpecificationError("the formula could not be checked (an unexpected part "
                                 f"{type(obj).__name__})")


def _expansion_bound(node, n_columns: int) -> int:
    """An upper bound on the number of terms a formula's operator tree expands to; refuses **
    with a large exponent and the structural operators Lagwise does not use. Iterative (long
    formulas nest deeply)."""
    cap = MAX_TERMS + 1
    sizes: dict[int, int] = {}
    stack = [(node, False)]
    while stack:
        item, done = stack.pop()
        if not isinstance(item, ASTNode):
            sizes[id(item)] = 1
            continue
        if not done:
            stack.append((item, True))
            stack.extend((a, False) for a in item.args)
            continue
        op = item.operator.symbol
        args = [sizes[id(a)] for a in item.args]
        if op == "|" or (op == "~" and item.operator.to_terms.__name__ == "multistage_formula"):
            raise SpecificationError(f"'{op}' is not used in Lagwise formulas: one response "
                                     "~ one right-hand side (give instruments=...)")
        if op in ("**", "^"):
            power = item.args[1]
            text = getattr(power, "token", None)
            if not (isinstance(text, str) and text.isdigit() and 1 <= int(text) <= MAX_POWER):
                raise SpecificationError(f"the power of terms (a + b)**p takes a whole number "
                                         f"p from 1 to {MAX_POWER}, not {_short(text, 20)!r}")
            size = min(args[0] ** int(text), cap)
        elif op == ".":
            size = n_columns
        elif op == "*":
            size = min(args[0] + args[1] + args[0] * args[1], cap) if len(args) == 2 else args[0]
        elif op == ":":
            size = min(math.prod(args), cap)
        else:
            size = min(sum(args), cap) if args else 1
        if size > MAX_TERMS:
            raise SpecificationError(f"the formula expands to more than {MAX_TERMS} terms")
        sizes[id(item)] = size
    return sizes[id(node)]


def checked_formula(formula: str, columns):
    """Parse a formula (no evaluation), bound its expansion and check every factor of every term
    against the allow-list; returns formulaic's parsed formula, ready to evaluate."""
    columns = [str(c) for c in columns]
    context = {"__formulaic_variables_available__": columns}
    try:
        parser = DefaultFormulaParser()
        tokens = parser.get_tokens_from_formula(formula, context=context)
        tree = parser.get_ast_from_tokens(tokens, context=context)
        if tree is not None:
            _expansion_bound(tree, len(columns))
        parsed = Formula(formula, _context=context)
    except SpecificationError:
        raise
    except (RecursionError, MemoryError):
        raise SpecificationError("the formula is nested too deeply") from None
    except Exception as exc:         # noqa: BLE001 - parsing evaluates nothing; any failure of
        #                              formulaic's parser (or Python's, on a {...} block) is
        #                              a formula that cannot be read
        raise SpecificationError(f"the formula cannot be read: {_plain(exc)}") from None
    known = set(columns)
    for term in _terms_of(parsed):
        for factor in term.factors:
            method = getattr(factor.eval_method, "value", str(factor.eval_method))
            try:
                check_factor(str(factor.expr), method, known)
            except _Refused as why:
                raise SpecificationError(f"the formula term '{_short(term)}' is not allowed: "
                                         f"{why}") from None
    return parsed


_ANSI = re.compile(r"\x1b\[[0-9;]*m")


def _plain(exc) -> str:
    return _short(_ANSI.sub("", " ".join(str(exc).split())), 300)


def _typed_cause(exc):
    """Our own typed error behind a failure, if there is one."""
    seen, cur = set(), exc
    while cur is not None and id(cur) not in seen:
        if isinstance(cur, LagwiseError):
            return cur
        seen.add(id(cur))
        cur = cur.__cause__ or cur.__context__
    return None


def _evaluation_failure(exc) -> LagwiseError:
    """The typed error for an allowed term that failed to evaluate: our own message when one of
    our functions refused, else the kind of failure (never the text of a foreign exception,
    which can echo data)."""
    factor = re.search(r"factor `(.*?)`", str(exc))
    term = f" (term '{_short(factor.group(1))}')" if factor else ""
    typed = _typed_cause(exc)
    if typed is not None:
        return type(typed)(f"the formula could not be evaluated{term}: {typed}")
    if isinstance(exc, FormulaicError) and not factor:
        return SpecificationError(f"the formula cannot be read: {_plain(exc)}")
    inner = exc.__cause__ or exc.__context__ or exc
    return SpecificationError(f"the formula could not be evaluated{term}: "
                              f"{type(inner).__name__} (check that the columns it uses hold "
                              "numbers)")


def design(formula: str, data):
    """(response Series, regressor DataFrame, has_intercept, horizon, one-period column) from a
    formula, checked against the allow-list (module docstring) and then evaluated by formulaic
    with missing values kept (the fit drops and counts them)."""
    if not isinstance(formula, str) or "~" not in formula:
        raise SpecificationError("a formula looks like 'y ~ x1 + x2'")
    if len(formula) > 2000:
        raise SpecificationError("the formula is too long")
    lhs_text = formula.split("~", 1)[0]
    frame = _frame_of(data)
    parsed = checked_formula(formula, frame.columns)
    try:
        mm = model_matrix(parsed, frame, context=formula_context(), na_action="ignore")
    except Exception as exc:           # noqa: BLE001 - an allowed term that fails to evaluate
        raise _evaluation_failure(exc) from None
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
