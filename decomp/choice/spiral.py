"""Re-estimating an independent-demand forecast from its own sales, cycle after cycle (spiral-down).

An independent-demand forecaster estimates each product's demand from the sales it
observed while the product was on offer: demand_j = (sales of j per customer of its
market who was offered j) x (the market's customers per season). Under customer
choice those sales depend on what else was open: with a cheaper fare open, some
customers who would pay more buy down. So each cycle re-estimates the forecast from the
last cycle's sales under the last cycle's bid prices, the model is solved again with it,
and the next season is sold with its bid prices. Cooper, Homem-de-Mello and Kleywegt
(2006) showed that this loop can spiral down: cheaper fares open, fewer high fares are
seen, their forecast falls, and more cheap fares open.

The loop starts from the forecast of a forecaster that saw each product sold as the
cheapest open fare of its market (the products at or above its fare open, the cheaper
ones closed): arrivals_m w_j / (w0_m + sum of the weights at or above f_j). Every cycle
sells the same customers (common random numbers), so the differences between cycles are
the forecast's doing.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..simulation.statistics import mean_ci, paired_difference
from . import simulation as sim
from .data import require


@dataclasses.dataclass(frozen=True)
class Cycle:
    """One season of the loop: the forecast it was sold with and what it earned."""

    cycle: int
    revenue: dict                  # mean_ci over paths
    share_of_bound: dict
    forecast_top: float            # forecast of the markets' highest-fare products, summed
    forecast_total: float
    sales_top: float               # their sales per path
    mean_bid_price: float          # the time-0 bid prices, averaged over legs
    vs_first: dict | None = None   # paired difference of revenue against cycle 0 (same customers)

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def cheapest_open_forecast(instance) -> np.ndarray:
    """Each market product's sales when it is the cheapest open fare of its market (the dearer ones open)."""
    mk = require(instance)
    out = np.maximum(instance.mean, 0.0).astype(np.float64).copy()
    idx = mk.order
    m = mk.product_market[idx]
    f = instance.fare[idx]
    order = np.lexsort((-f, m))                 # by market, dearest first
    idx, m, f = idx[order], m[order], f[order]
    w = mk.weight[idx]
    start = np.r_[0, np.flatnonzero(np.diff(m)) + 1]
    cum = np.cumsum(w)
    before = np.repeat(cum[start] - w[start], np.diff(np.r_[start, len(m)]))
    above = cum - before                         # weights at or above f_j (ties: the earlier ones)
    out[idx] = mk.arrivals[m] * w / (mk.no_purchase_weight[m] + above)
    return out


def reestimate(instance, previous, sales, offered) -> np.ndarray:
    """Demand per customer offered the product, times its market's customers; unchanged where never offered."""
    mk = require(instance)
    out = np.asarray(previous, dtype=np.float64).copy()
    seen = mk.in_market & (offered > 0)
    rate = np.zeros_like(out)
    rate[seen] = sales[seen] / offered[seen]
    out[seen] = rate[seen] * mk.arrivals[mk.product_market[seen]]
    return out


def top_products(instance) -> np.ndarray:
    """The highest-fare product of every market (a mask)."""
    mk = require(instance)
    top = np.zeros(mk.n_markets)
    np.maximum.at(top, mk.product_market[mk.in_market], instance.fare[mk.in_market])
    return mk.in_market & (instance.fare >= top[np.maximum(mk.product_market, 0)])


def run(instance, policy, cycles: int, paths: int, seed: int = 0, reoptimize_every=None, horizon: float = 60.0,
        bound: float | None = None, start=None) -> list:
    """The re-estimation loop for an independent-demand ``policy`` (a :class:`simulation.IndependentBidPrices`)."""
    mk = require(instance)
    forecast = cheapest_open_forecast(instance) if start is None else np.asarray(start, dtype=np.float64)
    tables = sim.Tables.of(instance)
    customers = sim.sample_customers(mk, np.arange(paths), seed)
    top = top_products(instance)
    out = []
    first = None
    for c in range(int(cycles)):
        counts = sim.SolveCounts()
        prices = policy.prices(instance, np.floor(instance.capacity + 1e-9), 0.0, forecast, None, counts)
        o = sim.run_policy(instance, tables, policy, customers, every=reoptimize_every, forecast=forecast,
                           counts=counts, horizon=horizon)
        first = o.revenue if first is None else first
        out.append(Cycle(cycle=c, revenue=mean_ci(o.revenue),
                         vs_first=None if c == 0 else paired_difference(o.revenue, first),
                         share_of_bound=mean_ci(o.revenue / bound) if bound else None,
                         forecast_top=float(forecast[top].sum()), forecast_total=float(forecast[mk.in_market].sum()),
                         sales_top=float(o.sales[:, top].sum(axis=1).mean()),
                         mean_bid_price=float(np.mean(prices)) if prices is not None else float("nan")))
        forecast = reestimate(instance, forecast, o.sales.mean(axis=0), o.offered.mean(axis=0))
    return out
