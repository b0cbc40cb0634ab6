"""``decomp bench``: run the benchmark suite; ``decomp bench compare``: compare two runs.

    decomp bench [--suite quick|full|micro] [--out DIR] [-k EXPR] [--revenue-paths N] [--list]
    decomp bench compare OLD NEW [--threshold 10%] [--stat min|median] [--json FILE]
    decomp bench report RUN [--out DIR]

The run writes into DIR: benchmark.json (pytest-benchmark, with machine
info), pytest.log, report.md and PNG plots. Exit codes: 0 every case passed
its accuracy checks, 1 a case failed (or, for compare, a regression was
found), 2 bad input (a missing or corrupt benchmark file, a bad option).
"""

from __future__ import annotations

import pathlib
import sys

from ..errors import DecompError
from ._options import count, number


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
    p.add_argument("--no-progress", action="store_true", help="no progress bar (default: shown)")
    p.add_argument("--revenue-paths", type=count, default=0, metavar="N",
                   help="after timing, price each case's bid prices on N booking sample paths against the "
                        "reference's (same paths); adds a revenue-loss column (default 0: off)")
    p.set_defaults(func=run)
    ss = p.add_subparsers(dest="bench_command", metavar="{compare,report}")
    c = ss.add_parser("compare", help="compare two runs; exit 1 on a regression",
                      description="Per case time ratio and accuracy change between two 'decomp bench' "
                                  "outputs (folders or their benchmark.json); flags cases slower or "
                                  "less accurate than the threshold; exit 1 on a regression, 2 on a "
                                  "missing or corrupt file.")
    c.add_argument("old", metavar="OLD", help="the earlier run: folder or benchmark.json")
    c.add_argument("new", metavar="NEW", help="the later run: folder or benchmark.json")
    c.add_argument("--threshold", default="10%",
                   help="allowed growth of time and errors: 10%%, 0.1, or a ratio new/old such as 1.1x "
                        "(the form of baseline check --time-ratio) (default: %(default)s)")
    c.add_argument("--stat", choices=("min", "median", "mean"), default="min",
                   help="which statistic of the rounds to compare (default min)")
    c.add_argument("--accuracy-floor", type=number(0.0), default=1e-9,
                   help="errors and gaps below this are round-off, never a regression (default 1e-9)")
    c.add_argument("--json", default=None, metavar="FILE",
                   help="also write the comparison as JSON (default: not written)")
    c.set_defaults(func=run_compare)
    r = ss.add_parser("report", help="re-write report.md and plots from a run's benchmark.json")
    r.add_argument("run", metavar="RUN", help="folder or benchmark.json")
    r.add_argument("--out", default=None, metavar="DIR", help="output folder (default: the run's folder)")
    r.set_defaults(func=run_report)


def run_suite(suite: str = "quick", out=None, k=None, progress: bool = True, revenue_paths: int = 0) -> int:
    """Run a suite and print where its outputs went; returns the exit code."""
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
    if res.returncode == 0:
        return 0
    print(f"decomp bench: some cases failed (pytest exit code {res.returncode}); see {out / 'report.md'} "
          f"and {out / 'pytest.log'}", file=sys.stderr)
    return 1


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
    return run_suite(args.suite, args.out, k=args.k, progress=not args.no_progress,
                     revenue_paths=args.revenue_paths)


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
    from ..benchsuite.compare import compare_runs, parse_threshold, render

    from ..errors import ConfigError
    from ..paths import output_file

    if args.json is not None:
        output_file(args.json, "--json")           # before the comparison: exit 2, the path named
    try:
        threshold = parse_threshold(args.threshold)
    except ConfigError as exc:
        raise ConfigError(f"--threshold {args.threshold!r}: {exc}") from None
    try:
        _json_readable(args.old, args.new)
        cmp = compare_runs(args.old, args.new, threshold=threshold, stat=args.stat,
                           accuracy_floor=args.accuracy_floor)
    except DecompError as exc:
        print(f"decomp bench compare: error: {exc}", file=sys.stderr)
        return 2
    print(render(cmp))
    if args.json:
        atomic.write_json(args.json, cmp.to_dict())
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
