"""The piecewise-linear PNLP: expected sales replaced by K chords, an LP.

For each product ``j`` the concave expected-sales curve S_j(x) =
E[min(max(D_j, 0), x)] is interpolated between breakpoints at demand quantiles

    b_0 = 0,  b_k = max(0, mean_j + std_j * Phi^{-1}(k / (K + 1))),  k = 1..K,

and the allocation is split into segment variables ``y[j, k]`` in [0, w_jk]
(w_jk = b_k - b_{k-1}) with slopes s_jk = (S_j(b_k) - S_j(b_{k-1})) / w_jk.
S_j is concave, so the slopes decrease and the LP fills the segments in order
without binary variables: sum_k s_jk y_jk is the interpolant at x_j = sum_k
y_jk. The interpolant lies below S_j (chords of a concave curve) and stops at
b_K, so the PWL optimum is at most the PNLP optimum and approaches it as K
grows. Products with std = 0 get one segment [0, mean] of slope 1 (their
other segments have width 0). For products of another demand family the
breakpoints are still placed at normal quantiles of their mean and std, and
S_j is that family's expected sales (chords of a concave curve all the same).

The segment table (breakpoints, widths, slopes) is :func:`decomp.segments.segments`, shared
with the array method and the certificate; :func:`build` is the Pyomo model on top of it.
"""

from __future__ import annotations

import numpy as np

from decomp.segments import segments

from .common import add_capacity_and_revenue, paused_gc


def build(instance, K: int = 16):
    """The PWL PNLP as a Pyomo ConcreteModel.

    Components: ``LEGS``, ``PRODUCTS``, ``SEGMENTS``; variables ``y[j, k]``
    (seats allocated to product j on segment k, bounded by the segment width);
    Expressions ``allocation[j]`` = sum_k y[j, k] and ``expected_sales[j]`` =
    sum_k slope * y[j, k]; constraints ``capacity[leg]``; objective ``revenue``.
    """
    import pyomo.environ as pyo

    _, width, slope = segments(instance, K)
    pids = instance.product_ids.tolist()
    lids = instance.leg_ids.tolist()
    fare = instance.fare.tolist()
    w = width.tolist()
    s = slope.tolist()
    with paused_gc():            # Pyomo's build is quadratic with the cyclic GC on
        m = pyo.ConcreteModel(name=f"pwl[{instance.name}, K={K}]")
        m.LEGS = pyo.Set(initialize=lids, ordered=True)
        m.PRODUCTS = pyo.Set(initialize=pids, ordered=True)
        m.SEGMENTS = pyo.RangeSet(1, K)
        pos = {p: i for i, p in enumerate(pids)}
        m.fare = pyo.Param(m.PRODUCTS, initialize=dict(zip(pids, fare)))
        m.width = pyo.Param(m.PRODUCTS, m.SEGMENTS,
                            initialize=lambda m, j, k: w[pos[j]][k - 1])
        m.slope = pyo.Param(m.PRODUCTS, m.SEGMENTS,
                            initialize=lambda m, j, k: s[pos[j]][k - 1])
        m.capacity_seats = pyo.Param(m.LEGS, initialize=dict(zip(lids, instance.capacity.tolist())))
        m.y = pyo.Var(m.PRODUCTS, m.SEGMENTS, bounds=lambda m, j, k: (0.0, m.width[j, k]))
        m.allocation = pyo.Expression(m.PRODUCTS, rule=lambda m, j: sum(m.y[j, k] for k in m.SEGMENTS))
        m.expected_sales = pyo.Expression(
            m.PRODUCTS, rule=lambda m, j: sum(m.slope[j, k] * m.y[j, k] for k in m.SEGMENTS))
        add_capacity_and_revenue(m, instance, lambda m, j: m.allocation[j])
    return m


def allocation(m, instance) -> np.ndarray:
    """The allocation per product (aligned with ``instance.product_ids``) from a solved model."""
    import pyomo.environ as pyo

    return np.array([pyo.value(m.allocation[j]) for j in instance.product_ids.tolist()], dtype=np.float64)
