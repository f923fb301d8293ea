"""Every p-value shown anywhere goes through the same functions (issue 21, item 1, second half).

(a) A scan of the sources: no distribution's tail function (sf, cdf, isf, ppf, ...) outside
engine/laws; coefficient tests go through a Law's p_values/wald, the specification tests (J, IVX,
first-stage Wald, residual diagnostics) through the laws module's named tail functions.
(b) The surfaces agree: the coefficient table, the comparison, the robustness table, the CSV
export, the CLI's text and CSV output and the summary text all carry the Law's own p-value of the
table's t statistic, for the normal, Student t and fixed-b laws.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise._files import demo_file
from lagwise.app import cli
from lagwise.engine.inference.compare import compare
from lagwise.engine.io.robustness import robustness_table
from lagwise.engine.io.tables import to_csv

ROOT = Path(__file__).resolve().parent.parent
TAIL = re.compile(r"\b(?:stats|scipy\.stats|norm|chi2|t|f|student_t)\s*\.\s*"
                  r"(?:sf|cdf|logsf|logcdf|isf|ppf)\s*\(")
TAIL_IMPORT = re.compile(r"from\s+scipy\.stats\s+import\s+.*\b(?:norm|chi2|t|f)\b")
SCIPY_DIST = re.compile(r"\bstats\.(?:norm|t|chi2|f|gamma|beta)\b")


def _sources():
    for part in ("engine", "app", "src"):
        for path in sorted((ROOT / part).rglob("*.py")):
            rel = path.relative_to(ROOT).as_posix()
            if rel.startswith("engine/laws/"):
                continue
            yield rel, path.read_text()


def test_no_tail_function_outside_the_laws():
    found = []
    for rel, text in _sources():
        for no, line in enumerate(text.splitlines(), start=1):
            code = line.split("#", 1)[0]
            if TAIL.search(code) or TAIL_IMPORT.search(code) or SCIPY_DIST.search(code):
                found.append(f"{rel}:{no}: {line.strip()}")
    assert not found, "p-values or critical values computed outside engine/laws:\n" + \
        "\n".join(found)


@pytest.fixture(scope="module")
def fit():
    table = lagwise.load_table(demo_file())
    return lagwise.fit_ols(table, "exret_1m", ["rate_capacity", "credit_spread"])


REQUESTS = [("normal", lagwise.estimator("kernel", kernel="bartlett", bandwidth=12.0)),
            ("t", lagwise.estimator("hc1")),
            ("fixed-b", lagwise.estimator("kernel", kernel="parzen", bandwidth=30.0))]


@pytest.mark.parametrize("reference,est", REQUESTS)
def test_every_surface_shows_the_laws_p_value(fit, reference, est):
    res = fit.infer(est, reference=reference)
    expected = res.law.p_values(res.table.t_stat.to_numpy())
    assert np.isfinite(expected).all()
    np.testing.assert_array_equal(res.table.p_value.to_numpy(), expected)
    # the comparison (its row for this estimator)
    comp = compare(fit, reference=reference, estimators=[est])
    np.testing.assert_array_equal(comp.p_value.to_numpy(), expected)
    # the robustness table and its CSV rendering
    rob = robustness_table([fit], est, show="p", reference=reference)
    got = rob.frame.set_index("term").loc[fit.terms, "p_value"].to_numpy()
    np.testing.assert_array_equal(got, expected)
    back = pd.read_csv(io.StringIO(to_csv(res.table)), index_col=0)
    np.testing.assert_allclose(back.p_value.to_numpy(), expected, rtol=1e-9)
    # the summary text: p to three decimals (or <0.001)
    text = res.summary()
    for p in expected:
        assert (f"{p:.3f}" if p >= 0.001 else "<0.001") in text


def test_cli_prints_the_laws_p_values(tmp_path, fit):
    out = tmp_path / "table.csv"
    code = cli.main(["table", str(demo_file()), "--response", "exret_1m", "--regressors",
                     "rate_capacity,credit_spread", "--kernel", "parzen", "--bandwidth", "30",
                     "--reference", "fixed-b", "--format", "csv", "--output", str(out)])
    assert code == 0
    rows = pd.read_csv(out, comment="#")
    rows = rows[rows.estimator.str.startswith("Parzen, b = 30")]
    assert len(rows) == len(fit.terms)
    res = fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth=30.0),
                    reference="fixed-b")
    want = res.law.p_values(res.table.t_stat.to_numpy())
    np.testing.assert_allclose(rows.set_index("term").loc[fit.terms, "p_value"].to_numpy(),
                               want, rtol=1e-9)
