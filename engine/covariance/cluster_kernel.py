"""Entity clusters plus a kernel over time across entities (Thompson 2011; Cameron, Gelbach &
Miller 2011)."""

from __future__ import annotations

import numpy as np

from ..errors import EstimationError
from . import longrun
from .bandwidth import RULES, check_bandwidth_range, resolve_bandwidth, rule_title
from .cluster import one_way
from .driscoll_kraay import PERIOD_BANDWIDTH, period_grid
from .kernels import Kernel, get_kernel
from .registry import Family, Param, TuningAxis, estimator, register_family


def within_kernel(model, kernel: Kernel, bandwidth: float) -> np.ndarray:
    """(1/N) sum_i [W_0 + sum_j k(j/b) (W_j + W_j')] with W_j = sum_t g_it g_i,t-j' within each
    entity: a kernel over time inside each entity (the overlap of clustering by entity and a
    time kernel)."""
    w = model.within_lags()
    check_bandwidth_range(bandwidth, w.shape[0])
    lags = kernel.lags_used(bandwidth, w.shape[0])
    weights = kernel.weights([bandwidth], lags + 1)[0]
    s = w[0].copy()
    if lags:
        part = np.tensordot(weights[1:], w[1:lags + 1], axes=(0, 0))
        s += part + part.T
    return s / model.nobs


def _ck_long_run(model, *, kernel, bandwidth, small_sample):
    kern = get_kernel(kernel)
    view = model.period_model
    choice = resolve_bandwidth(view, kern, bandwidth)
    b = choice.b
    s_e, groups, fe = one_way(model, "entity", small_sample)
    s_dk, lags, _, status = longrun.kernel_many(view, kern, [b], repair=False)
    if status[0] == "collapsed":
        raise EstimationError(f"the {kern.label} estimate over the per-period sums is zero at "
                              f"b = {b:g}; choose a smaller bandwidth")
    s_w = within_kernel(model, kern, b)
    fk = model.small_sample_factor if small_sample else 1.0
    out = longrun.LongRun(S=None, bandwidth=float(b), lags=int(lags[0]), factor=fe,
                          how=choice.explanation, tuning=float(b), span=view.nobs)
    out.S = longrun.clip_to_psd(s_e + fk * (s_dk[0] * view.scale - s_w),
                                "entity-cluster plus time-kernel", out)
    out.flags |= choice.flags
    out.notes = [f"clustered by entity ({groups} clusters) plus a {kern.label} kernel over time "
                 f"across entities (b = {b:.3g} periods), minus the within-entity overlap"] \
        + choice.notes + out.notes
    return out


register_family(Family(
    name="cluster_kernel", title="Entity clusters + time kernel (panel)",
    citation="Thompson (2011), J. Financial Economics 99(1); Cameron, Gelbach & Miller (2011)",
    assumptions="A firm's errors may be correlated over any horizon (clustered by entity); "
                "errors of different firms may be correlated within a period and at nearby "
                "periods, dying out within the bandwidth (a kernel over time). Needs many "
                "entities and many periods.",
    params=(
        Param("kernel", "kernel", "bartlett", "weight function over lags in time"),
        PERIOD_BANDWIDTH,
        Param("small_sample", "bool", True,
              "entity term times G/(G-1) x (N-1)/(N-K), time-kernel terms times N/(N-K)",
              title="small-sample factors"),
    ),
    long_run=_ck_long_run, psd=lambda p: True,
    label=lambda p, lr: f"Entity clusters + {get_kernel(p['kernel']).label} over time, "
                        f"{rule_title(p['bandwidth'])}"
                        + ("" if p["small_sample"] else ", no small-sample factors"),
    group="panel kernel", needs=("panel",),
    axis=TuningAxis("bandwidth", "b", "bandwidth b (periods)", period_grid,
                    help="lag j in time across entities gets weight k(j/b)",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    curve=lambda p: f"Entity clusters + {get_kernel(p['kernel']).label} over time",
    panel_chart=None,
    presets=lambda model, kernel, bandwidth: [estimator(
        "cluster_kernel", kernel=kernel or "bartlett",
        bandwidth=bandwidth if bandwidth is not None else "andrews")]))
