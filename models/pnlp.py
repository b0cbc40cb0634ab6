"""The probabilistic NLP (PNLP) with normal demand as a Pyomo ConcreteModel.

    max  sum_j fare[j] * expected_sales[j]
    s.t. sum_{j uses leg i} x[j] <= capacity_seats[i]     for every leg i  (``capacity``)
         x[j] >= 0

with expected sales, demand floored at zero (see :mod:`decomp.normal`),

    expected_sales[j] = std[j] * (G(-mean[j]/std[j]) - G(z[j])),   z[j] = (x[j] - mean[j]) / std[j]

where G is the standard normal loss function built from the Pyomo normal CDF
of :mod:`models.normal_cdf` (no erf in Pyomo); the named Expressions ``z``,
``abs_z`` and ``tail_abs_z`` = Q(|z|) keep the NL file at one rational
function per product. G(-mean/std) is a constant
(Param ``sales_offset``): it changes neither the optimum nor the bid prices.
Products with std = 0 have S(x) = min(x, mean): modelled as x[j] <= mean[j]
with ``expected_sales[j] = x[j]``.

Components are indexed by the instance's leg and product ids (``LEGS``,
``PRODUCTS``; ``SMOOTH`` the products with std > 0), so extensions such as a
group allotment or a minimum protection are one more constraint. The bid price
of leg i is the dual of ``m.capacity[i]``.
"""

from __future__ import annotations

import numpy as np

from decomp import normal

from . import normal_cdf
from .common import add_capacity_and_revenue, paused_gc


def build(instance, x0=None):
    """The PNLP of ``instance``; ``x0`` an optional start per product."""
    import pyomo.environ as pyo

    pids = instance.product_ids.tolist()
    lids = instance.leg_ids.tolist()
    std = instance.std
    smooth = std > 0
    safe = np.where(smooth, std, 1.0)
    offset = np.where(smooth, normal.loss(-instance.mean / safe), 0.0)
    start = (np.zeros(len(pids)) if x0 is None else np.asarray(x0, dtype=float)).tolist()
    with paused_gc():            # Pyomo's build is quadratic with the cyclic GC on
        m = pyo.ConcreteModel(name=f"pnlp[{instance.name}]")
        m.LEGS = pyo.Set(initialize=lids, ordered=True)
        m.PRODUCTS = pyo.Set(initialize=pids, ordered=True)
        m.SMOOTH = pyo.Set(within=m.PRODUCTS, ordered=True,
                           initialize=instance.product_ids[smooth].tolist())
        m.fare = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, instance.fare.tolist())))
        m.mean = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, instance.mean.tolist())))
        m.std = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, std.tolist())))
        m.sales_offset = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, offset.tolist())))
        m.capacity_seats = pyo.Param(m.LEGS, initialize=dict(zip(lids, instance.capacity.tolist())))
        upper = dict(zip(pids, np.where(smooth, np.inf, np.maximum(instance.mean, 0.0)).tolist()))
        m.x = pyo.Var(m.PRODUCTS, initialize=dict(zip(pids, start)),
                      bounds=lambda m, j: (0.0, None if upper[j] == np.inf else upper[j]))
        m.z = pyo.Expression(m.SMOOTH, rule=lambda m, j: (m.x[j] - m.mean[j]) / m.std[j])
        # Q(|z|), held once per product (named Expressions become shared NL subexpressions)
        m.abs_z = pyo.Expression(m.SMOOTH, rule=lambda m, j: normal_cdf.abs_by_sign(m.z[j]))
        m.tail_abs_z = pyo.Expression(m.SMOOTH, rule=lambda m, j: normal_cdf.tail_nonneg(m.abs_z[j]))

        def sales(m, j):
            if j in m.SMOOTH:
                return m.std[j] * (m.sales_offset[j] - normal_cdf.loss(m.z[j], tail_abs=m.tail_abs_z[j]))
            return m.x[j]
        m.expected_sales = pyo.Expression(m.PRODUCTS, rule=sales)
        add_capacity_and_revenue(m, instance, lambda m, j: m.x[j])
    return m
