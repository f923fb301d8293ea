"""Formulas (formulaic), fits from statsmodels, result summaries and the robustness table.

Outside sources: statsmodels (OLS fits taken in, and formula fits with categorical terms compared
with it), formulaic (the formula evaluation itself), openpyxl (the workbook read back), Python's
html.parser (the HTML parses) and pdflatex (the LaTeX compiles)."""

import subprocess
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf

import lagwise
from tests.test_cli_export import _pdflatex, latex_document

DEMO = lagwise.demo_file()


@pytest.fixture(scope="module")
def table():
    return lagwise.load_table(DEMO)


def test_formula_equals_the_column_list_api(table):
    a = lagwise.fit("exret_12m ~ rate_capacity + credit_spread", table)
    b = lagwise.fit_ols(table, "exret_12m", ["rate_capacity", "credit_spread"])
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-12)
    assert a.terms == b.terms and a.nobs == b.nobs
    no_const = lagwise.fit("exret_12m ~ rate_capacity - 1", table)
    assert no_const.terms == ["rate_capacity"]
    t2, lagged = table.with_transform("lag", "credit_spread", 1)
    c = lagwise.fit("exret_12m ~ rate_capacity + lag(credit_spread, 1)", table)
    d = lagwise.fit_ols(t2, "exret_12m", ["rate_capacity", lagged])
    np.testing.assert_allclose(c.beta, d.beta, rtol=1e-12)
    assert c.sample.dropped_missing == d.sample.dropped_missing
    # a forward-sum response declares the horizon and its one-period series
    e = lagwise.fit("sum_next(exret_1m, 12) ~ rate_capacity", table)
    t3, y = table.with_transform("sum-next", "exret_1m", 12)
    f = lagwise.fit_ols(t3, y, ["rate_capacity"])
    np.testing.assert_allclose(e.beta, f.beta, rtol=1e-12)
    assert e.horizon == 12 and e.one_period.name == "exret_1m"
    np.testing.assert_allclose(e.infer("hodrick").table.std_error,
                               f.infer("hodrick").table.std_error, rtol=1e-10)


def test_formula_with_categories_and_functions_equals_statsmodels():
    rng = np.random.default_rng(4)
    df = pd.DataFrame({"y": rng.standard_normal(60), "x": rng.uniform(1, 3, 60),
                       "sector": rng.choice(["energy", "ships", "ports"], 60)})
    ours = lagwise.fit("y ~ np.log(x) + C(sector)", df)
    theirs = smf.ols("y ~ np.log(x) + C(sector)", df).fit()
    names = ["Intercept" if t == "intercept" else t for t in ours.terms]
    assert sorted(names) == sorted(theirs.params.index)
    np.testing.assert_allclose(ours.beta, theirs.params[names].to_numpy(), rtol=1e-10)
    hc1 = pd.Series(theirs.get_robustcov_results("HC1").bse, index=theirs.params.index)
    np.testing.assert_allclose(ours.infer("hc1").table.std_error, hc1[names], rtol=1e-10)


def test_bad_formulas_name_the_term(table):
    with pytest.raises(lagwise.SpecificationError,
                       match="term 'nothing' is not allowed: 'nothing' is not a column"):
        lagwise.fit("exret_12m ~ rate_capacity + nothing", table)
    with pytest.raises(lagwise.SpecificationError, match="looks like"):
        lagwise.fit("exret_12m rate_capacity", table)
    with pytest.raises(lagwise.SpecificationError, match="cannot be read"):
        lagwise.fit("exret_12m ~ (rate_capacity", table)
    with pytest.raises(lagwise.SpecificationError, match="is not a term"):
        lagwise.fit("rate_growth ~ utilization_survey", table, endogenous=["scrap_rate"],
                    instruments="port_congestion")


def test_formula_iv_and_panel_equal_their_column_apis(table):
    iv = lagwise.fit("rate_growth ~ utilization_survey", table,
                     endogenous=["utilization_survey"], instruments="port_congestion + scrap_rate")
    ref = lagwise.fit_iv(table, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                         ["port_congestion", "scrap_rate"])
    np.testing.assert_allclose(iv.beta, ref.beta, rtol=1e-12)
    panel = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    a = lagwise.fit("exret ~ book_to_market + fleet_age", panel, entity="company", time="month",
                    effects="entity")
    b = lagwise.fit_panel(panel, "exret", ["book_to_market", "fleet_age"], effects="entity")
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-12)


def test_from_statsmodels_equals_fit_ols_and_refuses_other_models(table):
    df = table.frame.reset_index()
    res = smf.ols("exret_12m ~ rate_capacity + credit_spread", df).fit(cov_type="HC3")
    ours = lagwise.from_statsmodels(res)
    ref = lagwise.fit_ols(table, "exret_12m", ["rate_capacity", "credit_spread"])
    np.testing.assert_allclose(ours.beta, res.params.to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(ours.beta, ref.beta, rtol=1e-12)
    np.testing.assert_allclose(ours.infer("hc3").table.std_error, res.bse, rtol=1e-10)
    arrays = sm.OLS(df.exret_12m.to_numpy(), sm.add_constant(df[["rate_capacity"]].to_numpy()),
                    missing="drop").fit()
    assert lagwise.from_statsmodels(arrays).terms == ["intercept", "x1"]
    for model in (smf.wls("exret_12m ~ rate_capacity", df).fit(),
                  smf.glm("exret_12m ~ rate_capacity", df.dropna()).fit()):
        with pytest.raises(lagwise.SpecificationError, match="takes a fitted statsmodels OLS"):
            lagwise.from_statsmodels(model)


def test_results_summary_frame_and_notebook_html(table):
    fit = lagwise.fit_ols(table, "exret_12m", ["rate_capacity"], horizon=12)
    res = fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth="andrews"),
                    reference="fixed-b")
    text = res.summary()
    assert "Parzen" in text and "Andrews (1991)" in text and "fixed-b" in text
    assert "no small-sample factor" in text and "rate_capacity" in text
    frame = res.to_frame()
    assert list(frame.term) == ["intercept", "rate_capacity"]
    assert (frame.estimator == res.label).all() and (frame.level == 0.95).all()
    assert frame.bandwidth.iloc[0] == pytest.approx(res.bandwidth)
    html = res._repr_html_()
    assert "<table" in html and "rate_capacity" in html and "fixed-b" in html


class _Cells(HTMLParser):
    def __init__(self):
        super().__init__()
        self.cells, self._on = [], False

    def handle_starttag(self, tag, attrs):
        self._on = tag in ("td", "th")
        if self._on:
            self.cells.append("")

    def handle_data(self, data):
        if self._on:
            self.cells[-1] += data

    def handle_endtag(self, tag):
        self._on = False


@pytest.fixture(scope="module")
def robustness(table):
    a = lagwise.fit("exret_12m ~ rate_capacity + credit_spread", table, horizon=12)
    b = lagwise.fit("exret_12m ~ rate_capacity", table, horizon=12)
    ests = {"HC1": lagwise.estimator("hc1"), "L = 12": lagwise.estimator("kernel", lags=12)}
    return a, b, ests, lagwise.robustness_table({"both": a, "one": b}, ests, beneath="std_error")


def test_robustness_table_content_cell_by_cell(robustness):
    a, b, ests, tab = robustness
    assert tab.columns == ["(1)", "(2)", "(3)", "(4)"]
    assert tab.specs == ["both", "both", "one", "one"] and tab.estimators == ["HC1", "L = 12"] * 2
    grid = tab.grid(digits=4)
    rows = {r[0]: i for i, r in enumerate(grid) if r[0]}
    for col, (fit, est) in enumerate([(a, ests["HC1"]), (a, ests["L = 12"]),
                                      (b, ests["HC1"]), (b, ests["L = 12"])], start=1):
        res = fit.infer(est)
        for term in fit.terms:
            i = rows[term]
            assert grid[i][col] == f"{res.table.loc[term, 'estimate']:.4f}"
            assert grid[i + 1][col] == f"({res.table.loc[term, 'std_error']:.4f})"
        assert grid[rows["observations"]][col] == str(fit.nobs)
    assert grid[rows["credit_spread"]][3] == ""                 # not in the second model
    assert any("(2) Bartlett, b = 13" in n for n in tab.notes)
    assert tab.foot()[0].startswith("Beneath each estimate: its standard error")


def test_robustness_table_outputs_parse_and_compile(robustness, tmp_path):
    from openpyxl import load_workbook
    _, _, _, tab = robustness
    md = tab.to_markdown()
    lines = [ln for ln in md.splitlines() if ln.startswith("|")]
    assert len({ln.count("|") for ln in lines}) == 1             # every row has every column
    parser = _Cells()
    parser.feed(tab.to_html())
    assert "rate_capacity" in parser.cells and "(1)" in parser.cells
    path = tmp_path / "table.xlsx"
    tab.to_excel(path)
    wb = load_workbook(path)
    ws = wb["table"]
    values = {(c.row, c.column): c.value for row in ws.iter_rows() for c in row}
    term_rows = {v: r for (r, c), v in values.items() if c == 1 and isinstance(v, str)}
    r = term_rows["rate_capacity"]
    expected = tab.frame[(tab.frame.column == "(2)") & (tab.frame.term == "rate_capacity")]
    assert values[(r, 3)] == pytest.approx(expected.estimate.iloc[0], rel=1e-12)
    assert values[(r + 1, 3)] == pytest.approx(expected.std_error.iloc[0], rel=1e-12)
    numbers = pd.DataFrame(list(wb["numbers"].values)[1:],
                           columns=list(wb["numbers"].values)[0])
    np.testing.assert_allclose(numbers.std_error.to_numpy(), tab.frame.std_error.to_numpy(),
                               rtol=1e-12)
    exe = _pdflatex()
    doc = tmp_path / "r.tex"
    tex = tab.to_latex(caption="Robustness: 12-month returns")
    assert "\\toprule" in tex and "\\midrule" in tex and "\\bottomrule" in tex
    doc.write_text(latex_document(tex))
    out = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", doc.name],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stdout[-2000:]
