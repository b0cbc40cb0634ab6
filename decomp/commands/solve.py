"""``decomp solve``: solve one instance with one model and method, write the result.

INSTANCE is an instance folder (CSV or Parquet), or the name of a ladder rung
(p100, p1k, ...) when no such folder exists. The result JSON follows the one
output schema (``decomp.result``, version in ``schema_version``; see README):
termination, solution status, model, method, objective, bound, certified gap,
bid prices by leg id, iterations, seconds by phase, solver name and version,
the certificate, and under ``context`` the instance and the versions of Python,
numpy, scipy, Pyomo, highspy, cyipopt and the HiGHS and Ipopt libraries.
Without ``--out`` only the summary is printed; ``--out -`` writes the JSON to
stdout and the summary to stderr. ``--model`` defaults to pnlp and ``--method``
to the model's default (lagrangian for pnlp, highs for dlp and pwl).
``--leg-table`` writes one row per leg (capacity, allocated seats, load factor,
bid price, binding / slack / closed), ``--product-table`` one row per product
(legs, fare, demand, allocation, displacement = sum of its legs' bid prices,
margin, open / closed); CSV or Parquet by suffix (another suffix is refused).
Exit code 0 when the answer is certified optimal, 1 when the solve stopped
short of that (limit, numerical trouble, uncertified), 2 on bad input.
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import sys

import numpy as np

from ._options import load_instance, positive, positive_number
from ._vocabulary import old_name

#: Methods that use --warm-start (the others would ignore it, so it is refused for them).
WARM_START_METHODS = ("ipopt", "pyomo-ipopt", "lagrangian")


def register(sub):
    p = sub.add_parser("solve", help="solve an instance (dlp, pnlp or pwl) with a named method",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder, or a ladder rung name")
    p.add_argument("--model", default="pnlp", choices=("dlp", "pnlp", "pwl", "sblp"),
                   help="the model; sblp: the sales-based LP of customer choice, for networks with markets "
                        "(default: %(default)s)")
    p.add_argument("--method", default=None, metavar="NAME",
                   help="highs, pyomo-highs (dlp, pwl, sblp); ipopt, pyomo-ipopt (pnlp); lagrangian (pnlp, sblp) "
                        f"(default: {_defaults_text()})")
    p.add_argument("--tol", type=positive_number, metavar="T", help="solver tolerance (default: 1e-9)")
    p.add_argument("--time-limit", type=positive_number, metavar="S",
                   help="wall-clock limit of the solve in seconds (default: none)")
    p.add_argument("--iteration-limit", type=positive, metavar="N",
                   help="iteration limit (default: the method's own)")
    p.add_argument("--segments", type=positive, metavar="K",
                   help="segments per product of the pwl model (default: 16; pwl only)")
    p.add_argument("--warm-start", metavar="RESULT",
                   help="start from earlier bid prices: a result JSON of decomp solve, a decomp run task "
                        "(its folder or result.json), a baseline case, or a leg,bid_price table "
                        f"(methods {', '.join(WARM_START_METHODS)} only; default: none)")
    p.add_argument("--leg-table", metavar="FILE",
                   help="write the leg table (.csv or .parquet; default: not written)")
    p.add_argument("--product-table", metavar="FILE",
                   help="write the product table (.csv or .parquet; default: not written)")
    old_name(p, "--legs", new="--leg-table", dest="leg_table", metavar="FILE")
    old_name(p, "--products", "--allocation", new="--product-table", dest="product_table", metavar="FILE")
    p.add_argument("--out", default=None, metavar="RESULT.json",
                   help="result file (written atomically), or - for stdout (the summary then goes to stderr) "
                        "(default: not written, the summary only)")
    p.set_defaults(func=run)


def _defaults_text() -> str:
    from ..registry import DEFAULT_METHOD

    return ", ".join(f"{m} for {model}" for model, m in DEFAULT_METHOD.items())


def _num(v, fmt):
    return "n/a" if v is None else format(v, fmt)


def _names(ids, k=8) -> str:
    ids = [str(x) for x in ids]
    return ", ".join(ids[:k]) + (f", ... ({len(ids) - k} more)" if len(ids) > k else "")


def summary(result, instance) -> str:
    """The human summary of ``result`` on ``instance``: status, certificate, times, and the legs by state."""
    lines = [
        f"{instance.name}: {result.model} by {result.method} ({result.solver}, {result.solver_version})",
        f"  status      {result.termination.value}; solution {result.solution_status.value}",
        f"  objective   {_num(result.objective, ',.6f')}    bound {_num(result.bound, ',.6f')}    "
        f"gap {_num(result.gap, '.2e')}",
    ]
    if result.message and not result.ok:
        lines.append(f"  message     {result.message}")
    c = result.certificate
    if c is not None:
        lines.append(f"  certificate capacity violation {c.max_violation:.2e} seats ({c.max_violation_rel:.2e} rel), "
                     f"KKT residual {_num(c.kkt_residual, '.2e')}, smallest bid price {c.min_bid_price:.3g}")
    secs = result.seconds
    lines.append(f"  time        {sum(secs.values()):.2f} s  (" +
                 ", ".join(f"{k} {v:.2f}" for k, v in secs.items()) + f"); iterations {result.iterations}")
    if result.bid_price_array is not None:
        lines.extend(_leg_lines(instance, result))
    top = sorted(result.bid_prices.items(), key=lambda kv: -kv[1])[:10]
    if top:
        lines.append("  highest bid prices:")
        width = max(len(str(k)) for k, _ in top)
        lines.extend(f"    {str(k):<{width}}  {v:12,.4f}" for k, v in top)
    return "\n".join(lines)


def _leg_lines(instance, result) -> list:
    """Binding legs (highest bid price first), slack legs (lowest load factor first), closed legs."""
    from ..tables import leg_states

    bp = np.asarray(result.bid_price_array, dtype=np.float64)
    state = leg_states(instance, bp)
    ids = instance.leg_ids.astype(str)
    binding = np.flatnonzero(state == "binding")
    binding = binding[np.argsort(-bp[binding], kind="stable")]
    slack = np.flatnonzero(state == "slack")
    if result.allocation is not None:
        load = instance.leg_load(result.allocation)[slack] / instance.capacity[slack]
        slack = slack[np.argsort(load, kind="stable")]
    closed = np.flatnonzero(state == "closed")
    lines = [f"  legs        {len(binding)} binding, {len(slack)} slack, {len(closed)} closed (capacity 0) "
             f"of {instance.n_legs}"]
    if len(binding):
        lines.append(f"  binding     {_names(ids[binding])}  (highest bid price first)")
    if len(slack):
        lines.append(f"  slack       {_names(ids[slack])}  (lowest load factor first)")
    if len(closed):
        lines.append(f"  closed      {_names(ids[closed])}")
    return lines


def _method(args) -> str:
    """The method named, or the model's default."""
    from ._options import method_or_default

    return method_or_default(args.method, args.model)


def _options(args):
    """SolverOptions from the flags, refusing those that do not apply to the model or method."""
    from ..errors import ConfigError
    from ..options import SolverOptions

    from ._options import check_method

    check_method(_method(args), args.model)
    if args.segments is not None and args.model != "pwl":
        raise ConfigError(f"--segments applies to the pwl model only, not {args.model}")
    if args.warm_start and _method(args) not in WARM_START_METHODS:
        raise ConfigError(f"--warm-start is not used by method {_method(args)!r} (it is used by "
                          f"{', '.join(WARM_START_METHODS)}); leave it out")
    kw = {k: getattr(args, k) for k in ("tol", "time_limit", "iteration_limit", "segments")
          if getattr(args, k) is not None}
    return SolverOptions(verbose=bool(getattr(args, "verbose", False)), **kw)


def _check_outputs(args):
    """Refuse bad output paths before the solve (empty, a folder, a device, under a file, a wrong
    suffix, two options naming one file): :class:`~decomp.errors.OutputPathError`, exit 2."""
    from ..errors import OutputPathError
    from ..paths import output_file
    from ..tables import check_table_path

    if args.out is not None:                       # without --out only the summary is printed
        output_file(args.out, "--out", stdout=True)
    for flag, path in (("--leg-table", args.leg_table), ("--product-table", args.product_table)):
        if path is not None:
            check_table_path(path, flag)
            if path == args.out:
                raise OutputPathError(f"{flag} and --out name the same file", path=path, option=flag)
    if args.leg_table is not None and args.leg_table == args.product_table:
        raise OutputPathError("--leg-table and --product-table name the same file", path=args.leg_table,
                              option="--product-table")


def run(args) -> int:
    import json

    from .. import solve as _solve
    from ..atomic import write_json
    from ..baseline import library_versions
    from ..errors import EnvironmentRefusedError, SolverUnavailableError
    from ..result import read_bid_prices
    from ..tables import leg_table, product_table, write_table

    options = _options(args)
    _check_outputs(args)
    warm = read_bid_prices(args.warm_start) if args.warm_start else None
    instance = load_instance(args.instance)
    try:
        with _progress_to_terminal():
            result = _solve(instance, model=args.model, method=_method(args), options=options, warm_start=warm)
    except SolverUnavailableError as exc:
        print(f"decomp solve: error: {exc}", file=sys.stderr)
        return 1
    context = {"instance": instance.name, "instance_path": str(args.instance), "versions": library_versions(ipopt="cyipopt" in sys.modules)}
    out = result.to_json_dict(context=context)
    human = sys.stderr if args.out == "-" else sys.stdout
    written = []
    try:
        if args.out == "-":
            sys.stdout.write(json.dumps(out, indent=2) + "\n")
            sys.stdout.flush()
        elif args.out is not None:
            write_json(args.out, out)
            written.append(args.out)
        if args.leg_table:
            written.append(str(write_table(leg_table(instance, result), args.leg_table)))
        if args.product_table and result.allocation is not None:
            written.append(str(write_table(product_table(instance, result), args.product_table)))
    except EnvironmentRefusedError as exc:   # a full disk, a read-only folder: the file it refused, and
        print(f"decomp solve: error: {exc}" + (f" (written: {', '.join(written)})" if written else ""),
              file=sys.stderr)               # what was written before it (atomic: nothing half-written)
        return 1
    print(summary(result, instance), file=human)
    if written:
        print(f"  wrote {', '.join(written)}", file=human)
    if args.product_table and result.allocation is None:
        print(f"decomp solve: {args.product_table} not written: the solve returned no allocation "
              f"({result.termination.value})", file=sys.stderr)
    return 0 if result.ok else 1


@contextlib.contextmanager
def _progress_to_terminal():
    """Long direct solves report their progress (iteration, revenue, time) every few seconds
    on the ``decomp.progress`` logger. Its lines go to a duplicate of standard error taken
    now: Pyomo's solver interfaces redirect file descriptor 2 while they solve, which would
    hold the lines back until the solve returns."""
    logger = logging.getLogger("decomp.progress")
    try:
        stream = os.fdopen(os.dup(sys.stderr.fileno()), "w", buffering=1)
    except (OSError, ValueError, AttributeError):        # no real stderr (captured, closed)
        logger.setLevel(logging.INFO)
        yield
        return
    handler = logging.StreamHandler(stream)
    handler.setFormatter(logging.Formatter("%(message)s"))
    saved = (logger.level, logger.propagate)
    logger.setLevel(logging.INFO)
    logger.addHandler(handler)
    logger.propagate = False
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.setLevel(saved[0])
        logger.propagate = saved[1]
        stream.close()
