"""``decomp baseline``: record what this environment answers; check another environment against it.

    decomp baseline record --suite quick --out baselines/before-upgrade
    (upgrade Ipopt, HiGHS, Pyomo, numpy or scipy)
    decomp baseline check baselines/before-upgrade --out baselines/check-after-upgrade

``check`` exits 1 when any case regressed (status, objective, bid prices,
certificate, allocation or time beyond its threshold), 2 when the baseline
folder is missing, truncated or edited, 0 otherwise. Each check adds its cases
with the environment to the history store (``--history FILE``; default
$DECOMP_HISTORY, else bench/results/history.sqlite; ``--no-history`` skips it),
which ``decomp bench history`` lists, compares and draws.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from ._options import count, number, positive
from ._vocabulary import old_name
from .bench import add_history_options


def register(sub):
    p = sub.add_parser("baseline", help="record a solver baseline; check an upgraded environment against it",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    bsub = p.add_subparsers(dest="baseline_command", metavar="ACTION")

    r = bsub.add_parser("record", help="solve a suite and write a baseline folder")
    r.add_argument("--suite", default="quick", help="suite name (default: %(default)s; see --list)")
    r.add_argument("--out", help="baseline folder to create (default: none; needed unless --list)")
    r.add_argument("--force", action="store_true",
                   help="replace an existing baseline folder decomp recorded (its .decomp marker or baseline "
                        "manifest; anything else is refused; default: off)")
    r.add_argument("--repeat", type=positive, default=1, help="time each solve as the best of N runs (default 1)")
    r.add_argument("--no-warmup", action="store_true",
                   help="do not solve the first case of each (model, method) once untimed before timing it")
    r.add_argument("--list", action="store_true", help="list the suites and their cases, then stop")
    r.set_defaults(func=run_record)

    c = bsub.add_parser("check", help="re-solve a baseline's cases and report what changed")
    c.add_argument("baseline", help="baseline folder written by 'decomp baseline record'")
    c.add_argument("--out", help="folder for check.json and check.md (default: print the Markdown only)")
    c.add_argument("--case", action="append", dest="cases", metavar="ID", help="check only this case (repeatable; default: every case)")
    c.add_argument("--repeat", type=positive, default=1, help="time each solve as the best of N runs (default 1)")
    c.add_argument("--confirm-runs", type=count, default=2,
                   help="time a case over the time ratio this many more times, judge the best run (default 2)")
    c.add_argument("--no-warmup", action="store_true",
                   help="do not solve the first case of each (model, method) once untimed before timing it")
    g = c.add_argument_group("thresholds (defaults fit each case's model and recorded tolerance)")
    g.add_argument("--rtol-objective", type=number(0.0), help="objective relative change (default max(10 tol, 1e-9))")
    g.add_argument("--rtol-bid", type=number(0.0), help="bid-price relative change (default 1e-7 LP, max(1e-6, 1e3 tol) PNLP)")
    g.add_argument("--atol-bid", type=number(0.0), help="bid-price absolute change in fare units "
                                                  "(default rtol x max(1, largest recorded bid price))")
    g.add_argument("--rtol-allocation", type=number(0.0), help="allocation sum/min/max relative change "
                                                         "(default max(1e-5, 1e3 tol) PNLP; LP: note only)")
    g.add_argument("--gap-floor", type=number(0.0), help="certified gap allowed in any case (default: the recorded tol)")
    g.add_argument("--violation-floor", type=number(0.0), default=1e-6, help="relative capacity violation (default 1e-6)")
    g.add_argument("--kkt-floor", type=number(0.0), default=1e-6, help="KKT residual (default 1e-6)")
    g.add_argument("--certificate-factor", type=number(0.0), default=10.0,
                   help="a certificate measure may grow to this multiple of its recorded value (default 10)")
    g.add_argument("--max-time-growth", default="2x",
                   help="allowed growth new/old of the solve's CPU time: a ratio such as 2x or a growth such as "
                        "100%%, as bench compare --max-growth (default: %(default)s)")
    old_name(g, "--time-ratio", new="--max-time-growth", dest="time_ratio", metavar="X",
             note="; a bare number is the ratio there (2 = 2x)")
    g.add_argument("--time-floor", type=number(0.0), default=0.5,
                   help="seconds below which times count as this value in the ratio (default 0.5)")
    add_history_options(c, "the check")
    c.add_argument("--override", action="append", default=[], metavar="OPTION=VALUE",
                   help="change a solver option of every case, e.g. tol=1e-3 (to see that the check "
                        "catches a change; value parsed as JSON; repeatable; default: none)")
    c.set_defaults(func=run_check)
    p.set_defaults(func=lambda args: (p.print_help(), 2)[1])


def _bad(msg: str) -> int:
    print(f"decomp baseline: error: {msg}", file=sys.stderr)
    return 2


def run_record(args) -> int:
    from .. import baseline
    from ..errors import SolverUnavailableError

    if args.list:
        for name, (desc, _) in sorted(baseline.SUITES.items()):
            print(f"{name}: {desc}")
            for case in baseline.suite_cases(name):
                print(f"    {case.id}")
        return 0
    if not args.out:
        return _bad("record needs --out DIR")
    from ..baseline.record import check_out

    check_out(args.out, args.force)                # before any solve: exit 2, the folder named

    def progress(cid, rec):
        cert = rec["certificate"] or {}
        print(f"  {cid:<34} {rec['termination']:<10} {rec['solution_status']:<9} "
              f"objective {rec['objective']!s:<22} gap {cert.get('gap')!s:<24} "
              f"iter {rec['iterations']!s:<5} {rec['wall_seconds']:.3f} s", flush=True)

    from ..errors import ConfigError

    try:
        cases = baseline.suite_cases(args.suite)
    except ConfigError as exc:
        raise ConfigError(f"--suite: {exc}") from None
    print(f"recording suite {args.suite}: {len(cases)} cases -> {args.out}", flush=True)
    try:
        summary = baseline.record(args.out, args.suite, cases=cases, repeat=args.repeat,
                                  warmup=not args.no_warmup, overwrite=args.force,
                                  progress=progress)
    except SolverUnavailableError as exc:
        print(f"decomp baseline record: {exc}", file=sys.stderr)
        return 1
    env = summary.environment
    print(f"wrote {summary.path} ({len(summary.cases)} cases); environment: Python {env['python']}, "
          f"numpy {env['numpy']}, scipy {env['scipy']}, pyomo {env['pyomo']}, HiGHS {env['highs_library']}, "
          f"Ipopt {env['ipopt_library']}, {env['cpu_model']} x {env['cpu_count_logical']}")
    bad = [r["case"] for r in summary.cases if not (r["termination"] == "optimal"
                                                   and r["solution_status"] == "optimal")]
    if bad:
        print(f"note: {len(bad)} case(s) did not reach a certified optimum and were recorded with their "
              f"status: {', '.join(bad)}")
    return 0


def _parse_override(items) -> dict:
    out = {}
    for item in items:
        if "=" not in item:
            raise ValueError(f"--override expects OPTION=VALUE, got {item!r}")
        k, v = item.split("=", 1)
        try:
            out[k.strip()] = json.loads(v)
        except json.JSONDecodeError:
            out[k.strip()] = v
    return out


def run_check(args) -> int:
    from .. import baseline
    from ..baseline.check import load_text
    from ..errors import InstanceError

    from ..benchsuite.compare import parse_growth, parse_ratio

    from ..errors import ConfigError
    from ..paths import output_folder

    try:
        override = _parse_override(args.override)
    except ValueError as exc:
        return _bad(str(exc))
    old_ratio = getattr(args, "time_ratio", None)
    option, value = ("--time-ratio", old_ratio) if old_ratio is not None else ("--max-time-growth",
                                                                              args.max_time_growth)
    try:
        time_ratio = parse_ratio(old_ratio) if old_ratio is not None else 1.0 + parse_growth(args.max_time_growth)
        if time_ratio < 1:
            raise ConfigError(f"a ratio new/old of at least 1 is needed, got {time_ratio:g}")
    except ConfigError as exc:
        raise ConfigError(f"{option} {value!r}: {exc}") from None
    if args.out is not None:
        output_folder(args.out, "--out")           # before any solve: exit 2, the folder named
    if not args.no_history:
        from .bench import check_history

        check_history(args)                        # before any solve: exit 2, the store's path named
    th = baseline.Thresholds(
        objective_rtol=args.rtol_objective, bid_rtol=args.rtol_bid, bid_atol=args.atol_bid,
        allocation_rtol=args.rtol_allocation, gap_floor=args.gap_floor, violation_floor=args.violation_floor,
        kkt_floor=args.kkt_floor, certificate_factor=args.certificate_factor, time_ratio=time_ratio,
        time_floor=args.time_floor)

    def progress(rep):
        m = rep.metrics
        load = m.get("machine_load")
        print(f"  {rep.case:<34} {rep.verdict:<17} objective rel {m.get('objective_rel_change')!s:<22} "
              f"bid max {m.get('bid_max_abs_change')!s:<22} time ratio {m.get('time_ratio', float('nan')):.2f}"
              + (f" ({load_text(load)})" if load else ""), flush=True)

    from ..benchsuite import history

    load_start, t0 = history.load_average(), time.perf_counter()
    try:
        report = baseline.check(args.baseline, thresholds=th, options_override=override or None,
                                repeat=args.repeat, warmup=not args.no_warmup,
                                confirm_runs=args.confirm_runs, only=args.cases,
                                progress=progress)
    except ConfigError as exc:          # an override the replay allow-list refuses, an unknown --case
        if isinstance(exc, InstanceError):
            raise
        raise ConfigError(f"{'--override' if 'option' in str(exc) else '--case'}: {exc}") from None
    wall = time.perf_counter() - t0
    print()
    print(report.to_markdown())
    if args.out:
        jpath, mpath = baseline.write_report(report, args.out)
        print(f"wrote {jpath} and {mpath}")
    if not args.no_history:
        _add_to_history(args, report, load_start, wall)
    if not report.cases:
        print("decomp baseline check: no case was compared; this is not a pass", file=sys.stderr)
        return 1
    return 1 if report.regression else 0


def _add_to_history(args, report, load_start, wall) -> None:
    """Add the check to the store; a store that cannot be written is said, the check's verdict stands."""
    import sqlite3

    from ..benchsuite import history
    from ..errors import DecompError

    command = f"decomp baseline check {args.baseline}" + "".join(f" --case {c}" for c in args.cases or ())
    try:
        with history.open_store(args.history) as store:
            run_id = store.add_check(report, command=command, selection=args.cases, load_start=load_start,
                                     load_end=history.load_average(), wall_seconds=wall)
            print(f"added the check as run #{run_id} to the history {store.path}")
    except (DecompError, OSError, sqlite3.Error) as exc:
        print(f"decomp baseline check: warning: the check was not added to the history: {exc}", file=sys.stderr)
