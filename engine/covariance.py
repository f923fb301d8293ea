"""The estimator registry and the sandwich V = Q^-1 S Q^-1 / T.

Each estimator is registered once, with its display name, published reference, parameters,
assumptions and whether it is positive semi-definite by construction. The CLI, the comparison
table, the sweep and the app are generated from this registry: adding an estimator is one
`register(...)` call plus its tests (tests/test_estimator_contract.py runs the common contract
over every registered estimator).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from . import longrun
from .errors import SpecificationError
from .kernels import KERNELS, get_kernel


@dataclass(frozen=True)
class Param:
    """One estimator parameter: its kind drives validation and the app's control."""

    name: str
    kind: str     # "choice" | "bandwidth" | "bool" | "int" | "float" | "int_or_rule"
    default: Any
    help: str
    choices: tuple = ()
    minimum: float | None = None


@dataclass(frozen=True)
class EstimatorSpec:
    name: str
    display_name: str
    reference: str
    assumptions: str
    params: tuple[Param, ...]
    compute: Callable[..., longrun.LongRun]
    psd: Callable[[dict], bool]
    has_bandwidth: bool = False
    family: str = "other"
    #: configurations shown in the comparison table: presets(fit, kernel, bandwidth) -> list
    presets: Callable[..., list] | None = None


ESTIMATORS: dict[str, EstimatorSpec] = {}


def register(spec: EstimatorSpec) -> EstimatorSpec:
    if spec.name in ESTIMATORS:
        raise ValueError(f"estimator {spec.name!r} registered twice")
    ESTIMATORS[spec.name] = spec
    return spec


class Estimator:
    """A registered estimator with validated parameters; produces S for a fit."""

    def __init__(self, spec: EstimatorSpec, params: dict):
        self.spec = spec
        self.params = params

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def psd(self) -> bool:
        return self.spec.psd(self.params)

    @property
    def label(self) -> str:
        """Short human label, e.g. 'Parzen, b=12' or 'HC1'."""
        p = self.params
        if self.name == "ewc":
            return f"EWC, B: {p['terms']}" if isinstance(p["terms"], str) else f"EWC, B={p['terms']}"
        if self.name == "var":
            if p["criterion"] == "fixed":
                return f"VAR({'auto' if p['max_lag'] is None else p['max_lag']}) fixed"
            return f"VAR-HAC, {p['criterion'].upper()}" + (
                "" if p["max_lag"] is None else f", max {p['max_lag']}")
        if self.spec.has_bandwidth:
            k = get_kernel(p["kernel"]).display_name
            bw = p["bandwidth"]
            bw_txt = f"b={bw:g}" if isinstance(bw, (int, float)) else f"b: {bw}"
            extra = ""
            if p.get("prewhiten"):
                extra += ", prewhitened"
            return f"{k}, {bw_txt}{extra}"
        return self.spec.display_name

    def long_run(self, fit) -> longrun.LongRun:
        return self.spec.compute(fit, **self.params)

    def __repr__(self):
        return f"estimator({self.name!r}, " + ", ".join(f"{k}={v!r}" for k, v in
                                                        self.params.items()) + ")"


def _validate(spec: EstimatorSpec, given: dict) -> dict:
    known = {p.name: p for p in spec.params}
    unknown = set(given) - set(known)
    if unknown:
        raise SpecificationError(f"estimator '{spec.name}' has no parameter "
                                 + ", ".join(f"'{u}'" for u in sorted(unknown))
                                 + (f"; its parameters are {', '.join(known)}" if known
                                    else "; it takes no parameters"))
    out = {}
    for p in spec.params:
        value = given.get(p.name, p.default)
        if p.kind == "choice":
            if value not in p.choices:
                raise SpecificationError(f"{spec.name}: {p.name}={value!r} is not one of "
                                         f"{', '.join(map(str, p.choices))}")
        elif p.kind == "bool":
            if not isinstance(value, (bool, np.bool_)):
                raise SpecificationError(f"{spec.name}: {p.name} must be true or false, "
                                         f"got {value!r}")
            value = bool(value)
        elif p.kind in ("int", "float"):
            if value is not None:
                if isinstance(value, bool) or not isinstance(value, (int, float, np.number)) \
                        or not np.isfinite(value):
                    raise SpecificationError(f"{spec.name}: {p.name} must be a number, "
                                             f"got {value!r}")
                if p.kind == "int":
                    if float(value) != int(value):
                        raise SpecificationError(f"{spec.name}: {p.name} must be a whole number, "
                                                 f"got {value!r}")
                    value = int(value)
                else:
                    value = float(value)
                if p.minimum is not None and value < p.minimum:
                    raise SpecificationError(f"{spec.name}: {p.name} must be at least "
                                             f"{p.minimum:g}, got {value!r}")
        elif p.kind == "int_or_rule":
            if isinstance(value, str):
                if value not in p.choices:
                    raise SpecificationError(f"{spec.name}: {p.name}={value!r} is not a whole "
                                             f"number or one of {', '.join(p.choices)}")
            elif isinstance(value, bool) or not isinstance(value, (int, np.integer, float)) \
                    or not float(value).is_integer() or value < (p.minimum or 1):
                raise SpecificationError(f"{spec.name}: {p.name} must be a whole number >= "
                                         f"{p.minimum or 1:g} or one of {', '.join(p.choices)}, "
                                         f"got {value!r}")
            else:
                value = int(value)
        elif p.kind == "bandwidth":
            from .bandwidth import check_bandwidth_setting
            value = check_bandwidth_setting(value)
        out[p.name] = value
    return out


def estimator(name: str, **params) -> Estimator:
    """Configure a registered estimator, e.g. estimator("kernel", kernel="parzen", bandwidth=8)."""
    try:
        spec = ESTIMATORS[name]
    except KeyError:
        raise SpecificationError(f"unknown estimator {name!r}; choose one of "
                                 f"{', '.join(ESTIMATORS)}") from None
    if spec.has_bandwidth and "lags" in params:
        lags = params.pop("lags")
        if "bandwidth" in params:
            raise SpecificationError("give either lags or bandwidth, not both")
        if isinstance(lags, bool) or not isinstance(lags, (int, np.integer)) or lags < 0:
            raise SpecificationError(f"lags must be a whole number >= 0, got {lags!r}")
        params["bandwidth"] = float(lags) + 1.0
    return Estimator(spec, _validate(spec, params))


def estimators() -> list[EstimatorSpec]:
    """Every registered estimator specification, in registration order."""
    return list(ESTIMATORS.values())


# --------------------------------------------------------------------------- registrations

_SMALL = Param("small_sample", "bool", False,
               "multiply S by T/(T-k), a finite-sample inflation; off by default as in most "
               "software's HAC")

register(EstimatorSpec(
    name="classical", display_name="Classical (iid)",
    reference="Ordinary least squares textbook formula s^2 (X'X)^-1",
    assumptions="Errors are uncorrelated over time and have constant variance. Understates "
                "uncertainty when either fails.",
    params=(), compute=lambda fit: longrun.classical(fit), psd=lambda p: True, family="iid",
    presets=lambda fit, kernel, bandwidth: [estimator("classical")]))

for _kind, _ref, _txt in (
        ("hc0", "White (1980), Econometrica 48(4)",
         "Errors uncorrelated over time; variance may change with the regressors. Biased "
         "downward in small samples."),
        ("hc1", "MacKinnon & White (1985), J. Econometrics 29",
         "HC0 times T/(T-k): the same assumptions, a simple small-sample inflation."),
        ("hc2", "MacKinnon & White (1985), J. Econometrics 29",
         "Weights squared residuals by 1/(1-h_tt); unbiased under homoskedasticity."),
        ("hc3", "MacKinnon & White (1985); Davidson & MacKinnon (1993) approximation",
         "Weights by 1/(1-h_tt)^2; conservative, recommended when influential points exist.")):
    register(EstimatorSpec(
        name=_kind, display_name=_kind.upper(), reference=_ref, assumptions=_txt, params=(),
        compute=(lambda kind: (lambda fit: longrun.heteroskedasticity_robust(fit, kind)))(_kind),
        psd=lambda p: True, family="hc",
        presets=(lambda kind: (lambda fit, kernel, bandwidth: [estimator(kind)]))(_kind)))


def _kernel_compute(fit, *, kernel, bandwidth, small_sample, repair, prewhiten=False):
    from .bandwidth import resolve_bandwidth
    k = get_kernel(kernel)
    if prewhiten:
        from .prewhiten import prewhitened_kernel
        return prewhitened_kernel(fit, k, bandwidth, small_sample=small_sample, repair=repair)
    b, rule = resolve_bandwidth(fit, k, bandwidth)
    return longrun.kernel(fit, k, b, small_sample=small_sample, repair=repair, rule=rule)


register(EstimatorSpec(
    name="kernel", display_name="Kernel HAC",
    reference="Newey & West (1987); Andrews (1991), Econometrica 59(3)",
    assumptions="Errors may be heteroskedastic and autocorrelated, with autocorrelation that "
                "dies out within roughly the bandwidth. Large-sample (normal) theory; with a "
                "large bandwidth relative to T the normal critical values are too small "
                "(prefer fixed-b).",
    params=(
        Param("kernel", "choice", "bartlett", "weight function over lags",
              choices=tuple(KERNELS)),
        Param("bandwidth", "bandwidth", "andrews",
              "real bandwidth b (weights k(j/b)); Newey-West with L lags is Bartlett with "
              "b = L + 1; or a rule name"),
        _SMALL,
        Param("repair", "bool", True,
              "set negative eigenvalues of S to zero when a kernel that is not PSD by "
              "construction (truncated, Tukey-Hanning) produces them; flagged when applied"),
        Param("prewhiten", "bool", False,
              "Andrews-Monahan VAR(1) prewhitening of the scores before the kernel, then "
              "recolouring"),
    ),
    compute=_kernel_compute, psd=lambda p: get_kernel(p["kernel"]).psd or p["repair"],
    has_bandwidth=True, family="kernel", presets=lambda fit, kernel, bandwidth:
    _kernel_presets(fit, kernel, bandwidth)))


def _kernel_presets(fit, kernel=None, bandwidth=None) -> list:
    """Each kernel at the requested bandwidth (default: the Andrews plug-in); for an
    overlapping h-period response also the truncated kernel with L = h - 1, Bartlett with
    L = h under normal and fixed-b critical values (the errors are MA(h-1)).
    Items are estimators or (estimator, reference law, why) tuples."""
    names = [kernel] if kernel else list(KERNELS)
    out = [estimator("kernel", kernel=n, bandwidth=bandwidth if bandwidth is not None
                     else "andrews") for n in names]
    if bandwidth is None and not kernel:
        out.append(estimator("kernel", kernel="bartlett", bandwidth="newey-west"))
        out.append(estimator("kernel", kernel="bartlett", bandwidth="rule-of-thumb"))
    h = getattr(fit, "horizon", None)
    if h and h > 1:
        why = (f"overlapping {h}-period response: the errors are MA({h - 1}), so lags up to "
               f"{h - 1} carry the autocorrelation")
        out.append((estimator("kernel", kernel="truncated", lags=h - 1), None, why))
        out.append((estimator("kernel", kernel="bartlett", lags=h), None, why))
        if h + 1 <= fit.nobs:
            out.append((estimator("kernel", kernel="bartlett", lags=h), "fixed-b",
                        why + "; fixed-b critical values account for b/T"))
    return out


register(EstimatorSpec(
    name="var", display_name="Parametric VAR (VAR-HAC)",
    reference="den Haan & Levin (1997), Handbook of Statistics 15, ch. 12",
    assumptions="The scores follow a finite-order stationary VAR; S is its implied spectrum at "
                "frequency zero. Positive semi-definite; can be far off if the VAR is "
                "misspecified or close to a unit root (refused when non-stationary).",
    params=(
        Param("max_lag", "int", None, "largest VAR order tried (default int(T^(1/3)))",
              minimum=0),
        Param("criterion", "choice", "bic", "lag order by BIC or AIC, or 'fixed' to use exactly "
              "max_lag lags (max_lag=1: the VAR(1) parametric correction)",
              choices=("bic", "aic", "fixed")),
        Param("selection", "choice", "equation", "choose the order per equation or jointly",
              choices=("equation", "joint")),
    ),
    compute=lambda fit, **p: longrun.var_parametric(fit, **p), psd=lambda p: True,
    family="parametric",
    presets=lambda fit, kernel, bandwidth: [estimator("var"),
                                            estimator("var", max_lag=1, criterion="fixed")]))

register(EstimatorSpec(
    name="ewc", display_name="Equal-weighted cosine (EWC)",
    reference="Lazarus, Lewis, Stock & Watson (2018), JBES 36(4); Mueller (2007)",
    assumptions="Autocorrelation may be strong; B low-frequency cosine averages estimate S and "
                "the t statistic is referred to t(B), F(m, B-m+1) for m restrictions, which keeps "
                "tests close to their size at the cost of some power. Assumes stationarity.",
    params=(
        Param("terms", "int_or_rule", "llsw", "number of cosine terms B, or 'llsw' = "
              "floor(0.4 T^(2/3))", choices=("llsw",), minimum=1),
        _SMALL,
    ),
    compute=lambda fit, **p: longrun.ewc(fit, **p), psd=lambda p: True, family="ewc",
    presets=lambda fit, kernel, bandwidth: [estimator("ewc")]))
