"""Browser benchmark (not in the default run): python -m pytest tests/bench -m bench -s -k browser

Times key presses on the bandwidth slider until the coefficient card shows the new bandwidth's
results (a MutationObserver on its caption, which the same callback response updates together
with the table), on a 100,000-row CSV uploaded through the page and on a 1,000,000-row Parquet
file served the way `lagwise serve FILE` serves it. Each case reports the median, p90, p95 and
maximum over several runs of presses, and how many callback requests one press makes and how
many bytes they carry (request and response bodies), so a regression in the per-press chain
shows even when the machine is fast enough to hide it."""

import io
import json

import numpy as np
import pandas as pd
import pytest
from playwright.sync_api import Page, expect

pytestmark = [pytest.mark.bench, pytest.mark.browser]

RUNS, PRESSES, WARMUP = 3, 30, 3

JS_ARM = """
() => { window.__lw = new Promise(resolve => {
  const target = document.getElementById('coef-caption');
  const before = target.textContent;
  let t0 = null;
  const onKey = () => { t0 = performance.now(); };
  document.addEventListener('keydown', onKey, {capture: true, once: true});
  const obs = new MutationObserver(() => {
    if (t0 !== null && target.textContent !== before) {
      obs.disconnect(); resolve(performance.now() - t0); }
  });
  obs.observe(target, {subtree: true, childList: true, characterData: true});
  setTimeout(() => { obs.disconnect(); resolve(-1); }, 5000);
}); return true; }
"""


def cell(page: Page, grid: str, col: str):
    return page.locator(f"#{grid} .ag-center-cols-container [col-id='{col}']")


def frame(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n).cumsum() * 0.01 + rng.standard_normal(n)
    return pd.DataFrame({"y": 0.3 * x + rng.standard_normal(n), "x": x,
                         "z": rng.standard_normal(n)})


def wait_settled(page: Page):
    expect(cell(page, "coef-table", "term")).to_have_text(["intercept", "x"], timeout=120_000)
    expect(page.locator("#sens-graph .js-plotly-plot")).to_be_visible(timeout=120_000)
    # wait until the first sweep, the comparison and the diagnostics are done
    expect(cell(page, "diag-table", "test").first).to_be_visible(timeout=120_000)
    expect(cell(page, "compare-table", "estimator").first).to_be_visible(timeout=120_000)
    page.wait_for_timeout(2000)


def metrics(cdp) -> dict:
    """Chromium's cumulative main-thread seconds: scripting, layout, style, all tasks."""
    got = {m["name"]: m["value"] for m in cdp.send("Performance.getMetrics")["metrics"]}
    return {"script": got["ScriptDuration"], "layout": got["LayoutDuration"],
            "style": got["RecalcStyleDuration"], "task": got["TaskDuration"]}


def time_presses(page: Page, label: str) -> dict:
    """RUNS runs of PRESSES presses (right, then back left); the first WARMUP of each run are
    dropped. Also counts the callback requests the presses made and their bytes."""
    calls = []

    def on_response(resp):
        if "_dash-update-component" in resp.url:
            try:
                body = resp.body()
            except Exception:                  # a response superseded by a page change
                body = b""
            outs = json.loads(resp.request.post_data or "{}").get("output", "")
            timing = resp.request.timing          # ms from the request's start
            wait = timing["responseStart"] - timing["requestStart"]
            calls.append((outs[:60], len(resp.request.post_data or ""), len(body), wait))

    thumb = page.locator("#tune-slider [role=slider]")
    thumb.focus()
    per_run, every = [], []
    cdp = page.context.new_cdp_session(page)
    cdp.send("Performance.enable")
    before = metrics(cdp)
    page.on("response", on_response)
    for run in range(RUNS):
        key = "ArrowRight" if run % 2 == 0 else "ArrowLeft"
        times = []
        for _ in range(PRESSES):
            page.evaluate(JS_ARM)
            page.keyboard.press(key)
            times.append(page.evaluate("() => window.__lw"))
            page.wait_for_timeout(60)
        assert min(times) > 0, f"some presses did not update the table: {times}"
        per_run.append(round(float(np.median(times[WARMUP:])), 1))
        every.extend(times[WARMUP:])
    page.wait_for_timeout(500)
    page.remove_listener("response", on_response)
    after = metrics(cdp)
    t = np.array(every)
    presses = RUNS * PRESSES
    by_output: dict = {}
    for outs, sent, got, wait in calls:
        n, b, w = by_output.get(outs, (0, 0, 0.0))
        by_output[outs] = (n + 1, b + sent + got, w + wait)
    report = {"runs": RUNS, "presses": len(t), "median_ms": round(float(np.median(t)), 1),
              "p90_ms": round(float(np.percentile(t, 90)), 1),
              "p95_ms": round(float(np.percentile(t, 95)), 1), "max_ms": round(float(t.max()), 1),
              "run_medians_ms": per_run,
              "requests_per_press": round(len(calls) / presses, 2),
              "bytes_per_press": round(sum(c[1] + c[2] for c in calls) / presses),
              # the browser's main thread per press (whole runs, pauses between presses
              # included: the pauses themselves cost nothing here)
              "page_ms_per_press": {k: round((after[k] - before[k]) * 1000 / presses, 1)
                                    for k in before},
              # per callback: requests per press, bytes per request, server wait (request
              # sent to first response byte: the callback, its JSON, the local hop) in ms
              "by_callback": {k: [round(n / presses, 2), round(b / max(n, 1)),
                                  round(w / max(n, 1), 1)]
                              for k, (n, b, w) in sorted(by_output.items())}}
    print(f"\nBENCH browser slider, {label}", json.dumps(report))
    return report


def test_slider_latency_on_100k_rows(page: Page, live_server):
    buf = io.StringIO()
    frame(100_000).to_csv(buf, index=False, float_format="%.6f")
    page.goto(live_server)
    expect(cell(page, "coef-table", "term").first).to_have_text("intercept", timeout=30_000)
    page.locator("#upload input[type=file]").set_input_files(
        {"name": "big.csv", "mimeType": "text/csv", "buffer": buf.getvalue().encode()})
    expect(page.locator("#upload-message")).to_contain_text("100,000 rows", timeout=60_000)
    wait_settled(page)
    report = time_presses(page, "100,000 rows uploaded")
    assert report["median_ms"] < 150          # loose: the measured numbers live in the README


@pytest.fixture
def parquet_server(tmp_path):
    """The app on a 1,000,000-row Parquet file, as `lagwise serve FILE` starts it."""
    from tests.conftest import _serve
    from lagwise.app import create_app
    path = tmp_path / "million.parquet"
    frame(1_000_000, seed=1).to_parquet(path, index=False)
    srv, t = _serve(create_app(path))
    yield f"http://127.0.0.1:{srv.server_port}"
    srv.shutdown()
    t.join(5)


def test_slider_latency_on_1m_row_parquet(page: Page, parquet_server):
    page.goto(parquet_server)
    wait_settled(page)
    report = time_presses(page, "1,000,000 rows, Parquet served from a file")
    assert report["median_ms"] < 300          # loose: the measured numbers live in the README
