"""The few-cluster demo (simulated: demo_data/regional_panel.csv, 14 invented regions of very
unequal size) shows what it is for: clustered by region, CR1 referred to t(G - 1) rejects
subsidy = 0 at 5% while CR2 with Bell-McCaffrey df and the wild cluster bootstrap do not; the
statement holds in the engine, the CLI and the app's card (its functions; the browser test
drives the page). Also the card's and the CLI's typed errors."""

from __future__ import annotations

import numpy as np
import pytest

import lagwise
from lagwise._files import demo_file
from lagwise.app import clusters as C
from lagwise.app.cli import main
from lagwise.app.derived import dataset_from_bytes
from lagwise.app.state import STORE


@pytest.fixture(scope="module")
def demo():
    table = lagwise.load_table(demo_file(C.FEW_DEMO))
    fit = lagwise.fit_panel(table, "growth", ["subsidy", "size"], entity="firm", time="year",
                            clusters=C.grouping_columns(table, exclude=("firm", "year")))
    return table, fit


def test_cr1_rejects_while_cr2_and_the_bootstrap_do_not(demo):
    _, fit = demo
    est = lambda **kw: lagwise.estimator("cluster", by="region", **kw)      # noqa: E731
    cr1 = fit.infer(est()).table.loc["subsidy"]
    cr2 = fit.infer(est(correction="cr2", df="bell-mccaffrey")).table.loc["subsidy"]
    assert cr1.p_value < 0.05 < cr2.p_value
    boot = lagwise.wild_cluster_bootstrap(fit, "subsidy", by="region", reps=9999)
    exact = lagwise.wild_cluster_bootstrap(fit, "subsidy", by="region", reps=99_999)
    assert exact.enumerated and exact.reps == 2 ** 14
    assert boot.p_value > 0.05 and exact.p_value > 0.05
    assert exact.ci[0] < 0 < exact.ci[1]
    s = lagwise.cluster_summary(fit, "region")
    assert s.n_clusters == 14 and s.sizes["max"] >= 10 * s.sizes["median"]
    assert "not to be trusted" in s.reading[0]


def test_the_cli_shows_it(tmp_path, capsys):
    path = str(demo_file(C.FEW_DEMO))
    rc = main(["bootstrap", path, "--entity", "firm", "--time", "year", "--response", "growth",
               "--regressors", "subsidy,size", "--coefficient", "subsidy", "--cluster", "region"])
    out = capsys.readouterr().out
    assert rc == 0
    lines = {ln.split()[0]: ln for ln in out.splitlines() if ln.startswith("  ") and ln.split()}
    assert lines["CR1"].rstrip().endswith(" rejected") and "not rejected" not in lines["CR1"]
    boot = next(ln for ln in out.splitlines() if ln.startswith("  wild bootstrap"))
    assert "not rejected" in lines["CR2"] and "not rejected" in boot
    assert "14 bootstrap clusters" in out and "not to be trusted" in out
    rc = main(["panel", path, "--entity", "firm", "--time", "year", "--response", "growth",
               "--regressors", "subsidy,size", "--cluster", "region", "--no-fama-macbeth",
               "--format", "csv", "--output", str(tmp_path / "out.csv")])
    assert rc == 0
    import pandas as pd
    comp = pd.read_csv(tmp_path / "out.csv", comment="#")
    sub = comp[comp.term == "subsidy"].set_index("estimator")
    assert bool(sub.loc["Clustered by region", "rejects"]) is True
    assert bool(sub.loc["Clustered by region, CR2, Bell-McCaffrey df", "rejects"]) is False
    # typed errors on the command line: a message naming the value, exit code 2
    rc = main(["bootstrap", path, "--entity", "firm", "--time", "year", "--response", "growth",
               "--regressors", "subsidy", "--coefficient", "subsidy", "--cluster", "region",
               "--reps", "50"])
    assert rc == 2 and "got 50" in capsys.readouterr().err


def test_the_card_shows_it_and_its_errors(demo):
    table, fit = demo
    sid = STORE.open_session()
    key, _ = dataset_from_bytes(sid, demo_file(C.FEW_DEMO).read_bytes(), C.FEW_DEMO)
    STORE.put(sid, "fit:demo", fit)
    style, options, by = C.on_fc_options("fit:demo", None, sid)
    assert style == {} and by == "region" and {"entity", "time", "both", "region"} == \
        {o["value"] for o in options}
    reading, facts, rows, notes = C.on_fc_view("fit:demo", "region", "subsidy", 0.95, sid)
    verdicts = {r["estimator"]: r["verdict"] for r in rows}
    assert verdicts["CR1, t(G - 1)"] == "rejected"
    assert verdicts["CR2, Bell-McCaffrey df"] == "not rejected"
    assert "14 clusters" in facts and "not to be trusted" in str(reading)
    dfs = {r["estimator"]: r["df"] for r in rows}
    assert dfs["CR1, t(G - 1)"] == 13 and 1 < dfs["CR2, Bell-McCaffrey df"] < 13
    # a grouping with an undefined setting shows the reason in its row, the others still work
    _, _, rows, _ = C.on_fc_view("fit:demo", "both", "subsidy", 0.95, sid)
    both = {r["estimator"]: r for r in rows}
    assert both["CR1, t(G - 1)"]["verdict"] != "not available"
    assert "needs one-way clustering" in both["CR2, Bell-McCaffrey df"]["note"]
    # the bootstrap request: typed errors come back as a message, nothing is queued
    from lagwise.app.studies import job_manager
    job_manager()
    token, status = C.on_fc_boot_request(1, "fit:demo", "subsidy", "region", 9999, "gaussian",
                                         0, 0.95, sid)
    assert not isinstance(token, str) and "'gaussian'" in str(status)
    token, status = C.on_fc_boot_request(1, "fit:demo", "subsidy", "region", 9999,
                                         "rademacher", 0, 0.95, sid)
    assert isinstance(token, str) and "running" in str(status)
    row = C.bootstrap_row({**lagwise.wild_cluster_bootstrap(fit, "subsidy", by="region")
                          .to_dict(), "fkey": "fit:demo"})
    assert row["verdict"] == "not rejected" and row["bootstrap"]
    assert np.isfinite(row["p_value"])


def test_readme_few_cluster_example_runs(monkeypatch):
    import re
    from pathlib import Path
    root = Path(__file__).resolve().parent.parent
    block = [b for b in re.findall(r"```python\n(.*?)```", (root / "README.md").read_text(),
                                   flags=re.S) if "wild_cluster_bootstrap(" in b][0]
    monkeypatch.chdir(root)
    ns: dict = {"lagwise": lagwise}
    exec(compile(block, "README.md", "exec"), ns)   # noqa: S102 - our own docs
    assert ns["cr2"].table.loc["subsidy", "p_value"] > 0.05
    assert ns["boot"].p_value > 0.05 and ns["summary"].n_clusters == 14
    assert ns["piv"].panel.effects == ("entity",) and ns["piv"].core.endogenous == \
        ["charter_cover"]
