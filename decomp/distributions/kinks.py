"""The piecewise-linear parts of the product subproblems, as one table of kinks.

A product whose expected sales are piecewise linear (discrete demand: one piece per
whole seat; known demand: one piece up to the mean; the leading linear piece of a
low-CV normal or gamma product) has the dual term

    h(a) = sum_k w_k (r_k - a)^+,      slopes r_0 > r_1 > ... (decreasing), widths w_k,

a convex piecewise-linear function of its bid-price sum a with a kink at every r_k.
Its allocation is x(a) = sum_{k: r_k > a} w_k. The table keeps, per owner product,
its slopes in decreasing order and the prefix sums of w and r w, so that one binary
search gives the exact term at any a (:meth:`KinkTable.exact`).

The smoothed term (:meth:`KinkTable.smoothed`) replaces each (r_k - a)^+ by
E[(R_k - a)^+] with R_k = r_k exp(theta Z - theta^2 / 2), Z standard normal: a
smoothing in log(a), mean-preserving, convex, smooth, and >= the exact term (Jensen),
exceeding it by at most about 0.4 theta r_k per kink and only near a = r_k. In closed
form (the lognormal partial expectation),

    E[(R - a)^+] = r Phi(d1) - a Phi(d2),   d1 = (log(r / a) + theta^2 / 2) / theta,   d2 = d1 - theta,

with allocation w Phi(d2) and curvature w phi(d2) / (a theta). Kinks with |d2| beyond
WINDOW are full or empty to double precision and are taken exactly from the prefix
sums, so a smoothed evaluation costs a binary search plus the few kinks near a.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
from scipy import special

from .. import threads as _threads

_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
#: Kinks with |d2| > WINDOW are full or empty to double precision (Phi(-8.5) ~ 1e-17).
WINDOW = 8.5
#: A smoothed evaluation takes the kinks inside the windows in blocks of about this many.
CHUNK = 1 << 20
#: From this many owners on, counts and smoothed terms run in slices of owners on threads
#: (p1m mix and low-CV: solve 5 to 6% faster on 2 threads; from 20,000 on, the p100k mix was
#: 10% slower).
THREADS_FROM = 200_000


@dataclasses.dataclass(frozen=True, eq=False)
class KinkResponse:
    """Per owner: allocation, curvature -dx/da (0 where exact), dual term; and the sum of
    (smoothed - exact) terms (0 when exact)."""

    x: np.ndarray
    w: np.ndarray
    value: np.ndarray
    excess: float


class KinkTable:
    """Kinks of a set of owner products, slopes decreasing per owner."""

    def __init__(self, owner, count, slope, width=None, unit=None):
        """``width`` per kink, or ``unit`` per owner when all of an owner's kinks share one
        width (whole seats; single kinks): then no array of the table's length is kept for
        the widths, nor for their prefix sums."""
        self.owner = np.asarray(owner, dtype=np.int64)
        count = np.asarray(count, dtype=np.int64)
        self.count = count
        self.ptr = np.zeros(len(count) + 1, dtype=np.int64)
        np.cumsum(count, out=self.ptr[1:])
        self.slope = np.asarray(slope, dtype=np.float64)
        if (width is None) == (unit is None):
            raise ValueError("give the widths per kink or per owner, not both")
        self._width = None if width is None else np.asarray(width, dtype=np.float64)
        self._unit = None if unit is None else np.asarray(unit, dtype=np.float64)
        #: the last counts found per purpose (a guess the next search checks first: between
        #: iterations most products keep their position among their kinks)
        self._last = {}

    # The prefix sums and widths below are computed on first use: a family's own table is
    # only concatenated into the products' table, which needs its own.
    @functools.cached_property
    def pp(self):
        """Where each owner's prefix sums start: they have K + 1 entries per owner, entry
        pp[o] + n the sum over its first n kinks."""
        return self.ptr[:-1] + np.arange(len(self.count))

    @property
    def width(self):
        """Per kink: its width (built from the owners' widths where those are kept)."""
        return np.repeat(self._unit, self.count) if self._width is None else self._width

    def widths(self, kinks):
        """The widths of the kinks ``kinks`` (indices into the table)."""
        if self._width is not None:
            return self._width[kinks]
        return self._unit[np.searchsorted(self.ptr, kinks, side="right") - 1]

    @functools.cached_property
    def cum_w(self):
        return self._prefix(self.width)

    @functools.cached_property
    def cum_rw(self):
        if self._width is not None:
            return self._prefix(self.slope * self._width)
        out = self._prefix(self.slope)
        if not np.all(self._unit == 1.0):
            out *= np.repeat(self._unit, self.count + 1)
        return out

    @functools.cached_property
    def unit(self):
        """Each owner's first width: when all its kinks share it (seats of discrete demand; a
        single kink), counting the kinks an allocation fills is a division."""
        if self._width is None:
            return np.where(self.count > 0, self._unit, 1.0)
        if not len(self._width):
            return np.ones(len(self.count))
        first = self._width[np.minimum(self.ptr[:-1], len(self._width) - 1)]
        return np.where(self.count > 0, first, 1.0)

    @functools.cached_property
    def uniform(self):
        return self._width is None or bool(np.all(self._width == np.repeat(self.unit, self.count)))

    def filled(self, n, rows=None):
        """Per owner (or per owner row of ``rows``): the widths of its first ``n`` kinks, summed."""
        if self._width is None:
            return n * (self._unit if rows is None else self._unit[rows])
        return self.cum_w[(self.pp if rows is None else self.pp[rows]) + n]

    def _prefix(self, values):
        """Per owner, the K + 1 prefix sums of its kinks' ``values`` (0 first), in one
        cumulative sum: each owner's leading entry holds minus the previous owner's total,
        so the running sum starts again near 0 there, and an owner's sums keep their digits
        however large the table (subtracting each owner's base from one sum over all owners
        would lose them to the base); the residual at each start is the rounding of one
        owner's total."""
        n_own = len(self.count)
        out = np.zeros(len(values) + n_own)
        if not len(values):
            return out
        head = np.zeros(len(out), dtype=bool)
        head[self.pp] = True
        out[~head] = values
        totals = np.zeros(n_own)
        some = self.count > 0
        totals[some] = np.add.reduceat(values, self.ptr[:-1][some])
        out[self.pp[1:]] = -totals[:-1]
        np.cumsum(out, out=out)
        return out

    @classmethod
    def concatenate(cls, tables):
        tables = [t for t in tables if t is not None and len(t.owner)]
        if not tables:
            return cls(np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0), np.zeros(0))
        if len(tables) == 1:
            return tables[0]                # (one family's table: no copy of its arrays)
        owner, count, slope = (np.concatenate([getattr(t, a) for t in tables]) for a in ("owner", "count", "slope"))
        if all(t._width is None for t in tables):
            return cls(owner, count, slope, unit=np.concatenate([t._unit for t in tables]))
        return cls(owner, count, slope, width=np.concatenate([t.width for t in tables]))

    def __len__(self):
        return len(self.slope)

    @property
    def n_owners(self):
        return len(self.owner)

    def kink_owner(self):
        """Per kink: the index of its owner in this table."""
        return np.repeat(np.arange(self.n_owners), self.count)

    # -- counting --------------------------------------------------------------------------
    def above(self, level, lo=None, hi=None, purpose=None, threads=1):
        """Per owner: how many of its slopes are > ``level`` (per owner), within [lo, hi]
        (default [0, count]). With ``purpose``, the last answer for it is checked first
        (two slopes per owner) and only the owners whose count moved are searched, from
        THREADS_FROM owners on in slices of owners on ``threads`` threads (each owner's count
        is its own)."""
        guess = self._last.get(purpose)
        if guess is not None and hi is None:
            n = np.empty_like(guess)

            def part(o0, o1):
                n[o0:o1] = self._from_guess(level[o0:o1], guess[o0:o1], None if lo is None else lo[o0:o1], o0, o1)

            _threads.map_slices(part, self.n_owners, threads, THREADS_FROM)
        else:
            n = self._search(level, lo, hi, guess)
        if purpose is not None:
            self._last[purpose] = n
        return n

    def _from_guess(self, level, g, lo, o0, o1):
        """above() for the owners [o0, o1) over the windows [lo, count] (lo: 0 when None)
        from the last count g: it stands where the last slope it counts is > level and the
        next is not; the others are searched on the side the check points to (one pass of
        gathers where few counts move)."""
        slope, last = self.slope, max(len(self.slope) - 1, 0)
        base, count = self.ptr[o0:o1], self.count[o0:o1]
        floor = 0 if lo is None else lo
        if lo is not None:
            g = np.maximum(g, lo)
        at = base + g
        counted_ok = (g <= floor) | (slope[np.maximum(at - 1, 0)] > level)
        rest_ok = (g == count) | (slope[np.minimum(at, last)] <= level)
        n = g.copy()
        moved = np.flatnonzero(~(counted_ok & rest_ok))
        if len(moved):
            gm, down = g[moved], ~counted_ok[moved]
            start = 0 if lo is None else lo[moved]
            lo = np.where(down, start, gm + 1)
            hi = np.where(down, np.maximum(gm - 1, start), count[moved])
            n[moved] = self._bisect(base[moved], lo, hi, level[moved])
        return n

    def _search(self, level, lo, hi, guess):
        """above() within explicit windows [lo, hi] (defaults 0 and count), the last count
        ``guess`` (if any) clipped into them and checked first."""
        lo = np.zeros(self.n_owners, dtype=np.int64) if lo is None else lo.copy()
        hi = self.count.copy() if hi is None else hi.copy()
        if not len(lo):
            return lo
        base = self.ptr[:-1]
        last = max(len(self.slope) - 1, 0)
        if guess is not None:
            g = np.clip(guess, lo, hi)
            left = (g <= lo) | (self.slope[np.clip(base + g - 1, 0, last)] > level)
            right = (g >= hi) | (self.slope[np.minimum(base + g, last)] <= level)
            np.copyto(hi, np.maximum(g - 1, lo), where=~left)
            np.copyto(lo, np.minimum(g + 1, hi), where=~right & left)
            np.copyto(lo, g, where=left & right)
            np.copyto(hi, g, where=left & right)
            idx = np.flatnonzero(lo < hi)
        else:
            idx = np.arange(len(lo))
        if len(idx):
            lo[idx] = self._bisect(base[idx], lo[idx], hi[idx], level[idx])
        return lo

    def _bisect(self, base, lo, hi, level):
        """Per owner (its first slope at ``base``): the count of slopes > level within
        [lo, hi], slopes nonincreasing; branch-free, ceil(log2(K + 1)) rounds."""
        lo, hi = lo.astype(np.int64), hi.astype(np.int64)
        last = max(len(self.slope) - 1, 0)
        if not len(lo):
            return lo
        for _ in range(int(np.max(hi - lo)).bit_length()):
            mid = (lo + hi) >> 1
            k = np.minimum(base + mid, last)
            up = (self.slope[k] > level) & (mid < hi)
            np.copyto(lo, mid + 1, where=up)
            np.copyto(hi, mid, where=~up & (mid < hi))
        return lo

    # -- the terms -------------------------------------------------------------------------
    def exact(self, a, threads=1) -> KinkResponse:
        """The exact terms at bid-price sums ``a`` (per owner)."""
        n = self.above(a, purpose="exact", threads=threads)
        at = self.pp + n
        x = self.filled(n)
        value = self.cum_rw[at] - a * x
        return KinkResponse(x=x, w=np.zeros(len(x)), value=value, excess=0.0)

    def smoothed(self, a, theta, threads=1) -> KinkResponse:
        """The log-smoothed terms at ``a`` (> 0) with level ``theta`` (> 0); the counts, and
        the kinks inside the windows, from THREADS_FROM owners on in slices of owners on
        ``threads`` threads."""
        spread = np.exp(WINDOW * theta)
        lo = self.above(a * spread, purpose="full", threads=threads)             # kinks before lo: full
        hi = self.above(a / spread, lo=lo, purpose="empty", threads=threads)     # kinks from hi on: empty
        at = self.pp + lo
        x = self.filled(lo)
        value = self.cum_rw[at] - a * x
        w = np.zeros(len(a))
        size = hi - lo

        def block(o0, o1):
            """The kinks inside the windows of owners [o0, o1), added to their terms, in
            blocks of owners of about CHUNK kinks each (the windows of a wide smoothing hold
            most of a large table: ten arrays of its size); their excess."""
            excess = 0.0
            ends = np.cumsum(size[o0:o1])
            cuts = np.searchsorted(ends, np.arange(CHUNK, int(ends[-1]) if len(ends) else 0, CHUNK), side="right")
            bounds = np.unique(np.concatenate([[0], cuts, [o1 - o0]])) + o0
            for b0, b1 in zip(bounds[:-1], bounds[1:]):
                excess += self._window_terms(a, theta, lo, size, b0, b1, x, w, value)
            return excess

        excess = sum(_threads.map_slices(block, self.n_owners, threads, THREADS_FROM))
        return KinkResponse(x=x, w=w, value=value, excess=excess)

    def _window_terms(self, a, theta, lo, size, o0, o1, x, w, value) -> float:
        """Add the smoothed kinks inside the windows of owners [o0, o1) to their allocation
        ``x``, curvature ``w`` and term ``value``; their excess over the exact terms."""
        sz = size[o0:o1]
        total = int(sz.sum())
        if not total:
            return 0.0
        own = np.repeat(np.arange(o1 - o0), sz)
        k = np.arange(total) - np.repeat(np.cumsum(sz) - sz, sz) + np.repeat(self.ptr[o0:o1] + lo[o0:o1], sz)
        r, ak = self.slope[k], a[o0:o1][own]
        wd = self._width[k] if self._width is not None else self._unit[o0:o1][own]
        d2 = (np.log(r / ak) - 0.5 * theta * theta) / theta
        p2 = special.ndtr(d2)
        term = wd * (r * special.ndtr(d2 + theta) - ak * p2)
        curv = wd * _INV_SQRT_2PI * np.exp(-0.5 * d2 * d2) / (ak * theta)
        x[o0:o1] += np.bincount(own, weights=wd * p2, minlength=o1 - o0)
        value[o0:o1] += np.bincount(own, weights=term, minlength=o1 - o0)
        w[o0:o1] = np.bincount(own, weights=curv, minlength=o1 - o0)
        return float(np.sum(term - wd * np.maximum(r - ak, 0.0)))

    def revenue(self, x):
        """Per owner: sum_k r_k w_k filled in order up to the allocation ``x`` (per owner)."""
        n = self.above_width(x)
        at = self.pp + n
        rest = x - self.filled(n)
        k = self.ptr[:-1] + np.minimum(n, np.maximum(self.count - 1, 0))
        nxt = np.where(n < self.count, self.slope[k] if len(self.slope) else 0.0, 0.0)
        return self.cum_rw[at] + np.maximum(rest, 0.0) * nxt

    def above_width(self, x, rows=None):
        """Per owner (or per owner row of ``rows``): how many whole kinks an allocation ``x``
        fills (cum_w <= x)."""
        count = self.count if rows is None else self.count[rows]
        pp = self.pp if rows is None else self.pp[rows]
        if self.uniform:
            unit = self.unit if rows is None else self.unit[rows]
            n = np.floor(np.maximum(x, 0.0) / unit * (1.0 + 1e-15))
            return np.minimum(n, count).astype(np.int64)
        lo = np.zeros(len(count), dtype=np.int64)
        hi = count.copy()
        idx = np.flatnonzero(lo < hi)
        while len(idx):
            mid = (lo[idx] + hi[idx] + 1) >> 1
            ok = self.cum_w[pp[idx] + mid] <= x[idx] * (1.0 + 1e-15)
            lo[idx] = np.where(ok, mid, lo[idx])
            hi[idx] = np.where(ok, hi[idx], mid - 1)
            idx = idx[lo[idx] < hi[idx]]
        return lo

    def right_slope(self, rows, x):
        """For owner rows ``rows`` at allocations ``x``: the slope of the next seat (the kink
        x is in, or the next one at a breakpoint; 0 past the last)."""
        n = self.above_width(x, rows)
        count = self.count[rows]
        k = self.ptr[rows] + np.minimum(n, np.maximum(count - 1, 0))
        return np.where(n < count, self.slope[k] if len(self.slope) else 0.0, 0.0)

    def slopes_at(self, x):
        """Per owner: (right, left) slopes of the piecewise-linear sales at ``x`` (sum of r w
        filled in order): the slope of the kink x is in, or at a breakpoint the next and the
        previous kink's (0 past the last, +inf before the first)."""
        n = self.above_width(x)
        on_break = np.abs(x - self.filled(n)) <= 1e-12 * np.maximum(1.0, x)
        k_next = self.ptr[:-1] + np.minimum(n, np.maximum(self.count - 1, 0))
        has_next = n < self.count
        right = np.where(has_next, self.slope[k_next] if len(self.slope) else 0.0, 0.0)
        k_prev = self.ptr[:-1] + np.maximum(n - 1, 0)
        prev = np.where(n > 0, self.slope[k_prev] if len(self.slope) else np.inf, np.inf)
        left = np.where(on_break, prev, right)
        return right, left
