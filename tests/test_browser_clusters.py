"""Few clusters in a real browser (Playwright driving headless Chromium): the few-cluster demo's
card (the cluster summary, CR1/CR2/CR3 with their degrees of freedom, the wild cluster
bootstrap as a background job with progress, its row in the comparison), a setting that is not
defined shown as a message with the page staying usable, and panel IV in the model card."""

import pytest
from playwright.sync_api import Page, expect

import lagwise
from lagwise._files import demo_file
from lagwise.app.views import fmt
from tests.test_browser import cells, choose, open_app

pytestmark = pytest.mark.browser


def fc_row(page: Page, name: str):
    return page.locator("#fc-table .ag-row", has=page.locator("[col-id='estimator']",
                                                              has_text=name))


def test_few_cluster_demo_card_and_bootstrap(page: Page, live_server):
    errors = open_app(page, live_server)
    page.locator("#load-demo-few").click()
    expect(page.locator("#upload-message")).to_contain_text("few-cluster demo", timeout=20_000)
    expect(page.locator("#fit-message")).to_contain_text("163 entities x 10 periods",
                                                         timeout=30_000)
    expect(page.locator("#fc-card")).to_be_visible(timeout=30_000)
    expect(page.locator("#fc-by")).to_contain_text("region")
    expect(page.locator("#fc-reading")).to_contain_text("not to be trusted", timeout=30_000)
    expect(page.locator("#fc-facts")).to_contain_text("14 clusters")
    cr1 = fc_row(page, "CR1, t(G - 1)")
    cr2 = fc_row(page, "CR2, Bell-McCaffrey df")
    expect(cr1.locator("[col-id='verdict']")).to_have_text("rejected", timeout=30_000)
    expect(cr2.locator("[col-id='verdict']")).to_have_text("not rejected")
    table = lagwise.load_table(demo_file("regional_panel.csv"))
    fit = lagwise.fit_panel(table, "growth", ["subsidy", "size"], entity="firm", time="year",
                            clusters="region")
    res = fit.infer(lagwise.estimator("cluster", by="region", correction="cr2",
                                      df="bell-mccaffrey"))
    expect(cr2.locator("[col-id='std_error']")).to_have_text(
        fmt(res.table.loc["subsidy", "std_error"]))
    expect(cr2.locator("[col-id='df']")).to_have_text(fmt(res.law.df[1], 4))
    # the comparison has the CR2 row of the region clustering
    names = cells(page, "compare-table", "estimator")
    expect(names.filter(has_text="Clustered by region, CR2, Bell-McCaffrey df")) \
        .to_have_count(1, timeout=30_000)
    # the bootstrap on request, with progress; its row joins the comparison
    page.locator("#fc-boot-run").click()
    expect(page.locator("#fc-boot-result")).to_contain_text("bootstrap p = 0.090",
                                                            timeout=60_000)
    expect(page.locator("#fc-boot-progress-text")).to_have_text(
        "9,999 of 9,999 replications")
    expect(page.locator("#fc-boot-run")).to_be_enabled()
    boot = page.locator("#compare-table .ag-row", has=page.locator(
        "[col-id='estimator']", has_text="Wild cluster bootstrap"))
    expect(boot.locator("[col-id='verdict']")).to_have_text("not rejected", timeout=20_000)
    # a setting that is not defined here: its row says why, the card stays usable
    choose(page, "fc-by", "both")
    expect(fc_row(page, "CR2, Bell-McCaffrey df").locator("[col-id='verdict']")) \
        .to_have_text("not available", timeout=30_000)
    choose(page, "fc-by", "region")
    expect(cr1.locator("[col-id='verdict']")).to_have_text("rejected", timeout=30_000)
    assert not [e for e in errors if "Error" in e], errors


def test_panel_iv_in_the_model_card(page: Page, live_server):
    errors = open_app(page, live_server)
    page.locator("#load-demo-panel").click()
    expect(page.locator("#fit-message")).to_contain_text("240 entities x 156 periods",
                                                         timeout=30_000)
    page.locator("#iv-details summary").click()
    choose(page, "endogenous", "charter_cover")
    choose(page, "instruments", "freight_shock")
    expect(page.locator("#fit-message")).to_contain_text("two-stage least squares",
                                                         timeout=30_000)
    expect(page.locator("#strength-card")).to_be_visible(timeout=30_000)
    table = lagwise.load_table(demo_file("shipping_panel.csv"))
    fit = lagwise.fit_panel_iv(table, "exret", ["book_to_market", "fleet_age", "charter_cover"],
                               ["charter_cover"], ["freight_shock"])
    choose(page, "est-name", "Clustered")
    cl = fit.infer(lagwise.estimator("cluster", by="entity"))
    expect(cells(page, "coef-table", "std_error").nth(3)).to_have_text(
        fmt(cl.table.std_error.iloc[3]), timeout=30_000)
    expect(cells(page, "first-stage-table", "endogenous").first).to_have_text(
        "charter_cover", timeout=30_000)
    # the bootstrap of an exogenous coefficient is refused with the reason; the endogenous
    # one runs (the wild restricted efficient bootstrap)
    expect(page.locator("#fc-card")).to_be_visible()
    choose(page, "fc-by", "entity")
    choose(page, "fc-reps", "999")
    page.locator("#fc-boot-run").click()
    expect(page.locator("#fc-boot-status")).to_contain_text(
        "endogenous regressor 'charter_cover', not 'book_to_market'", timeout=20_000)
    choose(page, "focus", "charter_cover")
    page.locator("#fc-boot-run").click()
    expect(page.locator("#fc-boot-result")).to_contain_text("WRE bootstrap clustered by entity",
                                                            timeout=120_000)
    assert not [e for e in errors if "Error" in e], errors
