"""App pieces without a browser: figure and table builders, the session store, the host check
and security headers, settings validation, the HTML report, and `lagwise serve` from another
directory."""

import json
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import numpy as np
import pytest

import lagwise
from lagwise.app import figures as F
from lagwise.app import views as V
from lagwise.app.derived import make_estimator, param_values
from lagwise.app.state import CapacityError, SessionError, Store
from lagwise.engine.inference.compare import compare
from lagwise._files import assets_dir, demo_file


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(lagwise.load_table(demo_file()), "exret_12m",
                           ["rate_capacity", "credit_spread"], horizon=12)


@pytest.fixture(scope="module")
def sweep(fit):
    return fit.sweep(kernels=["bartlett", "parzen"], bandwidths=np.arange(1, 41.0))


def test_sensitivity_figure_traces_axes_and_marker(fit, sweep):
    marks = [(0, "Andrews (1991)", 20.5)]
    fig = F.sensitivity_figure(sweep, "rate_capacity", "t", 0.95, "normal", 13.0, 0, marks)
    lines = {t.name: t for t in fig.data if t.mode == "lines"}
    np.testing.assert_allclose(lines["Bartlett"].y, sweep.t_stat[0, :, 1])
    np.testing.assert_allclose(lines["Parzen"].x, np.arange(1, 41.0))
    assert lines["Bartlett"].line.width > lines["Parzen"].line.width      # current curve
    assert lines["Bartlett"].line.color == lagwise.get_kernel("bartlett").color
    assert fig.layout.shapes[0].x0 == 13.0                                 # patched by sliders
    crit = [t for t in fig.data if (t.legendgroup or "") == "critical"]
    assert sorted(t.y[0] for t in crit) == pytest.approx([-1.959964, 1.959964], abs=1e-5)
    assert crit[0].name == "±1.96: normal critical value"
    mark = [t for t in fig.data if t.name == "Andrews (1991)"][0]
    assert mark.x[0] == 20.5
    assert mark.y[0] == pytest.approx(np.interp(20.5, sweep.bandwidths, sweep.t_stat[0, :, 1]))
    assert mark.hovertemplate.startswith("Andrews (1991)")
    label = [a for a in fig.layout.annotations if a.text == "Andrews"][0]   # year on hover
    assert label.hovertext == "Andrews (1991)"
    # the label sits in the strip above the plotting area, its leader pointing at the rule's b
    assert (label.x, label.yref, label.y) == (20.5, "paper", 1) and label.ay < 0
    assert all(a.yref == "paper" and a.y >= 1 for a in fig.layout.annotations)
    assert "bandwidth b" in fig.layout.xaxis.title.text
    assert list(fig.layout.xaxis.range) == [1.0, 40.0]     # label fractions = plot fractions


def test_rule_labels_sit_in_a_strip_and_never_overlap(fit, sweep):
    """Rule labels live in a strip above the plotting area (no annotation inside it); rules
    landing closer than a label's width share one label with a leader to each; labels of one
    row never overlap by the figure's own width estimate; each leader points at its rule's
    value, where a diamond sits on the curve with the full wording on hover."""
    marks = [(0, "rule A", 5.0, "rule A in full"), (0, "rule B", 5.5), (0, "rule C", 6.0),
             (0, "rule D", 35.0), (1, "a much longer rule name", 20.0)]
    fig = F.sensitivity_figure(sweep, "rate_capacity", "t", 0.95, "normal", 13.0, 0, marks)
    notes = [a for a in fig.layout.annotations if a.name == "rule"]
    assert len(notes) == 5                                   # one leader per rule
    labels = {(a.text, a.ax, a.ay) for a in notes}
    assert {t for t, _, _ in labels} == {"rule A +2", "rule D", "a much longer rule name"}
    titles = {m[1] for m in marks}
    span = sweep.values[-1] - sweep.values[0]
    for a in notes:
        assert a.yref == "paper" and a.y == 1 and a.ay < 0 and a.axref == "x"
        marker = [t for t in fig.data if t.name in titles and t.x[0] == a.x]
        assert len(marker) == 1
    for ta, xa, ya in labels:
        for tb, xb, yb in labels:
            if ta < tb and ya == yb:
                gap = abs(xa - xb) / span * F.PLOT_PX
                assert gap >= (len(ta) + len(tb)) * F.CHAR_PX / 2 + 10
    full = [a.hovertext for a in notes if a.text.startswith("rule A")][0]
    assert F.strip_label(["Andrews (1991)", "LLSW (2018)"]) == "Andrews, LLSW"
    assert full.startswith("rule A in full<br>rule B")
    assert fig.layout.margin.t >= F.TITLE_PX + F.STRIP_ROW_PX


def test_non_psd_kernels_start_hidden_and_points_beyond_are_marked(fit):
    """Truncated and Tukey-Hanning curves start as legend-only (unless chosen); the range
    follows the curves shown; points beyond it are triangles at the edge, in the curve's
    legend group."""
    sw = fit.sweep(kernels=["bartlett", "truncated", "tukey_hanning"],
                   bandwidths=np.arange(1, 121.0))
    fig = F.sensitivity_figure(sw, "rate_capacity", "t", 0.95, "normal", 10, 0)
    lines = {t.name: t for t in fig.data if t.mode == "lines" and t.legendgroup}
    assert lines["Bartlett"].visible is True
    assert lines["Truncated (not PSD)"].visible == "legendonly"
    assert lines["Tukey-Hanning (not PSD)"].visible == "legendonly"
    lo, hi = fig.layout.yaxis.range
    bart = sw.t_stat[0, :, 1]
    assert lo <= np.percentile(bart, 1) and hi >= np.percentile(bart, 99)
    out = (bart < lo) | (bart > hi)
    assert sum(len(t.x) for t in fig.data if t.name == "Bartlett: beyond the chart") == \
        out.sum()
    trunc = sw.t_stat[1, :, 1]
    beyond = np.isfinite(trunc) & ((trunc > hi) | (trunc < lo))
    assert beyond.any()                   # the truncated kernel leaves the Bartlett range
    edges = [t for t in fig.data if t.name == "Truncated (not PSD): beyond the chart"]
    assert sum(len(t.x) for t in edges) == beyond.sum()
    assert all(t.legendgroup == lines["Truncated (not PSD)"].legendgroup
               and t.visible == "legendonly" for t in edges)
    assert all(set(np.round(t.y, 12)) <= {round(lo, 12), round(hi, 12)} for t in edges)
    chosen = F.sensitivity_figure(sw, "rate_capacity", "t", 0.95, "normal", 10, 1)
    assert [t for t in chosen.data if t.name == "Truncated (not PSD)"][0].visible is True


def test_conclusion_strips_and_their_summary(fit, sweep):
    """One strip per curve shaded by the conclusion (as significance_flip decides), and one
    sentence over them."""
    states = F.conclusion_states(sweep, "rate_capacity", 0.95, "normal")
    for c in range(2):
        flip = lagwise.significance_flip(fit, "rate_capacity", sweep_result=sweep, curve=c,
                                         reference="normal")
        np.testing.assert_array_equal(states[c] == 1, flip.rejects & flip.valid)
    fig = F.flip_strip_figure(sweep, "rate_capacity", 0.95, "normal", 13.0, 0)
    heat = fig.data[0]
    np.testing.assert_array_equal(np.asarray(heat.z)[::-1], states)
    assert list(heat.y)[::-1] == ["Bartlett", "Parzen"]
    assert fig.layout.shapes[0].x0 == 13.0
    text = V.conclusion_summary(sweep, states, 0.95)
    assert text.startswith("beta = 0 at 5%: rejected by all 2 curves for b ≤ ")
    assert "by none for b ≥ " in text and "changes of conclusion in all" in text
    # the ranges in the sentence are the engine's
    every = np.flatnonzero((states == 1).all(axis=0))
    assert f"b ≤ {sweep.values[every[-1]]:g}" in text


def test_sensitivity_figure_fixed_b_curve_and_modes(fit, sweep):
    fig = F.sensitivity_figure(sweep, "rate_capacity", "t", 0.95, "fixed-b", 5.0, 1)
    cv = [t for t in fig.data if t.name == "critical value (Parzen)"][0]
    np.testing.assert_allclose(cv.y, sweep.critical_values(0.95, "fixed-b")[1])
    assert cv.y[-1] > cv.y[0]                                   # grows with b/T
    se = F.sensitivity_figure(sweep, "credit_spread", "se", 0.95, "normal", 5.0, 0)
    np.testing.assert_allclose([t for t in se.data if t.name == "Bartlett"][0].y,
                               sweep.std_error[0, :, 2])
    ci = F.sensitivity_figure(sweep, "credit_spread", "ci", 0.9, "normal", 5.0, 0)
    upper = [t for t in ci.data if t.name == "Bartlett upper"][0]
    np.testing.assert_allclose(upper.y, sweep.estimate[0, :, 2] + 1.6448536
                               * sweep.std_error[0, :, 2], rtol=1e-6)


def test_sensitivity_figure_for_ewc_and_var_axes(fit):
    ewc = lagwise.sweep(fit, [lagwise.estimator("ewc", cosines=4)])
    fig = F.sensitivity_figure(ewc, "rate_capacity", "t", 0.95, "auto", 22, 0)
    assert fig.layout.xaxis.title.text == "cosine terms B"
    crit = [t for t in fig.data if t.name == "critical value (EWC)"][0]
    # the EWC law is t(B): the critical value falls with B
    assert crit.y[0] > crit.y[-1] and crit.y[4] == pytest.approx(2.571, abs=1e-3)
    var = lagwise.sweep(fit, [lagwise.estimator("var", max_order=1, criterion="fixed")])
    fig = F.sensitivity_figure(var, "rate_capacity", "se", 0.95, "normal", 2, 0)
    assert fig.layout.xaxis.title.text == "VAR order p"
    assert list(fig.data[0].x) == list(var.values)


def test_flagged_points_are_hollow_and_keep_the_axis(fit):
    sw = fit.sweep(kernels=["truncated"], bandwidths=np.arange(1, 200.0))
    assert (sw.status[0] == "repaired").any()
    fig = F.sensitivity_figure(sw, "rate_capacity", "t", 0.95, "normal", 10, 0)
    flagged = [t for t in fig.data if t.name == "Truncated (not PSD): flagged points"][0]
    assert flagged.marker.symbol == "circle-open"
    assert "eigenvalue repair" in flagged.customdata[0]
    line = [t for t in fig.data if t.name == "Truncated (not PSD)"][0]
    assert np.isnan(np.asarray(line.y, dtype=float)[sw.status[0] != ""]).all()
    ok = sw.t_stat[0, sw.status[0] == "", 1]
    lo, hi = fig.layout.yaxis.range
    assert lo <= np.percentile(ok, 1) and hi >= np.percentile(ok, 99)


def test_interval_figure_and_comparison_records(fit):
    comp = compare(fit)
    fig = F.interval_figure(comp, "rate_capacity", 0.95)
    rows = comp[(comp.term == "rate_capacity") & comp.std_error.notna()].iloc[::-1]
    np.testing.assert_allclose(fig.data[0].error_x.array, rows.ci_high - rows.estimate)
    assert list(fig.data[0].y) == list(rows.estimator)
    recs = V.comparison_records(comp, "rate_capacity", current_rejects=True)
    by = {r["estimator"]: r for r in recs}
    assert by["HC0"]["differs"] is False and by["HC0"]["verdict"] == "rejected"
    assert by["Parzen, Andrews (1991) bandwidth"]["differs"] is True
    assert by["Parzen, Andrews (1991) bandwidth"]["verdict"] == "not rejected"
    assert by["Classical (iid)"]["law"] == "t(405)"
    assert "MA(11)" in by["Truncated (uniform), b = 12"]["note"]
    assert "fewer than h - 1 = 11" in by["Bartlett, rule-of-thumb bandwidth"]["note"]
    # numbers for sorting, text for display
    assert isinstance(by["HC0"]["std_error"], float) and by["HC0"]["std_error_txt"] == \
        V.fmt(by["HC0"]["std_error"])


def test_coefficient_records_are_the_engine_numbers(fit):
    res = fit.infer(lagwise.estimator("kernel", kernel="parzen", bandwidth=9))
    recs = V.coefficient_records(res)
    assert [r["term"] for r in recs] == fit.terms
    assert recs[1]["std_error_txt"] == f"{res.table.std_error.iloc[1]:.4g}"
    assert recs[1]["p_value_txt"] == f"{res.table.p_value.iloc[1]:.3f}"
    assert recs[1]["t_stat"] == res.table.t_stat.iloc[1]


def test_p_values_are_never_printed_to_silly_precision():
    assert V.fmt_p(3.6e-279) == "< 0.001" and V.fmt_p(0.0123) == "0.012"
    assert V.fmt_p(float("nan")) == ""


def test_estimator_from_controls():
    ids = [{"type": "est-param", "name": n} for n in ("kernel", "small_sample", "repair",
                                                      "prewhiten")]
    est = make_estimator("kernel", ["parzen", ["on"], [], []], ids, "fixed", 7)
    assert est.params == {"kernel": "parzen", "bandwidth": 7.0, "small_sample": True,
                          "repair": False, "prewhiten": False}
    est = make_estimator("kernel", ["quadratic_spectral", [], ["on"], []], ids, "andrews", 7)
    assert est.params["bandwidth"] == "andrews" and est.rule() == "andrews"
    family = lagwise.FAMILIES["var"]
    vid = [{"type": "est-param", "name": "selection"}]
    assert param_values(family, ["joint"], vid) == {"selection": "joint"}
    est = make_estimator("var", ["joint"], vid, "fixed", 3)
    assert est.params["max_order"] == 3 and est.params["criterion"] == "fixed"
    est = make_estimator("ewc", [], [], "llsw", 3)
    assert est.params["cosines"] == "llsw"
    est = make_estimator("ewc", [], [], "fixed", 6.0)
    assert est.params["cosines"] == 6
    with pytest.raises(lagwise.SpecificationError):
        make_estimator("nonsense", [], [], "fixed", 3)


def test_store_budgets_are_per_session():
    store = Store(total_bytes=180_000, session_bytes=60_000, session_entries=3, max_sessions=4)
    a, b = store.open_session(), store.open_session()
    store.put(a, "data", np.zeros(2000))                 # 16 kB
    for i in range(5):                                   # b fills its own budget
        store.put(b, f"x{i}", np.zeros(2000))
    assert store.get(a, "data") is not None              # never evicted by another session
    assert len(store.keys(b)) == 3 and store.was_evicted(b, "x0")
    assert store.get(b, "data") is None and store.get("forged", "data") is None
    with pytest.raises(SessionError):
        store.put("not-issued", "k", np.zeros(3))
    with pytest.raises(CapacityError):
        store.put(a, "huge", np.zeros(20_000))           # bigger than a session may hold
    c, d = store.open_session(), store.open_session()
    for s in (c, d):
        for i in range(3):
            store.put(s, f"y{i}", np.zeros(6000))        # 48 kB each
    with pytest.raises(CapacityError):                   # global cap: refuse, never evict a
        store.put(a, "more", np.zeros(6000))             # live session's data
    assert store.get(b, "x4") is not None and store.get(c, "y2") is not None
    assert store.get(a, "data") is not None              # a refusal changes nothing
    e = store.open_session()                             # issuing an id is never refused,
    with pytest.raises(CapacityError):                   # but at most max_sessions hold data
        store.put(e, "first", np.zeros(10))


def test_store_counts_a_fits_caches(fit):
    store = Store()
    s = store.open_session()
    fresh = lagwise.fit_ols(lagwise.load_table(demo_file()), "exret_1m", ["rate_capacity"])
    store.put(s, "fit", fresh)
    before = store.nbytes
    fresh.moments.ensure(fresh.nobs - 1)
    store.refresh(s, "fit")
    assert store.nbytes >= before + fresh.moments.nbytes


def test_host_check_and_security_headers():
    from lagwise.app.main import create_app
    client = create_app().server.test_client()
    ok = client.get("/", headers={"Host": "127.0.0.1:8050"})
    assert ok.status_code == 200
    csp = ok.headers["Content-Security-Policy"]
    assert "default-src 'self'" in csp and "frame-ancestors 'none'" in csp
    assert "unsafe-eval" not in csp
    assert ok.headers["X-Content-Type-Options"] == "nosniff"
    assert ok.headers["X-Frame-Options"] == "DENY"
    for host in ("evil.example", "evil.example:8050", "127.0.0.1.evil.example"):
        bad = client.get("/", headers={"Host": host})
        assert bad.status_code == 421 and b"unknown host" in bad.data
    assert client.get("/", headers={"Host": "localhost:8050"}).status_code == 200
    other = create_app(host="0.0.0.0", allowed_hosts=["analysis-box"]).server.test_client()
    assert other.get("/", headers={"Host": "analysis-box:8050"}).status_code == 200
    assert b"reachable by others" in other.get(
        "/_dash-layout", headers={"Host": "analysis-box"}).data


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_serve_from_another_directory_finds_css_and_demo(tmp_path):
    """The installed console script (CI installs the package non-editable) started outside the
    checkout serves the page, its CSS and the bundled demo data; bound to 127.0.0.1."""
    script = shutil.which("lagwise", path=str(Path(sys.executable).parent))
    cmd = [script] if script else [sys.executable, "-m", "lagwise.app.cli"]
    port = _free_port()
    proc = subprocess.Popen(cmd + ["serve", "--port", str(port)], cwd=tmp_path,
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
    from lagwise.engine.io.settings import load_settings, settings_json
    record = {"response": "exret_1m", "regressors": ["credit_spread"], "estimator": "ewc",
              "params": {"cosines": 12}, "rule": "fixed", "level": 0.9}
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


def test_differs_style_is_a_neutral_rule():
    cond = V.DIFFERS_STYLE["styleConditions"][0]
    assert cond["condition"] == "params.data.differs"
    assert cond["style"]["backgroundColor"] not in ("#e3f1ee", "#fbeee4")   # no verdict colours


def test_clipboard_text_is_what_the_table_shows(fit):
    res = fit.infer(lagwise.estimator("hc1"))
    text = V.tsv(V.coefficient_records(res), V.COEF_COLUMNS)
    lines = text.splitlines()
    assert lines[0].split("\t")[:3] == ["term", "estimate", "std. error"]
    assert lines[2].split("\t")[2] == V.fmt(res.table.std_error.iloc[1])


def test_tuning_text_never_rounds_b_over_t_to_zero(fit):
    """At large T a small bandwidth has b/T far below 0.001: printed to three significant
    digits, never as 0.000."""
    import re
    res = fit.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth=1.0))
    text = V.tuning_text(res, fit)
    value = float(re.search(r"b/T = ([0-9.e-]+)", text).group(1))
    assert value == pytest.approx(1.0 / fit.nobs, rel=5e-3) and value > 0


def test_app_functions_stay_short():
    """Thin callbacks and views: no function in app/ longer than 80 lines."""
    import ast
    from pathlib import Path
    long = []
    for path in sorted((Path(__file__).resolve().parents[1] / "app").glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                size = node.end_lineno - node.lineno + 1
                if size > 80:
                    long.append(f"{path.name}:{node.name} ({size} lines)")
    assert not long, ", ".join(long)
