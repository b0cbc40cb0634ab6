"""Solve generated networks whose shape options are drawn at random, at 5,000 to 60,000
products: the sizes the test family (tests/support/family.py, up to 3,000) does not reach.

Each draw sets the generator's demand factor, CV range, fare ladder step, class growth,
seats per leg, and sometimes the number of hubs and fare classes; a fifth of the draws
are gamma, Poisson or negative-binomial demand instead of normal (negative binomial with
the std raised to at least 1.2 sqrt(mean) + 0.001, so that var > mean). Every answer's
gap is its own certificate (the exact dual at the reported bid prices against the exact
revenue of the reported feasible allocation), so "optimal" needs no other reference.

    .venv/bin/python bench/generator_sweep.py [--first 0] [--count 16] [--method lagrangian]

One line per draw, then the draws that ended non-optimal. A long run (minutes per draw
for the hardest); not part of the test suite.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from decomp import solve
from decomp.generator import generate


def draw(index: int):
    """(instance, description) of draw ``index``."""
    rng = np.random.default_rng(1000 + index)
    n = int(np.exp(rng.uniform(np.log(5000), np.log(60000))))
    lo = rng.uniform(0.2, 1.5)
    hi = lo * rng.uniform(1.05, 3.0)
    cv_lo = float(np.exp(rng.uniform(np.log(0.03), np.log(1.5))))
    cv_hi = cv_lo * rng.uniform(1.1, 3.0)
    options = dict(demand_factor=(lo, hi), cv=(cv_lo, cv_hi), fare_ratio=float(rng.uniform(0.4, 0.95)),
                   class_growth=float(rng.uniform(0.7, 2.0)), seats=float(rng.uniform(20, 400)))
    if rng.random() < 0.5:
        options["hubs"] = int(rng.integers(1, 5))
    if rng.random() < 0.5:
        # the generator names at most 24 classes; clipping keeps every draw's random stream
        options["fare_classes"] = min(int(rng.integers(1, 26)), 24)
    inst = generate(n, seed=index, **options)
    demand = str(rng.choice(["normal", "normal", "gamma", "poisson", "negbin"]))
    if demand == "negbin":
        inst = inst.with_forecast(std=np.maximum(inst.std, np.sqrt(inst.mean) * 1.2 + 1e-3))
    if demand != "normal":
        inst = inst.with_forecast(meta={**inst.meta, "distribution": demand})
    desc = f"{demand}, CV {cv_lo:.2f}-{cv_hi:.2f}, demand factor {lo:.2f}-{hi:.2f}"
    extra = {k: options[k] for k in ("hubs", "fare_classes") if k in options}
    return inst, desc + (f", {extra}" if extra else "")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--first", type=int, default=0)
    ap.add_argument("--count", type=int, default=16)
    ap.add_argument("--method", default="lagrangian")
    args = ap.parse_args(argv)
    missed = []
    for index in range(args.first, args.first + args.count):
        inst, desc = draw(index)
        t = time.perf_counter()
        r = solve(inst, "pnlp", args.method)
        seconds = time.perf_counter() - t
        print(f"{index:4d} {inst.n_products:7d} products {inst.n_legs:4d} legs  {desc}: "
              f"{r.termination.value}, {r.iterations} iterations, gap {r.gap:.1e}, {seconds:.1f} s", flush=True)
        if r.termination.value != "optimal":
            missed.append(index)
    print(f"non-optimal: {len(missed)} of {args.count} {missed}")
    return 1 if missed else 0


if __name__ == "__main__":
    raise SystemExit(main())
