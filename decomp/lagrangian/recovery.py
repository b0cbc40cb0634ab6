"""A feasible allocation from a dual point, and its expected revenue.

y = x(pi) - w (A^T d): the allocation the dual's linear model predicts at the
next iterate pi + d (d the projected step actually available, so held legs
drop to 0). Its loads equal the capacities on the free legs to first order.
One more Newton correction with the same factorization makes them equal to
second order: with r = c - A y, solve (A W A^T) mu = r on the free legs and take
y + W A^T mu (W = diag(w)), the allocation the linear model predicts after one
more step, at no more cost than a solve. y is then clipped to [0, u] and made
feasible: products on overloaded legs are scaled down by the smallest
capacity / load over their legs (or, with kinks, the cheapest seats on each
overloaded leg are cut), and two rounds of filling give back room the cuts freed,
each product up to its predicted allocation, in proportion on every leg.

Why this closes the gap when the dual converges: as pi_k -> pi*, x(pi_k)
tends to a primal optimum x* with A x* <= c, the predicted step d_k -> 0, so
y_k -> x* and the scaling factors -> 1; the expected revenue is continuous, so
F(y_k) -> F(x*) = q(pi*) (strong duality for the concave PNLP).
"""

from __future__ import annotations

import numpy as np

#: Rounds of giving back room freed by the cuts (:func:`_fill`).
FILL_ROUNDS = 2
#: Rounds of :func:`_fill_dearest` (room a product's other legs kept it from taking goes
#: to the next product in the following round).
DEAREST_ROUNDS = 4


def recover(net, pt, dirn=None, system=None, both=True):
    """(y, revenue of y) for the dual point ``pt`` and the Newton direction ``dirn`` (with
    ``system``, the factorization it was solved with, for the second correction): the
    better of the predicted allocation and x(pi) itself, each made feasible. (The
    prediction is first-order: where a product's curvature is extreme, as for
    near-deterministic demand, or the step is damped, x(pi) can be the better one.)
    ``both=False``: the predicted one only (large instances recover only near the
    optimum, where it is the better one; each candidate costs a pass over the products)."""
    if dirn is None:
        return _feasible(net, pt.x.copy())
    step = np.maximum(pt.pi + dirn.d, dirn.lower) - pt.pi
    y = pt.x - pt.w * net.to_products(net.AT_g @ step)
    if system is not None:
        y = _second_correction(net, pt, dirn, system, y)
    predicted = _feasible(net, y)
    if not both:
        return predicted
    plain = _feasible(net, pt.x.copy())
    return predicted if predicted[1] >= plain[1] else plain


def _second_correction(net, pt, dirn, system, y):
    """y + W A^T mu with (A W A^T) mu = c - A y on the free legs (the factorization of the
    direction, reused), clipped to [0, u]."""
    np.clip(y, 0.0, net.upper, out=y)
    free = ~dirn.fixed
    if not np.any(free):
        return y
    scale = 1.0 / np.sqrt(dirn.curvature)
    rhs = scale * (net.cap - net.load(y))
    rhs[~free] = 0.0
    u = system.solve_again(rhs[:, None])
    if u is None:
        return y
    mu = scale * u[:, 0]
    mu[~free] = 0.0
    y = y + pt.w * net.to_products(net.AT_g @ mu)
    return np.clip(y, 0.0, net.upper, out=y)


def _feasible(net, y):
    np.clip(y, 0.0, net.upper, out=y)
    target = y.copy()
    load = net.load(y)
    over = load > net.cap
    kinks = net.products.has_kinks
    if np.any(over):
        if kinks:
            # piecewise-linear products: an overload is usually one fractional product's
            # doing, and scaling would also cut the full ones beside it
            y = _cut_cheapest(net, y, load, over)
        else:
            y = scale_to_capacity(net, y, load, over)
        for _ in range(FILL_ROUNDS):
            y = _fill(net, y, target)
    if kinks:
        for _ in range(DEAREST_ROUNDS):
            y = _fill_dearest(net, y)
    return y, net.revenue(y)


def _cut_cheapest(net, y, load, over):
    """On each overloaded leg, take the excess from the products whose next seat is
    worth least (f S'(y), the right derivative), cheapest first; a product on several
    overloaded legs keeps the smallest of what they leave it. Vectorized over the
    (overloaded leg, product) pairs, which are few near the optimum."""
    legs = np.flatnonzero(over)
    rows = net.A_g[legs].tocoo()
    leg, prod = _leg_product_pairs(net, legs[rows.row], rows.col)
    value = net.products.marginal_value(prod, y[prod])
    order = np.lexsort((value, leg))                         # by leg, then by value per seat
    prod, leg = prod[order], leg[order]
    amount = y[prod]
    before = _ahead_on_leg(leg, amount)
    excess = (load - net.cap)[leg] * (1.0 + 1e-12) + 1e-15 * np.maximum(net.cap[leg], 1.0)
    cut = np.clip(excess - before, 0.0, amount)
    keep = np.ones(len(y))
    frac = np.divide(amount - cut, amount, out=np.zeros_like(amount), where=amount > 0)
    np.minimum.at(keep, prod, frac)
    return y * keep


def _fill_dearest(net, y):
    """Room left on legs goes to the products whose next seat is worth most (f S'(y), the
    right derivative), dearest first on each leg, each product taking the smallest of
    what its legs allow (so no leg is overfilled). Expected sales never fall when a
    product gets more seats, so this never lowers the revenue; with piecewise-linear
    products it settles the split of a leg's last seats, which the dual leaves open
    (where the bid prices have converged and an LP would be too large to solve)."""
    room = net.cap - net.load(y)
    has = room > 1e-12 * np.maximum(net.cap, 1.0)
    if not np.any(has):
        return y
    # the groups whose every leg has room, and their products below the bound
    every_leg = np.ones(net.n, dtype=bool)
    open_groups = np.flatnonzero(smallest_over_legs(net, np.where(has, 1.0, 0.0), every_leg) > 0)
    rows = net.A_g[:, open_groups].tocoo()
    if rows.nnz == 0:
        return y
    leg, prod = _leg_product_pairs(net, rows.row, open_groups[rows.col])
    # at most what the product's fullest leg leaves it
    reach = net.to_products(smallest_over_legs(net, np.maximum(room, 0.0), every_leg))
    amount = np.minimum(np.maximum(net.upper[prod] - y[prod], 0.0), reach[prod])
    value = net.products.marginal_value(prod, y[prod])
    order = np.lexsort((-value, leg))                        # by leg, then dearest seat first
    prod, leg, amount = prod[order], leg[order], amount[order]
    before = _ahead_on_leg(leg, amount)
    allowed = np.clip(room[leg] * (1.0 - 1e-12) - before, 0.0, amount)
    add = np.full(len(y), np.inf)
    np.minimum.at(add, prod, allowed)
    add[~np.isfinite(add)] = 0.0
    return y + add


def _leg_product_pairs(net, leg, groups):
    """The (leg, product) pairs of the given (leg, group) pairs: each group's products."""
    ptr, members = net.products_by_group()
    counts = ptr[groups + 1] - ptr[groups]
    starts = np.repeat(ptr[groups], counts)
    prod = members[starts + np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)]
    return np.repeat(leg, counts), prod


def _ahead_on_leg(leg, amount):
    """For pairs sorted by leg: the amount of the pairs before each one on its leg."""
    start = np.flatnonzero(np.r_[True, leg[1:] != leg[:-1]])
    csum = np.cumsum(amount)
    first = np.repeat(start, np.diff(np.r_[start, len(leg)]))
    return csum - amount - (csum[first] - amount[first])


def within_capacity(net, y):
    """(y with every product on an overloaded leg scaled back, its exact revenue): for an
    allocation that is feasible up to rounding (an LP's tolerance, a carried slack)."""
    load = net.load(y)
    over = load > net.cap
    if np.any(over):
        y = scale_to_capacity(net, y, load, over)
    return y, net.revenue(y)


def scale_to_capacity(net, y, load, over):
    """y with every product on an overloaded leg scaled down by the smallest
    capacity / load over its legs (which makes it feasible)."""
    return y * net.to_products(smallest_over_legs(net, net.cap[over] / load[over] * (1.0 - 1e-14), over))


def smallest_over_legs(net, ratio_on, legs):
    """Per group: the smallest of a per-leg factor (1 on legs outside ``legs``) over its legs."""
    ratio = np.ones(net.n + 1)                # index -1 (no leg in that position) stays 1
    ratio[:-1][legs] = ratio_on
    return ratio[net.Mg - 1].min(axis=1)


def _fill(net, y, target):
    """Raise y toward target where every leg of the product has room, in proportion."""
    want = np.maximum(target - y, 0.0)
    want_g = net.to_groups(want)
    if not np.any(want_g > 0):
        return y
    room = np.maximum(net.cap - net.load(y), 0.0)
    asked = net.A_g @ want_g
    share = np.where(asked > room, room / np.where(asked > 0, asked, 1.0) * (1.0 - 1e-14), 1.0)
    frac = smallest_over_legs(net, share, np.ones(net.n, dtype=bool))
    return y + want * net.to_products(frac)
