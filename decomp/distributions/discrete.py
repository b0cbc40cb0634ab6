"""Discrete demand: Poisson (mean m) and negative binomial (mean m, std s, s^2 > m).

The negative binomial is scipy.stats.nbinom(r, p) with r = m^2 / (s^2 - m), p = m / s^2.
Expected sales are taken piecewise linear between whole seats, S(n) = sum_{k<n} P(D > k),
which is E[min(D, n)] at every integer and the expected sales of an integer allocation;
the subproblem is then a concave piecewise-linear maximization, one linear piece per
seat with slope f P(D > k). Its kinks go into a :class:`~.kinks.KinkTable`
(:meth:`DiscreteDemand.kinks`), built once per solve by the recurrences of the
probabilities (Poisson: p(k+1) = p(k) m / (k + 1); negative binomial:
p(k+1) = p(k) (k + r)(1 - p) / (k + 1)), in logarithms so that large means do not
underflow, and P(D > k) = 1 - sum_{i<=k} p(i), accurate to about 1e-16 absolute,
which is what a slope (times the fare) needs, for means up to RECURRENCE_MAX_MEAN;
larger ones take every slope from the exact functions below. Seats stop at the product's
bound u and where P(D > k) <= TAIL: the value beyond is below any tolerance.

Exact values for certificates come from the incomplete gamma and beta functions:
P(D > n) = P(n + 1, m) (Poisson) and I_{1-p}(n + 1, r) (negative binomial).
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .kinks import KinkTable

#: Seats whose marginal sales P(D > k) are at or below this leave the table.
TAIL = 1e-12
#: Products of larger mean take their slopes from the incomplete gamma and beta functions
#: instead of the recurrences, whose error grows with the seats summed (about 5e-15 at mean
#: 20, 3e-13 at 300, 2e-12 at 12,000: measured against scipy.special).
RECURRENCE_MAX_MEAN = 20.0


def negbin_params(mean, std):
    """(r, p) of scipy.stats.nbinom with this mean and std (std^2 > mean)."""
    mean = np.asarray(mean, dtype=np.float64)
    var = np.asarray(std, dtype=np.float64) ** 2
    return mean * mean / (var - mean), mean / var


class DiscreteDemand:
    """Poisson (``negbin`` False) or negative-binomial products (arrays over them)."""

    def __init__(self, fare, mean, std, negbin):
        self.fare = np.asarray(fare, dtype=np.float64)
        self.mean = m = np.asarray(mean, dtype=np.float64)
        self.std = np.asarray(std, dtype=np.float64)
        self.negbin = nb = np.asarray(negbin, dtype=bool)
        self.n = len(m)
        self.r, self.p = negbin_params(np.where(nb, m, 1.0), np.where(nb, self.std, 2.0))

    def _params(self, idx):
        if idx is None:
            return self.mean, self.negbin, self.r, self.p
        return self.mean[idx], self.negbin[idx], self.r[idx], self.p[idx]

    # -- exact probabilities -----------------------------------------------------------------
    def sf(self, n, idx=None):
        """P(D > n) for whole n (>= 0; 1 for n < 0)."""
        m, nb, r, p = self._params(idx)
        n = np.asarray(n, dtype=np.float64)
        out = np.ones(np.broadcast(n, m).shape)
        n, m, nb, r, p = np.broadcast_arrays(n, m, nb, r, p)
        pos = n >= 0
        po = pos & ~nb
        out[po] = special.gammainc(n[po] + 1.0, m[po])
        q = pos & nb
        out[q] = special.betainc(n[q] + 1.0, r[q], 1.0 - p[q])
        return out

    def sales(self, x, idx=None):
        """S(x), piecewise linear between whole seats: S(n) = m (1 - P(D* >= n)) + n P(D > n)
        with D* = D (Poisson) or NB(r + 1, p) (from k p_r(k) = m p_{r+1}(k - 1))."""
        m, nb, r, p = self._params(idx)
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        n = np.floor(x)
        sf_n = self.sf(n, idx)
        n, m, nb, r, p = np.broadcast_arrays(n, m, nb, r, p)
        tail = np.ones(n.shape)                  # P(D* > n - 1)
        pos = n >= 1
        po = pos & ~nb
        tail[po] = special.gammainc(n[po], m[po])
        q = pos & nb
        tail[q] = special.betainc(n[q], r[q] + 1.0, 1.0 - p[q])
        return m * (1.0 - tail) + n * sf_n + (x - n) * sf_n

    def slopes(self, x, idx=None):
        """(right, left) derivatives of S at x: P(D > floor x), and P(D > x - 1) at whole x."""
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        fl = np.floor(x)
        right = self.sf(fl, idx)
        left = np.where(x == fl, self.sf(fl - 1.0, idx), right)
        return right, left

    def closing(self):
        """a at and above which x = 0: f P(D > 0)."""
        return self.fare * self.sf(np.zeros(self.n))

    # -- the kink table -----------------------------------------------------------------------
    def kinks(self, upper, owner):
        """The seats' kinks (slope f P(D > k), width 1) up to the bound ``upper`` (whole seats)
        and the tail, as a :class:`KinkTable` for the owner products ``owner``. Products of
        mean up to RECURRENCE_MAX_MEAN by the recurrences (:meth:`_by_recurrence`), larger
        ones from the exact functions (:meth:`_by_exact_tail`)."""
        upper = np.asarray(upper, dtype=np.float64)
        umax = np.floor(np.where(np.isfinite(upper), np.minimum(upper, 2.0 ** 52), 2.0 ** 52)).astype(np.int64)
        count = np.zeros(self.n, dtype=np.int64)
        small = np.flatnonzero((umax > 0) & (self.mean <= RECURRENCE_MAX_MEAN))
        large = np.flatnonzero((umax > 0) & (self.mean > RECURRENCE_MAX_MEAN))
        steps = self._by_recurrence(small, umax, count)
        owner_l, seat_l, slope_l = self._by_exact_tail(large, umax, count)
        ptr = np.zeros(self.n + 1, dtype=np.int64)
        np.cumsum(count, out=ptr[1:])
        slope = np.empty(int(ptr[-1]))
        for seat, (act, s) in enumerate(steps):
            slope[ptr[act] + seat] = s
        slope[ptr[owner_l] + seat_l] = slope_l
        keep = count > 0
        return KinkTable(np.asarray(owner)[keep], count[keep], slope, unit=np.ones(int(keep.sum())))

    def _by_recurrence(self, idx, umax, count):
        """Slopes of products ``idx`` by the recurrences of the probabilities, one pass per
        seat vectorized over products: [(products, slopes of this seat)] per seat; their
        counts written into ``count``."""
        m, nb = self.mean, self.negbin
        # the products still adding seats, in compact arrays (compressed as products leave,
        # so that every seat's pass reads contiguous memory)
        nb_a = nb[idx]
        log_q = np.where(nb_a, np.log1p(-np.where(nb_a, self.p[idx], 0.5)), 0.0)
        log_m = np.log(np.maximum(m[idx], 1e-300))
        r_a = np.where(nb_a, self.r[idx], 1.0)
        logp = np.where(nb_a, self.r[idx] * np.log(np.where(nb_a, self.p[idx], 1.0)), -m[idx])
        fare, cap = self.fare[idx], umax[idx]
        cdf = np.zeros(len(idx))
        steps = []
        k = 0
        while len(idx):                         # a loop over seats, vectorized over products
            cdf += np.exp(logp)
            sf = np.maximum(1.0 - cdf, 0.0)
            steps.append((idx, fare * sf))
            more = (sf > TAIL) & (k + 1 < cap)
            if not more.all():
                count[idx[~more]] = k + 1
                idx, nb_a, log_q, log_m, r_a, logp, fare, cap, cdf = (
                    v[more] for v in (idx, nb_a, log_q, log_m, r_a, logp, fare, cap, cdf))
            grow = np.where(nb_a, np.log(k + r_a) + log_q, log_m)
            logp += grow - np.log(k + 1.0)
            k += 1
        return steps

    def _by_exact_tail(self, idx, umax, count):
        """(owner, seat, slope) of every seat of products ``idx`` from the incomplete gamma and
        beta functions; their counts (the first seat whose P(D > k) is at most
        TAIL, by bisection, or the bound) written into ``count``. The recurrences sum
        P(D <= k) over as many seats as the mean: beyond a mean of some thousands the
        rounding of that sum (about 1e-11) stays above TAIL, and the table ran on to the
        bound with every slope there f 1e-11 instead of 0 (a product of mean 12,339 took
        75,241 seats instead of 13,113)."""
        if not len(idx):
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0)
        cap = umax[idx]
        lo = np.full(len(idx), -1, dtype=np.int64)     # P(D > lo) > TAIL
        hi = cap - 1                                   # P(D > hi) <= TAIL, unless none is
        last_above = self.sf(hi.astype(np.float64), idx) > TAIL
        lo[last_above] = hi[last_above]
        while np.any(hi - lo > 1):
            open_ = np.flatnonzero(hi - lo > 1)
            mid = (lo[open_] + hi[open_]) // 2
            above = self.sf(mid.astype(np.float64), idx[open_]) > TAIL
            lo[open_[above]] = mid[above]
            hi[open_[~above]] = mid[~above]
        n = np.minimum(lo + 2, cap)                    # seats 0 .. the first at or below TAIL
        count[idx] = n
        owner = np.repeat(idx, n)
        seat = np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n)
        return owner, seat, self.fare[owner] * self.sf(seat.astype(np.float64), owner)
