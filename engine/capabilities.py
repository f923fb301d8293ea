"""What a fitted moment model declares about itself, and what an estimator family needs.

Every model kind states its capabilities once, in its own definition (`Model.capabilities`);
estimator families, the comparison, the app and the studies read them instead of looking at a
model's class or sniffing its attributes. A family lists the capabilities it needs
(`Family.needs`); `missing` names the first one a model lacks, in words a user can act on.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Capabilities:
    """A model's declared capabilities (all off unless the model says so)."""

    #: the rows are consecutive periods of one series, so lags of the contributions mean
    #: something (kernel, VAR and EWC estimators)
    time_ordered: bool = False
    #: entity and period codes per row: sums within entities and periods, the per-period model
    panel: bool = False
    #: g_t = w_t e_t for a regression design w_t and one residual series e_t (classical S)
    design: bool = False
    #: the diagonal of the hat matrix of that design (HC2, HC3)
    leverage: bool = False
    #: the coefficients are least squares of the response on the regressors themselves, so the
    #: moment contributions are x_t e_t (Hodrick's backward sums of the regressors)
    least_squares: bool = False
    #: a one-period series whose forward sum over h periods is the response
    one_period: bool = False
    #: the fit's own rows are in memory (residual diagnostics, leverage, refits)
    rows: bool = True
    #: the weighting of the moments can follow the estimator of S (two-step GMM along an axis)
    reweighting: bool = False
    #: labels of the equations when there is more than one ("equation:term" coefficients)
    equations: tuple = ()
    #: groupings the model can cluster by ("entity", "time", or column names)
    clusters: tuple = ()
    #: the hat matrix within each cluster (an orthonormal basis of its design and the absorbed
    #: effects: `cluster_design`), which the bias-reduced cluster covariances CR2 and CR3 need
    cluster_leverage: bool = False

    @property
    def several_equations(self) -> bool:
        return len(self.equations) > 1


#: Why an estimator does not apply when a capability is missing, in the user's words.
NEEDS = {
    "time_ordered": "this estimator weights lags of the moment contributions over time, and the "
                    "rows of this model are not one time series (for a stacked panel use "
                    "Driscoll-Kraay, clustering, or clustering by entity with a kernel over time)",
    "panel": "this estimator groups the moment contributions by entity and period: it needs a "
             "panel fit (lagwise.fit_panel)",
    "design": "this estimator needs a regression design and one residual series, which this "
              "model does not have; use HC0, a kernel, VAR or EWC",
    "leverage": "this estimator needs the leverage of each observation, which is not defined "
                "for this model; use HC0 or HC1",
    "least_squares": "this estimator is for a least-squares time-series regression",
    "one_period": "this estimator needs the one-period series behind an overlapping response: "
                  "build the response with the sum-next transform, or name it (one_period=...)",
    "rows": "this needs the model's rows in memory, which a fit from sufficient statistics "
            "does not keep",
    "reweighting": "the weighting of this model's moments cannot follow the estimator",
    "clusters": "this estimator groups the moment contributions into clusters: it needs a panel "
                "fit (lagwise.fit_panel, which offers its entity and period codes) or a fit "
                "given a grouping column (clusters=...)",
    "cluster_leverage": "this estimator needs the hat matrix within each cluster (CR2, CR3), "
                        "which this model does not declare; use CR1",
}


def missing(capabilities: Capabilities, needs) -> str | None:
    """The reason for the first capability in `needs` the model lacks (None when it has all)."""
    for need in needs:
        if not getattr(capabilities, need):
            return NEEDS[need]
    return None
