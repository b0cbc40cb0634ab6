"""``decomp demo``: the main job on the embedded default instance ladder.

For every rung of the default ladder: load (regenerating large rungs from the
manifest's seed), validate, solve the PNLP by Lagrangian decomposition and the
DLP by HiGHS, and print what each answer is worth; then run the quick
benchmark suite, which compares every method that fits on the same rungs.
"""

from __future__ import annotations

import pathlib
import time


def register(sub):
    p = sub.add_parser("demo", help="run the main job on the default instance ladder, then the quick benchmark",
                       description=__doc__)
    p.add_argument("--rungs", nargs="+", default=["p100", "p1k", "p10k", "p100k"],
                   help="ladder rungs to solve (default: %(default)s)")
    p.add_argument("--no-bench", action="store_true", help="skip the quick benchmark suite (default: run it)")
    p.add_argument("--out", default="bench/results/quick",
                   help="folder for the benchmark output, relative to the current folder (default: %(default)s)")
    p.set_defaults(func=run)


def _top(result, k=3):
    pairs = sorted(result.bid_prices.items(), key=lambda kv: -kv[1])[:k]
    return ", ".join(f"{leg} {bp:,.2f}" for leg, bp in pairs)


def run(args) -> int:
    from .. import ladder, solve
    from ..options import SolverOptions

    failed = 0
    print(f"{'rung':>6} {'legs':>6} {'products':>9}  {'model':<5} {'method':<11} {'status':<16}"
          f" {'objective':>14} {'gap':>9} {'solve s':>8}  highest bid prices")
    for name in args.rungs:
        t0 = time.perf_counter()
        inst = ladder.load_rung(name)
        load_s = time.perf_counter() - t0
        for model, method in (("pnlp", "lagrangian"), ("dlp", "highs")):
            res = solve(inst, model=model, method=method, options=SolverOptions(tol=1e-9))
            failed += not res.ok
            gap = "-" if res.gap is None else f"{res.gap:.1e}"
            print(f"{name:>6} {inst.n_legs:>6} {inst.n_products:>9}  {model:<5} {method:<11} "
                  f"{res.termination.value:<16} {res.objective:>14,.1f} {gap:>9} "
                  f"{res.seconds.get('solve', float('nan')):>8.3f}  {_top(res)}")
        print(f"{'':>6} (loaded and validated in {load_s:.2f} s)")
    if failed:
        print(f"demo: {failed} solve(s) did not reach a certified optimum")
    if args.no_bench:
        return 1 if failed else 0
    from . import bench as bench_cmd

    print(f"\nRunning the quick benchmark suite into {pathlib.Path(args.out).absolute()} ...")
    from . import _progress

    rc = bench_cmd.run_suite(suite="quick", out=args.out, progress=_progress.wanted())
    return rc or (1 if failed else 0)
