"""Take the README's screenshots (and a few more views) from the running dashboard.

    python scripts/screenshots.py [OUTPUT_FOLDER]     # default: docs/

Starts the dashboard in this process on a free port (127.0.0.1), drives Debian's headless
chromium with Playwright (never a downloaded browser; LAGWISE_CHROMIUM overrides the binary)
and writes one PNG per view: the demo's first screen, its tables, an instrumented (IV)
specification, the panel demo, an uploaded CSV (simulated here, seeded), the persistence card
and the size check. Look at the files before committing them.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import threading
from pathlib import Path

import numpy as np
import pandas as pd

CHROMIUM = os.environ.get("LAGWISE_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def serve():
    import logging
    logging.getLogger("werkzeug").setLevel(logging.WARNING)
    from werkzeug.serving import make_server
    from lagwise.app import create_app
    srv = make_server("127.0.0.1", 0, create_app().server, threaded=True)
    threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05},
                     daemon=True).start()
    return srv, f"http://127.0.0.1:{srv.server_port}"


def choose(page, dropdown: str, option: str):
    page.locator(f"#{dropdown}").click()
    page.get_by_role("option", name=option, exact=True).click()
    page.keyboard.press("Escape")


def settle(page, ms: int = 2500):
    """Wait for the app's callbacks to finish (no loading spinners), then a moment more."""
    page.wait_for_function("() => !document.querySelector('[data-dash-is-loading=\"true\"]')",
                           timeout=120_000)
    page.wait_for_timeout(ms)


def first_screen(page, path: Path):
    """The main column from the headline to the end of the sensitivity card."""
    page.evaluate("window.scrollTo(0, 0)")
    settle(page)
    top = page.locator("#headline-card").bounding_box()
    sens = page.locator("section.lw-card", has=page.locator("#sens-graph")).bounding_box()
    head = page.locator(".lw-header").bounding_box()
    page.screenshot(path=str(path), full_page=True,
                    clip={"x": 0, "y": head["y"], "width": 1440,
                          "height": sens["y"] + sens["height"] - head["y"] + 14})
    del top


def element(page, selector: str, path: Path):
    loc = page.locator(selector).locator("visible=true").first
    loc.scroll_into_view_if_needed()
    settle(page, 1500)
    loc.screenshot(path=str(path))


def simulated_upload(folder: Path) -> Path:
    """A small quarterly file as an analyst might upload it (simulated, seeded)."""
    rng = np.random.default_rng(2026)
    n = 160
    dates = pd.period_range("1986Q1", periods=n, freq="Q").to_timestamp("Q")
    spread = np.zeros(n)
    for i in range(1, n):
        spread[i] = 0.9 * spread[i - 1] + rng.standard_normal()
    e = np.zeros(n)
    for i in range(1, n):
        e[i] = 0.5 * e[i - 1] + rng.standard_normal()
    growth = 0.5 + 0.15 * np.r_[np.nan, spread[:-1]] + e
    frame = pd.DataFrame({"quarter": dates.strftime("%Y-%m-%d"), "gdp_growth": growth,
                          "term_spread": spread, "oil_change": rng.standard_normal(n)})
    path = folder / "quarterly_macro.csv"
    frame.to_csv(path, index=False, float_format="%.4f")
    return path


def main(out: Path) -> None:
    from playwright.sync_api import sync_playwright
    out.mkdir(parents=True, exist_ok=True)
    srv, url = serve()
    tmp = Path(tempfile.mkdtemp(prefix="lagwise-shots-"))
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            page.goto(url)
            page.locator("#coef-table .ag-center-cols-container [col-id='term']").first \
                .wait_for(timeout=60_000)
            first_screen(page, out / "screenshot-overview.png")
            element(page, "div.lw-results", out / "screenshot-tables.png")
            page.locator("#predictive-card").wait_for(state="visible", timeout=60_000)
            element(page, "#predictive-card", out / "screenshot-persistence.png")
            choose(page, "size-reps", "200")
            page.locator("#size-run").click()
            page.locator("#size-table .ag-center-cols-container [col-id='estimator']").first \
                .wait_for(timeout=180_000)
            element(page, "#size-card", out / "screenshot-size.png")
            # an instrumented specification
            page.evaluate("window.scrollTo(0, 0)")
            choose(page, "response", "rate_growth")
            choose(page, "regressors", "rate_capacity")
            choose(page, "regressors", "credit_spread")
            choose(page, "regressors", "utilization_survey")
            page.locator("#iv-details summary").click()
            choose(page, "endogenous", "utilization_survey")
            for z in ("port_congestion", "scrap_rate", "bunker_spread"):
                choose(page, "instruments", z)
            page.locator("#strength-card").wait_for(state="visible", timeout=60_000)
            first_screen(page, out / "screenshot-iv.png")
            element(page, "#strength-card", out / "screenshot-iv-strength.png")
            # an uploaded file
            page.evaluate("window.scrollTo(0, 0)")
            page.locator("#upload input[type=file]").set_input_files(str(simulated_upload(tmp)))
            page.get_by_text("loaded quarterly_macro.csv").wait_for(timeout=60_000)
            first_screen(page, out / "screenshot-upload.png")
            # the panel demo
            page.evaluate("window.scrollTo(0, 0)")
            page.locator("#load-demo-panel").click()
            page.locator("#fit-message", has_text="240").wait_for(timeout=60_000)
            first_screen(page, out / "screenshot-panel.png")
            browser.close()
    finally:
        srv.shutdown()
        shutil.rmtree(tmp, ignore_errors=True)
    for f in sorted(out.glob("screenshot-*.png")):
        print(f)


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent.parent
         / "docs")
