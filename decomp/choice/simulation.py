"""Booking simulation with customer choice: customers arrive by market and choose among the open products.

Each sample path draws, for every market, a Poisson number of customers with mean its
``arrivals``, at times uniform over the booking horizon, and gives each customer one
uniform number U. A customer offered the set S of its market's products buys product j
of S when U falls in j's interval of the multinomial logit, [sum of the earlier
offered weights, plus w_j) / (w0 + W(S)), the products taken in one fixed order; else it
leaves. Every policy sees the same customers with the same U (common random numbers),
so paired differences between policies are differences of control only.

Policies (what each customer is offered; a product is *available* while every leg of
it has a seat):

* ``sblp[:METHOD]``: bid prices of the sales-based LP (:mod:`decomp.choice.lp`), and
  each customer is offered the available set that maximizes expected fare net of
  displacement, the revenue-ordered set (:func:`decomp.choice.mnl.best_offer`);
* ``dlp[:METHOD]``, ``pnlp[:METHOD]``: bid prices of the independent-demand models
  from the forecast an independent-demand forecaster makes from sales with everything
  open (each product's expected sales with its whole market open, Poisson spread), and
  each customer is offered every available product whose fare is at least its legs'
  bid prices (ties open);
* ``fcfs``: every available product.

Model policies re-optimize every ``reoptimize_every`` days from the path's seats left
and the expected demand still to come (a share 1 - t of the arrivals, or of the
independent forecast), warm-started from the path's last bid prices; a solve that ends
non-optimal is solved again by the fallback (``highs`` for the LPs, as ``decomp run``).

The sales-based LP's value at time 0 bounds the expected revenue of every policy
(Liu and van Ryzin 2008, for the choice-based LP, whose value it equals under the
multinomial logit); the report gives each policy's share of it.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time

import numpy as np

from ..simulation.errors import SimulationConfigError
from ..simulation.statistics import mean_ci, paired_difference
from .data import require

log = logging.getLogger(__name__)

#: spawn_key prefix of the choice simulation's customers (apart from decomp.simulation's streams).
STREAM_CUSTOMERS = 27
#: Relative tolerance of the tie between a fare and its bid-price sum (ties are open).
TIE_RTOL = 1e-6


# ---------------------------------------------------------------------------
# customers
# ---------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, eq=False)
class Customers:
    """The customers of a set of paths, each path in time order (padded with market -1)."""

    paths: np.ndarray
    market: np.ndarray     # (n, K)
    time: np.ndarray       # (n, K), fraction of the horizon; inf in the padding
    u: np.ndarray          # (n, K), the uniform number each customer chooses with
    counts: np.ndarray     # (n,)


def path_rng(seed: int, path: int) -> np.random.Generator:
    """The generator of path ``path`` (independent of batches and of the policies)."""
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM_CUSTOMERS, int(path))))


def sample_customers(markets, paths, seed: int) -> Customers:
    """Poisson arrivals per market over the horizon, uniform times, one U per customer."""
    paths = np.asarray(paths, dtype=np.int64)
    rows = []
    for p in paths:                  # one Python step per path, numpy over markets and customers
        rng = path_rng(seed, p)
        n = rng.poisson(markets.arrivals)
        m = np.repeat(np.arange(markets.n_markets), n)
        t = rng.random(len(m))
        u = rng.random(len(m))
        order = np.argsort(t, kind="stable")
        rows.append((m[order], t[order], u[order]))
    K = max((len(r[0]) for r in rows), default=0)
    n = len(paths)
    market = np.full((n, K), -1, dtype=np.int64)
    times = np.full((n, K), np.inf)
    us = np.ones((n, K))
    for k, (m, t, u) in enumerate(rows):
        market[k, :len(m)], times[k, :len(m)], us[k, :len(m)] = m, t, u
    return Customers(paths=paths, market=market, time=times, u=us,
                     counts=np.array([len(r[0]) for r in rows], dtype=np.int64))


# ---------------------------------------------------------------------------
# the network as padded tables (a dummy product P and a dummy leg L pad them)
# ---------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, eq=False)
class Tables:
    """Padded lookup tables: market -> its products, product -> its legs, fares and weights."""

    products: np.ndarray   # (M, Kmax) product indices, P where padded
    legs: np.ndarray       # (P + 1, Lmax) leg indices, L where padded
    fare: np.ndarray       # (P + 1,)
    weight: np.ndarray     # (P + 1,)
    w0: np.ndarray         # (M,)
    n_legs: int
    n_products: int

    @classmethod
    def of(cls, instance) -> "Tables":
        mk = require(instance)
        P, L = instance.n_products, instance.n_legs
        order = mk.order
        sizes = mk.sizes
        kmax = max(1, int(sizes.max(initial=0)))
        products = np.full((mk.n_markets, kmax), P, dtype=np.int64)
        start = np.cumsum(sizes) - sizes
        pos = np.arange(len(order)) - np.repeat(start, sizes)
        products[mk.product_market[order], pos] = order
        n = instance.legs_per_product
        lmax = max(1, int(n.max(initial=0)))
        legs = np.full((P + 1, lmax), L, dtype=np.int64)
        legs[np.repeat(np.arange(P), n), np.arange(len(instance.leg_index)) - np.repeat(instance.leg_ptr[:-1], n)] = \
            instance.leg_index
        return cls(products=products, legs=legs, fare=np.append(instance.fare, 0.0),
                   weight=np.append(mk.weight, 0.0), w0=mk.no_purchase_weight, n_legs=L, n_products=P)


# ---------------------------------------------------------------------------
# policies
# ---------------------------------------------------------------------------

@dataclasses.dataclass
class SolveCounts:
    """Re-optimizations of a policy: solves, non-optimal ones, rescued by the fallback, priced non-optimal."""

    solves: int = 0
    non_optimal: int = 0
    rescued: int = 0
    priced_non_optimal: int = 0
    seconds: float = 0.0

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


class ChoicePolicy:
    """A control of the choice simulation: which available products each customer is offered."""

    label = spec = ""
    model: str | None = None

    def prices(self, instance, capacity, t_frac, forecast, warm, counts) -> np.ndarray | None:
        """Bid prices for a path with ``capacity`` seats left at time ``t_frac`` (None: no prices)."""
        return None

    def offer(self, tables, markets, prods, available, displacement) -> np.ndarray:
        raise NotImplementedError


class FirstComeFirstServed(ChoicePolicy):
    label = spec = "fcfs"

    def offer(self, tables, markets, prods, available, displacement):
        return available


class _Priced(ChoicePolicy):
    def __init__(self, model, method, fallback):
        from ..registry import DEFAULT_METHOD

        self.model = model
        self.method = method or DEFAULT_METHOD[model]
        self.fallback = fallback
        self.label = self.spec = f"{model}:{self.method}"

    def _solve(self, instance, warm, counts):
        from ..options import SolverOptions
        from ..production.fallback import solve_with_fallback
        from ..registry import solve

        t0 = time.perf_counter()
        result, used, attempts = solve_with_fallback(instance, self.model, self.method, SolverOptions(threads=1),
                                                     warm, self.fallback, solve)
        counts.solves += 1
        counts.seconds += time.perf_counter() - t0
        if not attempts[0]["task_status"] == "ok":
            counts.non_optimal += 1
            if result.ok:
                counts.rescued += 1
        if result.bid_price_array is None:
            return None
        if not result.ok:
            counts.priced_non_optimal += 1
        return np.maximum(np.asarray(result.bid_price_array, dtype=np.float64), 0.0)


class ChoiceBidPrices(_Priced):
    """Bid prices of the sales-based LP; the customer is offered the best revenue-ordered available set."""

    def __init__(self, method=None, fallback="auto"):
        super().__init__("sblp", method, fallback)

    def prices(self, instance, capacity, t_frac, forecast, warm, counts):
        mk = instance.markets
        net = dataclasses.replace(instance, capacity=capacity, markets=mk.with_arrivals(mk.arrivals * (1 - t_frac)))
        return self._solve(net, warm, counts)

    def offer(self, tables, markets, prods, available, displacement):
        return best_available_set(tables, markets, prods, available, tables.fare[prods] - displacement)


class FixedBidPrices(ChoicePolicy):
    """Given bid prices, never re-optimized; the customer is offered the best revenue-ordered available set."""

    label = spec = "fixed"

    def __init__(self, bid_prices):
        self.bid_prices = np.maximum(np.asarray(bid_prices, dtype=np.float64), 0.0)

    def prices(self, instance, capacity, t_frac, forecast, warm, counts):
        return self.bid_prices.copy()

    def offer(self, tables, markets, prods, available, displacement):
        return best_available_set(tables, markets, prods, available, tables.fare[prods] - displacement)


class IndependentBidPrices(_Priced):
    """Bid prices of the DLP or PNLP from the independent-demand forecast; open when the fare covers them."""

    def prices(self, instance, capacity, t_frac, forecast, warm, counts):
        mean = forecast * (1 - t_frac)
        net = dataclasses.replace(instance, capacity=capacity, mean=mean, std=np.sqrt(mean), markets=None)
        return self._solve(net, warm, counts)

    def offer(self, tables, markets, prods, available, displacement):
        fare = tables.fare[prods]
        return available & (fare >= displacement - TIE_RTOL * np.maximum(1.0, fare))


def best_available_set(tables, markets, prods, available, net_fare) -> np.ndarray:
    """Per row, the revenue-ordered set of available products maximizing expected net fare per customer."""
    r = np.where(available, net_fare, -np.inf)
    order = np.argsort(-r, axis=1, kind="stable")
    rs = np.take_along_axis(r, order, axis=1)
    w = np.take_along_axis(np.where(available, tables.weight[prods], 0.0), order, axis=1)
    ok = rs > 0
    cum_w = np.cumsum(np.where(ok, w, 0.0), axis=1)
    cum_wr = np.cumsum(np.where(ok, w * np.where(ok, rs, 0.0), 0.0), axis=1)
    value = np.where(ok, cum_wr / (tables.w0[markets][:, None] + cum_w), -np.inf)
    best = np.max(value, axis=1)
    k = np.where(best > 0, np.argmax(value, axis=1) + 1, 0)             # how many of the best to offer
    offered_sorted = np.arange(r.shape[1])[None, :] < k[:, None]
    out = np.zeros_like(available)
    np.put_along_axis(out, order, offered_sorted, axis=1)
    return out


def parse_policies(text: str, fallback="auto") -> list:
    """``sblp[:METHOD],dlp[:METHOD],pnlp[:METHOD],fcfs`` -> policies (fcfs added when missing)."""
    out = []
    for spec in [s.strip() for s in str(text).split(",") if s.strip()]:
        head, _, method = spec.partition(":")
        if head == "fcfs" and not method:
            out.append(FirstComeFirstServed())
        elif head == "sblp":
            out.append(ChoiceBidPrices(method or None, fallback))
        elif head in ("dlp", "pnlp"):
            out.append(IndependentBidPrices(head, method or None, fallback))
        else:
            raise SimulationConfigError(
                f"policy {spec!r} is not one of the choice simulation's: sblp[:METHOD], dlp[:METHOD], "
                f"pnlp[:METHOD], fcfs (networks with markets)")
    if not out:
        raise SimulationConfigError("no policy given")
    if not any(isinstance(p, FirstComeFirstServed) for p in out):
        out.append(FirstComeFirstServed())
    return out


# ---------------------------------------------------------------------------
# one policy over a batch of paths
# ---------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True, eq=False)
class Outcome:
    """What one policy did on a batch of paths."""

    revenue: np.ndarray    # (n,)
    seats: np.ndarray      # (n,) seats sold
    sales: np.ndarray      # (n, P) units sold per product
    offered: np.ndarray    # (n, P) customers of the product's market who were offered it


def run_policy(instance, tables, policy, customers: Customers, *, every: float | None, forecast, counts,
               horizon: float, window: int = 4096) -> Outcome:
    """Simulate ``policy`` on the customers of a batch of paths, exactly as one customer after another.

    A product's availability changes only when one of its legs sells its last seat, and
    bid prices only at a re-optimization. Between two such moments of a path (an
    *epoch*), every customer of a market is offered the same set, so all of them are
    decided at once: each path takes the customers up to the one who buys the last
    seat of some leg (found from each leg's running count of seats sold), or up to its
    next re-optimization. All paths take their next epoch together (numpy over the
    paths' customers), so the number of steps is the largest number of epochs of a
    path: at most its legs plus its re-optimizations (each leg sells out once).
    """
    n, K = customers.market.shape
    L, P = tables.n_legs, tables.n_products
    M, kmax = tables.products.shape
    cap = np.empty((n, L + 1))
    cap[:, :L] = np.floor(np.asarray(instance.capacity, dtype=np.float64) + 1e-9)
    cap[:, L] = np.inf
    bid = np.zeros((n, L + 1))
    times = np.array([] if every is None else np.arange(every, horizon, every) / horizon)
    upcoming = np.append(times, np.inf)                # upcoming[step]: the next re-optimization time
    p0 = policy.prices(instance, cap[0, :L], 0.0, forecast, None, counts)
    if p0 is not None:
        bid[:, :L] = p0
    step = np.zeros(n, dtype=np.int64)                 # re-optimizations done
    pos = np.zeros(n, dtype=np.int64)                  # next customer
    end = customers.counts
    revenue, seats = np.zeros(n), np.zeros(n)
    sales = np.zeros((n, P + 1))
    offered_n = np.zeros((n, P + 1))
    legs_m = tables.legs[tables.products]              # (M, kmax, Lmax)
    while True:
        act = np.flatnonzero(pos < end)
        if len(act) == 0:
            break
        if policy.model is not None:
            _reoptimize_due(instance, policy, customers, act, pos, times, upcoming, step, cap, bid, forecast, counts)
        # every market's offer, per active path
        a = len(act)
        avail = (tables.products < P)[None] & np.all(cap[act][:, legs_m] >= 1, axis=3)          # (a, M, kmax)
        disp = bid[act][:, legs_m].sum(axis=3)
        offer = policy.offer(tables, np.tile(np.arange(M), a), np.tile(tables.products, (a, 1)),
                             avail.reshape(a * M, kmax), disp.reshape(a * M, kmax)).reshape(a, M, kmax) & avail
        owner, idx, row = _epoch(customers, act, pos, end, window, upcoming[step[act]])
        mk = customers.market[row, idx]
        off = offer[owner, mk]                                                           # (E, kmax)
        pr = tables.products[mk]
        w = np.where(off, tables.weight[pr], 0.0)
        cum = np.cumsum(w, axis=1) / (tables.w0[mk] + w.sum(axis=1))[:, None]
        u = customers.u[row, idx]
        buys = u < cum[:, -1]
        j = pr[np.arange(len(mk)), np.argmax(u[:, None] < cum, axis=1)]
        # the first customer (per path) who buys the last seat of a leg closes the epoch
        last = _sellout(owner[buys], idx[buys], tables.legs[j[buys]], cap[act], L, a)
        upto = np.where(np.isfinite(last), last, np.inf)
        done = idx <= upto[owner]
        b = done & buys
        rb, jb = row[b], j[b]
        np.add.at(revenue, rb, tables.fare[jb])
        np.add.at(sales, (rb, jb), 1.0)
        lg = tables.legs[jb]
        np.add.at(cap, (np.repeat(rb, lg.shape[1]), lg.ravel()), -1.0)
        np.add.at(seats, rb, (lg < L).sum(axis=1).astype(np.float64))
        oe, ok = np.nonzero(off & done[:, None])
        np.add.at(offered_n, (row[oe], pr[oe, ok]), 1.0)
        new_pos = np.full(a, -1, dtype=np.int64)
        np.maximum.at(new_pos, owner[done], idx[done])
        pos[act] = new_pos + 1
    return Outcome(revenue=revenue, seats=seats, sales=sales[:, :P], offered=offered_n[:, :P])


def _reoptimize_due(instance, policy, customers, act, pos, times, upcoming, step, cap, bid, forecast, counts):
    """New bid prices (in ``bid``) for the active paths whose next customer comes after their
    next re-optimization time; ``step`` counts each path's re-optimizations done."""
    L = cap.shape[1] - 1
    now = customers.time[act, pos[act]]
    for p in act[now >= upcoming[step[act]]]:
        while step[p] < len(times) and customers.time[p, pos[p]] >= times[step[p]]:
            step[p] += 1
        new = policy.prices(instance, cap[p, :L], float(times[step[p] - 1]), forecast, bid[p, :L].copy(), counts)
        if new is not None:
            bid[p, :L] = new


def _epoch(customers, act, pos, end, window, nxt):
    """(owner, idx, row) of the customers of this epoch: per active path (``owner``, its
    position in ``act``; ``row``, the path), its customers ``idx`` from the next one up to
    the window, the path's end or its next re-optimization time ``nxt`` (the first
    customer always: a re-optimization is done before the epoch starts)."""
    a = len(act)
    length = np.minimum(end[act], pos[act] + window) - pos[act]
    owner = np.repeat(np.arange(a), length)
    idx = pos[act][owner] + (np.arange(int(length.sum())) - np.repeat(np.cumsum(length) - length, length))
    row = act[owner]
    keep = (customers.time[row, idx] < nxt[owner]) | (idx == pos[act][owner])
    return owner[keep], idx[keep], row[keep]


def _sellout(owner, idx, legs, cap, L, a) -> np.ndarray:
    """Per path, the customer index of the first purchase that takes the last seat of a leg (inf if none).

    ``owner``, ``idx``: path (0..a-1) and customer index of each purchase, in customer
    order within a path; ``legs``: their legs (padded with the dummy leg L).
    """
    out = np.full(a, np.inf)
    if len(owner) == 0:
        return out
    lmax = legs.shape[1]
    po = np.repeat(owner, lmax)
    pe = np.repeat(idx, lmax)
    pl = legs.ravel()
    real = pl < L
    po, pe, pl = po[real], pe[real], pl[real]
    key = po * (L + 1) + pl
    order = np.argsort(key, kind="stable")                  # by (path, leg), customers in order
    key, pe, po, pl = key[order], pe[order], po[order], pl[order]
    first = np.r_[0, np.flatnonzero(np.diff(key)) + 1]
    rank = np.arange(len(key)) - np.repeat(first, np.diff(np.r_[first, len(key)]))
    hit = rank + 1 == cap[po, pl]                            # this purchase takes the leg's last seat
    np.minimum.at(out, po[hit], pe[hit].astype(np.float64))
    return out


# ---------------------------------------------------------------------------
# the simulation
# ---------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class ChoiceSimConfig:
    """What to simulate: policies (list or spec text), paths, seed, horizon and re-optimization in days."""

    policies: object = "sblp:lagrangian,dlp:highs,pnlp:lagrangian,fcfs"
    paths: int = 200
    seed: int = 0
    horizon: float = 60.0
    reoptimize_every: float | None = 7.0
    chunk: int = 50
    fallback: object = "auto"

    def __post_init__(self):
        pols = parse_policies(self.policies, self.fallback) if isinstance(self.policies, str) else list(self.policies)
        object.__setattr__(self, "policies", tuple(pols))
        if not (isinstance(self.paths, (int, np.integer)) and self.paths >= 2):
            raise SimulationConfigError(f"paths must be an integer >= 2 (for the intervals), got {self.paths!r}")
        if not (math.isfinite(self.horizon) and self.horizon > 0):
            raise SimulationConfigError(f"horizon must be a positive number of days, got {self.horizon!r}")
        if self.reoptimize_every is not None and not (0 < self.reoptimize_every):
            raise SimulationConfigError(f"re-optimization interval must be > 0 days, got {self.reoptimize_every!r}")
        if not (isinstance(self.chunk, (int, np.integer)) and self.chunk >= 1):
            raise SimulationConfigError(f"paths per batch must be a positive integer, got {self.chunk!r}")


@dataclasses.dataclass
class ChoiceSimResult:
    """Per-path revenues of every policy on the same customers, and the sales LP's bound."""

    config: ChoiceSimConfig
    instance_name: str
    bound: float
    bound_result: object
    revenue: np.ndarray                 # (policies, paths)
    seats: np.ndarray
    sales: np.ndarray                   # (policies, P): mean per path
    offered: np.ndarray                 # (policies, P): mean customers offered the product per path
    counts: list
    customers: np.ndarray               # (paths,)
    revenue_by_group: dict              # group name -> (policies, paths), e.g. strong / weak buy-down markets
    seconds: float

    def summary(self) -> dict:
        pols = []
        for k, pol in enumerate(self.config.policies):
            row = {"policy": pol.label, "revenue": mean_ci(self.revenue[k]),
                   "share_of_bound": mean_ci(self.revenue[k] / self.bound) if self.bound > 0 else None,
                   "seats": mean_ci(self.seats[k]), "reoptimizations": self.counts[k].to_dict(),
                   "by_market_group": {g: mean_ci(v[k]) for g, v in self.revenue_by_group.items()}}
            if k > 0:
                row["vs_first"] = paired_difference(self.revenue[k], self.revenue[0])
            pols.append(row)
        return {"instance": self.instance_name, "paths": int(self.revenue.shape[1]), "seed": self.config.seed,
                "horizon_days": self.config.horizon, "reoptimize_every_days": self.config.reoptimize_every,
                "bound": {"name": "sales-based LP (time 0)", "value": self.bound,
                          "method": self.bound_result.method, "gap": self.bound_result.gap},
                "customers_per_path": mean_ci(self.customers), "policies": pols,
                "first_policy": self.config.policies[0].label, "seconds": self.seconds}


def path_revenues_for_bid_prices(instance, bid_prices, paths: int, seed: int = 0, chunk: int = 4) -> np.ndarray:
    """Revenue of each sample path under fixed bid prices, customers choosing (:class:`FixedBidPrices`).

    Path ``k`` holds the same customers for every call with the same seed, so two sets of
    bid prices give paired revenues. Paths are simulated ``chunk`` at a time (the epoch
    tables are paths x markets x products per market).
    """
    mk = require(instance)
    policy = FixedBidPrices(bid_prices)
    if policy.bid_prices.shape != (instance.n_legs,):
        raise ValueError(f"expected {instance.n_legs} bid prices, got shape {policy.bid_prices.shape}")
    tables = Tables.of(instance)
    out = []
    for lo in range(0, int(paths), int(chunk)):
        customers = sample_customers(mk, np.arange(lo, min(int(paths), lo + int(chunk))), seed)
        out.append(run_policy(instance, tables, policy, customers, every=None, forecast=None, counts=SolveCounts(),
                              horizon=1.0).revenue)
    return np.concatenate(out) if out else np.zeros(0)


def independent_forecast(instance) -> np.ndarray:
    """Each product's expected sales with its whole market open (its own mean outside markets)."""
    mk = require(instance)
    return np.where(mk.in_market, mk.open_sales, np.maximum(instance.mean, 0.0))


def simulate(instance, config: ChoiceSimConfig, forecast=None) -> ChoiceSimResult:
    """Every policy on the same customers; ``forecast``: the independent models' means (default: open sales)."""
    import decomp

    t0 = time.perf_counter()
    mk = require(instance)
    forecast = independent_forecast(instance) if forecast is None else np.asarray(forecast, dtype=np.float64)
    bound_result = decomp.solve(instance, model="sblp")
    if not bound_result.ok:
        bound_result = decomp.solve(instance, model="sblp", method="highs")
    tables = Tables.of(instance)
    every = config.reoptimize_every
    counts = [SolveCounts() for _ in config.policies]
    parts = []
    for lo in range(0, config.paths, config.chunk):
        customers = sample_customers(mk, np.arange(lo, min(config.paths, lo + config.chunk)), config.seed)
        outs = [run_policy(instance, tables, pol, customers, every=every, forecast=forecast, counts=c,
                           horizon=config.horizon) for pol, c in zip(config.policies, counts)]
        parts.append((customers, outs))
    revenue = np.stack([np.concatenate([o[k].revenue for _, o in parts]) for k in range(len(config.policies))])
    seats = np.stack([np.concatenate([o[k].seats for _, o in parts]) for k in range(len(config.policies))])
    n = config.paths
    sales = np.stack([sum(o[k].sales.sum(axis=0) for _, o in parts) / n for k in range(len(config.policies))])
    offered = np.stack([sum(o[k].offered.sum(axis=0) for _, o in parts) / n for k in range(len(config.policies))])
    groups = {}
    if "buy_down" in mk.extra:
        kind = np.asarray(mk.extra["buy_down"]).astype(str)
        of_product = np.where(mk.in_market, kind[np.maximum(mk.product_market, 0)], "")
        for g in sorted(set(kind.tolist())):
            sel = of_product == g
            groups[g] = np.stack([np.concatenate([o[k].sales[:, sel] @ instance.fare[sel] for _, o in parts])
                                  for k in range(len(config.policies))])
    return ChoiceSimResult(config=config, instance_name=instance.name, bound=float(bound_result.objective),
                           bound_result=bound_result, revenue=revenue, seats=seats, sales=sales, offered=offered,
                           counts=counts, customers=np.concatenate([c.counts for c, _ in parts]).astype(float),
                           revenue_by_group=groups, seconds=time.perf_counter() - t0)
