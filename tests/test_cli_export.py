"""CLI comparison on the demo data and the table exports."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.app.cli import main
from lagwise.engine.export import to_csv, to_latex, to_markdown, render
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
    assert rc == 0 and "overlapping 12-period response" in out
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
