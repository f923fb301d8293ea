"""CLI comparison on the demo data and the table exports."""

import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.app.cli import main
from lagwise.engine.io.tables import to_csv, to_latex, to_markdown, render
from lagwise._files import demo_file

DEMO = str(demo_file())


def test_table_command_prints_comparison(capsys):
    rc = main(["table", DEMO, "--response", "exret_12m", "--regressors",
               "rate_capacity,credit_spread", "--horizon", "12"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "== rate_capacity" in out and "HC3" in out and "Quadratic Spectral" in out
    # the numbers printed are the engine's numbers
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m", ["rate_capacity", "credit_spread"])
    se = fit.infer("hc1").table.loc["rate_capacity", "std_error"]
    assert f"{se:.4g}" in out
    # overlapping response: truncated with L = h - 1 = 11 lags and Bartlett with L = h = 12
    assert "Truncated (uniform), b = 12" in out and "Bartlett, b = 13" in out


@pytest.mark.parametrize("fmt,marker", [("csv", "term,estimator"), ("markdown", "| term |"),
                                        ("latex", "\\begin{tabular}")])
def test_table_command_formats(tmp_path, fmt, marker):
    out = tmp_path / f"t.{fmt}"
    rc = main(["table", DEMO, "--response", "exret_1m", "--regressors", "rate_capacity",
               "--format", fmt, "--output", str(out), "--kernel", "parzen", "--lags", "6"])
    assert rc == 0
    text = out.read_text()
    assert marker in text and "Parzen" in text


def test_table_command_transform_and_errors(capsys):
    rc = main(["table", DEMO, "--response", "exret_1m, sum of next 12", "--regressors",
               "rate_capacity", "--transform", "sum-next:exret_1m:12"])
    out = capsys.readouterr().out
    assert rc == 0 and "overlap h = 12" in out and "T = 408 (12 lost to leads and lags)" in out
    rc = main(["table", DEMO, "--response", "exret_1m", "--regressors", "nope"])
    assert rc == 2
    assert "no column named 'nope'" in capsys.readouterr().err


def test_console_script_runs_as_module():
    res = subprocess.run([sys.executable, "-m", "lagwise.app.cli", "table", DEMO, "--response",
                          "exret_1m", "--regressors", "credit_spread"],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert "credit_spread" in res.stdout


def test_csv_export_escapes_formula_cells_but_not_numbers():
    df = pd.DataFrame({"label": ["=1+1", "+cmd", "@x", "-2", "ok"], "value": [-1.5, 2, 3, 4, 5]})
    text = to_csv(df, index=False)
    assert "'=1+1" in text and "'+cmd" in text and "'@x" in text and "'-2" in text
    assert "\n'=1+1,-1.5\n" in text


def test_markdown_and_latex():
    df = pd.DataFrame({"std_error": [0.1234567, np.nan]}, index=pd.Index(["a_1", "b|c"],
                                                                         name="term"))
    md = to_markdown(df)
    assert "| a_1 | 0.1235 |" in md and "b\\|c" in md
    tex = to_latex(df, caption="50% & more")
    assert "a\\_1" in tex and "50\\% \\& more" in tex
    with pytest.raises(ValueError):
        render(df, "docx")


def _pdflatex():
    import os
    import shutil
    exe = shutil.which("pdflatex")
    if exe is None:
        if os.environ.get("LAGWISE_REQUIRE_LATEX") == "1":
            pytest.fail("pdflatex not found; LAGWISE_REQUIRE_LATEX=1 makes this a failure")
        pytest.skip("pdflatex not installed (.ci/run installs texlive-latex-base and "
                    "texlive-latex-recommended)")
    return exe


def latex_document(body: str) -> str:
    """A document around exported LaTeX, loading exactly the packages the exports' own
    "% needs \\usepackage{...}" comments name (so the comment is checked too)."""
    needed = sorted(set(re.findall(r"^% needs \\usepackage\{(\w+)\}", body, re.M)))
    return ("\\documentclass{article}\n\\usepackage[utf8]{inputenc}\n"
            "\\usepackage[margin=1cm,landscape]{geometry}\n"
            + "".join(f"\\usepackage{{{p}}}\n" for p in needed)
            + "\\begin{document}\n" + body + "\n\\end{document}\n")


def test_latex_exports_compile_with_awkward_text(tmp_path):
    """Tables with names and notes holding LaTeX and HTML specials, comparison signs and line
    breaks compile under pdflatex; Markdown escapes HTML and keeps one line per row."""
    exe = _pdflatex()
    frame = pd.DataFrame({"term\nname": ["x_1 & <y>", "50% $ #"], "p": ["≤0.001", "<0.001"],
                          "t": [-2.5, np.nan]})
    fit = lagwise.fit_ols(lagwise.load_table(DEMO), "exret_12m", ["rate_capacity"])
    res = fit.infer(lagwise.estimator("kernel", kernel="bartlett", bandwidth=13),
                    reference="fixed-b")
    comp = lagwise.compare(fit)
    body = "\n".join([
        to_latex(frame, index=False, caption="odd {caption} ~ ^", notes=["note: a < b, 1 ± 2"]),
        render(res.table.reset_index(), "latex", index=False, caption=res.describe(),
               notes=res.notes),
        render(comp[["estimator", "std_error", "p_value", "reference", "note", "why"]], "latex",
               index=False)])
    rules = [ln for ln in body.splitlines() if not ln.startswith("%")]
    assert rules.count("\\toprule") == 3 and rules.count("\\bottomrule") == 3
    assert "\\hline" not in body
    doc = tmp_path / "t.tex"
    doc.write_text(latex_document(body))
    out = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", doc.name],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stdout[-2000:]
    assert (tmp_path / "t.pdf").stat().st_size > 1000
    md = to_markdown(frame, index=False)
    assert "&lt;y&gt;" in md and "term name" in md and len(md.strip().splitlines()) == 4


def test_csv_keeps_numbers_and_notes_go_first():
    text = render(pd.DataFrame({"estimate": [-1.25, 3.0], "label": ["-neg", "ok"]}), "csv",
                  index=False, caption="95% intervals", notes=["reference law: normal"])
    lines = text.splitlines()
    assert lines[0] == "# 95% intervals" and lines[1] == "# reference law: normal"
    assert lines[3].startswith("-1.25,'-neg")


def test_settings_from_an_earlier_version_load_through_a_mapping():
    from lagwise.engine.io.settings import load_settings
    old = {"lagwise_settings": 1, "transforms": [["fsum", "exret_1m", 12]],
           "response": "fsum12(exret_1m)", "regressors": ["lag1(x)"], "estimator": "ewc",
           "params": {"terms": 10}, "rule": "fixed", "bandwidth": 10}
    s = load_settings(__import__("json").dumps(old))
    assert s["transforms"] == [["sum-next", "exret_1m", 12]]
    assert s["response"] == "exret_1m, sum of next 12" and s["regressors"] == ["x, lag 1"]
    assert s["params"] == {"cosines": 10} and s["value"] == 10
    hc = load_settings(__import__("json").dumps({"lagwise_settings": 1, "estimator": "hc3"}))
    assert hc["estimator"] == "hc" and hc["params"] == {"kind": "hc3"}


@pytest.mark.parametrize("record,message", [
    ({"estimator": "kernel", "params": {"kernel": "zzz"}}, "kernel='zzz'"),
    ({"estimator": "nope"}, "unknown estimator"),
    ({"level": 2}, "level"),
    ({"regressors": "x"}, "regressors"),
    ({"transforms": [["cube", "x", 1]]}, "unknown transform"),
    ({"window": [0, "end"]}, "window"),
    ({"extra": 1}, "unknown entries"),
    ({"estimator": "ewc", "rule": "andrews"}, "does not belong"),
    ({"params": {"a": {"b": {"c": {"d": 1}}}}}, "nested too deeply"),
])
def test_bad_settings_get_one_clear_message(record, message):
    import json
    from lagwise.engine.io.settings import load_settings
    with pytest.raises(lagwise.DataError, match=message):
        load_settings(json.dumps({"lagwise_settings": 2, **record}))
    with pytest.raises(lagwise.DataError, match="at most"):
        load_settings(b"{" + b" " * 200_000 + b"}")


def test_cli_studies_and_progress_bars_silent_without_a_terminal(tmp_path, monkeypatch):
    """--horizons, --bootstrap and --size-check run from the command line; their progress bars
    (tqdm) draw on a terminal and stay silent when stderr is not one."""
    import io
    import subprocess
    import sys
    from lagwise.app import cli
    out = subprocess.run([sys.executable, "-m", "lagwise.app.cli", "table", DEMO, "--response",
                          "exret_12m", "--regressors", "rate_capacity", "--horizon", "12",
                          "--one-period", "exret_1m", "--horizons", "6", "--size-check", "40",
                          "--bootstrap", "wild"], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    assert "t statistic of rate_capacity by horizon h" in out.stdout
    assert "Size of each nominal 5% test of rate_capacity = 0" in out.stdout
    assert "percentile-t" in out.stdout and "IVX" in out.stdout
    assert "size check" not in out.stderr and "%|" not in out.stderr      # no bar: not a tty

    class Terminal(io.StringIO):
        def isatty(self):
            return True
    for tty, drawn in ((True, True), (False, False)):
        buf = Terminal() if tty else io.StringIO()
        monkeypatch.setattr(sys, "stderr", buf)
        bar = cli.progress_bar(10, "size check")
        bar.update(5)
        bar.close()
        assert ("size check" in buf.getvalue()) is drawn
