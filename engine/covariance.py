"""Estimator families: the unit of extension.

A family is defined once, here or in its own module with `register_family`: its parameters (with
validation and help text), how it estimates S, whether the estimate is PSD, the label built from
its parameters, its tuning axis (kernel bandwidth b, EWC's number of cosines B, the VAR order) with
the grid the sensitivity chart uses, its reference law (and fixed-b law where it has one), its
sweep along the axis (default: one `infer` per grid point), and the configurations the comparison
table shows. The app, the CLI, the comparison and the contract tests are generated from this
registry; no code elsewhere switches on a family's name.

`estimator(name, **params)` configures one: a family name, or a shorthand such as "hc1"
(= family "hc" with kind "hc1").
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from . import laws, longrun
from .bandwidth import RULES, check_bandwidth_setting, resolve_bandwidth, rule_title
from .errors import EstimationError, LagwiseError, SpecificationError
from .kernels import KERNELS, get_kernel


@dataclass(frozen=True)
class Param:
    """One estimator parameter: its kind drives validation and the app's control."""

    name: str
    kind: str     # "choice" | "kernel" | "bandwidth" | "bool" | "int" | "float" | "int_or_rule"
    default: Any
    help: str
    choices: tuple = ()
    minimum: float | None = None
    title: str = ""                 # label of the control (default: the name in words)

    @property
    def options(self) -> tuple:
        """Current choices (a kernel parameter follows the kernel registry)."""
        return tuple(KERNELS) if self.kind == "kernel" else self.choices


@dataclass(frozen=True)
class TuningAxis:
    """The parameter a family's sensitivity chart moves along, and its grid."""

    param: str                                  # the parameter it sets
    symbol: str                                 # "b", "B", "p"
    title: str                                  # axis title, e.g. "bandwidth b"
    grid: Callable[[object], np.ndarray]        # model -> default grid of values
    fixed: dict = field(default_factory=dict)   # parameters set while moving along the axis
    help: str = ""
    #: automatic choices of the value: rule key -> (title, parameters it sets)
    rules: dict = field(default_factory=dict)

    def params_at(self, params: dict, value) -> dict:
        return {**params, **self.fixed, self.param: value}

    @property
    def controlled(self) -> set:
        """Parameters the axis (its slider and rules) sets; not shown as separate controls."""
        out = {self.param, *self.fixed}
        for _, changes in self.rules.values():
            out |= set(changes)
        return out


@dataclass(frozen=True)
class ModelInfo:
    """What a reference law needs to know about the model."""

    nobs: int
    df_resid: float


@dataclass(frozen=True)
class Family:
    name: str
    title: str                      # display name of the family
    citation: str
    assumptions: str
    params: tuple[Param, ...]
    long_run: Callable[..., longrun.LongRun]         # (model, **params) -> LongRun
    psd: Callable[[dict], bool]
    label: Callable[[dict, object], str]             # (params, LongRun or None) -> label
    group: str = "other"
    axis: TuningAxis | None = None
    fixed_b: Callable | None = None                  # (params, LongRun, ModelInfo) -> FixedB
    sweep: Callable | None = None                    # vectorised sweep along the axis
    presets: Callable[..., list] | None = None       # (model, kernel, bandwidth) -> rows
    applies: Callable[[object], str | None] = lambda model: None   # why it cannot, or None
    curve: Callable[[dict], str] | None = None       # params -> name of its sweep curve
    #: True when S is a fixed quadratic form of the moment contributions for these params, so
    #: S(b0) = S_yy - b0 (S_yx + S_xy) + b0^2 S_xx exactly for contributions g_y - b0 g_x (the
    #: Anderson-Rubin set computes S once for the stacked series). Eigenvalue repair,
    #: prewhitening and order selection are not.
    quadratic: Callable[[dict], bool] = lambda params: False
    #: True when the S this family gives is a fixed matrix up to a scalar (classical): GMM
    #: weighted by it ends at the two-step estimate, so there is nothing to iterate.
    fixed_weight: bool = False
    #: params -> the params of every curve the sensitivity chart draws with this estimator
    #: (the kernel family: one curve per kernel with the same options); None: its own curve.
    companions: Callable[[dict], list] | None = None
    #: (GMM fit, estimators, values) -> SweepResult: a vectorised two-step sweep (None: one
    #: two-step fit per grid point).
    gmm_sweep: Callable | None = None
    #: For a panel fit, the options (small_sample, repair) of the panel sweep the chart shows
    #: while this family is picked; None when the family's own axis is charted instead.
    panel_chart: Callable[[dict], dict] | None = lambda params: {}

    def curve_label(self, params: dict) -> str:
        """The name of a sweep curve of this family (the axis value is on the x axis)."""
        return self.title if self.curve is None else self.curve(params)

    def law(self, requested: str, params: dict, lr, info) -> laws.Law:
        """The reference law for a request, for an estimate `lr` of this family."""
        fixed_b = None if self.fixed_b is None else (lambda: self.fixed_b(params, lr, info))
        return laws.resolve(requested, lr.law, fixed_b, info.df_resid)


FAMILIES: dict[str, Family] = {}
#: shorthands: name -> (family, fixed parameters)
SHORTHANDS: dict[str, tuple[str, dict]] = {}


def register_family(family: Family, shorthands: dict | None = None) -> Family:
    if family.name in FAMILIES or family.name in SHORTHANDS:
        raise ValueError(f"estimator family {family.name!r} registered twice")
    FAMILIES[family.name] = family
    for short, fixed in (shorthands or {}).items():
        SHORTHANDS[short] = (family.name, fixed)
    return family


class Estimator:
    """A family with validated parameters; produces S for a model."""

    def __init__(self, family: Family, params: dict):
        self.family = family
        self.params = params

    @property
    def name(self) -> str:
        return self.family.name

    @property
    def psd(self) -> bool:
        return self.family.psd(self.params)

    @property
    def label(self) -> str:
        """Plain label from the parameters, e.g. 'Parzen, b = 12' or 'HC1'."""
        return self.family.label(self.params, None)

    def label_for(self, lr) -> str:
        """Label once the estimate exists (resolved values, e.g. 'EWC, B = 22')."""
        return self.family.label(self.params, lr)

    def long_run(self, model) -> longrun.LongRun:
        """S for a model: a finite estimate, or a typed error saying why there is none."""
        why = self.family.applies(model)
        if why:
            raise SpecificationError(why)
        try:
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                lr = self.family.long_run(model, **self.params)
        except LagwiseError:
            raise
        except (np.linalg.LinAlgError, FloatingPointError, ZeroDivisionError, OverflowError,
                ValueError) as exc:
            raise EstimationError(f"{self.label} could not be computed for this model: "
                                  f"{' '.join(str(exc).split())}") from None
        if lr.S is not None and not np.all(np.isfinite(lr.S) | np.isnan(lr.S)):
            raise EstimationError(f"the {self.label} estimate of S is not finite (the moment "
                                  "contributions are too large for double precision); rescale "
                                  "the columns and fit again")
        return lr

    def with_params(self, **changes) -> "Estimator":
        return Estimator(self.family, _validate(self.family, {**self.params, **changes}))

    def at(self, value) -> "Estimator":
        """The same estimator moved to `value` on its family's tuning axis."""
        axis = self.family.axis
        if axis is None:
            raise SpecificationError(f"{self.family.title} has no tuning parameter to move")
        return self.with_params(**axis.fixed, **{axis.param: value})

    def rule(self) -> str:
        """The axis rule these parameters follow, or "fixed" (a value set by hand)."""
        axis = self.family.axis
        for key, (_, changes) in (axis.rules if axis else {}).items():
            if all(self.params.get(k) == v for k, v in changes.items()):
                return key
        return "fixed"

    def settings(self) -> dict:
        """A plain, replayable record: {"estimator": family name, "params": {...}}."""
        return {"estimator": self.name, "params": dict(self.params)}

    def __eq__(self, other):
        return isinstance(other, Estimator) and self.name == other.name \
            and self.params == other.params

    def __hash__(self):
        return hash((self.name, tuple(sorted((k, str(v)) for k, v in self.params.items()))))

    def __repr__(self):
        return f"estimator({self.name!r}, " + ", ".join(f"{k}={v!r}" for k, v in
                                                        self.params.items()) + ")"


def _validate(family: Family, given: dict) -> dict:
    known = {p.name: p for p in family.params}
    unknown = set(given) - set(known)
    if unknown:
        raise SpecificationError(f"estimator '{family.name}' has no parameter "
                                 + ", ".join(f"'{u}'" for u in sorted(unknown))
                                 + (f"; its parameters are {', '.join(known)}" if known
                                    else "; it takes no parameters"))
    return {p.name: _check_param(family.name, p, given.get(p.name, p.default))
            for p in family.params}


def _check_param(owner: str, p: Param, value):
    if p.kind in ("choice", "kernel"):
        if not isinstance(value, str) or value not in p.options:
            raise SpecificationError(f"{owner}: {p.name}={value!r} is not one of "
                                     f"{', '.join(map(str, p.options))}")
    elif p.kind == "bool":
        if not isinstance(value, (bool, np.bool_)):
            raise SpecificationError(f"{owner}: {p.name} must be true or false, got {value!r}")
        value = bool(value)
    elif p.kind in ("int", "float"):
        if value is not None:
            if isinstance(value, bool) or not isinstance(value, (int, float, np.number)) \
                    or not np.isfinite(value):
                raise SpecificationError(f"{owner}: {p.name} must be a number, got {value!r}")
            if p.kind == "int":
                if float(value) != int(value):
                    raise SpecificationError(f"{owner}: {p.name} must be a whole number, "
                                             f"got {value!r}")
                value = int(value)
            else:
                value = float(value)
            if p.minimum is not None and value < p.minimum:
                raise SpecificationError(f"{owner}: {p.name} must be at least {p.minimum:g}, "
                                         f"got {value!r}")
    elif p.kind == "int_or_rule":
        if isinstance(value, str):
            if value not in p.choices:
                raise SpecificationError(f"{owner}: {p.name}={value!r} is not a whole number "
                                         f"or one of {', '.join(p.choices)}")
        elif isinstance(value, bool) or not isinstance(value, (int, np.integer, float)) \
                or not np.isfinite(value) or not float(value).is_integer() \
                or value < (p.minimum or 1):
            raise SpecificationError(f"{owner}: {p.name} must be a whole number >= "
                                     f"{p.minimum or 1:g} or one of {', '.join(p.choices)}, "
                                     f"got {value!r}")
        else:
            value = int(value)
    elif p.kind == "bandwidth":
        value = check_bandwidth_setting(value)
    return value


def estimator(name: str, **params) -> Estimator:
    """Configure a registered estimator, e.g. estimator("kernel", kernel="parzen", bandwidth=8).

    A family with a bandwidth also takes lags=L, meaning b = L + 1."""
    if name in SHORTHANDS:
        fam_name, fixed = SHORTHANDS[name]
        clash = set(params) & set(fixed)
        if clash:
            raise SpecificationError(f"'{name}' already sets {', '.join(sorted(clash))}")
        params = {**params, **fixed}
        name = fam_name
    try:
        family = FAMILIES[name]
    except KeyError:
        raise SpecificationError(f"unknown estimator {name!r}; choose one of "
                                 f"{', '.join(list(FAMILIES) + list(SHORTHANDS))}") from None
    if "lags" in params and any(p.kind == "bandwidth" for p in family.params):
        lags = params.pop("lags")
        if "bandwidth" in params:
            raise SpecificationError("give either lags or bandwidth, not both")
        if isinstance(lags, bool) or not isinstance(lags, (int, np.integer)) or lags < 0:
            raise SpecificationError(f"lags must be a whole number >= 0, got {lags!r}")
        params["bandwidth"] = float(lags) + 1.0
    return Estimator(family, _validate(family, params))


def as_estimator(est) -> Estimator:
    if isinstance(est, str):
        return estimator(est)
    if not isinstance(est, Estimator):
        raise SpecificationError("pass an estimator made by lagwise.estimator(...)")
    return est


def estimators() -> list[Family]:
    """Every registered estimator family, in registration order."""
    return list(FAMILIES.values())


# --------------------------------------------------------------------------- shared pieces

SMALL_SAMPLE = Param("small_sample", "bool", False,
                     "multiply S by T/(T-k), a finite-sample inflation; off by default as in "
                     "most software's HAC", title="small-sample factor T/(T-k)")


def small_sample_label(params) -> str:
    return ", T/(T-k)" if params.get("small_sample") else ""


def bandwidth_grid(model) -> np.ndarray:
    """Default bandwidths for charts and sweeps: b = 1, 2, ..., up to about T/3 (at most 120,
    at least 24, never beyond T)."""
    top = int(min(model.nobs, max(24, min(model.nobs // 3, 120))))
    return np.arange(1, top + 1, dtype=float)


def _time_series_only(model) -> str | None:
    """Why a time-series estimator does not apply to a stacked panel (None when it does)."""
    if getattr(model, "panel", None) is not None:
        return ("the rows of a stacked panel are not one time series: use Driscoll-Kraay (a "
                "kernel over the per-period sums), clustering, or clustering by entity with a "
                "kernel over time")
    return None


def _panel_only(model) -> str | None:
    if getattr(model, "panel", None) is None:
        return ("this estimator groups the moment contributions by entity and period: it needs "
                "a panel fit (lagwise.fit_panel)")
    return None


# --------------------------------------------------------------------------- classical, HC

register_family(Family(
    name="classical", title="Classical (iid)",
    citation="Ordinary least squares textbook formula s^2 (X'X)^-1",
    assumptions="Errors are uncorrelated over time and have constant variance. Understates "
                "uncertainty when either fails.",
    params=(), long_run=lambda model: longrun.classical(model), psd=lambda p: True,
    label=lambda p, lr: "Classical (iid)", group="iid", fixed_weight=True,
    presets=lambda model, kernel, bandwidth: [estimator("classical")]))

_HC_TEXT = {
    "hc0": "White (1980): squared residuals; biased downward in small samples",
    "hc1": "HC0 times T/(T-k), a simple small-sample inflation (MacKinnon & White 1985)",
    "hc2": "squared residuals over 1 - h_tt; unbiased under homoskedasticity",
    "hc3": "squared residuals over (1 - h_tt)^2 (Davidson-MacKinnon form); conservative when "
           "influential points exist"}

register_family(Family(
    name="hc", title="Heteroskedasticity-robust (HC)",
    citation="White (1980), Econometrica 48(4); MacKinnon & White (1985), J. Econometrics 29",
    assumptions="Errors uncorrelated over time; their variance may change with the regressors. "
                "Large-sample theory; HC2/HC3 adjust for leverage.",
    params=(Param("kind", "choice", "hc1", "; ".join(f"{k.upper()}: {v}" for k, v in
                                                      _HC_TEXT.items()),
                  choices=("hc0", "hc1", "hc2", "hc3"), title="variant"),),
    long_run=lambda model, kind: longrun.heteroskedasticity_robust(model, kind),
    psd=lambda p: True, label=lambda p, lr: p["kind"].upper(), group="hc",
    quadratic=lambda p: p["kind"] in ("hc0", "hc1"),     # HC2/HC3 divide by 1 - h_tt of X
    presets=lambda model, kernel, bandwidth: [
        estimator(k) for k in ("hc0", "hc1", "hc2", "hc3")
        if k in ("hc0", "hc1") or getattr(model, "leverage", None) is not None]),
    shorthands={k: {"kind": k} for k in ("hc0", "hc1", "hc2", "hc3")})


# --------------------------------------------------------------------------- kernel HAC

def _kernel_long_run(model, *, kernel, bandwidth, small_sample, repair, prewhiten=False):
    k = get_kernel(kernel)
    if prewhiten:
        from .prewhiten import prewhitened_kernel
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


def _kernel_fixed_b(p, lr, info):
    if p.get("prewhiten"):
        raise SpecificationError("fixed-b critical values here assume no prewhitening")
    return laws.FixedB(p["kernel"], lr.bandwidth / (lr.span or info.nobs))


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
    h = getattr(model, "horizon", None)
    if h and h > 1:
        why = (f"overlapping {h}-period response: the errors are MA({h - 1}), so lags up to "
               f"{h - 1} carry the autocorrelation")
        out.append((estimator("kernel", kernel="truncated", lags=h - 1), None, why))
        out.append((estimator("kernel", kernel="bartlett", lags=h), None, why))
        if h + 1 <= model.nobs:
            out.append((estimator("kernel", kernel="bartlett", lags=h), "fixed-b",
                        why + "; fixed-b critical values account for b/T"))
    return out


def _kernel_sweep(model, estimators, values):
    from .sweep import kernel_curves
    return kernel_curves(model, estimators, values)


def _kernel_gmm_sweep(fit, estimators, values):
    from .weakiv import gmm_sweep
    p = estimators[0].params
    return gmm_sweep(fit, [e.params["kernel"] for e in estimators], values,
                     p["small_sample"], p["repair"])


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
    long_run=_kernel_long_run, psd=lambda p: get_kernel(p["kernel"]).psd or p["repair"],
    label=_kernel_label, group="kernel",
    axis=TuningAxis("bandwidth", "b", "bandwidth b", bandwidth_grid,
                    help="lag j gets weight k(j/b); kernels vanishing beyond |x| = 1 use "
                         "ceil(b) - 1 lags",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    fixed_b=_kernel_fixed_b, sweep=_kernel_sweep, presets=_kernel_presets, curve=_kernel_curve,
    quadratic=lambda p: not p["prewhiten"] and (get_kernel(p["kernel"]).psd or not p["repair"]),
    companions=lambda p: [{**p, "kernel": k, "bandwidth": 1.0} for k in KERNELS],
    gmm_sweep=_kernel_gmm_sweep,
    applies=lambda model: _time_series_only(model)))


# --------------------------------------------------------------------------- VAR-HAC

def _var_label(p, lr) -> str:
    if p["criterion"] == "fixed":
        order = p["max_order"]
        return f"VAR({'int(T^(1/3))' if order is None else order}) correction"
    text = f"VAR-HAC, order by {p['criterion'].upper()}"
    if p["selection"] == "joint":
        text += " (joint)"
    return text + ("" if p["max_order"] is None else f", at most {p['max_order']}")


def _var_grid(model) -> np.ndarray:
    top = min(longrun.var_order_limit(model.nobs, model.m), 12)
    return np.arange(0, top + 1, dtype=float)


register_family(Family(
    name="var", title="Parametric VAR (VAR-HAC)",
    citation="den Haan & Levin (1997), Handbook of Statistics 15, ch. 12",
    assumptions="The moment contributions follow a finite-order stationary VAR; S is its "
                "implied spectrum at frequency zero. Positive semi-definite; can be far off if "
                "the VAR is misspecified or close to a unit root (refused when non-stationary).",
    params=(
        Param("max_order", "int", None, "largest VAR order tried (default int(T^(1/3)))",
              minimum=0, title="largest order"),
        Param("criterion", "choice", "bic", "order by BIC or AIC, or 'fixed' to use exactly "
              "the largest order (1: the VAR(1) parametric correction)",
              choices=("bic", "aic", "fixed"), title="order chosen by"),
        Param("selection", "choice", "equation", "choose the order per equation or jointly",
              choices=("equation", "joint"), title="order selection"),
    ),
    long_run=lambda model, **p: longrun.var_parametric(model, **p), psd=lambda p: True,
    label=_var_label, group="parametric", curve=lambda p: "VAR of fixed order",
    axis=TuningAxis("max_order", "p", "VAR order p", _var_grid, fixed={"criterion": "fixed"},
                    help="a VAR of exactly this order fitted to the moment contributions",
                    rules={"bic": ("order by BIC", {"criterion": "bic", "max_order": None}),
                           "aic": ("order by AIC", {"criterion": "aic", "max_order": None})}),
    presets=lambda model, kernel, bandwidth: [estimator("var"),
                                              estimator("var", max_order=1, criterion="fixed")],
    applies=lambda model: _time_series_only(model)))


# --------------------------------------------------------------------------- EWC

def _ewc_label(p, lr) -> str:
    if lr is not None and lr.law is not None:
        return f"EWC, B = {lr.law.df:g}" + small_sample_label(p)
    b = p["cosines"]
    return ("EWC, B = floor(0.4 T^(2/3))" if isinstance(b, str) else f"EWC, B = {b}") \
        + small_sample_label(p)


def _ewc_grid(model) -> np.ndarray:
    llsw, _ = longrun.ewc_cosines(model.nobs, "llsw")
    top = int(min(model.nobs - 1, max(24, 3 * llsw), 120))
    return np.arange(1, top + 1, dtype=float)


register_family(Family(
    name="ewc", title="Equal-weighted cosine (EWC)",
    citation="Lazarus, Lewis, Stock & Watson (2018), JBES 36(4); Mueller (2007)",
    assumptions="Autocorrelation may be strong; B low-frequency cosine averages estimate S and "
                "the t statistic is referred to t(B), F(m, B-m+1) for m restrictions, which keeps "
                "tests close to their size at the cost of some power. Assumes stationarity.",
    params=(
        Param("cosines", "int_or_rule", "llsw", "number of cosine terms B, or 'llsw' = "
              "floor(0.4 T^(2/3))", choices=("llsw",), minimum=1, title="cosine terms B"),
        SMALL_SAMPLE,
    ),
    long_run=lambda model, **p: longrun.ewc(model, **p), psd=lambda p: True,
    label=_ewc_label, group="ewc", curve=lambda p: "EWC" + small_sample_label(p),
    quadratic=lambda p: True,
    axis=TuningAxis("cosines", "B", "cosine terms B", _ewc_grid,
                    help="S averages the first B cosine-weighted sums; the law is t(B)",
                    rules={"llsw": ("LLSW (2018), floor(0.4 T^(2/3))", {"cosines": "llsw"})}),
    presets=lambda model, kernel, bandwidth: [estimator("ewc")],
    applies=lambda model: _time_series_only(model)))


# --------------------------------------------------------------------------- panels

_CLUSTER_TITLES = {"entity": "Clustered by entity", "time": "Clustered by time",
                   "both": "Clustered by entity and time"}

register_family(Family(
    name="cluster", title="Clustered (panel)",
    citation="Liang & Zeger (1986); Arellano (1987); two-way: Cameron, Gelbach & Miller (2011), "
             "JBES 29(2)",
    assumptions="Clusters are independent of each other, with any correlation and "
                "heteroskedasticity inside a cluster; needs many clusters (the reference law is "
                "t(G - 1)). By entity: a firm's errors may be correlated over time. By time: "
                "firms' errors may be correlated within a period. Both: either, but not across "
                "different firms in different periods.",
    params=(
        Param("by", "choice", "entity", "entity: clusters are entities; time: clusters are "
              "periods; both: two-way (entity + time - intersection)",
              choices=("entity", "time", "both"), title="cluster by"),
        Param("small_sample", "bool", True,
              "multiply each term by G/(G-1) x (N-1)/(N-K) (the usual CRV1 practice; K counts "
              "coefficients and absorbed effects)",
              title="small-sample factor G/(G-1) x (N-1)/(N-K)"),
    ),
    long_run=lambda model, by, small_sample: longrun.cluster(model, by, small_sample),
    psd=lambda p: True,
    label=lambda p, lr: _CLUSTER_TITLES[p["by"]]
    + ("" if p["small_sample"] else ", no small-sample factor"),
    group="cluster", applies=_panel_only,
    presets=lambda model, kernel, bandwidth: [estimator("cluster", by=b)
                                              for b in ("entity", "time", "both")]))


def _period_grid(model) -> np.ndarray:
    why = _panel_only(model)
    if why:
        raise SpecificationError(why)
    return bandwidth_grid(model.period_model)


def _dk_long_run(model, *, kernel, bandwidth, small_sample, repair):
    view = model.period_model
    lr = _kernel_long_run(view, kernel=kernel, bandwidth=bandwidth, small_sample=small_sample,
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
    from .sweep import kernel_curves
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


_PERIOD_BANDWIDTH = Param(
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
        _PERIOD_BANDWIDTH,
        Param("small_sample", "bool", False, "multiply S by N/(N-K)",
              title="small-sample factor N/(N-K)"),
        Param("repair", "bool", True, "set negative eigenvalues of S to zero for kernels that "
              "are not PSD by construction (flagged)", title="eigenvalue repair"),
    ),
    long_run=_dk_long_run, psd=lambda p: get_kernel(p["kernel"]).psd or p["repair"],
    label=_dk_label, group="panel kernel", applies=_panel_only,
    axis=TuningAxis("bandwidth", "b", "bandwidth b (periods)", _period_grid,
                    help="lag j of the per-period sums gets weight k(j/b)",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    fixed_b=_kernel_fixed_b, sweep=_dk_sweep, presets=_dk_presets, curve=_dk_curve,
    panel_chart=lambda p: {"small_sample": p["small_sample"], "repair": p["repair"]}))


def _ck_long_run(model, *, kernel, bandwidth, small_sample):
    kern = get_kernel(kernel)
    view = model.period_model
    choice = resolve_bandwidth(view, kern, bandwidth)
    b = choice.b
    s_e, groups, fe = longrun._one_way(model, "entity", small_sample)
    s_dk, lags, _, status = longrun.kernel_many(view, kern, [b], repair=False)
    if status[0] == "collapsed":
        raise EstimationError(f"the {kern.label} estimate over the per-period sums is zero at "
                              f"b = {b:g}; choose a smaller bandwidth")
    s_w = longrun.within_kernel(model, kern, b)
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
        _PERIOD_BANDWIDTH,
        Param("small_sample", "bool", True,
              "entity term times G/(G-1) x (N-1)/(N-K), time-kernel terms times N/(N-K)",
              title="small-sample factors"),
    ),
    long_run=_ck_long_run, psd=lambda p: True,
    label=lambda p, lr: f"Entity clusters + {get_kernel(p['kernel']).label} over time, "
                        f"{rule_title(p['bandwidth'])}"
                        + ("" if p["small_sample"] else ", no small-sample factors"),
    group="panel kernel", applies=_panel_only,
    axis=TuningAxis("bandwidth", "b", "bandwidth b (periods)", _period_grid,
                    help="lag j in time across entities gets weight k(j/b)",
                    rules={k: (v[0], {"bandwidth": k}) for k, v in RULES.items()}),
    curve=lambda p: f"Entity clusters + {get_kernel(p['kernel']).label} over time",
    panel_chart=None,
    presets=lambda model, kernel, bandwidth: [estimator(
        "cluster_kernel", kernel=kernel or "bartlett",
        bandwidth=bandwidth if bandwidth is not None else "andrews")]))


# --------------------------------------------------------------------------- long horizons

def _hodrick_applies(model) -> str | None:
    h = getattr(model, "horizon", None)
    if getattr(model, "panel", None) is not None or not hasattr(model, "X") \
            or getattr(model, "core", None) is not None:
        return "Hodrick (1992) standard errors are for a least-squares time-series regression"
    if not h:
        return ("Hodrick (1992) standard errors are for a response summing the next h periods "
                "of a one-period series; declare the horizon")
    if getattr(model, "one_period", None) is None:
        return ("Hodrick (1992) standard errors need the one-period series behind the "
                "response: build it with the sum-next transform, or name it (one_period=...)")
    return None


def _hodrick_long_run(model):
    """Hodrick (1992) 1B: under no predictability the sum of the moment contributions
    sum_t x_t (eps_{t+1} + ... + eps_{t+h}) equals sum_s eps_s (x_{s-1} + ... + x_{s-h}), whose
    terms are serially uncorrelated: S = (1/T) sum_s eps_s^2 xbar_s xbar_s' with eps the
    demeaned one-period series (the null imposed) and xbar_s the sum of the regressors over the
    h rows before s (as many as the sample has at its ends)."""
    h = int(model.horizon)
    src = model.one_period
    pos = src.index.get_indexer(model.index)
    if (pos < 0).any() or (np.diff(pos) != 1).any():
        raise SpecificationError("Hodrick (1992) standard errors need consecutive rows (no "
                                 "missing values inside the sample)")
    t_obs = model.nobs
    first = int(pos[0])
    s_pos = np.arange(first + 1, first + t_obs + h)
    r = src.to_numpy(dtype=float)
    if s_pos[-1] >= len(r) or not np.isfinite(r[s_pos]).all():
        raise SpecificationError(f"the one-period series '{src.name}' does not cover the "
                                 f"{h} periods after the sample")
    eps = r[s_pos] - r[s_pos].mean()
    csum = np.vstack([np.zeros((1, model.k)), np.cumsum(model.X, axis=0)])
    k_idx = np.arange(len(s_pos))
    xbar = csum[np.minimum(k_idx + 1, t_obs)] - csum[np.maximum(k_idx + 1 - h, 0)]
    s = (xbar * (eps**2)[:, None]).T @ xbar / t_obs
    how = (f"Hodrick (1992) 1B with h = {h}: the one-period series '{src.name}' demeaned (no "
           "predictability imposed) times the sum of the regressors over the previous h periods")
    return longrun.LongRun(S=model.to_working(s), how=how,
                           notes=["Hodrick (1992): valid under the null that the predictors do "
                                  "not predict the one-period series; no kernel or bandwidth"])


register_family(Family(
    name="hodrick", title="Hodrick (1992), overlapping horizons",
    citation="Hodrick (1992), Review of Financial Studies 5(3), standard errors 1B",
    assumptions="For an h-period overlapping response built from a one-period series: under no "
                "predictability the one-period errors are serially uncorrelated, so summing "
                "the regressors backwards over h periods removes the overlap without a kernel. "
                "Valid under the null of no predictability; good size in long-horizon "
                "regressions where Newey-West over-rejects.",
    params=(), long_run=lambda model: _hodrick_long_run(model), psd=lambda p: True,
    label=lambda p, lr: "Hodrick (1992)", group="horizon", applies=_hodrick_applies,
    presets=lambda model, kernel, bandwidth: [estimator("hodrick")]))
