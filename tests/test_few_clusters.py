"""Bias-reduced cluster covariances (CR2, CR3), their degrees of freedom (Bell-McCaffrey,
Imbens-Kolesar), the Hotelling-type Wald approximation (HTZ), absorbed fixed effects and the
cluster summary. The outside source of each check is named beside it:

* the Petersen test data (tests/data/petersen_cl.csv, R sandwich's PetersenCL) with the values of
  R sandwich 3.0.2 and clubSandwich 0.5.8 (REFERENCES.md section 23);
* direct n_g x n_g and N x N implementations of the published formulas written in this file
  (Bell & McCaffrey 2002; Imbens & Kolesar 2016; Pustejovsky & Tipton 2018; the HTZ construction
  of R clubSandwich's Wald_test, read in its source);
* refits leaving one cluster out (the jackknife), closed forms, and a simulation with known
  truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from scipy import stats

import lagwise
from lagwise.engine.covariance import fewclusters as fc

PETERSEN = Path(__file__).parent / "data" / "petersen_cl.csv"
prop = settings(derandomize=True, max_examples=30, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow])


@pytest.fixture(scope="module")
def petersen():
    return pd.read_csv(PETERSEN)


def est(**kw):
    return lagwise.estimator("cluster", **kw)


# ----------------------------------------------------------------- dense references (tests only)

def dense_A(X, cl, kind, pinv=False, tol=1e-8):
    """Per cluster the n_g x n_g adjustment from the full N x N hat matrix."""
    M = np.linalg.inv(X.T @ X)
    H = X @ M @ X.T
    out = {}
    for g in np.unique(cl):
        idx = np.flatnonzero(cl == g)
        lam, U = np.linalg.eigh(np.eye(idx.size) - H[np.ix_(idx, idx)])
        if kind == "cr1":
            f = np.ones_like(lam)
        else:
            small = lam <= tol
            if small.any() and not pinv:
                raise ZeroDivisionError
            lam_s = np.where(small, 1.0, lam)
            f = np.where(small, 0.0, lam_s ** -0.5 if kind == "cr2" else 1.0 / lam_s)
        out[g] = (idx, (U * f) @ U.T)
    return M, H, out


def dense_V(X, e, cl, kind, pinv=False):
    M, _, A = dense_A(X, cl, kind, pinv)
    meat = np.zeros((X.shape[1],) * 2)
    for idx, Ag in A.values():
        s = X[idx].T @ Ag @ e[idx]
        meat += np.outer(s, s)
    return M @ meat @ M


def dense_G(X, cl, c, kind="cr2", pinv=False):
    """N x G matrix with columns (I - H)_{.g} A_g X_g M c (Bell & McCaffrey 2002)."""
    M, H, A = dense_A(X, cl, kind, pinv)
    IH = np.eye(X.shape[0]) - H
    return np.column_stack([IH[:, idx] @ (Ag @ (X[idx] @ M @ c)) for idx, Ag in A.values()])


def bm_dense(X, cl, c, kind="cr2", pinv=False):
    O = dense_G(X, cl, c, kind, pinv).T @ dense_G(X, cl, c, kind, pinv)
    return np.trace(O) ** 2 / np.sum(O * O)


def ik_dense(X, e, cl, c, pinv=False):
    """Imbens & Kolesar (2016) with the Moulton working model as an N x N matrix."""
    n = len(e)
    same = (cl[:, None] == cl[None, :]).astype(float)
    sizes = np.bincount(pd.factorize(cl)[0])
    sums = pd.Series(e).groupby(cl).sum().to_numpy()
    rho = (sums @ sums - e @ e) / (np.sum(sizes ** 2) - n)
    Om = max(e @ e / n - rho, 0.0) * np.eye(n) + rho * same
    Gm = dense_G(X, cl, c, "cr2", pinv)
    P = Gm.T @ Om @ Gm
    return np.trace(P) ** 2 / np.sum(P * P)


def random_frame(rng, G, sizes, k, dummy=False):
    """y on k - 1 regressors and an intercept, clusters g (a cluster random effect in each)."""
    cl = np.repeat(np.arange(G), sizes)
    n = cl.size
    X = np.column_stack([np.ones(n)] + [rng.normal(size=n) + rng.normal(size=G)[cl]
                                        for _ in range(k - 1)])
    if dummy and k >= 2 and G >= 4:
        X[:, -1] = (cl % 2 == 0).astype(float) * (1.0 + 0.1 * rng.normal(size=n))
    y = X @ rng.normal(size=k) + rng.normal(size=G)[cl] + rng.normal(size=n)
    frame = pd.DataFrame(X[:, 1:], columns=[f"x{j}" for j in range(1, k)])
    frame["y"], frame["g"] = y, cl
    return frame, X, y, cl


def fit_of(frame, k, by="g"):
    return lagwise.fit_ols(frame, "y", [f"x{j}" for j in range(1, k)], clusters=by)


def V_of(fit, by, kind, dense_below=None, singular="error"):
    """CR V through the engine's blocks with a forced form (0: every cluster k x k; a large
    number: every cluster n_g x n_g)."""
    blocks = fc.blocks_from_rows(fit.cluster_design(), fit.grouping(by), dense_below)
    pcs = fc.pieces(blocks, kind, singular)
    M = fit.influence_map
    return M @ pcs.meat() @ M.T, pcs, blocks


# ----------------------------------------------------------------- Petersen (REFERENCES.md 23)

def test_petersen_check_values(petersen):
    # source: R sandwich 3.0.2 vcovCL (HC1 + cadjust; multiway default) and clubSandwich 0.5.8
    # vcovCR / coef_test "Satterthwaite" on PetersenCL (REFERENCES.md section 23): se(x), df
    fit = lagwise.fit_ols(petersen, "y", ["x"], clusters=["firm", "year"])
    np.testing.assert_allclose(fit.beta, [0.0296797207, 1.0348334395], rtol=1e-8)
    se = lambda **kw: fit.infer(est(**kw)).table.loc["x", "std_error"]     # noqa: E731
    np.testing.assert_allclose(se(by="firm"), 0.0505957259, rtol=1e-8)
    np.testing.assert_allclose(se(by="year"), 0.0333889134, rtol=1e-8)
    np.testing.assert_allclose(se(by="year", correction="cr2"), 0.0333960820, rtol=1e-8)
    np.testing.assert_allclose(se(by="year", correction="cr3"), 0.0352142047, rtol=1e-8)
    res = fit.infer(est(by="year", correction="cr2", df="bell-mccaffrey"))
    np.testing.assert_allclose(res.law.df[1], 8.98943608, rtol=1e-8)
    assert res.to_frame().df[1] == pytest.approx(8.98943608, rel=1e-8)
    # the same data as a panel: entity = firm, time = year, and the two-way value
    panel = lagwise.fit_panel(petersen, "y", ["x"], entity="firm", time="year")
    pse = lambda **kw: panel.infer(est(**kw)).table.loc["x", "std_error"]  # noqa: E731
    np.testing.assert_allclose(pse(by="entity"), 0.0505957259, rtol=1e-8)
    np.testing.assert_allclose(pse(by="time", correction="cr2"), 0.0333960820, rtol=1e-8)
    np.testing.assert_allclose(pse(by="both"), 0.0535580229, rtol=1e-8)


@pytest.mark.parametrize("dense_below", [0, 10 ** 9])
def test_petersen_both_forms_and_dense_reference(petersen, dense_below):
    # source: the k x k form and the n_g x n_g form of the engine against the value of
    # clubSandwich 0.5.8 (REFERENCES.md 23) and a direct N x N implementation in this file
    fit = lagwise.fit_ols(petersen, "y", ["x"], clusters=["firm", "year"])
    X = np.column_stack([np.ones(len(petersen)), petersen.x])
    V2, pcs, blocks = V_of(fit, "year", "cr2", dense_below)
    assert (blocks.small == []) == (dense_below == 0)
    np.testing.assert_allclose(np.sqrt(V2[1, 1]), 0.0333960820, rtol=1e-8)
    np.testing.assert_allclose(fc.bell_mccaffrey(pcs, fit.influence_map[1]), 8.98943608,
                               rtol=1e-8)
    for by in ("year", "firm"):
        cl = petersen[by].to_numpy()
        for kind in ("cr2", "cr3"):
            np.testing.assert_allclose(V_of(fit, by, kind, dense_below)[0],
                                       dense_V(X, fit.resid, cl, kind), rtol=1e-10)


def test_closed_form_intercept_only():
    # source: closed form for X = 1: H_gg = 11'/N, (I - H_gg)^(-1/2) 1 = (1 - n_g/N)^(-1/2) 1
    rng = np.random.default_rng(3)
    sizes = np.array([2, 3, 5, 9, 30])
    cl = np.repeat(np.arange(5), sizes)
    frame = pd.DataFrame({"y": rng.normal(size=cl.size), "g": cl})
    fit = lagwise.fit_ols(frame, "y", [], clusters="g")
    n = cl.size
    sums = np.bincount(cl, weights=fit.resid)
    for kind, power in (("cr2", 1), ("cr3", 2)):
        want = np.sum(sums ** 2 / (1 - sizes / n) ** power) / n ** 2
        for dense_below in (0, 10 ** 9):
            np.testing.assert_allclose(V_of(fit, "g", kind, dense_below)[0][0, 0], want,
                                       rtol=1e-12)
        got = fit.infer(est(by="g", correction=kind)).cov.iloc[0, 0]
        np.testing.assert_allclose(got, want, rtol=1e-12)


def test_cr3_is_the_cluster_jackknife_and_the_summary_shows_it(petersen):
    # source: the cluster jackknife by refitting without each year (MacKinnon, Nielsen & Webb
    # 2023): CR3 = sum_g (b_(g) - b)(b_(g) - b)' without (G-1)/G (clubSandwich's CR3)
    fit = lagwise.fit_ols(petersen, "y", ["x"], clusters="year")
    X = np.column_stack([np.ones(len(petersen)), petersen.x])
    y, cl = petersen.y.to_numpy(), petersen.year.to_numpy()
    dev = np.array([np.linalg.lstsq(X[cl != g], y[cl != g], rcond=None)[0] - fit.beta
                    for g in np.unique(cl)])
    np.testing.assert_allclose(fit.infer(est(by="year", correction="cr3")).cov, dev.T @ dev,
                               rtol=1e-9)
    s = lagwise.cluster_summary(fit, "year")
    np.testing.assert_allclose(s.clusters[["change in intercept", "change in x"]], dev,
                               rtol=1e-9, atol=1e-14)
    j = int(np.abs(dev[:, 1]).argmax())
    assert s.coefficients.loc["x", "most_influential"] == np.unique(cl)[j]


# ----------------------------------------------------------------- property tests

@st.composite
def designs(draw):
    G = draw(st.integers(2, 7))
    sizes = draw(st.lists(st.integers(1, 12), min_size=G, max_size=G))
    return G, np.array(sizes), draw(st.integers(1, 4)), draw(st.integers(0, 10_000)), \
        draw(st.booleans())


@prop
@given(designs())
def test_k_by_k_equals_the_dense_definition(spec):
    # source: direct n_g x n_g implementation of Bell & McCaffrey (2002) A_g in this file
    G, sizes, k, seed, dummy = spec
    if sizes.sum() < k + 2:
        sizes = sizes + k
    frame, X, y, cl = random_frame(np.random.default_rng(seed), G, sizes, k, dummy)
    fit = fit_of(frame, k)
    c = np.zeros(k)
    c[-1] = 1.0
    for kind in ("cr2", "cr3"):
        try:
            ref = dense_V(X, fit.resid, cl, kind)
        except ZeroDivisionError:      # a direction of leverage one: both forms refuse
            for dense_below in (0, 10 ** 9):
                with pytest.raises(lagwise.EstimationError, match="singular for cluster"):
                    V_of(fit, "g", kind, dense_below)
            continue
        for dense_below in (0, 10 ** 9, None):
            got, pcs, _ = V_of(fit, "g", kind, dense_below)
            np.testing.assert_allclose(got, ref, rtol=1e-7, atol=1e-10 * np.abs(ref).max())
            np.testing.assert_allclose(fc.bell_mccaffrey(pcs, fit.influence_map.T @ c),
                                       bm_dense(X, cl, c, kind), rtol=1e-6)


@prop
@given(designs())
def test_bell_mccaffrey_and_imbens_kolesar_formulas(spec):
    # source: Bell & McCaffrey (2002) and Imbens & Kolesar (2016) with the N x G matrix and the
    # N x N Moulton Omega in this file (R dfadjust's method, read in its documentation)
    G, sizes, k, seed, _ = spec
    G, sizes = max(G, 3), np.maximum(np.resize(sizes, max(G, 3)), 2)
    rng = np.random.default_rng(seed)
    frame, X, y, cl = random_frame(rng, G, sizes, k)
    fit = fit_of(frame, k)
    blocks = fit.cluster_blocks("g")
    pcs = fc.pieces(blocks, "cr2", singular="pinv")
    c = rng.normal(size=k)
    ell = fit.influence_map.T @ c
    np.testing.assert_allclose(fc.bell_mccaffrey(pcs, ell), bm_dense(X, cl, c, pinv=True),
                               rtol=1e-6)
    np.testing.assert_allclose(fc.imbens_kolesar(pcs, ell, *fc.moulton(blocks)),
                               ik_dense(X, fit.resid, cl, c, pinv=True), rtol=1e-6)


def htz_dense(X, e, cl, C, beta):
    """HTZ as R clubSandwich's Wald_test builds it (read in its source: P_array, Omega, the
    standardised covariances, nu_Z = q(q+1)/sum Var), here with N x N matrices."""
    q = C.shape[0]
    Gs = [dense_G(X, cl, C[s]) for s in range(q)]
    Om = np.array([[np.trace(Gs[s].T @ Gs[t]) for t in range(q)] for s in range(q)])
    lam, vec = np.linalg.eigh(Om)
    S = (vec / np.sqrt(lam)) @ vec.T
    Gstar = [sum(S[s, a] * Gs[a] for a in range(q)) for s in range(q)]
    total = 0.0
    for s in range(q):
        for t in range(q):
            Lst = Gstar[s].T @ Gstar[t]           # Lambda^st_gh = w*_sg'w*_th
            Lss, Ltt = Gstar[s].T @ Gstar[s], Gstar[t].T @ Gstar[t]
            total += np.sum(Lss * Ltt) + np.sum(Lst * Lst.T)
    eta = q * (q + 1) / total
    V = dense_V(X, e, cl, "cr2")
    d = C @ beta
    return eta, d @ np.linalg.solve(C @ V @ C.T, d)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_htz_wald_test(seed):
    # source: the HTZ construction of clubSandwich's Wald_test (Pustejovsky & Tipton 2018)
    # evaluated densely in this file; for one restriction it is the t test with the
    # Bell-McCaffrey df (as clubSandwich's own test "Wald test is equivalent to Satterthwaite")
    rng = np.random.default_rng(seed)
    frame, X, y, cl = random_frame(rng, 8, rng.integers(2, 15, 8), 4)
    fit = fit_of(frame, 4)
    res = fit.infer(est(by="g", correction="cr2", df="bell-mccaffrey"))
    C = np.array([[0, 1.0, 0, 0], [0, 0, 1.0, 0], [0, 0, 1.0, -1.0]])
    eta, Q = htz_dense(X, fit.resid, cl, C, fit.beta)
    w = res.wald(C)
    np.testing.assert_allclose(w.statistic, Q, rtol=1e-8)
    np.testing.assert_allclose(w.f_df[1], eta - 2, rtol=1e-8)
    np.testing.assert_allclose(w.f_statistic, (eta - 2) / (3 * eta) * Q, rtol=1e-8)
    np.testing.assert_allclose(w.p_value, stats.f.sf((eta - 2) / (3 * eta) * Q, 3, eta - 2),
                               rtol=1e-8)
    one = res.wald(["x2"])
    np.testing.assert_allclose(one.f_df[1], res.law.df[2], rtol=1e-10)
    np.testing.assert_allclose(one.p_value, res.table.loc["x2", "p_value"], rtol=1e-8)


# ----------------------------------------------------------------- absorbed fixed effects

def make_panel(seed=0, n_ent=14, T=6, drop=0.15):
    rng = np.random.default_rng(seed)
    ent = np.repeat(np.arange(n_ent), T)
    tim = np.tile(np.arange(T), n_ent)
    keep = rng.random(ent.size) > drop
    keep[np.arange(n_ent) * T] = True
    keep[:T] = True
    ent, tim = ent[keep], tim[keep]
    n = ent.size
    x = np.column_stack([rng.normal(size=n) + rng.normal(size=n_ent)[ent],
                         rng.normal(size=n) + rng.normal(size=T)[tim]])
    y = x @ [0.5, -0.3] + rng.normal(size=n_ent)[ent] + rng.normal(size=T)[tim] + \
        rng.normal(size=n) * (1 + (ent % 3))
    return pd.DataFrame({"firm": ent, "t": tim, "industry": ent % 4, "x1": x[:, 0],
                         "x2": x[:, 1], "y": y})


def dummies(codes, drop_first=False):
    D = (codes[:, None] == np.unique(codes)[None, :]).astype(float)
    return D[:, 1:] if drop_first else D


FE_CASES = [(("entity",), "entity", True), (("entity",), "industry", True),
            (("time",), "entity", False), (("entity", "time"), "entity", False),
            (("entity",), "time", False), (("entity", "time"), "industry", False)]


@pytest.mark.parametrize("effects,by,nested", FE_CASES)
def test_cr2_after_the_within_transformation_equals_explicit_dummies(effects, by, nested):
    # source: Pustejovsky & Tipton (2018, JBES 36(4)): CR2 / CR3 of the model with the fixed
    # effects as explicit dummies and the Moore-Penrose (I - H_gg)^(+1/2) (clubSandwich's
    # convention), computed densely here, equal the engine's after the within transformation;
    # Bell-McCaffrey and Imbens-Kolesar df likewise
    df = make_panel()
    fit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="t", effects=effects,
                            clusters="industry")
    codes = {"entity": df.firm.to_numpy(), "time": df.t.to_numpy()}
    cl = {"entity": df.firm, "time": df.t, "industry": df.industry}[by].to_numpy()
    D = np.hstack([dummies(codes[f], drop_first=j > 0) for j, f in enumerate(effects)])
    Xfull = np.hstack([df[["x1", "x2"]].to_numpy(), D])
    bfull = np.linalg.lstsq(Xfull, df.y.to_numpy(), rcond=None)[0]
    efull = df.y.to_numpy() - Xfull @ bfull
    np.testing.assert_allclose(fit.beta, bfull[:2], rtol=1e-9)
    for kind in ("cr2", "cr3"):
        ref = dense_V(Xfull, efull, cl, kind, pinv=True)[:2, :2]
        for dense_below in (0, 10 ** 9):
            np.testing.assert_allclose(V_of(fit, by, kind, dense_below, "pinv")[0], ref,
                                       rtol=1e-8)
        if nested:       # the effects drop out: no singularity, the family's own result
            np.testing.assert_allclose(fit.infer(est(by=by, correction=kind)).cov, ref,
                                       rtol=1e-8)
    blocks = fit.cluster_blocks(by)
    assert bool(blocks.not_nested) != nested
    pcs = fc.pieces(blocks, "cr2", singular="pinv")
    cf = np.zeros(Xfull.shape[1])
    cf[0] = 1.0
    ell = fit.influence_map.T @ np.array([1.0, 0.0])
    np.testing.assert_allclose(fc.bell_mccaffrey(pcs, np.r_[ell, np.zeros(blocks.p - 2)]),
                               bm_dense(Xfull, cl, cf, pinv=True), rtol=1e-7)
    np.testing.assert_allclose(fc.imbens_kolesar(pcs, np.r_[ell, np.zeros(blocks.p - 2)],
                                                 *fc.moulton(blocks)),
                               ik_dense(Xfull, efull, cl, cf, pinv=True), rtol=1e-7)


def test_ignoring_effects_not_nested_would_be_wrong():
    # source: Pustejovsky & Tipton (2018): with time effects and entity clusters, CR2 computed
    # from the demeaned design alone differs from the explicit-dummy CR2 (the pitfall avoided)
    df = make_panel(seed=2)
    fit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="t", effects="time")
    design = fit.cluster_design()
    design.absorbed = ()
    naive = fc.pieces(fc.blocks_from_rows(design, fit.grouping("entity")), "cr2", "pinv")
    right = fit.infer(est(by="entity", correction="cr2")).cov.to_numpy()
    M = fit.influence_map
    assert np.max(np.abs(M @ naive.meat() @ M.T - right) / np.abs(right)) > 1e-4


def test_effects_nested_in_the_clusters_give_imbens_kolesar_equal_to_bell_mccaffrey():
    # source: Imbens & Kolesar (2016) Moulton working model: with the cluster effects absorbed
    # X_g'1 = 0 and the random effect drops out, so the two df coincide
    df = make_panel(seed=5)
    fit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="t", effects="entity")
    bm = fit.infer(est(by="entity", correction="cr2", df="bell-mccaffrey")).law.df
    ik = fit.infer(est(by="entity", correction="cr2", df="imbens-kolesar")).law.df
    np.testing.assert_allclose(ik, bm, rtol=1e-10)


def test_two_way_cr2_combines_the_one_way_pieces(petersen):
    # source: Cameron, Gelbach & Miller (2011) V1 + V2 - V12 with each term the dense CR2 here,
    # eigenvalue-clipped when not PSD (flagged)
    sub = petersen[petersen.firm <= 40]
    fit = lagwise.fit_panel(sub, "y", ["x"], entity="firm", time="year")
    X = np.column_stack([np.ones(len(sub)), sub.x])
    f, t = sub.firm.to_numpy(), sub.year.to_numpy()
    want = sum(s * dense_V(X, fit.resid, c, "cr2") for s, c in ((1, f), (1, t),
                                                                (-1, f * 100 + t)))
    lam, vec = np.linalg.eigh(want)
    res = fit.infer(est(by="both", correction="cr2"))
    np.testing.assert_allclose(res.cov, (vec * np.clip(lam, 0, None)) @ vec.T, rtol=1e-9,
                               atol=1e-15)
    assert ("psd_repaired" in res.flags) == (lam.min() < -1e-12 * np.abs(lam).max())
    assert res.law.df == 9.0


def test_no_cluster_matrix_for_large_clusters():
    # cost: clusters larger than p use p x p blocks only (no n_g x n_g matrix)
    rng = np.random.default_rng(4)
    frame, *_ = random_frame(rng, 50, [400] * 50, 6)
    fit = fit_of(frame, 6)
    blocks = fit.cluster_blocks("g")
    assert blocks.small == [] and blocks.W.shape == (50, 6, 6)


# ----------------------------------------------------------------- singular clusters, bad input

def test_single_observation_cluster_is_a_typed_error_or_the_pseudo_inverse():
    # source: Bell & McCaffrey (2002): A_g is undefined when I - H_gg is singular; clubSandwich
    # and Pustejovsky & Tipton (2018) use the Moore-Penrose inverse (singular="pinv"), dense here
    rng = np.random.default_rng(7)
    sizes = [1, 6, 7, 8, 9]
    cl = np.repeat(np.arange(5), sizes)
    n = cl.size
    frame = pd.DataFrame({"x1": rng.normal(size=n), "x2": (cl == 0).astype(float),
                          "y": rng.normal(size=n), "region": np.array(list("ABCDE"))[cl]})
    fit = lagwise.fit_ols(frame, "y", ["x1", "x2"], clusters="region")
    with pytest.raises(lagwise.EstimationError, match=r"singular for cluster\(s\) 'A'"):
        fit.infer(est(by="region", correction="cr2"))
    with pytest.raises(lagwise.EstimationError, match="singular"):
        fit.infer(est(by="region", correction="cr3"))
    X = np.column_stack([np.ones(n), frame.x1, frame.x2])
    for kind in ("cr2", "cr3"):
        ref = dense_V(X, fit.resid, cl, kind, pinv=True)
        for dense_below in (0, 10 ** 9):
            np.testing.assert_allclose(V_of(fit, "region", kind, dense_below, "pinv")[0], ref,
                                       rtol=1e-8, atol=1e-14)
    s = lagwise.cluster_summary(fit, "region")
    assert np.isnan(s.clusters.loc[0, "change in x1"]) and "alone identify" in " ".join(s.notes)


def test_bad_inputs_are_typed_errors_naming_the_value(petersen):
    fit = lagwise.fit_ols(petersen.assign(one=1, two=petersen.year % 2), "y", ["x"],
                          clusters=["one", "two", "year"])
    with pytest.raises(lagwise.EstimationError, match="at least two clusters"):
        fit.infer(est(by="one", correction="cr2"))
    with pytest.raises(lagwise.EstimationError, match="2 clusters, 2 coefficients"):
        fit.infer(est(by="two"))
    with pytest.raises(lagwise.SpecificationError, match="'cr4'"):
        est(correction="cr4")
    with pytest.raises(lagwise.SpecificationError, match="'kenward'"):
        est(df="kenward")
    with pytest.raises(lagwise.SpecificationError, match="no grouping 'industry'.*'one'"):
        fit.infer(est(by="industry"))
    with pytest.raises(lagwise.SpecificationError, match="no column named 'region'"):
        lagwise.fit_ols(petersen, "y", ["x"], clusters="region")
    panel = lagwise.fit_panel(petersen, "y", ["x"], entity="firm", time="year")
    with pytest.raises(lagwise.SpecificationError, match="needs one-way clustering"):
        panel.infer(est(by="both", df="bell-mccaffrey"))
    iv = lagwise.fit_iv(petersen.assign(z=petersen.x + np.sin(np.arange(5000))), "y", ["x"],
                        ["x"], ["z"], clusters="year")
    with pytest.raises(lagwise.SpecificationError, match="needs least-squares residuals"):
        iv.infer(est(by="year", correction="cr2", df="bell-mccaffrey"))
    assert np.isfinite(iv.infer(est(by="year", correction="cr2")).table.std_error).all()
    missing = petersen.assign(region=np.where(petersen.index == 17, None, "a"))
    with pytest.raises(lagwise.DataError, match="no label in 1 .*row 18"):
        lagwise.fit_ols(missing, "y", ["x"], clusters="region")


def test_iv_cr2_uses_the_fitted_regressors_hat_matrix():
    # source: a direct computation in this file: CR2 of 2SLS with the residuals of each cluster
    # premultiplied by (I - H^_gg)^(-1/2), H^ the projection on X^ = P_Z X (our convention)
    rng = np.random.default_rng(12)
    cl = np.repeat(np.arange(9), rng.integers(4, 20, 9))
    n = cl.size
    z = rng.normal(size=(n, 2))
    u = rng.normal(size=n) + rng.normal(size=9)[cl]
    x = z @ [0.8, 0.5] + 0.5 * u + rng.normal(size=n)
    y = 1 + 0.5 * x + u
    frame = pd.DataFrame({"x": x, "z1": z[:, 0], "z2": z[:, 1], "y": y, "g": cl})
    fit = lagwise.fit_iv(frame, "y", ["x"], ["x"], ["z1", "z2"], clusters="g")
    Z = np.column_stack([np.ones(n), z])
    X = np.column_stack([np.ones(n), x])
    Xh = Z @ np.linalg.lstsq(Z, X, rcond=None)[0]
    _, _, A = dense_A(Xh, cl, "cr2")
    ainv = np.linalg.inv(Xh.T @ Xh)
    meat = sum(np.outer(Xh[i].T @ Ag @ fit.resid[i], Xh[i].T @ Ag @ fit.resid[i])
               for i, Ag in A.values())
    np.testing.assert_allclose(fit.infer(est(by="g", correction="cr2")).cov,
                               ainv @ meat @ ainv, rtol=1e-9)


# ----------------------------------------------------------------- cluster summary

def test_cluster_summary_against_direct_computation(petersen):
    # source: MacKinnon, Nielsen & Webb (2023) leverage and partial leverage (as summclust) and
    # Carter, Schnepel & Steigerwald (2017) G* with rho = 1, computed directly here
    fit = lagwise.fit_ols(petersen, "y", ["x"], clusters="year")
    s = lagwise.cluster_summary(fit, "year")
    X = np.column_stack([np.ones(len(petersen)), petersen.x])
    cl = petersen.year.to_numpy()
    M = np.linalg.inv(X.T @ X)
    groups = np.unique(cl)
    lev = np.array([np.trace(X[cl == g].T @ X[cl == g] @ M) for g in groups])
    np.testing.assert_allclose(s.clusters.leverage, lev, rtol=1e-10)
    xt = X[:, 1] - X[:, 1].mean()
    pl = np.array([xt[cl == g] @ xt[cl == g] for g in groups]) / (xt @ xt)
    np.testing.assert_allclose(s.coefficients.loc["x", "partial_leverage_max"], pl.max(),
                               rtol=1e-10)
    gam = np.array([(M[1] @ X[cl == g].T @ np.ones((cl == g).sum())) ** 2 for g in groups])
    Gam = np.mean((gam - gam.mean()) ** 2) / gam.mean() ** 2
    np.testing.assert_allclose(s.coefficients.loc["x", "effective_clusters"], 10 / (1 + Gam),
                               rtol=1e-10)
    assert s.sizes == {"min": 500, "median": 500.0, "max": 500} and s.n_clusters == 10
    assert "not to be trusted" in " ".join(s.reading)
    many = lagwise.cluster_summary(lagwise.fit_ols(petersen, "y", ["x"], clusters="firm"),
                                   "firm")
    assert "usually reliable" in " ".join(many.reading)
    with pytest.raises(lagwise.SpecificationError, match="one grouping at a time"):
        lagwise.cluster_summary(lagwise.fit_panel(petersen, "y", ["x"], entity="firm",
                                                  time="year"), "both")


# ----------------------------------------------------------------- simulation

@pytest.mark.slow
def test_simulation_cr2_with_bell_mccaffrey_keeps_its_size():
    # source: simulation with known truth (beta = 0), as in Bell & McCaffrey (2002) and Imbens &
    # Kolesar (2016): G = 10 unequal clusters (3..150), cluster random effects in x and u,
    # nominal 5%; CR2 + BM df rejects at most 7%, CR1 + t(G - 1) more
    rng = np.random.default_rng(20240523)
    sizes = np.array([3, 5, 8, 12, 18, 25, 35, 50, 80, 150])
    codes = np.repeat(np.arange(10), sizes)
    n, R = codes.size, 1500
    e1, e2 = est(by="g"), est(by="g", correction="cr2", df="bell-mccaffrey")
    rej1 = rej2 = 0
    for _ in range(R):
        frame = pd.DataFrame({"x": rng.normal(size=10)[codes] + rng.normal(size=n),
                              "y": rng.normal(size=10)[codes] + rng.normal(size=n),
                              "g": codes})
        fit = lagwise.fit_ols(frame, "y", ["x"], clusters="g")
        rej1 += fit.infer(e1).table.loc["x", "p_value"] < 0.05
        rej2 += fit.infer(e2).table.loc["x", "p_value"] < 0.05
    rate1, rate2 = rej1 / R, rej2 / R
    mc = np.sqrt(0.05 * 0.95 / R)
    print(f"\nrejection at 5% (R = {R}, Monte Carlo s.e. {mc:.4f} at 5%): CR2 + BM df "
          f"{rate2:.3f}; CR1 + t(G - 1) {rate1:.3f}")
    assert rate2 <= 0.07
    assert rate1 > rate2 + 3 * mc
