"""Reference laws of clustered t and Wald statistics with few clusters.

* `ClusterT(df, joint)`: Student t with degrees of freedom per coefficient (Bell & McCaffrey
  2002 or Imbens & Kolesar 2016); a Wald test of several restrictions is referred to the
  Hotelling-type approximation of Pustejovsky & Tipton (2018, "HTZ") computed for the tested
  restrictions themselves (`joint.eta(R)`), a single restriction to t with that contrast's own
  Bell-McCaffrey df.
* `HotellingT(eta)`: F* = (eta - q + 1) / (eta q) W ~ F(q, eta - q + 1) for a Wald statistic W
  of q restrictions (for q = 1: t^2 with eta df).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import SpecificationError
from .reference import StudentT, WaldForm


class HotellingT(StudentT):
    """The HTZ law of a Wald statistic of `q` restrictions with Wishart degrees of freedom eta."""

    key = "htz"

    def __init__(self, eta: float, q: int, why: str = ""):
        super().__init__(float(eta), why)
        self.q = int(q)

    def check_restrictions(self, m):
        if self.df - m + 1 <= 0:
            raise SpecificationError(
                f"the Hotelling-type approximation has eta = {self.df:.3g} degrees of freedom, "
                f"too few for {m} restrictions (it needs eta > {m - 1}): with so few effective "
                "clusters the joint test is not available; test the restrictions one at a time "
                "or use the wild cluster bootstrap")

    def critical_value(self, level, restrictions=1):
        if restrictions == 1:
            return super().critical_value(level)
        self.check_restrictions(restrictions)
        return float(stats.f.ppf(level, restrictions, self.df - restrictions + 1))

    def wald(self, w, m):
        self.check_restrictions(m)
        eta = self.df
        f = (eta - m + 1) / (eta * m) * w
        df = (m, eta - m + 1)
        return WaldForm(f, df, float(stats.f.sf(f, *df)))

    def describe(self):
        return (f"Hotelling-type approximation (HTZ, Pustejovsky & Tipton 2018): "
                f"eta = {self.df:.4g}" + (f" ({self.why})" if self.why else ""))

    @property
    def label(self):
        return f"HTZ, eta = {self.df:.3g}"

    def wald_text(self, m):
        return (f"F({m}, {self.df - m + 1:.4g}) of (eta - {m} + 1)/(eta {m}) W, eta = "
                f"{self.df:.4g} (HTZ, Pustejovsky & Tipton 2018)")


class ClusterT(StudentT):
    """t with per-coefficient degrees of freedom from a small-sample rule for clustered errors;
    joint tests by the Hotelling-type approximation of the tested restrictions (`joint`: an
    object with `eta(R)` for an m x k restriction matrix R, or None to refer joint tests to the
    smallest df)."""

    key = "t"

    def __init__(self, df, why: str = "", joint=None):
        super().__init__(df, why)
        self._joint = joint

    def _key(self):
        return tuple(sorted((k, tuple(np.ravel(v)) if isinstance(v, np.ndarray) else v)
                            for k, v in self.__dict__.items() if k != "_joint"))

    def for_restrictions(self, R):
        if self._joint is None:
            return super().for_restrictions(R)
        R = np.atleast_2d(np.asarray(R, dtype=float))
        return HotellingT(self._joint.eta(R), R.shape[0], self.why)
