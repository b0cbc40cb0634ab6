"""``decomp tables``: capacity- and time-dependent bid-price tables from an instance and a static result.

The booking horizon is cut into PERIODS periods and each product's forecast
spread over them with the simulation's arrival curves (low fares early, high
fares late; see ``decomp.dynamic.demand``). The static bid prices come from a
result file of ``decomp solve`` (``--static RESULT.json``) or from a solve run
here (``--model``/``--method``; by default the PNLP by its default method,
lagrangian). ``--by decomposition`` (default) solves one
dynamic program per leg with the other legs' bid prices taken off each fare;
``--by relaxation`` minimizes the Lagrangian bound of the network program
(needs at most one request per period in the network, so as many periods as
requests; too few periods are refused with the fewest that work). Writes one
row per leg, period and seats remaining: ``leg, period, seats_remaining,
bid_price``, as Parquet or CSV by the suffix of ``--out`` (another suffix is
refused before any work). ``-v`` logs each step, and the relaxation's
progress every 10 iterations.
Exit codes: 0 written, 1 the static solve or the search did not finish
cleanly (the tables are still written, with the status), 2 bad input.
"""

from __future__ import annotations

import argparse
import logging
import sys

from ._options import positive

log = logging.getLogger(__name__)


def register(sub):
    p = sub.add_parser("tables", help="bid-price tables by leg, period and seats left (dynamic programs by leg)",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder, or a ladder rung name")
    src = p.add_mutually_exclusive_group()
    src.add_argument("--static", metavar="RESULT.json", help="static bid prices: a result file of 'decomp solve' (default: none, solve --model here)")
    src.add_argument("--model", choices=("dlp", "pnlp"), default="pnlp",
                     help="solve this static model here (default: %(default)s)")
    p.add_argument("--method", default=None, metavar="NAME", help="method of --model (default: highs for dlp, "
                                                                   "lagrangian for pnlp)")
    p.add_argument("--periods", type=positive, default=200, help="booking periods (default: %(default)s)")
    p.add_argument("--by", choices=("decomposition", "relaxation"), default="decomposition",
                   help="decomposition by leg from the static bid prices, or the Lagrangian relaxation "
                        "(default: %(default)s)")
    p.add_argument("--threads", type=positive, default=None, help="threads over legs (default: the CPUs available)")
    p.add_argument("--out", required=True, metavar="TABLES.parquet",
                   help="output file, .parquet or .csv (written atomically; required)")
    p.set_defaults(func=run)


def _static_bid_prices(args, instance):
    import numpy as np

    from ..errors import InstanceError
    from ..result import read_bid_prices

    if args.static:
        bp = read_bid_prices(args.static)
        missing = [l for l in instance.leg_ids.tolist() if str(l) not in bp]
        if missing:
            raise InstanceError(f"no bid price for {len(missing)} leg(s) of {instance.name}, e.g. {missing[:3]}",
                                file=args.static, column="bid_prices")
        pi = np.array([bp[str(l)] for l in instance.leg_ids.tolist()])
        if not np.all(np.isfinite(pi)) or np.any(pi < 0):
            raise InstanceError("bid prices must be finite and >= 0", file=args.static, column="bid_prices")
        return pi, f"{args.static}", True
    from .. import solve
    from ._options import method_or_default

    method = method_or_default(args.method, args.model)
    log.info("solving the static %s by %s on %s", args.model, method, instance.name)
    res = solve(instance, model=args.model, method=method)
    if res.bid_price_array is None:
        raise RuntimeError(f"{args.model}:{method} returned no bid prices ({res.termination.value}: {res.message})")
    if not res.ok:
        print(f"decomp tables: warning: static solve ended {res.termination.value}/{res.solution_status.value} "
              f"({res.message}); using its bid prices", file=sys.stderr)
    return res.bid_price_array, f"{args.model}:{method}", res.ok


def run(args) -> int:
    import time

    from ..dynamic.decomposition import decompose
    from ..dynamic.demand import DemandError, fewest_periods, from_arrival_curves
    from ..dynamic.relaxation import CONVERGED, STATIONARY, relax
    from ..dynamic.tables import write
    from ..tables import check_table_path
    from .solve import _load

    from ._options import check_method, method_or_default

    check_table_path(args.out, "--out")     # .parquet or .csv, a writable path: refused before any work, named
    if args.static is None:
        check_method(method_or_default(args.method, args.model), args.model)
    elif args.method is not None:
        from ..errors import ConfigError

        raise ConfigError("--method chooses the solve of --model; with --static nothing is solved here: leave it out")
    instance = _load(args.instance)
    t0 = time.perf_counter()
    demand = from_arrival_curves(instance, args.periods)
    t_demand = time.perf_counter() - t0
    log.info("spread %s's forecast over %d periods (%.2f s)", instance.name, args.periods, t_demand)
    if args.by == "relaxation" and not demand.at_most_one_request():
        # refused before the static solve, with the number of periods that would do
        log.info("too many requests per period for the relaxation; searching the fewest periods that do")
        try:
            demand.require_at_most_one_request("--by relaxation", fewest_periods(instance, args.periods))
        except DemandError as exc:
            print(f"decomp tables: error: {exc}", file=sys.stderr)
            return 2
    t0 = time.perf_counter()
    pi, source, ok = _static_bid_prices(args, instance)
    t1 = time.perf_counter()
    log.info("computing the tables by %s", args.by)
    try:
        if args.by == "decomposition":
            tables = decompose(instance, demand, pi, threads=args.threads, source=source)
            status = "done"
        else:
            out = relax(instance, demand, pi)
            tables, status = out.tables, out.termination
            ok = ok and status in (CONVERGED, STATIONARY)
    except DemandError as exc:
        print(f"decomp tables: error: {exc}", file=sys.stderr)
        return 2
    t2 = time.perf_counter()
    write(tables, args.out)
    t3 = time.perf_counter()
    cap = tables.capacity
    print(f"{instance.name}: {instance.n_legs} legs, {instance.n_products} products, {args.periods} periods, "
          f"static bid prices from {source}")
    print(f"  {args.by}: {status}; {tables.info.get('steps', args.periods * instance.n_legs):,} leg-steps; "
          f"work legs x periods x seats x products per leg = {int((cap * demand.periods * _per_leg(instance)).sum()):,}")
    if tables.bound is not None:
        print(f"  bound on the optimal expected revenue {tables.bound:,.2f} "
              f"(at the static bid prices {tables.info.get('start_bound', float('nan')):,.2f})")
    print(f"  time: demand {t_demand:.2f} s, static bid prices {t1 - t0:.2f} s, tables {t2 - t1:.2f} s, "
          f"write {t3 - t2:.2f} s")
    print(f"  wrote {args.out} ({int((cap * demand.periods).sum()):,} rows)")
    return 0 if ok else 1


def _per_leg(instance):
    import numpy as np

    return np.diff(instance.A.indptr)
