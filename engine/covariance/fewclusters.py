"""Few-cluster algebra: bias-reduced cluster covariances (CR2, CR3), their degrees of freedom
(Bell-McCaffrey, Imbens-Kolesar), the Hotelling-type Wald approximation (HTZ) and the cluster
jackknife, from per-cluster blocks of k x k size (no N x N and, for large clusters, no
n_g x n_g matrix).

Notation. A model hands over its cluster design (`ClusterDesign`): an orthonormal basis `hat`
(N x k) of the design whose projection is the hat matrix (least squares: the basis of X, the
within-transformed X of a panel; 2SLS: the basis of the fitted regressors X^ = P_Z X), the
residuals e, the basis of its moment contributions (`contributions`, N x m; least squares: the
hat basis itself) and the factors absorbed by a within transformation. For a clustering,
`Q = [hat, Ft]` (N x p) adds an orthonormal basis Ft of the absorbed effects that are not nested
in the clusters (Pustejovsky & Tipton 2018, JBES 36(4)): factors whose every level lies inside
one cluster drop out of every cluster-level formula, the others enter through
Ft = orthonormal basis of (I - H_nested) E_other. Then QQ' is the relevant part of the
explicit-dummy hat matrix and, per cluster with W_g = Q_g'Q_g = sum_j lam_j r_j r_j',

    f(I - H_gg) = f(1) I + Q_g D_g Q_g',
    D_g = sum_{lam_j > 0} [f(1 - lam_j) - f(1)] / lam_j r_j r_j'

with f(x) = x^(-1/2) (CR2, Bell & McCaffrey 2002) or 1/x (CR3, the cluster jackknife), so every
adjusted quantity needs only W_g, Q_g'e_g, Q_g'1 and (for a separate contribution basis)
B_g'Q_g, B_g'e_g. Clusters smaller than p use the n_g x n_g eigen form instead (cheaper there).

Conventions (REFERENCES.md section 23): CR3 has no (G-1)/G factor (R clubSandwich "CR3"; it is
exactly sum_g (b_(g) - b)(b_(g) - b)'); a direction of leverage one (I - H_gg singular) is an
error by default, or the Moore-Penrose convention of clubSandwich and Pustejovsky & Tipton with
singular="pinv".
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..data.groupings import Grouping
from ..errors import EstimationError, SpecificationError

CORRECTIONS = ("cr1", "cr2", "cr3")
DF_RULES = ("clusters", "bell-mccaffrey", "imbens-kolesar")
#: 1 - eigenvalue of H_gg at or below this is a direction of leverage one (I - H_gg singular).
SINGULAR_TOL = 1e-8
#: Largest N x L dense array built for absorbed effects not nested in the clusters.
MAX_DENSE_ELEMENTS = 60_000_000
#: Largest number of numbers held by the per-cluster p x p blocks.
MAX_BLOCK_ELEMENTS = 80_000_000


@dataclass
class ClusterDesign:
    """What a model hands over for cluster-level leverage (see the module docstring)."""

    hat: np.ndarray                        # N x k orthonormal basis of the hat matrix's design
    resid: np.ndarray                      # N residuals
    contributions: np.ndarray | None = None   # N x m basis of the moment contributions
    absorbed: tuple = ()                   # ((name, codes per row), ...) absorbed factors
    #: the residuals are (I - H) y for this hat matrix (least squares), so the degrees of
    #: freedom of Bell & McCaffrey and Imbens & Kolesar apply; otherwise why not
    least_squares: bool = True
    why_no_df: str = ""
    hat_words: str = "the regressors"


@dataclass
class ClusterBlocks:
    """Per-cluster sufficient statistics of one clustering (see the module docstring). Clusters
    in `big` have W (p x p), qe, q1 (p) and, with a separate contribution basis, C (m x p) and
    we (m); clusters in `small` keep their rows for the n_g x n_g form."""

    grouping: Grouping
    p: int
    k: int
    m: int
    nobs: int
    big: np.ndarray
    W: np.ndarray
    qe: np.ndarray
    q1: np.ndarray
    C: np.ndarray | None
    we: np.ndarray | None
    small: list                            # [(cluster indices, Q rows, B rows or None, e rows)]
    esum: np.ndarray                       # sum of the residuals in each cluster
    ssr: float
    sizes: np.ndarray | None = None        # rows per cluster
    least_squares: bool = True
    why_no_df: str = ""
    nested: list = field(default_factory=list)
    not_nested: list = field(default_factory=list)

    @property
    def n_groups(self) -> int:
        return self.grouping.n_groups

    @property
    def nbytes(self) -> int:
        out = sum(a.nbytes for a in (self.W, self.qe, self.q1, self.esum))
        out += sum(a.nbytes for a in (self.C, self.we) if a is not None)
        for _, q, b, e in self.small:
            out += q.nbytes + e.nbytes + (b.nbytes if b is not None else 0)
        return out


@dataclass
class ClusterPieces:
    """Adjusted per-cluster quantities for one correction: psi_w (G x m) the adjusted sums of
    the moment contributions B_g'A_g e_g; and in Q coordinates T_g = Q_g'A_gQ_g,
    U_g = Q_g'A_g^2 Q_g, psi_g = Q_g'A_g e_g, tau_g = Q_g'A_g 1, q1_g = Q_g'1 (G x p or
    G x p x p), which the degrees of freedom use."""

    correction: str
    n_groups: int
    psi_w: np.ndarray
    T: np.ndarray
    U: np.ndarray
    psi: np.ndarray
    tau: np.ndarray
    q1: np.ndarray
    k: int
    singular: list = field(default_factory=list)

    def meat(self) -> np.ndarray:
        """sum_g psi_w,g psi_w,g' (m x m)."""
        return self.psi_w.T @ self.psi_w


# --------------------------------------------------------------------------- grouped rows

class _Sorted:
    """Rows sorted by cluster: order, sizes, starts."""

    def __init__(self, codes: np.ndarray, n_groups: int):
        self.order = np.argsort(codes, kind="stable")
        self.sizes = np.bincount(codes, minlength=n_groups)
        self.starts = np.concatenate(([0], np.cumsum(self.sizes)[:-1]))


def _sums(codes, a, n_groups):
    if a.ndim == 1:
        return np.bincount(codes, weights=a, minlength=n_groups)
    out = np.empty((n_groups, a.shape[1]))
    for j in range(a.shape[1]):
        out[:, j] = np.bincount(codes, weights=a[:, j], minlength=n_groups)
    return out


def _crossprods(rows_a, rows_b, starts):
    """(len(starts), ma, mb) sums of a_i b_i' over consecutive row ranges starting at starts."""
    ma, mb = rows_a.shape[1], rows_b.shape[1]
    out = np.empty((len(starts), ma, mb))
    for j in range(mb):
        out[:, :, j] = np.add.reduceat(rows_a * rows_b[:, j:j + 1], starts, axis=0)
    return out


# --------------------------------------------------------------------------- absorbed effects

def nested_in(factor: np.ndarray, clusters: np.ndarray) -> bool:
    """Every level of the factor lies inside a single cluster."""
    n_levels = int(factor.max()) + 1
    lo = np.full(n_levels, np.iinfo(np.int64).max)
    hi = np.full(n_levels, -1)
    np.minimum.at(lo, factor, clusters)
    np.maximum.at(hi, factor, clusters)
    return bool(np.all(lo == hi))


def _demean(a: np.ndarray, factors: list, tol=1e-13, max_iter=10_000) -> np.ndarray:
    """(I - H_D) a for the dummies of the given factors (exact for one, alternating projections
    for several)."""
    out = a.copy()
    if not factors:
        return out

    def means(x, codes):
        n = int(codes.max()) + 1
        cnt = np.bincount(codes, minlength=n).astype(float)
        return (_sums(codes, x, n) / cnt[:, None])[codes]
    if len(factors) == 1:
        return out - means(out, factors[0])
    scale = max(float(np.abs(a).max()), 1e-300)
    for _ in range(max_iter):
        biggest = 0.0
        for codes in factors:
            m = means(out, codes)
            out -= m
            biggest = max(biggest, float(np.abs(m).max()))
        if biggest <= tol * scale:
            return out
    raise EstimationError("demeaning the absorbed effects for the bias-reduced cluster "
                          "covariance did not converge")


def absorbed_basis(absorbed, clusters: np.ndarray, tol: float = 1e-10):
    """(Ft or None, nested names, not-nested names): the orthonormal basis of the absorbed
    effects not nested in the clusters, after projecting out the nested ones."""
    if not absorbed:
        return None, [], []
    nested = [(name, codes) for name, codes in absorbed if nested_in(codes, clusters)]
    other = [(name, codes) for name, codes in absorbed if not nested_in(codes, clusters)]
    if not other:
        return None, [n for n, _ in nested], []
    n = clusters.size
    levels = sum(int(c.max()) + 1 for _, c in other)
    if n * levels > MAX_DENSE_ELEMENTS:
        raise EstimationError(
            f"the {' and '.join(n for n, _ in other)} effects are not nested in the clusters and "
            f"have {levels} levels: the bias-reduced covariance needs their basis over all "
            f"{n} rows ({n * levels:,} numbers, above the limit of {MAX_DENSE_ELEMENTS:,}). "
            "Cluster by a grouping that contains those effects, absorb fewer effects, or use CR1")
    E = np.zeros((n, levels))
    rows = np.arange(n)
    off = 0
    for _, codes in other:
        E[rows, off + codes] = 1.0
        off += int(codes.max()) + 1
    F = _demean(E, [c for _, c in nested])
    lam, vec = np.linalg.eigh(F.T @ F)
    keep = lam > tol * max(float(lam.max()), 1e-300)
    return F @ (vec[:, keep] / np.sqrt(lam[keep])), [n for n, _ in nested], \
        [n for n, _ in other]


# --------------------------------------------------------------------------- blocks

def blocks_from_rows(design: ClusterDesign, grouping: Grouping,
                     dense_below: int | None = None) -> ClusterBlocks:
    """Per-cluster blocks from a model's rows: clusters with fewer rows than `dense_below`
    (default p, where the n_g x n_g form is the cheaper) keep their rows for that form, the
    others get p x p blocks (tests force either form)."""
    codes, n_groups = grouping.codes, grouping.n_groups
    e = design.resid
    Ft, nested, other = absorbed_basis(design.absorbed, codes)
    hat = design.hat
    k = hat.shape[1]
    Q = hat if Ft is None else np.hstack([hat, Ft])
    p = Q.shape[1]
    B = design.contributions
    m = k if B is None else B.shape[1]
    srt = _Sorted(codes, n_groups)
    sizes = srt.sizes
    small_mask = sizes < (p if dense_below is None else dense_below)
    big = np.flatnonzero(~small_mask)
    if big.size * p * p > MAX_BLOCK_ELEMENTS:
        raise EstimationError(f"{big.size} clusters with {p} x {p} blocks exceed the memory "
                              "limit of the bias-reduced covariance; use CR1")
    Qs, es = Q[srt.order], e[srt.order]
    Bs = None if B is None else B[srt.order]
    if big.size:
        # rows of the big clusters, consecutive
        take = np.concatenate([np.arange(srt.starts[g], srt.starts[g] + sizes[g]) for g in big])
        starts = np.concatenate(([0], np.cumsum(sizes[big])[:-1]))
        Qb, eb = Qs[take], es[take]
        W = _crossprods(Qb, Qb, starts)
        W = 0.5 * (W + W.transpose(0, 2, 1))
        qe = np.add.reduceat(Qb * eb[:, None], starts, axis=0)
        q1 = np.add.reduceat(Qb, starts, axis=0)
        if Bs is not None:
            Bb = Bs[take]
            C = _crossprods(Bb, Qb, starts)
            we = np.add.reduceat(Bb * eb[:, None], starts, axis=0)
        else:
            C = we = None
    else:
        W = np.zeros((0, p, p))
        qe = q1 = np.zeros((0, p))
        C = None if Bs is None else np.zeros((0, m, p))
        we = None if Bs is None else np.zeros((0, m))
    small = []
    for s in np.unique(sizes[small_mask]):
        sel = np.flatnonzero(small_mask & (sizes == s))
        rows = srt.starts[sel][:, None] + np.arange(s)
        small.append((sel, Qs[rows], None if Bs is None else Bs[rows], es[rows]))
    return ClusterBlocks(grouping=grouping, p=p, k=k, m=m, nobs=int(e.size), big=big, W=W,
                         qe=qe, q1=q1, C=C, we=we, small=small,
                         esum=_sums(codes, e, n_groups), ssr=float(e @ e), sizes=sizes,
                         least_squares=design.least_squares, why_no_df=design.why_no_df,
                         nested=nested, not_nested=other)


def blocks_from_sums(grouping: Grouping, W, qe, q1, esum, ssr, nobs, sizes,
                     nested=()) -> ClusterBlocks:
    """Blocks from per-cluster sums gathered elsewhere (the Dask path): least squares with the
    contribution basis equal to the hat basis, no absorbed effects outside the clusters."""
    p = W.shape[1]
    return ClusterBlocks(grouping=grouping, p=p, k=p, m=p, nobs=int(nobs),
                         big=np.arange(grouping.n_groups), W=0.5 * (W + W.transpose(0, 2, 1)),
                         qe=qe, q1=q1, C=None, we=None, small=[], esum=esum, ssr=float(ssr),
                         sizes=np.asarray(sizes), nested=list(nested))


# --------------------------------------------------------------------------- pieces

def _fvals(one_minus, correction, singular, tol):
    bad = one_minus <= tol
    safe = np.where(bad, 1.0, one_minus)
    if correction == "cr2":
        f = safe ** -0.5
    elif correction == "cr3":
        f = 1.0 / safe
    else:
        f = np.ones_like(safe)
    if correction != "cr1" and singular == "pinv":
        f = np.where(bad, 0.0, f)
    return f, bad & (correction != "cr1")


def pieces(blocks: ClusterBlocks, correction: str, singular: str = "error",
           tol: float = SINGULAR_TOL) -> ClusterPieces:
    """The adjusted per-cluster pieces of one correction (see ClusterPieces)."""
    if correction not in CORRECTIONS:
        raise SpecificationError(f"correction must be one of {', '.join(CORRECTIONS)}, not "
                                 f"{correction!r}")
    if singular not in ("error", "pinv"):
        raise SpecificationError(f"singular must be 'error' or 'pinv', not {singular!r}")
    G, p, m = blocks.n_groups, blocks.p, blocks.m
    T = np.empty((G, p, p))
    U = np.empty((G, p, p))
    psi = np.empty((G, p))
    tau = np.empty((G, p))
    q1 = np.empty((G, p))
    psi_w = np.empty((G, m))
    bad_clusters: list[int] = []
    idx = blocks.big
    if idx.size:
        W = blocks.W
        q1[idx] = blocks.q1
        if correction == "cr1":
            T[idx], U[idx], psi[idx], tau[idx] = W, W, blocks.qe, blocks.q1
            psi_w[idx] = blocks.we if blocks.C is not None else blocks.qe[:, :m]
        else:
            lam, V = np.linalg.eigh(W)
            lam = np.clip(lam, 0.0, None)
            f, bad = _fvals(1.0 - lam, correction, singular, tol)
            # a direction with lam = 0 has Q_g r = 0: it drops out whatever f is there
            bad &= lam > tol
            bad_clusters += idx[bad.any(axis=1)].tolist()
            Vt = V.transpose(0, 2, 1)
            fW = (V * f[:, None, :]) @ Vt
            T[idx] = (V * (f * lam)[:, None, :]) @ Vt
            U[idx] = (V * (f * f * lam)[:, None, :]) @ Vt
            psi[idx] = np.einsum("gij,gj->gi", fW, blocks.qe)
            tau[idx] = np.einsum("gij,gj->gi", fW, blocks.q1)
            if blocks.C is None:
                psi_w[idx] = psi[idx][:, :m]
            else:
                with np.errstate(divide="ignore", invalid="ignore"):
                    ratio = np.where(lam > tol, (f - 1.0) / np.where(lam > tol, lam, 1.0), 0.0)
                D = (V * ratio[:, None, :]) @ Vt
                psi_w[idx] = blocks.we + np.einsum("gmp,gpq,gq->gm", blocks.C, D, blocks.qe)
    for sel, Qb, Bb, eb in blocks.small:
        H = Qb @ Qb.transpose(0, 2, 1)
        mu, Ub = np.linalg.eigh(H)
        mu = np.clip(mu, 0.0, None)
        f, bad = _fvals(1.0 - mu, correction, singular, tol)
        bad_clusters += sel[bad.any(axis=1)].tolist()
        A = (Ub * f[:, None, :]) @ Ub.transpose(0, 2, 1)
        AQ = A @ Qb
        Ae = np.einsum("gst,gt->gs", A, eb)
        T[sel] = Qb.transpose(0, 2, 1) @ AQ
        U[sel] = AQ.transpose(0, 2, 1) @ AQ
        psi[sel] = np.einsum("gsp,gs->gp", Qb, Ae)
        tau[sel] = AQ.sum(axis=1)
        q1[sel] = Qb.sum(axis=1)
        psi_w[sel] = psi[sel][:, :m] if Bb is None else np.einsum("gsm,gs->gm", Bb, Ae)
    bad_clusters = sorted(set(bad_clusters))
    if bad_clusters and singular == "error":
        names = ", ".join(repr(blocks.grouping.label(g)) for g in bad_clusters[:5])
        raise EstimationError(
            f"{correction.upper()} is undefined: I - H_gg is singular for cluster(s) {names} of "
            f"'{blocks.grouping.name}' (a direction of leverage one, e.g. a cluster with a "
            "single observation, or a regressor non-zero only in that cluster). Use CR1, drop "
            "or merge those clusters, or ask for the Moore-Penrose convention "
            "(singular='pinv', as clubSandwich and Pustejovsky & Tipton 2018 do)")
    return ClusterPieces(correction=correction, n_groups=G, psi_w=psi_w, T=T, U=U, psi=psi,
                         tau=tau, q1=q1, k=blocks.k, singular=bad_clusters)


# --------------------------------------------------------------------------- degrees of freedom

def _lowrank_moments(d, P, C):
    """trace and squared Frobenius norm of diag(d) + P C P' (G x G) in O(G p^2)."""
    PtP = P.T @ P
    PtDP = (P * d[:, None]).T @ P
    tr = d.sum() + np.sum(C * PtP.T)
    CP = C @ PtP
    fro = np.sum(d * d) + 2.0 * np.sum(C * PtDP.T) + np.sum(CP * CP.T)
    return float(tr), float(fro)


def _contrast(pcs: ClusterPieces, ell):
    """For p_g = A_g Q_g l: (p_g'p_g, Q_g'p_g, 1'p_g) over the clusters."""
    b = pcs.T @ ell
    a = np.einsum("i,gij,j->g", ell, pcs.U, ell)
    t = pcs.tau @ ell
    return a, b, t


def bell_mccaffrey(pcs: ClusterPieces, ell) -> float:
    """Bell & McCaffrey (2002) Satterthwaite df for the contrast with Q-coordinates `ell`
    (working model s^2 I; clubSandwich coef_test "Satterthwaite"): with
    Omega_gh = delta_gh p_g'p_g - (Q_g'p_g)'(Q_h'p_h), df = (tr Omega)^2 / ||Omega||_F^2."""
    a, b, _ = _contrast(pcs, ell)
    tr, fro = _lowrank_moments(a, b, -np.eye(b.shape[1]))
    return tr * tr / fro


def moulton(blocks: ClusterBlocks) -> tuple[float, float]:
    """(rho, sigma^2) of the Moulton working model sigma^2 I + rho 11' estimated from the
    residuals (the estimates of R dfadjust, rho may be negative)."""
    sizes = blocks.sizes.astype(float)
    den = float(np.sum(sizes ** 2) - blocks.nobs)
    rho = (float(blocks.esum @ blocks.esum) - blocks.ssr) / den if den > 0 else 0.0
    return rho, max(blocks.ssr / blocks.nobs - rho, 0.0)


def imbens_kolesar(pcs: ClusterPieces, ell, rho: float, sigma2: float) -> float:
    """Imbens & Kolesar (2016, REStat 98(4)) df (tr Psi)^2 / tr(Psi^2), Psi = G' Omega G with the
    Moulton working model (see `moulton`), in O(G p^2)."""
    a, b, t = _contrast(pcs, ell)
    p = b.shape[1]
    P = np.hstack([b, t[:, None] * pcs.q1])
    eye = np.eye(p)
    C = np.block([[-sigma2 * eye + rho * (pcs.q1.T @ pcs.q1), -rho * eye],
                  [-rho * eye, np.zeros((p, p))]])
    tr, fro = _lowrank_moments(sigma2 * a + rho * t * t, P, C)
    return tr * tr / fro


def htz_eta(pcs: ClusterPieces, L: np.ndarray) -> float:
    """The Wishart degrees of freedom eta of the Hotelling-type approximation (HTZ; Pustejovsky &
    Tipton 2018, Sec. 3.2; the construction of R clubSandwich's Wald_test "HTZ": Omega = E[CVC']
    under the working model, V* = Omega^-1/2 CVC' Omega^-1/2, eta = q(q+1) / sum_st Var(V*_st)).
    L: q x p contrasts in Q coordinates. For q = 1 it is the Bell-McCaffrey df."""
    q = L.shape[0]
    B = np.einsum("gij,sj->sgi", pcs.T, L)
    Ddiag = np.einsum("si,gij,tj->stg", L, pcs.U, L)
    Om = Ddiag.sum(axis=2) - np.einsum("sgi,tgi->st", B, B)
    Om = 0.5 * (Om + Om.T)
    lam, vec = np.linalg.eigh(Om)
    if lam[0] <= 1e-12 * max(float(lam[-1]), 1e-300):
        raise EstimationError("the restrictions are linearly dependent under the working model; "
                              "the Hotelling-type approximation is not defined")
    S = (vec / np.sqrt(lam)) @ vec.T
    Bs = np.einsum("st,tgi->sgi", S, B)
    Ds = np.einsum("sa,abg,tb->stg", S, Ddiag, S)
    d1 = np.einsum("ssg->g", Ds)
    P1 = np.concatenate([Bs[s] for s in range(q)], axis=1)
    _, t1 = _lowrank_moments(d1, P1, -np.eye(P1.shape[1]))
    t2 = 0.0
    for s in range(q):
        for t in range(q):
            dd = Ds[s, t]
            Z = Bs[t].T @ Bs[s]
            t2 += (np.sum(dd * dd) - 2.0 * np.sum(dd * np.einsum("gi,gi->g", Bs[s], Bs[t]))
                   + np.sum(Z * Z.T))
    return q * (q + 1) / (t1 + t2)


def hat_moments(blocks: ClusterBlocks, columns: int | None = None):
    """(W_g, Q_g'1) restricted to the first `columns` columns of Q (default: the hat basis),
    for every cluster: (G, c, c) and (G, c)."""
    c = blocks.k if columns is None else columns
    G = blocks.n_groups
    W = np.empty((G, c, c))
    q1 = np.empty((G, c))
    if blocks.big.size:
        W[blocks.big] = blocks.W[:, :c, :c]
        q1[blocks.big] = blocks.q1[:, :c]
    for sel, Qb, _, _ in blocks.small:
        Qc = Qb[:, :, :c]
        W[sel] = Qc.transpose(0, 2, 1) @ Qc
        q1[sel] = Qc.sum(axis=1)
    return W, q1
