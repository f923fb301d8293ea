"""The first read without a browser: the model line, the answer line and the headline's words,
exports that name their version, time and data (file, rows, SHA-256), tables in words with
booktabs LaTeX, the robustness table's `beneath=`, and the command line's --version and demo.

Outside references: hashlib (the file's SHA-256), pandas.read_csv (rows and missing cells of the
file), zlib (PNG chunk CRCs), xml.etree (the stamped SVG parses), pdflatex (the stamped PDF is
read without xref repair; the LaTeX exports compile), importlib.metadata (the version)."""

from __future__ import annotations

import hashlib
import json
import math
import re
import struct
import subprocess
import sys
import warnings
import xml.etree.ElementTree as ET
import zlib
from importlib import metadata

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

import lagwise
from lagwise._files import demo_file
from lagwise.app import answer as A
from lagwise.app.cli import main
from lagwise.engine.covariance.bandwidth import bandwidth_text, lags_text
from lagwise.engine.io.provenance import (chart_fields, provenance, stamp_pdf, stamp_png,
                                          stamp_svg)
from lagwise.engine.io.tables import p_text, render
from tests.test_cli_export import _pdflatex, latex_document

DEMO = demo_file()


@pytest.fixture(scope="module")
def table():
    return lagwise.load_table(DEMO)


@pytest.fixture(scope="module")
def demo(table):
    return lagwise.fit_ols(table, "exret_12m", ["rate_capacity", "credit_spread"], horizon=12,
                           one_period="exret_1m")


# --------------------------------------------------------------------------- numbers in words

@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=0.01, max_value=5000, allow_nan=False, allow_infinity=False))
def test_a_bandwidth_is_shown_with_the_digits_its_lag_count_follows_from(b):
    text = bandwidth_text(b)
    shown = float(text)
    assert math.ceil(shown) == math.ceil(b)                  # lags = ceil(b) - 1 either way
    assert (shown == int(shown)) == (b == int(b))            # a whole number only when it is
    assert "e" not in text and abs(shown - b) <= max(0.006 * b, 1e-9)


def test_words_for_lags_bandwidths_and_p_values():
    assert (lags_text(1), lags_text(0), lags_text(39)) == ("1 lag", "0 lags", "39 lags")
    assert bandwidth_text(34.0047) == "34.005" and bandwidth_text(39.41) == "39.4"
    assert bandwidth_text(13.0) == "13"
    assert p_text(3.6e-279) == "< 0.001" and p_text(0.0123) == "0.012" and p_text(np.nan) == ""


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=0, max_value=1, allow_nan=False))
def test_p_values_are_never_in_scientific_notation(p):
    text = p_text(p)
    assert "e" not in text and (text == "< 0.001" or 0 <= float(text) <= 1)


# --------------------------------------------------------------------------- the model line

def test_model_line_states_response_regressors_dates_t_losses_overlap_and_r2(table, demo):
    raw = pd.read_csv(DEMO, comment="#")
    line = lagwise.model_line(demo)
    assert line.startswith("exret_12m on rate_capacity, credit_spread and an intercept; ")
    used = raw.dropna(subset=["exret_12m", "rate_capacity", "credit_spread"])
    first, last = str(used["month"].iloc[0])[:10], str(used["month"].iloc[-1])[:10]
    assert f"{first} to {last}" in line
    lost = len(raw) - len(used)
    assert lost == 12 and f"T = {len(used)} (12 lost to leads and lags)" in line
    assert "overlap h = 12" in line and f"R² = {demo.r_squared:.3f}" in line
    # a lag at the start and a forward sum at the end are both leads and lags; a gap inside
    # the sample is a missing value
    t2, y = table.with_transform("sum-next", "exret_1m", 6)
    t2, lag = t2.with_transform("lag", "credit_spread", 3)
    f2 = lagwise.fit_ols(t2, y, ["rate_capacity", lag])
    assert "(9 lost to leads and lags)" in lagwise.model_line(f2)
    frame = t2.frame.copy()
    frame.iloc[100:104, frame.columns.get_loc("rate_capacity")] = np.nan
    gappy = lagwise.Table(frame=frame, report=t2.report, horizons=t2.horizons,
                          transforms=t2.transforms)
    f3 = lagwise.fit_ols(gappy, y, ["rate_capacity", lag])
    assert "(9 lost to leads and lags, 4 to missing values)" in lagwise.model_line(f3)
    window = lagwise.fit_ols(table, "exret_1m", ["rate_capacity"],
                             sample=("1995-01-31", "2010-12-31"))
    assert re.search(r"T = 192 \(\d+ outside the window\)", lagwise.model_line(window))


def test_model_line_for_iv_gmm_and_panels(table):
    iv = lagwise.fit_iv(table, "rate_growth", ["utilization_survey"], ["utilization_survey"],
                        ["port_congestion", "scrap_rate"])
    line = lagwise.model_line(iv)
    assert "utilization_survey instrumented by port_congestion, scrap_rate; 2SLS;" in line
    assert f"R² = {iv.r_squared:.3f}" in line
    two = iv.two_step(lagwise.estimator("kernel", bandwidth=5.0))
    assert "; two-step GMM;" in lagwise.model_line(two)
    panel = lagwise.load_table(demo_file("shipping_panel.csv"))
    fe = lagwise.fit_panel(panel, "exret", ["book_to_market", "fleet_age"], effects="entity")
    line = lagwise.model_line(fe)
    assert "(intercept absorbed by the effects)" in line
    assert "240 entities x 156 periods (company, month); entity fixed effects" in line
    assert f"N = {fe.nobs:,};" in line and "within R² = " in line


# --------------------------------------------------------------------------- provenance

def test_a_load_report_carries_the_files_sha256_and_exports_state_it(table, demo):
    data = DEMO.read_bytes()
    assert table.report.sha256 == hashlib.sha256(data).hexdigest()
    assert lagwise.load_table(data, name="x.csv").report.sha256 == table.report.sha256
    stamp = provenance(demo)
    assert stamp.version == lagwise.__version__ == metadata.version("lagwise")
    assert stamp.rows == len(pd.read_csv(DEMO, comment="#")) and stamp.source == DEMO.name
    assert re.match(r"Made by Lagwise \S+ on \d{4}-\d\d-\d\d \d\d:\d\d:\d\d", stamp.lines()[0])
    assert stamp.lines()[1] == f"data: freight_index.csv (420 rows, SHA-256 {stamp.sha256})"
    mem = provenance(lagwise.fit_ols(table.frame, "exret_1m", ["rate_capacity"]))
    assert "not read from a file" in mem.lines()[1] and mem.sha256 is None
    # transforms keep the file's report
    t2, _ = table.with_transform("lag", "rate_capacity", 1)
    assert provenance(t2).sha256 == stamp.sha256


def _png(width=2, height=2) -> bytes:
    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + \
            struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF)
    raw = b"".join(b"\x00" + b"\xff\x00\x00" * width for _ in range(height))
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 2,
                                                              0, 0, 0))
            + chunk(b"IDAT", zlib.compress(raw)) + chunk(b"IEND", b""))


def test_chart_files_carry_the_stamp_in_their_own_metadata(demo, tmp_path):
    fields = chart_fields(provenance(demo), "How rate_capacity depends on the bandwidth",
                          lagwise.model_line(demo))
    png = stamp_png(_png(), fields)
    pos, text = 8, {}
    while pos < len(png):
        (n,) = struct.unpack(">I", png[pos:pos + 4])
        kind, body = png[pos + 4:pos + 8], png[pos + 8:pos + 8 + n]
        assert zlib.crc32(kind + body) & 0xFFFFFFFF == struct.unpack(
            ">I", png[pos + 8 + n:pos + 12 + n])[0]
        if kind == b"tEXt":
            k, _, v = body.partition(b"\x00")
            text[k.decode()] = v.decode("latin-1")
        pos += 12 + n
    assert kind == b"IEND" and text["Creator"] == f"Lagwise {lagwise.__version__}"
    assert demo.table.report.sha256 in text["Source"]
    svg = stamp_svg(b"<svg xmlns='http://www.w3.org/2000/svg' width='2'><rect/></svg>", fields)
    root = ET.fromstring(svg)
    meta = root.find("{http://www.w3.org/2000/svg}metadata")
    assert meta is not None and any(demo.table.report.sha256 in (e.text or "") for e in meta)
    # a minimal PDF with a cross-reference table, stamped, then read by pdfTeX
    body = [b"%PDF-1.4\n"]
    objs = [b"<< /Type /Catalog /Pages 2 0 R >>", b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
            b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 100 100] >>"]
    offsets = []
    for i, o in enumerate(objs, start=1):
        offsets.append(sum(map(len, body)))
        body.append(f"{i} 0 obj\n".encode() + o + b"\nendobj\n")
    xref = sum(map(len, body))
    body.append(b"xref\n0 4\n0000000000 65535 f \n" + b"".join(
        f"{o:010d} 00000 n \n".encode() for o in offsets))
    body.append(f"trailer\n<< /Size 4 /Root 1 0 R >>\nstartxref\n{xref}\n%%EOF\n".encode())
    pdf = stamp_pdf(b"".join(body), fields)
    assert demo.table.report.sha256.encode() in pdf
    exe = _pdflatex()
    (tmp_path / "chart.pdf").write_bytes(pdf)
    (tmp_path / "doc.tex").write_text("\\documentclass{article}\\usepackage{graphicx}"
                                      "\\begin{document}\\includegraphics{chart.pdf}"
                                      "\\end{document}\n")
    out = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    log = (tmp_path / "doc.log").read_text(errors="replace")
    assert out.returncode == 0 and "xref" not in log.lower() and "damaged" not in log.lower()


# --------------------------------------------------------------------------- tables

def test_reader_tables_use_words_and_csv_keeps_names(demo):
    res = demo.infer(lagwise.estimator("kernel", bandwidth="andrews"))
    frame = res.table.reset_index()
    stamp = provenance(demo).lines()
    csv = render(frame, "csv", index=False, stamp=stamp)
    assert "std_error,t_stat,p_value,ci_low,ci_high" in csv and csv.startswith("# Made by")
    for fmt in ("markdown", "latex", "html"):
        text = render(frame, fmt, index=False, stamp=stamp, level=0.95)
        assert "std. error" in text and "95" in text and "interval" in text, fmt
        assert not re.search(r"std.?error|t.?stat|p.?value|ci.?low", text.replace(
            "std. error", "")), fmt
        assert demo.table.report.sha256 in text and lagwise.__version__ in text, fmt
        assert not re.search(r"\d\.?\d*e-\d", text), fmt
    md = render(frame, "markdown", index=False, level=0.95)
    rule = md.splitlines()[1].split("|")[1:-1]
    # text (term) and the interval text column left, numbers right
    assert [c.strip() for c in rule] == [":---", "---:", "---:", "---:", "---:", "---:"]
    comp = lagwise.compare(demo)
    md = render(comp[comp.term == "rate_capacity"][["estimator", "t_stat", "law"]], "markdown",
                index=False)
    assert [c.strip() for c in md.splitlines()[1].split("|")[1:-1]] == [":---", "---:", ":---"]


def test_latex_exports_use_booktabs_say_which_packages_and_compile(demo, tmp_path):
    exe = _pdflatex()
    res = demo.infer(lagwise.estimator("kernel", bandwidth="andrews"), reference="fixed-b")
    body = render(res.table.reset_index(), "latex", index=False, caption=res.describe(),
                  notes=res.notes, stamp=provenance(demo).lines(), level=0.95)
    lines = body.splitlines()
    assert lines[0] == "% needs \\usepackage{booktabs} (\\toprule, \\midrule, \\bottomrule)"
    assert lines[1].startswith("% Made by Lagwise") and "SHA-256" in lines[2]
    assert "\\toprule" in lines and "\\midrule" in lines and "\\bottomrule" in lines
    tab = lagwise.robustness_table(demo, {"HC1": "hc1", "L = 12": lagwise.estimator(
        "kernel", lags=12)}, beneath="t")
    doc = tmp_path / "t.tex"
    doc.write_text(latex_document(body + "\n" + tab.to_latex(caption="memo")))
    out = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", doc.name],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stdout[-2000:]


def test_robustness_table_beneath_in_our_words_and_show_deprecated(demo):
    ests = {"HC1": "hc1", "L = 12": lagwise.estimator("kernel", lags=12)}
    expected = {"std_error": "its standard error", "t": "its t statistic",
                "p": "its p-value", "interval": "its confidence interval"}
    for beneath, words in expected.items():
        tab = lagwise.robustness_table(demo, ests, beneath=beneath)
        assert tab.foot()[0].startswith(f"Beneath each estimate: {words}")
        cells = tab.grid()[4]
        res = demo.infer("hc1")
        if beneath == "p":
            assert cells[1] == "p " + p_text(res.table.loc["intercept", "p_value"]) or \
                cells[1] == "p = " + p_text(res.table.loc["intercept", "p_value"])
    for old, new in (("se", "std_error"), ("t", "t"), ("p", "p"), ("ci", "interval")):
        with pytest.warns(DeprecationWarning, match="beneath"):
            tab = lagwise.robustness_table(demo, ests, show=old)
        assert tab.beneath == new
    with pytest.raises(lagwise.SpecificationError, match="beneath"):
        lagwise.robustness_table(demo, ests, beneath="se")
    tab = lagwise.robustness_table(demo, ests)
    sha = demo.table.report.sha256
    assert sha in tab.to_markdown() and sha in tab.to_html() and sha in tab.to_latex()


def test_summary_never_breaks_a_description_inside_parentheses(demo):
    res = demo.infer(lagwise.estimator("kernel", bandwidth="andrews"), reference="fixed-b")
    assert "; simulated values)" in res.describe()
    for line in res.summary().splitlines():
        assert line.count("(") == line.count(")"), line


# --------------------------------------------------------------------------- answer and headline

def test_the_answer_line_states_the_spread_without_picking_a_winner(demo):
    comp = demo.compare()
    rows = comp[comp.term == "rate_capacity"]
    ok = rows[np.isfinite(rows.t_stat)]
    text = A.answer_line(A.comparison_rows(comp, "rate_capacity"), 0.95)
    lo, hi = ok.loc[ok.t_stat.idxmin()], ok.loc[ok.t_stat.idxmax()]
    assert text.startswith(f"t from {lo.t_stat:.2f} ({lo.estimator}) to {hi.t_stat:.2f} "
                           f"({hi.estimator}); ")
    k = int(ok.rejects.sum())
    assert f"beta = 0 rejected by {k} of {len(ok)} estimators at 5%." in text
    assert not re.search(r"\b(best|preferred|correct|should)\b", text)
    same = [{"estimator": "a", "t_stat": 3.0, "verdict": "rejected"},
            {"estimator": "b", "t_stat": 4.0, "verdict": "rejected"},
            {"estimator": "c", "t_stat": None, "verdict": "not available"}]
    assert A.answer_line(same, 0.95) == ("t from 3.00 (a) to 4.00 (b); beta = 0 rejected by "
                                         "all 2 estimators at 5% (1 not available).")


def test_the_headline_says_each_thing_once_and_the_region_from_its_own_side(demo):
    est = lagwise.estimator("kernel", bandwidth="andrews")
    res = demo.infer(est)
    sw = demo.sweep(kernels=["bartlett"])
    flip = lagwise.significance_flip(demo, "rate_capacity", sweep_result=sw, reference="normal")
    h = A.headline_parts(res, est, demo, "rate_capacity", flip, "Andrews (1991)")
    assert h["rejects"] is False and h["verdict"] == "beta = 0 is not rejected at 5%"
    b = res.long_run.bandwidth
    assert h["choice"] == (f"under Bartlett, b = {bandwidth_text(b)} "
                           f"({lags_text(res.long_run.lags)}), value chosen by Andrews (1991); "
                           "reference law: normal.")
    last_reject = max(v for v, r, ok in zip(flip.values, flip.rejects, flip.valid) if r and ok)
    assert h["region"] == (f"Not rejected for b ≥ {last_reject + 1:g}; rejected only for "
                           f"b ≤ {last_reject:g} (Bartlett, normal critical values).")
    # by hand, at a value where normal and fixed-b critical values disagree
    for value in range(6, 120):
        at = lagwise.estimator("kernel", bandwidth=float(value))
        r = demo.infer(at)
        fb = demo.infer(at, reference="fixed-b")
        t = r.table.loc["rate_capacity"]
        if (t.p_value < 0.05) != (fb.table.loc["rate_capacity", "p_value"] < 0.05):
            note = A.fixed_b_note(r, at, demo, "rate_capacity")
            cv = fb.critical_value
            assert note == (f"Fixed-b critical values (±{cv:.2f} at b/T = "
                            f"{value / demo.nobs:.3g}) would "
                            f"{'reject' if abs(t.t_stat) > cv else 'not reject'} beta = 0 "
                            f"with the same t = {t.t_stat:.2f}.")
            break
    else:
        pytest.fail("no bandwidth where the laws disagree")
    agree = lagwise.estimator("kernel", bandwidth=2.0)
    assert A.fixed_b_note(demo.infer(agree), agree, demo, "rate_capacity") == ""
    hc = demo.infer("hc1")
    h = A.headline_parts(hc, hc.estimator, demo, "rate_capacity", None, None)
    assert h["choice"] == "under HC1; reference law: normal." and h["region"] == ""


# --------------------------------------------------------------------------- settings, CLI

def test_settings_record_where_they_came_from_and_refuse_non_finite_numbers(demo):
    from lagwise.engine.io.settings import load_settings, settings_json
    rec = {"estimator": "kernel", "rule": "fixed", "value": 13,
           "made_by": provenance(demo).record()}
    back = load_settings(settings_json(rec))
    assert back["made_by"]["data"]["sha256"] == demo.table.report.sha256
    for bad in ('{"lagwise_settings": 2, "value": NaN}', '{"lagwise_settings": 2, '
                '"made_by": {"lagwise": "x", "other": 1}}'):
        with pytest.raises(lagwise.DataError):
            load_settings(bad)
    from lagwise.app.callbacks import landed_value
    grid = np.arange(1.0, 61.0)
    assert landed_value(float("nan"), grid) is None and landed_value(None, grid) is None
    assert landed_value(39.4, grid) == 39.0 and landed_value(400.0, grid) == 60.0


def test_cli_version_demo_and_stamped_output(capsys, demo, tmp_path):
    with pytest.raises(SystemExit) as done:
        main(["--version"])
    assert done.value.code == 0 and capsys.readouterr().out.strip() == \
        f"lagwise {lagwise.__version__}"
    assert main(["demo"]) == 0
    listed = capsys.readouterr().out
    assert str(DEMO) in listed and "shipping_panel.csv" in listed
    assert main(["demo", "shipping_panel.csv"]) == 0
    assert capsys.readouterr().out.strip() == str(demo_file("shipping_panel.csv"))
    assert main(["demo", "nope.csv"]) == 2
    assert main(["table", str(DEMO), "--response", "exret_12m", "--regressors",
                 "rate_capacity,credit_spread", "--horizon", "12"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"Lagwise comparison: {lagwise.model_line(lagwise.fit_ols(lagwise.load_table(DEMO), 'exret_12m', ['rate_capacity', 'credit_spread'], horizon=12))}"
    assert out[1].startswith(f"Made by Lagwise {lagwise.__version__}")
    assert out[2] == f"data: freight_index.csv (420 rows, SHA-256 {demo.table.report.sha256})"
    target = tmp_path / "t.tex"
    assert main(["table", str(DEMO), "--response", "exret_1m", "--regressors", "rate_capacity",
                 "--format", "latex", "--output", str(target)]) == 0
    tex = target.read_text()
    assert "\\toprule" in tex and demo.table.report.sha256 in tex and "std. error" in tex


def test_cli_panel_lines_show_fama_macbeths_own_estimate(capsys):
    path = demo_file("shipping_panel.csv")
    assert main(["panel", str(path), "--entity", "company", "--time", "month", "--response",
                 "exret", "--regressors", "book_to_market,fleet_age"]) == 0
    out = capsys.readouterr().out
    fit = lagwise.fit_panel(lagwise.load_table(path), "exret", ["book_to_market", "fleet_age"])
    fm = fit.fama_macbeth().infer("classical").table.loc["book_to_market", "estimate"]
    block = out.split("\n== book_to_market")[1].split("\n== ")[0]
    assert "each line shows its own estimate" in block
    line = [ln for ln in block.splitlines() if ln.strip().startswith("Fama-MacBeth, Classical")]
    assert line and f"{fm:.4g}" in line[0]
    pooled = [ln for ln in block.splitlines() if ln.strip().startswith("HC1")][0]
    assert f"{fit.params['book_to_market']:.4g}" in pooled


# --------------------------------------------------------------------------- the report

def test_the_report_opens_with_the_model_and_the_answer_and_leaves_out_what_was_not_run(demo):
    from lagwise.app.report import build_report
    from lagwise.app.state import STORE
    session = STORE.open_session()
    STORE.put(session, "fit:demo", demo)
    est = lagwise.estimator("kernel", bandwidth="andrews")
    res = demo.infer(est)
    html = build_report(session, "fit:demo", demo, res, demo, est, "rate_capacity", 0.95,
                        "auto", "2sls", "andrews", figs={"sens-graph": {"data": []}},
                        size_data=None, stamp=provenance(demo))
    order = [html.index(x) for x in ("Made by Lagwise", lagwise.model_line(demo), "t from ",
                                     "beta = 0 is not rejected at 5%", "<h2>Coefficients",
                                     "<h2>Every estimator", "<h2>Residual diagnostics")]
    assert order == sorted(order)
    assert "plotly-graph-div" not in html                 # no chart was computed: none shown
    assert "<h2>Size" not in html and "<h2>Instruments" not in html
    assert "<h2>Persistence" not in html                  # not computed in this session
    assert "<th class=''>std. error</th>" in html and "std_error" not in html
    assert "&lt; 0.001" in html and not re.search(r"\d\.?\d*e-\d", re.sub(r"<[^>]+>", " ", html))
    assert "every change of conclusion, curve by curve" in html
    json.dumps(html)                                       # plain text, one file
