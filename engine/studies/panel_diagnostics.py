"""Residual diagnostics for a panel: what the panel estimators correct for (Pesaran's CD,
Wooldridge's serial correlation test, period and entity means, correlograms)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import sparse
from statsmodels.tsa.stattools import acf

from ..capabilities import missing
from ..blas import single_blas_thread
from ..covariance.bandwidth import select_bandwidth
from ..covariance.kernels import default_kernel
from ..data.columns import INTERCEPT
from ..errors import EstimationError
from ..laws.reference import f_upper, normal_two_sided
from .diagnostics import DiagnosticReport, Section, add_row, finite_rows


#: Pesaran's CD uses every pair of entities up to this many entities (a random subset beyond).
CD_MAX_ENTITIES = 2000

#: Pesaran's CD works on a dense period x entity grid up to this many cells, else from the rows
#: (sparse products over the periods each pair shares): the same sums either way.
CD_DENSE_CELLS = 4_000_000


def _dense(values, e_codes, t_codes, n_e, n_t):
    out = np.full((n_t, n_e), np.nan)
    out[t_codes, e_codes] = values
    return out


def pesaran_cd(resid, e_codes, t_codes, n_e, n_t, min_overlap: int = 3, seed: int = 0,
               dense_cells: int | None = None):
    """Pesaran's CD statistic of cross-sectional dependence: sqrt(2/(N(N-1))) sum_{i<j}
    sqrt(T_ij) rho_ij, with rho_ij the correlation of entities i and j over their T_ij common
    periods (each entity's residuals demeaned over its own rows), pairs with fewer than
    `min_overlap` common periods left out; N(0,1) under no cross-sectional dependence
    (Pesaran 2004, CESifo WP 1229; 2015, Econometric Reviews 34 [M: recalled]).
    Returns (CD, entities used, pairs used). The pair sums come from a dense period x entity
    grid when it has at most `dense_cells` cells (default CD_DENSE_CELLS), else from the rows
    as sparse products (a sparse panel never allocates the grid)."""
    used = np.arange(n_e)
    if n_e > CD_MAX_ENTITIES:
        used = np.sort(np.random.default_rng(seed).choice(n_e, CD_MAX_ENTITIES, replace=False))
        keep = np.isin(e_codes, used)
        remap = np.full(n_e, -1)
        remap[used] = np.arange(used.size)
        resid, e_codes, t_codes = resid[keep], remap[e_codes[keep]], t_codes[keep]
    n = used.size
    counts = np.bincount(e_codes, minlength=n)
    means = np.bincount(e_codes, weights=resid, minlength=n) / np.maximum(counts, 1)
    centred = resid - means[e_codes]
    limit = CD_DENSE_CELLS if dense_cells is None else dense_cells
    if n_t * n <= limit:
        dense = _dense(centred, e_codes, t_codes, n, n_t)
        present = np.isfinite(dense)
        e = np.where(present, dense, 0.0)
        m = present.astype(float)
        overlap = m.T @ m
        num = e.T @ e
        sq = (e**2).T @ m            # [i, j] = sum over common periods of e_i^2
    else:
        shape = (n, n_t)
        e = sparse.csr_matrix((centred, (e_codes, t_codes)), shape=shape)
        m = sparse.csr_matrix((np.ones(len(centred)), (e_codes, t_codes)), shape=shape)
        e2 = sparse.csr_matrix((centred**2, (e_codes, t_codes)), shape=shape)
        overlap = (m @ m.T).toarray()
        num = (e @ e.T).toarray()
        sq = (e2 @ m.T).toarray()
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = num / np.sqrt(sq * sq.T)
    iu = np.triu_indices(n, 1)
    ok = (overlap[iu] >= min_overlap) & np.isfinite(rho[iu])
    pairs = int(ok.sum())
    if pairs == 0:
        return np.nan, n, 0
    cd = np.sqrt(2.0 / (n * (n - 1))) * np.sum(np.sqrt(overlap[iu][ok]) * rho[iu][ok])
    return float(cd), n, pairs


def wooldridge_serial(fit):
    """Wooldridge's test of first-order serial correlation within entities (Wooldridge 2010,
    Econometric Analysis of Cross Section and Panel Data, 10.6.3; Drukker 2003, Stata Journal
    3(2) [M: recalled]): least squares of the first-differenced model (consecutive periods of
    an entity), then the regression of its residuals on their own lag; with no serial
    correlation in the levels' errors the coefficient is -0.5. Returns (F, df1, df2, p) with the
    coefficient's standard error clustered by entity."""
    p = fit.panel
    X, y = fit.raw_rows()
    order = np.lexsort((p.time_codes, p.entity_codes))
    e, t = p.entity_codes[order], p.time_codes[order]
    consecutive = (e[1:] == e[:-1]) & (t[1:] == t[:-1] + 1)
    cur, prev = order[1:][consecutive], order[:-1][consecutive]
    if cur.size < 10 or X.shape[1] == 0:
        raise EstimationError("too few consecutive periods within entities for the serial "
                              "correlation test")
    dx, dy = X[cur] - X[prev], y[cur] - y[prev]
    coef, *_ = np.linalg.lstsq(dx, dy, rcond=None)
    u = dy - dx @ coef
    ent = e[1:][consecutive]
    tim = t[1:][consecutive]
    # pairs (u_t, u_{t-1}) within an entity: consecutive differences, found among the sorted
    # rows (the previous difference of the same entity, one period earlier)
    prev_ok = np.r_[False, (ent[1:] == ent[:-1]) & (tim[1:] == tim[:-1] + 1)]
    lagged = np.where(prev_ok, np.arange(len(ent)) - 1, -1)
    ok = lagged >= 0
    if ok.sum() < 10:
        raise EstimationError("too few entities with three consecutive periods for the serial "
                              "correlation test")
    a, b, g = u[ok], u[lagged[ok]], ent[ok]
    rho = float(a @ b / (b @ b))
    resid = a - rho * b
    sums = np.bincount(g, weights=b * resid, minlength=p.n_entities)
    groups = int(np.count_nonzero(np.bincount(g, minlength=p.n_entities)))
    var = groups / (groups - 1.0) * float(sums @ sums) / float(b @ b) ** 2
    f = (rho + 0.5) ** 2 / var
    return f, 1, groups - 1, f_upper(f, 1, groups - 1), rho


@single_blas_thread
def diagnose_panel(fit, progress=None):
    """Residual diagnostics for a panel: what the panel estimators correct for.

    Tests: Pesaran's CD (cross-sectional dependence of residuals), Wooldridge's first-order
    serial correlation within entities, and F tests of the period means and of the entity means
    of the residuals (what clustering by time or by entity allows for). Correlograms: the pooled
    autocorrelation of residuals within entities (lags in periods), of the period-average
    residual, and of each per-period sum of the moment contributions (what Driscoll-Kraay
    corrects for). progress(done, total, what) is called before each of four stages and at the
    end."""
    step = progress or (lambda done, total, what: None)
    why = missing(fit.capabilities, ("panel", "rows", "design"))
    if why:
        raise EstimationError(f"panel diagnostics: {why}")
    p = fit.panel
    resid = fit.resid
    if np.abs(resid).max() <= 1e-12 * (np.abs(fit.y).max() or 1.0):
        raise EstimationError("the regression fits perfectly (all residuals are zero): there "
                              "is nothing to diagnose")
    notes: list[str] = []
    rows: list[dict] = []
    n, g, t = fit.nobs, p.n_entities, p.n_periods
    with np.errstate(all="ignore"):
        step(0, 4, "cross-sectional dependence")
        with Section("Pesaran CD", notes):
            cd, used, pairs = pesaran_cd(resid, p.entity_codes, p.time_codes, g, t)
            add_row(rows, "Pesaran CD", cd, np.nan, normal_two_sided(cd),
                 "no cross-sectional dependence of the residuals",
                 f"scaled sum of pairwise residual correlations over common periods, N(0,1) "
                 f"(Pesaran 2004); {pairs} pairs of {used} entities"
                 + (" (a random subset)" if used < g else ""))
        step(1, 4, "serial correlation within entities")
        with Section("Wooldridge serial correlation", notes):
            f, d1, d2, pv, rho = wooldridge_serial(fit)
            add_row(rows, "Wooldridge serial correlation", f, d1, pv,
                 "no first-order serial correlation within entities",
                 f"first differences: lag coefficient of the residuals {rho:.3f} against -0.5, "
                 "entity-clustered F (Wooldridge 2010)", df2=float(d2))
        step(2, 4, "period and entity means")
        for dim, codes, groups in (("period", p.time_codes, t), ("entity", p.entity_codes, g)):
            with Section(f"{dim} means", notes):
                counts = np.bincount(codes, minlength=groups)
                sums = np.bincount(codes, weights=resid, minlength=groups)
                between = float(np.sum(sums**2 / np.maximum(counts, 1)) - resid.sum()**2 / n)
                within = float(resid @ resid) - float(np.sum(sums**2 / np.maximum(counts, 1)))
                d1, d2 = groups - 1, n - groups
                f = (between / d1) / (within / d2)
                add_row(rows, f"{dim.capitalize()} means of residuals", f, d1,
                     f_upper(f, d1, d2),
                     f"residuals have the same mean in every {dim}",
                     f"one-way analysis of variance of the residuals by {dim} "
                     f"({between / (between + within):.1%} of their variance between "
                     f"{dim}s); assumes independent errors", df2=float(d2))
        tests = finite_rows(rows, notes)
        step(3, 4, "autocorrelation functions")
        acf_df, score_acf, persistence, bands = _panel_correlograms(fit, notes)
    reading = _panel_reading(tests, acf_df, persistence, fit)
    step(4, 4, "")
    return DiagnosticReport(tests=tests, acf=acf_df, pacf=acf_df.iloc[:0], bands=bands,
                            score_acf=score_acf, persistence=persistence, reading=reading,
                            notes=notes)


def within_autocorrelation(resid, e_codes, t_codes, max_lag: int) -> np.ndarray:
    """The pooled autocorrelation of residuals within entities at lags 1..max_lag periods:
    sum over entities and periods of e_it e_i,t-j over sum of e_it^2, from the rows sorted by
    entity and period (a lag of j periods is at most j rows back within an entity)."""
    order = np.lexsort((t_codes, e_codes))
    e, t, r = e_codes[order], t_codes[order], np.asarray(resid, dtype=float)[order]
    denom = float(r @ r)
    out = np.zeros(max_lag)
    for back in range(1, max_lag + 1):
        later = np.arange(back, len(r))
        earlier = later - back
        same = e[later] == e[earlier]
        lag = t[later] - t[earlier]
        hit = same & (lag >= 1) & (lag <= max_lag)
        out += np.bincount(lag[hit] - 1, weights=r[later][hit] * r[earlier][hit],
                           minlength=max_lag)[:max_lag]
    return out / denom if denom > 0 else np.full(max_lag, np.nan)


def _panel_correlograms(fit, notes):
    p = fit.panel
    t = p.n_periods
    nl = int(min(12, max(1, t // 4)))
    lag_index = pd.RangeIndex(1, nl + 1, name="lag")
    within = within_autocorrelation(fit.resid, p.entity_codes, p.time_codes, nl)
    counts = np.bincount(p.time_codes, minlength=t)
    sums = np.bincount(p.time_codes, weights=fit.resid, minlength=t)
    avg = sums[counts > 0] / counts[counts > 0]             # the period-average residual
    avg = avg - avg.mean()
    avg_acf = acf(avg, nlags=nl, fft=True)[1:] if np.ptp(avg) > 0 else np.full(nl, np.nan)
    acf_df = pd.DataFrame({"resid": within, "resid_sq": avg_acf,
                           "resid_band": np.full(nl, 1.96 / np.sqrt(fit.nobs)),
                           "resid_sq_band": np.full(nl, 1.96 / np.sqrt(t))}, index=lag_index)
    sums = fit.period_model.contributions
    score_acf = pd.DataFrame(
        {name: acf(sums[:, i], nlags=nl, fft=True)[1:] if np.ptp(sums[:, i]) > 0
         else np.full(nl, np.nan) for i, name in enumerate(fit.moment_names)}, index=lag_index)
    andrews = select_bandwidth(fit.period_model, default_kernel(), "andrews")
    persistence = pd.DataFrame({"rho1": score_acf.iloc[0]}).assign(andrews_bartlett_b=andrews.b)
    bands = {"acf": f"95% bands +-1.96/sqrt(N) within entities and +-1.96/sqrt(T_p) for the "
                    f"period average (T_p = {t})",
             "titles": ("Residual ACF within entities", "ACF of the period-average residual"),
             "score_title": "What Driscoll-Kraay corrects for: ACF of per-period sums",
             "score_axis": "autocorrelation of sum_i x_it e_it"}
    return acf_df, score_acf, persistence, bands


def _panel_reading(tests, acf_df, persistence, fit) -> list[str]:
    out = []
    row = lambda name: tests[tests.test == name]           # noqa: E731
    cd = row("Pesaran CD")
    if len(cd):
        r = cd.iloc[0]
        if r.p_value < 0.05:
            out.append(f"Residuals are correlated across entities within a period (Pesaran CD "
                       f"= {r.statistic:.1f}, p {_pw(r.p_value)}): evidence against standard "
                       "errors that treat entities as independent in a period (classical, HC, "
                       "clustering by entity alone); clustering by time, two-way clustering, "
                       "Driscoll-Kraay or Fama-MacBeth allow for it.")
        else:
            out.append("No significant cross-sectional dependence of the residuals at 5% "
                       "(Pesaran CD).")
    wd = row("Wooldridge serial correlation")
    if len(wd):
        r = wd.iloc[0]
        if r.p_value < 0.05:
            out.append("Residuals are serially correlated within entities (Wooldridge test "
                       f"p {_pw(r.p_value)}): evidence for clustering by entity (or a kernel "
                       "over time within entities).")
        else:
            out.append("No significant first-order serial correlation within entities at 5% "
                       "(Wooldridge test).")
    pm = row("Period means of residuals")
    if len(pm) and pm.iloc[0].p_value < 0.05:
        out.append("Residual means differ across periods: a common component that clustering by "
                   "time, Driscoll-Kraay or time fixed effects address.")
    em = row("Entity means of residuals")
    if len(em) and em.iloc[0].p_value < 0.05 and not fit.panel.effects:
        out.append("Residual means differ across entities: a persistent entity component that "
                   "clustering by entity or entity fixed effects address.")
    slopes = persistence.drop(index=INTERCEPT, errors="ignore").dropna()
    if len(slopes):
        worst = slopes.rho1.abs().idxmax()
        out.append(f"The per-period sum of the moment contribution of '{worst}' has first-order "
                   f"autocorrelation {slopes.rho1[worst]:.2f}; for reference the Andrews (1991) "
                   f"AR(1) plug-in for a Bartlett kernel over periods gives b = "
                   f"{float(persistence.andrews_bartlett_b.iloc[0]):.1f}.")
    out.append("These are tests of evidence, not verdicts; the F tests of means assume "
               "independent errors.")
    return out


def _pw(p: float) -> str:
    """A p-value in words as the tables show it: never in scientific notation."""
    return "below 0.001" if p < 0.001 else f"= {p:.3f}"
