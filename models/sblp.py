"""The sales-based LP under the multinomial logit (Gallego, Ratliff and Shebalov 2015) as a Pyomo model.

    max  sum_j fare[j] * x[j]
    s.t. sum_{j uses leg i} x[j] <= capacity_seats[i]                  every leg i    (``capacity``)
         sum_{j in m} x[j] + no_purchase[m] = arrivals[m]               every market m (``balance``)
         x[j] / weight[j] <= no_purchase[m] / no_purchase_weight[m]     every product j of market m
                                                                        (``ratio``, written
                                                                        x[j] <= weight[j] / w0[m] * no_purchase[m])
         x >= 0, no_purchase >= 0; x[j] <= mean[j] for a product outside every market

Sets ``LEGS``, ``PRODUCTS``, ``MARKETS`` and ``MARKET_PRODUCTS`` hold the ids; the bid
price of leg i is the dual of ``m.capacity[i]`` (>= 0 for this maximization), as in
:mod:`models.dlp`. ``expected_sales[j]`` is x[j].
"""

from __future__ import annotations

import numpy as np

from .common import add_capacity_and_revenue, paused_gc


def build(instance):
    """The sales LP of ``instance`` (which must have markets; see the module docstring)."""
    import pyomo.environ as pyo

    from decomp.choice.data import require

    mk = require(instance)
    pids = instance.product_ids.tolist()
    lids = instance.leg_ids.tolist()
    mids = mk.market_ids.tolist()
    in_mkt = mk.in_market
    market_of = {pids[j]: mids[mk.product_market[j]] for j in np.flatnonzero(in_mkt).tolist()}
    ratio = {pids[j]: float(mk.weight[j] / mk.no_purchase_weight[mk.product_market[j]])
             for j in np.flatnonzero(in_mkt).tolist()}
    upper = {p: (None if in_mkt[j] else max(float(instance.mean[j]), 0.0)) for j, p in enumerate(pids)}
    members = {m: [] for m in mids}
    for p, m in market_of.items():
        members[m].append(p)
    with paused_gc():
        m = pyo.ConcreteModel(name=f"sblp[{instance.name}]")
        m.LEGS = pyo.Set(initialize=lids, ordered=True)
        m.PRODUCTS = pyo.Set(initialize=pids, ordered=True)
        m.MARKETS = pyo.Set(initialize=mids, ordered=True)
        m.MARKET_PRODUCTS = pyo.Set(within=m.PRODUCTS, initialize=list(market_of), ordered=True)
        m.fare = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, instance.fare.tolist())))
        m.arrivals = pyo.Param(m.MARKETS, initialize=dict(zip(mids, mk.arrivals.tolist())))
        m.capacity_seats = pyo.Param(m.LEGS, initialize=dict(zip(lids, instance.capacity.tolist())))
        m.x = pyo.Var(m.PRODUCTS, bounds=lambda m, j: (0.0, upper[j]))
        m.no_purchase = pyo.Var(m.MARKETS, bounds=(0.0, None))
        m.expected_sales = pyo.Expression(m.PRODUCTS, rule=lambda m, j: m.x[j])
        m.balance = pyo.Constraint(m.MARKETS, rule=lambda m, k: sum(m.x[j] for j in members[k])
                                   + m.no_purchase[k] == m.arrivals[k])
        m.ratio = pyo.Constraint(m.MARKET_PRODUCTS,
                                 rule=lambda m, j: m.x[j] - ratio[j] * m.no_purchase[market_of[j]] <= 0)
        add_capacity_and_revenue(m, instance, lambda m, j: m.x[j])
    return m


def allocation(m, instance) -> np.ndarray:
    """x per product, aligned with ``instance.product_ids``."""
    return np.array([m.x[j].value if m.x[j].value is not None else np.nan
                     for j in instance.product_ids.tolist()], dtype=np.float64)
