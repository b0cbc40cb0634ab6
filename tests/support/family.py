"""A randomized family of network instances, written here and not by ``decomp generate``.

Every draw varies what the project's generator holds fixed: the topology
(chains, single hubs with and without local traffic, two hubs joined by a
trunk, multi-hub grids with 1-3 leg paths), the demand family (normal,
gamma, Poisson, negative binomial, per instance or mixed per product), the
coefficient of variation (0.02-0.15, 0.2-0.7, or 1-3 with small means),
products with std = 0 or mean = 0, capacities from very slack to very tight,
fares over up to three decades, and legs of zero capacity. A draw is a pure
function of its seed.

The references the tests compare with are outside the project's solver code:
Ipopt (through cyipopt) for normal demand, and the independent certificate
below, computed from scipy.stats alone, for every instance.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from decomp.instance import Instance

TOPOLOGIES = ("chain", "hub_local", "hub_connecting", "two_hubs", "grid")
DEMANDS = ("normal", "normal_mixed", "gamma", "poisson", "negbin", "mixed")


# ---------------------------------------------------------------------------
# Networks: legs as (origin, destination), itineraries as tuples of leg indices
# ---------------------------------------------------------------------------
def _chain(rng):
    n = int(rng.integers(2, 9))
    legs = [(i, i + 1) for i in range(n)]
    its = [tuple(range(i, j)) for i in range(n) for j in range(i + 1, min(n, i + 3) + 1)]
    return legs, its


def _hub(rng, local):
    spokes = int(rng.integers(2, 8))
    legs = [(s, 0) for s in range(1, spokes + 1)] + [(0, s) for s in range(1, spokes + 1)]
    inbound = {s: s - 1 for s in range(1, spokes + 1)}
    outbound = {s: spokes + s - 1 for s in range(1, spokes + 1)}
    its = [(inbound[o], outbound[d]) for o in inbound for d in outbound if o != d]
    if local:
        its += [(i,) for i in range(2 * spokes)]
    return legs, its


def _two_hubs(rng):
    ns = int(rng.integers(1, 5))
    legs = [(-1, -2), (-2, -1)]                 # the trunk both ways
    west = {}
    east = {}
    for s in range(ns):
        west[s] = (len(legs), len(legs) + 1)    # spoke -> H1, H1 -> spoke
        legs += [(s, -1), (-1, s)]
        east[s] = (len(legs), len(legs) + 1)    # spoke -> H2, H2 -> spoke
        legs += [(100 + s, -2), (-2, 100 + s)]
    its = [(0,), (1,)]
    for s in range(ns):
        its += [(west[s][0], 0), (1, west[s][1]), (east[s][0], 1), (0, east[s][1])]
        for t in range(ns):
            its.append((west[s][0], 0, east[t][1]))
            its.append((east[t][0], 1, west[s][1]))
        if rng.random() < 0.5:
            its += [(west[s][0],), (east[s][1],)]
    return legs, its


def _grid(rng):
    stations = int(rng.integers(4, 10))
    n_legs = int(rng.integers(stations, 3 * stations))
    legs = set()
    while len(legs) < n_legs:
        o, d = rng.choice(stations, size=2, replace=False)
        legs.add((int(o), int(d)))
    legs = sorted(legs)
    out = {}
    for i, (o, _) in enumerate(legs):
        out.setdefault(o, []).append(i)
    its = set()
    for i, (o, d) in enumerate(legs):
        its.add((i,))
        for j in out.get(d, []):
            if legs[j][1] == o:
                continue
            its.add((i, j))
            for k in out.get(legs[j][1], []):
                if legs[k][1] not in (o, d):
                    its.add((i, j, k))
    its = sorted(its)
    if len(its) > 60:
        keep = rng.choice(len(its), size=60, replace=False)
        its = [its[t] for t in sorted(keep)]
    return legs, its


def _network(rng, topology):
    if topology == "chain":
        return _chain(rng)
    if topology == "hub_local":
        return _hub(rng, local=True)
    if topology == "hub_connecting":
        return _hub(rng, local=False)
    if topology == "two_hubs":
        return _two_hubs(rng)
    return _grid(rng)


# ---------------------------------------------------------------------------
# Demand, fares, capacity
# ---------------------------------------------------------------------------
def _forecast(rng, n, families, cv_kind):
    if cv_kind == "low":
        mean = rng.uniform(2.0, 60.0, n)
        cv = rng.uniform(0.02, 0.15, n)
    elif cv_kind == "high":
        mean = rng.uniform(0.01, 0.5, n)
        cv = rng.uniform(1.0, 3.0, n)
    else:
        mean = rng.uniform(0.5, 40.0, n)
        cv = rng.uniform(0.2, 0.7, n)
    std = mean * cv
    nb = families == "negbin"
    # a negative binomial needs variance above the mean
    std[nb] = np.sqrt(mean[nb] * (1.0 + rng.uniform(0.2, 3.0, int(nb.sum()))))
    std[families == "poisson"] = np.sqrt(mean[families == "poisson"])
    return mean, std


def draw(seed: int, max_products: int = 3000, min_products: int = 5,
         max_classes: int | None = 40) -> tuple[Instance, dict]:
    """One instance of the family and a description of what was drawn. Its size is drawn
    log-uniformly in [min_products, max_products], as fare classes per itinerary of the
    drawn topology, at most ``max_classes`` of them (None: no cap). With the default cap of 40
    the small topologies keep every draw below about 2,400 products whatever the maximum; the
    large tier lifts it (many fare classes per itinerary, each with its own fare and demand)."""
    rng = np.random.default_rng(seed)
    topology = TOPOLOGIES[int(rng.integers(len(TOPOLOGIES)))]
    demand = DEMANDS[int(rng.integers(len(DEMANDS)))]
    cv_kind = ("low", "mid", "high")[int(rng.integers(3))]
    legs, its = _network(rng, topology)
    # products per itinerary: fare classes, so that sizes span 5 to max_products
    target = int(np.exp(rng.uniform(np.log(min_products), np.log(max_products))))
    classes = max(1, target // max(len(its), 1))
    if max_classes is not None:
        classes = min(max_classes, classes)
    it_of = np.repeat(np.arange(len(its)), classes)
    n = len(it_of)
    if demand in ("normal", "normal_mixed"):
        families = np.full(n, "normal", dtype=object)
    elif demand == "mixed":
        families = rng.choice(np.array(["normal", "gamma", "poisson", "negbin"], dtype=object), n)
    else:
        families = np.full(n, demand, dtype=object)
    mean, std = _forecast(rng, n, families, cv_kind)
    if demand in ("normal_mixed", "mixed"):
        cont = (families == "normal") | (families == "gamma")
        det = cont & (rng.random(n) < 0.15)
        std[det] = 0.0
        zero = rng.random(n) < 0.05
        mean[zero] = 0.0
        std[zero & (families == "poisson")] = 0.0
        std[zero & (families == "negbin")] = 0.0
        families[zero & (families == "negbin")] = "poisson"
    # fares: a base per itinerary (by its number of legs), classes spread around it
    spread = 10.0 ** rng.uniform(0.3, 3.0)
    base = 80.0 * np.array([len(its[i]) for i in it_of]) ** 0.7
    fare = base * np.exp(rng.uniform(-0.5, 0.5, n) * np.log(spread))
    fare = np.round(fare, 2) + 0.01
    # capacity from a demand factor per leg
    L = len(legs)
    leg_mean = np.zeros(L)
    for j in range(n):                            # instance building, small sizes only
        for l in its[it_of[j]]:
            leg_mean[l] += mean[j]
    regime = ("slack", "tight", "mixed")[int(rng.integers(3))]
    if regime == "slack":
        factor = rng.uniform(0.1, 0.7, L)
    elif regime == "tight":
        factor = rng.uniform(1.3, 5.0, L)
    else:
        factor = np.exp(rng.uniform(np.log(0.1), np.log(5.0), L))
    capacity = np.floor(np.maximum(leg_mean, 0.05) / factor) + rng.integers(0, 2, L)
    closed = rng.random(L) < (0.08 if rng.random() < 0.3 else 0.0)
    capacity[closed] = 0.0
    ptr = np.zeros(n + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(its[i]) for i in it_of])
    idx = np.array([l for i in it_of for l in its[i]], dtype=np.int64)
    # every leg must be used by some product (the instance format requires it? no: a warning); keep all
    inst = Instance(
        leg_ids=[f"L{i}" for i in range(L)],
        leg_origin=[f"S{o}" for o, _ in legs], leg_destination=[f"S{d}" for _, d in legs],
        capacity=capacity, product_ids=[f"P{j}" for j in range(n)], leg_ptr=ptr, leg_index=idx,
        fare=fare, mean=mean, std=std,
        distribution=None if demand in ("normal", "normal_mixed") else np.asarray(families, dtype=object),
    )
    desc = dict(seed=seed, topology=topology, demand=demand, cv=cv_kind, regime=regime,
                legs=L, products=n, closed_legs=int(closed.sum()))
    return inst, desc


# ---------------------------------------------------------------------------
# The independent certificate (scipy.stats only)
# ---------------------------------------------------------------------------
# Each product's expected sales S(x) = E[min(max(D, 0), x)] and subproblem maximum are evaluated
# with scipy.stats' vectorized functions, one family at a time, never with decomp's own demand code.

_DISCRETE = ("poisson", "negbin")


def _frozen(fam, m, s):
    """scipy.stats' distribution of family ``fam`` with means ``m`` and standard deviations ``s``
    (arrays; negative binomial as scipy's nbinom(r, p) with r = m^2 / (s^2 - m), p = m / s^2)."""
    if fam == "normal":
        return stats.norm(m, s)
    if fam == "gamma":
        return stats.gamma((m / s) ** 2, scale=s * s / m)
    if fam == "poisson":
        return stats.poisson(m)
    return stats.nbinom(m * m / (s * s - m), m / (s * s))


def _sales(fam, m, s, x):
    """S(x) for products of one family whose demand is random (s > 0, and m > 0 where D >= 0), at
    x >= 0: the integral of P(D > t) over [0, x] (a fact of nonnegative random variables), in
    closed form for the normal (its loss function) and gamma (E[D 1{D <= x}] = m P(D' <= x) with
    D' of shape k + 1) and for discrete demand the sum of P(D > k) over the whole units below x
    plus the fraction of the next one (the piecewise-linear interpolation between integers)."""
    if fam == "normal":
        loss = lambda z: stats.norm.pdf(z) - z * stats.norm.sf(z)   # noqa: E731
        return s * (loss(-m / s) - loss((x - m) / s))
    if fam == "gamma":
        k, theta = (m / s) ** 2, s * s / m
        return m * stats.gamma.cdf(x, k + 1, scale=theta) + x * stats.gamma.sf(x, k, scale=theta)
    n = np.floor(x).astype(np.int64)
    whole = np.zeros(len(x))
    # (the sum stops where P(D > k) < 1e-16 (scipy's Poisson isf returns nan below about
    # 1e-17): beyond it the tails fall geometrically, by a factor below m / (k + 1) per unit
    # for the Poisson and towards 1 - p for the negative binomial, so the terms left out add
    # some 1e-16 / p seats per product, far below the certificate's tolerances; a product
    # priced at 0 would otherwise sum up to its bound u, some two million terms)
    end = _frozen(fam, m, s).isf(1e-16)
    n = np.where(np.isfinite(end), np.minimum(n, np.ceil(np.nan_to_num(end)).astype(np.int64) + 1), n)
    ends = np.cumsum(n)
    start = 0
    while start < len(x):                  # chunks of at most about 2 million terms
        stop = max(start + 1, int(np.searchsorted(ends, ends[start] - n[start] + 2_000_000, side="right")))
        nc = n[start:stop]
        owner = np.repeat(np.arange(start, stop), nc)
        k = np.arange(nc.sum()) - np.repeat(np.cumsum(nc) - nc, nc)     # 0 .. n_j - 1 for each product j
        whole[start:stop] = np.bincount(owner - start, weights=_frozen(fam, m[owner], s[owner]).sf(k),
                                        minlength=stop - start)
        start = stop
    whole_units = np.floor(x)
    return whole + (x - whole_units) * _frozen(fam, m, s).sf(whole_units)


def _known(fam, m, s):
    """Products whose sales are min(x, max(m, 0)): std 0, or a nonnegative family with mean <= 0."""
    return (s <= 0) | ((fam != "normal") & (m <= 0))


def expected_sales(fams, m, s, x):
    """E[min(max(D, 0), x)] per product (arrays; families by name), with x >= 0."""
    x = np.maximum(np.asarray(x, dtype=float), 0.0)
    out = np.minimum(x, np.maximum(m, 0.0))
    for fam in np.unique(fams):
        j = (fams == fam) & ~_known(fam, m, s) & (x > 0)
        if j.any():
            out[j] = _sales(fam, m[j], s[j], x[j])
    return np.where(x > 0, out, 0.0)


def _candidates(fams, m, s, f, a, u):
    """Allocations among which max_{0 <= x <= u} f S(x) - a x lies: the newsvendor condition
    f P(D > x) = a gives it for continuous demand (or x = 0, x = u); for discrete demand the
    objective is concave and piecewise linear between the integers, so its maximum is at the
    smallest whole k with f P(D > k) <= a (scipy's isf, with its neighbours against rounding),
    or at u where that k lies beyond it."""
    ratio = a / f
    known = _known(fams, m, s)
    discrete = np.isin(fams, _DISCRETE) & ~known
    cands = [np.zeros_like(u), np.where(discrete, 0.0, u)]       # discrete: u is reached by clipping
    cands.append(np.where(known, np.minimum(np.maximum(m, 0.0), u), 0.0))
    inner = np.zeros_like(u)
    for fam in np.unique(fams):
        j = (fams == fam) & ~known & (ratio > 0) & (ratio < 1)
        if j.any():
            inner[j] = _frozen(fam, m[j], s[j]).isf(ratio[j])
    inner = np.where(ratio <= 0, u, np.where(ratio >= 1, 0.0, inner))
    for shift in ((-1.0, 0.0, 1.0) if discrete.any() else (0.0,)):
        x = np.where(discrete, inner + shift, inner)
        cands.append(np.clip(np.where(known, 0.0, x), 0.0, u))
    return cands


def relative_gap(dual: float, primal: float) -> float:
    """(dual - primal) / max(1, |primal|): the gap of the independent certificate, written here
    apart from decomp.certify."""
    return (dual - primal) / max(1.0, abs(primal))


def independent_certificate(inst: Instance, x, pi):
    """(primal value, dual bound, max relative capacity violation) of a returned allocation
    and bid prices, from scipy.stats alone. The dual bound is the Lagrangian dual at pi with
    each product's allocation bounded by u = 2 (smallest capacity of its legs) + 1; since
    A x <= c already implies x_j <= u_j, it is an upper bound on the PNLP optimum for every
    pi >= 0 (weak duality, a mathematical fact)."""
    fams = (np.full(inst.n_products, "normal", dtype=object) if inst.distribution is None
            else np.asarray(inst.distribution, dtype=object)).astype(str)
    x = np.asarray(x, dtype=float)
    pi = np.asarray(pi, dtype=float)
    f, m, s = (np.asarray(v, dtype=float) for v in (inst.fare, inst.mean, inst.std))
    primal = float(f @ expected_sales(fams, m, s, x))
    owner = np.repeat(np.arange(inst.n_products), np.diff(inst.leg_ptr))
    a = np.bincount(owner, weights=pi[inst.leg_index], minlength=inst.n_products)
    u = np.full(inst.n_products, np.inf)
    np.minimum.at(u, owner, np.asarray(inst.capacity, dtype=float)[inst.leg_index])
    u = 2.0 * u + 1.0
    best = np.max([f * expected_sales(fams, m, s, c) - a * c for c in _candidates(fams, m, s, f, a, u)], axis=0)
    dual = float(inst.capacity @ pi) + float(best.sum())
    load = inst.A @ x
    viol = float(np.max((load - inst.capacity) / np.maximum(inst.capacity, 1.0), initial=0.0))
    return primal, dual, max(viol, float(-x.min(initial=0.0)))
