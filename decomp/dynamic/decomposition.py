"""Dynamic-programming decomposition by leg (Talluri and van Ryzin 2004, section 3.4).

Given static bid prices ``pi`` (from the DLP or the PNLP), product ``j`` is
charged on leg ``i`` its fare less the other legs' bid prices,
``r_j - sum_{k in legs(j), k != i} pi_k``, and each leg solves its own
dynamic program over the booking periods (:mod:`decomp.dynamic.legdp`) with
those revenues and the products' per-period request probabilities. The result
is one bid-price table per leg, by period and seats remaining.

The legs are independent: on large networks they run on a thread pool (numpy
releases the GIL inside each step). The work is ``legs x steps x (products per
leg + seats x log(products per leg))``, where a period has one step, or more on
a leg that expects more than one request in it.
"""

from __future__ import annotations

import time

import numpy as np

from .. import threads as _threads
from .demand import PeriodDemand, steps_per_period
from .legdp import solve_leg
from .tables import BidPriceTables

#: From this many leg-product pairs on, legs run on the thread pool.
THREADS_FROM_PAIRS = 2_000


def leg_products(instance):
    """Per leg, the products using it (from the CSR incidence ``A``)."""
    A = instance.A
    return [A.indices[A.indptr[i]:A.indptr[i + 1]] for i in range(instance.n_legs)]


def displacement_adjusted_fares(instance, bid_prices, leg: int, products) -> np.ndarray:
    """``r_j - (sum of j's legs' bid prices - pi_leg)`` for the given products of ``leg``."""
    pi = np.asarray(bid_prices, dtype=np.float64)
    return instance.fare[products] - instance.leg_sum(pi)[products] + pi[leg]


def decompose(instance, demand: PeriodDemand, bid_prices, *, threads: int | None = None,
              source: str = "") -> BidPriceTables:
    """Bid-price tables of every leg from static bid prices (aligned with ``instance.leg_ids``)."""
    demand.check(instance)
    pi = np.asarray(bid_prices, dtype=np.float64)
    if pi.shape != (instance.n_legs,) or not np.all(np.isfinite(pi)):
        raise ValueError(f"bid prices must be {instance.n_legs} finite numbers aligned with instance.leg_ids, "
                         f"got shape {pi.shape}")
    t0 = time.perf_counter()
    cap = np.floor(np.asarray(instance.capacity, dtype=np.float64) + 1e-9).astype(np.int64)
    per_leg = leg_products(instance)
    adjusted = instance.fare - instance.leg_sum(pi)          # r_j - sum of j's bid prices

    def one(i):
        js = per_leg[i]
        prob = demand.prob[:, js]
        return solve_leg(cap[i], prob, adjusted[js] + pi[i], steps_per_period(prob))

    n = instance.n_legs
    k = _threads.available() if threads is None else int(threads)
    if k > 1 and instance.A.nnz >= THREADS_FROM_PAIRS and n > 1:
        order = np.argsort(-(cap + 1) * np.array([len(js) for js in per_leg]))   # big legs first
        done = dict(zip(order.tolist(), _threads.pool(k).map(one, order.tolist())))
        sols = [done[i] for i in range(n)]
    else:
        sols = [one(i) for i in range(n)]
    seconds = time.perf_counter() - t0
    steps = int(sum(int(s.steps.sum()) for s in sols))
    return BidPriceTables.from_legs(
        instance.leg_ids, cap, [s.bid for s in sols], method="decomposition",
        value=float(sum(s.value for s in sols)), bound=None,
        info={"source": source, "periods": demand.periods, "steps": steps, "seconds": seconds,
              "threads": k if k > 1 and instance.A.nnz >= THREADS_FROM_PAIRS else 1,
              "demand": demand.source})
