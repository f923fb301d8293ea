"""Cluster-robust estimators of S for panels (Liang & Zeger 1986; Arellano 1987; two-way: Cameron,
Gelbach & Miller 2011)."""

from __future__ import annotations

from ..errors import EstimationError
from ..laws.reference import StudentT
from .longrun import LongRun, clip_to_psd
from .registry import Family, Param, estimator, register_family


def _require_clusters(model, dim: str, groups: int) -> None:
    if groups < 2:
        raise EstimationError(f"clustering by {dim} needs at least two clusters; this sample has "
                              f"{groups}")
    if groups <= model.k:
        raise EstimationError(
            f"clustering by {dim} needs more clusters than coefficients: {groups} clusters, "
            f"{model.k} coefficients. The clustered S has rank below k, so some standard errors "
            "would be zero or undefined; cluster by the other dimension, use Driscoll-Kraay, or "
            "drop regressors")


def cluster_factor(model, groups: int, nested: bool = False) -> float:
    """G/(G-1) x (N-1)/(N-K), the usual small-sample factor of a one-way cluster estimate. K
    counts the coefficients and the effect parameters absorbed, except fixed effects nested in
    the clusters (entity effects with clusters by entity), which are not counted (the
    convention of Cameron & Miller 2015, J. Human Resources 50(2), and linearmodels): K is then
    the coefficients plus one for the overall level the effects absorb."""
    n, kk = model.nobs, model.nobs - model.df_resid
    if nested:
        kk = model.k + 1
    return groups / (groups - 1.0) * (n - 1.0) / (n - kk)


def _nested(model, dim: str) -> bool:
    """The model's only fixed effects are those of the clusters' dimension."""
    return tuple(model.panel.effects) == (dim,)


def one_way(model, dim: str, small_sample: bool, nested: bool = False):
    s = model.group_sums(dim)
    groups = s.shape[0]
    _require_clusters(model, dim, groups)
    factor = cluster_factor(model, groups, nested) if small_sample else 1.0
    return s.T @ s / model.nobs * factor, groups, factor


def cluster(model, by: str, small_sample: bool = True) -> LongRun:
    """Cluster-robust S: (1/N) sum_g s_g s_g' for the sums s_g of the moment contributions in each
    cluster (by entity or by period), with the factor G/(G-1)(N-1)/(N-K) when asked for. Two-way
    (Cameron, Gelbach & Miller 2011): S_entity + S_time - S_cell, each term with its own G (a
    cell is one row, so the last term is the heteroskedasticity-only S), repaired to PSD by
    eigenvalue clipping (flagged) when the difference is not PSD. Reference law t(G - 1), with
    the smaller G for two-way."""
    if by in ("entity", "time"):
        nested = _nested(model, by)
        s, groups, factor = one_way(model, by, small_sample, nested)
        return LongRun(S=s, factor=factor, law=StudentT(groups - 1, f"G - 1, G = {groups} "
                                                        f"{'entities' if by == 'entity' else 'periods'}"),
                       notes=[f"clustered by {by}: {groups} clusters"
                              + (f", small-sample factor {factor:.4g}" if small_sample else
                                 ", no small-sample factor")
                              + ("; the {0} effects are nested in the clusters and not counted "
                                 "in K".format(by) if nested and small_sample else "")])
    se, ge, fe = one_way(model, "entity", small_sample)
    st, gt, ft = one_way(model, "time", small_sample)
    n = model.nobs
    fc = n / (n - (n - model.df_resid)) if small_sample else 1.0
    out = LongRun(S=None, factor=fe)
    s = se + st - model.outer() / n * fc
    out.S = clip_to_psd(s, "two-way clustered", out)
    g = min(ge, gt)
    out.law = StudentT(g - 1, f"G - 1 with the smaller dimension, G = {g}")
    out.notes.insert(0, f"clustered by entity ({ge} clusters) and by time ({gt} clusters): "
                        "entity + time - intersection"
                     + (", each term with its own small-sample factor" if small_sample else
                        ", no small-sample factor"))
    return out

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
    long_run=lambda model, by, small_sample: cluster(model, by, small_sample),
    psd=lambda p: True,
    label=lambda p, lr: _CLUSTER_TITLES[p["by"]]
    + ("" if p["small_sample"] else ", no small-sample factor"),
    group="cluster", needs=("panel",), reference_lines=True,
    presets=lambda model, kernel, bandwidth: [estimator("cluster", by=b)
                                              for b in ("entity", "time", "both")]))
