"""Gamma demand with the product's mean m and std s: shape k = (m/s)^2, scale theta = s^2/m.

With y = x / theta, g(y) = y^(k-1) e^(-y) / Gamma(k) and P, Q the regularized lower and
upper incomplete gamma functions (scipy.special.gammainc, gammaincc):

    S(x) = m P(k+1, y) + x Q(k, y) = m P(k, y) + x (Q(k, y) - g(y)),

using P(k+1, y) = P(k, y) - (y / k) g(y) and m y / k = x: one incomplete gamma function
per product (P where y < k, Q beyond, so that neither is a difference near 1).
S'(x) = Q(k, y), -S''(x) = g(y) / theta.

The fractile solves Q(k, y) = a / f. scipy's inverse (gammainccinv) costs about ten
evaluations of gammaincc, so it is found here by Halley's method on log Q (or log P, the
smaller one) from the Wilson-Hilferty approximation, safeguarded by bisection on a
bracket: two evaluations to full precision for most products.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .. import threads as _threads
from .normal import loss_at_minus, loss_inverse

#: The fractile's relative accuracy in y.
_YTOL = 4e-16
#: A Halley step below this share of y ends the search (its error is about the step cubed).
_ACCEPT = 1e-7
_MAX_STEPS = 60
#: Fractiles further out than this upper tail are taken at it (x is then about 460 stds
#: out: a seat count with no material sales left).
RATIO_MIN = 1e-200
#: A fractile starts from the last one (to first order) where its ratio a/f moved by at most
#: this share of the smaller of a/f and 1 - a/f.
WARM = 1e-2
#: :meth:`GammaDemand.flat_from` stops when log of its spill is within this of the target's.
FLAT_LOG_TOL = 1e-3
#: From this many entries on, the incomplete gamma functions run in slices on threads
#: (each costs about 150 ns, seven times a normal tail probability).
THREADS_FROM = 20_000


class GammaDemand:
    """The subproblems of products with gamma demand (arrays over those products)."""

    name = "gamma"

    def __init__(self, fare, mean, std, threads=1):
        self.threads = threads        # for the incomplete gamma functions (None: every CPU)
        self.fare = np.asarray(fare, dtype=np.float64)
        self.mean = m = np.asarray(mean, dtype=np.float64)
        self.std = s = np.asarray(std, dtype=np.float64)
        self.n = len(m)
        self.k = (m / s) ** 2
        self.theta = s * s / m
        self._lgk = special.gammaln(self.k)
        self.jump = self._jump()

    def _jump(self):
        """x below which Q(k, x/theta) = 1 to double precision: P(k, y) <= 2^-53, from
        P(k, y) ~ y^k / Gamma(k + 1) (the series' first term, a lower bound on y's scale),
        kept only where it is material (more than 1e-9 of the mean)."""
        k = self.k
        logy = (np.log(2.0 ** -53) + special.gammaln(k + 1.0)) / k
        y = np.exp(logy)
        y = np.where(y < k, y, 0.0)
        # one Newton step on log P (P's series, e^-y included) makes it exact enough
        with np.errstate(divide="ignore", invalid="ignore"):
            p = special.gammainc(k, y)
            logp = np.log(np.maximum(p, 1e-320))
            dlog = np.exp((k - 1.0) * np.log(np.maximum(y, 1e-320)) - y - self._lgk) / np.maximum(p, 1e-320)
            y = np.where(p > 0, y - (logp - np.log(2.0 ** -53)) / dlog, y)
        x = np.maximum(y, 0.0) * self.theta
        return np.where(x > 1e-9 * self.mean, x, 0.0)

    # -- the subproblem ---------------------------------------------------------------------
    def quantile(self, ratio, complement, start=None):
        """y with Q(k, y) = ratio (complement = 1 - ratio, passed to avoid cancellation),
        from ``start`` where it is finite and positive (else Wilson and Hilferty's). From
        THREADS_FROM products on, the whole search runs in slices of products on threads
        (each product's search is its own: the answer is the same however it is split)."""
        n = len(ratio)
        parts = _threads.slices(n, self.threads, THREADS_FROM)
        if len(parts) == 1:
            return self._quantile(ratio, complement, start)
        out = np.empty(n)

        def part(lo, hi):
            sub = GammaSubset(self, slice(lo, hi), threads=1)
            out[lo:hi] = sub._quantile(ratio[lo:hi], complement[lo:hi], None if start is None else start[lo:hi])

        _threads.map_slices(part, n, self.threads, THREADS_FROM)
        return out

    def _quantile(self, ratio, complement, start=None):
        """:meth:`quantile` on one thread."""
        k = self.k
        if start is None:
            y = self._start(ratio, complement)
        else:
            y = start.copy()
            cold = np.flatnonzero(~(np.isfinite(start) & (start > 0)))
            if len(cold):
                y[cold] = GammaSubset(self, cold, threads=1)._start(ratio[cold], complement[cold])
        log_ratio = np.log(np.maximum(ratio, 1e-320))
        log_complement = np.log(np.maximum(complement, 1e-320))
        lo = np.zeros(len(y))
        hi = np.full(len(y), np.inf)
        idx = np.arange(len(y))
        first = True                        # the first pass over every product: views, no gathers
        for _ in range(_MAX_STEPS):
            if not len(idx):
                break
            at = slice(None) if first else idx
            yi, ki = y[at], k[at]
            use_p = yi < ki
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                tail = _smaller_tail(ki, yi, use_p, self.threads)
                # a tail below 1e-300 (an overshoot far out in Q) has lost its digits: y is
                # too large, and is halved towards its bracket
                lost = ~use_p & (tail < 1e-300)
                log_tail = np.log(np.maximum(tail, 1e-320))
                # h(y) = log Q(k, y) - log(ratio), or log(1 - ratio) - log P(k, y): the smaller
                # of P and Q, both decreasing in y, h' = -g / tail
                resid = np.where(use_p, log_complement[at] - log_tail, log_tail - log_ratio[at])
                resid[lost] = -1.0
                ratio_g = np.exp((ki - 1.0) * np.log(yi) - yi - self._lgk[at] - log_tail)
                newton = resid / ratio_g
                # Halley: h'' / h' = (k - 1) / y - 1 + g / Q (Q branch) or - g / P (P branch)
                bend = (ki - 1.0) / yi - 1.0 + np.where(use_p, -ratio_g, ratio_g)
                step = newton / (1.0 + 0.5 * newton * bend)
                # (a Newton step beyond the float range is an overshoot: the bracket catches it)
                step = np.where(np.isfinite(step) & (np.abs(step) < np.abs(2.0 * newton)), step, newton)
                new = yi + step
            # Halley's error is cubic in the step: after a step below _ACCEPT y the fractile
            # is exact to double precision, and no evaluation is spent to confirm it
            done = ~lost & ((np.abs(step) <= _ACCEPT * yi) | (resid == 0))
            # the others: a bracket from the sign of h, and bisection where Halley leaves it
            rest = np.flatnonzero(~done)
            j = idx[rest]
            yr, rr, nr = yi[rest], resid[rest], new[rest]
            y[at] = np.where(np.isfinite(new) & (new > 0), new, yi)     # (yi may be a view of y)
            lo[j] = np.where(rr > 0, yr, lo[j])
            hi[j] = np.where(rr > 0, hi[j], yr)
            lr, hr = lo[j], hi[j]
            grow = np.where(np.isfinite(hr), hr, 4.0 * np.maximum(yr, 1e-300))
            bad = lost[rest] | ~np.isfinite(nr) | (nr <= lr) | (nr >= grow)
            nr = np.where(bad, np.where(np.isfinite(hr), 0.5 * (lr + hr), grow), nr)
            y[j] = np.where(np.isfinite(nr) & (nr > 0), nr, yr)
            idx = j[np.isinf(hr) | (hr - lr > _YTOL * hr)]
            first = False
        return y

    def _start(self, ratio, complement):
        """Wilson and Hilferty's approximation, y ~ k (1 - 1/(9k) + z / (3 sqrt(k)))^3 with z
        the normal upper quantile; below shape 1, P(k, y) ~ y^k / Gamma(k + 1) for small P."""
        k = self.k
        z = -special.ndtri(np.clip(ratio, 1e-300, 1.0))
        c = 1.0 / (9.0 * k)
        y = k * np.maximum(1.0 - c + z * np.sqrt(c), 1e-3) ** 3
        small = k < 1.0
        if np.any(small):
            ys = np.exp((np.log(np.maximum(complement[small], 1e-320)) + special.gammaln(k[small] + 1.0)) / k[small])
            y[small] = np.where(complement[small] < 0.5, ys, y[small])
        return y

    def respond(self, a):
        """(x, w, value): the fractile, -dx/da and f S(x) - a x at bid-price sums ``a``.

        At the fractile Q = a/f and P = 1 - a/f, so f S(x) - a x = m (f - a) - f x g(y):
        the value needs no further incomplete gamma function. From THREADS_FROM products
        on, in slices of products on threads (each product's answer is its own)."""
        n = self.n
        last = getattr(self, "_last", None)
        if last is not None and len(last[0]) != n:
            last = None
        ratio, y, g = np.empty(n), np.empty(n), np.empty(n)
        x, w, gain = np.empty(n), np.empty(n), np.empty(n)

        def part(lo, hi):
            at = slice(lo, hi)
            f, aa, k, lgk, th = self.fare[at], a[at], self.k[at], self._lgk[at], self.theta[at]
            r = ratio[at] = np.clip(aa / f, RATIO_MIN, 1.0)
            inside = r < 1.0
            yy = np.zeros(hi - lo)
            if np.any(inside):
                i = np.flatnonzero(inside)
                complement = (f[i] - aa[i]) / f[i]
                start = None if last is None else _warm(r[i], complement, *(v[at][i] for v in last))
                yy[i] = GammaSubset(self, lo + i, threads=1)._quantile(r[i], complement, start)
            y[at] = yy
            gg = g[at] = np.where(inside, _density(k, lgk, yy), 0.0)
            xx = x[at] = th * yy
            with np.errstate(divide="ignore", over="ignore"):
                w[at] = np.minimum(np.where(inside & (gg > 0), th / (f * gg), 0.0), 1e300)
            gain[at] = np.where(inside, self.mean[at] * (f - aa) - f * xx * gg, 0.0)

        _threads.map_slices(part, n, self.threads, THREADS_FROM)
        self._last = (ratio, y, g)
        return x, w, float(np.sum(gain))

    # -- sales --------------------------------------------------------------------------------
    def _params(self, idx):
        if idx is None:
            return self.mean, self.k, self.theta, self._lgk
        return self.mean[idx], self.k[idx], self.theta[idx], self._lgk[idx]

    def sales(self, x, idx=None):
        """S(x) = m P(k, y) + x (Q(k, y) - g(y)), one incomplete gamma function per product."""
        return _sales_slope_density(*self._params(idx), x, self.threads)[0]

    def terms(self, x):
        """(S(x), S'(x), -S''(x)) of every product: one incomplete gamma function each."""
        s, q, g = _sales_slope_density(self.mean, self.k, self.theta, self._lgk, x, self.threads)
        return s, q, g / self.theta

    def subset(self, idx):
        """The products ``idx`` alone (parameters sliced, nothing computed again)."""
        out = object.__new__(GammaDemand)
        for name in ("fare", "mean", "std", "k", "theta", "_lgk", "jump"):
            setattr(out, name, getattr(self, name)[idx])
        out.n = len(out.fare)
        out.threads = self.threads
        return out

    def slope(self, x, idx=None):
        """S'(x) = Q(k, x / theta)."""
        _, k, th, _ = self._params(idx)
        return special.gammaincc(k, np.maximum(np.asarray(x, dtype=np.float64), 0.0) / th)

    def density(self, x, idx=None):
        """-S''(x) = g(y) / theta."""
        _, k, th, lgk = self._params(idx)
        return _density(k, lgk, np.maximum(np.asarray(x, dtype=np.float64), 1e-300) / th) / th

    def revenue(self, x):
        return float(self.fare @ self.sales(x))

    def closing(self):
        """a at and above which x = 0: f Q(k, 0) = f."""
        return self.fare.copy()

    @property
    def most_sales(self):
        """S(inf) = m: the expected sales with unlimited seats."""
        return self.mean

    def flat_from(self, share):
        """x where the expected spill E[(D - x)^+] falls to ``share`` of the mean (the most
        sales S(inf)). In y = x/theta the spill is m r(y),
        r(y) = Q(k, y) (1 - y/k) + y^k e^-y / Gamma(k + 1), with r'(y) = -Q(k, y) / k: Newton
        on log r = log(share), from Wilson and Hilferty's map of the normal answer,
        safeguarded by bisection on a bracket."""
        k = self.k
        # the normal answer for mean sqrt(k), std 1 (its most sales G(-sqrt(k)))
        z = loss_inverse(np.log(share * loss_at_minus(np.sqrt(k))))
        c = 1.0 / (9.0 * k)
        y = k * np.maximum(1.0 - c + z * np.sqrt(c), 1.0) ** 3
        lo, hi = np.zeros(self.n), np.full(self.n, np.inf)
        target = np.log(share)
        lgk1 = special.gammaln(k + 1.0)
        idx = np.arange(self.n)             # the products not yet within FLAT_LOG_TOL
        for _ in range(_MAX_STEPS):
            if not len(idx):
                break
            yi, ki = y[idx], k[idx]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
                low = yi < ki
                small = _smaller_tail(ki, yi, low, self.threads)
                q = np.where(low, 1.0 - small, small)
                r = q * (1.0 - yi / ki) + np.exp(special.xlogy(ki, yi) - yi - lgk1[idx])
                h = np.log(np.maximum(r, 1e-320)) - target
                lo[idx] = np.where(h > 0, yi, lo[idx])
                hi[idx] = np.where(h > 0, hi[idx], yi)
                new = yi + h * ki * r / q
            # the products still open take Newton's step, or bisect where it leaves the bracket
            open_ = np.abs(h) > FLAT_LOG_TOL
            li, hi_ = lo[idx], hi[idx]
            inside = np.isfinite(new) & (new > li) & (new < hi_)
            step_to = np.where(inside, new, np.where(np.isfinite(hi_), 0.5 * (li + hi_), 2.0 * yi))
            idx = idx[open_]
            y[idx] = step_to[open_]
        return self.theta * y


def _warm(ratio, complement, r0, y0, g0):
    """Starts for fractiles from the last call's (ratios ``r0``, answers ``y0``, densities
    ``g0``), to first order (dy/d ratio = -1/g(y)), where the ratio moved by at most WARM of
    the smaller of ratio and complement (near a solution the bid prices settle, and a start
    within _ACCEPT of the answer needs one incomplete gamma function instead of two); NaN
    elsewhere."""
    dr = ratio - r0
    near = (y0 > 0) & (g0 > 0) & (np.abs(dr) <= WARM * np.minimum(ratio, complement))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(near, y0 - dr / g0, np.nan)


def _density(k, lgk, y):
    """The standard gamma density of shape k (log Gamma(k) = ``lgk``) at y."""
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        return np.exp(special.xlogy(k - 1.0, y) - y - lgk)


def _sales_slope_density(m, k, th, lgk, x, threads=1):
    """(S(x), S'(x) = Q(k, y), g(y)) at y = x / theta (y at least 1e-300 / theta in g), from
    one incomplete gamma function per product (the smaller tail; the other is its
    complement); in slices of products on threads from THREADS_FROM products on."""
    x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
    n = len(x)
    if len(_threads.slices(n, threads, THREADS_FROM)) == 1:
        return _sales_slope_density_one(m, k, th, lgk, x)
    out = np.empty((3, n))

    def part(lo, hi):
        at = slice(lo, hi)
        out[:, at] = _sales_slope_density_one(m[at], k[at], th[at], lgk[at], x[at])

    _threads.map_slices(part, n, threads, THREADS_FROM)
    return out[0], out[1], out[2]


def _sales_slope_density_one(m, k, th, lgk, x):
    """:func:`_sales_slope_density` on one thread."""
    y = x / th
    low = y < k
    small = _smaller_tail(k, y, low)     # P where y < k, Q beyond
    p = np.where(low, small, 1.0 - small)
    q = np.where(low, 1.0 - small, small)
    g = np.where(y > 0, _density(k, lgk, y), 0.0)
    # the curvature's density as :meth:`GammaDemand.density` takes it: at 1e-300 below that
    d = g.copy()
    tiny = np.flatnonzero(x < 1e-300)
    if len(tiny):
        d[tiny] = _density(k[tiny], lgk[tiny], 1e-300 / th[tiny])
    return m * p + x * (q - g), q, d


def _smaller_tail(k, y, low, threads=1):
    """P(k, y) where ``low``, Q(k, y) elsewhere: one incomplete gamma function per entry,
    in slices on ``threads`` threads from THREADS_FROM entries on (scipy's functions
    release the GIL)."""
    k, y, low = (np.ascontiguousarray(v) for v in np.broadcast_arrays(k, y, low))
    out = np.empty(y.shape)

    def part(lo, hi):
        kk, yy, ll, oo = k[lo:hi], y[lo:hi], low[lo:hi], out[lo:hi]
        oo[ll] = special.gammainc(kk[ll], yy[ll])
        oo[~ll] = special.gammaincc(kk[~ll], yy[~ll])

    _threads.map_slices(part, len(out), threads, THREADS_FROM)
    return out


class GammaSubset:
    """The parameters of a subset of a GammaDemand's products (for the quantile)."""

    def __init__(self, parent, idx, threads=None):
        self.k = parent.k[idx]
        self._lgk = parent._lgk[idx]
        self.threads = parent.threads if threads is None else threads

    quantile = GammaDemand.quantile
    _quantile = GammaDemand._quantile
    _start = GammaDemand._start
