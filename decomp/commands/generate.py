"""``decomp generate``: write a synthetic hub-and-spoke instance of a fictional carrier.

Same options and seed give byte-identical files. Shape options left out are
chosen from the number of products (see decomp.generator).
"""

from __future__ import annotations

import argparse
import sys
import time


def register(sub):
    p = sub.add_parser("generate", help="write a synthetic hub-and-spoke instance",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--products", type=int, required=True, metavar="N", help="number of products (10 to 1,000,000)")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default: %(default)s)")
    p.add_argument("--out", required=True, metavar="DIR", help="instance folder to write (replaced atomically)")
    p.add_argument("--format", choices=("csv", "parquet"), default="csv", help="table format (default: %(default)s)")
    p.add_argument("--hubs", type=int, help="number of hubs (default: chosen from --products)")
    p.add_argument("--spokes", type=int, help="number of spoke stations (default: chosen from --products)")
    p.add_argument("--banks", type=int, help="departure banks a day (legs per spoke and direction; default: chosen from --products)")
    p.add_argument("--fare-classes", type=int, help="fare classes per itinerary (default: chosen from --products)")
    p.add_argument("--fare-ratio", type=float, help="fare ladder step: fare of a class over the one above, in (0, 1) (default: decomp.generator's)")
    p.add_argument("--demand-factor", type=float, nargs=2, metavar=("LO", "HI"),
                   help="range of the per-leg mean demand over capacity (default: 0.8 1.4)")
    p.add_argument("--cv", type=float, nargs=2, metavar=("LO", "HI"),
                   help="range of the coefficient of variation std/mean (default: 0.25 0.6)")
    p.add_argument("--two-stop", action=argparse.BooleanOptionalAction, default=None,
                   help="sell spoke-hub-hub-spoke itineraries (default: when there are 2+ hubs)")
    c = p.add_argument_group("customer choice (decomp.choice.generate)")
    c.add_argument("--markets", action="store_true",
                   help="sell the products in markets (origin, destination, first bank) where customers choose "
                        "by logit: writes markets.csv and the product columns market, preference_weight "
                        "(default: off, independent demand)")
    c.add_argument("--weight-slope", type=float, metavar="G",
                   help="preference weights fall with the fare as (top fare / fare)^G (with --markets; default: 2)")
    c.add_argument("--strong-buy-down-share", type=float, metavar="S",
                   help="share of markets whose no-purchase weight is small, so customers buy the cheapest open "
                        "fare (with --markets; default: 0.5)")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..generator import generate
    from ..io import write_instance
    from ..production.outputs import is_output_error

    if not args.markets and (args.weight_slope is not None or args.strong_buy_down_share is not None):
        print("decomp generate: error: --weight-slope and --strong-buy-down-share need --markets", file=sys.stderr)
        return 2
    overrides = {k: getattr(args, k) for k in ("hubs", "spokes", "banks", "fare_classes", "fare_ratio",
                                               "demand_factor", "cv", "two_stop")
                 if getattr(args, k) is not None}
    t0 = time.perf_counter()
    inst = _generate(args, overrides) if args.markets else generate(args.products, seed=args.seed, **overrides)
    t1 = time.perf_counter()
    try:
        out = write_instance(inst, args.out, format=args.format)
    except OSError as exc:
        # A full disk or a read-only folder is the machine's trouble, not bad input: decomp.cli says
        # so with the errno and exits 1. write_instance's own refusals carry a message, the system's
        # (a file where a folder should be) an errno: bad input, exit 2. Either way nothing was written.
        if is_output_error(exc):
            raise
        why = str(exc) if exc.errno is None else f"cannot write {exc.filename or args.out}: {exc.strerror}"
        print(f"decomp generate: error: {why}", file=sys.stderr)
        return 2
    t2 = time.perf_counter()
    p = inst.meta["params"]
    print(f"wrote {out} ({args.format}): {inst.n_legs} legs, {inst.n_products} products; "
          f"{p['hubs']} hubs, {p['spokes']} spokes, {p['banks']} banks, {p['fare_classes']} fare classes, "
          f"two-stop {'on' if p['two_stop'] else 'off'}"
          + (f"; {inst.markets.n_markets} markets" if inst.markets is not None else "")
          + f"; generated in {t1 - t0:.2f} s, written in {t2 - t1:.2f} s")
    return 0


def _generate(args, overrides):
    """A network with markets (decomp.choice.generate); --weight-slope and --strong-buy-down-share only here."""
    from ..choice.generate import ChoiceParams, generate_choice

    choice = {k: v for k, v in (("weight_slope", args.weight_slope),
                                ("strong_share", args.strong_buy_down_share)) if v is not None}
    return generate_choice(args.products, seed=args.seed, choice=ChoiceParams(**choice), **overrides)
