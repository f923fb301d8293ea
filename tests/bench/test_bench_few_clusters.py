"""Few-cluster benchmarks (not in the default run):

    nice -n 10 python -m pytest tests/bench -m bench -s -k few_clusters

1. The wild cluster bootstrap: B = 99,999 restricted replications (Rademacher weights) of one
   coefficient at N = 100,000, k = 10, G = 50 unequal clusters, after the fit: the public call
   `wild_cluster_bootstrap(fit, ...)` (setup of the O(N k) pieces, every replication, the
   p-value), then with the interval by inversion, against the reference loop a user would
   otherwise write (build y*, refit by least squares, CR1 t; one replication at a time), timed
   on 40 replications and scaled to B. Medians over rounds in one process; one BLAS thread for
   both (the loop is slower with more on this shared machine; the engine limits itself).
2. CR2 with Bell-McCaffrey degrees of freedom at N = 1,000,000, k = 10, 50 clusters of 20,000
   rows: the k x k form (no n_g x n_g matrix).
"""

from __future__ import annotations

import json
import statistics
import time

import numpy as np
import pandas as pd
import pytest

import lagwise

pytestmark = pytest.mark.bench
N, K, G, B = 100_000, 10, 50, 99_999
DENSE_REPS = 40


def make_frame(n=N, k=K, g=G, seed=0, equal=False):
    rng = np.random.default_rng(seed)
    if equal:
        sizes = np.full(g, n // g)
    else:
        w = rng.gamma(1.0, size=g)
        sizes = np.maximum(2, np.round(w / w.sum() * n)).astype(int)
        sizes[-1] += n - sizes.sum()
    codes = np.repeat(np.arange(g), sizes)
    X = np.column_stack([rng.normal(size=n) + rng.normal(size=g)[codes] for _ in range(k - 1)])
    y = X @ rng.normal(size=k - 1) * 0.1 + rng.normal(size=g)[codes] + rng.normal(size=n)
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(1, k)])
    frame["y"], frame["g"] = y, codes
    return frame


def dense_loop(X, y, codes, j, null, V):
    """The reference loop: for each weight vector, y* = X b~ + u~ o v, least squares, CR1 t."""
    n, k = X.shape
    G_ = codes.max() + 1
    XtX = X.T @ X
    M = np.linalg.inv(XtX)
    b = M @ (X.T @ y)
    c = np.zeros(k)
    c[j] = 1.0
    bt = b - M @ c * (c @ b - null) / (c @ M @ c)
    ut = y - X @ bt
    fac = G_ / (G_ - 1.0) * (n - 1.0) / (n - k)
    out = np.empty(V.shape[1])
    for r in range(V.shape[1]):
        ys = X @ bt + ut * V[codes, r]
        bs = np.linalg.solve(XtX, X.T @ ys)
        sc = np.bincount(codes, weights=(X @ M[:, j]) * (ys - X @ bs), minlength=G_)
        out[r] = (bs[j] - null) / np.sqrt(fac * sc @ sc)
    return out


def median_of(fn, rounds):
    times, out = [], None
    for _ in range(rounds):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), times, out


def test_few_clusters_wild_bootstrap_speed():
    from threadpoolctl import threadpool_limits
    frame = make_frame()
    regs = [f"x{j}" for j in range(1, K)]
    fit = lagwise.fit_ols(frame, "y", regs, clusters="g")
    run = lambda ci: lagwise.wild_cluster_bootstrap(fit, "x3", by="g", reps=B,  # noqa: E731
                                                    seed=1, ci=ci)
    t_p, all_p, res = median_of(lambda: run(False), 7)
    t_ci, all_ci, res_ci = median_of(lambda: run(True), 5)
    X = np.column_stack([np.ones(N), frame[regs].to_numpy()])
    V = lagwise.engine.studies.wild_bootstrap.draw_weights(np.random.default_rng(5),
                                                            "rademacher", G, DENSE_REPS)
    with threadpool_limits(limits=1):
        t_d, _, _ = median_of(lambda: dense_loop(X, frame.y.to_numpy(), frame.g.to_numpy(), 3,
                                                 0.0, V), 3)
    dense_scaled = t_d / DENSE_REPS * B
    report = {"N": N, "k": K, "G": G, "cluster_sizes": [int(frame.g.value_counts().min()),
                                                        int(frame.g.value_counts().max())],
              "B": B, "weights": "rademacher",
              "p_value_after_fit_s_median (setup + replications)": round(t_p, 4),
              "p_value_rounds_s": [round(t, 4) for t in all_p],
              "p_value_and_interval_s_median": round(t_ci, 4),
              "dense_loop_ms_per_replication": round(t_d / DENSE_REPS * 1e3, 3),
              "dense_loop_scaled_to_B_s": round(dense_scaled, 1),
              "ratio_dense_over_fast": round(dense_scaled / t_p),
              "result": {"t": round(res.t_stat, 4), "p": res.p_value,
                         "ci": [round(v, 6) for v in res_ci.ci]}}
    print("\nBENCH wild cluster bootstrap", json.dumps(report, indent=1))
    assert res.p_value == res_ci.p_value
    assert t_p < 0.2


def test_few_clusters_cr2_at_a_million_rows():
    frame = make_frame(n=1_000_000, g=50, seed=2, equal=True)
    regs = [f"x{j}" for j in range(1, K)]
    t0 = time.perf_counter()
    fit = lagwise.fit_ols(frame, "y", regs, clusters="g")
    t_fit = time.perf_counter() - t0
    est = lagwise.estimator("cluster", by="g", correction="cr2", df="bell-mccaffrey")
    t_cr2, _, res = median_of(lambda: fit.infer(est), 1)
    t_again, _, _ = median_of(lambda: fit.infer(est), 3)
    blocks = fit.cluster_blocks("g")
    report = {"N": 1_000_000, "k": K, "clusters": "50 x 20,000 rows",
              "fit_s": round(t_fit, 2), "cr2_with_bm_df_first_s (blocks + pieces)":
                  round(t_cr2, 2), "cr2_with_bm_df_again_s_median (blocks cached)":
                  round(t_again, 3), "dense_clusters": len(blocks.small),
              "bm_df_range": [round(float(np.min(res.law.df)), 2),
                              round(float(np.max(res.law.df)), 2)]}
    print("\nBENCH CR2 at 1e6 rows", json.dumps(report, indent=1))
    assert blocks.small == []
