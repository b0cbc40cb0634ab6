"""``decomp bench``: run the benchmark suite; ``decomp bench compare``: compare two runs.

    decomp bench [--suite quick|full|micro] [--out DIR] [-k EXPR] [--revenue-paths N] [--list]
    decomp bench compare OLD NEW [--max-growth 10%] [--stat min|median] [--out FILE.json]
    decomp bench report RUN [--out DIR]
    decomp bench history [--compare OLD NEW] [--html OUT.html] [--add RUN]

The run writes into DIR: benchmark.json (pytest-benchmark, with machine
info), pytest.log, report.md and PNG plots, and adds its cases with the
environment to the history store (``--history FILE``; default
$DECOMP_HISTORY, else bench/results/history.sqlite; ``--no-history`` skips
it). ``history`` lists the store's runs, compares two by the rules of
``compare``, and ``--html`` draws them on one static page. Exit codes: 0
every case passed its accuracy checks, 1 a case failed (or, for compare, a
regression was found), 2 bad input (a missing or corrupt benchmark file, a
bad option).
"""

from __future__ import annotations

import pathlib
import sys

from ..errors import DecompError
from . import _progress
from ._options import count, number
from ._vocabulary import old_name


def register(sub):
    p = sub.add_parser("bench", help="run the benchmark suite (time against accuracy), or compare two runs",
                       description=__doc__, formatter_class=__import__("argparse").RawDescriptionHelpFormatter)
    p.add_argument("--suite", choices=("micro", "quick", "full"), default="quick",
                   help="quick: to 100,000 products in <= 5 min; full: to 1,000,000 products; micro: a tiny smoke run (default: %(default)s)")
    p.add_argument("--out", default=None, metavar="DIR",
                   help="output folder, relative to the current folder (default bench/results/SUITE)")
    p.add_argument("-k", dest="k", default=None, metavar="EXPR",
                   help="pytest -k expression selecting cases (default: all; see --list for the ids)")
    p.add_argument("--list", action="store_true", help="print the case ids of the suite (with -k: the selected "
                                                       "ones) and exit without running them")
    p.add_argument("--no-progress", action="store_true", help=_progress.HELP)
    add_history_options(p, "the run")
    p.add_argument("--revenue-paths", type=count, default=0, metavar="N",
                   help="after timing, price each case's bid prices on N booking sample paths against the "
                        "reference's (same paths); adds a revenue-loss column (default 0: off)")
    p.set_defaults(func=run)
    ss = p.add_subparsers(dest="bench_command", metavar="{compare,report,history}")
    c = ss.add_parser("compare", help="compare two runs; exit 1 on a regression",
                      description="Per case time ratio and accuracy change between two 'decomp bench' "
                                  "outputs (folders or their benchmark.json); flags cases slower or "
                                  "less accurate than the threshold; exit 1 on a regression, 2 on a "
                                  "missing or corrupt file.")
    c.add_argument("old", metavar="OLD", help="the earlier run: folder or benchmark.json")
    c.add_argument("new", metavar="NEW", help="the later run: folder or benchmark.json")
    c.add_argument("--max-growth", default="10%",
                   help="allowed growth of time and errors new/old: a growth such as 10%% or a ratio such as "
                        "1.1x, as baseline check --max-time-growth (default: %(default)s)")
    old_name(c, "--threshold", new="--max-growth", dest="threshold", metavar="X",
             note="; a bare number is a growth fraction there (0.1 = 10%%, 10 = 1000%%)")
    c.add_argument("--stat", choices=("min", "median", "mean"), default="min",
                   help="which statistic of the rounds to compare (default min)")
    c.add_argument("--accuracy-floor", type=number(0.0), default=1e-9,
                   help="errors and gaps below this are round-off, never a regression (default 1e-9)")
    c.add_argument("--out", default=None, metavar="FILE.json",
                   help="also write the comparison as JSON (default: not written)")
    old_name(c, "--json", new="--out", dest="out", metavar="FILE")
    c.set_defaults(func=run_compare)
    r = ss.add_parser("report", help="re-write report.md and plots from a run's benchmark.json")
    r.add_argument("run", metavar="RUN", help="folder or benchmark.json")
    r.add_argument("--out", default=None, metavar="DIR", help="output folder (default: the run's folder)")
    r.set_defaults(func=run_report)
    h = ss.add_parser("history", help="list the runs of the history store, compare two, or draw them as HTML",
                      description="The history store holds every 'decomp bench' run and 'decomp baseline "
                                  "check' with its environment (schema: decomp.benchsuite.history). Without "
                                  "options: one line per run. --compare OLD NEW: the two runs case by case by "
                                  "the rules of 'bench compare' (exit 1 on a regression). --html OUT: one "
                                  "static page of time and accuracy across the runs, by demand family and "
                                  "case, version changes marked, regressions flagged (opens from the file).")
    h.add_argument("--store", default=None, metavar="FILE",
                   help="the history file (default: $DECOMP_HISTORY, else bench/results/history.sqlite)")
    h.add_argument("--add", action="append", default=[], metavar="RUN",
                   help="first add a 'decomp bench' output made without the store (folder or benchmark.json; "
                        "repeatable; default: none)")
    h.add_argument("--compare", nargs=2, metavar=("OLD", "NEW"),
                   help="compare two runs, by id or counted from the newest (-1, -2); default: list the runs")
    h.add_argument("--html", metavar="OUT.html", help="write the history page (default: not written)")
    h.add_argument("--max-growth", default="10%",
                   help="allowed growth of time and errors for --compare and the page's flags, as in "
                        "bench compare (default: %(default)s)")
    h.add_argument("--stat", choices=("min", "median", "mean"), default="min",
                   help="which statistic of the rounds to compare and draw (default min)")
    h.add_argument("--accuracy-floor", type=number(0.0), default=1e-9,
                   help="errors and gaps below this are round-off, never a regression (default 1e-9)")
    h.add_argument("--json", action="store_true", help="print the runs or the comparison as JSON (default: text)")
    h.set_defaults(func=run_history)


def add_history_options(parser, what: str) -> None:
    """``--history FILE`` and ``--no-history``, as ``decomp bench`` and ``decomp baseline check`` take them."""
    parser.add_argument("--history", default=None, metavar="FILE",
                        help=f"history store {what} adds its cases to (default: $DECOMP_HISTORY, else "
                             f"bench/results/history.sqlite under the current folder)")
    parser.add_argument("--no-history", action="store_true", help=f"do not add {what} to the history store")


def check_history(args) -> None:
    """The history store a run will add itself to, checked as a file to write before any work
    (:func:`decomp.paths.output_file`: exit 2 naming it); nothing to check with ``--no-history``."""
    import os

    from ..benchsuite.history import ENV_VAR, default_path
    from ..paths import output_file

    if getattr(args, "no_history", False):
        return
    if args.history is not None:
        output_file(args.history, "--history")
    else:
        output_file(default_path(), f"${ENV_VAR}" if os.environ.get(ENV_VAR) else "the history store")


def _growth(text, option: str, parse) -> float:
    """Allowed growth read by ``parse``; a ConfigError naming ``option`` and its value otherwise."""
    from ..errors import ConfigError

    try:
        return parse(text)
    except ConfigError as exc:
        raise ConfigError(f"{option} {text!r}: {exc}") from None


def run_suite(suite: str = "quick", out=None, k=None, progress: bool = True, revenue_paths: int = 0,
              history=None, record_history: bool = True) -> int:
    """Run a suite, print where its outputs went and add it to the history store; returns the exit code."""
    from ..benchsuite.runner import run_suite as _run

    if revenue_paths is None or revenue_paths < 0:
        print(f"decomp bench: error: --revenue-paths must be 0 (off) or positive, got {revenue_paths}",
              file=sys.stderr)
        return 2
    from ..paths import output_folder

    out = output_folder(out or f"bench/results/{suite}", "--out")   # before the suite runs: exit 2, path named
    command = (f"decomp bench --suite {suite} --out {out}" + (f" -k {k!r}" if k else "")
               + (f" --revenue-paths {revenue_paths}" if revenue_paths else ""))
    res = _run(suite, out, k=k, progress=progress, command=command, revenue_paths=revenue_paths)
    if res.returncode == 5:   # pytest: no tests collected
        print("decomp bench: no case matched (suite, -k expression, or no method available); "
              f"see {out / 'pytest.log'}", file=sys.stderr)
        return 2
    if res.json_path is None:
        print(f"decomp bench: pytest did not produce benchmark results (exit code {res.returncode}); "
              f"see {out / 'pytest.log'}", file=sys.stderr)
        return 1
    print(f"{res.n_cases} cases in {res.wall_seconds:.1f} s wall; {res.n_failed} failed")
    for f in res.files:
        print(f"  wrote {f}")
    if record_history:
        _add_to_history(history, res)
    if res.returncode == 0:
        return 0
    print(f"decomp bench: some cases failed (pytest exit code {res.returncode}); see {out / 'report.md'} "
          f"and {out / 'pytest.log'}", file=sys.stderr)
    return 1


def _add_to_history(path, res) -> None:
    """Add a finished run to the store; a store that cannot be written is said, the run's outputs stand."""
    import sqlite3

    from ..baseline import environment
    from ..benchsuite import history
    from ..benchsuite.results import load_run

    try:
        with history.open_store(path) as store:
            run_id = store.add_bench_run(load_run(res.json_path), exit_code=res.returncode,
                                         environment=environment())
            print(f"  added run #{run_id} to the history {store.path}")
    except (DecompError, OSError, sqlite3.Error) as exc:
        print(f"decomp bench: warning: the run was not added to the history: {exc}", file=sys.stderr)


def run(args) -> int:
    if args.list:
        from ..benchsuite.runner import list_cases

        ids = list_cases(args.suite, args.k)
        for case in ids:
            print(case)
        if not ids:
            print(f"decomp bench: no case of suite {args.suite} matches -k {args.k!r}", file=sys.stderr)
            return 2
        return 0
    check_history(args)
    return run_suite(args.suite, args.out, k=args.k, progress=_progress.wanted(args),
                     revenue_paths=args.revenue_paths, history=args.history, record_history=not args.no_history)


def _json_readable(*paths) -> None:
    """Each run's benchmark.json parses (an InstanceError naming it otherwise). ``benchsuite.results``
    reads it with ``json.loads``, which a 5,000-digit integer or deep nesting turns into a traceback;
    :mod:`decomp.jsonfile` says which file instead. (Reads the file twice; benchmark files are small.)"""
    from .. import jsonfile
    from ..benchsuite.results import resolve_path

    for path in paths:
        jsonfile.read(resolve_path(path))


def run_compare(args) -> int:
    from .. import atomic
    from ..benchsuite.compare import compare_runs, parse_growth, parse_threshold, render

    from ..paths import output_file

    if args.out is not None:
        output_file(args.out, "--out")             # before the comparison: exit 2, the path named
    old_threshold = getattr(args, "threshold", None)
    growth = _growth(old_threshold, "--threshold", parse_threshold) if old_threshold is not None \
        else _growth(args.max_growth, "--max-growth", parse_growth)
    try:
        _json_readable(args.old, args.new)
        cmp = compare_runs(args.old, args.new, threshold=growth, stat=args.stat,
                           accuracy_floor=args.accuracy_floor)
    except DecompError as exc:
        print(f"decomp bench compare: error: {exc}", file=sys.stderr)
        return 2
    print(render(cmp))
    if args.out:
        atomic.write_json(args.out, cmp.to_dict())
    return 1 if cmp.regressions else 0


def run_report(args) -> int:
    from .. import atomic
    from ..benchsuite import plots, report
    from ..benchsuite.results import load_run

    from ..paths import output_folder

    if args.out is not None:
        output_folder(args.out, "--out")           # before the plots: exit 2, the path named
    try:
        _json_readable(args.run)
        run_ = load_run(args.run)
    except DecompError as exc:
        print(f"decomp bench report: error: {exc}", file=sys.stderr)
        return 2
    out = pathlib.Path(args.out) if args.out else run_.path.parent
    made = plots.make_plots(run_, out)
    path = out / "report.md"
    atomic.write_text(path, report.render(run_, plots=[p.name for p in made]))
    for f in (*made, path):
        print(f"wrote {f}")
    return 0


def run_history(args) -> int:
    import dataclasses
    import json

    from ..benchsuite import history
    from ..benchsuite import html as hhtml
    from ..benchsuite.compare import Comparison, compare_cases, parse_growth, render
    from ..benchsuite.results import load_run

    from ..paths import output_file

    growth = _growth(args.max_growth, "--max-growth", parse_growth)
    if args.html is not None:
        output_file(args.html, "--html")           # before the store is read: exit 2, the path named
    if args.add and args.store is not None:
        output_file(args.store, "--store")         # --add writes into the store
    _json_readable(*args.add)
    with history.open_store(args.store, create=bool(args.add)) as store:
        for run_path in args.add:
            run_id = store.add_bench_run(load_run(run_path))
            print(f"added {run_path} as run #{run_id}")
        if args.compare:
            old, new = (store.run(r) for r in args.compare)
            cases, only_new = compare_cases({c: p.row for c, p in store.cases(old.run_id).items()},
                                            {c: p.row for c, p in store.cases(new.run_id).items()},
                                            growth, args.stat, args.accuracy_floor)
            cmp = Comparison(_run_title(old), _run_title(new), growth, args.stat, cases, only_new)
            print(json.dumps(cmp.to_dict(), indent=2) if args.json else render(cmp))
        elif not args.html:
            runs = store.runs()
            print(json.dumps([dataclasses.asdict(r) for r in runs], indent=2) if args.json else _runs_table(runs))
        if args.html:
            hhtml.write(args.html, store.path, store.runs(), store.points(), threshold=growth, stat=args.stat,
                        accuracy_floor=args.accuracy_floor)
            print(f"wrote {args.html}")
    if args.compare:
        return 1 if cmp.regressions else 0
    return 0


def _run_title(r) -> str:
    return f"run #{r.run_id} ({r.kind}, {r.suite or '-'}, {r.started_utc})"


def _runs_table(runs) -> str:
    """One line per run: when, what, how many cases failed, the versions it ran with."""
    if not runs:
        return "the history store holds no run yet"
    head = ("run", "started (UTC)", "kind", "suite", "cases", "failed", "decomp", "commit", "Python", "numpy",
            "scipy", "Pyomo", "HiGHS", "Ipopt", "load")
    rows = [head]
    for r in runs:
        e = r.env
        commit = e.get("git_commit")
        rows.append((f"#{r.run_id}", r.started_utc.replace("T", " ")[:19], r.kind,
                     (r.suite or "-") + (f" -k {r.selection}" if r.selection else ""), str(r.n_cases),
                     str(r.n_failed), *(str(e.get(k) or "-") for k in ("decomp",)),
                     "-" if not commit else commit[:8] + ("+dirty" if commit.endswith("+dirty") else ""),
                     *(str(e.get(k) or "-") for k in ("python", "numpy", "scipy", "pyomo", "highs", "ipopt")),
                     "-" if e.get("load_start") is None else f"{e['load_start']:.2f}"))
    widths = [max(len(row[i]) for row in rows) for i in range(len(head))]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows)
