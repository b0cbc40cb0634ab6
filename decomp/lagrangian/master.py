"""The restricted problem near the optimum, and the pricing that keeps it exact.

Near the dual optimum most kinks are clearly full (slope r_k well above the product's
bid-price sum a_j) or clearly empty (well below); only kinks near a_j can change. The
restricted problem ("master") fixes the others at their bounds and keeps as variables:

- the kinks with |log(r_k / a_j)| <= MARGIN at the bid prices it is built from;
- the smooth part of every normal and gamma product (beyond its jump, if any), except
  products whose jump is fixed empty (they are closed: x = 0), bounded where its
  expected spill falls to a share FLAT_SHARE tol of its most sales (:func:`flat_share`);

with the capacities reduced by the fixed kinks' seats, and each smooth part capped at its
allocation a little below its bid-price sum (:data:`SMOOTH_MARGIN`, :func:`first_caps`).
It is a smaller PNLP, solved by
the interior-point method (:mod:`.interior`). Fixing a kink at a bound is exact when
the bid prices the master ends with still put it there: a full kink must have
r_k >= a_j, an empty one r_k <= a_j (the complementary slackness of its bound). So
:func:`price` checks every fixed kink at the master's bid prices with one binary search
per product (:meth:`decomp.distributions.KinkTable.above`); if none is violated, the
master's optimality conditions are the whole problem's (the certified gap confirms it),
else the violated products' windows grow and the master is solved again (column
generation: finite, as every round frees kinks and none is fixed again). A smooth part's cap
is exact in the same way: where the product's own response at the master's bid prices stays
below it, the cap is not binding; where it reaches the cap, pricing lifts it (the cap
becomes the flat tail's) and the master is solved again.
"""

from __future__ import annotations

import dataclasses

import numpy as np

#: Kinks within this distance of a_j in log(a) are free in the first master.
MARGIN = 0.05
#: A fixed kink's slope may be on the wrong side of a_j by this relative amount (rounding).
PRICE_TOL = 1e-12
#: A smooth part's seats count in the master only up to where the product's expected spill
#: is FLAT_SHARE tol of its most sales S(inf) (scaled down where the revenue is below the
#: demand's worth, :func:`flat_share`): the seats beyond add at most FLAT_SHARE tol of the revenue
#: together, so the master's optimum is that close to the whole problem's (the certificate
#: is the whole problem's in any case). Without the bound a product whose legs all have
#: room drifts out into its demand's upper tail as the barrier level falls (its bid-price
#: sum falls with the level, and the fractile moves about 1/z standard deviations per
#: Newton step there), which took the interior-point method about half its iterations on
#: low-CV normal demand.
FLAT_SHARE = 1e-3
#: A leg's capacity left by the fixed kinks must be at least this fraction of it (else the
#: full kinks of its products are freed, the last ones first: one per product, then two more,
#: four, ...): the master needs room for its interior. (Freeing whole tables at once made the
#: first master of a held-out network of 52,692 negative binomial products, nearly slack legs,
#: 969,290 kinks where 16,804 were asked; HiGHS did not finish it in 10 minutes.)
ROOM = 1e-6
#: A smooth part's seats count in the master only up to the product's response to its
#: bid-price sum SMOOTH_MARGIN lower in log(a) (a e^-0.5, 61 % of it) at the bid prices the
#: first master is built from. Beyond that the revenue of low-CV and gamma demand is nearly
#: flat: a part that strays there (its slope ~0 against a bid-price sum a) has a Newton step
#: of a / curvature, thousands of seats, which blocked the interior-point method's steps
#: (p100k low-CV seed 14: 52 of its 71 iterations in the master, 20 with the caps). A
#: margin of 0.25 bound more often (more rounds), 1.0 helped less.
SMOOTH_MARGIN = 0.5
#: ... and CAP_FLOOR of its fare lower still: a product whose legs are nearly free (a near
#: 0) sits far out in its flat tail, where its response moves far for a small change of a.
CAP_FLOOR = 0.01
#: A cap counts as reached where the product's response is within this share of it.
CAP_TOL = 1e-9


@dataclasses.dataclass(eq=False)
class Master:
    """Which kinks are fixed or free, and the master's variables."""

    lo: np.ndarray          # per kink owner: kinks [0, lo) fixed full
    hi: np.ndarray          # per kink owner: kinks [hi, K) fixed empty
    fixed_x: np.ndarray     # per product: seats of its fixed-full kinks
    capacity: np.ndarray    # per leg: capacity minus the fixed seats
    kink: np.ndarray        # flat indices of the free kinks in the kink table
    kink_owner: np.ndarray  # their products
    smooth: np.ndarray      # products whose smooth part is a variable
    offset: np.ndarray      # their jump (the smooth part starts there)
    room: np.ndarray        # their variable's upper bound (from the offset to the cap or flat tail)
    caps: np.ndarray | None = None   # per product: the cap on its allocation (inf: none)

    @property
    def size(self) -> int:
        return len(self.kink) + len(self.smooth)


def first_windows(net, pi):
    """(lo, hi) per kink owner: the kinks within MARGIN of a_j in log(a) free."""
    k = net.products.kinks
    a = np.maximum(net.to_products(net.AT_g @ pi)[k.owner], 1e-300)
    # counts near the exact ones at a: checked first (see KinkTable.above), few owners move
    lo = k.above(a * np.exp(MARGIN), purpose="exact")
    hi = k.above(a * np.exp(-MARGIN), lo=lo, purpose="exact")
    return lo, hi


def first_caps(net, pi):
    """Per product: the most seats (its whole allocation) the first master gives it, its
    response to a e^-SMOOTH_MARGIN at bid prices ``pi`` for smooth products, inf for the
    others; None without smooth products."""
    products = net.products
    if not len(products.i_smooth):
        return None
    a = net.to_products(net.AT_g @ pi)
    lower = a * np.exp(-SMOOTH_MARGIN) - CAP_FLOOR * net.fare
    x = products.respond(np.maximum(lower, 0.0)).x
    caps = np.full(net.n_products, np.inf)
    # (no cap where the lower sum is 0: the response there is the most the product takes)
    capped = products.i_smooth[lower[products.i_smooth] > 0]
    caps[capped] = x[capped]
    return caps


def flat_share(net, tol, revenue):
    """The share of its most sales S(inf) a smooth part's expected spill may keep in the
    master: FLAT_SHARE tol, times ``revenue`` (a feasible allocation's) over the smooth
    products' worth sum f S(inf) where that is larger, so that the seats left out are worth
    at most FLAT_SHARE tol of the revenue. None (no bound) where that revenue is 0: no share
    of the worth is that small (a share of 0 put the bound at log(0))."""
    worth = net.products.smooth_worth()
    scale = min(1.0, max(revenue, 0.0) / worth) if worth > 0 else 1.0
    return FLAT_SHARE * tol * scale if scale > 0 else None


def build(net, lo, hi, share=None, caps=None) -> Master:
    """The master with the given windows (grown where the fixed seats leave a leg no room),
    its smooth parts bounded where their spill is ``share`` of their most sales (None: not)
    and at ``caps`` (per product, its whole allocation; None: none)."""
    k = net.products.kinks
    lo = lo.copy()
    drop = 1
    while True:
        fixed_x = np.zeros(net.n_products)
        if len(k.owner):
            fixed_x[k.owner] = k.filled(lo)
        capacity = net.cap - net.load(fixed_x)
        tight = capacity <= ROOM * np.maximum(net.cap, 1.0)
        if not np.any(tight):
            break
        on_tight = net.to_products(net.AT_g @ tight.astype(np.float64)) > 0
        grow = on_tight[k.owner] & (lo > 0)
        if not np.any(grow):
            break                            # the fixed seats are not what fills it
        lo[grow] = np.maximum(lo[grow] - drop, 0)
        drop *= 2
    size = hi - lo
    row = np.repeat(np.arange(k.n_owners), size)
    kink = np.arange(int(size.sum())) - np.repeat(np.cumsum(size) - size, size) + np.repeat(k.ptr[:-1] + lo, size)
    products = net.products
    smooth = products.i_smooth
    top = net.upper if share is None else products.flat_from(share)
    if caps is not None:
        top = np.minimum(top, caps)
    # a smooth part with no room beyond its jump (the jump reaches the bound) is no variable
    smooth = smooth[top[smooth] - products.jump[smooth] > 1e-9 * np.maximum(top[smooth], 1.0)]
    jump = products.jump[smooth]
    if np.any(jump > 0):
        # a jump fixed empty closes the product (its smooth part lies beyond the jump)
        owner_row = products.kink_row(smooth)
        closed = (jump > 0) & (owner_row >= 0)
        closed[closed] = hi[owner_row[closed]] == 0
        smooth, jump = smooth[~closed], jump[~closed]
    smooth = np.sort(smooth)
    offset = products.jump[smooth]
    return Master(lo=lo, hi=hi, fixed_x=fixed_x, capacity=capacity, kink=kink, kink_owner=k.owner[row],
                  smooth=smooth, offset=offset, room=top[smooth] - offset, caps=caps)


def price(net, master, pi, caps=True):
    """(lo, hi, caps) that make every fixed kink consistent with bid prices ``pi`` and lift
    every cap the products' responses reach, or None when all already are (each product's
    count of kinks with r_k > a_j lies within its window, its response below its cap).
    ``caps=False``: the kinks only."""
    windows = _kink_windows(net, master, pi)
    lifted = _lifted_caps(net, master, pi) if caps else None
    if windows is None and lifted is None:
        return None
    lo, hi = windows if windows is not None else (master.lo, master.hi)
    return lo, hi, master.caps if lifted is None else lifted


def _kink_windows(net, master, pi):
    """(lo, hi) with every fixed kink consistent with ``pi``, or None when all already are."""
    k = net.products.kinks
    if not len(k.owner):
        return None
    a = np.maximum(net.to_products(net.AT_g @ pi)[k.owner], 1e-300)
    # (the certificate has just counted the exact kinks at a: that count is checked first)
    above = k.above(a * (1.0 - PRICE_TOL), purpose="exact")        # kinks surely profitable
    below = k.above(a * (1.0 + PRICE_TOL), purpose="exact")        # kinks surely not
    low_bad = below < master.lo                  # a fixed-full kink is unprofitable
    high_bad = above > master.hi                 # a fixed-empty kink is profitable
    if not (np.any(low_bad) or np.any(high_bad)):
        return None
    lo = np.where(low_bad, np.maximum(below - 1, 0), master.lo)
    hi = np.where(high_bad, np.minimum(above + 1, k.count), master.hi)
    return lo, hi


def _lifted_caps(net, master, pi):
    """The caps with every one the products' responses at ``pi`` reach lifted (inf), or
    None when none is reached."""
    if master.caps is None:
        return None
    x = net.response(pi)          # (the certificate has just evaluated the dual at pi)
    reached = np.isfinite(master.caps) & (x > 0) & (x >= master.caps * (1.0 - CAP_TOL))
    if not np.any(reached):
        return None
    caps = master.caps.copy()
    caps[reached] = np.inf
    return caps
