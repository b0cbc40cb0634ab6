"""``decomp solve``: solve one instance with one model and method, write the result.

INSTANCE is an instance folder (CSV or Parquet), or the name of a ladder rung
(p100, p1k, ...) when no such folder exists. The result JSON holds the
status, model, method, objective, bound, certified gap, bid prices by leg id,
iterations, seconds by phase, solver name and version, the certificate and
the versions of Python, numpy, scipy, Pyomo, highspy, cyipopt and the HiGHS and
Ipopt libraries (``versions``);
``--allocation`` writes the allocation per product (CSV or Parquet by suffix).
Exit code 0 when the answer is certified optimal, 1 when the solve stopped
short of that (limit, numerical trouble, uncertified), 2 on bad input.
"""

from __future__ import annotations

import argparse
import pathlib
import sys


def register(sub):
    p = sub.add_parser("solve", help="solve an instance (dlp, pnlp or pwl) with a named method",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder, or a ladder rung name")
    p.add_argument("--model", required=True, choices=("dlp", "pnlp", "pwl"), help="the model")
    p.add_argument("--method", required=True, metavar="NAME",
                   help="highs, pyomo-highs (dlp, pwl); ipopt, pyomo-ipopt, lagrangian (pnlp)")
    p.add_argument("--tol", type=float, metavar="T", help="solver tolerance (default: 1e-9)")
    p.add_argument("--time-limit", type=float, metavar="S", help="wall-clock limit of the solve in seconds")
    p.add_argument("--iteration-limit", type=int, metavar="N", help="iteration limit")
    p.add_argument("--segments", type=int, metavar="K", help="segments per product of the pwl model (default: 16)")
    p.add_argument("--warm-start", metavar="RESULT.json", help="start from the bid prices of an earlier result")
    p.add_argument("--allocation", metavar="FILE", help="write the allocation per product (.csv or .parquet)")
    p.add_argument("--out", required=True, metavar="RESULT.json", help="result file (written atomically)")
    p.set_defaults(func=run)


def _load(spec):
    from ..errors import InstanceError
    from ..io import read_instance

    path = pathlib.Path(spec)
    if path.exists():
        return read_instance(path)
    from .. import ladder

    if spec in ladder.RUNGS:
        return ladder.load_rung(spec)
    raise InstanceError(f"no instance folder here (and not a ladder rung: {', '.join(ladder.RUNGS)})", file=spec)


def write_allocation(result, path) -> None:
    """Allocation per product as CSV (``product,allocation``) or Parquet, atomically."""
    import pyarrow as pa
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    from ..atomic import atomic_path
    from ..errors import InstanceError

    path = pathlib.Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".parquet"):
        raise InstanceError("allocation file must end in .csv or .parquet", file=path)
    table = pa.table({"product": pa.array(result.product_ids.astype(str), type=pa.string()),
                      "allocation": pa.array(result.allocation, type=pa.float64())})
    with atomic_path(path) as tmp:
        if suffix == ".csv":
            pcsv.write_csv(table, tmp)
        else:
            pq.write_table(table, tmp)


def _num(v, fmt):
    return "n/a" if v is None else format(v, fmt)


def summary(result, instance_name) -> str:
    lines = [
        f"{instance_name}: {result.model} by {result.method} ({result.solver}, {result.solver_version})",
        f"  status      {result.termination.value} (solver: {result.raw_status}); "
        f"solution {result.solution_status.value}",
        f"  objective   {_num(result.objective, ',.6f')}    bound {_num(result.bound, ',.6f')}    "
        f"gap {_num(result.gap, '.2e')}",
    ]
    c = result.certificate
    if c is not None:
        lines.append(f"  certificate capacity violation {c.max_violation:.2e} seats ({c.max_violation_rel:.2e} rel), "
                     f"KKT residual {_num(c.kkt_residual, '.2e')}, smallest bid price {c.min_bid_price:.3g}")
    secs = result.seconds
    lines.append(f"  time        {sum(secs.values()):.2f} s  (" +
                 ", ".join(f"{k} {v:.2f}" for k, v in secs.items()) + f"); iterations {result.iterations}")
    top = sorted(result.bid_prices.items(), key=lambda kv: -kv[1])[:10]
    if top:
        lines.append("  highest bid prices:")
        width = max(len(str(k)) for k, _ in top)
        lines.extend(f"    {str(k):<{width}}  {v:12,.4f}" for k, v in top)
    return "\n".join(lines)


def run(args) -> int:
    from .. import solve as _solve
    from ..atomic import write_json
    from ..baseline import library_versions
    from ..errors import SolverUnavailableError
    from ..options import SolverOptions
    from ..result import read_bid_prices

    kw = {}
    if args.tol is not None:
        kw["tol"] = args.tol
    if args.time_limit is not None:
        kw["time_limit"] = args.time_limit
    if args.iteration_limit is not None:
        kw["iteration_limit"] = args.iteration_limit
    if args.segments is not None:
        kw["segments"] = args.segments
    options = SolverOptions(verbose=bool(getattr(args, "verbose", False)), **kw)
    if args.allocation and pathlib.Path(args.allocation).suffix.lower() not in (".csv", ".parquet"):
        print(f"decomp solve: error: {args.allocation}: allocation file must end in .csv or .parquet",
              file=sys.stderr)
        return 2
    warm = read_bid_prices(args.warm_start) if args.warm_start else None
    instance = _load(args.instance)
    if warm is not None:        # values beyond [0, largest fare on the leg] (1e308, -5) cannot be optimal
        from ..warmstart import bounded_warm_start

        warm, _ = bounded_warm_start(instance, warm)
    try:
        result = _solve(instance, model=args.model, method=args.method, options=options, warm_start=warm)
    except SolverUnavailableError as exc:
        print(f"decomp solve: error: {exc}", file=sys.stderr)
        return 1
    out = result.to_json_dict()
    out = {"instance": instance.name, "instance_path": str(args.instance), **out,
           "versions": library_versions()}
    try:
        write_json(args.out, out)
        if args.allocation and result.allocation is not None:
            write_allocation(result, args.allocation)
    except OSError as exc:      # a full disk or a read-only folder: say so, no traceback (atomic: nothing half-written)
        print(f"decomp solve: error: cannot write {exc.filename or args.out}: {exc.strerror or exc} "
              f"[Errno {exc.errno}]", file=sys.stderr)
        return 1
    print(summary(result, instance.name))
    wrote_alloc = bool(args.allocation) and result.allocation is not None
    print(f"  wrote {args.out}" + (f" and {args.allocation}" if wrote_alloc else ""))
    if args.allocation and not wrote_alloc:
        print(f"decomp solve: {args.allocation} not written: the solve returned no allocation "
              f"({result.termination.value})", file=sys.stderr)
    return 0 if result.ok else 1
