"""``decomp inspect``: what is in an instance.

Counts, the legs-per-product histogram, the demand factor per leg (mean demand
of the products using the leg over its capacity), the most loaded legs, and the
fare and demand ranges. ``--json`` prints the same figures as one JSON object.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ._options import positive


def register(sub):
    p = sub.add_parser("inspect", help="summarize an instance: counts, legs per product, demand factors, fares",
                       description=__doc__)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder")
    p.add_argument("--top", type=positive, default=10, metavar="K",
                   help="how many of the most loaded legs (default: %(default)s)")
    p.add_argument("--json", action="store_true", help="print the figures as JSON (default: text)")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..io import read_instance

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        inst = read_instance(args.instance)
    f = facts(inst, args.top, [str(w.message) for w in caught])
    if args.json:
        import json

        print(json.dumps(f, indent=2))
        return 0
    for text in f["warnings"]:
        print(f"warning: {text}")
    _print_counts(inst, f)
    _print_legs(f)
    _print_products(f)
    return 0


def _q(quantiles: dict) -> str:
    return "  ".join(f"{k}={v:,.3g}" for k, v in quantiles.items())


def _print_counts(inst, f: dict) -> None:
    print(f"instance {f['name']}: {f['n_legs']} legs, {f['n_products']} products, {f['n_stations']} stations, "
          f"{f['n_product_legs']} product-leg pairs")
    for k, v in f["meta"].items():
        print(f"  {k}: {v}")
    extras = f["extra_columns"]
    if extras["legs"] or extras["products"]:
        print(f"  extra columns: legs {extras['legs'] or '-'}, products {extras['products'] or '-'}")
    if inst.distribution is not None:
        names, counts = np.unique(inst.distribution.astype(str), return_counts=True)
        print("  distributions: " + ", ".join(f"{n} {c}" for n, c in zip(names, counts)))
    print("\nlegs per product:")
    for k, n in f["legs_per_product"].items():
        share = n / f["n_products"]
        print(f"  {int(k):>3} legs: {n:>10,} products ({share:6.1%}) {'#' * int(round(40 * share))}")


def _print_legs(f: dict) -> None:
    df = f["demand_factor"]
    print("\ndemand factor per leg (mean demand / capacity):")
    if df["mean"] is not None:
        print(f"  {_q({k: v for k, v in df.items() if k.startswith('p')})}  mean={df['mean']:.3f}")
        print(f"  legs over capacity (factor > 1): {df['over_capacity']} of {f['n_legs']}")
    if df["zero_capacity"]:
        print(f"  {df['zero_capacity']} leg(s) with capacity 0")
    print(f"  unused legs: {f['unused_legs']}")
    cap = f["capacity"]
    print(f"  capacity: {_q({k: v for k, v in cap.items() if k != 'total'})}  total={cap['total']:,.0f}")
    top = f["most_loaded_legs"]
    print(f"\nmost loaded legs (top {len(top)}):")
    print(f"  {'leg':<24} {'from':>5} {'to':>5} {'capacity':>10} {'demand':>12} {'factor':>7} {'products':>9}")
    for leg in top:
        factor = math.inf if leg["demand_factor"] is None else leg["demand_factor"]
        print(f"  {leg['leg']:<24} {leg['origin']:>5} {leg['destination']:>5} {leg['capacity']:>10,.0f} "
              f"{leg['demand']:>12,.1f} {factor:>7.3f} {leg['products']:>9,}")


def _print_products(f: dict) -> None:
    print("\nfares and demand per product:")
    print(f"  fare: {_q(f['fare'])}")
    mean = f["mean_demand"]
    print(f"  mean demand: {_q({k: v for k, v in mean.items() if k != 'total'})}  total={mean['total']:,.1f}")
    if f["std_over_mean"]:
        print(f"  std/mean: {_q(f['std_over_mean'])}")
    print(f"  revenue at mean demand, all fares: {f['revenue_at_mean_demand']:,.0f}")


def _leg_loads(inst):
    """Per leg: mean demand, number of products, capacity, demand factor (inf on closed
    legs) and where that factor is finite."""
    demand = inst.leg_load(inst.mean)
    users = np.bincount(inst.leg_index, minlength=inst.n_legs)
    cap = inst.capacity
    with np.errstate(divide="ignore", invalid="ignore"):
        df = np.where(cap > 0, demand / cap, np.inf)
    return demand, users, cap, df, np.isfinite(df)


def _quantiles(x, qs=(0, 10, 50, 90, 100)) -> dict:
    return {f"p{q}": float(v) for q, v in zip(qs, np.percentile(x, qs))} if len(x) else {}


def facts(inst, top: int, warnings_seen=()) -> dict:
    """The figures of the text report as a dict (for ``--json``)."""
    L, P = inst.n_legs, inst.n_products
    demand, users, cap, df, finite = _leg_loads(inst)
    order = np.lexsort((np.arange(L), -np.where(finite, df, np.finfo(float).max)))[:min(top, L)]
    hist = np.bincount(inst.legs_per_product)
    with np.errstate(divide="ignore", invalid="ignore"):
        cv = np.where(inst.mean > 0, inst.std / inst.mean, np.nan)
    stations = np.unique(np.concatenate([inst.leg_origin, inst.leg_destination]).astype(str))
    return {
        "name": inst.name, "n_legs": L, "n_products": P, "n_stations": int(len(stations)),
        "n_product_legs": int(len(inst.leg_index)),
        "meta": {k: inst.meta[k] for k in ("generator", "seed") if k in inst.meta},
        "extra_columns": {"legs": list(inst.leg_extra), "products": list(inst.product_extra)},
        "legs_per_product": {str(k): int(hist[k]) for k in np.flatnonzero(hist)},
        "demand_factor": {**_quantiles(df[finite]), "mean": float(df[finite].mean()) if finite.any() else None,
                          "over_capacity": int((df[finite] > 1).sum()), "zero_capacity": int((~finite).sum())},
        "unused_legs": int((users == 0).sum()),
        "capacity": {**_quantiles(cap), "total": float(cap.sum())},
        "most_loaded_legs": [{"leg": str(inst.leg_ids[i]), "origin": str(inst.leg_origin[i]),
                              "destination": str(inst.leg_destination[i]), "capacity": float(cap[i]),
                              "demand": float(demand[i]), "demand_factor": float(df[i]) if finite[i] else None,
                              "products": int(users[i])} for i in order],
        "fare": _quantiles(inst.fare),
        "mean_demand": {**_quantiles(inst.mean), "total": float(inst.mean.sum())},
        "std_over_mean": _quantiles(cv[np.isfinite(cv)]),
        "revenue_at_mean_demand": float(inst.fare @ inst.mean),
        "warnings": list(warnings_seen),
    }
