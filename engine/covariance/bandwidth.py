"""Bandwidth rules for kernel long-run covariance estimators.

The engine speaks of a real bandwidth b (weights k(j/b)); a lag count L means b = L + 1.
A bandwidth *setting* is a positive number (fixed b) or the name of a *rule*; applying a rule to a
model's moment contributions gives a `BandwidthChoice`: the bandwidth b, the rule's name, an
explanation in words and flags. Rules:

* "rule-of-thumb": L = floor(4 (T/100)^(2/9)) lags, b = L + 1 (common practice; the
  statsmodels default lag count);
* "textbook": b = 0.75 T^(1/3) (common practice in teaching texts);
* "llsw": b = 1.3 T^(1/2), Lazarus, Lewis, Stock & Watson (2018), JBES 36(4), recommended with
  fixed-b critical values;
* "andrews": Andrews (1991) AR(1) plug-in, per-moment AR(1) fits, the constant's moment weighted
  0, |rho| capped at 0.97 (flagged when the cap changes the bandwidth);
* "newey-west": Newey & West (1994) nonparametric plug-in (pilot lag ceil(4 (T/100)^r)); the
  weighted moment series is centred first, as in the arch package.

Plug-in rules can return any b >= 0: b below 1 uses lag 0 only for kernels that vanish beyond
|x| = 1 and is used as is by the Quadratic Spectral kernel (which weights every lag); b = 0 (no
autocorrelation detected at all) weights lag 0 only for every kernel. The explanation says which.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import SpecificationError
from .kernels import Kernel, get_kernel

#: rule name -> (short title used in labels, what it computes)
RULES = {
    "rule-of-thumb": ("rule-of-thumb", "L = floor(4 (T/100)^(2/9)) lags, b = L + 1 "
                      "(common practice)"),
    "textbook": ("0.75 T^(1/3)", "b = 0.75 T^(1/3) (common practice)"),
    "llsw": ("LLSW (2018)", "b = 1.3 T^(1/2) (Lazarus, Lewis, Stock & Watson 2018)"),
    "andrews": ("Andrews (1991)", "Andrews (1991) AR(1) plug-in"),
    "newey-west": ("Newey-West (1994)", "Newey & West (1994) nonparametric plug-in"),
}
#: AR(1) coefficients are capped at this absolute value in the Andrews plug-in.
RHO_CAP = 0.97

#: A bandwidth may be at most this multiple of T, the observations (periods) the kernel runs
#: over: beyond b = T every lag is weighted nearly flat, S tends to zero and t statistics grow
#: without bound, and no theory covers it (fixed-b values cover b/T <= 1). Values up to T are
#: estimated; where S collapses there the estimate is refused (sweeps mark the point
#: "collapsed").
MAX_BANDWIDTH_OVER_T = 1.0


@dataclass
class BandwidthChoice:
    b: float
    rule: str                    # the rule's name, or "fixed"
    explanation: str
    flags: set[str] = field(default_factory=set)
    notes: list[str] = field(default_factory=list)

    def __float__(self):
        return float(self.b)


def bandwidth_text(b) -> str:
    """A bandwidth with the digits that make the lag count ceil(b) - 1 follow from it: about
    three significant digits, more where rounding would land on a whole number (34.0047 is
    "34.005", not "34", which would mean 33 lags); a whole b as a whole number."""
    b = float(b)
    if not math.isfinite(b):
        return str(b)
    if b == int(b):
        return str(int(b))
    start = max(0, 2 - int(math.floor(math.log10(abs(b))))) if b else 0
    for d in range(start, 13):
        text = f"{b:.{d}f}"
        text = text.rstrip("0").rstrip(".") if "." in text else text
        shown = float(text)
        if shown != int(shown) and math.ceil(shown) == math.ceil(b):
            return text
    return repr(b)


def lags_text(lags) -> str:
    """"1 lag", "39 lags"."""
    return f"{lags} lag" + ("" if lags == 1 else "s")


def rule_title(setting) -> str:
    """Words for a bandwidth setting in a label: 'Andrews (1991) bandwidth' or 'b = 12'."""
    if isinstance(setting, str):
        return f"{RULES[setting][0]} bandwidth"
    return f"b = {bandwidth_text(setting)}"


def check_bandwidth_setting(value):
    """Validate a bandwidth setting (a positive number or a rule name)."""
    if isinstance(value, str):
        if value not in RULES:
            raise SpecificationError(f"unknown bandwidth rule {value!r}; use a positive number "
                                     f"or one of {', '.join(RULES)}")
        return value
    try:
        number = float(value) if not isinstance(value, bool) else math.nan
    except (OverflowError, TypeError, ValueError):
        number = math.nan
    if not isinstance(value, (int, float, np.number)) or not math.isfinite(number) \
            or number <= 0:
        text = repr(value) if len(repr(value)) <= 30 else f"a number of {len(repr(value))} digits"
        raise SpecificationError(f"bandwidth must be a positive number or a rule name, "
                                 f"got {text}")
    return number


def check_bandwidth_range(bandwidths, nobs: int) -> None:
    """Refuse a bandwidth beyond MAX_BANDWIDTH_OVER_T x T, naming the value and T."""
    b = np.atleast_1d(np.asarray(bandwidths, dtype=float))
    bad = ~(b <= MAX_BANDWIDTH_OVER_T * nobs)
    if bad.any():
        raise SpecificationError(
            f"bandwidth b = {b[bad][0]:.6g} is beyond the sample: T = {nobs}, and a bandwidth "
            f"may be at most {MAX_BANDWIDTH_OVER_T:g} x T = {MAX_BANDWIDTH_OVER_T * nobs:g} "
            "(beyond it every lag is weighted nearly flat and the standard errors collapse "
            "towards zero). Choose a smaller bandwidth.")


def moment_weights(constant: np.ndarray) -> np.ndarray:
    """1 for each moment, 0 for the constant's (all ones if every moment is a constant's)."""
    w = np.where(np.asarray(constant, dtype=bool), 0.0, 1.0)
    return w if w.any() else np.ones(len(w))


def andrews_ar1(series: np.ndarray, kernel: Kernel, weights: np.ndarray):
    """Andrews (1991) AR(1) plug-in bandwidth from the columns of `series`.

    Returns (b, rho per column, capped: whether the cap on |rho| changed a weighted column).
    Closed forms: alpha(1) = sum w 4 rho^2 s^4 / ((1-rho)^6 (1+rho)^2) / sum w s^4/(1-rho)^4,
    alpha(2) = sum w 4 rho^2 s^4 / (1-rho)^8 / sum w s^4/(1-rho)^4, b = c_k (alpha(q) T)^(1/(2q+1)).
    """
    if kernel.andrews is None:
        raise SpecificationError(f"the Andrews (1991) rule needs the characteristic exponent q "
                                 f"of the {kernel.label} kernel; give q and kq when registering "
                                 "it, or use a number")
    q, const = kernel.andrews
    v = np.asarray(series, dtype=float)
    t_obs = v.shape[0]
    x, y = v[:-1], v[1:]
    denom = (x**2).sum(axis=0)
    with np.errstate(invalid="ignore", over="ignore"):
        rho = np.divide((x * y).sum(axis=0), denom, out=np.zeros(v.shape[1]), where=denom > 0)
    rho = np.where(np.isfinite(rho), rho, 0.0)
    capped = bool(np.any((np.abs(rho) > RHO_CAP) & (weights > 0)))
    rho = np.clip(rho, -RHO_CAP, RHO_CAP)
    with np.errstate(over="ignore", invalid="ignore"):
        sig2 = ((y - x * rho) ** 2).mean(axis=0)
        s4 = sig2**2
        den = np.sum(weights * s4 / (1 - rho) ** 4)
        if q == 1:
            num = np.sum(weights * 4 * rho**2 * s4 / ((1 - rho) ** 6 * (1 + rho) ** 2))
        else:
            num = np.sum(weights * 4 * rho**2 * s4 / (1 - rho) ** 8)
    alpha = num / den if den > 0 and np.isfinite(den) and np.isfinite(num) else 0.0
    b = const * (alpha * t_obs) ** (1.0 / (2 * q + 1))
    return b, rho, capped


def newey_west_1994(series: np.ndarray, kernel: Kernel, weights: np.ndarray) -> float:
    """Newey & West (1994) plug-in m-hat for kernels with published constants.

    u_t = w'v_t centred; sigma_j = (1/T) sum u_t u_{t-j}; pilot n = ceil(4 (T/100)^r);
    s0 = sigma_0 + 2 sum_{j<=n} sigma_j; sq = 2 sum_{j<=n} j^q sigma_j;
    m = c_gamma ((sq/s0)^2)^(1/(2q+1)) T^(1/(2q+1)). Returned as the bandwidth b = m.
    """
    if kernel.nw94 is None:
        raise SpecificationError(f"the Newey-West (1994) plug-in is not defined for the "
                                 f"{kernel.label} kernel; use 'andrews' or a number")
    rate, c_gamma = kernel.nw94
    q = kernel.q
    u = np.asarray(series, dtype=float) @ weights
    u = u - u.mean()
    t_obs = len(u)
    n = min(int(math.ceil(4.0 * (t_obs / 100.0) ** rate)), t_obs - 1)
    sig = np.array([u[j:] @ u[: t_obs - j] for j in range(n + 1)]) / t_obs
    j = np.arange(1, n + 1)
    s0 = sig[0] + 2.0 * sig[1:].sum()
    sq = 2.0 * np.sum(j**q * sig[1:])
    if not s0 > 0 or not np.isfinite(sq):
        return 0.0
    gamma = c_gamma * ((sq / s0) ** 2) ** (1.0 / (2 * q + 1))
    return float(gamma * t_obs ** (1.0 / (2 * q + 1)))


def choose(series: np.ndarray, constant: np.ndarray, kernel: Kernel, setting) -> BandwidthChoice:
    """Resolve a bandwidth setting on a T x m series of moment contributions (raw or
    prewhitened); `constant` marks the constant's moments (weight 0 in the plug-in rules)."""
    setting = check_bandwidth_setting(setting)
    t_obs = series.shape[0]
    if not isinstance(setting, str):
        return BandwidthChoice(setting, "fixed", f"fixed bandwidth b = {setting:g}")
    flags: set[str] = set()
    notes: list[str] = []
    if setting == "rule-of-thumb":
        lags = int(math.floor(4.0 * (t_obs / 100.0) ** (2.0 / 9.0)))
        b = lags + 1.0
        text = f"L = floor(4 (T/100)^(2/9)) = {lags} lags, b = {b:g} (common practice)"
    elif setting == "textbook":
        b = 0.75 * t_obs ** (1.0 / 3.0)
        text = f"b = 0.75 T^(1/3) = {b:.3g} (common practice)"
    elif setting == "llsw":
        b = 1.3 * math.sqrt(t_obs)
        text = f"b = 1.3 T^(1/2) = {b:.3g} (Lazarus, Lewis, Stock & Watson 2018)"
    elif setting == "andrews":
        weights = moment_weights(constant)
        b, rho, capped = andrews_ar1(series, kernel, weights)
        if capped:
            flags.add("rho_capped")
            notes.append(f"an AR(1) coefficient of the moment contributions exceeds "
                         f"{RHO_CAP} in absolute value and was capped there for the Andrews "
                         "bandwidth: the series is close to a unit root, and the bandwidth (and "
                         "any kernel estimate) is unreliable")
        shown = [f"{r:.2f}" for r, w in zip(rho, weights) if w > 0]
        text = (f"Andrews (1991) AR(1) plug-in b = {bandwidth_text(b)} from moment "
                "autocorrelations " + ", ".join(shown) + (f" (|rho| capped at {RHO_CAP})" if capped else ""))
    else:
        b = newey_west_1994(series, kernel, moment_weights(constant))
        text = f"Newey-West (1994) plug-in b = {bandwidth_text(b)}"
    if not np.isfinite(b) or b <= 0:
        b = 0.0
        text += "; no autocorrelation detected: b = 0, lag 0 only"
    elif b < 1 and kernel.finite_support:
        text += " (below 1: lag 0 only)"
    if b > t_obs:
        text += f"; capped at b = T = {t_obs:g}"
        b = float(t_obs)
        flags.add("bandwidth_capped")
    return BandwidthChoice(float(b), setting, text, flags, notes)


def resolve_bandwidth(model, kernel: Kernel, setting) -> BandwidthChoice:
    """A bandwidth setting applied to a model's own moment contributions; data-driven rules
    are computed once per model (cached with the model's other caches)."""
    setting = check_bandwidth_setting(setting)
    if not isinstance(setting, str):
        return BandwidthChoice(setting, "fixed", f"fixed bandwidth b = {setting:g}")
    chosen = model.caches.get("bandwidths", dict)
    key = (kernel.name, setting)
    if key not in chosen:
        chosen[key] = choose(model.contributions, model.constant_moments, kernel, setting)
    return chosen[key]


def select_bandwidth(model, kernel="bartlett", rule="andrews") -> BandwidthChoice:
    """Apply a bandwidth rule (or a fixed number) to a model: a BandwidthChoice (.b is b)."""
    k = get_kernel(kernel) if isinstance(kernel, str) else kernel
    return resolve_bandwidth(model, k, rule)
