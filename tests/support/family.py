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


def draw(seed: int, max_products: int = 3000) -> tuple[Instance, dict]:
    """One instance of the family and a description of what was drawn."""
    rng = np.random.default_rng(seed)
    topology = TOPOLOGIES[int(rng.integers(len(TOPOLOGIES)))]
    demand = DEMANDS[int(rng.integers(len(DEMANDS)))]
    cv_kind = ("low", "mid", "high")[int(rng.integers(3))]
    legs, its = _network(rng, topology)
    # products per itinerary: fare classes, so that sizes span 5 to max_products
    target = int(np.exp(rng.uniform(np.log(5), np.log(max_products))))
    classes = max(1, min(40, target // max(len(its), 1)))
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
def _dist(fam, m, s):
    if fam == "normal":
        return stats.norm(m, s)
    if fam == "gamma":
        return stats.gamma((m / s) ** 2, scale=s * s / m)
    if fam == "poisson":
        return stats.poisson(m)
    r = m * m / (s * s - m)
    return stats.nbinom(r, m / (s * s))


def expected_sales(fam, m, s, x):
    """E[min(max(D, 0), x)] for one product, with x >= 0 (integrals of scipy.stats' survival
    functions: for discrete demand the piecewise-linear interpolation between integers)."""
    if x <= 0:
        return 0.0
    if s <= 0 or (fam in ("poisson", "negbin", "gamma") and m <= 0):
        return min(x, max(m, 0.0))
    d = _dist(fam, m, s)
    if fam in ("poisson", "negbin"):
        n = int(np.floor(x))
        k = np.arange(n)
        return float(np.sum(d.sf(k)) + (x - n) * d.sf(n))
    if fam == "normal":
        # E[min(max(D,0), x)] = int_0^x P(D > t) dt; by the normal loss function
        z0, z1 = -m / s, (x - m) / s
        loss = lambda z: stats.norm.pdf(z) - z * stats.norm.sf(z)   # noqa: E731
        return float(s * (loss(z0) - loss(z1)))
    k = (m / s) ** 2
    theta = s * s / m
    return float(m * stats.gamma(k + 1, scale=theta).cdf(x) + x * d.sf(x))


def subproblem_max(fam, m, s, f, a, u):
    """max over 0 <= x <= u of f S(x) - a x, by the newsvendor condition f P(D > x) = a."""
    if s <= 0 or (fam in ("poisson", "negbin", "gamma") and m <= 0):
        cands = [0.0, min(max(m, 0.0), u)]
    elif fam in ("poisson", "negbin"):
        # concave piecewise linear between the integers: the optimum is an integer or u
        d = _dist(fam, m, s)
        k = np.arange(int(np.floor(u)) + 1)
        sales = np.concatenate([[0.0], np.cumsum(d.sf(k[:-1]))])
        best = float(np.max(f * sales - a * k))
        return max(best, f * expected_sales(fam, m, s, u) - a * u)
    else:
        ratio = a / f
        x = 0.0 if ratio >= 1.0 else (np.inf if ratio <= 0 else float(_dist(fam, m, s).isf(ratio)))
        cands = [0.0, float(np.clip(x, 0.0, u)), u]
    return max(f * expected_sales(fam, m, s, x) - a * x for x in cands)


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
            else np.asarray(inst.distribution, dtype=object))
    x = np.asarray(x, dtype=float)
    pi = np.asarray(pi, dtype=float)
    primal = 0.0
    dual = float(inst.capacity @ pi)
    for j in range(inst.n_products):
        legs = inst.leg_index[inst.leg_ptr[j]:inst.leg_ptr[j + 1]]
        f, m, s = float(inst.fare[j]), float(inst.mean[j]), float(inst.std[j])
        fam = fams[j]
        primal += f * expected_sales(fam, m, s, max(x[j], 0.0))
        u = 2.0 * float(inst.capacity[legs].min()) + 1.0
        dual += subproblem_max(fam, m, s, f, float(pi[legs].sum()), u)
    load = inst.A @ x
    viol = float(np.max((load - inst.capacity) / np.maximum(inst.capacity, 1.0), initial=0.0))
    return primal, dual, max(viol, float(-x.min(initial=0.0)))
