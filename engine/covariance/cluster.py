"""Cluster-robust estimators of S (Liang & Zeger 1986; Arellano 1987; two-way: Cameron, Gelbach &
Miller 2011), with the bias-reduced corrections CR2 (Bell & McCaffrey 2002) and CR3 (the cluster
jackknife) and small-sample degrees of freedom (Bell & McCaffrey 2002; Imbens & Kolesar 2016),
for any grouping a model offers: a panel's entities and periods, or a column named in the fit's
`clusters=` (an industry, a country, a region)."""

from __future__ import annotations

import numpy as np

from ..errors import EstimationError, SpecificationError
from ..laws.clusters import ClusterT
from ..laws.reference import StudentT
from . import fewclusters as fc
from .longrun import LongRun, clip_to_psd
from .registry import Family, Param, estimator, register_family

CORRECTION_TITLES = {"cr1": "CR1", "cr2": "CR2", "cr3": "CR3"}
DF_TITLES = {"clusters": "t(G - 1)", "bell-mccaffrey": "Bell-McCaffrey df",
             "imbens-kolesar": "Imbens-Kolesar df"}


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


def one_way(model, dim: str, small_sample: bool, nested: bool | None = None):
    """CR1 S of one grouping from the group sums: (S, G, factor)."""
    s = model.group_sums(dim)
    groups = s.shape[0]
    _require_clusters(model, dim, groups)
    if nested is None:
        nested = model.effects_nested_in(dim)
    factor = cluster_factor(model, groups, nested) if small_sample else 1.0
    return s.T @ s / model.nobs * factor, groups, factor


def check_offered(model, by: str) -> None:
    offered = model.capabilities.clusters
    need = ("entity", "time") if by == "both" else (by,)
    for name in need:
        if name not in offered:
            raise SpecificationError(
                f"this fit offers no grouping {name!r} to cluster by"
                + (f" (it offers {', '.join(repr(o) for o in offered)})" if offered else "")
                + ("" if by == "both" else f"; fit it with clusters={by!r}")
                + (": clustering by both needs a panel's entities and periods" if by == "both"
                   else ""))


class _Joint:
    """Degrees of freedom of any contrast under one clustering: a single restriction gets its
    own Bell-McCaffrey (or Imbens-Kolesar) df, several the Hotelling-type approximation."""

    def __init__(self, pcs, influence, p, rule, moulton_params):
        self.pcs, self.M, self.p, self.rule, self.moulton = pcs, influence, p, rule, \
            moulton_params

    def ell(self, R):
        L = np.zeros((R.shape[0], self.p))
        L[:, :self.M.shape[1]] = R @ self.M
        return L

    def df(self, c) -> float:
        ell = self.ell(np.atleast_2d(c))[0]
        if self.rule == "imbens-kolesar":
            return fc.imbens_kolesar(self.pcs, ell, *self.moulton)
        return fc.bell_mccaffrey(self.pcs, ell)

    def eta(self, R) -> float:
        if R.shape[0] == 1:
            return self.df(R[0])
        return fc.htz_eta(self.pcs, self.ell(R))


def _df_law(model, blocks, pcs, rule: str, groups: int, by: str, correction: str):
    """The reference law of a one-way clustering under the df rule."""
    if rule == "clusters":
        return StudentT(groups - 1, f"G - 1, G = {groups} clusters ({by})")
    if not (blocks.least_squares and model.capabilities.least_squares):
        raise SpecificationError(
            f"{DF_TITLES[rule]} needs least-squares residuals (e = (I - H) y): "
            + (blocks.why_no_df or f"this model is {model.kind}")
            + "; use df='clusters'")
    moulton = fc.moulton(blocks) if rule == "imbens-kolesar" else None
    joint = _Joint(pcs, model.influence_map, blocks.p, rule, moulton)
    eye = np.eye(model.k)
    dfs = np.array([joint.df(eye[j]) for j in range(model.k)])
    if not np.all(np.isfinite(dfs) & (dfs > 0)):
        bad = [model.terms[j] for j in np.flatnonzero(~(np.isfinite(dfs) & (dfs > 0)))]
        raise EstimationError(f"the {DF_TITLES[rule]} of {', '.join(bad)} are not defined "
                              "(the coefficient does not vary across clusters)")
    why = (f"{DF_TITLES[rule]} per coefficient ({CORRECTION_TITLES[correction]}, G = {groups} "
           f"clusters by {by}); Wald tests of several restrictions: Hotelling-type "
           "approximation (HTZ)")
    return ClusterT(dfs, why, joint=joint)


def _one_way_long_run(model, by, correction, df, small_sample):
    blocks = pcs = None
    if correction == "cr1":
        s, groups, factor = one_way(model, by, small_sample)
    else:
        blocks = model.cluster_blocks(by)
        groups = blocks.n_groups
        _require_clusters(model, by, groups)
        pcs = fc.pieces(blocks, correction)
        s, factor = pcs.meat() / model.nobs, 1.0
    if df != "clusters" and pcs is None:
        blocks = model.cluster_blocks(by)
        pcs = fc.pieces(blocks, "cr1")
    law = _df_law(model, blocks, pcs, df, groups, by, correction)
    what = {"entity": "entities", "time": "periods"}.get(by, f"groups of '{by}'")
    notes = [f"clustered by {by}: {groups} clusters ({what})"]
    if correction == "cr1":
        notes[0] += (f", small-sample factor {factor:.4g}" if small_sample else
                     ", no small-sample factor")
        if small_sample and model.effects_nested_in(by):
            notes.append("the fixed effects are nested in the clusters and not counted in K")
    else:
        notes[0] += (", residuals of each cluster premultiplied by (I - H_gg)^(-1/2) (CR2, Bell "
                     "& McCaffrey 2002)" if correction == "cr2" else
                     ", residuals of each cluster premultiplied by (I - H_gg)^(-1) (CR3, the "
                     "cluster jackknife, without a (G-1)/G factor)")
        if blocks.nested:
            notes.append(f"the {' and '.join(blocks.nested)} effects are nested in the clusters "
                         "and drop out of H_gg (Pustejovsky & Tipton 2018)")
        if blocks.not_nested:
            notes.append(f"the {' and '.join(blocks.not_nested)} effects are not nested in the "
                         "clusters: H_gg includes them (Pustejovsky & Tipton 2018)")
    if df != "clusters":
        lo, hi = float(np.min(law.df)), float(np.max(law.df))
        notes.append(f"{DF_TITLES[df]}: {lo:.3g}" + (f" to {hi:.3g}" if hi > lo else "")
                     + f" (G - 1 = {groups - 1})")
    return LongRun(S=s, factor=factor, law=law, notes=notes)


def _two_way_long_run(model, correction, df, small_sample):
    if df != "clusters":
        raise SpecificationError(f"{DF_TITLES[df]} needs one-way clustering; with two-way "
                                 "clustering use df='clusters' (the smaller G - 1)")
    n = model.nobs
    if correction == "cr1":
        se, ge, fe = one_way(model, "entity", small_sample, False)
        st, gt, ft = one_way(model, "time", small_sample, False)
        fc_cell = n / (n - (n - model.df_resid)) if small_sample else 1.0
        s = se + st - model.outer() / n * fc_cell
        factor = fe
    else:
        ge, gt = model.group_sums("entity").shape[0], model.group_sums("time").shape[0]
        _require_clusters(model, "entity", ge)
        _require_clusters(model, "time", gt)
        se, st, sc = (model.cluster_meat(name, correction) / n
                      for name in ("entity", "time", "entity x time"))
        s, factor = se + st - sc, 1.0
    out = LongRun(S=None, factor=factor)
    out.S = clip_to_psd(s, f"two-way clustered ({CORRECTION_TITLES[correction]})", out)
    g = min(ge, gt)
    out.law = StudentT(g - 1, f"G - 1 with the smaller dimension, G = {g}")
    text = (f"clustered by entity ({ge} clusters) and by time ({gt} clusters): "
            "entity + time - intersection")
    if correction == "cr1":
        text += (", each term with its own small-sample factor" if small_sample else
                 ", no small-sample factor")
    else:
        text += f", each term the one-way {CORRECTION_TITLES[correction]} of its clustering"
    out.notes.insert(0, text)
    return out


def cluster(model, by: str = "entity", correction: str = "cr1", df: str = "clusters",
            small_sample: bool = True) -> LongRun:
    """Cluster-robust S: (1/N) sum_g s_g s_g' for the (adjusted) sums s_g of the moment
    contributions in each cluster. CR1 multiplies by G/(G-1)(N-1)/(N-K) when asked; CR2 and CR3
    adjust each cluster's residuals by (I - H_gg)^(-1/2) or (I - H_gg)^(-1) and have no factor.
    Two-way (by="both"): S_entity + S_time - S_cell, each term the one-way estimator of its
    clustering, repaired to PSD by eigenvalue clipping (flagged). Reference law t(G - 1) (two-way:
    the smaller G), or t with Bell-McCaffrey / Imbens-Kolesar df per coefficient."""
    check_offered(model, by)
    if by == "both":
        return _two_way_long_run(model, correction, df, small_sample)
    return _one_way_long_run(model, by, correction, df, small_sample)


_CLUSTER_TITLES = {"entity": "Clustered by entity", "time": "Clustered by time",
                   "both": "Clustered by entity and time"}


def _label(p, lr) -> str:
    by = p["by"]
    text = _CLUSTER_TITLES.get(by, f"Clustered by {by}")
    if p["correction"] != "cr1":
        text += f", {CORRECTION_TITLES[p['correction']]}"
    elif not p["small_sample"]:
        text += ", no small-sample factor"
    if p["df"] != "clusters":
        text += f", {DF_TITLES[p['df']]}"
    return text


def _presets(model, kernel, bandwidth) -> list:
    caps = model.capabilities
    offered = list(caps.clusters)
    out = [estimator("cluster", by=g) for g in offered]
    if "entity" in offered and "time" in offered:
        out.append(estimator("cluster", by="both"))
    if caps.cluster_leverage:
        rule = "bell-mccaffrey" if caps.least_squares else "clusters"
        out += [estimator("cluster", by=g, correction="cr2", df=rule) for g in offered]
    return out


register_family(Family(
    name="cluster", title="Clustered",
    citation="Liang & Zeger (1986); Arellano (1987); two-way: Cameron, Gelbach & Miller (2011), "
             "JBES 29(2); CR2 and its df: Bell & McCaffrey (2002), Survey Methodology 28(2); "
             "with absorbed effects: Pustejovsky & Tipton (2018), JBES 36(4); Imbens & Kolesar "
             "(2016), REStat 98(4)",
    assumptions="Clusters are independent of each other, with any correlation and "
                "heteroskedasticity inside a cluster. CR1 with t(G - 1) needs many clusters of "
                "similar size and leverage; with few or unequal clusters it over-rejects. CR2 "
                "(bias-reduced) is unbiased when the errors are independent with equal variance "
                "and stays close otherwise; with Bell-McCaffrey or Imbens-Kolesar degrees of "
                "freedom its t test keeps its size with far fewer clusters. CR3 (the cluster "
                "jackknife) is conservative. By entity: a firm's errors may be correlated over "
                "time; by time: firms' errors may be correlated within a period; both: either, "
                "but not across different firms in different periods.",
    params=(
        Param("by", "grouping", "entity", "entity: clusters are entities; time: clusters are "
              "periods; both: two-way (entity + time - intersection); or a column the fit "
              "offers (fit with clusters='industry')",
              choices=("entity", "time", "both"), title="cluster by"),
        Param("correction", "choice", "cr1",
              "cr1: G/(G-1)(N-1)/(N-K) times the sum of cluster score products; cr2: "
              "bias-reduced linearisation, residuals times (I - H_gg)^(-1/2) (Bell & McCaffrey "
              "2002); cr3: the cluster jackknife, residuals times (I - H_gg)^(-1)",
              choices=fc.CORRECTIONS, title="correction"),
        Param("df", "choice", "clusters",
              "degrees of freedom of the t reference: clusters: G - 1; bell-mccaffrey: the "
              "Satterthwaite approximation of Bell & McCaffrey (2002), per coefficient; "
              "imbens-kolesar: the same with a random-effects working model (Imbens & Kolesar "
              "2016). Joint tests with the last two: the Hotelling-type approximation (HTZ)",
              choices=fc.DF_RULES, title="degrees of freedom"),
        Param("small_sample", "bool", True,
              "CR1 only: multiply each term by G/(G-1) x (N-1)/(N-K) (the usual CRV1 practice; "
              "K counts coefficients and absorbed effects)",
              title="small-sample factor G/(G-1) x (N-1)/(N-K)"),
    ),
    long_run=lambda model, by, correction, df, small_sample: cluster(model, by, correction, df,
                                                                     small_sample),
    psd=lambda p: True, label=_label, group="cluster", needs=("clusters",),
    reference_lines=True, presets=_presets))
