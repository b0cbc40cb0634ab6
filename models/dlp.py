"""The deterministic LP (DLP) as a Pyomo ConcreteModel.

    max  sum_j fare[j] * x[j]
    s.t. sum_{j uses leg i} x[j] <= capacity_seats[i]     for every leg i  (``capacity``)
         0 <= x[j] <= mean[j]                              for every product j

Sets ``LEGS`` and ``PRODUCTS`` hold the instance's leg and product ids; the
Params ``fare``, ``mean`` and ``capacity_seats`` are indexed by them, so an
extension reads naturally, e.g. a group allotment on product "P17"::

    m.group = pyo.Constraint(expr=m.x["P17"] >= 12)

or a minimum protection on a leg with a new constraint over ``m.LEGS``. The
bid price of leg i is the dual of ``m.capacity[i]`` (>= 0 for this
maximization). ``expected_sales[j]`` is x[j] here (demand at its mean).
"""

from __future__ import annotations

import numpy as np

from .common import add_capacity_and_revenue, paused_gc


def build(instance, x0=None):
    """The DLP of ``instance`` (see the module docstring); ``x0`` an optional start per product."""
    import pyomo.environ as pyo

    pids = instance.product_ids.tolist()
    lids = instance.leg_ids.tolist()
    mean = np.maximum(instance.mean, 0.0).tolist()
    start = dict(zip(pids, (np.zeros(len(pids)) if x0 is None else np.asarray(x0, dtype=float)).tolist()))
    with paused_gc():            # Pyomo's build is quadratic with the cyclic GC on
        m = pyo.ConcreteModel(name=f"dlp[{instance.name}]")
        m.LEGS = pyo.Set(initialize=lids, ordered=True)
        m.PRODUCTS = pyo.Set(initialize=pids, ordered=True)
        m.fare = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, instance.fare.tolist())))
        m.mean = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, mean)))
        m.capacity_seats = pyo.Param(m.LEGS, initialize=dict(zip(lids, instance.capacity.tolist())))
        m.x = pyo.Var(m.PRODUCTS, bounds=lambda m, j: (0.0, m.mean[j]), initialize=start)
        m.expected_sales = pyo.Expression(m.PRODUCTS, rule=lambda m, j: m.x[j])
        add_capacity_and_revenue(m, instance, lambda m, j: m.x[j])
    return m


def allocation(m, instance) -> np.ndarray:
    """x per product, aligned with ``instance.product_ids``."""
    return np.array([m.x[j].value if m.x[j].value is not None else np.nan
                     for j in instance.product_ids.tolist()], dtype=np.float64)


def bid_prices(m, instance, duals) -> np.ndarray:
    """Capacity duals per leg (0 for a leg no product uses), aligned with ``instance.leg_ids``.

    ``duals`` maps constraint data objects to values (a ``dual`` Suffix or a
    solver's ``get_duals()``)."""
    out = np.zeros(instance.n_legs)
    for i, leg in enumerate(instance.leg_ids.tolist()):
        if leg in m.capacity:
            out[i] = duals.get(m.capacity[leg], np.nan)
    return out
