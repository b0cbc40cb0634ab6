"""``decomp size``: will the nightly run fit its optimization window?

Fits time = a * products^b per method from ``decomp bench`` output, projects
the run's wall time on the given workers (per-task overhead from --overhead or
a ``decomp run`` summary), and says whether it fits, by what margin, the
fewest workers that fit, and what a looser tolerance (other benchmarked
tolerances) would buy. Prints a table; writes sizing.json and sizing.png to
--out. With --revenue-loss X (benchmark from ``decomp bench --revenue-paths N``)
it also answers the loosest benchmarked tolerance whose revenue loss is within X
at the largest priced rung, the upper end of its paired 95 % interval included
(a point estimate inside X with an interval reaching past it is not enough),
and the time that saves per task. Fits need benchmark cases at three sizes or
more (from --fit-min-products, 1,000 by default); fewer is an error (exit 2).
``--json`` prints sizing.json instead of the table. Exit 0 fits, 1 does not, 2 bad input.
"""

from __future__ import annotations

from ._options import count, duration, number, positive, positive_number


def register(sub):
    p = sub.add_parser("size", help="project a production run's wall time against the window", description=__doc__)
    p.add_argument("--bench", required=True, metavar="FILE_OR_DIR",
                   help="decomp bench output (benchmark.json or its folder)")
    p.add_argument("--dates", type=_dates, default=365, metavar="N|FIRST:LAST",
                   help="departure dates: a count, or FIRST:LAST inclusive ISO dates as for decomp run "
                        "(default: %(default)s)")
    p.add_argument("--products", type=positive, metavar="P", help="products per network (no default: give it or --instances)")
    p.add_argument("--networks", type=positive, default=1, metavar="N", help="networks per date (default: %(default)s)")
    p.add_argument("--instances", metavar="DIR",
                   help="folder of instance folders (sizes read from it), each solved once per date "
                        "(default: --products)")
    p.add_argument("--model", default="pnlp", choices=("dlp", "pnlp", "pwl"), help="default: %(default)s")
    p.add_argument("--method", default=None,
                   help="method of --model (default: lagrangian for pnlp, highs for dlp and pwl)")
    p.add_argument("--variant", help="benchmark label to use (e.g. lagrangian-lbfgsb); default: the method's default")
    p.add_argument("--tol", type=positive_number, default=1e-9, help="tolerance of the run (default: %(default)g)")
    p.add_argument("--fit-min-products", type=count, default=1000, metavar="N",
                   help="fit only benchmark cases of at least N products: small ones carry fixed costs that "
                        "bend the curve (default: %(default)s; 0 fits every case)")
    p.add_argument("--workers", type=positive, default=None, metavar="W",
                   help="workers of the production run (default: one per core of this machine, as decomp run)")
    p.add_argument("--window", type=duration, required=True,
                   help="optimization window with its unit, e.g. 2h, 90m, 180s (a bare number is refused)")
    p.add_argument("--overhead", type=number(0.0), metavar="S",
                   help="seconds per task beyond the solve (default: from --run-summary, else 0)")
    p.add_argument("--startup", type=number(0.0), metavar="S",
                   help="seconds to start the cluster (default: from --run-summary, else 0)")
    p.add_argument("--run-summary", metavar="FILE",
                   help="a decomp run summary.json to take the overhead from (default: none)")
    p.add_argument("--calibrate", action="store_true",
                   help="scale the benchmark fit by the solve times measured in --run-summary (a pilot run "
                        "of the same method and tolerance on the production machine; default: off)")
    p.add_argument("--revenue-loss", type=number(0.0, above=True), metavar="X",
                   help="also answer the loosest benchmarked tolerance whose relative revenue loss is within X "
                        "(e.g. 0.001), upper end of its 95%% interval included, at the largest priced rung, from "
                        "a 'decomp bench --revenue-paths N' run (default: not asked)")
    p.add_argument("--out", default="sizing", help="folder for sizing.json and sizing.png (default: %(default)s)")
    p.add_argument("--json", action="store_true", help="print sizing.json to stdout instead of the table")
    p.set_defaults(func=run)


def _dates(text: str) -> int:
    """A number of dates, or FIRST:LAST (inclusive ISO dates) counted."""
    import argparse
    import datetime as dt

    if ":" in text:
        try:
            first, last = (dt.date.fromisoformat(x.strip()) for x in text.split(":", 1))
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected N or FIRST:LAST ISO dates, got {text!r}") from None
        if last < first:
            raise argparse.ArgumentTypeError(f"the last date {last} is before the first {first}")
        return (last - first).days + 1
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected N or FIRST:LAST ISO dates, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"at least 1 date, got {n}")
    return n


def _m(s):
    from ..production.durations import format_duration

    return format_duration(s)


def run(args) -> int:
    import json
    import sys
    import os
    import pathlib

    from .. import atomic
    from ..production import sizing

    from ..paths import output_folder, refusing

    output_folder(args.out, "--out")               # before anything is fitted: exit 2, the path named
    window = args.window
    overhead, startup, source = 0.0, 0.0, "none given (0 s)"
    if args.run_summary:
        overhead, startup = sizing.read_run_overhead(args.run_summary)
        source = f"measured in {args.run_summary}"
    if args.overhead is not None:
        overhead, source = args.overhead, "--overhead"
    if args.startup is not None:
        startup = args.startup
    calibration = None
    if args.calibrate:
        if not args.run_summary:
            from ..errors import ConfigError

            raise ConfigError("--calibrate needs --run-summary (a decomp run summary.json)")
        calibration = sizing.read_run_solves(args.run_summary)
    workers = args.workers if args.workers is not None else (os.cpu_count() or 1)
    cases = sizing.load_bench(args.bench)
    sizes = sizing.task_sizes(args.dates, args.products, args.networks, args.instances)
    from ._options import method_or_default

    method = method_or_default(args.method, args.model)
    s = sizing.size_run(cases, model=args.model, method=method, tol=args.tol, task_products=sizes,
                        workers=workers, window=window, overhead=overhead, startup=startup,
                        variant=args.variant, fit_min_products=args.fit_min_products, calibration=calibration,
                        revenue_loss=args.revenue_loss)
    s["overhead_source"] = source
    r, f = s["result"], s["result"]["fit"]
    out = pathlib.Path(args.out)
    atomic.write_json(out / "sizing.json", s)
    with refusing(out / "sizing.png"):
        sizing.plot(s, out / "sizing.png")
    if s.get("calibration") and s["calibration"]["warning"]:
        print(f"decomp size: warning: {s['calibration']['warning']}", file=sys.stderr)
    if args.json:
        print(json.dumps(s, indent=2))
        return 0 if r["fits"] else 1

    print(f"decomp size: {s['tasks']} tasks of {s['products_min']:,.0f}..{s['products_max']:,.0f} products, "
          f"{s['model']} by {s['variant']}, tol {r['tol']:g}, {s['workers']} workers, window {_m(window)}")
    bse = "-" if f["b_stderr"] is None else f"{f['b_stderr']:.3f}"
    print(f"  fit: t = {f['a']:.3g} * n^{f['b']:.3f} (stderr of b {bse}; {f['n_points']} cases, "
          f"n {f['n_range'][0]:,.0f}..{f['n_range'][1]:,.0f}{'; EXTRAPOLATED' if r['extrapolated'] else ''})")
    if r["cases_with_accuracy_failures"]:
        print(f"  note: {r['cases_with_accuracy_failures']} fitted case(s) converged but failed an accuracy "
              f"check in the benchmark (their times are kept)")
    cal = s.get("calibration")
    if cal is not None:
        lo, hi = cal["pilot_products"]
        sizes = f"{hi:,.0f}" if lo == hi else f"{lo:,.0f} to {hi:,.0f}"
        print(f"  calibrated: solve times of {cal['pilot_tasks']} pilot task(s) of {sizes} products in "
              f"{args.run_summary} are {cal['factor']:.2f}x the benchmark fit (median; {cal['ratio_range'][0]:.2f} to "
              f"{cal['ratio_range'][1]:.2f}); the fit is scaled by that and applied at "
              f"{cal['applied_at_products']:,.0f} products, {cal['reach']:.3g}x the pilot's largest task")

    print(f"  per task: solve {r['per_task_solve_seconds']:.3f} s + overhead {overhead:.3f} s ({source}); "
          f"start-up {startup:.1f} s")
    rows = [("tol", "wall", "95% interval", "fits", "margin", "fewest workers (central/high)")]
    for x in [r] + s["looser"]:
        iv = "-" if x["wall_low"] is None else f"{_m(x['wall_low'])}..{_m(x['wall_high'])}"
        margin = ("+" if x["margin_seconds"] >= 0 else "-") + _m(abs(x["margin_seconds"]))
        rows.append((f"{x['tol']:g}", _m(x["wall_seconds"]), iv, "yes" if x["fits"] else "NO", margin,
                     f"{x['smallest_workers'] or '-'} / {x['smallest_workers_high'] or '-'}"))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    for i, row in enumerate(rows):
        print("  " + "  ".join(c.ljust(w) for c, w in zip(row, widths)))
        if i == 0:
            print("  " + "  ".join("-" * w for w in widths))
    if s["looser_too_few_sizes"]:
        print(f"  (not fitted, fewer than {sizing.MIN_FIT_SIZES} sizes: tol "
              + ", ".join(f"{t:g}" for t in s["looser_too_few_sizes"]) + ")")
    elif not s["looser"]:
        print("  (no benchmark cases at a looser tolerance for this method)")
    if s["revenue"] is not None:
        _print_revenue(s["revenue"])
    verdict = "FITS" if r["fits"] else "DOES NOT FIT"
    print(f"verdict: {verdict} on {s['workers']} workers; written {out / 'sizing.json'}, {out / 'sizing.png'}")
    return 0 if r["fits"] else 1


def _print_revenue(rv: dict) -> None:
    n = rv["rung_products"]
    print(f"  revenue loss at {n:,} products (the largest priced rung; {rv['estimate']}):")
    for row in rv["by_tol"]:
        high = "?" if row["revenue_loss_high"] is None else f"{row['revenue_loss_high']:+.3e}"
        print(f"    tol {row['tol']:g}: loss {row['revenue_loss_rel']:+.3e}, 95% upper end {high} "
              f"({row['paths'] or '?'} paths), median {row['seconds']:.4g} s, "
              f"{'within' if row['within'] else 'NOT within'} {rv['max_loss_rel']:g} ({row['why']})")
    if rv["loosest_tol"] is None:
        print(f"  loosest tolerance within a revenue loss of {rv['max_loss_rel']:g}: none of the benchmarked ones")
        return
    saved = []
    if rv["seconds_saved_measured"] is not None:
        saved.append(f"{rv['seconds_saved_measured']:.4g} s per solve measured at {n:,} products")
    if rv.get("seconds_saved_per_task") is not None:
        saved.append(f"{rv['seconds_saved_per_task']:.4g} s per task projected from the fits")
    print(f"  loosest tolerance within a revenue loss of {rv['max_loss_rel']:g}: {rv['loosest_tol']:g} "
          f"(loss {rv['revenue_loss_rel']:+.3e}); saves against tol {rv['baseline_tol']:g}: "
          + ("; ".join(saved) if saved else "not measured (the baseline tolerance is not priced at that rung)"))
