"""``decomp generate``: write a synthetic hub-and-spoke instance of a fictional carrier.

Same options and seed give byte-identical files. Shape options left out are
chosen from the number of products (see decomp.generator).
"""

from __future__ import annotations

import argparse
import time

from ._options import count, demand_mix, number, positive, whole


def register(sub):
    p = sub.add_parser("generate", help="write a synthetic hub-and-spoke instance",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--products", type=whole(10, 1_000_000), required=True, metavar="N", help="number of products (10 to 1,000,000)")
    p.add_argument("--seed", type=count, default=0, metavar="S", help="random seed (default: %(default)s)")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="instance folder to write (required); an existing one is replaced atomically only when "
                        "decomp wrote it (its .decomp marker)")
    p.add_argument("--format", choices=("csv", "parquet"), default="csv", help="table format (default: %(default)s)")
    p.add_argument("--hubs", type=positive, help="number of hubs (default: chosen from --products)")
    p.add_argument("--spokes", type=whole(2), help="number of spoke stations (default: chosen from --products)")
    p.add_argument("--banks", type=positive, help="departure banks a day (legs per spoke and direction; default: chosen from --products)")
    p.add_argument("--fare-classes", type=positive, help="fare classes per itinerary (default: chosen from --products)")
    p.add_argument("--fare-ratio", type=number(0.0, above=True, maximum=1.0, below=True), help="fare ladder step: fare of a class over the one above, in (0, 1) (default: decomp.generator's)")
    p.add_argument("--demand-factor", type=number(0.0, above=True), nargs=2, metavar=("LO", "HI"),
                   help="range of the per-leg mean demand over capacity (default: 0.8 1.4)")
    p.add_argument("--cv", type=number(0.0), nargs=2, metavar=("LO", "HI"),
                   help="range of the coefficient of variation std/mean (default: 0.25 0.6)")
    p.add_argument("--two-stop", action=argparse.BooleanOptionalAction, default=None,
                   help="sell spoke-hub-hub-spoke itineraries (default: when there are 2+ hubs)")
    p.add_argument("--demand", type=demand_mix, metavar="MIX", help=DEMAND_HELP)
    c = p.add_argument_group("customer choice (decomp.choice.generate)")
    c.add_argument("--markets", action="store_true",
                   help="sell the products in markets (origin, destination, first bank) where customers choose "
                        "by logit: writes markets.csv and the product columns market, preference_weight "
                        "(default: off, independent demand)")
    c.add_argument("--weight-slope", type=number(0.0), metavar="G",
                   help="preference weights fall with the fare as (top fare / fare)^G, G >= 0 (with --markets; "
                        "default: 2)")
    c.add_argument("--strong-buy-down-share", type=number(0.0, maximum=1.0), metavar="S",
                   help="share of markets, in [0, 1], whose no-purchase weight is small, so customers buy the "
                        "cheapest open fare (with --markets; default: 0.5)")
    p.set_defaults(func=run)


#: Help of --demand (also used by decomp run).
DEMAND_HELP = ("demand model: each product's family drawn with these shares, e.g. "
               "'poisson 0.35, negbin 0.15 2-3, gamma 0.15, normal 0.25 0.02-0.3, known 0.1' (family, share, "
               "optional range: CV for normal and gamma, variance/mean for negbin; normal and gamma keep --cv "
               "without one, negbin 2.25; known is std 0), or a named mix: normal, gamma, lowcv, poisson, "
               "negbin, mix (default: normal demand with --cv)")


def run(args) -> int:
    from ..errors import ConfigError
    from ..generator import generate
    from ..io import check_instance_folder, write_instance

    # the folder first: a folder of someone's own files (no decomp marker), a file, a device is
    # refused (exit 2) before anything is generated
    check_instance_folder(args.out, "--out")
    for option, pair in (("--demand-factor", args.demand_factor), ("--cv", args.cv)):
        if pair is not None and pair[0] > pair[1]:
            raise ConfigError(f"{option} {pair[0]:g} {pair[1]:g}: LO must not exceed HI")
    if not args.markets and (args.weight_slope is not None or args.strong_buy_down_share is not None):
        raise ConfigError("--weight-slope and --strong-buy-down-share need --markets")
    if args.markets and args.demand is not None:
        raise ConfigError(f"--demand {args.demand!r} with --markets: a market's products take their mean from the "
                          "logit and a Poisson spread; leave one of them out")
    overrides = {k: getattr(args, k) for k in ("hubs", "spokes", "banks", "fare_classes", "fare_ratio",
                                               "demand_factor", "cv", "two_stop", "demand")
                 if getattr(args, k) is not None}
    t0 = time.perf_counter()
    inst = _generate(args, overrides) if args.markets else generate(args.products, seed=args.seed, **overrides)
    t1 = time.perf_counter()
    out = write_instance(inst, args.out, format=args.format, option="--out")   # full disk: exit 1, path named
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
