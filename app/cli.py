"""Command line: `lagwise table FILE ...` (estimator comparison), `lagwise panel FILE_OR_FOLDER
...` (panel estimators; a folder of Parquet files runs on Dask) and `lagwise serve [FILE]`."""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np


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
    if endog or instr:
        return engine.fit_iv(table, args.response, regs, endog, instr,
                             intercept=not args.no_intercept, method=args.method,
                             weight=weight_arg(args.weight), horizon=args.horizon)
    return engine.fit_ols(table, args.response, regs, intercept=not args.no_intercept,
                          horizon=args.horizon,
                          one_period=getattr(args, "one_period", None) if args.horizon
                          else None)


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
    if args.output:
        Path(args.output).write_text(out)
        print(f"wrote {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(out)
    return 0


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
        fit = engine.fit_panel(data, args.response, regs, entity=args.entity, time=args.time,
                               effects=effects, intercept=not args.no_intercept, client=client,
                               **kw)
        if client is not None:
            bar.close()
        comp = fit.compare(level=args.level, reference=args.reference,
                           fama_macbeth=not args.no_fama_macbeth)
        extra = panel_flip_lines(fit, level=args.level)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    return write_output(args, fit, comp, extra, "standard errors across panel estimators")


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


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="lagwise", description="Robust standard errors for "
                                "time-series regressions, and how they depend on the lag choice.")
    from ..engine.io.provenance import lagwise_version
    p.add_argument("--version", action="version", version=f"lagwise {lagwise_version()}")
    sub = p.add_subparsers(dest="command", required=True)
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
    t.add_argument("--kernel", default=None, help="restrict kernel rows to one kernel")
    t.add_argument("--bandwidth", type=_bandwidth_arg, default=None,
                   help="real bandwidth b or a rule (andrews, newey-west, rule-of-thumb, "
                        "textbook, llsw); default: each rule's own")
    t.add_argument("--lags", type=int, default=None, help="lag count L (sets b = L + 1)")
    _output_arguments(t)
    t.set_defaults(func=cmd_table)
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
    q.add_argument("--no-fama-macbeth", action="store_true",
                   help="leave the Fama-MacBeth rows out of the comparison")
    q.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="a dask.distributed scheduler (tcp://host:port); default: a local "
                        "cluster on this machine (folders only)")
    q.add_argument("--workers", type=int, default=2,
                   help="workers of the local Dask cluster (default 2)")
    _output_arguments(q)
    q.set_defaults(func=cmd_panel)
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
    d = sub.add_parser("demo", help="print where the bundled (simulated) demo files are")
    d.add_argument("name", nargs="?", default=None,
                   help="a demo file (freight_index.csv, shipping_panel.csv): print its path")
    d.set_defaults(func=cmd_demo)
    return p


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
