"""Command line: `lagwise table FILE ...` (estimator comparison), `lagwise panel FILE_OR_FOLDER
...` (panel estimators; a folder of Parquet files runs on Dask), `lagwise irf FILE ...`
(impulse responses by local projections; app/cli_irf.py), `lagwise bootstrap FILE ...`
(the wild cluster bootstrap of one coefficient) and `lagwise serve [FILE]`."""

from __future__ import annotations

import argparse
import math
import sys

import numpy as np

from .cli_irf import add_irf_parser   # `lagwise irf`: impulse responses by local projections
from .cli_output import emit

def _fmt(x, spec=".4g"):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return format(x, spec)


def _p(x):
    if x is None or not math.isfinite(x):
        return "n/a"
    return "<0.001" if x < 0.001 else f"{x:.3f}"


def _own_estimates(block) -> bool:
    """Rows of the block that carry their own estimate (Fama-MacBeth, GMM re-weighted): the
    lines then show each row's estimate."""
    est = block.estimate.to_numpy(dtype=float)
    ok = np.isfinite(est)
    return bool(ok.any() and np.ptp(est[ok]) > 1e-12 * max(1.0, float(np.abs(est[ok]).max())))


def render_text(fit, comp, level: float, extra_lines=(), stamp=None) -> str:
    """Our own plain-text layout: one block per coefficient, one line per estimator."""
    pct = f"{level * 100:g}%"
    from ..engine.kinds import model_line
    lines = [f"Lagwise comparison: {model_line(fit)}"]
    lines += list(stamp.lines()) if stamp is not None else []
    lines.append(f"{pct} intervals")
    lines += [f"  note: {n}" for n in fit.sample.notes]
    width = max(len(s) for s in comp.estimator) + 2
    for term in fit.terms:
        block = comp[comp.term == term]
        est = block.estimate.iloc[0]
        own = _own_estimates(block)
        lines.append("")
        head = f"== {term}: each line shows its own estimate" if own else \
            f"== {term}: estimate {est:.6g}"
        lines.append(head + " " + "=" * max(0, 60 - len(term)))
        lines.append(f"  {'estimator':<{width}}" + (f"{'estimate':>11}" if own else "")
                     + f"{'b':>8}{'lags':>6}{'std err':>11}{'t':>9}"
                     f"{'p':>8}   {pct + ' interval':<26}{'null beta=0'}")
        for _, r in block.iterrows():
            if isinstance(r.note, str) and r.note and not np.isfinite(r.std_error):
                lines.append(f"  {r.estimator:<{width}}not available: {r.note}")
                continue
            ci = f"[{_fmt(r.ci_low)}, {_fmt(r.ci_high)}]"
            verdict = {True: "rejected", False: "not rejected"}.get(r.rejects, "n/a")
            lines.append(f"  {r.estimator:<{width}}" + (f"{_fmt(r.estimate):>11}" if own else "")
                         + f"{_fmt(r.bandwidth, '.3g'):>8}"
                         f"{_fmt(r.lags, '.0f'):>6}{_fmt(r.std_error):>11}{_fmt(r.t_stat, '.3f'):>9}"
                         f"{_p(r.p_value):>8}   {ci:<26}{verdict}")
    notes = sorted({n for n in comp.note if isinstance(n, str) and n and "not available" not in n
                    and n.strip()})
    if notes:
        lines.append("")
        lines += [f"  note: {n}" for n in notes]
    lines += list(extra_lines)
    lines.append("")
    lines.append("Reference laws: normal = large-sample; t/F and fixed-b are small-sample "
                 "corrections. Kernel rows show the real bandwidth b (weights k(j/b); "
                 "Newey-West with L lags is b = L + 1).")
    return "\n".join(lines) + "\n"


def progress_bar(total, desc):
    """A tqdm bar on stderr, silent when stderr is not a terminal."""
    from tqdm import tqdm
    return tqdm(total=total, desc=desc, unit="", leave=False, disable=None, file=sys.stderr)


def _bandwidth_arg(text):
    try:
        return float(text)
    except ValueError:
        return text


def weight_arg(text):
    """--weight: an estimator name (hc0, hc1, classical, ewc, var) or KERNEL:BANDWIDTH, where the
    bandwidth is a number or a rule (bartlett:13, parzen:andrews)."""
    from .. import engine
    if ":" in text:
        kernel, _, bw = text.partition(":")
        return engine.estimator("kernel", kernel=kernel, bandwidth=_bandwidth_arg(bw))
    return engine.estimator(text)


def load_and_fit(args, bar=None):
    from .. import engine
    from ..engine.data.columns import as_list
    if bar is not None:
        bar.set_description("reading the file")
    table = engine.load_table(args.file)
    if bar is not None:
        bar.update(1)
        bar.set_description("fitting")
    for spec in args.transform or []:
        kind, _, rest = spec.partition(":")
        col, _, p = rest.partition(":")
        table, name = table.with_transform(kind, col, int(p) if p else 1)
        print(f"added column {name}", file=sys.stderr)
    regs = as_list(args.regressors)
    endog, instr = as_list(args.endogenous), as_list(args.instruments)
    clusters = cluster_names(args)
    if endog or instr:
        return engine.fit_iv(table, args.response, regs, endog, instr,
                             intercept=not args.no_intercept, method=args.method,
                             weight=weight_arg(args.weight), horizon=args.horizon,
                             clusters=clusters)
    return engine.fit_ols(table, args.response, regs, intercept=not args.no_intercept,
                          horizon=args.horizon,
                          one_period=getattr(args, "one_period", None) if args.horizon
                          else None, clusters=clusters)


def cluster_names(args) -> list[str]:
    """--cluster COLUMN (repeatable, or comma-separated)."""
    from ..engine.data.columns import as_list
    out = []
    for item in getattr(args, "cluster", None) or []:
        out += as_list(item)
    return out


def cluster_lines(fit, names, level: float) -> list[str]:
    """How few is few, for each grouping named on the command line (and a panel's own)."""
    from .. import engine
    lines = []
    for by in names:
        try:
            s = engine.cluster_summary(fit, by)
        except engine.LagwiseError as exc:
            lines += ["", f"Clusters by {by}: summary not available: {exc}"]
            continue
        lines += ["", f"Clusters by {by} (how few is few)"] + [f"  {x}" for x in s.lines()]
    return lines


def cmd_table(args) -> int:
    from .. import engine
    from ..engine.inference.compare import compare
    from ..engine.inference.sweep import flip_summary

    bar = progress_bar(4, "reading the file")
    fit = load_and_fit(args, bar)
    bar.update(1)
    bar.set_description("comparing estimators")
    bandwidth = args.bandwidth
    if args.lags is not None:
        bandwidth = args.lags + 1.0
    comp = compare(fit, level=args.level, reference=args.reference, kernel=args.kernel,
                   bandwidth=bandwidth)
    extra = flip_summary(fit, args.kernel or "bartlett", level=args.level)
    bar.update(1)
    bar.set_description("residual diagnostics")
    kind = engine.kind_of(fit)
    if "instruments" in kind.cards:
        extra = list(extra) + iv_lines(fit, weight_arg(args.weight), args.level)
    else:
        try:
            extra = list(extra) + ["", "Residual diagnostics"] + kind.diagnostics(fit).lines()
        except engine.LagwiseError as exc:
            extra = list(extra) + ["", f"Residual diagnostics not available: {exc}"]
    if "persistence" in kind.cards:
        extra = list(extra) + predictive_lines(fit, args)
    extra = list(extra) + cluster_lines(fit, cluster_names(args), args.level)
    bar.update(1)
    bar.close()
    return write_output(args, fit, comp, extra, "standard errors across estimators")


def write_output(args, fit, comp, extra, what: str) -> int:
    """The comparison as text (our layout) or a table format, to a file or stdout."""
    from ..engine.io.tables import render
    from ..engine.io.provenance import provenance
    from ..engine.kinds import model_line
    stamp = provenance(fit)
    if args.format == "text":
        out = render_text(fit, comp, args.level, extra, stamp=stamp)
    else:
        cols = ["term", "estimator", "estimate", "std_error", "t_stat", "p_value", "ci_low",
                "ci_high", "bandwidth", "lags", "reference", "rejects", "note"]
        out = render(comp[cols], args.format, index=False, caption=f"{fit.response}: {what}",
                     notes=[model_line(fit)], stamp=stamp.lines(), level=args.level)
    return emit(args, out)


def predictive_lines(fit, args) -> list[str]:
    """Persistence, horizons, bootstrap and the size check, as asked for on the command line."""
    from .. import engine
    from ..engine.data.columns import INTERCEPT
    lines = []
    slopes = [t for t in fit.terms if t != INTERCEPT]
    focus = args.focus or (slopes[0] if slopes else None)
    if fit.horizon and fit.horizon > 1 or args.persistence:
        try:
            rep = engine.persistence_report(fit, args.focus, level=args.level)
            lines += ["", f"Persistence of {rep.predictor}"] + [f"  {s}" for s in rep.reading]
        except engine.LagwiseError as exc:
            lines += ["", f"Persistence report not available: {exc}"]
    if args.horizons:
        source = fit.one_period.name if fit.capabilities.one_period else None
        if source is None:
            lines += ["", "Horizons: name the one-period series with --one-period"]
        else:
            bar = progress_bar(args.horizons, "horizons")
            table = fit.table
            hs = engine.horizon_sweep(table, source, slopes, horizons=range(1, args.horizons + 1),
                                      level=args.level,
                                      progress=lambda d, n: (bar.update(d - bar.n)))
            bar.close()
            part = hs.term(focus).pivot(index="h", columns="estimator", values="t_stat")
            lines += ["", f"t statistic of {focus} by horizon h (slope on the sum of the next h "
                          f"values of {source})", part.round(2).to_string()]
    if args.bootstrap:
        res = engine.bootstrap(fit, weight_arg(args.weight) if args.weight != "hc0" else None,
                               method=args.bootstrap, reps=999, seed=0, level=args.level)
        lines += ["", f"Bootstrap ({res.method}, {res.reps} replicates): {res.notes[0]}"]
        for term, r in res.table.iterrows():
            lines.append(f"  {term}: analytic [{r.ci_low:.4g}, {r.ci_high:.4g}] p "
                         f"{_p(r.p_value)}; percentile-t [{r.boot_ci_low:.4g}, "
                         f"{r.boot_ci_high:.4g}] p {_p(r.boot_p_value)}")
    if args.size_check:
        bar = progress_bar(args.size_check, "size check")
        sc = engine.size_check(fit, reps=args.size_check, method=args.size_method, seed=0,
                               level=args.level, focus=focus,
                               progress=lambda d, n: bar.update(d - bar.n))
        bar.close()
        lines += ["", f"Size of each nominal {1 - args.level:.0%} test of {focus} = 0 at this "
                      f"sample ({sc.done} simulated samples)"]
        for _, r in sc.frame.iterrows():
            lines.append(f"  {r.estimator:<52} rejects {r.rejection_rate:.3f} "
                         f"[{r.ci_low:.3f}, {r.ci_high:.3f}]; size-adjusted |t| "
                         f"{r.size_adjusted_critical_value:.2f}")
        lines += [f"  note: {n}" for n in sc.notes]
    return lines


def iv_lines(fit, est, level) -> list[str]:
    """Instrument strength and specification, in plain lines."""
    from .. import engine
    lines = ["", f"Instruments ({fit.describe_method()}; S for the tests: {est.label})"]
    first = fit.first_step or fit
    fs = first.first_stage(est)
    for name, r in fs.table.iterrows():
        lines.append(f"  first stage for {name}: F = {r.robust_f:.4g} (chosen S), "
                     f"{r.homoskedastic_f:.4g} (homoskedastic), partial R^2 = {r.partial_r2:.3f}")
    for name, item in fs.strength.items():
        lines.append(f"  {name} = {item['value']:.4g}; compare with {item['compare_with']:g} "
                     f"({item['source']})")
    lines.append("  " + fit.j_test().summary())
    for z in fit.core.excluded if fit.overidentification > 0 else []:
        try:
            lines.append(f"  difference-in-J for {z}: " + fit.difference_j([z], est).summary())
        except engine.LagwiseError:
            continue
    if len(fit.core.endogenous) == 1:
        ar = first.anderson_rubin(fit.core.endogenous[0], est, level)
        lines.append(f"  Anderson-Rubin {level:.0%} set for {ar.term}: {ar.text()}")
        lines.append(f"  {ar.reading}")
    return lines


def panel_flip_lines(fit, kernel: str = "bartlett", level: float = 0.95) -> list[str]:
    """Where each slope's conclusion changes along the Driscoll-Kraay bandwidth."""
    from .. import engine
    from ..engine.laws.fixedb import available
    sw = fit.sweep([kernel])
    lines = ["", f"Where the conclusion changes (Driscoll-Kraay, {engine.get_kernel(kernel).label} "
                 f"kernel, b = {sw.values[0]:g}..{sw.values[-1]:g} periods)"]
    refs = ["normal"] + (["fixed-b"] if available(kernel) else [])
    for term in fit.terms:
        if term == "intercept":
            continue
        for ref in refs:
            lines.append("  " + engine.significance_flip(fit, term, level=level, reference=ref,
                                                         sweep_result=sw).sentence())
    return lines


def cmd_panel(args) -> int:
    from .. import engine
    from ..engine.distributed import is_distributed
    from ..engine.data.columns import as_list

    effects = {"none": (), "entity": ("entity",), "time": ("time",),
               "both": ("entity", "time")}[args.effects]
    regs = as_list(args.regressors)
    client = cluster = None
    if is_distributed(args.source):
        data = args.source
        from distributed import Client, LocalCluster
        if args.scheduler:
            client = Client(args.scheduler)
            where = f"the Dask cluster at {args.scheduler}"
        else:
            cluster = LocalCluster(n_workers=args.workers, threads_per_worker=1,
                                   host="127.0.0.1", dashboard_address=None,
                                   silence_logs=40)
            client = Client(cluster)
            where = f"a local Dask cluster ({args.workers} workers on 127.0.0.1)"
        print(f"reading the Parquet files in {args.source} on {where}", file=sys.stderr)
    else:
        data = engine.load_table(args.source)
    try:
        kw = {}
        if client is not None:
            bar = progress_bar(4, "passes over the data")

            def passes(done, total, what):
                bar.set_description(what)
                bar.update(done - bar.n)
            kw["progress"] = passes
        endog, instr = as_list(args.endogenous), as_list(args.instruments)
        if endog or instr:
            fit = engine.fit_panel_iv(data, args.response, regs, endog, instr,
                                      entity=args.entity, time=args.time, effects=effects,
                                      intercept=not args.no_intercept, method=args.method,
                                      clusters=cluster_names(args) or None)
        else:
            fit = engine.fit_panel(data, args.response, regs, entity=args.entity,
                                   time=args.time, effects=effects,
                                   intercept=not args.no_intercept, client=client,
                                   clusters=cluster_names(args) or None, **kw)
        if client is not None:
            bar.close()
        comp = fit.compare(level=args.level, reference=args.reference,
                           fama_macbeth=not args.no_fama_macbeth)
        extra = panel_flip_lines(fit, level=args.level)
        if endog or instr:
            extra = list(extra) + iv_lines(fit, engine.estimator("cluster", by="entity"),
                                           args.level)
        extra = list(extra) + cluster_lines(fit, cluster_names(args) or ["entity", "time"],
                                            args.level)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    return write_output(args, fit, comp, extra, "standard errors across panel estimators")


# --------------------------------------------------------------------------- factor models
# (issue 24) `lagwise factors FILE --assets ... --factors ... [--risk-free COL]`

def factor_estimators(fm, kernel: str):
    """The alpha table's columns: classical, HC1, the kernel at the Andrews bandwidth, EWC."""
    from .. import engine
    return [engine.estimator("classical"), engine.estimator("hc1"),
            engine.estimator("kernel", kernel=kernel, bandwidth="andrews"),
            engine.estimator("ewc")]


def factor_alpha_frame(fm, ests, level, reference):
    """Long frame: one row per asset and estimator (the numbers the text and formats show)."""
    import pandas as pd
    from .. import engine
    parts = []
    for est in ests:
        try:
            part = fm.alpha_inference(est, level=level, reference=reference)
            tab = part.table(pd.Index(fm.assets, name="asset"), level, fm.k).reset_index()
            tab.insert(1, "estimator", part.label)
            tab["reference"] = part.law.describe()
            parts.append(tab)
        except engine.LagwiseError as exc:
            print(f"lagwise: {est.label}: {exc}", file=sys.stderr)
    return pd.concat(parts, ignore_index=True)


def factor_joint_lines(fm, kernel: str, level: float, reference: str) -> list[str]:
    """GRS, the joint Wald under every estimator family's default and each kernel's rules, and
    where the conclusion changes along the bandwidth."""
    from .. import engine
    lines = ["", f"Joint test that all {fm.n_assets} alphas are zero ({1 - level:.0%} level)"]
    try:
        g = fm.grs()
        lines.append(f"  {'GRS (exact F under iid normal errors)':<52}F = {g.statistic:8.4g}  "
                     f"F({g.df[0]}, {g.df[1]})  p {_p(g.p_value)}")
        lines += [f"    note: {n}" for n in g.notes[:-1]]
    except engine.LagwiseError as exc:
        lines.append(f"  GRS not available: {exc}")
        try:
            py = fm.large_n_test()
            lines.append(f"  {'Pesaran-Yamagata (2024), large N':<52}J = {py.statistic:8.4g}"
                         f"  N(0,1) one-sided  p {_p(py.p_value)}")
        except engine.LagwiseError as exc2:
            lines.append(f"  large-N test not available: {exc2}")
    ests = [engine.estimator("classical"), engine.estimator("hc0"), engine.estimator("hc1")]
    for name in engine.KERNELS:
        for rule in ("andrews", "newey-west"):
            ests.append(engine.estimator("kernel", kernel=name, bandwidth=rule))
    ests.append(engine.estimator("ewc"))
    for est in ests:
        try:
            jt = fm.alpha_test(est, reference=reference, level=level)
        except engine.LagwiseError as exc:
            if "not defined for the" in str(exc):
                continue                         # a rule that does not exist for this kernel
            lines.append(f"  {est.label:<52}not available: {str(exc).split(':')[0]}")
            continue
        lines.append(f"  {jt.estimator:<52}W = {jt.statistic:8.4g}  {jt.law:<34} p "
                     f"{_p(jt.p_value)}")
    try:
        sweep = fm.joint_sweep(fm.kernel_estimators(), reference=reference)
        lines += ["", f"Where the joint conclusion changes along the bandwidth "
                      f"(b = {sweep.values[0]:g}..{sweep.values[-1]:g})"]
        what = f"all {fm.n_assets} alphas zero"
        lines += ["  " + f.sentence() for f in sweep.flips(level, what)]
        marks = [f"{title} {value:.3g}" for c, _, title, value
                 in fm.rule_landings(sweep.estimators) if c == sweep.curve_index(kernel)]
        lines.append(f"  automatic bandwidths ({sweep.labels[sweep.curve_index(kernel)]}): "
                     + "; ".join(marks))
        ewc = fm.joint_sweep([engine.estimator("ewc")], reference=reference)
        lines.append("  " + ewc.flip(0, level, what).sentence()
                     + f" EWC's F law needs B >= N = {fm.n_assets}.")
    except engine.LagwiseError as exc:
        lines.append(f"  the joint test along the bandwidth is not available: {exc}")
    return lines


def factor_premia_lines(args, kernel: str, level: float) -> list[str]:
    from .. import engine
    est = engine.estimator("kernel", kernel=kernel, bandwidth="andrews")
    try:
        rp = engine.fit_risk_premia(engine.load_table(args.file), args.assets, args.factors,
                                    time=args.time, risk_free=args.risk_free,
                                    zero_beta=args.zero_beta)
        tab = rp.corrections(est, level=level)
    except engine.LagwiseError as exc:
        return ["", f"Risk premia not available: {exc}"]
    lines = ["", f"Risk premia (two-pass, balanced subsample of {rp.nobs} periods; "
                 f"cross-sectional R^2 {rp.r_squared:.3f}); standard errors under {est.label}"]
    cols = ["none", "shanken", "krs", "mean"]
    heads = {"none": "Fama-MacBeth", "shanken": "Shanken", "krs": "KRS robust",
             "mean": "mean (traded)"}
    lines.append(f"  {'premium':<14}{'estimate':>11}" + "".join(f"{heads[c]:>19}" for c in cols))
    for name in rp.premia.index:
        row = [f"  {name:<14}{rp.premia[name]:>11.4g}"]
        for c in cols:
            hit = tab[(tab.premium == name) & (tab.correction == c)]
            cell = "" if hit.empty else (f"{_fmt(hit.std_error.iloc[0])} "
                                         f"({_fmt(hit.t_stat.iloc[0], '.2f')})")
            row.append(f"{cell:>19}")
        lines.append("".join(row))
    lines.append("  standard errors with t statistics in parentheses; 'mean' prices a traded "
                 "factor by its time-series mean")
    return lines


def cmd_factors(args) -> int:
    from ..engine.io.provenance import provenance
    from ..engine.io.tables import render
    from .. import engine
    bar = progress_bar(3, "reading the file")
    table = engine.load_table(args.file)
    bar.update(1)
    bar.set_description("fitting")
    fm = engine.fit_factor_model(table, args.assets, args.factors, time=args.time,
                                 risk_free=args.risk_free, balanced=args.balanced)
    kernel = args.kernel or "bartlett"
    frame = factor_alpha_frame(fm, factor_estimators(fm, kernel), args.level, args.reference)
    bar.update(1)
    bar.set_description("joint tests")
    if args.format != "text":
        bar.close()
        out = render(frame, args.format, index=False,
                     caption=f"{engine.model_line(fm)}: alphas under each estimator",
                     stamp=provenance(table).lines(), level=args.level)
    else:
        lines = [f"Lagwise factor model: {engine.model_line(fm)}", *provenance(table).lines()]
        lines += [f"  note: {n}" for n in fm.sample.notes]
        labels = list(dict.fromkeys(frame.estimator))
        lines += ["", f"Alphas and t statistics under each estimator ({args.level:.0%} level)"]
        lines += [f"  ({i + 1}) {lab}" for i, lab in enumerate(labels)]
        lines.append(f"  {'asset':<12}{'alpha':>11}" + "".join(
            f"{f'({i + 1}) t':>10}{'p':>8}" for i in range(len(labels))))
        for asset in fm.assets:
            rows = frame[frame.asset == asset].set_index("estimator")
            cells = "".join(f"{_fmt(rows.t_stat.get(lab), '.2f'):>10}{_p(rows.p_value.get(lab)):>8}"
                            for lab in labels)
            lines.append(f"  {asset:<12}{fm.alpha[asset]:>11.4g}{cells}")
        lines += factor_joint_lines(fm, kernel, args.level, args.reference)
        if not args.no_premia:
            lines += factor_premia_lines(args, kernel, args.level)
        bar.close()
        out = "\n".join(lines) + "\n"
    return emit(args, out)


def cmd_bootstrap(args) -> int:
    """`lagwise bootstrap FILE ...`: the wild cluster bootstrap of one coefficient, with the
    clustered t tests it is compared with."""
    from .. import engine
    from ..engine.data.columns import as_list
    from ..engine.io.provenance import provenance
    table = engine.load_table(args.file)
    regs = as_list(args.regressors)
    endog, instr = as_list(args.endogenous), as_list(args.instruments)
    named = [c for c in as_list(args.cluster) if c not in ("entity", "time", "both")]
    effects = {"none": (), "entity": ("entity",), "time": ("time",),
               "both": ("entity", "time")}[args.effects]
    common = dict(intercept=not args.no_intercept, clusters=named or None)
    if args.entity or args.time:
        if endog or instr:
            fit = engine.fit_panel_iv(table, args.response, regs, endog, instr,
                                      entity=args.entity, time=args.time, effects=effects,
                                      **common)
        else:
            fit = engine.fit_panel(table, args.response, regs, entity=args.entity,
                                   time=args.time, effects=effects, **common)
    elif endog or instr:
        fit = engine.fit_iv(table, args.response, regs, endog, instr, **common)
    else:
        fit = engine.fit_ols(table, args.response, regs, **common)
    by = as_list(args.cluster)[0] if as_list(args.cluster) else "entity"
    bar = progress_bar(args.reps, "replications")
    res = engine.wild_cluster_bootstrap(
        fit, args.coefficient, by=by, reps=args.reps, weights=args.weights, null=args.null,
        level=args.level, seed=args.seed, restricted=not args.unrestricted,
        pvalue=args.pvalue, progress=lambda done, total: bar.update(done - bar.n))
    bar.close()
    pct = f"{args.level:.0%}"
    lines = [f"Lagwise wild cluster bootstrap: {engine.model_line(fit)}",
             *provenance(table).lines(), "",
             f"{res.coefficient} = {res.null:g}, clustered by {by}:"]
    for c, d in (("cr1", "clusters"), ("cr2", "bell-mccaffrey"), ("cr3", "bell-mccaffrey")):
        try:
            r = fit.infer(engine.estimator("cluster", by=by, correction=c, df=d),
                          level=args.level)
        except engine.LagwiseError as exc:
            lines.append(f"  {c.upper():<5}not available: {exc}")
            continue
        law = r.term_laws()[list(r.table.index).index(res.coefficient)]
        row = r.table.loc[res.coefficient]
        t = (row.estimate - res.null) / row.std_error
        p = float(law.p_values(np.array([t]))[0])
        lines.append(f"  {c.upper():<5}std err {_fmt(row.std_error):>10}  t {t:>8.3f}  "
                     f"{law.label:<12} p {_p(p):>7}  "
                     + ("rejected" if p < 1 - args.level else "not rejected"))
    ci = "not computed" if res.ci is None else f"[{_fmt(res.ci[0])}, {_fmt(res.ci[1])}]"
    lines.append(f"  {'wild':<5}bootstrap ({res.method}) p {_p(res.p_value):>7}  "
                 + ("rejected" if res.p_value < 1 - args.level else "not rejected")
                 + f"; {pct} interval by test inversion {ci}")
    lines += ["", "  " + res.summary()] + [f"  note: {n}" for n in res.notes]
    if by != "both":
        lines += cluster_lines(fit, [by], args.level)
    text = "\n".join(lines) + "\n"
    return emit(args, text)


def cmd_demo(args) -> int:
    """The bundled, simulated demo files: their paths (one name: that file's path only, for
    use in another command, e.g. lagwise table "$(lagwise demo freight_index.csv)" ...)."""
    from .._files import demo_dir
    folder = demo_dir()
    files = sorted(p for p in folder.iterdir() if p.suffix in (".csv", ".parquet"))
    if args.name:
        match = [p for p in files if p.name == args.name or p.stem == args.name]
        if not match:
            print(f"lagwise: no demo file named {args.name!r}; the demo files are "
                  + ", ".join(p.name for p in files), file=sys.stderr)
            return 2
        print(match[0])
        return 0
    print(f"Demo data (simulated; generators beside them) in {folder}:")
    for p in files:
        print(f"  {p}")
    return 0


def cmd_serve(args) -> int:
    from .main import serve
    return serve(args.file, host=args.host, port=args.port, debug=args.debug,
                 settings=args.settings, allowed_hosts=args.allow_host or ())


def _output_arguments(parser) -> None:
    """Options shared by the commands that print a comparison: level, law and output."""
    parser.add_argument("--level", type=float, default=0.95,
                        help="confidence level (default 0.95)")
    parser.add_argument("--reference", default="auto", help="auto, normal, t or fixed-b")
    parser.add_argument("--format", default="text",
                        choices=["text", "csv", "markdown", "latex", "html"])
    parser.add_argument("--output", default=None, help="write to this file instead of stdout")


def _factors_parser(sub) -> None:
    """`lagwise factors` (issue 24: factor models)."""
    fa = sub.add_parser("factors", help="a factor model: every asset's alpha, the joint test "
                                        "that all alphas are zero under every estimator, GRS "
                                        "and the risk premia")
    fa.add_argument("file", help="CSV or Parquet file, one row per period")
    fa.add_argument("--assets", required=True, help="the test assets' columns (comma-separated)")
    fa.add_argument("--factors", required=True, help="the factor columns (comma-separated)")
    fa.add_argument("--risk-free", default=None, metavar="COL",
                    help="a column subtracted from every asset (default: the assets are excess "
                         "returns already)")
    fa.add_argument("--time", default=None, metavar="COL",
                    help="the column holding the periods (default: the file's date column)")
    fa.add_argument("--balanced", action="store_true",
                    help="keep only the periods in which every asset is observed")
    fa.add_argument("--kernel", default=None, help="the kernel of the alpha table's HAC column "
                                                   "and the flips (default bartlett)")
    fa.add_argument("--zero-beta", action="store_true",
                    help="a zero-beta rate (intercept) in the cross-sectional regression")
    fa.add_argument("--no-premia", action="store_true", help="leave out the risk premia")
    _output_arguments(fa)
    fa.set_defaults(func=cmd_factors)


def _panel_few_cluster_options(q) -> None:
    """`lagwise panel`: a further grouping column and panel IV."""
    q.add_argument("--cluster", action="append", metavar="COLUMN",
                   help="a further grouping column (a region, an industry): clustered rows and "
                        "a summary of its clusters; repeatable (in memory only)")
    q.add_argument("--endogenous", default="",
                   help="regressors to instrument (panel IV after the within transformation)")
    q.add_argument("--instruments", default="", help="excluded instruments (comma-separated)")
    q.add_argument("--method", default="2sls", choices=["2sls", "two-step", "iterated", "cue"],
                   help="panel IV estimation (default 2sls; GMM weights by entity clusters)")


def _bootstrap_parser(sub) -> None:
    """`lagwise bootstrap`: the wild cluster bootstrap of one coefficient."""
    b = sub.add_parser("bootstrap", help="the wild cluster bootstrap of one coefficient, "
                                         "beside CR1/CR2/CR3 (few clusters)")
    b.add_argument("file", help="CSV or Parquet file")
    b.add_argument("--response", required=True, help="response column")
    b.add_argument("--regressors", default="", help="comma-separated regressor columns")
    b.add_argument("--coefficient", required=True, help="the coefficient to test")
    b.add_argument("--cluster", required=True, metavar="GROUPING",
                   help="a column to cluster by, or entity, time or both for a panel")
    b.add_argument("--entity", default=None, help="a panel's entity column")
    b.add_argument("--time", default=None, help="a panel's period column")
    b.add_argument("--effects", default="none", choices=["none", "entity", "time", "both"])
    b.add_argument("--endogenous", default="", help="the instrumented regressor (WRE)")
    b.add_argument("--instruments", default="", help="excluded instruments")
    b.add_argument("--no-intercept", action="store_true", help="leave out the constant term")
    b.add_argument("--reps", type=int, default=9999, help="replications (99 to 10,000,000; "
                   "with Rademacher weights all 2^G sign vectors when 2^G <= reps)")
    b.add_argument("--weights", default="rademacher", choices=["rademacher", "webb", "mammen"])
    b.add_argument("--null", type=float, default=0.0, help="the value tested (default 0)")
    b.add_argument("--level", type=float, default=0.95, help="confidence level (default 0.95)")
    b.add_argument("--seed", type=int, default=0)
    b.add_argument("--pvalue", default="symmetric", choices=["symmetric", "equal-tailed"])
    b.add_argument("--unrestricted", action="store_true",
                   help="do not impose the null on the bootstrap samples (WCU)")
    b.add_argument("--output", default=None, help="write to this file instead of stdout")
    b.set_defaults(func=cmd_bootstrap)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="lagwise", description="Robust standard errors for "
                                "time-series regressions, and how they depend on the lag choice.")
    from ..engine.io.provenance import lagwise_version
    p.add_argument("--version", action="version", version=f"lagwise {lagwise_version()}")
    sub = p.add_subparsers(dest="command", required=True)
    _table_parser(sub)
    _panel_parser(sub)
    add_irf_parser(sub)
    _factors_parser(sub)
    _bootstrap_parser(sub)
    _serve_parser(sub)
    _demo_parser(sub)
    return p


def _table_parser(sub) -> None:
    """`lagwise table`: the estimator comparison for a regression."""
    t = sub.add_parser("table", help="print the estimator comparison for a regression")
    t.add_argument("file", help="CSV or Parquet file")
    t.add_argument("--response", required=True, help="response column")
    t.add_argument("--regressors", default="", help="comma-separated regressor columns")
    t.add_argument("--no-intercept", action="store_true", help="leave out the constant term")
    t.add_argument("--endogenous", default="", help="regressors to instrument (comma-separated)")
    t.add_argument("--instruments", default="", help="excluded instruments (comma-separated)")
    t.add_argument("--method", default="2sls", choices=["2sls", "two-step", "iterated", "cue"],
                   help="IV/GMM estimation (default 2sls)")
    t.add_argument("--weight", default="hc0",
                   help="estimator of S for GMM weighting and the instrument tests: hc0, hc1, "
                        "ewc, var, or KERNEL:BANDWIDTH such as bartlett:13 or parzen:andrews")
    t.add_argument("--transform", action="append", metavar="KIND:COLUMN[:P]",
                   help="add a transformed column first, e.g. sum-next:exret_1m:12 or lag:x:1 "
                        "(kinds: lag, lead, difference, log, log-difference, sum-next); "
                        "repeatable")
    t.add_argument("--horizon", type=int, default=None,
                   help="periods h summed by an overlapping response (errors MA(h-1))")
    t.add_argument("--one-period", default=None, metavar="COLUMN",
                   help="the column whose sum over the next h periods is the response "
                        "(Hodrick standard errors, horizons)")
    t.add_argument("--focus", default=None, help="the coefficient for the studies below")
    t.add_argument("--persistence", action="store_true",
                   help="report the predictor's persistence, bias and IVX (always with --horizon)")
    t.add_argument("--horizons", type=int, default=0, metavar="H",
                   help="fit every horizon 1..H from the one-period series")
    t.add_argument("--bootstrap", default=None,
                   choices=["moving_block", "stationary", "circular", "wild"],
                   help="percentile-t bootstrap intervals beside the analytic ones")
    t.add_argument("--size-check", type=int, default=0, metavar="N",
                   help="simulate N samples under beta = 0 and report each test's actual size")
    t.add_argument("--size-method", default="var", choices=["var", "block"])
    t.add_argument("--cluster", action="append", metavar="COLUMN",
                   help="a column whose labels group the rows (an industry, a region): its "
                        "clustered rows (CR1, CR2 with Bell-McCaffrey df) join the comparison "
                        "and a summary of its clusters is printed; repeatable")
    t.add_argument("--kernel", default=None, help="restrict kernel rows to one kernel")
    t.add_argument("--bandwidth", type=_bandwidth_arg, default=None,
                   help="real bandwidth b or a rule (andrews, newey-west, rule-of-thumb, "
                        "textbook, llsw); default: each rule's own")
    t.add_argument("--lags", type=int, default=None, help="lag count L (sets b = L + 1)")
    _output_arguments(t)
    t.set_defaults(func=cmd_table)


def _panel_parser(sub) -> None:
    """`lagwise panel`: the panel estimators."""
    q = sub.add_parser("panel", help="compare panel estimators (clustered, Driscoll-Kraay, "
                                     "Fama-MacBeth); a folder of Parquet files runs on Dask")
    q.add_argument("source", help="CSV or Parquet file, or a folder of Parquet files")
    q.add_argument("--entity", required=True, help="entity (firm, fund) identifier column")
    q.add_argument("--time", required=True, help="period column (dates or whole numbers)")
    q.add_argument("--response", required=True, help="response column")
    q.add_argument("--regressors", default="", help="comma-separated regressor columns")
    q.add_argument("--effects", default="none", choices=["none", "entity", "time", "both"],
                   help="fixed effects removed by the within transformation")
    q.add_argument("--no-intercept", action="store_true", help="leave out the constant term")
    _panel_few_cluster_options(q)
    q.add_argument("--no-fama-macbeth", action="store_true",
                   help="leave the Fama-MacBeth rows out of the comparison")
    q.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="a dask.distributed scheduler (tcp://host:port); default: a local "
                        "cluster on this machine (folders only)")
    q.add_argument("--workers", type=int, default=2,
                   help="workers of the local Dask cluster (default 2)")
    _output_arguments(q)
    q.set_defaults(func=cmd_panel)


def _serve_parser(sub) -> None:
    """`lagwise serve`: the dashboard."""
    s = sub.add_parser("serve", help="open the dashboard in the browser (local only)")
    s.add_argument("file", nargs="?", default=None, help="data file (default: the demo data)")
    s.add_argument("--host", default="127.0.0.1",
                   help="address to listen on (default 127.0.0.1: this computer only)")
    s.add_argument("--allow-host", action="append", metavar="NAME",
                   help="another host name the server answers for (e.g. the machine's name "
                        "when --host 0.0.0.0); repeatable")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--debug", action="store_true", help="Dash debug mode (development only)")
    s.add_argument("--settings", default=None, help="a saved settings JSON to start from")
    s.set_defaults(func=cmd_serve)


def _demo_parser(sub) -> None:
    """`lagwise demo`: where the bundled demo files are."""
    d = sub.add_parser("demo", help="print where the bundled (simulated) demo files are")
    d.add_argument("name", nargs="?", default=None,
                   help="a demo file (freight_index.csv, shipping_panel.csv): print its path")
    d.set_defaults(func=cmd_demo)


def main(argv=None) -> int:
    from .. import engine
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except engine.LagwiseError as exc:
        print(f"lagwise: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"lagwise: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
