"""Bandwidth rules for kernel long-run covariance estimators.

The engine speaks of a real bandwidth b (weights k(j/b)); a lag count L means b = L + 1.
Rules, each returning b and one line saying how it was chosen:

* a number: b itself (fixed);
* "rule-of-thumb": L = floor(4 (T/100)^(2/9)) lags, b = L + 1 (common practice; the
  statsmodels default lag count);
* "textbook": b = 0.75 T^(1/3) (common practice in teaching texts);
* "llsw": b = 1.3 T^(1/2), Lazarus, Lewis, Stock & Watson (2018), JBES 36(4), recommended with
  fixed-b critical values;
* "andrews": Andrews (1991) AR(1) plug-in, per-score AR(1) fits, intercept score weighted 0,
  |rho| capped at 0.97 (flagged);
* "newey-west": Newey & West (1994) nonparametric plug-in (pilot lag ceil(4 (T/100)^r)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import SpecificationError
from .kernels import Kernel, get_kernel

RULES = {
    "rule-of-thumb": "L = floor(4 (T/100)^(2/9)) lags, b = L + 1 (common practice)",
    "textbook": "b = 0.75 T^(1/3) (common practice)",
    "llsw": "b = 1.3 T^(1/2) (Lazarus, Lewis, Stock & Watson 2018)",
    "andrews": "Andrews (1991) AR(1) plug-in",
    "newey-west": "Newey & West (1994) nonparametric plug-in",
}
#: AR(1) coefficients are capped at this absolute value in the Andrews plug-in.
RHO_CAP = 0.97
#: Truncated-kernel Andrews constant, recalled as half the QS constant (not verified; [M]).
TRUNCATED_CONSTANT = 0.6611

# Newey-West (1994) pilot rates r and constants c_gamma per kernel (q from the kernel)
_NW94 = {"bartlett": (2.0 / 9.0, 1.1447), "parzen": (4.0 / 25.0, 2.6614),
         "quadratic_spectral": (2.0 / 25.0, 1.3221), "tukey_hanning": (4.0 / 25.0, 1.7462)}


@dataclass
class BandwidthChoice:
    b: float
    rule: str
    explanation: str
    flags: set[str] = field(default_factory=set)

    def __float__(self):
        return float(self.b)


def check_bandwidth_setting(value):
    """Validate a bandwidth setting (a positive number or a rule name)."""
    if isinstance(value, str):
        if value not in RULES:
            raise SpecificationError(f"unknown bandwidth rule {value!r}; use a positive number "
                                     f"or one of {', '.join(RULES)}")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float, np.number)) \
            or not np.isfinite(value) or value <= 0:
        raise SpecificationError(f"bandwidth must be a positive number or a rule name, "
                                 f"got {value!r}")
    return float(value)


def slope_weights(terms) -> np.ndarray:
    """1 for each slope's score, 0 for the intercept's (all ones if there are no slopes)."""
    w = np.array([0.0 if t == "intercept" else 1.0 for t in terms])
    return w if w.any() else np.ones(len(terms))


def andrews_ar1(scores: np.ndarray, kernel: Kernel, weights: np.ndarray):
    """Andrews (1991) AR(1) plug-in bandwidth from the columns of `scores`.

    Returns (b, rho per column, capped flag). Closed forms:
    alpha(1) = sum w 4 rho^2 s^4 / ((1-rho)^6 (1+rho)^2) / sum w s^4/(1-rho)^4,
    alpha(2) = sum w 4 rho^2 s^4 / (1-rho)^8 / sum w s^4/(1-rho)^4, b = c_k (alpha(q) T)^(1/(2q+1)).
    """
    v = np.asarray(scores, dtype=float)
    t_obs = v.shape[0]
    x, y = v[:-1], v[1:]
    denom = (x**2).sum(axis=0)
    rho = np.divide((x * y).sum(axis=0), denom, out=np.zeros(v.shape[1]), where=denom > 0)
    capped = bool(np.any(np.abs(rho) > RHO_CAP))
    rho = np.clip(rho, -RHO_CAP, RHO_CAP)
    sig2 = ((y - x * rho) ** 2).mean(axis=0)
    s4 = sig2**2
    den = np.sum(weights * s4 / (1 - rho) ** 4)
    if kernel.q == 1:
        num = np.sum(weights * 4 * rho**2 * s4 / ((1 - rho) ** 6 * (1 + rho) ** 2))
        q = 1
    else:
        num = np.sum(weights * 4 * rho**2 * s4 / (1 - rho) ** 8)
        q = 2
    alpha = num / den if den > 0 else 0.0
    const = kernel.andrews_constant if kernel.q is not None else TRUNCATED_CONSTANT
    b = const * (alpha * t_obs) ** (1.0 / (2 * q + 1))
    return b, rho, capped


def newey_west_1994(scores: np.ndarray, kernel: Kernel, weights: np.ndarray) -> float:
    """Newey & West (1994) plug-in m-hat for Bartlett, Parzen, QS (and Tukey-Hanning, q=2).

    u_t = w'v_t centred; sigma_j = (1/T) sum u_t u_{t-j}; pilot n = ceil(4 (T/100)^r);
    s0 = sigma_0 + 2 sum_{j<=n} sigma_j; sq = 2 sum_{j<=n} j^q sigma_j;
    m = c_gamma ((sq/s0)^2)^(1/(2q+1)) T^(1/(2q+1)). Returned as the bandwidth b = m.
    """
    if kernel.name not in _NW94:
        raise SpecificationError(f"the Newey-West (1994) plug-in is not defined for the "
                                 f"{kernel.display_name} kernel; use 'andrews' or a number")
    rate, c_gamma = _NW94[kernel.name]
    q = kernel.q
    u = np.asarray(scores, dtype=float) @ weights
    u = u - u.mean()
    t_obs = len(u)
    n = min(int(math.ceil(4.0 * (t_obs / 100.0) ** rate)), t_obs - 1)
    sig = np.array([u[j:] @ u[: t_obs - j] for j in range(n + 1)]) / t_obs
    j = np.arange(1, n + 1)
    s0 = sig[0] + 2.0 * sig[1:].sum()
    sq = 2.0 * np.sum(j**q * sig[1:])
    if s0 <= 0:
        return 1.0
    gamma = c_gamma * ((sq / s0) ** 2) ** (1.0 / (2 * q + 1))
    return float(gamma * t_obs ** (1.0 / (2 * q + 1)))


def choose(scores: np.ndarray, terms, kernel: Kernel, rule) -> BandwidthChoice:
    """Resolve a bandwidth setting on a score matrix (used for raw and prewhitened scores)."""
    rule = check_bandwidth_setting(rule)
    t_obs = scores.shape[0]
    upper = float(t_obs)           # b = T already uses every lag 0..T-1 for finite kernels
    if not isinstance(rule, str):
        return BandwidthChoice(rule, "fixed", f"fixed bandwidth b = {rule:g}")
    flags: set[str] = set()
    if rule == "rule-of-thumb":
        lags = int(math.floor(4.0 * (t_obs / 100.0) ** (2.0 / 9.0)))
        b = lags + 1.0
        text = f"L = floor(4 (T/100)^(2/9)) = {lags} lags, b = {b:g} (common practice)"
    elif rule == "textbook":
        b = 0.75 * t_obs ** (1.0 / 3.0)
        text = f"b = 0.75 T^(1/3) = {b:.3g} (common practice)"
    elif rule == "llsw":
        b = 1.3 * math.sqrt(t_obs)
        text = f"b = 1.3 T^(1/2) = {b:.3g} (Lazarus, Lewis, Stock & Watson 2018)"
    elif rule == "andrews":
        b, rho, capped = andrews_ar1(scores, kernel, slope_weights(terms))
        if capped:
            flags.add("rho_capped")
        text = (f"Andrews (1991) AR(1) plug-in b = {b:.3g} from score autocorrelations "
                + ", ".join(f"{r:.2f}" for r, t in zip(rho, terms) if t != "intercept")
                + (" (|rho| capped at 0.97)" if capped else ""))
    else:
        b = newey_west_1994(scores, kernel, slope_weights(terms))
        text = f"Newey-West (1994) plug-in b = {b:.3g}"
    if not np.isfinite(b) or b < 1.0:
        text += "; raised to b = 1 (no autocorrelation detected: lag 0 only)"
        b = 1.0
    if b > upper:
        text += f"; capped at b = T = {upper:g}"
        b = upper
        flags.add("bandwidth_capped")
    return BandwidthChoice(float(b), rule, text, flags)


def resolve_bandwidth(fit, kernel: Kernel, setting):
    """(b, explanation) for a fit's own scores; data-driven rules are computed once per fit."""
    if not isinstance(setting, str):
        return float(setting), f"fixed bandwidth b = {float(setting):g}"
    cache = fit.__dict__.setdefault("_bandwidth_cache", {})
    key = (kernel.name, setting)
    if key not in cache:
        cache[key] = choose(fit.raw_scores, fit.terms, kernel, setting)
    choice = cache[key]
    return choice.b, choice.explanation


def select_bandwidth(fit, kernel="bartlett", rule="andrews") -> BandwidthChoice:
    """Apply a bandwidth rule to a fit: returns a BandwidthChoice (float(choice) is b)."""
    k = get_kernel(kernel) if isinstance(kernel, str) else kernel
    resolve_bandwidth(fit, k, rule)
    return fit.__dict__["_bandwidth_cache"][(k.name, rule)] if isinstance(rule, str) \
        else choose(fit.raw_scores, fit.terms, k, rule)
