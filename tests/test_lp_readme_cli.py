"""The README's local-projection example runs, its statement about the simulated
impulse-response demo matches the engine's numbers, and the CLI (`lagwise irf`), the paper table
and the exported script give the engine's numbers."""

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lagwise
from lagwise.app.cli import main as cli_main
from lagwise.engine.io.lp_tables import lp_script, paper_table
from lagwise.engine.models.lp_inference import runs_text, significant

ROOT = Path(__file__).resolve().parent.parent
DEMO = lagwise.demo_file("fuel_freight.csv")


@pytest.fixture(scope="module")
def demo_lp():
    return lagwise.fit_local_projections(lagwise.load_table(DEMO), "freight_activity",
                                         "fuel_shock", lags=0, horizons=12)


def test_readme_local_projection_example_runs(monkeypatch):
    text = (ROOT / "README.md").read_text()
    block = [b for b in re.findall(r"```python\n(.*?)```", text, flags=re.S)
             if "fit_local_projections" in b][0]
    monkeypatch.chdir(ROOT)
    ns: dict = {"lagwise": lagwise}
    exec(compile(block, "README.md", "exec"), ns)   # noqa: S102 - our own docs
    lp, sw = ns["lp"], ns["sw"]
    assert lp.H == 12 and list(lp.samples["nobs"]) == [300 - h for h in range(13)]
    assert sw.t_stat.shape == (2, 40, 13)
    assert [f.response for f in lp.stacked.members][:2] == ["freight_activity",
                                                            "freight_activity, lead 1"]


def test_readme_demo_statement_holds(demo_lp):
    """README: at 90%, with lags 0 and horizons 0..12: Newey-West with 2 lags is significant at
    h = 0-2 and stops at h = 3 (its sup-t band excludes zero at h = 0 only); the horizon rule at
    h = 0-1; Bartlett with each horizon's Andrews bandwidth at h = 0; EWC and lag-augmented HC0
    at no horizon. The generator's docstring says the true response is zero."""
    lp = demo_lp
    expected = {"nw2": "0-2", "rule": "0-1", "andrews": "0", "ewc": "none", "la": "none"}
    ests = {"nw2": lagwise.estimator("kernel", kernel="bartlett", lags=2),
            "rule": lagwise.horizon_rule(),
            "andrews": lagwise.estimator("kernel", kernel="bartlett", bandwidth="andrews"),
            "ewc": lagwise.estimator("ewc"), "la": lagwise.lag_augmented()}
    for key, est in ests.items():
        b = lp.bands(est, 0.90)
        assert runs_text(significant(b), b.index) == expected[key], key
    tab = lp.significance([ests["nw2"]], 0.90)
    assert tab["stops_at"].iloc[0] == 3
    sup = lp.bands(ests["nw2"], 0.90, "sup-t")
    assert runs_text(significant(sup), sup.index) == "0"
    readme = (ROOT / "README.md").read_text()
    for phrase in ("finds a significant response at h = 0-2", "at h = 0-1",
                   "Andrews bandwidth at h = 0 only", "at no horizon",
                   "stops being significant at h = 3", "still excludes\nzero at h = 0"):
        assert phrase in readme, phrase
    source = (ROOT / "demo_data" / "make_fuel_freight.py").read_text()
    assert "does NOT respond" in source
    # the generator reproduces the committed file
    sys.path.insert(0, str(ROOT / "demo_data"))
    try:
        import make_fuel_freight as gen
    finally:
        sys.path.pop(0)
    fresh = gen.generate()
    table = lagwise.load_table(DEMO).frame
    np.testing.assert_allclose(table["freight_activity"].to_numpy(),
                               fresh["freight_activity"].to_numpy())


def test_cli_irf_prints_the_engine_numbers(demo_lp, capsys, tmp_path):
    rc = cli_main(["irf", str(DEMO), "--response", "freight_activity", "--shock", "fuel_shock",
                   "--lags", "0", "--horizons", "12"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "Bartlett, b = 3: significant at h = 0-2; stops being significant at h = 3" in out
    assert "lag-augmented HC0 (p + 1 lags): significant at no horizon; never significant" in out
    se = demo_lp.irf(lagwise.estimator("kernel", kernel="bartlett", lags=2))["std_error"]
    assert f"{se.iloc[7]:.3f}" in out
    path = tmp_path / "irf.csv"
    rc = cli_main(["irf", str(DEMO), "--response", "freight_activity", "--shock", "fuel_shock",
                   "--lags", "0", "--horizons", "6", "--estimator", "bartlett:3",
                   "--estimator", "lag-augmented", "--format", "csv", "--output", str(path)])
    frame = pd.read_csv(path, comment="#")
    assert rc == 0 and list(frame["h"]) == list(range(7))
    assert frame.columns[3].startswith("(1) Bartlett")
    rc = cli_main(["irf", str(DEMO), "--response", "freight_activity", "--shock", "fuel_shock",
                   "--horizons", "200"])
    assert rc == 2
    assert "horizons H = 200" in capsys.readouterr().err


def test_cli_irf_entry_point_and_bootstrap():
    out = subprocess.run([sys.executable, "-m", "lagwise.app.cli", "irf", str(DEMO),
                          "--response", "freight_activity", "--shock", "fuel_shock",
                          "--controls", "diesel_margin", "--lags", "1", "--horizons", "4",
                          "--bootstrap", "block", "--bootstrap-reps", "300"],
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert "moving-block bootstrap" in out.stdout and "diesel_margin" in out.stdout


def test_paper_table_and_script_reproduce_the_bands(demo_lp, tmp_path):
    est = lagwise.estimator("kernel", kernel="bartlett", lags=2)
    frame, caption, notes = paper_table(demo_lp, [est, lagwise.lag_augmented()], 0.90)
    se = demo_lp.irf(est, 0.90)["std_error"]
    assert frame.iloc[0, 3] == f"{se.iloc[0]:.3f}*+" and frame.iloc[3, 3] == f"{se.iloc[3]:.3f}"
    assert "[own estimates]" in frame.columns[4]
    assert any("Montiel Olea" in n for n in notes)
    script = lp_script("fuel_freight.csv", True, [], demo_lp, est, 0.90)
    path = tmp_path / "view.py"
    path.write_text(script)
    out = subprocess.run([sys.executable, str(path)], capture_output=True, text=True,
                         timeout=300)
    assert out.returncode == 0, out.stderr
    assert f"{se.iloc[0]:.6f}" in out.stdout


def test_page_callbacks_show_the_engine_numbers(demo_lp):
    """The mode's callbacks, called as the page calls them: the table by horizon, the reading,
    every estimator's conclusion and the exported tables come from the engine's numbers."""
    from lagwise.app import projections as P
    from lagwise.app.state import STORE
    session = STORE.open_session()
    STORE.put(session, "lp-test", demo_lp)
    fig, rows, reading, assumes, _ = P.on_lp_view("lp-test", "kernel", [], "fixed", 3, 0.9,
                                                  "auto", "current", ["supt", "overlay"], [],
                                                  session, 3)
    t = demo_lp.irf(lagwise.estimator("kernel", kernel="bartlett", bandwidth=3.0), 0.9)
    assert [r["std_error"] for r in rows] == pytest.approx(list(t["std_error"]), rel=1e-12)
    assert rows[0]["verdict"] == "rejected (sup-t too)" and rows[3]["verdict"] == "not rejected"
    assert "stops being significant at h = 3" in str(reading)
    assert len(fig.data) == 5 + 2 * 5               # band, sup-t, estimate, 5 overlays
    assert "autocorrelated" in assumes
    _, compare, notes = P.on_lp_flips("lp-test", "kernel", [], "fixed", 3, 0.9, "auto",
                                      "current", [], session, 3)
    assert compare[0]["significant_at"] == "0-2" and compare[0]["stops_at"] == "3"
    assert {r["significant_at"] for r in compare[-2:]} == {"none"}
    assert "h = 0: b < 15" in str(notes)
    est = P.lp_estimator("current", "kernel", [], [], "fixed", 3)
    frame, _, _ = P.lp_table_frame("lp-table", demo_lp, est, 0.9, "auto")
    np.testing.assert_allclose(frame["ci_low"], t["ci_low"], rtol=1e-12)
    frame, _, _ = P.lp_table_frame("lp-compare", demo_lp, est, 0.9, "auto")
    assert list(frame["significant_at"][:1]) == ["0-2"]
    frame, caption, notes = P.lp_table_frame("lp-paper", demo_lp, est, 0.9, "auto")
    assert "freight_activity" in caption and len(frame.columns) == 3 + 5
