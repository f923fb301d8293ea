"""Shared fixtures: headless Chromium for Playwright (Debian's binary, never a downloaded one),
a live Lagwise server on a free port, and the browser requirement switch for CI."""

import logging
import os
import shutil
import threading

import pytest

CHROMIUM = os.environ.get("LAGWISE_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
os.environ.setdefault("BROWSER_PATH", CHROMIUM)          # kaleido / choreographer
CHROME_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-quic",
                "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync"]
REQUIRE_BROWSER = os.environ.get("LAGWISE_REQUIRE_BROWSER") == "1"
logging.getLogger("werkzeug").setLevel(logging.WARNING)


def pytest_collection_modifyitems(config, items):
    """Benchmarks run only when asked for by name (`-m bench`): a marker expression such as
    `-m "not slow and not browser"` replaces the default `-m 'not bench'`, and must not pull
    the benchmarks into the fast inner loop."""
    if "bench" in (config.getoption("markexpr") or ""):
        return
    keep, dropped = [], []
    for item in items:
        (dropped if item.get_closest_marker("bench") else keep).append(item)
    if dropped:
        config.hook.pytest_deselected(items=dropped)
        items[:] = keep


def browser_available() -> bool:
    if not os.path.exists(CHROMIUM):
        return False
    try:
        import playwright  # noqa: F401
    except ImportError:
        return False
    return True


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    if not browser_available():
        message = f"headless Chromium not found at {CHROMIUM} (install Debian's chromium)"
        if REQUIRE_BROWSER:
            pytest.fail(message + "; LAGWISE_REQUIRE_BROWSER=1 makes this a failure")
        pytest.skip(message)
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": CHROME_FLAGS}


@pytest.fixture(scope="session")
def browser_context_args(browser_context_args):
    return {**browser_context_args, "viewport": {"width": 1280, "height": 900},
            "accept_downloads": True}


def _serve(app):
    from werkzeug.serving import make_server
    srv = make_server("127.0.0.1", 0, app.server, threaded=True)
    t = threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    t.start()
    return srv, t


@pytest.fixture(scope="session")
def live_server():
    from lagwise.app import create_app
    srv, t = _serve(create_app())
    yield f"http://127.0.0.1:{srv.server_port}"
    srv.shutdown()
    t.join(5)
