"""Pieces shared by the Pyomo builders: the capacity constraints, the revenue objective,
and a pause of Python's cyclic garbage collector while a model is built or solved."""

from __future__ import annotations

import contextlib
import gc


@contextlib.contextmanager
def paused_gc():
    """Pause the cyclic garbage collector inside the block (restored after, even on error).

    Pyomo's model build is quadratic with it on: the collector walks the growing
    model's objects again and again while they are created.
    """
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def leg_products(instance) -> dict:
    """Leg id -> list of (product id, coefficient) on that leg (coefficient > 1 when a
    product uses the same leg twice). One loop over legs, none over products."""
    A = instance.A
    pids = instance.product_ids
    out = {}
    for i, leg in enumerate(instance.leg_ids.tolist()):
        lo, hi = A.indptr[i], A.indptr[i + 1]
        out[leg] = list(zip(pids[A.indices[lo:hi]].tolist(), A.data[lo:hi].tolist()))
    return out


def _term(coef, v):
    return v if coef == 1.0 else coef * v


def capacity_rule(on_leg, alloc):
    """Rule for ``capacity[leg]``: the seats the products on the leg take, at most its capacity."""
    import pyomo.environ as pyo

    def rule(m, i):
        if not on_leg[i]:
            return pyo.Constraint.Skip
        return sum(_term(a, alloc(m, j)) for j, a in on_leg[i]) <= m.capacity_seats[i]
    return rule


def add_capacity_and_revenue(m, instance, alloc) -> None:
    """``m.capacity[leg]`` (seats of ``alloc(m, j)`` per leg <= ``m.capacity_seats``) and the
    objective ``m.revenue`` = max sum_j fare[j] * expected_sales[j]."""
    import pyomo.environ as pyo

    m.capacity = pyo.Constraint(m.LEGS, rule=capacity_rule(leg_products(instance), alloc))
    m.revenue = pyo.Objective(expr=sum(m.fare[j] * m.expected_sales[j] for j in m.PRODUCTS),
                              sense=pyo.maximize)
