"""Command line: `lagwise irf FILE --response Y --shock X [--controls A,B] [--lags P]
[--horizons H] ...`: impulse responses by local projections, each horizon's band under several
estimators, where the response stops being significant under each, the sup-t bands, and where
each horizon's conclusion changes along the bandwidth."""

from __future__ import annotations

import sys

import pandas as pd

from .cli_output import emit


def lp_estimator_arg(text: str):
    """--estimator: horizon-rule[:lagwise|statsmodels], lag-augmented[:EXTRA], an estimator
    name (hc0, hc1, ewc, var, classical) or KERNEL:BANDWIDTH (bartlett:3, parzen:andrews)."""
    from .. import engine
    head, _, rest = text.partition(":")
    if head == "horizon-rule":
        return engine.horizon_rule(rest or "lagwise")
    if head == "lag-augmented":
        try:
            extra = int(rest) if rest else 1
        except ValueError:
            raise engine.SpecificationError(f"lag-augmented:EXTRA needs a whole number, got "
                                            f"{rest!r}") from None
        return engine.lag_augmented(extra)
    if rest:
        try:
            bw = float(rest)
        except ValueError:
            bw = rest
        return engine.estimator("kernel", kernel=head, bandwidth=bw)
    return engine.estimator(text)


def irf_text(lp, frame, caption, notes, summary, flips, boot_lines, stamp=()) -> str:
    """Our own plain-text layout: the model, the table by horizon, the conclusions."""
    lines = [f"Lagwise impulse response: {lp.line}", *stamp]
    lines += [f"  note: {n}" for n in lp.notes]
    lines += ["", caption, frame.to_string(index=False), ""]
    lines += [f"  {n}" for n in notes]
    lines += ["", "Where the response is significant (pointwise) and where it stops:"]
    for _, r in summary.iterrows():
        if pd.isna(r["first_significant"]):
            stop = "never significant"
        elif pd.isna(r["stops_at"]):
            stop = "significant through the last horizon"
        else:
            stop = f"stops being significant at h = {int(r['stops_at'])}"
        where = "no horizon" if r["significant_at"] == "none" else f"h = {r['significant_at']}"
        sup = "no horizon" if r["sup_t_significant_at"] == "none" else \
            f"h = {r['sup_t_significant_at']}"
        lines.append(f"  {r['estimator']}: significant at {where}; {stop}; the sup-t band "
                     f"excludes 0 at {sup}")
    lines += ["", flips.attrs.get("title", ""), flips.to_string()]
    lines += boot_lines
    return "\n".join(lines) + "\n"


def cmd_irf(args) -> int:
    from .. import engine
    from ..engine.data.columns import as_list
    from ..engine.io.lp_tables import paper_table
    from ..engine.io.provenance import provenance
    from ..engine.io.tables import render
    from ..engine.models.lp_inference import default_estimators
    from tqdm import tqdm

    table = engine.load_table(args.file)
    lp = engine.fit_local_projections(table, args.response, args.shock, as_list(args.controls),
                                      lags=args.lags, horizons=args.horizons,
                                      cumulative=args.cumulative,
                                      common_sample=args.common_sample)
    ests = [lp_estimator_arg(e) for e in args.estimator] if args.estimator else \
        default_estimators(lp)
    frame, caption, notes = paper_table(lp, ests, args.level, args.reference)
    stamp = provenance(table).lines()
    if args.format != "text":
        out = render(frame, args.format, index=False, caption=caption, notes=[lp.line, *notes],
                     stamp=stamp, level=args.level)
    else:
        summary = lp.significance(ests, args.level, "pointwise", args.reference)
        sup = lp.significance(ests, args.level, "sup-t", args.reference)
        summary["sup_t_significant_at"] = sup["significant_at"].to_numpy()
        top = int(max(4, min(40, lp.nobs[-1] // 3)))
        sw = lp.sweep(["bartlett", "quadratic_spectral"], range(1, top + 1))
        flips = sw.flip_table(args.level)
        flips.attrs["title"] = (f"Where each horizon's {args.level:.0%} test rejects beta_h = 0 "
                                f"along the bandwidth (b = 1..{top}, normal critical values):")
        boot = []
        if args.bootstrap:
            e = ests[0]
            bar = tqdm(total=args.bootstrap_reps, desc="bootstrap", leave=False, disable=None,
                       file=sys.stderr)
            done = [0]

            def progress(d, total):
                bar.update(d - done[0])
                done[0] = d
            b = lp.bootstrap(e, args.level, scheme=args.bootstrap, reps=args.bootstrap_reps,
                             progress=progress)
            bar.close()
            boot = ["", f"Bootstrap ({b.attrs['how']}, {b.attrs['reps']} draws, seed "
                        f"{b.attrs['seed']}) for {e.label}: sup-t critical value "
                        f"{float(b['sup_t_critical_value'].iloc[0]):.3f} (Monte Carlo s.e. "
                        f"{b.attrs['sup_t_mc_se']:.3f}); {b.attrs['note']}",
                    b[["estimate", "std_error", "critical_value", "ci_low", "ci_high",
                       "sup_t_low", "sup_t_high"]].to_string()]
        out = irf_text(lp, frame, caption, notes, summary, flips, boot, stamp)
    return emit(args, out)


def add_irf_parser(sub) -> None:
    r = sub.add_parser("irf", help="impulse responses by local projections: bands under "
                                   "several estimators, pointwise and sup-t")
    r.add_argument("file", help="CSV or Parquet file with a date column (regular periods)")
    r.add_argument("--response", required=True, help="response column y")
    r.add_argument("--shock", required=True, help="shock column (ordered first)")
    r.add_argument("--controls", default="", help="controls whose lags enter (comma-separated)")
    r.add_argument("--lags", type=int, default=1, help="lags p of every variable (default 1)")
    r.add_argument("--horizons", type=int, default=12, help="horizons H: h = 0..H (default 12)")
    r.add_argument("--cumulative", action="store_true",
                   help="the response y(t+h) - y(t-1) (long difference)")
    r.add_argument("--common-sample", action="store_true",
                   help="every horizon on the longest horizon's sample")
    r.add_argument("--estimator", action="append", metavar="SPEC",
                   help="horizon-rule[:statsmodels], lag-augmented[:EXTRA], hc0, ewc, var, or "
                        "KERNEL:BANDWIDTH such as bartlett:3 or parzen:andrews; repeatable "
                        "(default: Newey-West 2 lags, the horizon rule, Bartlett with each "
                        "horizon's Andrews bandwidth, EWC, lag-augmented HC0)")
    r.add_argument("--bootstrap", default=None, choices=["block", "wild"],
                   help="bootstrap bands for the first estimator")
    r.add_argument("--bootstrap-reps", type=int, default=2000)
    r.add_argument("--level", type=float, default=0.90, help="confidence level (default 0.90)")
    r.add_argument("--reference", default="auto", help="auto, normal, t or fixed-b")
    r.add_argument("--format", default="text", choices=["text", "csv", "markdown", "latex",
                                                        "html"])
    r.add_argument("--output", default=None, help="write to this file instead of stdout")
    r.set_defaults(func=cmd_irf)
