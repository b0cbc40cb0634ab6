"""The single-leg dynamic program over booking periods, and its bid-price table.

With ``x`` seats left at the start of period ``t`` (periods ``0 .. T-1``),
``p[t, j]`` the probability of a request for product ``j`` in period ``t`` and
``r[t, j]`` what accepting it earns on this leg (Talluri and van Ryzin 2004,
section 3.4; their equation with at most one request per period):

    V_T(x) = 0,   V_t(0) = 0,
    V_t(x) = V_{t+1}(x) + sum_j p[t, j] * max(0, r[t, j] - (V_{t+1}(x) - V_{t+1}(x - 1))).

The bid price of the x-th seat in period ``t`` is ``V_{t+1}(x) - V_{t+1}(x - 1)``:
a request in period ``t`` with ``x`` seats left is worth accepting when it
earns at least that. The table holds it for ``x = 1 .. C`` (``x = 0`` is
closed: +inf).

Vectorized over seats and products with the products sorted by revenue: for
each ``x`` the sum runs over the products whose revenue is above the seat's
value, which is a tail of the sorted order; with prefix sums of ``p`` and
``p * r`` in that order each step costs ``O(J + C log J)`` instead of
``O(J C)``. A period whose requests on this leg add up to more than one is
taken in ``m`` equal steps of ``p / m`` (:func:`decomp.dynamic.demand.steps_per_period`).
"""

from __future__ import annotations

import dataclasses

import numpy as np


@dataclasses.dataclass(frozen=True, eq=False)
class LegSolution:
    """``bid[t, x]``: the bid price of the x-th seat in period ``t`` (``(T, C + 1)``, ``bid[:, 0] = inf``);
    ``value``: ``V_0(C)``, the leg's expected revenue from its capacity; ``steps``: steps per period."""

    bid: np.ndarray
    value: float
    steps: np.ndarray


def _tail_sums(prob, revenue):
    """Revenue sorted ascending per period, and the sums of ``p`` and ``p r`` over each sorted tail.

    Returns ``(r_sorted (T, J), p_tail (T, J + 1), pr_tail (T, J + 1))`` with
    ``p_tail[t, k] = sum of p over sorted positions >= k`` (0 at ``k = J``).
    """
    T, J = prob.shape
    if revenue.ndim == 1:
        order = np.argsort(revenue, kind="stable")
        r_sorted = np.broadcast_to(revenue[order], (T, J))
        p_sorted = prob[:, order]
    else:
        order = np.argsort(revenue, axis=1, kind="stable")
        r_sorted = np.take_along_axis(revenue, order, axis=1)
        p_sorted = np.take_along_axis(prob, order, axis=1)
    p_tail = np.zeros((T, J + 1))
    pr_tail = np.zeros((T, J + 1))
    p_tail[:, :J] = np.cumsum(p_sorted[:, ::-1], axis=1)[:, ::-1]
    pr_tail[:, :J] = np.cumsum((p_sorted * np.maximum(r_sorted, 0.0))[:, ::-1], axis=1)[:, ::-1]
    return r_sorted, p_tail, pr_tail


def solve_leg(capacity: int, prob: np.ndarray, revenue: np.ndarray, steps: np.ndarray | None = None) -> LegSolution:
    """Backward recursion of one leg (see the module docstring).

    ``prob``: (T, J) request probabilities of the leg's products per period;
    ``revenue``: (J,) or (T, J) what each earns on the leg; ``steps``: (T,)
    steps per period (default one).
    """
    C = int(capacity)
    prob = np.asarray(prob, dtype=np.float64)
    revenue = np.asarray(revenue, dtype=np.float64)
    T, J = prob.shape
    steps = np.ones(T, dtype=np.int64) if steps is None else np.asarray(steps, dtype=np.int64)
    bid = np.empty((T, C + 1))
    bid[:, 0] = np.inf
    V = np.zeros(C + 1)                       # V_{t+1}(0..C); V(0) stays 0
    if J == 0 or C == 0:
        bid[:, 1:] = 0.0
        return LegSolution(bid=bid, value=0.0, steps=steps)
    r_sorted, p_tail, pr_tail = _tail_sums(prob, revenue)
    for t in range(T - 1, -1, -1):            # a Python step per period (and per sub-step); numpy over seats
        m = int(steps[t])
        rs, pt, prt = r_sorted[t], p_tail[t] / m, pr_tail[t] / m
        for s in range(m):
            dv = np.diff(V)                   # value of the x-th seat, x = 1..C
            if s == 0:
                bid[t, 1:] = dv
            k = np.searchsorted(rs, dv, side="right")      # products at sorted positions >= k earn more than dv
            V[1:] += prt[k] - dv * pt[k]
    return LegSolution(bid=bid, value=float(V[C]), steps=steps)
