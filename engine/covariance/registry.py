"""Estimator families: the unit of extension.

A family is defined once, in its own module with one `register_family` call: its parameters
(with validation and help text), how it estimates S, whether the estimate is PSD, the label built
from its parameters, the model capabilities it needs, its tuning axis (kernel bandwidth b, EWC's
number of cosines B, the VAR order) with the grid the sensitivity chart uses, its reference law
(and fixed-b law where it has one), its sweep along the axis (default: one estimate per grid
point), and the configurations the comparison table shows. The app, the CLI, the comparison and
the contract tests are generated from this registry; no code elsewhere switches on a family's
name.

`estimator(name, **params)` configures one: a family name, or a shorthand such as "hc1"
(= family "hc" with kind "hc1").
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from ..capabilities import missing
from ..errors import EstimationError, LagwiseError, SpecificationError
from ..laws import reference as laws
from .bandwidth import check_bandwidth_setting
from .kernels import KERNELS
from .longrun import LongRun


@dataclass(frozen=True)
class Param:
    """One estimator parameter: its kind drives validation and the app's control."""

    name: str
    kind: str     # "choice" | "kernel" | "bandwidth" | "bool" | "int" | "float" | "int_or_rule"
    #               | "grouping" (one of `choices` or a column name a model offers)
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
    long_run: Callable[..., LongRun]         # (model, **params) -> LongRun
    psd: Callable[[dict], bool]
    label: Callable[[dict, object], str]             # (params, LongRun or None) -> label
    group: str = "other"
    axis: TuningAxis | None = None
    fixed_b: Callable | None = None                  # (params, LongRun, ModelInfo) -> FixedB
    sweep: Callable | None = None                    # vectorised sweep along the axis
    presets: Callable[..., list] | None = None       # (model, kernel, bandwidth) -> rows
    #: the model capabilities the family needs (engine.capabilities): `applies` names the
    #: first one a model lacks
    needs: tuple[str, ...] = ()
    #: a further condition on the model, read from its protocol (e.g. a declared horizon):
    #: model -> why the family cannot be used, or None
    condition: Callable[[object], str | None] = lambda model: None
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
    #: params -> the kernel whose weights over the cached autocovariances give S for these
    #: parameters (vectorised sweeps, the two-step GMM sweep use it); None when S is not such
    #: a weighting (prewhitened, another family).
    kernel_of: Callable[[dict], str | None] = lambda params: None
    #: For a panel fit, the options (small_sample, repair) of the panel sweep the chart shows
    #: while this family is picked; None when the family's own axis is charted instead.
    panel_chart: Callable[[dict], dict] | None = lambda params: {}
    #: True when the panel chart draws this family's comparison presets as horizontal reference
    #: lines (estimators without a tuning axis that a panel analyst compares against)
    reference_lines: bool = False

    def applies(self, model) -> str | None:
        """Why this family cannot be used on `model` (None when it can): the first capability
        it needs that the model does not declare, or the family's own condition."""
        return missing(model.capabilities, self.needs) or self.condition(model)

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

    def long_run(self, model) -> LongRun:
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


def _finite(value) -> bool:
    """A finite number that fits a float (a Python integer of 400 digits does not)."""
    try:
        return bool(np.isfinite(float(value)))
    except (OverflowError, TypeError, ValueError):
        return False


def _shown(value) -> str:
    """A value as a message quotes it (a huge integer by its size)."""
    text = repr(value)
    return text if len(text) <= 30 else f"a number of {len(text)} digits"


def _check_param(owner: str, p: Param, value):
    if p.kind in ("choice", "kernel"):
        if not isinstance(value, str) or value not in p.options:
            raise SpecificationError(f"{owner}: {p.name}={value!r} is not one of "
                                     f"{', '.join(map(str, p.options))}")
    elif p.kind == "grouping":
        if not isinstance(value, str) or not value.strip():
            raise SpecificationError(f"{owner}: {p.name} must be one of "
                                     f"{', '.join(map(str, p.options))} or the name of a column "
                                     f"the fit offers, got {value!r}")
        value = value.strip()
    elif p.kind == "bool":
        if not isinstance(value, (bool, np.bool_)):
            raise SpecificationError(f"{owner}: {p.name} must be true or false, got {value!r}")
        value = bool(value)
    elif p.kind in ("int", "float"):
        if value is not None:
            if isinstance(value, bool) or not isinstance(value, (int, float, np.number)) \
                    or not _finite(value):
                raise SpecificationError(f"{owner}: {p.name} must be a finite number, got "
                                         f"{_shown(value)}")
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
                or not _finite(value) or not float(value).is_integer() \
                or value < (p.minimum or 1):
            raise SpecificationError(f"{owner}: {p.name} must be a whole number >= "
                                     f"{p.minimum or 1:g} or one of {', '.join(p.choices)}, "
                                     f"got {_shown(value)}")
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
        if isinstance(lags, bool) or not isinstance(lags, (int, np.integer)) or lags < 0 \
                or not _finite(lags):
            raise SpecificationError(f"lags must be a whole number >= 0, got {_shown(lags)}")
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
