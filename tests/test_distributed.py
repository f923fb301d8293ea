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
    assert list(ca.estimator) == list(cb.estimator)
    # the comparison offers the same rows; CR2 with effects outside the clusters needs the
    # rows in memory and says so on the Dask path
    gone = ca.std_error.isna() & cb.std_error.notna()
    assert ca.note[gone].str.contains("not nested in the clusters").all()
    assert (gone.sum() > 0) == bool(effects)
    np.testing.assert_allclose(ca.std_error[~gone].to_numpy(), cb.std_error[~gone].to_numpy(),
                               rtol=1e-10)


#: Estimators that need a further pass (leverage, per-cluster blocks, within-entity lags)
FURTHER = [lagwise.estimator("hc2"), lagwise.estimator("hc3"),
           lagwise.estimator("cluster_kernel", kernel="bartlett", bandwidth=4.0),
           lagwise.estimator("cluster_kernel", kernel="parzen", bandwidth="andrews")]


def nested_cr(effects):
    """The CR2/CR3 settings the Dask path computes for these effects: by the effects' own
    dimension, or by either dimension (and both) for a pooled panel."""
    dims = ("entity", "time", "both") if not effects else tuple(effects) if len(effects) == 1 \
        else ()
    return [lagwise.estimator("cluster", by=b, correction=c, df=d)
            for b in dims for c in ("cr2", "cr3")
            for d in (("clusters", "bell-mccaffrey") if b != "both" else ("clusters",))]


@pytest.mark.parametrize("effects", [(), ("entity",), ("time",)])
def test_leverage_blocks_and_within_lags_on_the_cluster_equal_in_memory(client, frame, folder,
                                                                          effects):
    """HC2/HC3, CR2/CR3 (with Bell-McCaffrey df) and entity clusters + a time kernel on the
    Dask path (a further pass; the rows of an entity are spread over the files here, so the
    within-entity lags come after a shuffle) equal the in-memory path to 1e-10."""
    mem = lagwise.fit_panel(frame, "y", REGS, entity="firm", time="month", effects=effects)
    dist = lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", effects=effects,
                             client=client)
    ests = FURTHER + nested_cr(effects)
    for est in ests:
        ra, rb = dist.infer(est), mem.infer(est)
        np.testing.assert_allclose(ra.table.std_error, rb.table.std_error, rtol=1e-10,
                                   err_msg=est.label)
        np.testing.assert_allclose(np.asarray(ra.law.df, dtype=float),
                                   np.asarray(rb.law.df, dtype=float), rtol=1e-10)
    if effects:
        other = "time" if effects == ("entity",) else "entity"
        with pytest.raises(lagwise.EstimationError, match="not nested in the clusters"):
            dist.infer(lagwise.estimator("cluster", by=other, correction="cr2"))


def test_two_way_effects_on_an_unbalanced_panel_equal_in_memory(client, frame, folder):
    """Two-way fixed effects on the unbalanced panel: exact on the Dask path (the smaller
    dimension's dummies projected out by a system of its size) against alternating projections
    in memory."""
    mem = lagwise.fit_panel(frame, "y", REGS, entity="firm", time="month", effects="both")
    dist = lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", effects="both",
                             client=client)
    assert not mem.panel.balanced and dist.panel.absorbed == mem.panel.absorbed
    assert_same(dist, mem)
    for est in FURTHER[2:]:
        np.testing.assert_allclose(dist.infer(est).table.std_error,
                                   mem.infer(est).table.std_error, rtol=1e-10)
    for fit in (mem, dist):             # no closed-form leverage here, in memory or on Dask
        with pytest.raises(lagwise.EstimationError, match="leverage"):
            fit.infer("hc2")
    with pytest.raises(lagwise.EstimationError, match="not nested"):
        dist.infer(lagwise.estimator("cluster", by="entity", correction="cr2"))


def test_within_lags_partition_by_partition_when_entities_stay_whole(client, frame, tmp_path):
    """Files holding whole entities: the within-entity lag products come from the further
    pass itself (no shuffle), equal to in memory."""
    ents = np.sort(frame.firm.unique())
    for i, part in enumerate(np.array_split(ents, 4)):
        frame[frame.firm.isin(part)].to_parquet(tmp_path / f"p{i}.parquet", index=False)
    mem = lagwise.fit_panel(frame, "y", REGS, entity="firm", time="month", effects="entity")
    dist = lagwise.fit_panel(tmp_path, "y", REGS, entity="firm", time="month",
                             effects="entity", client=client)
    assert not dist._source[1]["entities_split"]
    for est in FURTHER:
        np.testing.assert_allclose(dist.infer(est).table.std_error,
                                   mem.infer(est).table.std_error, rtol=1e-10)


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
    fit = lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", client=client,
                            effects="both")
    with pytest.raises(lagwise.EstimationError, match="leverage"):
        fit.infer("hc3")
    with pytest.raises(lagwise.EstimationError, match="not nested in the clusters"):
        fit.infer(lagwise.estimator("cluster", by="entity", correction="cr2"))
    with pytest.raises(lagwise.EstimationError, match="rows of the panel"):
        lagwise.wild_cluster_bootstrap(fit, "x1", by="entity")
    with pytest.raises(lagwise.SpecificationError, match="clustering by a column"):
        lagwise.fit_panel(folder, "y", REGS, entity="firm", time="month", client=client,
                          clusters="x1")
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
    a = pd.read_csv(tmp_path / "dist.csv", comment="#")
    b = pd.read_csv(tmp_path / "mem.csv.out", comment="#")
    b = b[b.estimator.isin(a.estimator)].reset_index(drop=True)
    assert len(a) >= 20 and list(a.estimator) == list(b.estimator)
    np.testing.assert_allclose(a.std_error, b.std_error, rtol=1e-9)


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
