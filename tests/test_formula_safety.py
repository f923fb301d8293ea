"""Formulas cannot run code (issue 21, item 2).

Every construction the issue lists (a call of __import__, a {...} block, exec, a lambda,
attribute access to globals, np.save, open(...)) and a property test mixing allowed and
forbidden syntax: a formula holding anything outside the allow-list is refused with a
SpecificationError naming the term, before evaluation. Each forbidden piece would leave a trace
if it ran: a file in the working directory (a fresh tmp_path), a name in builtins, or an audit
event (os.system, subprocess, a file opened for writing); the tests check all three.
"""

from __future__ import annotations

import builtins
import importlib
import os
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise
formulas = importlib.import_module("lagwise.engine.io.formulas")

NUMPY_FUNCTIONS = getattr(formulas, "NUMPY_FUNCTIONS", ("log", "exp", "sqrt", "abs"))

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "150"))

_EVENTS: list = []
_WATCH = {"active": False}
_SUSPECT = {"os.system", "subprocess.Popen", "os.exec", "os.posix_spawn", "os.spawn",
            "os.remove", "os.rename", "os.mkdir", "shutil.rmtree", "socket.connect",
            "os.kill", "ctypes.dlopen", "compile_pickled"}


def _audit(event, args):
    if not _WATCH["active"]:
        return
    if event in _SUSPECT:
        _EVENTS.append((event, args))
    elif event == "open" and args and "canary" in str(args[0]):
        _EVENTS.append((event, args[:2]))


sys.addaudithook(_audit)


def data():
    rng = np.random.default_rng(7)
    return pd.DataFrame({"y": rng.normal(size=60), "x": rng.normal(size=60) + 5.0,
                         "z": rng.normal(size=60), "g": list("abc") * 20,
                         "a b": rng.normal(size=60) + 2.0})


def _attempt(formula):
    """Fit the formula with every trace watched; returns (outcome, traces)."""
    _EVENTS.clear()
    _WATCH["active"] = True
    try:
        try:
            lagwise.fit(formula, data())
            outcome = None
        except lagwise.LagwiseError as exc:
            outcome = exc
    finally:
        _WATCH["active"] = False
    traces = list(_EVENTS)
    if hasattr(builtins, "LAGWISE_CANARY"):
        traces.append(("builtins", "LAGWISE_CANARY"))
        del builtins.LAGWISE_CANARY
    return outcome, traces


ISSUE_CASES = [
    "y ~ I(__import__('os').system('touch canary_import'))",
    "y ~ {__import__('os').system('touch canary_block')}",
    "y ~ x + {exec(\"open('canary_exec', 'w').close()\")}",
    "y ~ {(lambda: open('canary_lambda', 'w'))()}",
    "y ~ I((lambda f: f('canary_lambda2', 'w'))(open))",
    "y ~ {globals()['__builtins__']['open']('canary_globals', 'w')}",
    "y ~ {np.__builtins__}",
    "y ~ np.save('canary_npsave', x)",
    "y ~ x + np.savetxt('canary_savetxt', x)",
    "y ~ I(open('canary_open', 'w'))",
    "y ~ {open('/etc/passwd').read()}",
    "y ~ {x.__class__.__mro__[-1].__subclasses__()}",
    "y ~ {setattr(__import__('builtins'), 'LAGWISE_CANARY', 1)}",
    "y ~ {eval('1 + 1')}",
    "y ~ C(g, __import__('os').system('touch canary_c'))",
    "y ~ lag(x, __import__('os').system('touch canary_lag'))",
    "y ~ np.log(x, out=np.save('canary_kw', x))",
    "y ~ {[open('canary_comp', 'w') for _ in range(1)]}",
    "y ~ I(x if open('canary_ifexp', 'w') else x)",
    "y ~ {(canary := 1)}",
    "y ~ I(x.__add__(1))",
    "y ~ np.log(x)[0:2]",
    "y ~ I('text')",
    "y ~ I(x ** 99999999)",
    "y ~ (x + z + `a b`) ** 100",
    "y ~ x | z",
]


@pytest.mark.parametrize("formula", ISSUE_CASES)
def test_the_issues_constructions_are_refused_before_they_run(formula, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    outcome, traces = _attempt(formula)
    assert isinstance(outcome, lagwise.SpecificationError), (formula, outcome)
    assert not traces, traces
    assert list(tmp_path.iterdir()) == []
    message = str(outcome)
    assert "formula" in message or "term" in message
    assert "root:" not in message                     # no file contents echoed


def test_the_refusal_names_the_term():
    with pytest.raises(lagwise.SpecificationError, match=r"term 'np\.save\('canary', x\)'"):
        formulas.checked_formula("y ~ x + np.save('canary', x)", ["y", "x"])
    with pytest.raises(lagwise.SpecificationError, match=r"'nope' is not a column"):
        formulas.checked_formula("y ~ x + nope", ["y", "x"])


ALLOWED = ["y ~ x + z", "y ~ np.log(x) + C(g)", "y ~ I(x ** 2) + lag(x, 2) + lead(z)",
           "y ~ `a b` + np.sqrt(np.abs(`a b`))", "sum_next(y, 3) ~ x", "y ~ x * z",
           "y ~ {x * 2 - z / 3}", "y ~ difference(x) + log_difference(x)", "y ~ (x + z) ** 2",
           "y ~ np.exp(z) + np.log1p(x) + np.square(z)", "y ~ x - 1", "y ~ ."]


@pytest.mark.parametrize("formula", ALLOWED)
def test_the_allow_list_still_fits(formula, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    outcome, traces = _attempt(formula)
    assert outcome is None, outcome
    assert not traces and list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- property test

ALLOWED_LEAVES = ["x", "z", "`a b`", "1", "2.5", "0.5"]
FORBIDDEN_LEAVES = [
    "__import__('os').system('touch canary_p1')",
    "open('canary_p2', 'w')",
    "np.save('canary_p3', x)",
    "exec('open(\"canary_p4\", \"w\")')",
    "(lambda: open('canary_p5', 'w'))()",
    "setattr(__import__('builtins'), 'LAGWISE_CANARY', 1)",
    "x.__class__",
    "x[0]",
    "[x, z]",
    "{'a': x}",
    "'text'",
    "getattr(x, 'mean')()",
    "globals()",
    "np.load",
    "np.savetxt('canary_p6', x)",
    "vars()",
    "None",
    "x and z",
    "x < z",
    "(yield)",
    "x @ z",
    "x ** z",
    "f'{x}'",
    "b'canary'",
]


@st.composite
def expressions(draw, depth=0):
    """(text, forbidden?) of a Python expression built from allowed and forbidden nodes."""
    kind = draw(st.integers(0, 7 if depth < 3 else 1))
    if kind == 0:
        return draw(st.sampled_from(ALLOWED_LEAVES)), False
    if kind == 1:
        return draw(st.sampled_from(FORBIDDEN_LEAVES)), True
    a, fa = draw(expressions(depth + 1))
    if kind in (2, 3):
        b, fb = draw(expressions(depth + 1))
        op = draw(st.sampled_from(["+", "-", "*", "/"]))
        return f"({a} {op} {b})", fa or fb
    if kind == 4:
        return f"np.{draw(st.sampled_from(NUMPY_FUNCTIONS))}({a})", fa
    if kind == 5:
        name = draw(st.sampled_from(["lag", "lead", "sum_next"]))
        return f"{name}({a}, {draw(st.integers(1, 3))})", fa
    if kind == 6:
        return f"({a}) ** {draw(st.sampled_from(['2', '0.5', '-1']))}", fa
    return f"-({a})", fa


@st.composite
def formula_cases(draw):
    parts, forbidden = [], False
    for _ in range(draw(st.integers(1, 3))):
        text, bad = draw(expressions())
        wrap = draw(st.sampled_from(["I({})", "{{{}}}", "C({})", "{}"]))
        if wrap == "{}" and not text.replace(" ", "").isidentifier():
            wrap = "I({})"
        parts.append(wrap.format(text))
        forbidden = forbidden or bad
    return "y ~ " + " + ".join(parts), forbidden


@settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(case=formula_cases())
def test_mixed_expressions_never_run_forbidden_code(case, tmp_path, monkeypatch):
    formula, forbidden = case
    monkeypatch.chdir(tmp_path)
    outcome, traces = _attempt(formula)
    assert not traces, (formula, traces)
    assert not [p for p in tmp_path.iterdir() if "canary" in p.name], formula
    if forbidden:
        assert isinstance(outcome, lagwise.SpecificationError), (formula, outcome)
        assert "is not allowed" in str(outcome) or "cannot be read" in str(outcome), \
            (formula, outcome)
    else:
        assert outcome is None or isinstance(outcome, lagwise.LagwiseError)
