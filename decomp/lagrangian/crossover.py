"""Bid prices from a primal allocation: the optimality conditions as a small LP.

An allocation x is optimal for the PNLP if and only if there are bid prices
pi >= 0, zero on every leg with room left, whose sums a = A^T pi lie in each
product's supergradient interval (the KKT conditions of a concave program
with linear constraints):

    f_j S_j'(x_j+) <= a_j <= f_j S_j'(x_j-)      (a_j >= f_j S_j'(0+) where x_j = 0).

For smooth products the interval is a point; at a kink (a whole seat of
Poisson or negative-binomial demand, the mean of std = 0 demand) it is wide,
and that is where the dual method's smoothing is slow to settle the bid
prices. Given the completion's allocation (:mod:`.polish`), near optimal,
the LP

    min sum_j s_j / f_j   s.t.  lo_j - s_j <= a_j <= hi_j + s_j,  pi >= 0,
                                pi_i = 0 on legs with room,

finds the bid prices that violate these conditions least (the intervals are
widened by a relative 1e-7 of x_j on each side, so an allocation within
rounding of a kink gets the kink's interval). Whatever it returns is only a
candidate: the loop evaluates the exact dual there, an upper bound at any
pi >= 0 (weak duality), and keeps it only if it is lower.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

#: The supergradient interval is taken over [x - EPS (1 + x), x + EPS (1 + x)].
EPS = 1e-6
#: A leg whose load is below capacity by more than this (relative) has room: its bid price is 0.
ROOM = 1e-7
#: Largest number of products the LP is built for.
MAX_PRODUCTS = 200_000


def prices_from_allocation(net, y):
    """Bid prices (per live leg) closest to satisfying the optimality conditions at ``y``, or None."""
    P = net.n_products
    if P == 0 or P > MAX_PRODUCTS:
        return None
    fare = net.sub.fare
    eps = EPS * (1.0 + y)
    lo = fare * net.sub.marginal_sales(y + eps)[0]
    hi = fare * net.sub.marginal_sales(np.maximum(y - eps, 0.0))[1]
    hi = np.where(y <= eps, np.inf, hi)
    room = net.load(y) < net.cap - ROOM * (1.0 + net.cap)
    # columns: pi (legs), then s (products); rows: a - s <= hi and -a - s <= -lo
    At = _product_rows(net)
    eye = sp.identity(P, format="csr")
    finite = np.isfinite(hi)
    A_ub = sp.vstack([sp.hstack([At[finite], -eye[finite]]), sp.hstack([-At, -eye])]).tocsr()
    b_ub = np.concatenate([hi[finite], -lo])
    cost = np.concatenate([np.zeros(net.n), 1.0 / fare])
    upper = np.concatenate([np.where(room, 0.0, np.inf), np.full(P, np.inf)])
    from scipy.optimize import linprog

    res = linprog(cost, A_ub=A_ub, b_ub=b_ub, bounds=np.column_stack([np.zeros(net.n + P), upper]),
                  method="highs")
    if res.status != 0:
        return None
    return np.maximum(res.x[:net.n], 0.0)


def _product_rows(net):
    """A^T with one row per live product (its legs)."""
    groups = net.group_of(np.arange(net.n_products))
    return net.AT_g[groups]
