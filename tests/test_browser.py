"""Real-browser tests: Playwright driving Debian's headless Chromium against a live server.

Skipped locally without chromium; CI sets LAGWISE_REQUIRE_BROWSER=1 so they fail instead."""

import json
import math
from pathlib import Path

import numpy as np
import pytest
from playwright.sync_api import Page, expect

import lagwise
from lagwise.app.views import fmt
from lagwise.engine.covariance.bandwidth import bandwidth_text
from lagwise._files import demo_file

pytestmark = pytest.mark.browser
DEMO = demo_file()


def choose(page: Page, dropdown: str, option: str):
    page.locator(f"#{dropdown}").click()
    page.get_by_role("option", name=option, exact=True).click()
    page.keyboard.press("Escape")


def card(page: Page, inner_id: str):
    return page.locator("section.lw-card", has=page.locator(f"#{inner_id}"))


def cells(page: Page, grid: str, col: str):
    return page.locator(f"#{grid} .ag-center-cols-container [col-id='{col}']")


def se_cell(page: Page, term_index: int):
    return cells(page, "coef-table", "std_error").nth(term_index)


def engine_se(response, regs, term, **est):
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), response, regs)
    return fmt(fit.infer(lagwise.estimator("kernel", **est)).table.loc[term, "std_error"])


def open_app(page: Page, url: str):
    errors = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.goto(url)
    expect(cells(page, "coef-table", "term").first).to_have_text("intercept", timeout=30_000)
    return errors


def upload(page: Page, path_or_payload):
    page.locator("#upload input[type=file]").set_input_files(path_or_payload)


def test_upload_model_slider_rule(page: Page, live_server):
    errors = open_app(page, live_server)
    upload(page, DEMO)
    expect(page.locator("#upload-message")).to_contain_text("loaded freight_index.csv",
                                                           timeout=20_000)
    choose(page, "response", "exret_36m")
    choose(page, "regressors", "credit_spread")          # toggles it off: rate_capacity only
    expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "rate_capacity"],
                                                           timeout=20_000)
    # the page opens on a named automatic rule (Andrews), and the slider shows where it landed
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_36m", ["rate_capacity"])
    b = lagwise.select_bandwidth(fit, "bartlett", "andrews").b
    thumb = page.locator("#tune-slider [role=slider]")
    expect(thumb).to_have_attribute("aria-valuenow", str(int(round(b))), timeout=20_000)
    expect(se_cell(page, 1)).to_have_text(
        engine_se("exret_36m", ["rate_capacity"], "rate_capacity", kernel="bartlett",
                  bandwidth="andrews"), timeout=20_000)
    expect(page.locator("#headline")).to_contain_text("value chosen by Andrews (1991)")
    lags = math.ceil(b) - 1
    expect(page.locator("#headline")).to_contain_text(
        f"b = {bandwidth_text(b)} ({lags} lag{'s' if lags != 1 else ''})")
    # keyboard on the slider: two steps up, now a value set by hand
    landed = int(round(b))
    thumb.focus()
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowRight")
    expect(thumb).to_have_attribute("aria-valuenow", str(landed + 2))
    expect(se_cell(page, 1)).to_have_text(
        engine_se("exret_36m", ["rate_capacity"], "rate_capacity", kernel="bartlett",
                  bandwidth=float(landed + 2)), timeout=20_000)
    expect(page.locator("#tune-text")).to_contain_text(f"b = {landed + 2} · {landed + 1} lags")
    expect(page.locator("#tune-rule")).to_contain_text("set by hand")
    page.wait_for_function(
        "(v) => document.getElementById('sens-graph').querySelector('.js-plotly-plot')"
        ".layout.shapes[0].x0 === v", arg=landed + 2)
    # back to a rule: the slider jumps to where it lands
    choose(page, "tune-rule", "rule-of-thumb")
    rot = lagwise.select_bandwidth(fit, "bartlett", "rule-of-thumb").b
    expect(thumb).to_have_attribute("aria-valuenow", str(int(rot)), timeout=20_000)
    assert not [e for e in errors if "Error" in e or "Content Security Policy" in e], errors


def test_every_family_with_an_axis_drives_the_slider(page: Page, live_server):
    errors = open_app(page, live_server)
    choose(page, "est-name", "Equal-weighted cosine (EWC)")
    expect(page.locator("#tune-title")).to_have_text("cosine terms B", timeout=20_000)
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m", ["rate_capacity",
                                                                   "credit_spread"], horizon=12)
    thumb = page.locator("#tune-slider [role=slider]")
    expect(thumb).to_have_attribute("aria-valuenow", "22", timeout=20_000)     # LLSW rule
    thumb.focus()
    page.keyboard.press("ArrowLeft")
    expect(thumb).to_have_attribute("aria-valuenow", "21")
    res = fit.infer(lagwise.estimator("ewc", cosines=21))
    expect(se_cell(page, 1)).to_have_text(fmt(res.table.std_error.iloc[1]), timeout=20_000)
    expect(page.locator("#coef-caption")).to_contain_text("Student t with 21 df")
    page.wait_for_function(
        "() => document.getElementById('sens-graph').querySelector('.js-plotly-plot')"
        ".layout.xaxis.title.text === 'cosine terms B'")
    choose(page, "est-name", "Parametric VAR (VAR-HAC)")
    expect(page.locator("#tune-title")).to_have_text("VAR order p", timeout=20_000)
    choose(page, "est-name", "Heteroskedasticity-robust (HC)")
    expect(page.locator("#tune-title")).to_have_text("no tuning value", timeout=20_000)
    expect(se_cell(page, 1)).to_have_text(fmt(fit.infer("hc1").table.std_error.iloc[1]),
                                          timeout=20_000)
    assert not [e for e in errors if "Error" in e], errors


def test_exports_chart_and_table(page: Page, live_server, tmp_path):
    open_app(page, live_server)
    # the comparison shades the estimators whose conclusion differs from the current one
    # (demo default: Bartlett with the Andrews bandwidth does not reject; HC does)
    verdicts = cells(page, "compare-table", "verdict")
    expect(verdicts.first).to_be_visible(timeout=30_000)
    shaded = page.locator("#compare-table .ag-center-cols-container .ag-row"
                          "[style*='236, 234, 227'] [col-id='verdict']")
    expect(shaded.first).to_have_text("rejected", timeout=20_000)
    expect(page.locator("#sens-graph .js-plotly-plot")).to_be_visible(timeout=30_000)
    page.wait_for_timeout(1500)
    magic = {"PNG": b"\x89PNG", "SVG": b"<svg", "PDF": b"%PDF"}
    for label, head in magic.items():
        with page.expect_download(timeout=60_000) as info:
            card(page, "sens-graph").locator("button", has_text=label).click()
        path = tmp_path / info.value.suggested_filename
        info.value.save_as(path)
        data = path.read_bytes()
        assert head in data[:200], (label, data[:40])
        assert len(data) > 2000
    with page.expect_download(timeout=30_000) as info:
        card(page, "coef-table").locator("button", has_text="LATEX").click()
    tex = Path(info.value.path()).read_text()
    assert "\\begin{tabular}" in tex and "rate\\_capacity" in tex
    assert "95\\% confidence intervals" in tex and "reference law" in tex
    with page.expect_download(timeout=30_000) as info:
        card(page, "coef-table").locator("button", has_text="CSV").click()
    csv_text = Path(info.value.path()).read_text()
    row = [ln for ln in csv_text.splitlines() if ln.startswith("rate_capacity,")][0]
    shown = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m",
                            ["rate_capacity", "credit_spread"]).params["rate_capacity"]
    assert float(row.split(",")[1]) == pytest.approx(shown, rel=1e-8)   # a number, not text
    head = [ln for ln in csv_text.splitlines() if ln.startswith("# ")]
    assert head[0].startswith("# Made by Lagwise") and "SHA-256" in head[1]
    assert any("reference law" in ln for ln in head)
    with page.expect_download(timeout=30_000) as info:
        card(page, "compare-table").locator("button", has_text="CSV").click()
    csv_text = Path(info.value.path()).read_text()
    assert "estimator," in csv_text and "HC3" in csv_text
    with page.expect_download(timeout=60_000) as info:
        page.locator("#export-report").click()
    report = Path(info.value.path()).read_text()
    assert "<html" in report and "Lagwise report" in report and "plotly" in report.lower()


def test_malformed_upload_then_good_file(page: Page, live_server):
    open_app(page, live_server)
    upload(page, {"name": "junk.csv", "mimeType": "text/csv", "buffer": b"\x00\x01\x02\x03binary"})
    expect(page.locator("#upload-message .lw-error")).to_contain_text("binary", timeout=20_000)
    upload(page, {"name": "words.csv", "mimeType": "text/csv",
                  "buffer": b"name,city\nann,oslo\nbo,rome\n"})
    expect(page.locator("#upload-message .lw-error")).to_contain_text("no numeric columns")
    # the app stays usable: the results still show and a good file loads
    expect(cells(page, "coef-table", "term").first).to_have_text("intercept")
    upload(page, DEMO)
    expect(page.locator("#upload-message .lw-ok")).to_contain_text("loaded freight_index.csv",
                                                                   timeout=20_000)


def test_sessions_are_isolated(browser, live_server):
    ctx_a, ctx_b = browser.new_context(), browser.new_context()
    a, b = ctx_a.new_page(), ctx_b.new_page()
    open_app(a, live_server)
    open_app(b, live_server)
    rows = "\n".join(f"{i},{(i * 7) % 11 + 0.5 * i},{(i * 3) % 5}" for i in range(60))
    upload(b, {"name": "other.csv", "mimeType": "text/csv",
               "buffer": ("alpha,beta,gamma\n" + rows + "\n").encode()})
    expect(b.locator("#upload-message")).to_contain_text("loaded other.csv", timeout=20_000)
    expect(cells(b, "coef-table", "term")).to_have_text(["intercept", "beta"], timeout=20_000)
    # the new file does not inherit the demo's overlap horizon
    expect(b.locator("#horizon")).to_have_value("")
    # session A still sees the demo model and none of B's columns
    expect(cells(a, "coef-table", "term")).to_have_text(
        ["intercept", "rate_capacity", "credit_spread"])
    a.locator("#response").click()
    expect(a.get_by_role("option", name="alpha", exact=True)).to_have_count(0)
    a.keyboard.press("Escape")
    ctx_a.close()
    ctx_b.close()


def test_settings_save_and_load(page: Page, live_server, tmp_path):
    open_app(page, live_server)
    with page.expect_download(timeout=30_000) as info:
        page.locator("#save-settings").click()
    saved = json.loads(Path(info.value.path()).read_text())
    assert saved["lagwise_settings"] == 2 and saved["estimator"] == "kernel"
    assert saved["response"] == "exret_12m" and saved["params"]["kernel"] == "bartlett"
    assert saved["rule"] == "andrews"
    saved.update({"rule": "fixed", "value": 30, "level": 0.99,
                  "params": {**saved["params"], "kernel": "parzen"}})
    path = tmp_path / "mine.json"
    path.write_text(json.dumps(saved))
    page.locator("#load-settings input[type=file]").set_input_files(path)
    expect(page.locator("#settings-message")).to_contain_text("settings applied",
                                                              timeout=20_000)
    expect(page.locator("#tune-slider [role=slider]")).to_have_attribute("aria-valuenow", "30")
    expect(page.locator("#coef-caption")).to_contain_text("Parzen, b = 30", timeout=20_000)
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m", ["rate_capacity",
                                                                   "credit_spread"])
    res = fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth=30.0), level=0.99)
    lo = fmt(res.table.loc["rate_capacity", "ci_low"])
    expect(cells(page, "coef-table", "interval").nth(1)).to_contain_text(lo)
    # a file that is not a settings record gives one message and changes nothing
    bad = tmp_path / "bad.json"
    bad.write_text('{"hello": 1}')
    page.locator("#load-settings input[type=file]").set_input_files(bad)
    expect(page.locator("#settings-message .lw-error")).to_contain_text("not a Lagwise settings")
    wrong = tmp_path / "wrong.json"
    wrong.write_text(json.dumps({**saved, "estimator": "kernel", "params": {"kernel": "zzz"}}))
    page.locator("#load-settings input[type=file]").set_input_files(wrong)
    expect(page.locator("#settings-message .lw-error")).to_contain_text("nothing was changed")
    expect(page.locator("#coef-caption")).to_contain_text("Parzen, b = 30")


def test_oversized_file_gets_a_message(page: Page, live_server):
    from lagwise.app.state import MAX_UPLOAD_BYTES
    open_app(page, live_server)
    big = b"y,x\n" + b"1.0,2.0\n" * (MAX_UPLOAD_BYTES // 8 + 10)
    upload(page, {"name": "huge.csv", "mimeType": "text/csv", "buffer": big})
    expect(page.locator("#upload-limit-note")).to_contain_text("the limit is 25 MB",
                                                               timeout=20_000)
    # nothing was loaded: the demo model is still there
    expect(cells(page, "coef-table", "term")).to_have_text(
        ["intercept", "rate_capacity", "credit_spread"])


def test_old_settings_replay_transforms(page: Page, live_server, tmp_path):
    """A settings file written by an earlier version (old transform and column names) still
    replays its transforms and model."""
    open_app(page, live_server)
    record = {"lagwise_settings": 1, "transforms": [["fsum", "exret_1m", 12]],
              "response": "fsum12(exret_1m)", "regressors": ["rate_capacity"],
              "intercept": True, "horizon": 12, "estimator": "kernel",
              "params": {"kernel": "bartlett"}, "rule": "fixed", "bandwidth": 12,
              "reference": "auto", "level": 0.95, "chart_mode": "t"}
    path = tmp_path / "transformed.json"
    path.write_text(json.dumps(record))
    page.locator("#load-settings input[type=file]").set_input_files(path)
    expect(page.locator("#response")).to_contain_text("exret_1m, sum of next 12",
                                                      timeout=20_000)
    expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "rate_capacity"],
                                                           timeout=20_000)
    table, y = lagwise.load_table(DEMO).with_transform("sum-next", "exret_1m", 12)
    fit = lagwise.fit_ols(table, y, ["rate_capacity"])
    se = fit.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth=12.0)).table
    expect(se_cell(page, 1)).to_have_text(fmt(se.loc["rate_capacity", "std_error"]),
                                          timeout=20_000)


@pytest.mark.slow
def test_twenty_concurrent_sessions_see_only_their_own_data(browser, live_server):
    """Twenty pages, each with its own file uploaded at about the same time: each sees its own
    columns and numbers and nothing of the others'."""
    import numpy as np
    contexts = [browser.new_context() for _ in range(20)]
    pages = [c.new_page() for c in contexts]
    for page in pages:
        page.goto(live_server)
    files = []
    for i, page in enumerate(pages):
        rng = np.random.default_rng(i)
        x = rng.standard_normal(80)
        y = 0.1 * i + (i + 1) * 0.05 * x + rng.standard_normal(80)
        text = f"resp{i},x{i}\n" + "\n".join(f"{a:.6f},{b:.6f}" for a, b in zip(y, x)) + "\n"
        files.append(text)
        expect(page.locator("#upload input[type=file]")).to_be_attached(timeout=120_000)
        upload(page, {"name": f"s{i}.csv", "mimeType": "text/csv", "buffer": text.encode()})
    for i, page in enumerate(pages):
        expect(cells(page, "coef-table", "term")).to_have_text(["intercept", f"x{i}"],
                                                               timeout=90_000)
        table = lagwise.load_table(files[i].encode())
        fit = lagwise.fit_ols(table, f"resp{i}", [f"x{i}"])
        est = fit.params[f"x{i}"]
        expect(cells(page, "coef-table", "estimate").nth(1)).to_have_text(fmt(est))
    for c in contexts:
        c.close()


def charts_inside_their_cards(page: Page):
    """Every chart ends inside its card (a tall figure must grow its card, not spill over the
    next one)."""
    page.wait_for_function(
        "() => (document.getElementById('interval-graph').querySelector('.js-plotly-plot')"
        ".data || []).some(t => (t.y || []).length > 12)", timeout=30_000)
    for gid in ("sens-graph", "interval-graph"):
        chart = page.locator(f"#{gid} .main-svg").first.bounding_box()   # the drawn figure
        box = card(page, gid).bounding_box()
        assert chart["y"] + chart["height"] <= box["y"] + box["height"] + 1, gid


def test_instrumental_variables_in_the_page(page: Page, live_server):
    """Mark a regressor endogenous, add instruments, choose two-step GMM: the estimate, the J
    test and the Anderson-Rubin set appear, and moving the slider moves the estimate."""
    open_app(page, live_server)
    choose(page, "response", "rate_growth")
    choose(page, "regressors", "rate_capacity")          # off
    choose(page, "regressors", "credit_spread")          # off
    choose(page, "regressors", "utilization_survey")
    expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "utilization_survey"],
                                                           timeout=20_000)
    page.locator("#iv-details summary").click()
    choose(page, "endogenous", "utilization_survey")
    choose(page, "instruments", "scrap_rate")
    choose(page, "instruments", "bunker_spread")
    expect(page.locator("#strength-card")).to_be_visible(timeout=20_000)
    expect(page.locator("#ar-text")).to_contain_text("Anderson-Rubin 95% set", timeout=20_000)
    expect(cells(page, "spec-table", "test").first).to_contain_text("Hansen J")
    choose(page, "iv-method", "two-step efficient GMM")
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("End")
    t = lagwise.load_table(DEMO)
    base = lagwise.fit_iv(t, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                          ["scrap_rate", "bunker_spread"])
    top = int(thumb.get_attribute("aria-valuenow"))
    two = base.two_step(lagwise.estimator("kernel", kernel="bartlett", bandwidth=float(top)))
    expect(cells(page, "coef-table", "estimate").nth(1)).to_have_text(
        fmt(two.beta[1]), timeout=20_000)
    expect(page.locator("#coef-caption")).to_contain_text("efficient form")
    expect(cells(page, "spec-table", "statistic").first).to_have_text(
        fmt(two.j_test().statistic), timeout=20_000)
    page.wait_for_function(
        "() => document.getElementById('sens-graph').querySelector('.js-plotly-plot')"
        ".layout.title.text.includes('J test')")
    charts_inside_their_cards(page)                 # the J panel makes the chart taller


def test_panel_demo_in_the_page(page: Page, live_server, tmp_path):
    """Load the panel demo: the panel is recognised and fitted, the estimator picker offers the
    panel families (Driscoll-Kraay by default, at the Andrews bandwidth over periods), the
    comparison lists clustering, Driscoll-Kraay and Fama-MacBeth with their own estimates,
    moving the slider matches the engine, effects refit, and panel diagnostics are shown."""
    errors = open_app(page, live_server)
    page.locator("#load-demo-panel").click()
    expect(page.locator("#upload-message")).to_contain_text("loaded the panel demo (31,348 rows",
                                                            timeout=20_000)
    expect(page.locator("#fit-message")).to_contain_text("240 entities x 156 periods",
                                                         timeout=30_000)
    expect(page.locator("#load-report")).to_contain_text("kept as the panel's entity labels")
    expect(page.locator("#entity")).to_contain_text("company")
    expect(page.locator("#time-col")).to_contain_text("month")
    table = lagwise.load_table(demo_file("shipping_panel.csv"))
    regs = ["book_to_market", "fleet_age", "charter_cover"]
    fit = lagwise.fit_panel(table, "exret", regs)
    expect(page.locator("#est-name")).to_contain_text("Driscoll-Kraay", timeout=20_000)
    dk = fit.infer(lagwise.estimator("driscoll_kraay", bandwidth="andrews"))
    expect(se_cell(page, 1)).to_have_text(fmt(dk.table.std_error.iloc[1]), timeout=30_000)
    expect(page.locator("#tune-title")).to_have_text("bandwidth b (periods)")
    expect(page.locator("#tune-text")).to_contain_text("156 periods")
    names = cells(page, "compare-table", "estimator")
    expect(names.filter(has_text="Clustered by entity and time")).to_have_count(1,
                                                                                 timeout=30_000)
    expect(names.filter(has_text="Fama-MacBeth, Classical")).to_have_count(1)
    fm = fit.fama_macbeth().infer("classical")
    row = page.locator("#compare-table .ag-row", has=page.locator(
        "[col-id='estimator']", has_text="Fama-MacBeth, Classical"))
    expect(row.locator("[col-id='estimate']")).to_have_text(fmt(fm.table.estimate.iloc[1]))
    # a value set by hand
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("Home")
    for _ in range(9):
        page.keyboard.press("ArrowRight")
    expect(thumb).to_have_attribute("aria-valuenow", "10")
    at10 = fit.infer(lagwise.estimator("driscoll_kraay", bandwidth=10.0))
    expect(se_cell(page, 1)).to_have_text(fmt(at10.table.std_error.iloc[1]), timeout=20_000)
    page.wait_for_function(
        "() => document.getElementById('sens-graph').querySelector('.js-plotly-plot')"
        ".data.some(t => (t.name || '').startsWith('Fama-MacBeth'))")
    # clustering by time: no tuning value, the table follows
    choose(page, "est-name", "Clustered")
    expect(page.locator("#tune-title")).to_have_text("no tuning value", timeout=20_000)
    cl = fit.infer(lagwise.estimator("cluster", by="entity"))
    expect(se_cell(page, 1)).to_have_text(fmt(cl.table.std_error.iloc[1]), timeout=20_000)
    expect(page.locator("#coef-caption")).to_contain_text("G - 1, G = 240 clusters (entity)")
    # diagnostics for panels
    expect(cells(page, "diag-table", "test").first).to_have_text("Pesaran CD", timeout=30_000)
    # entity fixed effects: the intercept is absorbed and the degrees of freedom stated
    expect(page.locator("#panel-details")).to_have_attribute("open", "")   # opened for a panel
    page.get_by_label("entity fixed effects").check()
    expect(page.locator("#fit-message")).to_contain_text("entity fixed effects",
                                                         timeout=30_000)
    expect(cells(page, "coef-table", "term")).to_have_text(regs, timeout=20_000)
    fe = lagwise.fit_panel(table, "exret", regs, effects="entity")
    expect(se_cell(page, 0)).to_have_text(
        fmt(fe.infer(lagwise.estimator("cluster", by="entity")).table.std_error.iloc[0]),
        timeout=20_000)
    # settings keep the panel
    with page.expect_download() as dl:
        page.locator("#save-settings").click()
    saved = json.loads(Path(dl.value.path()).read_text())
    assert saved["entity"] == "company" and saved["time"] == "month"
    assert saved["effects"] == ["entity"] and saved["estimator"] == "cluster"
    assert not [e for e in errors if "Error" in e], errors


def test_persistence_card_and_size_check_with_progress_and_cancel(page: Page, live_server):
    """The demo's 12-month regression shows the persistence card (IVX, bias, horizon chart);
    the size check runs with a progress bar and fills its chart and table; a long run can be
    cancelled (the button comes back and the result is not replaced)."""
    errors = open_app(page, live_server)
    expect(page.locator("#predictive-card")).to_be_visible(timeout=30_000)
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m", ["rate_capacity",
                                                                   "credit_spread"],
                          horizon=12, one_period="exret_1m")
    rep = lagwise.engine.studies.predictive.persistence_report(fit, "rate_capacity")
    expect(cells(page, "persistence-table", "value").first).to_have_text(fmt(rep.rho, 4),
                                                                         timeout=20_000)
    expect(page.locator("#persistence-reading")).to_contain_text("IVX")
    page.wait_for_function(
        "() => document.getElementById('horizon-graph').querySelector('.js-plotly-plot')"
        ".data.length >= 4")
    choose(page, "size-reps", "200")
    page.locator("#size-run").click()
    expect(page.locator("#size-progress-text")).to_contain_text("of 200 replications",
                                                                timeout=60_000)
    expect(cells(page, "size-table", "estimator").first).to_have_text("Classical (iid)",
                                                                      timeout=120_000)
    expect(page.locator("#size-progress-text")).to_have_text("200 of 200 replications")
    expect(page.locator("#size-status")).to_contain_text("200 replications at T = 408")
    ref = lagwise.engine.studies.size_check.size_check(
        lagwise.app.studies.lean_copy(fit), reps=200, seed=0, focus="rate_capacity",
        workers=1).frame
    expect(cells(page, "size-table", "rejection_rate").first).to_have_text(
        f"{ref.rejection_rate.iloc[0]:.3f}")
    # cancel a long run
    choose(page, "size-reps", "2000")
    page.locator("#size-run").click()
    expect(page.locator("#size-cancel")).to_be_enabled(timeout=20_000)
    expect(page.locator("#size-progress-text")).not_to_have_text("200 of 200 replications",
                                                                 timeout=60_000)
    page.locator("#size-cancel").click()
    expect(page.locator("#size-run")).to_be_enabled(timeout=20_000)
    expect(page.locator("#size-status")).to_contain_text("cancelled")
    page.wait_for_timeout(3000)
    assert "of 2000" not in page.locator("#size-status").inner_text()
    expect(cells(page, "size-table", "rejection_rate").first).to_have_text(
        f"{ref.rejection_rate.iloc[0]:.3f}")                 # the completed run stays
    assert not [e for e in errors if "Error" in e], errors


def test_show_opens_the_dashboard_on_a_statsmodels_fit(page: Page):
    """A regression run in statsmodels goes through lagwise.from_statsmodels and lagwise.show
    into the dashboard, which shows the fit's numbers (no upload)."""
    import statsmodels.formula.api as smf
    df = lagwise.load_table(DEMO).frame.reset_index()
    res = smf.ols("exret_12m ~ rate_capacity + credit_spread", df).fit()
    fit = lagwise.from_statsmodels(res)
    shown = lagwise.show(fit, mode="background")
    try:
        errors = []
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.goto(shown.url)
        expect(cells(page, "coef-table", "term")).to_have_text(
            ["intercept", "rate_capacity", "credit_spread"], timeout=30_000)
        expected = fit.infer(lagwise.estimator("kernel", bandwidth="andrews"))
        expect(se_cell(page, 1)).to_have_text(fmt(expected.table.std_error.iloc[1]),
                                              timeout=20_000)
        expect(cells(page, "coef-table", "estimate").nth(1)).to_have_text(
            fmt(res.params["rate_capacity"]))
        expect(page.locator("#load-report")).to_contain_text("a fit made in Python")
        assert not [e for e in errors if "Error" in e], errors
    finally:
        shown.stop()


def test_show_opens_a_custom_gmm_fit_with_the_cards_that_apply(page: Page):
    """A GMM fit of a moment function written in Python: the page opens on the fitted model
    itself (the server never runs the moment function), with its coefficient table, the
    comparison and the sensitivity chart, and says that residual diagnostics do not apply."""
    frame = lagwise.load_table(DEMO).frame.dropna(subset=["exret_1m", "rate_capacity",
                                                          "credit_spread"])
    y = frame["exret_1m"].to_numpy()
    x = frame["rate_capacity"].to_numpy()
    z = np.column_stack([np.ones(len(y)), x, frame["credit_spread"].to_numpy()])
    fit = lagwise.fit_gmm(lambda th, d: z * (y - th[0] - th[1] * x)[:, None], [0.0, 0.0],
                          frame, weighting="two-step", names=["intercept", "rate_capacity"])
    shown = lagwise.show(fit, mode="background")
    try:
        errors = []
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.goto(shown.url)
        expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "rate_capacity"],
                                                               timeout=30_000)
        expected = fit.infer(lagwise.estimator("kernel", bandwidth="andrews"))
        expect(se_cell(page, 1)).to_have_text(fmt(expected.table.std_error.iloc[1]),
                                              timeout=20_000)
        expect(page.locator("#fit-message")).to_contain_text("GMM: 2 parameters")
        expect(page.locator("#sens-graph .scatterlayer .trace").first).to_be_attached(
            timeout=30_000)
        expect(cells(page, "compare-table", "estimator").first).to_be_visible(timeout=30_000)
        expect(page.locator("#diag-reading")).to_contain_text("not offered", timeout=30_000)
        assert not [e for e in errors if "Error" in e], errors
    finally:
        shown.stop()


def test_exported_script_reproduces_the_screen(page: Page, live_server, tmp_path):
    """Choose a kernel, a value set by hand and a reference law, download the view as a
    script, run it in a fresh Python process: its table equals the screen's."""
    import subprocess
    import sys
    open_app(page, live_server)
    page.locator("""[id*='"name":"kernel"']""").first.click()       # the kernel picker
    page.get_by_role("option", name="Parzen", exact=True).click()
    page.keyboard.press("Escape")
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("Home")
    for _ in range(7):
        page.keyboard.press("ArrowRight")
    expect(thumb).to_have_attribute("aria-valuenow", "8", timeout=20_000)
    choose(page, "reference", "fixed-b (Kiefer-Vogelsang)")
    expect(page.locator("#coef-caption")).to_contain_text("fixed-b", timeout=20_000)
    with page.expect_download(timeout=30_000) as info:
        page.locator("#export-script").click()
    script = tmp_path / "view.py"
    info.value.save_as(script)
    text = script.read_text()
    assert "lagwise.demo_file('freight_index.csv')" in text and "parzen" in text
    out = subprocess.run([sys.executable, "-c",
                          "import runpy, sys; ns = runpy.run_path(sys.argv[1]); "
                          "print('@@' + ns['res'].table.to_json())", str(script)],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    assert "Parzen, b = 8" in out.stdout                     # the summary it prints
    import pandas as pd
    from io import StringIO
    table = pd.read_json(StringIO(out.stdout.split("@@", 1)[1]))
    for i, term in enumerate(table.index):
        expect(se_cell(page, i)).to_have_text(fmt(table.loc[term, "std_error"]))
        expect(cells(page, "coef-table", "p_value").nth(i)).to_have_text(
            lagwise.app.views.fmt_p(table.loc[term, "p_value"]))


def test_memo_table_builder_previews_and_exports(page: Page, live_server, tmp_path):
    from openpyxl import load_workbook
    open_app(page, live_server)
    page.locator("#memo-add").click()
    expect(page.locator("#memo-preview table")).to_be_visible(timeout=20_000)
    choose(page, "regressors", "credit_spread")                 # off: a second specification
    expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "rate_capacity"],
                                                           timeout=20_000)
    page.locator("#memo-add").click()
    expect(page.locator("#memo-preview")).to_contain_text("[2] exret_12m on rate_capacity",
                                                          timeout=20_000)
    preview = page.locator("#memo-preview table")
    expect(preview.locator("thead tr").nth(2).locator("th")).to_have_count(5)   # 2 x 2 + label
    with page.expect_download(timeout=30_000) as info:
        page.locator("""[id*='"fmt":"xlsx"']""").click()
    path = tmp_path / "memo.xlsx"
    info.value.save_as(path)
    numbers = list(load_workbook(path)["numbers"].values)
    head, rows = numbers[0], numbers[1:]
    frame = {(r[head.index("column")], r[head.index("term")]): r for r in rows}
    t = lagwise.load_table(DEMO)
    second = lagwise.fit_ols(t, "exret_12m", ["rate_capacity"], horizon=12)
    hc1 = second.infer("classical").table.loc["rate_capacity", "std_error"]   # first column
    assert frame[("(3)", "rate_capacity")][head.index("std_error")] == pytest.approx(hc1,
                                                                                    rel=1e-10)
    with page.expect_download(timeout=30_000) as info:
        page.locator("""[id*='"fmt":"latex"'][id*='export-memo']""").click()
    tex = Path(info.value.path()).read_text()
    assert "\\begin{tabular}{lcccc}" in tex and "rate\\_capacity" in tex


def test_a_file_near_the_limit_shows_progress_then_its_results(page: Page, live_server,
                                                               tmp_path):
    """About 700,000 rows (22 MB): the steps that take seconds (comparing every estimator, the
    residual diagnostics) show a progress panel with their stage and a bar while they run; it
    goes away when they are done, the results are for the new file, and the page stops
    polling."""
    import re
    import time
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(20261202)
    n = 700_000
    x1, x2 = rng.standard_normal(n), rng.standard_normal(n)
    frame = pd.DataFrame({"y": 0.05 * x1 + rng.standard_normal(n), "x1": x1, "x2": x2})
    path = tmp_path / "near_limit.csv"
    frame.to_csv(path, index=False, float_format="%.5f")
    assert 15 * 2**20 < path.stat().st_size < 25 * 2**20
    open_app(page, live_server)
    polls = []
    page.on("request", lambda r: polls.append(time.monotonic())
            if r.method == "POST" and "work-poll" in (r.post_data or "") else None)
    upload(page, str(path))
    strip = page.locator("#work-strip")
    expect(strip).to_have_class(re.compile(r"^lw-work$"), timeout=60_000)
    expect(strip).to_contain_text(re.compile("Residual diagnostics|Comparing estimators"))
    expect(strip.locator("progress").first).to_be_visible()
    expect(strip).to_contain_text(re.compile(r"\d+\.\d s"))
    expect(strip).to_have_class(re.compile("lw-hidden"), timeout=120_000)
    expect(page.locator("#upload-message")).to_contain_text("700,000 rows")
    expect(cells(page, "coef-table", "term")).to_have_text(["intercept", "x1"],
                                                           timeout=30_000)
    expect(page.locator("#fit-message")).to_contain_text("T = 700,000")
    from lagwise.app.work import IDLE_POLLS, POLL_MS
    time.sleep(1.5 * IDLE_POLLS * POLL_MS / 1000)     # the poll's idle grace
    before = len(polls)
    time.sleep(2.0)
    assert polls and len(polls) == before     # it polled while working, and has stopped


def test_a_slider_press_is_one_request(page: Page, live_server):
    """On a plain regression a key press on the slider (a value set by hand) sends one callback
    request (the coefficient card's); the sensitivity chart's marker moves in the page."""
    open_app(page, live_server)
    expect(cells(page, "compare-table", "estimator").first).to_be_visible(timeout=60_000)
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("ArrowRight")                # the first press leaves the automatic rule
    page.wait_for_timeout(3000)                      # (the chart redraws) and the poll stops
    sent = []
    page.on("request", lambda r: sent.append(json.loads(r.post_data or "{}").get("output", ""))
            if "_dash-update-component" in r.url else None)
    page.keyboard.press("ArrowRight")
    value = int(thumb.get_attribute("aria-valuenow"))
    expect(page.locator("#coef-caption")).to_contain_text(f"b = {value}", timeout=20_000)
    page.wait_for_function(
        "(v) => document.getElementById('sens-graph').querySelector('.js-plotly-plot')"
        ".layout.shapes[0].x0 === v", arg=value)
    page.wait_for_timeout(1000)
    assert len(sent) == 1 and "coef-table.rowData" in sent[0], sent
