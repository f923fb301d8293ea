"""The local-projection mode in a real browser (Playwright driving Debian's headless Chromium):
load the impulse-response demo, switch the mode on, move the Sensitivity card's slider, and
check that every horizon's band moves and equals the engine's numbers; bad input is shown.

Skipped locally without chromium; CI sets LAGWISE_REQUIRE_BROWSER=1 so they fail instead."""

from pathlib import Path

import pytest
from playwright.sync_api import Page, expect

import lagwise
from lagwise.app.views import fmt
from tests.test_browser import card, cells, choose, open_app

pytestmark = pytest.mark.browser
LP_DEMO = lagwise.demo_file("fuel_freight.csv")


def engine_lp(**kw):
    table = lagwise.load_table(LP_DEMO)
    spec = {"lags": 0, "horizons": 12, **kw}
    return lagwise.fit_local_projections(table, "freight_activity", "fuel_shock", **spec)


def interval(lo, hi):
    return f"[{fmt(lo)}, {fmt(hi)}]"


def test_lp_demo_slider_moves_every_band(page: Page, live_server):
    errors = open_app(page, live_server)
    page.locator("#lp-details summary").click()
    page.locator("#load-demo-lp").click()
    expect(page.locator("#upload-message")).to_contain_text("impulse-response demo",
                                                            timeout=20_000)
    # the mode is on, the chart and the table by horizon show
    expect(page.locator("#lp-on input")).to_be_checked(timeout=20_000)
    expect(page.locator("#lp-card")).to_be_visible(timeout=30_000)
    expect(cells(page, "lp-table", "horizon")).to_have_count(13, timeout=30_000)
    lp = engine_lp()
    # the page opens on the Andrews rule, applied to each horizon's own fit
    est = lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews")
    t = lp.irf(est, level=0.90)
    expect(cells(page, "lp-table", "std_error").nth(5)).to_have_text(
        fmt(t["std_error"].iloc[5]), timeout=30_000)
    # a fixed bandwidth: the slider moves every horizon's band at once
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("Home")
    for _ in range(2):
        page.keyboard.press("ArrowRight")
    expect(thumb).to_have_attribute("aria-valuenow", "3")
    nw2 = lagwise.estimator("kernel", kernel="bartlett", bandwidth=3.0)
    t3 = lp.irf(nw2, level=0.90)
    se = cells(page, "lp-table", "std_error")
    for h in (0, 4, 12):
        expect(se.nth(h)).to_have_text(fmt(t3["std_error"].iloc[h]), timeout=20_000)
        expect(cells(page, "lp-table", "pointwise").nth(h)).to_have_text(
            interval(t3["ci_low"].iloc[h], t3["ci_high"].iloc[h]))
    sup = lp.bands(nw2, 0.90, "sup-t", reps=50_000)
    expect(cells(page, "lp-table", "simultaneous").nth(2)).to_have_text(
        interval(sup["ci_low"].iloc[2], sup["ci_high"].iloc[2]))
    # the demo's statement: under Newey-West with 2 lags the response is significant at h = 0-2
    expect(page.locator("#lp-reading")).to_contain_text("excludes zero at h = 0-2")
    expect(page.locator("#lp-reading")).to_contain_text("stops being significant at h = 3")
    before = [se.nth(h).inner_text() for h in range(13)]
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowRight")
    expect(thumb).to_have_attribute("aria-valuenow", "5")
    t5 = lp.irf(lagwise.estimator("kernel", kernel="bartlett", bandwidth=5.0), level=0.90)
    expect(se.nth(12)).to_have_text(fmt(t5["std_error"].iloc[12]), timeout=20_000)
    after = [se.nth(h).inner_text() for h in range(13)]
    assert all(a != b for a, b in zip(before, after)), (before, after)
    assert after == [fmt(x) for x in t5["std_error"]]
    # the chart's band is the engine's
    page.wait_for_function(
        "(v) => { const g = document.getElementById('lp-graph').querySelector('.js-plotly-plot');"
        " return g && g._fullData && g._fullData[1] && Math.abs(g._fullData[1].y[12] - v) < 1e-9; }",
        arg=float(t5["ci_low"].iloc[12]), timeout=20_000)
    # every estimator's conclusion, with the lag-augmented and EWC rows never significant
    compare = cells(page, "lp-compare", "significant_at")
    rows = page.locator("#lp-compare .ag-center-cols-container .ag-row")
    expect(rows).to_have_count(6, timeout=20_000)
    texts = {cells(page, "lp-compare", "estimator").nth(i).inner_text():
             compare.nth(i).inner_text() for i in range(6)}
    assert texts["EWC, B = floor(0.4 T^(2/3))"] == "none"
    assert texts["lag-augmented HC0"] == "none"
    # the lag-augmented bands on request
    page.locator("#lp-band-est").get_by_text("lag-augmented HC0").click()
    la = lp.irf(lagwise.lag_augmented(), level=0.90)
    expect(se.nth(0)).to_have_text(fmt(la["std_error"].iloc[0]), timeout=20_000)
    assert not [e for e in errors if "Error" in e], errors


def small_csv(rows: int, gap: bool = False, constant: bool = False) -> bytes:
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(5)
    dates = pd.date_range("2001-01-01", periods=rows + 1, freq="MS")
    if gap:
        dates = dates.delete(20)
    else:
        dates = dates[:rows]
    x = np.full(rows, 2.0) if constant else rng.standard_normal(rows)
    frame = pd.DataFrame({"month": dates[:rows].strftime("%Y-%m-%d"),
                          "y": rng.standard_normal(rows).round(4), "x": x.round(4)})
    return frame.to_csv(index=False).encode()


def test_lp_bad_input_is_shown_and_exports(page: Page, live_server):
    open_app(page, live_server)
    page.locator("#lp-details summary").click()
    page.locator("#load-demo-lp").click()
    expect(cells(page, "lp-table", "horizon")).to_have_count(13, timeout=30_000)
    # exports: the table as CSV (numbers), the paper table, the script
    with page.expect_download(timeout=30_000) as info:
        card(page, "lp-table").locator("button", has_text="CSV").last.click()
    text = Path(info.value.path()).read_text()
    assert "sup_t_low" in text and "horizon" in text
    with page.expect_download(timeout=60_000) as info:
        card(page, "lp-compare").locator("button", has_text="LATEX").last.click()
    tex = Path(info.value.path()).read_text()
    assert "\\begin{tabular}" in tex and "lag-augmented" in tex
    with page.expect_download(timeout=30_000) as info:
        card(page, "lp-compare").locator("button", has_text="SCRIPT").click()
    script = Path(info.value.path()).read_text()
    assert "lagwise.fit_local_projections" in script and "fuel_freight.csv" in script
    # a response that is also the shock
    choose(page, "lp-shock", "freight_activity")
    expect(page.locator("#lp-message .lw-error")).to_contain_text(
        "both the response and the shock", timeout=20_000)
    # horizons beyond what the page fits
    page.locator("#lp-horizons").fill("80")
    page.locator("#lp-horizons").press("Enter")
    expect(page.locator("#lp-message .lw-error")).to_contain_text("from 0 to 60",
                                                                  timeout=20_000)
    # a short file: horizons that leave fewer than half the sample are refused, naming H, T
    upload = page.locator("#upload input[type=file]")
    upload.set_input_files({"name": "short.csv", "mimeType": "text/csv",
                            "buffer": small_csv(60)})
    expect(page.locator("#upload-message")).to_contain_text("loaded short.csv", timeout=20_000)
    choose(page, "response", "y")
    choose(page, "lp-shock", "x")
    page.locator("#lp-horizons").fill("40")
    page.locator("#lp-horizons").press("Enter")
    expect(page.locator("#lp-message .lw-error")).to_contain_text(
        "horizons H = 40 leave 20 of T = 60", timeout=20_000)
    page.locator("#lp-horizons").fill("6")
    page.locator("#lp-horizons").press("Enter")
    expect(page.locator("#lp-message .lw-ok")).to_contain_text("7 horizons", timeout=20_000)
    # gaps in the dates, a constant shock: named
    upload.set_input_files({"name": "gap.csv", "mimeType": "text/csv",
                            "buffer": small_csv(60, gap=True)})
    expect(page.locator("#lp-message .lw-error")).to_contain_text("2002-09-01", timeout=20_000)
    upload.set_input_files({"name": "flat.csv", "mimeType": "text/csv",
                            "buffer": small_csv(60, constant=True)})
    expect(page.locator("#lp-message .lw-error")).to_contain_text("shock 'x' is constant",
                                                                  timeout=20_000)
