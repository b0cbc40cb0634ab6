"""An exact primal completion for the piecewise-linear segments, by a small LP.

Near the dual optimum, every segment (:mod:`.segments`) whose reduced revenue
g = r - a is clearly positive is full at every primal optimum paired with
these bid prices, and every one with g clearly negative is empty; only the
segments with g near 0 are undetermined, and the dual says nothing about how
to split capacity among them (that is the degenerate, LP-like part of the
PNLP). They get their split from the linear program

    max sum r_k y_k  s.t.  (A y)_i <= c_i - (load of the rest)_i,  0 <= y_k <= w_k,

solved by HiGHS (through scipy.optimize.linprog), in which the smooth part of
each product may move along chords of its expected revenue around where the
subproblems (or the recovery) put it: breakpoints dense near that point, so
the LP can trade seats between smooth products and segments. Chords lie below
the concave revenue, so the exact revenue of the result is at least the LP's
value; the result is feasible by construction, and its exact revenue is the
lower bound, as in :mod:`.recovery`.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from .recovery import within_capacity

#: A segment's reduced revenue within this fraction of its product's fare counts as undetermined.
THRESHOLD = 1e-3
#: Largest LP (undetermined segments) tried; the smooth parts' chords join it within about
#: this many columns (fewer levels for more products; none above a quarter of it).
MAX_COLUMNS = 200_000
#: Chord pieces of a smooth part around its allocation s: breakpoints s (1 - t) below it
#: (down to 0, so the LP can always make room), s + SPAN (1 + s) t and s + (u - s) t above
#: it (up to the product's bound u), for t = 2^-LEVELS, ..., 1/2, 1 (fine near s, where the
#: optimum is once pi is close; coarse far from it, where the LP can still move it).
SPAN = 1e-3
LEVELS = 20


@dataclasses.dataclass(frozen=True, eq=False)
class Plan:
    """The LPs :func:`complete` solves at one dual point, decided before they run."""

    open_: np.ndarray     # per segment: undetermined (an LP column)
    full: np.ndarray      # per segment: held full
    chords: bool          # the smooth parts join the LP as chord pieces
    sizes: list           # per LP, its columns (at most: chord pieces of zero width are dropped)


def plan(net, pt) -> Plan | None:
    """The LP completion at ``pt``, or None where there is none (no segments, or more
    undetermined segments than MAX_COLUMNS)."""
    if not len(net.segments):
        return None
    open_, full = _open_segments(net, pt)
    n_open = int(open_.sum())
    if n_open > MAX_COLUMNS:
        return None
    chords = net.n_products <= MAX_COLUMNS // 4
    movable = len(_smooth_products(net)) if chords else 0
    columns = n_open + movable * (3 * (_levels(movable) + 1) + 1)
    # two LPs: the smooth parts centred where the subproblems and where the recovery put them
    return Plan(open_=open_, full=full, chords=chords, sizes=[columns] * 2)


def complete(net, pt, y_recovered, plan):
    """(A feasible allocation with the segments' split chosen by the LPs of ``plan`` and
    its exact revenue, or None; the sizes, in columns, of the LPs solved for it)."""
    seg = net.segments
    seg_width = np.bincount(seg.prod, weights=seg.width, minlength=net.n_products)
    best, columns = None, []
    # the smooth parts beyond the segments, centred where the subproblems put them and
    # where the recovery did (feasible): the better completion is kept
    for y in (pt.x, y_recovered):
        found, size = _segment_lp(net, plan, np.maximum(y - seg_width, 0.0), seg_width)
        columns.append(size)
        if found is not None and (best is None or found[1] > best[1]):
            best = found
    return best, columns


def _open_segments(net, pt):
    """(undetermined segments, full segments): reduced revenue g = r - a within
    THRESHOLD of the fare, and clearly positive."""
    seg = net.segments
    g = seg.slope - net.to_products(pt.a_g)[seg.prod]
    theta = THRESHOLD * net.sub.fare[seg.prod]
    return np.abs(g) <= theta, g > theta


def _segment_lp(net, plan, smooth, seg_width):
    """The LP over the open segments and chord pieces of the smooth parts around
    ``smooth``: (allocation and revenue, or None; the LP's number of columns).

    Chords lie below the concave expected revenue, so the exact revenue of the
    LP's allocation is at least the LP's value (the pieces fill in order, their
    slopes decreasing); with the smooth parts fixed instead, as many products as
    there are segments would carry the whole error of the recovery."""
    seg, n = net.segments, net.n_products
    fixed = smooth + np.bincount(seg.prod, weights=seg.width * plan.full, minlength=n)
    cols = np.flatnonzero(plan.open_)
    owners, price, width = [seg.prod[cols]], [seg.slope[cols]], [seg.width[cols]]
    if plan.chords:
        movable, pieces, start = _chords(net, smooth, seg_width)
        for part, new in zip((owners, price, width), pieces):
            part.append(new)
        fixed[movable] += start - smooth[movable]
    owners, price, width = np.concatenate(owners), np.concatenate(price), np.concatenate(width)
    room = net.cap - net.load(fixed)
    if np.any(room < -1e-9 * np.maximum(net.cap, 1.0)):
        return None, 0
    room = np.maximum(room, 0.0)
    if len(owners) == 0:
        return within_capacity(net, fixed), 0
    col, leg = _product_legs(net, owners)
    A = sp.csr_matrix((np.ones(len(col)), (leg, col)), shape=(net.n, len(owners)))
    from scipy.optimize import linprog

    res = linprog(-price, A_ub=A, b_ub=room, bounds=np.column_stack([np.zeros(len(width)), width]),
                  method="highs", options={"primal_feasibility_tolerance": 1e-10,
                                           "dual_feasibility_tolerance": 1e-10})
    if res.status != 0:
        return None, len(owners)
    return within_capacity(net, fixed + np.bincount(owners, weights=np.clip(res.x, 0.0, width), minlength=n)), len(owners)


def _chords(net, smooth, seg_width):
    """(products, (owner, slope, width) of their chord pieces, the first breakpoint of
    each): the pieces of every smooth part around ``smooth`` (see SPAN and LEVELS), with
    3 (levels + 1) + 1 pieces per product, as many levels as MAX_COLUMNS allows."""
    movable = _smooth_products(net)
    t = 2.0 ** -np.arange(_levels(len(movable)) + 1)
    s_m = smooth[movable]
    top = np.maximum(net.upper[movable] - seg_width[movable], s_m)
    above = np.sort(np.concatenate([s_m + SPAN * (1.0 + s_m) * t[:, None], s_m + (top - s_m) * t[:, None]]),
                    axis=0)
    points = np.clip(np.concatenate([s_m * (1.0 - t[:, None]), s_m[None, :], above]), 0.0, top)
    # a smooth part lies beyond its product's segments: S at the whole allocation
    sales = net.sub.expected_sales_of(movable, points + seg_width[movable])
    widths = np.diff(points, axis=0)
    gains = net.sub.fare[movable] * np.diff(sales, axis=0)
    keep = widths > 0
    pieces = (np.broadcast_to(movable, widths.shape)[keep], gains[keep] / widths[keep], widths[keep])
    return movable, pieces, points[0]


def _levels(movable):
    """Chord levels for this many smooth products: as many as MAX_COLUMNS allows."""
    return min(LEVELS, max(0, (MAX_COLUMNS // max(movable, 1) - 4) // 3))


def _smooth_products(net):
    """The products with a smooth part (normal and gamma demand with std > 0)."""
    sub = net.sub
    if sub.all_normal:
        return np.arange(net.n_products)
    return np.sort(np.concatenate([sub.i_norm, sub.i_gam])).astype(np.int64)


def _product_legs(net, products):
    """(column index, leg) pairs: column c uses every leg of product products[c]."""
    groups = net.group_of(products)
    legs = net.Mg[groups] - 1                                  # -1 where no leg
    c, k = np.nonzero(legs >= 0)
    return c, legs[c, k]
