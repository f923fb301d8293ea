"""App pieces without a browser: figure and table builders, the server-side store, the
settings record, the HTML report, and `lagwise serve` from another directory."""

import json
import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.app import figures as F
from lagwise.app.callbacks import make_estimator, param_values, report_html
from lagwise.app.state import Store, key_for, owned
from lagwise.engine.compare import compare
from lagwise._files import assets_dir, demo_file


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(lagwise.load_table(demo_file()), "exret_12m",
                          ["rate_capacity", "credit_spread"], horizon=12)


@pytest.fixture(scope="module")
def sweep(fit):
    return fit.sweep(kernels=["bartlett", "parzen"], bandwidths=np.arange(1, 41.0))


def test_sensitivity_figure_traces_axes_and_marker(fit, sweep):
    marks = [("bartlett", "andrews", 20.5)]
    fig = F.sensitivity_figure(sweep, "rate_capacity", "t", 0.95, "normal", 13.0, "bartlett",
                               marks)
    lines = {t.name: t for t in fig.data if t.mode == "lines"}
    np.testing.assert_allclose(lines["Bartlett"].y, sweep.t_stat[0, :, 1])
    np.testing.assert_allclose(lines["Parzen"].x, np.arange(1, 41.0))
    assert lines["Bartlett"].line.width > lines["Parzen"].line.width      # current kernel
    assert fig.layout.shapes[0].x0 == 13.0                                 # patched by sliders
    hlines = sorted(s.y0 for s in fig.layout.shapes[1:])
    assert hlines == pytest.approx([-1.959964, 1.959964], abs=1e-5)
    mark = [t for t in fig.data if t.mode == "markers+text"][0]
    assert mark.x[0] == 20.5
    assert mark.y[0] == pytest.approx(np.interp(20.5, sweep.bandwidths, sweep.t_stat[0, :, 1]))
    assert "bandwidth b" in fig.layout.xaxis.title.text


def test_sensitivity_figure_fixed_b_curve_and_modes(fit, sweep):
    fig = F.sensitivity_figure(sweep, "rate_capacity", "t", 0.95, "fixed-b", 5.0, "parzen")
    cv = [t for t in fig.data if t.name == "fixed-b critical value (Parzen)"][0]
    np.testing.assert_allclose(cv.y, sweep.critical_values(0.95, "fixed-b")[1])
    assert cv.y[-1] > cv.y[0]                                   # grows with b/T
    se = F.sensitivity_figure(sweep, "credit_spread", "se", 0.95, "normal", 5.0, "bartlett")
    np.testing.assert_allclose([t for t in se.data if t.name == "Bartlett"][0].y,
                               sweep.std_error[0, :, 2])
    ci = F.sensitivity_figure(sweep, "credit_spread", "ci", 0.9, "normal", 5.0, "bartlett")
    upper = [t for t in ci.data if t.name == "Bartlett upper"][0]
    np.testing.assert_allclose(upper.y, sweep.estimate[2] + 1.6448536 * sweep.std_error[0, :, 2],
                               rtol=1e-6)


def test_interval_figure_and_comparison_records(fit):
    comp = compare(fit)
    fig = F.interval_figure(comp, "rate_capacity", 0.95)
    rows = comp[(comp.term == "rate_capacity") & comp.std_error.notna()].iloc[::-1]
    np.testing.assert_allclose(fig.data[0].error_x.array, rows.ci_high - rows.estimate)
    assert list(fig.data[0].y) == list(rows.estimator)
    recs = F.comparison_records(comp, "rate_capacity", current_rejects=True)
    by = {r["estimator"]: r for r in recs}
    assert by["HC0"]["differs"] is False and by["HC0"]["verdict"] == "rejects 0"
    assert by["Parzen, andrews"]["differs"] is True
    assert by["Classical (iid)"]["reference"] == "t(417)"
    assert "MA(11)" in by["Truncated (uniform), b=12"]["note"]


def test_coefficient_records_are_the_engine_numbers(fit):
    res = fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth=9))
    recs = F.coefficient_records(res)
    assert [r["term"] for r in recs] == fit.terms
    assert recs[1]["std_error"] == f"{res.table.std_error.iloc[1]:.4g}"
    assert recs[1]["p_value"] == f"{res.table.p_value.iloc[1]:.3f}"


def test_estimator_from_controls():
    ids = [{"type": "est-param", "name": n} for n in ("kernel", "small_sample", "repair",
                                                      "prewhiten")]
    est = make_estimator("kernel", ["parzen", ["on"], [], []], ids, "fixed", 7)
    assert est.params == {"kernel": "parzen", "bandwidth": 7.0, "small_sample": True,
                          "repair": False, "prewhiten": False}
    est = make_estimator("kernel", ["qs" and "quadratic_spectral", [], ["on"], []], ids,
                         "andrews", 7)
    assert est.params["bandwidth"] == "andrews"
    vid = [{"type": "est-param", "name": "max_lag"}, {"type": "est-param", "name": "criterion"}]
    assert param_values("var", ["auto", "aic"], vid) == {"max_lag": None, "criterion": "aic"}
    with pytest.raises(lagwise.SpecificationError):
        make_estimator("ewc", ["many"], [{"type": "est-param", "name": "terms"}], "fixed", 3)


def test_store_is_bounded_and_session_scoped():
    store = Store(max_bytes=10_000, max_entries=3)
    for i in range(5):
        store.put(f"s:{i}", np.zeros(100))
    assert len(store) == 3 and store.get("s:0") is None and store.get("s:4") is not None
    store.put("s:big", np.zeros(5000))          # 40 kB > bound: evicts everything older
    assert store.keys() == ["s:big"]
    key = key_for("sessionA", "data", "abc")
    assert owned("sessionA", key) and not owned("sessionB", key) and not owned("", key)


def test_report_html_is_self_contained(fit):
    res = fit.infer(lagwise.estimator("hc1"))
    fig = F.residual_figure(fit)
    html = report_html(fit, [fig], [F.coefficient_records(res), [], []], res.describe())
    assert html.startswith("<!doctype html>") and "<table" in html and "HC1" in html
    assert "src=\"http" not in html and len(html) > 1_000_000      # plotly.js inlined


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_serve_from_another_directory_finds_css_and_demo(tmp_path):
    """The installed console script (CI installs the package non-editable) started outside the
    checkout serves the page, its CSS and the bundled demo data; bound to 127.0.0.1."""
    script = shutil.which("lagwise", path=str(Path(sys.executable).parent))
    cmd = [script] if script else [sys.executable, "-m", "lagwise.app.cli"]
    env = dict(os.environ)
    port = _free_port()
    proc = subprocess.Popen(cmd + ["serve", "--port", str(port)], cwd=tmp_path, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        body = None
        for _ in range(100):
            try:
                body = urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=2).read()
                break
            except OSError:
                time.sleep(0.2)
        assert body is not None, "server did not start"
        assert b"Lagwise" in body
        css = urllib.request.urlopen(f"http://127.0.0.1:{port}/assets/lagwise.css").read()
        assert b"--lw-accent" in css
        layout = json.loads(urllib.request.urlopen(f"http://127.0.0.1:{port}/_dash-layout")
                            .read())
        assert '"session"' in json.dumps(layout)
    finally:
        proc.terminate()
        out = proc.communicate(timeout=10)[0]
    assert "127.0.0.1" in out and "Debug mode: off" in out
    assert (assets_dir() / "lagwise.css").is_file() and demo_file().is_file()


def test_create_app_with_settings_file(tmp_path):
    from lagwise.app.cli import build_parser
    from lagwise.app.main import create_app
    from lagwise.engine.export import load_settings, settings_json
    record = {"response": "exret_1m", "regressors": ["credit_spread"], "estimator": "ewc",
              "params": {"terms": 12}, "rule": "fixed", "level": 0.9}
    path = tmp_path / "s.json"
    path.write_text(settings_json(record))
    settings = load_settings(path.read_text())
    app = create_app(None, settings)
    layout = app.layout() if callable(app.layout) else app.layout
    comps = {c.id: c for c in layout._traverse() if isinstance(getattr(c, "id", None), str)}
    assert comps["pending-settings"].data["estimator"] == "ewc"
    assert comps["initial-spec"].data["response"] == "exret_1m"
    args = build_parser().parse_args(["serve", "--settings", str(path), "--port", "9999"])
    assert args.settings == str(path) and args.host == "127.0.0.1" and not args.debug


def test_differs_style_shades_exactly_the_differing_rows(fit):
    recs = F.comparison_records(compare(fit), "rate_capacity", current_rejects=True)
    style = F.differs_style(recs)
    rows = style[0]["if"]["row_index"]
    assert rows == [i for i, r in enumerate(recs) if r["verdict"] == "keeps 0"]
    assert F.differs_style([{"differs": False}]) == []


def test_store_counts_a_fits_caches(fit):
    from lagwise.app.state import _size
    fresh = lagwise.fit_ols(lagwise.load_table(demo_file()), "exret_1m", ["rate_capacity"])
    before = _size(fresh)
    fresh.moments.ensure(fresh.nobs - 1)
    assert _size(fresh) >= before + fresh.moments._packed.nbytes
