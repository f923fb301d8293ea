"""Kernel HAC estimators of S (Newey & West 1987; Andrews 1991): every registered kernel, every
bandwidth rule, optional prewhitening and eigenvalue repair, fixed-b laws."""

from __future__ import annotations

from ..errors import SpecificationError
from ..laws.reference import FixedB
from . import longrun
from .bandwidth import RULES, resolve_bandwidth, rule_title
from .curves import kernel_curves
from .kernels import KERNELS, fixed_b_unavailable, get_kernel
from .prewhiten import prewhitened_kernel
from .registry import (SMALL_SAMPLE, Family, Param, TuningAxis, bandwidth_grid, estimator,
                       register_family, small_sample_label)


def kernel_long_run(model, *, kernel, bandwidth, small_sample, repair, prewhiten=False):
    k = get_kernel(kernel)
    if prewhiten:
        return prewhitened_kernel(model, k, bandwidth, small_sample=small_sample, repair=repair)
    choice = resolve_bandwidth(model, k, bandwidth)
    lr = longrun.kernel(model, k, choice.b, small_sample=small_sample, repair=repair,
                        how=choice.explanation)
    lr.flags |= choice.flags
    lr.notes += choice.notes
    return lr


def _kernel_label(p, lr) -> str:
    k = get_kernel(p["kernel"])
    text = f"{k.label}, {rule_title(p['bandwidth'])}"
    if p.get("prewhiten"):
        text += ", prewhitened"
    if not k.psd and not p.get("repair", True):
        text += ", unrepaired"
    return text + small_sample_label(p)


def _kernel_curve(p) -> str:
    k = get_kernel(p["kernel"])
    return k.label + (", prewhitened" if p.get("prewhiten") else "") \
        + (", unrepaired" if not k.psd and not p.get("repair", True) else "") \
        + small_sample_label(p)


def kernel_fixed_b(p, lr, info):
    if p.get("prewhiten"):
        raise SpecificationError("fixed-b critical values here assume no prewhitening")
    why = fixed_b_unavailable(p["kernel"])
    if why:
        raise SpecificationError(why)
    return FixedB(p["kernel"], lr.bandwidth / (lr.span or info.nobs), get_kernel(p["kernel"]).label)


def _kernel_presets(model, kernel=None, bandwidth=None) -> list:
    """Each kernel at the requested bandwidth (default: the Andrews plug-in); Bartlett with the
    Newey-West (1994) and rule-of-thumb bandwidths; for an overlapping h-period response also the
    truncated kernel with L = h - 1 and Bartlett with L = h under normal and fixed-b critical
    values (the errors are MA(h-1)). Items are estimators or (estimator, law request, why)."""
    names = [kernel] if kernel else list(KERNELS)
    out = [estimator("kernel", kernel=n, bandwidth=bandwidth if bandwidth is not None
                     else "andrews") for n in names]
    if bandwidth is None and not kernel:
        out.append(estimator("kernel", kernel="bartlett", bandwidth="newey-west"))
        out.append(estimator("kernel", kernel="bartlett", bandwidth="rule-of-thumb"))
    h = model.horizon
    if h and h > 1:
        why = (f"overlapping {h}-period response: the errors are MA({h - 1}), so lags up to "
               f"{h - 1} carry the autocorrelation")
        out.append((estimator("kernel", kernel="truncated", lags=h - 1), None, why))
        out.append((estimator("kernel", kernel="bartlett", lags=h), None, why))
        if h + 1 <= model.nobs:
            out.append((estimator("kernel", kernel="bartlett", lags=h), "fixed-b",
                        why + "; fixed-b critical values account for b/T"))
    return out


register_family(Family(
    name="kernel", title="Kernel HAC",
    citation="Newey & West (1987); Andrews (1991), Econometrica 59(3)",
    assumptions="Errors may be heteroskedastic and autocorrelated, with autocorrelation that "
                "dies out within roughly the bandwidth. Large-sample (normal) theory; with a "
                "large bandwidth relative to T the normal critical values are too small "
                "(prefer fixed-b).",
    params=(
        Param("kernel", "kernel", "bartlett", "weight function over lags"),
        Param("bandwidth", "bandwidth", "andrews",
              "real bandwidth b (weights k(j/b)); Newey-West with L lags is Bartlett with "
              "b = L + 1; or a rule name: " + ", ".join(RULES), choices=tuple(RULES)),
        SMALL_SAMPLE,
        Param("repair", "bool", True,
              "set negative eigenvalues of S to zero when a kernel that is not PSD by "
              "construction (truncated, Tukey-Hanning) produces them; flagged when applied",
              title="eigenvalue repair"),
        Param("prewhiten", "bool", False,
              "Andrews-Monahan VAR(1) prewhitening of the moment contributions before the "
              "kernel, then recolouring", title="prewhiten"),
    ),
    long_run=kernel_long_run, psd=lambda p: get_kernel(p["kernel"]).psd or p["repair"],
    label=_kernel_label, group="kernel",
    axis=TuningAxis("bandwidth", "b", "bandwidth b", bandwidth_grid,
                    help="lag j gets weight k(j/b); kernels vanishing beyond |x| = 1 use "
                         "ceil(b) - 1 lags",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    fixed_b=kernel_fixed_b, sweep=kernel_curves, presets=_kernel_presets, curve=_kernel_curve,
    quadratic=lambda p: not p["prewhiten"] and (get_kernel(p["kernel"]).psd or not p["repair"]),
    companions=lambda p: [{**p, "kernel": k, "bandwidth": 1.0} for k in KERNELS],
    kernel_of=lambda p: None if p["prewhiten"] else p["kernel"],
    needs=("time_ordered",)))
