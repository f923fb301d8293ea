"""How few is few: a grouping's clusters described for inference (MacKinnon, Nielsen & Webb
2023, J. Econometrics 232(2), and their summary of leverage and influence; Carter, Schnepel &
Steigerwald 2017, REStat 99(4)).

`cluster_summary(fit, by)` reports the number of clusters and their sizes, the leverage of each
cluster (L_g = tr H_gg; they sum to k, so compare the largest with k/G), the partial leverage of
each coefficient (the share of the coefficient's own regressor variation, after partialling out
the others, that lies in the cluster), the effective number of clusters of each coefficient
(G* = G / (1 + Gamma), Gamma the squared coefficient of variation of
gamma_g = c'M X_g' Omega_g X_g M c with Omega_g = (1 - rho) I + rho 11'; rho = 1, the worst case
Carter et al. recommend, and rho = 0), and the cluster jackknife (the exact change of each
coefficient when one cluster is left out, b_(g) - b = -M X_g'(I - H_gg)^-1 e_g), with the cluster
whose omission moves each coefficient most. A plain-words reading says whether CR1 with t(G - 1)
can be trusted here and points to CR2 with Bell-McCaffrey degrees of freedom and the wild
cluster bootstrap when it cannot.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..covariance.cluster import check_offered
from ..covariance.fewclusters import hat_moments, pieces
from ..covariance.registry import estimator
from ..errors import LagwiseError, SpecificationError

#: Fewer clusters than this, or a smaller effective number, makes the reading advise against
#: CR1 with t(G - 1). A rule of thumb (common practice cites 30 to 50), not a test.
FEW_CLUSTERS = 30


@dataclass
class ClusterSummary:
    """The clusters of one grouping, described for inference (see the module docstring)."""

    by: str
    n_clusters: int
    sizes: dict                          # min, median, max
    clusters: pd.DataFrame               # per cluster: size, leverage, jackknife changes
    coefficients: pd.DataFrame           # per coefficient: G*, partial leverage, influence
    leverage_max: float
    leverage_max_cluster: object
    leverage_mean: float                 # k / G
    rho: float
    reading: list[str]
    notes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        """The summary in plain lines (CLI, reports)."""
        s = self.sizes
        out = [f"{self.n_clusters} clusters by {self.by}; sizes {s['min']} to {s['max']} "
               f"(median {s['median']:g})",
               f"largest cluster leverage {self.leverage_max:.3g} (cluster "
               f"{self.leverage_max_cluster}); the average is k/G = {self.leverage_mean:.3g}"]
        for term, r in self.coefficients.iterrows():
            gstar = "undefined" if not np.isfinite(r.effective_clusters) else \
                f"{r.effective_clusters:.3g}"
            infl = "" if not np.isfinite(r.largest_change) else (
                f"; leaving out cluster {r.most_influential} moves it by "
                f"{r.largest_change:.3g} ({r.change_in_cr1_se:.2g} CR1 standard errors)")
            out.append(f"{term}: effective clusters G* = {gstar} (rho = {self.rho:g}), "
                       f"{r.effective_clusters_rho0:.3g} (rho = 0){infl}")
        return out + self.reading + [f"note: {n}" for n in self.notes]


def cluster_summary(fit, by: str = "entity", rho: float = 1.0) -> ClusterSummary:
    """Describe the clusters of the grouping `by` (one a fit offers) for inference."""
    if not isinstance(rho, (int, float)) or isinstance(rho, bool) or not 0 <= rho <= 1:
        raise SpecificationError(f"rho must be between 0 and 1, got {rho!r}")
    if by == "both":
        raise SpecificationError("the cluster summary describes one grouping at a time: choose "
                                 "entity, time or a grouping column")
    check_offered(fit, by)
    blocks = fit.cluster_blocks(by)
    grouping = blocks.grouping
    G, k = grouping.n_groups, fit.k
    if G < 2:
        raise SpecificationError(f"clustering by {by} needs at least two clusters; this sample "
                                 f"has {G}")
    sizes = blocks.sizes
    notes: list[str] = []
    Wk, _ = hat_moments(blocks)
    lev = np.trace(Wk, axis1=1, axis2=2)
    M = fit.influence_map                                      # k x m
    least_squares = blocks.C is None
    if least_squares:
        Wm, q1m = hat_moments(blocks, blocks.m)
    else:
        Wm, q1m = _contribution_moments(fit, grouping)
    ell = M                                                     # rows l_j' = e_j'M
    ssq = np.einsum("jm,gmn,jn->gj", ell, Wm, ell)            # (G, k): l_j'W_g l_j
    sums = q1m @ ell.T                                          # (G, k): l_j'B_g'1
    total = np.einsum("jm,jm->j", ell, ell) if least_squares else ssq.sum(axis=0)
    partial = ssq / total

    def gstar(r):
        gam = (1.0 - r) * ssq + r * sums ** 2
        m = gam.mean(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            out = G / (1.0 + ((gam - m) ** 2).mean(axis=0) / m ** 2)
        out[~(m > 1e-14 * np.maximum(ssq.max(axis=0), 1e-300))] = np.nan
        return out
    g_rho, g0 = gstar(rho), gstar(0.0)
    if np.isnan(g_rho).any():
        notes.append(f"the effective number of clusters with rho = {rho:g} is undefined for "
                     "coefficients whose regressor sums to zero in every cluster (e.g. effects "
                     "of the clusters absorbed); see the rho = 0 column")
    delta = np.full((G, k), np.nan)
    se1 = np.full(k, np.nan)
    try:
        se1 = fit.infer(estimator("cluster", by=by)).table.std_error.to_numpy()
    except LagwiseError as exc:
        notes.append(f"CR1 standard errors not available: {exc}")
    if least_squares:
        pcs3 = pieces(blocks, "cr3", singular="pinv")
        delta = -pcs3.psi_w @ M.T
        if pcs3.singular:
            delta[pcs3.singular] = np.nan
            notes.append("clusters " + ", ".join(repr(grouping.label(g))
                                                 for g in pcs3.singular[:5])
                         + " alone identify a direction of the design: leaving one out leaves "
                           "a coefficient undefined (no jackknife change shown)")
    else:
        notes.append("the cluster jackknife (leave-one-cluster-out changes) is computed for "
                     "least squares only; an IV fit's first stage would change too")
    labels = [grouping.label(g) for g in range(G)]
    clusters = pd.DataFrame({"cluster": labels, "size": sizes, "leverage": lev},
                            index=pd.RangeIndex(G))
    for j, term in enumerate(fit.terms):
        clusters[f"change in {term}"] = delta[:, j]
    absd = np.where(np.isnan(delta), -np.inf, np.abs(delta))
    most = absd.argmax(axis=0)
    rows = []
    for j, term in enumerate(fit.terms):
        ok = np.isfinite(absd[most[j], j])
        change = float(delta[most[j], j]) if ok else np.nan
        rows.append({"term": term, "effective_clusters": g_rho[j],
                     "effective_clusters_rho0": g0[j],
                     "partial_leverage_max": float(partial[:, j].max()),
                     "most_influential": labels[most[j]] if ok else None,
                     "largest_change": change,
                     "change_in_cr1_se": change / se1[j] if ok and se1[j] > 0 else np.nan})
    coefs = pd.DataFrame(rows).set_index("term")
    coefs["most_influential"] = pd.Series([r["most_influential"] for r in rows],
                                          index=coefs.index, dtype=object)
    gmax = int(lev.argmax())
    reading = _reading(by, G, coefs, sizes, lev, k)
    return ClusterSummary(by=by, n_clusters=G,
                          sizes={"min": int(sizes.min()), "median": float(np.median(sizes)),
                                 "max": int(sizes.max())},
                          clusters=clusters, coefficients=coefs, leverage_max=float(lev[gmax]),
                          leverage_max_cluster=labels[gmax], leverage_mean=k / G, rho=rho,
                          reading=reading, notes=notes)


def _contribution_moments(fit, grouping):
    """B_g'B_g and B_g'1 of the moment contributions' basis (a model whose contributions are
    not in its hat basis: IV)."""
    B = fit.cluster_design().contributions
    G, m = grouping.n_groups, B.shape[1]
    order = np.argsort(grouping.codes, kind="stable")
    starts = np.concatenate(([0], np.cumsum(grouping.sizes)[:-1]))
    Bs = B[order]
    W = np.empty((G, m, m))
    for j in range(m):
        W[:, :, j] = np.add.reduceat(Bs * Bs[:, j:j + 1], starts, axis=0)
    return W, np.add.reduceat(Bs, starts, axis=0)


def _reading(by, G, coefs, sizes, lev, k) -> list[str]:
    low = [t for t, r in coefs.iterrows() if np.isfinite(r.effective_clusters)
           and r.effective_clusters < FEW_CLUSTERS]
    out = []
    if G < FEW_CLUSTERS or low:
        why = (f"{G} clusters" if G < FEW_CLUSTERS else f"{G} clusters, but an effective number "
               f"below {FEW_CLUSTERS} for {', '.join(low)}")
        out.append(f"Few clusters by {by} ({why}; {FEW_CLUSTERS} is a common rule of thumb, not "
                   "a test): the usual clustered t statistic (CR1 referred to t(G - 1)) tends to "
                   "reject too often here and is not to be trusted on its own. Use CR2 with "
                   "Bell-McCaffrey degrees of freedom, and check the conclusion with the wild "
                   "cluster bootstrap.")
    else:
        out.append(f"{G} clusters by {by}, with effective numbers of at least {FEW_CLUSTERS} "
                   "for every coefficient: CR1 with t(G - 1) is usually reliable at this size "
                   "(a rule of thumb, not a guarantee); CR2 and the bootstrap should agree.")
    if sizes.max() > 5 * max(np.median(sizes), 1):
        out.append(f"Cluster sizes are very unequal (largest {int(sizes.max())}, median "
                   f"{float(np.median(sizes)):g}): unequal clusters make CR1 less reliable "
                   "than their number suggests.")
    if lev.max() > 3 * k / G:
        out.append(f"One cluster has leverage {lev.max():.3g}, more than three times the average "
                   f"k/G = {k / G:.3g}: the estimates lean on it; see the jackknife changes.")
    return out
