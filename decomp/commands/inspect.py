"""``decomp inspect``: what is in an instance.

Counts, the legs-per-product histogram, the demand factor per leg (mean demand
of the products using the leg over its capacity), the most loaded legs, and the
fare and demand ranges. ``--json`` prints the same figures as one JSON object.
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np


def register(sub):
    p = sub.add_parser("inspect", help="summarize an instance: counts, legs per product, demand factors, fares",
                       description=__doc__)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder")
    p.add_argument("--top", type=_positive_int, default=10, metavar="K",
                   help="how many of the most loaded legs (default: %(default)s)")
    p.add_argument("--json", action="store_true", help="print the figures as JSON (default: text)")
    p.set_defaults(func=run)


def _positive_int(text: str) -> int:
    try:
        k = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if k < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {k}")
    return k


def _q(x, qs=(0, 10, 50, 90, 100)):
    return "  ".join(f"p{q}={v:,.3g}" for q, v in zip(qs, np.percentile(x, qs)))


def run(args) -> int:
    from ..io import read_instance

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        inst = read_instance(args.instance)
    if args.json:
        import json

        print(json.dumps(facts(inst, args.top, [str(w.message) for w in caught]), indent=2))
        return 0
    for w in caught:
        print(f"warning: {w.message}")

    L, P = inst.n_legs, inst.n_products
    stations = np.unique(np.concatenate([inst.leg_origin, inst.leg_destination]).astype(str))
    print(f"instance {inst.name}: {L} legs, {P} products, {len(stations)} stations, "
          f"{len(inst.leg_index)} product-leg pairs")
    for k in ("generator", "seed"):
        if k in inst.meta:
            print(f"  {k}: {inst.meta[k]}")
    extras = list(inst.leg_extra) + list(inst.product_extra)
    if extras:
        print(f"  extra columns: legs {list(inst.leg_extra) or '-'}, products {list(inst.product_extra) or '-'}")
    if inst.distribution is not None:
        names, counts = np.unique(inst.distribution.astype(str), return_counts=True)
        print("  distributions: " + ", ".join(f"{n} {c}" for n, c in zip(names, counts)))

    print("\nlegs per product:")
    hist = np.bincount(inst.legs_per_product)
    for k in np.flatnonzero(hist):
        share = hist[k] / P
        print(f"  {k:>3} legs: {hist[k]:>10,} products ({share:6.1%}) {'#' * int(round(40 * share))}")

    demand, users, cap, df, finite = _leg_loads(inst)
    print("\ndemand factor per leg (mean demand / capacity):")
    if finite.any():
        print(f"  {_q(df[finite])}  mean={df[finite].mean():.3f}")
        print(f"  legs over capacity (factor > 1): {int((df[finite] > 1).sum())} of {L}")
    if (~finite).any():
        print(f"  {int((~finite).sum())} leg(s) with capacity 0")
    print(f"  unused legs: {int((users == 0).sum())}")
    print(f"  capacity: {_q(cap)}  total={cap.sum():,.0f}")

    k = min(args.top, L)
    order = np.lexsort((np.arange(L), -np.where(finite, df, np.finfo(float).max)))[:k]
    print(f"\nmost loaded legs (top {k}):")
    print(f"  {'leg':<24} {'from':>5} {'to':>5} {'capacity':>10} {'demand':>12} {'factor':>7} {'products':>9}")
    for i in order:
        print(f"  {str(inst.leg_ids[i]):<24} {str(inst.leg_origin[i]):>5} {str(inst.leg_destination[i]):>5} "
              f"{cap[i]:>10,.0f} {demand[i]:>12,.1f} {df[i]:>7.3f} {users[i]:>9,}")

    print("\nfares and demand per product:")
    print(f"  fare: {_q(inst.fare)}")
    print(f"  mean demand: {_q(inst.mean)}  total={inst.mean.sum():,.1f}")
    with np.errstate(divide="ignore", invalid="ignore"):
        cv = np.where(inst.mean > 0, inst.std / inst.mean, np.nan)
    if np.isfinite(cv).any():
        print(f"  std/mean: {_q(cv[np.isfinite(cv)])}")
    print(f"  revenue at mean demand, all fares: {float(inst.fare @ inst.mean):,.0f}")
    return 0


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
