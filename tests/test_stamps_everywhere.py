"""Every export states where it came from (issue 22, item 6), also for the modes built beside
the first read: the factor model, local projections and the few-cluster card, in the app and on
the command line. The stamp is checked against the file itself: hashlib's SHA-256 of its bytes
and pandas' count of its rows (outside references), and the installed version."""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import plotly.graph_objects as go
import pytest
from dash._callback_context import context_value
from dash._utils import AttributeDict

import lagwise
from lagwise._files import demo_file
from lagwise.app.cli import main

FACTOR_DEMO = demo_file("strategy_portfolios.csv")
LP_DEMO = demo_file("fuel_freight.csv")
FEW_DEMO = demo_file("regional_panel.csv")


def stamp_of(path):
    """What every export must say about `path`: version, the file's name, rows and SHA-256."""
    rows = len(pd.read_csv(path, comment="#"))
    return [f"Made by Lagwise {lagwise.__version__}", path.name, f"{rows:,} rows",
            hashlib.sha256(path.read_bytes()).hexdigest()]


def assert_stamped(text, path):
    for part in stamp_of(path):
        assert part in text, part


def clicked(component: dict):
    """The Dash callback context of a click on a pattern-matching component."""
    prop = json.dumps(component, separators=(",", ":"), sort_keys=True) + ".n_clicks"
    return context_value.set(AttributeDict(triggered_inputs=[{"prop_id": prop, "value": 1}]))


# --------------------------------------------------------------------------- command line

def test_cli_factors_bootstrap_and_irf_state_the_stamp(capsys, tmp_path):
    cols = pd.read_csv(FACTOR_DEMO, nrows=1).columns
    assets = ",".join(c for c in cols if c.startswith("P"))
    args = ["factors", str(FACTOR_DEMO), "--assets", assets, "--factors",
            "market,carry,defensive", "--risk-free", "rf", "--no-premia"]
    assert main(args) == 0
    assert_stamped(capsys.readouterr().out, FACTOR_DEMO)
    assert main(args + ["--format", "csv", "--output", str(tmp_path / "f.csv")]) == 0
    assert_stamped((tmp_path / "f.csv").read_text(), FACTOR_DEMO)
    assert main(["bootstrap", str(FEW_DEMO), "--entity", "firm", "--time", "year",
                 "--response", "growth", "--regressors", "subsidy,size", "--coefficient",
                 "subsidy", "--cluster", "region", "--reps", "999"]) == 0
    assert_stamped(capsys.readouterr().out, FEW_DEMO)
    irf = ["irf", str(LP_DEMO), "--response", "freight_activity", "--shock", "fuel_shock",
           "--horizons", "4"]
    assert main(irf) == 0
    assert_stamped(capsys.readouterr().out, LP_DEMO)
    assert main(irf + ["--format", "latex", "--output", str(tmp_path / "lp.tex")]) == 0
    tex = (tmp_path / "lp.tex").read_text()
    assert_stamped(tex, LP_DEMO)
    assert all(line.startswith("%") for line in tex.splitlines() if "SHA-256" in line)


# --------------------------------------------------------------------------- the app

@pytest.fixture(scope="module")
def session():
    from lagwise.app.main import create_app
    from lagwise.app.state import STORE
    create_app()
    return STORE.open_session()


def test_factor_mode_exports_are_stamped(session):
    from lagwise.app import factors as FA
    from lagwise.app.derived import dataset_from_bytes
    from lagwise.app.state import STORE
    key, _ = dataset_from_bytes(session, FACTOR_DEMO.read_bytes(), FACTOR_DEMO.name)
    opts = FA.on_factor_options(key, session, None, None, None, None)
    spec, _ = FA.on_factor_spec(["on"], opts[1], opts[3], opts[5], [], None)
    fkey = FA.factor_fit(session, key, spec, [0, 479], None)[0]
    model = STORE.get(session, fkey)
    ids = [{"type": "est-param", "name": n} for n in ("kernel", "small_sample", "repair",
                                                       "prewhiten")]
    vals = ["bartlett", [], ["on"], []]
    state = (session, fkey, "kernel", vals, ids, "andrews", 10, "auto", 0.95, [])
    token = clicked({"type": "fm-export", "target": "fm-alpha-table", "format": "markdown"})
    try:
        out = FA.on_factor_export([1], None, None, *state)
    finally:
        context_value.reset(token)
    assert_stamped(out["content"], FACTOR_DEMO)
    assert lagwise.model_line(model) in out["content"]
    token = clicked({"type": "fm-export", "target": "fm-paper", "format": "latex"})
    try:
        out = FA.on_factor_export([1], None, None, *state)
    finally:
        context_value.reset(token)
    assert_stamped(out["content"], FACTOR_DEMO)
    fig = go.Figure(go.Scatter(x=[0, 1], y=[1, 2])).update_layout(title="alphas").to_dict()
    token = clicked({"type": "fm-export", "target": "fm-alpha-graph", "format": "svg"})
    try:
        out = FA.on_factor_export([1], fig, None, *state)
    finally:
        context_value.reset(token)
    import base64
    svg = base64.b64decode(out["content"]).decode()
    meta = svg.split("<metadata", 1)[1].split("</metadata>", 1)[0]
    assert f"Lagwise {lagwise.__version__}" in meta
    assert_stamped(meta.replace(f"Lagwise {lagwise.__version__}",
                                f"Made by Lagwise {lagwise.__version__}"), FACTOR_DEMO)
    assert lagwise.model_line(model) in svg.replace("&amp;", "&")


def test_local_projection_exports_are_stamped(session):
    from lagwise.app import projections as P
    from lagwise.app.derived import dataset_from_bytes
    from lagwise.app.state import STORE
    dkey, table = dataset_from_bytes(session, LP_DEMO.read_bytes(), LP_DEMO.name)
    lp = lagwise.fit_local_projections(table, "freight_activity", "fuel_shock", horizons=4)
    STORE.put(session, "lp-stamp", lp)
    common = ("lp-stamp", dkey, "kernel", [], [], "fixed", 3, 0.9, "auto", "current", session)
    for target, fmt in (("lp-table", "csv"), ("lp-paper", "html"), ("lp-script", "py")):
        token = clicked({"type": "export-lp", "target": target, "fmt": fmt})
        try:
            out = P.on_lp_export([1], None, None, *common)
        finally:
            context_value.reset(token)
        assert_stamped(out["content"], LP_DEMO)
        assert lp.line in out["content"], target


def test_few_cluster_card_export_is_stamped(session):
    from lagwise.app import clusters as C
    from lagwise.app.state import STORE
    table = lagwise.load_table(FEW_DEMO)
    fit = lagwise.fit_panel(table, "growth", ["subsidy", "size"], entity="firm", time="year",
                            clusters=C.grouping_columns(table, exclude=("firm", "year")))
    STORE.put(session, "fit:few-stamp", fit)
    token = clicked({"type": "export-fc", "fmt": "markdown"})
    try:
        out = C.on_fc_export([1], "fit:few-stamp", "region", "subsidy", 0.95, None, session)
    finally:
        context_value.reset(token)
    assert_stamped(out["content"], FEW_DEMO)
    assert lagwise.model_line(fit) in out["content"]
