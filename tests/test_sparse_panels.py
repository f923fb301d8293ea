"""No quadratic grids from sparse panels (issue 21, item 10).

A sparse 60,000-row panel (30,000 entities, each seen twice, over about 20,000 periods) runs the
entity-clusters-plus-time-kernel estimator and the panel diagnostics in seconds and within a few
hundred MiB (run in a child process with an address-space limit, so the old dense grids fail
there instead of exhausting the machine). On small panels the row-based computations equal the
dense ones and brute force (hypothesis), to 1e-10.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import lagwise
from lagwise.engine.models.panel import within_lag_products
from lagwise.engine.studies import panel_diagnostics as pd_diag

EXAMPLES = int(os.environ.get("LAGWISE_FUZZ_EXAMPLES", "60"))

SPARSE = textwrap.dedent("""
    import json, time, tracemalloc
    import numpy as np, pandas as pd
    import lagwise
    from lagwise.engine.studies.panel_diagnostics import diagnose_panel
    rng = np.random.default_rng(0)
    n_e = 30_000
    e = np.repeat(np.arange(n_e), 2)
    first = rng.integers(0, 20_000, size=n_e)
    t = np.empty(2 * n_e, dtype=int)
    t[::2], t[1::2] = first, first + 1 + rng.integers(0, 50, size=n_e)
    frame = pd.DataFrame({"firm": e, "day": t, "x": rng.normal(size=2 * n_e)})
    frame["y"] = frame.x + rng.normal(size=2 * n_e)
    fit = lagwise.fit_panel(frame, "y", ["x"], entity="firm", time="day")
    tracemalloc.start()
    out = {"rows": fit.nobs, "periods": fit.panel.n_periods}
    start = time.perf_counter()
    for b in (10.0, "andrews"):
        res = fit.infer(lagwise.estimator("cluster_kernel", bandwidth=b))
        assert np.isfinite(res.table.std_error).all()
    out["cluster_kernel_s"] = time.perf_counter() - start
    start = time.perf_counter()
    report = diagnose_panel(fit)
    out["diagnostics_s"] = time.perf_counter() - start
    out["notes"] = report.notes
    out["peak_bytes"] = tracemalloc.get_traced_memory()[1]
    print(json.dumps(out))
""")


def _limit_memory():
    cap = 3 * 1024**3
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))


def test_a_sparse_60000_row_panel_finishes_fast_in_bounded_memory():
    run = subprocess.run([sys.executable, "-c", SPARSE], capture_output=True, text=True,
                         timeout=90, preexec_fn=_limit_memory)
    assert run.returncode == 0, run.stderr[-1500:]
    out = json.loads(run.stdout.strip().splitlines()[-1])
    assert out["rows"] == 60_000 and out["periods"] > 15_000
    assert out["cluster_kernel_s"] < 10, out
    assert out["diagnostics_s"] < 20, out
    assert out["peak_bytes"] < 300 * 2**20, out


# --------------------------------------------------------------------------- equal to dense

@st.composite
def small_panels(draw):
    n_e = draw(st.integers(2, 8))
    n_t = draw(st.integers(3, 14))
    m = draw(st.integers(1, 3))
    keep = draw(st.lists(st.booleans(), min_size=n_e * n_t, max_size=n_e * n_t))
    cells = [(i, t) for i in range(n_e) for t in range(n_t) if keep[i * n_t + t]]
    if len(cells) < 3:
        cells = [(i, t) for i in range(n_e) for t in range(n_t)][:3]
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    perm = rng.permutation(len(cells))
    e = np.array([cells[p][0] for p in perm])
    t = np.array([cells[p][1] for p in perm])
    return e, t, rng.normal(size=(len(cells), m)), n_e, n_t


def brute_lags(g, e, t, n_t):
    m = g.shape[1]
    out = np.zeros((n_t, m, m))
    for i in range(len(g)):
        for j in range(len(g)):
            if e[i] == e[j] and t[i] >= t[j]:
                out[t[i] - t[j]] += np.outer(g[i], g[j])
    return out


fast = settings(max_examples=EXAMPLES, derandomize=True, deadline=None,
                suppress_health_check=[HealthCheck.too_slow])


@fast
@given(panel=small_panels())
def test_within_lag_products_equal_brute_force_by_every_route(panel):
    e, t, g, n_e, n_t = panel
    want = brute_lags(g, e, t, n_t)
    for method in ("auto", "pairs", "fft"):
        got = within_lag_products(g, e, t, n_e, n_t, method)
        np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-10 * np.abs(want).max())


@fast
@given(panel=small_panels())
def test_pesaran_cd_from_rows_equals_the_dense_grid(panel):
    e, t, g, n_e, n_t = panel
    resid = g[:, 0]
    dense = pd_diag.pesaran_cd(resid, e, t, n_e, n_t, min_overlap=2)
    rows = pd_diag.pesaran_cd(resid, e, t, n_e, n_t, min_overlap=2, dense_cells=0)
    assert dense[1:] == rows[1:]
    if np.isfinite(dense[0]):
        assert abs(dense[0] - rows[0]) <= 1e-10 * max(1.0, abs(dense[0]))
    else:
        assert not np.isfinite(rows[0])


def dense_within_acf(resid, e, t, n_e, n_t, nl):
    """The former dense computation, kept here as the reference."""
    dense = np.full((n_t, n_e), np.nan)
    dense[t, e] = resid
    present = np.isfinite(dense)
    d = np.where(present, dense, 0.0)
    denom = float((d**2).sum())
    out = np.full(nl, np.nan)
    for j in range(1, nl + 1):
        both = present[j:] & present[:-j]
        out[j - 1] = float((d[j:] * d[:-j])[both].sum()) / denom
    return out


@fast
@given(panel=small_panels())
def test_within_autocorrelation_from_rows_equals_the_dense_grid(panel):
    e, t, g, n_e, n_t = panel
    nl = max(1, min(12, n_t // 4))
    got = pd_diag.within_autocorrelation(g[:, 0], e, t, nl)
    want = dense_within_acf(g[:, 0], e, t, n_e, n_t, nl)
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-12)


def wooldridge_reference(fit):
    """Wooldridge's statistic by explicit loops over each entity's consecutive periods."""
    p = fit.panel
    X, y = fit._raw if fit._raw is not None else (fit.X[:, 1:], fit.y)
    rows = {(int(a), int(b)): i for i, (a, b) in enumerate(zip(p.entity_codes, p.time_codes))}
    pairs = [(rows[(a, b)], rows[(a, b - 1)], a, b) for (a, b) in rows if (a, b - 1) in rows]
    pairs.sort(key=lambda r: (r[2], r[3]))
    dx = np.array([X[c] - X[q] for c, q, _, _ in pairs])
    dy = np.array([y[c] - y[q] for c, q, _, _ in pairs])
    coef = np.linalg.lstsq(dx, dy, rcond=None)[0]
    u = {(a, b): dy[k] - dx[k] @ coef for k, (_, _, a, b) in enumerate(pairs)}
    lagged = [(u[k], u[(k[0], k[1] - 1)], k[0]) for k in u if (k[0], k[1] - 1) in u]
    a = np.array([r[0] for r in lagged])
    b = np.array([r[1] for r in lagged])
    ent = np.array([r[2] for r in lagged])
    rho = a @ b / (b @ b)
    resid = a - rho * b
    sums = np.bincount(ent, weights=b * resid, minlength=p.n_entities)
    groups = np.count_nonzero(np.bincount(ent, minlength=p.n_entities))
    var = groups / (groups - 1.0) * (sums @ sums) / (b @ b) ** 2
    return (rho + 0.5) ** 2 / var, rho


@pytest.mark.parametrize("seed", range(4))
def test_wooldridge_from_sorted_rows_equals_a_reference_loop(seed):
    rng = np.random.default_rng(seed)
    rows = [(i, t) for i in range(40) for t in range(12) if rng.random() < 0.8]
    frame = pd.DataFrame(rows, columns=["firm", "month"])
    frame["x"] = rng.normal(size=len(frame))
    frame["y"] = 0.5 * frame.x + rng.normal(size=len(frame))
    fit = lagwise.fit_panel(frame, "y", ["x"], entity="firm", time="month", effects="entity")
    f, _, _, _, rho = pd_diag.wooldridge_serial(fit)
    f_ref, rho_ref = wooldridge_reference(fit)
    assert abs(f - f_ref) <= 1e-10 * max(1.0, abs(f_ref)) and abs(rho - rho_ref) <= 1e-12


def test_the_dask_paths_cell_map_is_checked_against_its_budget(tmp_path, monkeypatch):
    from lagwise.engine.distributed import panel as dpanel
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"firm": np.repeat(np.arange(50), 2),
                          "day": rng.permutation(1000)[:100], "x": rng.normal(size=100)})
    frame["y"] = frame.x + rng.normal(size=100)
    frame.to_parquet(tmp_path / "part.parquet", index=False)
    monkeypatch.setattr(dpanel, "MAX_CELL_MAP", 1000, raising=False)
    with pytest.raises(lagwise.EstimationError, match=r"50 x 100 = 5,000 cells"):
        lagwise.fit_panel(tmp_path, "y", ["x"], entity="firm", time="day")
