"""Small random networks with markets for the tests (invented station codes; data for tests only)."""

from __future__ import annotations

import numpy as np
import pandas as pd

import decomp
from decomp.choice import with_markets


def random_network(seed: int, *, legs: int = 4, markets: int = 5, max_products: int = 8, others: int = 0,
                   tightness: float = 0.6, closed: int = 0):
    """A hub network QH with ``legs`` spokes (inbound and outbound legs), markets of 1-``max_products``
    products over one- and two-leg itineraries, ``others`` products outside every market and
    ``closed`` legs of zero capacity. Capacities are ``tightness`` times the expected seats with
    everything open, so some legs bind."""
    rng = np.random.default_rng(seed)
    spokes = [f"Q{c}{d}" for c, d in zip("BDFGJKLMNP"[:legs], "2468135790")]
    leg_rows = []
    for s in spokes:
        leg_rows.append((f"NV{len(leg_rows) + 1:03d}", s, "QH0"))
        leg_rows.append((f"NV{len(leg_rows) + 1:03d}", "QH0", s))
    n_legs = len(leg_rows)
    inbound = {s: i for i, (_, s0, d) in enumerate(leg_rows) if d == "QH0" for s in [s0]}
    outbound = {d: i for i, (_, o, d) in enumerate(leg_rows) if o == "QH0"}
    prod, mrows = [], []
    for m in range(markets):
        a, b = rng.choice(len(spokes), size=2, replace=False)
        path = [inbound[spokes[a]], outbound[spokes[b]]] if rng.random() < 0.6 else [inbound[spokes[a]]]
        n = int(rng.integers(1, max_products + 1))
        top = float(rng.uniform(100, 600))
        fares = np.sort(top * rng.uniform(0.25, 1.0, n))[::-1]
        weights = rng.uniform(0.2, 3.0, n) * (top / fares) ** rng.uniform(0, 2)
        mid = f"MK{m:02d}"
        mrows.append((mid, float(rng.uniform(5, 60)), float(rng.uniform(0.1, 3.0) * weights.sum())))
        for k in range(n):
            legs_k = path if (k % 3 or len(path) == 1) else path[:1] + path[1:]   # same legs: one itinerary
            prod.append((f"{mid}-{k}", legs_k, float(round(fares[k], 2)), mid, float(weights[k])))
    for k in range(others):
        i = int(rng.integers(n_legs))
        prod.append((f"IND-{k}", [i], float(rng.uniform(50, 400)), None, None))
    mk = pd.DataFrame(mrows, columns=["market", "arrivals", "no_purchase_weight"])
    load = np.zeros(n_legs)
    w_by_m = {}
    for pid, lg, f, m, w in prod:
        if m is not None:
            w_by_m[m] = w_by_m.get(m, 0.0) + w
    lam = dict(zip(mk.market, mk.arrivals))
    w0 = dict(zip(mk.market, mk.no_purchase_weight))
    means = []
    for pid, lg, f, m, w in prod:
        mean = lam[m] * w / (w0[m] + w_by_m[m]) if m is not None else float(rng.uniform(2, 20))
        means.append(mean)
        load[lg] += mean
    cap = np.maximum(1.0, np.round(tightness * load))
    for i in rng.choice(n_legs, size=closed, replace=False) if closed else []:
        cap[i] = 0.0
    legs_df = pd.DataFrame({"leg": [r[0] for r in leg_rows], "origin": [r[1] for r in leg_rows],
                            "destination": [r[2] for r in leg_rows], "capacity": cap})
    products_df = pd.DataFrame({
        "product": [p[0] for p in prod], "legs": [" ".join(leg_rows[i][0] for i in p[1]) for p in prod],
        "fare": [p[2] for p in prod], "mean": means, "std": np.sqrt(means),
        "market": [p[3] if p[3] is not None else "" for p in prod],
        "preference_weight": [p[4] if p[4] is not None else np.nan for p in prod]})
    inst = decomp.Instance.from_frames(legs_df, products_df, meta={"name": f"choice{seed}"})
    return with_markets(inst, mk)
