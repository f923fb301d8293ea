"""The Dask path: a partitioned Parquet panel through a real dask.distributed LocalCluster
(2 workers on loopback, started and shut down here) gives the same numbers as the in-memory
path to 1e-10, for every estimator it offers; what it cannot offer is a typed error."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lagwise
from tests.helpers import panel_frame

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                       dashboard_address=None, processes=True,
                                       silence_logs=40)
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.fixture(scope="module")
def frame():
    f = panel_frame(seed=31, entities=70, periods=48, k=3, drop=0.15)
    f["firm"] = "S" + f.firm.astype(str)
    f["month"] = pd.date_range("2015-01-31", periods=48, freq="ME")[f.month.to_numpy() - 1]
    f.loc[f.index[::97], "x2"] = np.nan                     # missing values are dropped
    return f


@pytest.fixture(scope="module")
def folder(frame, tmp_path_factory):
    path = tmp_path_factory.mktemp("panel")
    shuffled = frame.sample(frac=1.0, random_state=2)
    cuts = np.linspace(0, len(shuffled), 7).astype(int)
    for i, (a, b) in enumerate(zip(cuts[:-1], cuts[1:])):
        shuffled.iloc[a:b].to_parquet(path / f"part-{i}.parquet", index=False)
    return path


REGS = ["x1", "x2", "x3"]
ESTIMATORS = [lagwise.estimator("classical"), lagwise.estimator("hc0"),
              lagwise.estimator("hc1"),
              *[lagwise.estimator("cluster", by=b, small_sample=s)
                for b in ("entity", "time", "both") for s in (True, False)],
              *[lagwise.estimator("driscoll_kraay", kernel=k, bandwidth=bw)
                for k in ("bartlett", "parzen", "quadratic_spectral")
                for bw in ("andrews", "newey-west", 5.5)]]


def assert_same(a, b, ests=ESTIMATORS):
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-10, atol=1e-13)
    assert a.nobs == b.nobs and a.df_resid == b.df_resid and a.terms == b.terms
    for est in ests:
        ra, rb = a.infer(est), b.infer(est)
        np.testing.assert_allclose(ra.table.std_error, rb.table.std_error, rtol=1e-10,
                                   err_msg=est.label)
        assert ra.law == rb.law, est.label
    fb = lagwise.estimator("driscoll_kraay", kernel="bartlett", bandwidth=6.0)
    assert a.infer(fb, reference="fixed-b").critical_value == \
        pytest.approx(b.infer(fb, reference="fixed-b").critical_value, rel=1e-12)


@pytest.mark.parametrize("effects", [(), ("entity",), ("time",)])
def test_parquet_folder_on_a_local_cluster_equals_in_memory(client, frame, folder, effects):
    mem = lagwise.fit_panel(frame, "y", REGS, entity="firm", time="month", effects=effects)
    dist = lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", effects=effects,
                             client=client)
    assert isinstance(dist, lagwise.engine.distributed.PanelSummaryFit)
    assert dist.sample.dropped_missing == mem.sample.dropped_missing > 0
    assert dist.panel.n_entities == mem.panel.n_entities
    assert dist.panel.entities_with_gaps == mem.panel.entities_with_gaps
    assert_same(dist, mem)
    sw_a, sw_b = dist.sweep(["bartlett", "quadratic_spectral"]), \
        mem.sweep(["bartlett", "quadratic_spectral"])
    np.testing.assert_allclose(sw_a.std_error, sw_b.std_error, rtol=1e-10)
    ca, cb = dist.compare(), mem.compare()
    ca = ca[~ca.estimator.str.startswith("Entity clusters")]
    cb = cb[~cb.estimator.str.startswith("Entity clusters")]
    cb = cb[~cb.estimator.isin(["HC2", "HC3"])]
    np.testing.assert_allclose(ca.std_error.to_numpy(), cb.std_error.to_numpy(), rtol=1e-10)


def test_fama_macbeth_on_dask_equals_in_memory(client, frame, folder):
    mem = lagwise.fit_fama_macbeth(frame, "y", REGS, entity="firm", time="month")
    dist = lagwise.fit_fama_macbeth(folder, "y", REGS, entity="firm", time="month",
                                    client=client)
    np.testing.assert_allclose(dist.slopes.to_numpy(), mem.slopes.to_numpy(), rtol=1e-10,
                               atol=1e-12)
    for est in ("classical", lagwise.estimator("kernel", bandwidth="andrews", small_sample=True),
                lagwise.estimator("ewc")):
        np.testing.assert_allclose(dist.infer(est).table.std_error,
                                   mem.infer(est).table.std_error, rtol=1e-10)


def test_dask_dataframe_and_two_way_on_a_balanced_panel(client):
    import dask.dataframe as dd
    f = panel_frame(seed=32, entities=30, periods=25)
    mem = lagwise.fit_panel(f, "y", ["x1", "x2"], entity="firm", time="month",
                            effects="both")
    dist = lagwise.fit_panel(dd.from_pandas(f, npartitions=4), "y", ["x1", "x2"],
                             entity="firm", time="month", effects="both", client=client)
    assert_same(dist, mem, ESTIMATORS[:5])


def test_what_the_dask_path_cannot_do_is_a_typed_error(client, folder):
    fit = lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", client=client)
    with pytest.raises(lagwise.EstimationError, match="leverage"):
        fit.infer("hc3")
    with pytest.raises(lagwise.EstimationError, match="each entity's rows together"):
        fit.infer(lagwise.estimator("cluster_kernel"))
    with pytest.raises(lagwise.SpecificationError, match="two-way fixed effects on an "
                                                         "unbalanced panel"):
        lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", effects="both",
                          client=client)
    with pytest.raises(lagwise.SpecificationError, match="no column named 'size'"):
        lagwise.fit_panel(folder, "y", ["size"], entity="firm", time="month", client=client)


def test_duplicates_across_partitions_are_found(client, tmp_path):
    f = panel_frame(seed=33, entities=10, periods=12)
    f.iloc[:60].to_parquet(tmp_path / "a.parquet", index=False)
    f.iloc[55:].to_parquet(tmp_path / "b.parquet", index=False)       # rows 55-59 twice
    with pytest.raises(lagwise.DataError, match="has two rows for period"):
        lagwise.fit_panel(tmp_path, "y", ["x1"], entity="firm", time="month", client=client)


def test_cli_panel_command_on_the_cluster(client, frame, folder, tmp_path, capsys):
    from lagwise.app.cli import main
    address = client.scheduler.address
    rc = main(["panel", str(folder), "--entity", "firm", "--time", "month", "--response", "y",
               "--regressors", "x1,x2,x3", "--scheduler", address, "--format", "csv",
               "--output", str(tmp_path / "dist.csv")])
    assert rc == 0
    csv = tmp_path / "mem.csv"
    frame.to_csv(csv, index=False)
    rc = main(["panel", str(csv), "--entity", "firm", "--time", "month", "--response", "y",
               "--regressors", "x1,x2,x3", "--format", "csv", "--output",
               str(tmp_path / "mem.csv.out")])
    assert rc == 0
    a = pd.read_csv(tmp_path / "dist.csv", skiprows=1)
    b = pd.read_csv(tmp_path / "mem.csv.out", skiprows=1)
    b = b[b.estimator.isin(a.estimator)].reset_index(drop=True)
    assert len(a) >= 20 and list(a.estimator) == list(b.estimator)
    gone = a.std_error.isna()
    assert set(a.estimator[gone]) == {e for e in a.estimator if e.startswith("Entity clusters")}
    assert a.note[gone].str.contains("each entity's rows together").all()
    np.testing.assert_allclose(a.std_error[~gone], b.std_error[~gone], rtol=1e-9)


def test_cli_starts_its_own_local_cluster(folder, tmp_path):
    """`lagwise panel FOLDER` without --scheduler, as a user runs it: a local cluster on
    127.0.0.1 is started and shut down by the command."""
    import shutil
    import subprocess
    import sys
    exe = shutil.which("lagwise") or str(Path(sys.executable).with_name("lagwise"))
    out = tmp_path / "out.md"
    res = subprocess.run([exe, "panel", str(folder), "--entity", "firm", "--time", "month",
                          "--response", "y", "--regressors", "x1,x2,x3", "--effects", "entity",
                          "--format", "markdown", "--output", str(out)],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-2000:]
    assert "local Dask cluster (2 workers on 127.0.0.1)" in res.stderr
    text = out.read_text()
    assert "Driscoll-Kraay" in text and "Clustered by entity and time" in text
