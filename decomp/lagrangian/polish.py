"""An exact primal completion for the piecewise-linear segments, by a small LP.

Near the dual optimum, every segment (:mod:`.segments`) whose reduced revenue
g = r - a is clearly positive is full at every primal optimum paired with
these bid prices, and every one with g clearly negative is empty; only the
segments with g near 0 are undetermined, and the dual says nothing about how
to split capacity among them (that is the degenerate, LP-like part of the
PNLP). With the smooth products held at their recovered allocation, the
remaining segments get their optimal split from the linear program

    max sum r_k y_k  s.t.  (A y)_i <= c_i - (load of the rest)_i,  0 <= y_k <= w_k,

solved by HiGHS (through scipy.optimize.linprog). The result is feasible by
construction; its exact revenue is the lower bound, as in :mod:`.recovery`.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

#: A segment's reduced revenue within this fraction of its product's fare counts as undetermined.
THRESHOLD = 1e-6
#: Largest LP (undetermined segments) tried; smooth parts join it up to this many products.
MAX_COLUMNS = 200_000
#: How far (seats, times 1 + allocation) the LP may move a smooth product's allocation.
SMOOTH_MOVE = 1e-4


def complete(net, pt, y_recovered):
    """A feasible allocation with the segments' split chosen by the LP, or None."""
    seg = net.segments
    if not len(seg):
        return None
    a = net.to_products(pt.a_g)
    fare = net.sub.fare
    g = seg.slope - a[seg.prod]
    theta = THRESHOLD * fare[seg.prod]
    open_ = np.abs(g) <= theta
    if open_.sum() > MAX_COLUMNS:
        return None
    full = g > theta
    n = net.n_products
    seg_width = np.bincount(seg.prod, weights=seg.width, minlength=n)
    smooth = np.maximum(y_recovered - seg_width, 0.0)          # the allocation outside segments
    fixed = smooth + np.bincount(seg.prod, weights=seg.width * full, minlength=n)
    room = net.cap - net.A_g @ net.to_groups(fixed)
    if np.any(room < -1e-9 * np.maximum(net.cap, 1.0)):
        return None
    room = np.maximum(room, 0.0)
    cols = np.flatnonzero(open_)
    # columns: the open segments, then small moves of the smooth parts (linearized: their
    # exact revenue is computed afterwards), which let the LP give back slack on priced legs
    owners = seg.prod[cols]
    price = seg.slope[cols]
    lo, hi = np.zeros(len(cols)), seg.width[cols]
    if n <= MAX_COLUMNS:
        movable = np.flatnonzero(smooth > 0)
        move = SMOOTH_MOVE * (1.0 + smooth[movable])
        slope = fare[movable] * net.sub.marginal_sales(np.maximum(fixed, 0.0))[0][movable]
        owners = np.r_[owners, movable]
        price = np.r_[price, slope]
        lo = np.r_[lo, -np.minimum(move, smooth[movable])]
        hi = np.r_[hi, np.minimum(move, np.maximum(net.upper[movable] - fixed[movable], 0.0))]
    if len(owners) == 0:
        return _feasible(net, fixed)
    col, leg = _product_legs(net, owners)
    A = sp.csr_matrix((np.ones(len(col)), (leg, col)), shape=(net.n, len(owners)))
    from scipy.optimize import linprog

    res = linprog(-price, A_ub=A, b_ub=room, bounds=np.column_stack([lo, hi]),
                  method="highs", options={"primal_feasibility_tolerance": 1e-10,
                                           "dual_feasibility_tolerance": 1e-10})
    if res.status != 0:
        return None
    return _feasible(net, fixed + np.bincount(owners, weights=np.clip(res.x, lo, hi), minlength=n))


def _feasible(net, y):
    """y with the rare product on an overloaded leg scaled back (rounding, HiGHS's
    feasibility tolerance), and its exact revenue."""
    load = net.A_g @ net.to_groups(y)
    over = load > net.cap
    if np.any(over):
        from .recovery import _smallest_over_legs

        y *= net.to_products(_smallest_over_legs(net, net.cap[over] / load[over] * (1.0 - 1e-14), over))
    return y, net.revenue(y)


def _product_legs(net, products):
    """(column index, leg) pairs: column c uses every leg of product products[c]."""
    groups = net.group_of(products)
    legs = net.Mg[groups] - 1                                  # -1 where no leg
    c, k = np.nonzero(legs >= 0)
    return c, legs[c, k]
