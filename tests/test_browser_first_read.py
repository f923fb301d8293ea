"""The first read, in a real browser (Playwright, Debian's headless chromium): on both demos, an
IV specification and an uploaded file the first screen shows the model line, the answer line
and a headline that reads once; no rule label overlaps a plotted curve or another label (label
boxes compared with points sampled along every drawn trace), in the page and in the layout
the exported PNG is drawn from; axis titles clear the legends; the report carries every card
that was computed and opens with the model and the answer; every export names its version,
time and data hash.

Outside references: the engine's own numbers (lagwise.compare, model_line) for the text; the
PNG chunk layout and CRCs checked with zlib; the report parsed with Python's html.parser."""

from __future__ import annotations

import json
import re
import struct
import zlib
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest
from playwright.sync_api import Page, expect

import lagwise
from lagwise._files import demo_file
from lagwise.app.answer import answer_line, comparison_rows
from lagwise.app.exports import export_layout

pytestmark = pytest.mark.browser
DEMO = demo_file()
SHA = re.compile(r"SHA-256 [0-9a-f]{64}")

#: JavaScript: rule-label boxes against points sampled along every drawn trace inside the
#: plotting area, and against each other. Returns the offending pairs (empty when clean).
OVERLAPS = """
(el) => {
  const gd = el.classList.contains('js-plotly-plot') ? el : el.querySelector('.js-plotly-plot');
  const L = gd._fullLayout;
  const r = gd.getBoundingClientRect();
  const xa = L.xaxis, ya = L.yaxis;
  const area = {x0: r.left + xa._offset, x1: r.left + xa._offset + xa._length,
                y0: r.top + ya._offset, y1: r.top + ya._offset + ya._length};
  const boxes = [...gd.querySelectorAll('g.annotation')].map(a => {
    const b = a.querySelector('rect.bg').getBoundingClientRect();
    return {text: a.textContent, x0: b.left, x1: b.right, y0: b.top, y1: b.bottom};
  }).filter(b => b.x1 > b.x0);
  const inside = (p, b) => p.x > b.x0 && p.x < b.x1 && p.y > b.y0 && p.y < b.y1;
  const bad = [];
  let sampled = 0;
  for (const path of gd.querySelectorAll('.scatterlayer .trace path.js-line')) {
    const m = path.getScreenCTM(); const n = path.getTotalLength();
    for (let s = 0; s <= n; s += 2) {
      const q = path.getPointAtLength(s);
      const p = {x: m.a * q.x + m.c * q.y + m.e, y: m.b * q.x + m.d * q.y + m.f};
      if (p.x < area.x0 || p.x > area.x1 || p.y < area.y0 || p.y > area.y1) continue;
      sampled += 1;
      for (const b of boxes) if (inside(p, b)) bad.push(['curve', b.text]);
    }
  }
  for (const pt of gd.querySelectorAll('.scatterlayer .trace path.point')) {
    const q = pt.getBoundingClientRect();
    for (const b of boxes)
      if (q.left < b.x1 && q.right > b.x0 && q.top < b.y1 && q.bottom > b.y0)
        bad.push(['marker', b.text]);
  }
  const seen = new Set();
  const uniq = boxes.filter(b => { const k = [b.text, b.x0, b.y0].join(); if (seen.has(k))
    return false; seen.add(k); return true; });
  for (let i = 0; i < uniq.length; i++) for (let j = i + 1; j < uniq.length; j++) {
    const a = uniq[i], b = uniq[j];
    if (a.x0 < b.x1 - 0.5 && a.x1 > b.x0 + 0.5 && a.y0 < b.y1 - 0.5 && a.y1 > b.y0 + 0.5)
      bad.push(['label', a.text + ' / ' + b.text]);
  }
  return {bad, sampled, labels: uniq.length,
          above: uniq.every(b => b.y1 <= area.y0 + 0.5)};
}
"""

#: JavaScript: each graph's axis titles against its legend (pairs that overlap).
TITLE_CLASHES = """
() => {
  const out = [];
  for (const gd of document.querySelectorAll('.js-plotly-plot')) {
    const leg = gd.querySelector('g.legend rect.bg');
    if (!leg || gd.offsetParent === null) continue;
    const l = leg.getBoundingClientRect();
    if (!l.width) continue;
    for (const t of gd.querySelectorAll('.g-xtitle text, .g-ytitle text, .g-x2title text')) {
      const b = t.getBoundingClientRect();
      if (b.width && b.left < l.right && b.right > l.left && b.top < l.bottom
          && b.bottom > l.top)
        out.push([gd.parentElement.id, t.textContent]);
    }
  }
  return out;
}
"""


def cells(page: Page, grid: str, col: str):
    return page.locator(f"#{grid} .ag-center-cols-container [col-id='{col}']")


def choose(page: Page, dropdown: str, option: str):
    page.locator(f"#{dropdown}").click()
    page.get_by_role("option", name=option, exact=True).click()
    page.keyboard.press("Escape")


def open_app(page: Page, url: str):
    errors = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.goto(url)
    expect(cells(page, "coef-table", "term").first).to_have_text("intercept", timeout=30_000)
    return errors


def settled(page: Page):
    page.wait_for_function("() => !document.querySelector('[data-dash-is-loading=\"true\"]')",
                           timeout=120_000)
    page.wait_for_timeout(600)


def chart_ready(page: Page, gid: str = "sens-graph"):
    page.wait_for_function(
        f"() => {{ const g = document.getElementById('{gid}').querySelector('.js-plotly-plot');"
        " return g && g.data && g.data.length > 2 && g._fullLayout && g._fullLayout.xaxis; }",
        timeout=60_000)
    settled(page)


def first_read(page: Page, fit, focus: str):
    """The first screen for `fit`: the model line, the answer line (the engine's comparison)
    and a headline that says the estimator once; no label over a curve; titles clear of
    legends."""
    line = lagwise.model_line(fit)
    expect(page.locator("#model-line")).to_have_text(line, timeout=60_000)
    expect(page.locator("#coef-model")).to_have_text(line)
    level = 0.95
    expected = answer_line(comparison_rows(fit.compare(level=level), focus), level)
    expect(page.locator("#answer-line")).to_have_text(expected, timeout=60_000)
    head = page.locator("#headline")
    expect(head).to_contain_text(focus)
    text = head.inner_text()
    verdict = page.locator("#headline .lw-hl-verdict").inner_text()
    assert verdict.count("chosen by") <= 1 and verdict.count("reference law") == 1, text
    assert verdict.count(" b = ") <= 1, verdict              # the tuning value said once
    assert "e-" not in text and "holds for" not in text, text
    chart_ready(page)
    page.locator("#sens-graph").scroll_into_view_if_needed()
    res = page.locator("#sens-graph").evaluate(OVERLAPS)
    assert res["sampled"] > 200 and res["labels"] >= 1, res
    assert res["above"] and not res["bad"], res
    assert page.evaluate(TITLE_CLASHES) == []
    return res


def exported_layout_is_clean(page: Page, subtitle: str):
    """Draw the sensitivity chart as it is exported (export_layout: width, subtitle) and run
    the same checks on it."""
    raw = page.evaluate("() => { const g = document.getElementById('sens-graph')"
                        ".querySelector('.js-plotly-plot');"
                        " return JSON.stringify({data: g.data, layout: g.layout}); }")
    fig = export_layout(go.Figure(json.loads(raw)), subtitle)
    spec = json.dumps(fig.to_plotly_json(), default=str)
    page.evaluate("(spec) => { const f = JSON.parse(spec); let d = document.getElementById("
                  "'export-probe'); if (!d) { d = document.createElement('div');"
                  " d.id = 'export-probe'; document.body.appendChild(d); }"
                  " return window.Plotly.newPlot(d, f.data, f.layout, {staticPlot: true}); }",
                  spec)
    res = page.locator("#export-probe").evaluate(OVERLAPS)
    assert res["sampled"] > 200 and res["above"] and not res["bad"], res
    sub = page.locator("#export-probe .gtitle-subtitle, #export-probe .g-gtitle")
    expect(sub.first).to_contain_text(subtitle[:40])
    page.evaluate("() => document.getElementById('export-probe').remove()")


def png_text_chunks(data: bytes) -> dict:
    """tEXt chunks of a PNG, every chunk's CRC checked."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, out = 8, {}
    while pos < len(data):
        (n,) = struct.unpack(">I", data[pos:pos + 4])
        kind, body = data[pos + 4:pos + 8], data[pos + 8:pos + 8 + n]
        (crc,) = struct.unpack(">I", data[pos + 8 + n:pos + 12 + n])
        assert zlib.crc32(kind + body) & 0xFFFFFFFF == crc, kind
        if kind == b"tEXt":
            key, _, value = body.partition(b"\x00")
            out[key.decode("latin-1")] = value.decode("latin-1")
        pos += 12 + n
        if kind == b"IEND":
            break
    assert pos == len(data)
    return out


def quarterly_file(folder: Path) -> Path:
    """A simulated quarterly file as an analyst might upload it (seeded)."""
    rng = np.random.default_rng(7)
    n = 140
    spread = np.zeros(n)
    for i in range(1, n):
        spread[i] = 0.85 * spread[i - 1] + rng.standard_normal()
    growth = 0.4 + 0.2 * np.r_[np.nan, spread[:-1]] + rng.standard_normal(n)
    dates = pd.period_range("1990Q1", periods=n, freq="Q").to_timestamp("Q")
    frame = pd.DataFrame({"quarter": dates.strftime("%Y-%m-%d"), "gdp_growth": growth,
                          "term_spread": spread})
    path = folder / "quarterly.csv"
    frame.to_csv(path, index=False, float_format="%.5f")
    return path


# --------------------------------------------------------------------------- the four views

def test_first_read_on_both_demos_an_iv_spec_and_an_upload(page: Page, live_server, tmp_path):
    errors = open_app(page, live_server)
    table = lagwise.load_table(DEMO)
    demo = lagwise.fit_ols(table, "exret_12m", ["rate_capacity", "credit_spread"], horizon=12,
                           one_period="exret_1m")
    res = first_read(page, demo, "rate_capacity")
    assert res["labels"] >= 3
    head = page.locator("#headline").inner_text()
    # the demo's Andrews bandwidth does not reject; said from that side, once
    assert "beta = 0 is not rejected at 5%" in head
    assert re.search(r"Not rejected for b ≥ \d+; rejected only for b ≤ \d+", head), head
    assert "T = 408 (12 lost to leads and lags)" in page.locator("#model-line").inner_text()
    exported_layout_is_clean(page, lagwise.model_line(demo))
    # the truncated kernel starts hidden; one legend click shows it, labels stay clear
    trunc = page.locator("#sens-graph .legend .traces", has_text="Truncated (not PSD)")
    trunc.click()
    page.wait_for_function("() => document.getElementById('sens-graph').querySelector("
                           "'.js-plotly-plot').data.some(t => t.name === 'Truncated (not PSD)'"
                           " && t.visible === true)")
    page.wait_for_timeout(300)
    assert not page.locator("#sens-graph").evaluate(OVERLAPS)["bad"]

    # an instrumented specification
    choose(page, "response", "rate_growth")
    choose(page, "regressors", "rate_capacity")
    choose(page, "regressors", "credit_spread")
    choose(page, "regressors", "utilization_survey")
    page.locator("#iv-details summary").click()
    choose(page, "endogenous", "utilization_survey")
    for z in ("port_congestion", "scrap_rate", "bunker_spread"):
        choose(page, "instruments", z)
    iv = lagwise.fit_iv(table, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                        ["port_congestion", "scrap_rate", "bunker_spread"])
    expect(page.locator("#strength-card")).to_be_visible(timeout=30_000)
    first_read(page, iv, "utilization_survey")
    expect(page.locator("#strength-card")).to_contain_text(
        "robust first-stage F (Kleibergen-Paap 2006 rank statistic)")

    # an uploaded file
    path = quarterly_file(tmp_path)
    page.locator("#upload input[type=file]").set_input_files(str(path))
    expect(page.locator("#upload-message")).to_contain_text("loaded quarterly.csv: 140 rows",
                                                           timeout=30_000)
    up = lagwise.fit_ols(lagwise.load_table(path), "gdp_growth", ["term_spread"])
    first_read(page, up, "term_spread")
    assert "(1 to missing values)" in page.locator("#model-line").inner_text()

    # the panel demo
    page.locator("#load-demo-panel").click()
    expect(page.locator("#upload-message")).to_contain_text("loaded the panel demo (31,348",
                                                           timeout=30_000)
    ptable = lagwise.load_table(demo_file("shipping_panel.csv"))
    panel = lagwise.fit_panel(ptable, "exret", ["book_to_market", "fleet_age", "charter_cover"])
    first_read(page, panel, "book_to_market")
    exported_layout_is_clean(page, lagwise.model_line(panel))
    assert not [e for e in errors if "Error" in e], errors


# --------------------------------------------------------------------------- exports and report

class _Report(HTMLParser):
    def __init__(self):
        super().__init__()
        self.order, self.charts, self.headers, self._tag = [], 0, [], None
        self.text = []

    def handle_starttag(self, tag, attrs):
        self._tag = tag
        cls = dict(attrs).get("class", "")
        if tag == "p" and cls in ("model", "answer", "stamp"):
            self.order.append(cls)
        if tag == "div" and cls == "headline":
            self.order.append("headline")
        if tag == "div" and "plotly-graph-div" in cls:
            self.charts += 1
            self.order.append("chart")

    def handle_endtag(self, tag):
        self._tag = None

    def handle_data(self, data):
        if self._tag == "h2" and data.strip():
            self.order.append("h2:" + data.strip())
        if self._tag == "th":
            self.headers.append(data.strip())
        if self._tag in ("td", "p", "li"):
            self.text.append(data)


def download(page: Page, locator, tmp_path: Path) -> Path:
    with page.expect_download(timeout=90_000) as info:
        locator.click()
    path = tmp_path / info.value.suggested_filename
    info.value.save_as(path)
    return path


def test_report_and_every_export_name_version_time_and_data(page: Page, live_server,
                                                             tmp_path):
    open_app(page, live_server)
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m",
                          ["rate_capacity", "credit_spread"], horizon=12, one_period="exret_1m")
    sha = lagwise.load_table(DEMO).report.sha256
    chart_ready(page)
    expect(page.locator("#predictive-card")).to_be_visible(timeout=60_000)
    page.wait_for_function("() => document.getElementById('horizon-graph').querySelector("
                           "'.js-plotly-plot').data.length >= 4", timeout=60_000)
    settled(page)
    # the size card reserves nothing before its first run
    assert page.locator("#size-results").is_hidden()
    assert page.locator("#size-card").bounding_box()["height"] < 420
    report = download(page, page.locator("#export-report"), tmp_path).read_text()
    parsed = _Report()
    parsed.feed(report)
    head = [x for x in parsed.order if not x.startswith("h2:")][:4]
    assert head == ["stamp", "model", "answer", "headline"], parsed.order[:8]
    sections = [x[3:] for x in parsed.order if x.startswith("h2:")]
    assert sections[:2] == ["Sensitivity", "Coefficients"], sections
    assert "Residual diagnostics" in sections and "Persistence of rate_capacity" in sections
    assert "Size at this sample" not in sections              # not run: not in the report
    assert not any(s.startswith("Instruments") for s in sections)
    assert lagwise.model_line(fit) in report and sha in report
    assert f"Made by Lagwise {lagwise.__version__} on " in report
    assert "std. error" in parsed.headers and "t" in parsed.headers and "p" in parsed.headers
    assert not any("_" in h for h in parsed.headers), parsed.headers
    shown = " ".join(parsed.text)
    sci = re.search(r"\d\.?\d*e-\d", shown)                     # no scientific notation
    assert not sci, shown[max(0, sci.start() - 200): sci.end() + 40]
    assert "< 0.001" in report and "every change of conclusion" in report
    # sensitivity chart, strips, interval, 4 diagnostics charts, horizons: none empty
    assert parsed.charts >= 8
    for fig in re.findall(r"Plotly.newPlot\(\s*\"[^\"]+\",\s*(\[.*?\]),", report, re.S):
        assert fig.strip() != "[]"
    # chart files: the model line as a subtitle and the stamp in their own metadata
    card = page.locator("section.lw-card", has=page.locator("#sens-graph"))
    png = download(page, card.locator("button", has_text="PNG"), tmp_path).read_bytes()
    chunks = png_text_chunks(png)
    assert chunks["Creator"] == f"Lagwise {lagwise.__version__}"
    assert sha in chunks["Source"] and "freight_index.csv (420 rows" in chunks["Source"]
    assert re.match(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d", chunks["Creation Time"])
    assert chunks["Subject"] == lagwise.model_line(fit)
    svg = download(page, card.locator("button", has_text="SVG"), tmp_path).read_text()
    assert sha in svg and "<metadata" in svg and "T = 408" in svg
    pdf = download(page, card.locator("button", has_text="PDF"), tmp_path).read_bytes()
    assert sha.encode() in pdf and pdf.rstrip().endswith(b"%%EOF")
    # tables in every format
    coef = page.locator("section.lw-card", has=page.locator("#coef-table"))
    for label in ("CSV", "MD", "LATEX"):
        text = download(page, coef.locator("button", has_text=label), tmp_path).read_text()
        assert sha in text and lagwise.__version__ in text, label
        assert lagwise.model_line(fit).replace("_", "\\_" if label == "LATEX" else "_")[:30] \
            in text or label == "LATEX", label
    tex = (tmp_path / "lagwise_coef-table.tex").read_text()
    assert "\\toprule" in tex and "std. error" in tex and "std\\_error" not in tex
    # settings and script
    saved = json.loads(download(page, page.locator("#save-settings"), tmp_path).read_text())
    assert saved["made_by"]["data"]["sha256"] == sha
    assert saved["made_by"]["lagwise"] == lagwise.__version__
    script = download(page, page.locator("#export-script"), tmp_path).read_text()
    assert sha in script and f"Lagwise {lagwise.__version__}" in script
    # the memo table's workbook
    page.locator("#memo-add").click()
    expect(page.locator("#memo-preview table")).to_be_visible(timeout=30_000)
    from openpyxl import load_workbook
    book = download(page, page.locator("""[id*='"fmt":"xlsx"']"""), tmp_path)
    wb = load_workbook(book)
    assert sha in wb.properties.description
    assert any(sha in str(c.value) for row in wb["table"].iter_rows() for c in row)


# --------------------------------------------------------------------------- controls

def test_controls_in_the_page_palette_and_labels_not_cut(page: Page, live_server):
    open_app(page, live_server)
    teal = "rgb(14, 110, 100)"
    accent = page.locator("#intercept input[type=checkbox]").evaluate(
        "e => getComputedStyle(e).accentColor")
    assert accent == teal
    radio = page.locator("#chart-mode input[type=radio]").first.evaluate(
        "e => getComputedStyle(e).accentColor")
    assert radio == teal
    rng = page.locator("#tune-slider .dash-slider-range").first.evaluate(
        "e => getComputedStyle(e).backgroundColor")
    assert rng == teal
    # the two download buttons match
    a, b = (page.locator(f"#{i}").evaluate("e => [getComputedStyle(e).backgroundColor, "
                                           "getComputedStyle(e).color, e.className]")
            for i in ("export-report", "export-script"))
    assert a == b
    # grid headers carry their full name as a tooltip; long estimator names too
    head = page.locator("#compare-table .ag-header-cell[col-id='estimator']")
    expect(head).to_be_visible()
    settled(page)
    cut = page.evaluate("""() => [...document.querySelectorAll(
        '.dash-dropdown-value, .ag-header-cell-text')].filter(e => e.offsetParent
        && e.scrollWidth > e.clientWidth + 1 && !e.querySelector('[title]')
        && !e.closest('[title]')).map(e => e.textContent)""")
    assert cut == [], cut


def test_switching_family_computes_once_at_its_own_setting(page: Page, live_server):
    """Choosing another family: one coefficient-table response, at that family's own rule
    (EWC: LLSW, B = 22), never a caption for the old slider value; the same from a value set
    by hand, and into a family without a tuning value."""
    open_app(page, live_server)
    settled(page)
    captions = []

    def record(response):
        if "_dash-update-component" in response.url:
            try:
                body = response.json()
            except Exception:       # noqa: BLE001 - not a callback answer
                return
            cap = body.get("response", {}).get("coef-caption", {}).get("children")
            if cap is not None:
                captions.append(cap)
    page.on("response", record)
    choose(page, "est-name", "Equal-weighted cosine (EWC)")
    expect(page.locator("#coef-caption")).to_contain_text("EWC, B = 22", timeout=30_000)
    settled(page)
    page.wait_for_timeout(1000)
    assert len(captions) == 1 and "B = 22" in captions[0], captions
    # from a value set by hand to the VAR family: its own rule (order by BIC)
    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    page.keyboard.press("ArrowLeft")
    expect(page.locator("#coef-caption")).to_contain_text("B = 21", timeout=30_000)
    settled(page)
    captions.clear()
    choose(page, "est-name", "Parametric VAR (VAR-HAC)")
    expect(page.locator("#coef-caption")).to_contain_text("order by BIC", timeout=30_000)
    settled(page)
    page.wait_for_timeout(1000)
    assert len(captions) == 1 and "order by BIC" in captions[0], captions
    captions.clear()
    choose(page, "est-name", "Heteroskedasticity-robust (HC)")
    expect(page.locator("#coef-caption")).to_contain_text("HC1", timeout=30_000)
    settled(page)
    page.wait_for_timeout(1000)
    assert len(captions) == 1, captions
