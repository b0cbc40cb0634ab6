"""Write a two-hub network without local traffic (every product connects), the shape on
which PNLP re-optimizations used to end in numerical trouble: 26 legs (a trunk both ways
and 6 spokes per hub, in and out), products spoke-hub-spoke and spoke-hub-hub-spoke only.

    .venv/bin/python bench/two_hub_network.py --out DIR [--seed S]
    .venv/bin/decomp simulate DIR --policies pnlp:lagrangian:1e-9,dlp:highs,fcfs --paths 50 --out SIM

A fictional carrier: station codes are letter-letter-digit, hubs HA1 and HB1.
"""

from __future__ import annotations

import argparse

import numpy as np

from decomp.instance import Instance
from decomp.io import write_instance


def build(seed: int = 0) -> Instance:
    rng = np.random.default_rng(seed)
    legs, caps = [], []
    hubs = ("HA1", "HB1")
    legs += [("T1", "HA1", "HB1"), ("T2", "HB1", "HA1")]
    spokes = {h: [f"Q{h[1]}{k}" for k in range(2, 8)] for h in hubs}
    for h in hubs:
        for s in spokes[h]:
            legs += [(f"{s}{h}", s, h), (f"{h}{s}", h, s)]
    index = {l[0]: i for i, l in enumerate(legs)}
    products, paths = [], []
    for h, other in (hubs, hubs[::-1]):
        trunk = "T1" if h == "HA1" else "T2"
        for o in spokes[h]:
            for d in spokes[h]:
                if o != d:
                    paths.append([f"{o}{h}", f"{h}{d}"])
            for d in spokes[other]:
                paths.append([f"{o}{h}", trunk, f"{other}{d}"])
    ptr, idx, fare, mean, std, ids = [0], [], [], [], [], []
    for p in paths:
        base = 90.0 * len(p) ** 0.7 * rng.uniform(0.8, 1.25)
        for c, ratio in enumerate((1.0, 0.7, 0.45)):
            idx += [index[l] for l in p]
            ptr.append(len(idx))
            fare.append(round(base / ratio * 0.5, 2))
            m = rng.uniform(0.5, 4.0) * (1.0 + c)
            mean.append(m)
            std.append(m * rng.uniform(0.3, 0.6))
            ids.append("-".join(p) + f"-C{c}")
    leg_mean = np.bincount(idx, weights=np.repeat(mean, np.diff(ptr)), minlength=len(legs))
    cap = np.floor(leg_mean / rng.uniform(1.0, 1.6, len(legs))) + 1
    return Instance(leg_ids=[l[0] for l in legs], leg_origin=[l[1] for l in legs],
                    leg_destination=[l[2] for l in legs], capacity=cap, product_ids=ids,
                    leg_ptr=np.array(ptr), leg_index=np.array(idx), fare=fare, mean=mean, std=std,
                    meta={"name": "two-hubs-connecting", "seed": seed})


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", required=True)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    inst = build(args.seed)
    write_instance(inst, args.out)
    print(f"wrote {args.out}: {inst.n_legs} legs, {inst.n_products} products")


if __name__ == "__main__":
    main()
