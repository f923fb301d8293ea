"""The factor-model mode of the dashboard and `lagwise factors` on the command line: figure and
table builders against the engine's numbers, the callbacks through the store, the exports and
the script, and a real browser loading the factor demo (Playwright driving Debian's chromium)."""

from __future__ import annotations

import runpy
from pathlib import Path

import numpy as np
import pytest

import lagwise
from lagwise._files import demo_file
from lagwise.app import factors as FA
from lagwise.app.views import fmt, fmt_p

DEMO = demo_file("strategy_portfolios.csv")
ASSETS = [f"P{i:02d}" for i in range(1, 26)]
FACTORS = ["market", "carry", "defensive"]


@pytest.fixture(scope="module")
def fm():
    return lagwise.fit_factor_model(lagwise.load_table(DEMO), ASSETS, FACTORS, risk_free="rf")


def test_alpha_figure_orders_and_intervals(fm):
    est = lagwise.estimator("kernel", kernel="parzen", bandwidth=8.0)
    table = fm.alphas(est)
    fig = FA.alpha_figure(table, "Parzen, b = 8", 0.95, "t")
    order = list(fig.layout.xaxis.categoryarray)
    assert order == list(table.sort_values("t_stat", ascending=False).index)
    points = {x: (y, up, down) for trace in fig.data if trace.mode == "markers"
              for x, y, up, down in zip(trace.x, trace.y, trace.error_y.array,
                                        trace.error_y.arrayminus)}
    assert len(points) == 25
    for asset, (y, up, down) in points.items():
        assert y == pytest.approx(table.loc[asset, "estimate"])
        assert y + up == pytest.approx(table.loc[asset, "ci_high"])
        assert y - down == pytest.approx(table.loc[asset, "ci_low"])
    by_alpha = FA.alpha_figure(table, "x", 0.95, "alpha")
    assert list(by_alpha.layout.xaxis.categoryarray)[0] == table.estimate.idxmax()


def test_joint_figure_curves_reference_lines_and_marks(fm):
    ests = fm.kernel_estimators()
    sweep = fm.joint_sweep(ests, np.arange(1, 41.0))
    grs = fm.grs()
    marks = fm.rule_landings(ests)
    fig = FA.joint_figure(sweep, 0.95, grs, marks, current=12.0, current_curve=1)
    lines = {t.name: t for t in fig.data if t.mode == "lines"}
    p = sweep.p_value[0]
    np.testing.assert_allclose(np.asarray(lines["Bartlett"].y, float),
                               np.where(np.isfinite(p), np.maximum(p, FA.P_FLOOR), np.nan))
    assert lines["Parzen"].line.width > lines["Bartlett"].line.width       # current curve
    assert fig.layout.shapes[0].x0 == 12.0                                 # patched by sliders
    ys = sorted(s.y0 for s in fig.layout.shapes[1:])
    assert ys == pytest.approx(sorted([0.05, grs.p_value]))
    assert any(f"GRS p = {fmt_p(grs.p_value)}" in a.text for a in fig.layout.annotations)
    assert fig.layout.yaxis.tickvals[0] >= FA.P_FLOOR
    andrews = [t for t in fig.data if t.name == "Andrews (1991)"][0]
    b = lagwise.select_bandwidth(fm, "parzen", "andrews").b
    assert andrews.x[0] == pytest.approx(b)
    assert fig.layout.yaxis.type == "log"
    odd = [t for t in fig.data if t.name == "QS: no test"]
    assert not odd or all(y == 1 for y in odd[0].y)


def test_every_estimator_records_and_premia_records(fm):
    ests = [lagwise.estimator("classical"), lagwise.estimator("hc1"),
            lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")]
    labels, tables, tests = [], {}, {}
    for e in ests:
        part = fm.alpha_inference(e)
        labels.append(part.label)
        tables[part.label] = fm.alphas(e)
        tests[part.label] = fm.alpha_test(e)
    rows, bottom, cols = FA.every_records(labels, tables, tests, "t_stat", fm.assets)
    assert [c["headerName"] for c in cols[2:]] == labels
    p03 = [r for r in rows if r["asset"] == "P03"][0]
    assert p03["e2"] == pytest.approx(tables[labels[2]].loc["P03", "t_stat"])
    assert bottom[0]["e0_txt"] == fmt_p(tests[labels[0]].p_value)
    rp = lagwise.fit_risk_premia(lagwise.load_table(DEMO), ASSETS, FACTORS, risk_free="rf")
    est = lagwise.estimator("hc0")
    recs = FA.premia_records(rp, rp.corrections(est), None)
    market = [r for r in recs if r["premium"] == "market"][0]
    se = rp.infer(est, "shanken").table.loc["market", "std_error"]
    assert market["shanken"].startswith(fmt(se, 3))


def test_callbacks_through_the_store_and_the_exports():
    from lagwise.app.derived import dataset_from_bytes
    from lagwise.app.main import create_app
    from lagwise.app.state import STORE
    create_app()
    session = STORE.open_session()
    key, table = dataset_from_bytes(session, DEMO.read_bytes(), DEMO.name)
    opts = FA.on_factor_options(key, session, None, None, None, None)
    assert opts[1] == ASSETS and opts[3] == FACTORS and opts[5] == "rf" and opts[6] == ["on"]
    spec, _ = FA.on_factor_spec(["on"], opts[1], opts[3], opts[5], [], None)
    out = FA.factor_fit(session, key, spec, [0, 479], None)
    fkey, focus = out[0], out[3]
    model = STORE.get(session, fkey)
    assert lagwise.kind_of(model).name == "factor-model" and focus == "P01:alpha"
    ids = [{"type": "est-param", "name": n} for n in ("kernel", "small_sample", "repair",
                                                       "prewhiten")]
    vals = ["bartlett", [], ["on"], []]
    style, fig, text = FA.on_factor_alphas(fkey, "kernel", vals, "andrews", 10, "auto", 0.95,
                                           "asset", ids, session, 10)
    assert style == {} and "Bartlett, Andrews (1991)" in fig.layout.title.text
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")
    frame, caption, notes = FA.factor_table("fm-alpha-table", session, fkey, model, est, 0.95,
                                            "auto")
    np.testing.assert_allclose(frame.t_stat, model.alphas(est).t_stat)
    assert model.alpha_test(est).summary() in notes
    frame, _, _ = FA.factor_table("fm-joint-table", session, fkey, model, est, 0.95, "auto")
    assert set(frame.curve) == {lagwise.FAMILIES["kernel"].curve_label(e.params)
                                for e in model.kernel_estimators()}
    frame, _, notes = FA.factor_table("fm-premia-table", session, fkey, model, est, 0.95,
                                      "auto")
    assert {"none", "shanken", "krs", "mean", "gmm"} <= set(frame.correction)
    paper = FA.paper_table(model, est, 0.95)
    assert paper.terms == model.alpha_terms and "GRS" in paper.notes[-1]
    assert "\\begin{tabular}" in paper.to_latex()
    # the script runs and prints the same joint test
    script = FA.factor_script(table, model, est, 0.95, "auto")
    assert "lagwise.fit_factor_model(table" in script and "fit.alpha_test(est" in script


def test_show_opens_a_factor_model_as_it_is(fm):
    """lagwise.show on a factor model fitted in Python: its kind has a recipe but no table to
    refit from, so the page opens on the model itself (with the factor cards)."""
    import json
    from lagwise.app.main import create_app
    assert fm.table is None and lagwise.kind_of(fm).recipe is not None
    app = create_app(model=fm)
    client = app.server.test_client()
    client.get("/")
    layout = json.dumps(client.get("/_dash-layout").get_json())
    assert '"fm-cards"' in layout and '"given_fit": true' in layout


def test_the_exported_script_reproduces_the_numbers(tmp_path, capsys, fm):
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")
    script = FA.factor_script(lagwise.load_table(DEMO), fm, est, 0.95, "auto")
    path = tmp_path / "view.py"
    path.write_text(script)
    namespace = runpy.run_path(str(path))
    assert namespace["fit"].alpha_test(est).p_value == pytest.approx(fm.alpha_test(est).p_value)
    printed = capsys.readouterr().out
    assert f"GRS = {fm.grs().statistic:.4g}" in printed
    assert fm.joint_sweep().flip(0).sentence() in printed


def test_cli_factors_text_and_formats(tmp_path, capsys, fm):
    from lagwise.app.cli import main
    rc = main(["factors", str(DEMO), "--assets", ",".join(ASSETS), "--factors",
               ",".join(FACTORS), "--risk-free", "rf"])
    out = capsys.readouterr().out
    assert rc == 0
    g = fm.grs()
    assert f"F({g.df[0]}, {g.df[1]})" in out and "Joint test that all 25 alphas are zero" in out
    hc1 = fm.alpha_test("hc1")
    assert f"W = {hc1.statistic:8.4g}" in out
    assert "Risk premia (two-pass" in out and "Shanken" in out
    sweep = fm.joint_sweep(fm.kernel_estimators())
    assert sweep.flip("bartlett", 0.95, "all 25 alphas zero").sentence() in out
    rc = main(["factors", str(DEMO), "--assets", ",".join(ASSETS), "--factors",
               ",".join(FACTORS), "--risk-free", "rf", "--format", "csv", "--output",
               str(tmp_path / "a.csv")])
    text = (tmp_path / "a.csv").read_text()
    row = [ln for ln in text.splitlines() if ln.startswith("P03,Classical")][0]
    assert float(row.split(",")[2]) == pytest.approx(fm.alpha["P03"], rel=1e-8)
    assert main(["factors", str(DEMO), "--assets", "P01", "--factors", "market"]) == 2
    assert "at least two assets" in capsys.readouterr().err


# --------------------------------------------------------------------------- in a browser

@pytest.mark.browser
def test_factor_demo_in_the_browser(page, live_server, tmp_path, fm):
    from playwright.sync_api import expect
    from tests.test_browser import cells, open_app
    errors = open_app(page, live_server)
    page.locator("#fm-summary").click()
    page.locator("#fm-demo").click()
    expect(page.locator("#upload-message")).to_contain_text("loaded the factor demo",
                                                           timeout=30_000)
    expect(page.locator("#fm-cards")).to_be_visible(timeout=30_000)
    # the page's estimator: Bartlett with the Andrews bandwidth (the kind's default family)
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")
    jt = fm.alpha_test(est)
    expect(page.locator("#fm-joint-text")).to_contain_text(
        f"All 25 alphas zero: rejected at 5% (W = {fmt(jt.statistic, 4)}", timeout=30_000)
    g = fm.grs()
    expect(page.locator("#fm-joint-text")).to_contain_text(f"GRS = {fmt(g.statistic, 4)}")
    # the alpha chart: 25 assets, each at its alpha
    page.wait_for_function(
        "() => { const g = document.getElementById('fm-alpha-graph')"
        ".querySelector('.js-plotly-plot'); return g && g.data && g.data.filter("
        "t => t.mode === 'markers').reduce((n, t) => n + t.x.length, 0) === 25; }",
        timeout=30_000)
    shown = page.evaluate(
        "() => { const g = document.getElementById('fm-alpha-graph')"
        ".querySelector('.js-plotly-plot'); const out = {}; g.data.filter(t => t.mode === "
        "'markers').forEach(t => t.x.forEach((x, i) => out[x] = t.y[i])); return out; }")
    alphas = fm.alphas(est)
    for asset in ("P03", "P14", "P25"):
        assert shown[asset] == pytest.approx(alphas.loc[asset, "estimate"], rel=1e-9)
    # sorted by t: the first category is the largest t
    page.locator("#fm-sort").get_by_role("radio", name="t statistic").check()
    page.wait_for_function(
        "(a) => document.getElementById('fm-alpha-graph').querySelector('.js-plotly-plot')"
        ".layout.xaxis.categoryarray[0] === a", arg=alphas.t_stat.idxmax(), timeout=20_000)
    # the joint chart: one curve per kernel, p-values equal to the engine's, GRS line
    sweep = fm.joint_sweep(fm.kernel_estimators())
    page.wait_for_function(
        "() => { const g = document.getElementById('fm-joint-graph')"
        ".querySelector('.js-plotly-plot'); return g && g.data && g.data.length >= 6; }",
        timeout=60_000)
    bart = page.evaluate(
        "() => document.getElementById('fm-joint-graph').querySelector('.js-plotly-plot')"
        ".data.find(t => t.name === 'Bartlett').y")
    np.testing.assert_allclose(np.asarray(bart[:30], float),
                               np.maximum(sweep.p_value[0, :30], FA.P_FLOOR), rtol=1e-9)
    expect(page.locator("#fm-joint-flips")).to_contain_text(
        sweep.flip("bartlett", 0.95, "all 25 alphas zero").sentence(), timeout=30_000)
    # every estimator: 25 rows and the joint p-values in the bottom row
    expect(cells(page, "fm-every-table", "asset").first).to_have_text("P01", timeout=60_000)
    expect(page.locator("#fm-every-table .ag-floating-bottom [col-id='e0']").first) \
        .to_have_text(fmt_p(fm.alpha_test("classical").p_value), timeout=30_000)
    # the risk premia with each correction side by side
    rp = lagwise.fit_risk_premia(lagwise.load_table(DEMO), ASSETS, FACTORS, risk_free="rf")
    krs = rp.infer(est, "krs").table.loc["market", "std_error"]
    market = page.locator("#fm-premia-table .ag-center-cols-container .ag-row",
                          has=page.locator("[col-id='premium']", has_text="market"))
    expect(market.locator("[col-id='krs']")).to_contain_text(fmt(krs, 3), timeout=60_000)
    # exports: the alpha table as CSV holds the engine's numbers
    with page.expect_download(timeout=30_000) as info:
        page.locator("[id*='fm-alpha-table'][id*='csv']").click()
    text = Path(info.value.path()).read_text()
    row = [ln for ln in text.splitlines() if ln.startswith("P03,")][0]
    assert float(row.split(",")[3]) == pytest.approx(alphas.loc["P03", "t_stat"], rel=1e-8)
    assert not [e for e in errors if "Error" in e or "Content Security Policy" in e], errors
