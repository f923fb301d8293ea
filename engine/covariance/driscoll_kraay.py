"""Driscoll & Kraay (1998): a kernel over the per-period sums of a panel's moment contributions,
with every kernel, bandwidth rule, sweep and fixed-b law of the time-series machinery."""

from __future__ import annotations

import numpy as np

from ..capabilities import missing
from ..errors import SpecificationError

from .bandwidth import RULES, rule_title
from .curves import kernel_curves
from .kernel import kernel_fixed_b, kernel_long_run
from .kernels import get_kernel
from .registry import Family, Param, TuningAxis, bandwidth_grid, estimator, register_family


def period_grid(model) -> np.ndarray:
    why = missing(model.capabilities, ("panel",))
    if why:
        raise SpecificationError(why)
    return bandwidth_grid(model.period_model)


def _dk_long_run(model, *, kernel, bandwidth, small_sample, repair):
    view = model.period_model
    lr = kernel_long_run(view, kernel=kernel, bandwidth=bandwidth, small_sample=small_sample,
                          repair=repair)
    lr.S = lr.S * view.scale
    lr.span = view.nobs
    lr.notes.insert(0, f"Driscoll-Kraay: {get_kernel(kernel).label} kernel over the sums of the "
                       f"moment contributions in each of {view.nobs} periods")
    return lr


def _dk_label(p, lr) -> str:
    k = get_kernel(p["kernel"])
    text = f"Driscoll-Kraay, {k.label}, {rule_title(p['bandwidth'])}"
    if not k.psd and not p.get("repair", True):
        text += ", unrepaired"
    return text + (", N/(N-K)" if p.get("small_sample") else "")


def _dk_curve(p) -> str:
    k = get_kernel(p["kernel"])
    return f"Driscoll-Kraay, {k.label}" + (", N/(N-K)" if p.get("small_sample") else "")


def _dk_sweep(model, estimators, values):
    view = model.period_model
    ests = [estimator("kernel", kernel=e.params["kernel"], bandwidth=1.0,
                      small_sample=e.params["small_sample"], repair=e.params["repair"])
            for e in estimators]
    parts = kernel_curves(view, ests, values)
    for row in parts["long_runs"]:
        for lr in row:
            lr.span = view.nobs
    return parts


def _dk_presets(model, kernel=None, bandwidth=None) -> list:
    if kernel or bandwidth is not None:
        return [estimator("driscoll_kraay", kernel=kernel or "bartlett",
                          bandwidth=bandwidth if bandwidth is not None else "andrews")]
    out = [estimator("driscoll_kraay", kernel="bartlett", bandwidth="andrews"),
           estimator("driscoll_kraay", kernel="bartlett", bandwidth="newey-west"),
           estimator("driscoll_kraay", kernel="quadratic_spectral", bandwidth="andrews")]
    out.append((estimator("driscoll_kraay", kernel="bartlett", bandwidth="andrews"), "fixed-b",
                "fixed-b critical values account for b relative to the number of periods"))
    return out

PERIOD_BANDWIDTH = Param(
    "bandwidth", "bandwidth", "andrews",
    "bandwidth b in periods (weights k(j/b) on lag j of the per-period sums); or a rule name, "
    "applied to the per-period sums: " + ", ".join(RULES), choices=tuple(RULES))


register_family(Family(
    name="driscoll_kraay", title="Driscoll-Kraay (panel)",
    citation="Driscoll & Kraay (1998), Review of Economics and Statistics 80(4); fixed-b: "
             "Vogelsang (2012), J. Econometrics 166",
    assumptions="Errors may be correlated across entities within a period and over time (any "
                "cross-sectional dependence), with the autocorrelation of the per-period sums "
                "dying out within the bandwidth. Large-T theory: needs many periods, not many "
                "entities.",
    params=(
        Param("kernel", "kernel", "bartlett", "weight function over lags of the per-period "
              "sums"),
        PERIOD_BANDWIDTH,
        Param("small_sample", "bool", False, "multiply S by N/(N-K)",
              title="small-sample factor N/(N-K)"),
        Param("repair", "bool", True, "set negative eigenvalues of S to zero for kernels that "
              "are not PSD by construction (flagged)", title="eigenvalue repair"),
    ),
    long_run=_dk_long_run, psd=lambda p: get_kernel(p["kernel"]).psd or p["repair"],
    label=_dk_label, group="panel kernel", needs=("panel",),
    axis=TuningAxis("bandwidth", "b", "bandwidth b (periods)", period_grid,
                    help="lag j of the per-period sums gets weight k(j/b)",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    fixed_b=kernel_fixed_b, sweep=_dk_sweep, presets=_dk_presets, curve=_dk_curve,
    panel_chart=lambda p: {"small_sample": p["small_sample"], "repair": p["repair"]}))
