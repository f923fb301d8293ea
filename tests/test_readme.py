"""The README's engine example runs as written, its quick start is CI's command, and its claims
about the demo data match the engine's numbers."""

import os
import re
from pathlib import Path

import numpy as np
import pytest

import lagwise

ROOT = Path(__file__).resolve().parent.parent


def test_readme_engine_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "README has no python example"
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    engine_block = [b for b in blocks if "fit.sweep(kernels" in b][0]
    exec(compile(engine_block, "README.md", "exec"), namespace)   # noqa: S102 - our own docs
    res, sw, report = namespace["res"], namespace["sw"], namespace["report"]
    assert list(res.table.columns) == ["estimate", "std_error", "t_stat", "p_value", "ci_low",
                                       "ci_high"]
    assert sw.t_stat.shape == (3, 60, 3)
    assert namespace["ewc"].axis.symbol == "B"
    assert len(report.tests) > 10


def test_readme_stack_and_own_moments_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text()
    block = [b for b in re.findall(r"```python\n(.*?)```", text, flags=re.S)
             if "lagwise.stack(" in b][0]
    monkeypatch.chdir(ROOT)
    namespace: dict = {"lagwise": lagwise}
    exec(compile(block, "README.md", "exec"), namespace)   # noqa: S102 - our own docs
    both, gmm, res = namespace["both"], namespace["gmm"], namespace["res"]
    assert both.terms[:3] == ["12m:intercept", "12m:rate_capacity", "12m:credit_spread"]
    assert res.wald(both.across("rate_capacity")).df == 2
    iv = lagwise.fit_iv(namespace["frame"], "exret_1m", ["rate_capacity"], [],
                        ["credit_spread"], method="two-step",
                        weight=lagwise.estimator("kernel", lags=6))
    z = namespace["z"]
    same = lagwise.fit_gmm(namespace["moments"], [0.0, 0.0], namespace["frame"],
                           weighting="two-step", estimator=lagwise.estimator("kernel", lags=6),
                           first_weight=np.linalg.inv(z.T @ z / len(z)))
    np.testing.assert_allclose(same.beta, iv.beta, rtol=1e-7)      # the 2SLS first step
    assert gmm.j_test().df == 1
    assert np.isfinite(gmm.infer_weighting().table.std_error).all()


def test_readme_quick_start_commands_are_the_ci_commands():
    readme = (ROOT / "README.md").read_text()
    ci = (ROOT / ".ci" / "run").read_text()
    test_cmd = 'pip install -c constraints.txt ".[test]" && python -m pytest'
    assert test_cmd in readme and test_cmd in ci
    assert "pip install -c constraints.txt . && lagwise serve" in readme
    assert os.access(ROOT / ".ci" / "run", os.X_OK)


@pytest.fixture(scope="module")
def demo_comparison():
    fit = lagwise.fit_ols(lagwise.load_table(lagwise.demo_file()), "exret_12m",
                          ["rate_capacity", "credit_spread"], horizon=12)
    comp = lagwise.compare(fit)
    return comp[comp.term == "rate_capacity"].set_index("estimator")


def test_readme_demo_claims_hold(demo_comparison):
    """Each statement of the README's demo paragraph, checked."""
    rows = demo_comparison
    for name in ("Classical (iid)", "HC0", "HC1", "HC2", "HC3"):
        assert abs(rows.loc[name, "t_stat"]) > 5, name
    for name in ("Bartlett, b = 13", "Bartlett, Newey-West (1994) bandwidth",
                 "Bartlett, rule-of-thumb bandwidth", "VAR-HAC, order by BIC"):
        assert bool(rows.loc[name, "rejects"]) is True, name
    assert rows.loc["VAR-HAC, order by BIC", "p_value"] > 0.03          # "narrowly"
    not_rejected = [n for n in rows.index if "Andrews (1991) bandwidth" in n]
    assert len(not_rejected) == len(lagwise.KERNELS)
    for name in not_rejected + ["Truncated (uniform), b = 12", "EWC, B = 22",
                                "VAR(1) correction"]:
        assert bool(rows.loc[name, "rejects"]) is False, name


def test_readme_iv_demo_claims_hold():
    t = lagwise.load_table(lagwise.demo_file())
    ols = lagwise.fit_ols(t, "rate_growth", ["utilization_survey"]).params["utilization_survey"]
    iv = lagwise.fit_iv(t, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                        ["port_congestion", "scrap_rate", "bunker_spread"])
    assert round(ols, 2) == 0.87 and round(iv.params["utilization_survey"], 1) == 1.6
    weak = lagwise.fit_iv(t, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                          ["scrap_rate", "bunker_spread"])
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")
    wald = weak.infer(est).table.loc["utilization_survey"]
    assert wald.ci_low > 0 or wald.ci_high < 0
    ar = weak.anderson_rubin("utilization_survey", est)
    (lo, hi), = ar.intervals
    assert lo < 0 < hi and round(lo, 2) == -0.42 and round(hi, 2) == 3.26


def test_readme_panel_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    panel = [b for b in blocks if "fit_panel" in b]
    assert panel, "README has no panel example"
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    namespace: dict = {"lagwise": lagwise}
    exec(compile(panel[0], "README.md", "exec"), namespace)   # noqa: S102 - our own docs
    assert isinstance(namespace["panel"], lagwise.PanelFit)
    assert namespace["fm"].nobs == 156


@pytest.fixture(scope="module")
def panel_comparison():
    table = lagwise.load_table(lagwise.demo_file("shipping_panel.csv"))
    fit = lagwise.fit_panel(table, "exret", ["book_to_market", "fleet_age", "charter_cover"],
                            entity="company", time="month")
    assert fit.panel.n_entities == 240 and fit.panel.n_periods == 156 and not fit.panel.balanced
    return fit.compare()


def test_readme_panel_demo_claims_hold(panel_comparison):
    comp = panel_comparison
    cover = comp[comp.term == "charter_cover"].set_index("estimator")
    for name in ("Classical (iid)", "HC0", "HC1", "HC2", "HC3", "Clustered by entity"):
        assert bool(cover.loc[name, "rejects"]) is True, name
        assert 2.65 <= abs(cover.loc[name, "t_stat"]) <= 2.85, name
    month_level = ["Clustered by time", "Clustered by entity and time"] + \
        [n for n in cover.index if n.startswith(("Driscoll-Kraay", "Entity clusters"))]
    for name in month_level + [n for n in cover.index if n.startswith("Fama-MacBeth")]:
        assert bool(cover.loc[name, "rejects"]) is False, name
    for name in month_level:
        assert 1.4 <= abs(cover.loc[name, "t_stat"]) <= 1.6, name
    bm = comp[comp.term == "book_to_market"].set_index("estimator")
    assert bm.rejects.all()
    assert 11.5 <= bm.loc["Classical (iid)", "t_stat"] <= 12.5
    assert 11.5 <= bm.loc["Clustered by entity", "t_stat"] <= 12.5
    for name in ["Clustered by time", "Clustered by entity and time"] + \
            [n for n in bm.index if n.startswith("Driscoll-Kraay")]:
        assert 2.1 <= bm.loc[name, "t_stat"] <= 2.5, name


def test_readme_predictive_example_and_claims(monkeypatch):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    block = [b for b in blocks if "persistence_report" in b][0]
    monkeypatch.chdir(ROOT)
    ns: dict = {"lagwise": lagwise}
    exec(compile(block, "README.md", "exec"), ns)      # noqa: S102 - our own docs
    rep, size = ns["rep"], ns["size"]
    assert ns["fit"].nobs == 408
    assert 0.97 < rep.rho < 0.99 and -0.5 < rep.corr_uv < -0.4 and 0.45 < rep.bias < 0.6
    assert 0.05 < rep.ivx.p_value < 0.07 and 0.02 < rep.ivx_long.p_value < 0.04
    rates = size.frame.set_index("estimator").rejection_rate
    assert rates["Classical (iid)"] > 0.5 and rates["HC1"] > 0.5
    andrews = rates[[n for n in rates.index if "Andrews (1991)" in n]]
    assert ((andrews > 0.1) & (andrews < 0.25)).all()
    assert rates["VAR-HAC, order by BIC"] < 0.12 and rates["Hodrick (1992)"] < 0.12
    assert set(ns["boot"].table.columns) >= {"boot_ci_low", "boot_ci_high", "boot_p_value"}
    assert ns["hs"].frame.h.max() == 36


def test_readme_notebook_statsmodels_paper_example_runs(monkeypatch, tmp_path):
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    block = [b for b in blocks if "from_statsmodels" in b][0]
    monkeypatch.chdir(tmp_path)
    ns: dict = {}
    exec(compile(block, "README.md", "exec"), ns)      # noqa: S102 - our own docs
    assert (tmp_path / "robustness.xlsx").stat().st_size > 1000
    assert "\\begin{tabular}" in ns["latex"]
    assert ns["tab"].columns == ["(1)", "(2)", "(3)", "(4)"]
