"""Gamma demand with the product's mean m and std s: shape k = (m/s)^2, scale theta = s^2/m.

With y = x / theta, g(y) = y^(k-1) e^(-y) / Gamma(k) and P, Q the regularized lower and
upper incomplete gamma functions (scipy.special.gammainc, gammaincc):

    S(x) = m P(k+1, y) + x Q(k, y) = m P(k, y) + x (Q(k, y) - g(y)),

using P(k+1, y) = P(k, y) - (y / k) g(y) and m y / k = x: one incomplete gamma function
per product (P where y < k, Q beyond, so that neither is a difference near 1).
S'(x) = Q(k, y), -S''(x) = g(y) / theta.

The fractile solves Q(k, y) = a / f. scipy's inverse (gammainccinv) costs about ten
evaluations of gammaincc, so it is found here by Newton's method on Q from the
Wilson-Hilferty approximation (y ~ k (1 - 1/(9k) + z / (3 sqrt(k)))^3, z the normal
upper quantile), safeguarded by bisection on a bracket, with the residual written as
(1 - a/f) - P where P is the smaller one: 3 to 5 evaluations to full precision.
"""

from __future__ import annotations

import numpy as np
from scipy import special

#: The fractile's relative accuracy in y.
_YTOL = 4e-16
_MAX_STEPS = 60


class GammaDemand:
    """The subproblems of products with gamma demand (arrays over those products)."""

    name = "gamma"

    def __init__(self, fare, mean, std):
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

    def _g(self, y):
        """The standard gamma density in y."""
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            return np.exp(special.xlogy(self.k - 1.0, y) - y - self._lgk)

    # -- the subproblem ---------------------------------------------------------------------
    def quantile(self, ratio, complement):
        """y with Q(k, y) = ratio (complement = 1 - ratio, passed to avoid cancellation)."""
        k = self.k
        z = -special.ndtri(np.clip(ratio, 1e-300, 1.0))
        c = 1.0 / (9.0 * k)
        base = np.maximum(1.0 - c + z * np.sqrt(c), 1e-3)
        y = k * base ** 3
        # below shape 1 the Wilson-Hilferty start is poor; there P(k, y) ~ y^k / Gamma(k + 1)
        small = k < 1.0
        if np.any(small):
            ys = np.exp((np.log(np.maximum(complement[small], 1e-320)) + special.gammaln(k[small] + 1.0)) / k[small])
            y[small] = np.where(complement[small] < 0.5, ys, y[small])
        lo = np.zeros(len(y))
        hi = np.full(len(y), np.inf)
        idx = np.arange(len(y))
        for _ in range(_MAX_STEPS):
            if not len(idx):
                break
            yi, ki = y[idx], k[idx]
            use_p = yi < ki
            tail = np.maximum(_smaller_tail(ki, yi, use_p), 1e-320)
            # Newton on G(y) = log Q(k, y) - log(ratio) or -(log P(k, y) - log(1 - ratio)), the
            # smaller of P and Q: both decrease in y, with G' = -g / Q or -g / P
            resid = np.where(use_p, np.log(np.maximum(complement[idx], 1e-320)) - np.log(tail),
                             np.log(tail) - np.log(np.maximum(ratio[idx], 1e-320)))
            lo[idx] = np.where(resid > 0, yi, lo[idx])
            hi[idx] = np.where(resid > 0, hi[idx], yi)
            dens = np.exp(special.xlogy(ki - 1.0, yi) - yi - self._lgk[idx])
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                new = yi + resid * tail / dens
            done = (np.abs(new - yi) <= _YTOL * np.maximum(yi, 1e-300)) | (resid == 0)
            grow = np.where(np.isfinite(hi[idx]), hi[idx], 4.0 * np.maximum(yi, 1e-300))
            bad = ~done & (~np.isfinite(new) | (new <= lo[idx]) | (new >= grow))
            fallback = np.where(np.isfinite(hi[idx]), 0.5 * (lo[idx] + hi[idx]), grow)
            new = np.where(bad, fallback, new)
            y[idx] = np.where(done & ~np.isfinite(new), yi, new)
            idx = idx[~done]
        return y

    def respond(self, a):
        """(x, w, value): the fractile, -dx/da and f S(x) - a x at bid-price sums ``a``."""
        f = self.fare
        ratio = np.clip(a / f, 1e-300, 1.0)
        inside = ratio < 1.0
        y = np.zeros(self.n)
        if np.any(inside):
            i = np.flatnonzero(inside)
            complement = (f[i] - a[i]) / f[i]
            sub = _Sub(self, i)
            y[i] = sub.quantile(ratio[i], complement)
        x = self.theta * y
        g = self._g(y)
        with np.errstate(divide="ignore", over="ignore"):
            w = np.where(inside & (g > 0), self.theta / (f * g), 0.0)
        w = np.minimum(w, 1e300)
        value = float(np.sum(f * self.sales(x) - a * x))
        return x, w, value

    # -- sales --------------------------------------------------------------------------------
    def _params(self, idx):
        if idx is None:
            return self.mean, self.k, self.theta, self._lgk
        return self.mean[idx], self.k[idx], self.theta[idx], self._lgk[idx]

    def sales(self, x, idx=None):
        """S(x) = m P(k, y) + x (Q(k, y) - g(y)), one incomplete gamma function per product."""
        m, k, th, lgk = self._params(idx)
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        y = x / th
        low = y < k
        small = _smaller_tail(k, y, low)              # P where y < k, Q beyond
        p = np.where(low, small, 1.0 - small)
        q = np.where(low, 1.0 - small, small)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            g = np.where(y > 0, np.exp(special.xlogy(k - 1.0, y) - y - lgk), 0.0)
        return m * p + x * (q - g)

    def slope(self, x, idx=None):
        """S'(x) = Q(k, x / theta)."""
        _, k, th, _ = self._params(idx)
        return special.gammaincc(k, np.maximum(np.asarray(x, dtype=np.float64), 0.0) / th)

    def density(self, x, idx=None):
        """-S''(x) = g(y) / theta."""
        _, k, th, lgk = self._params(idx)
        y = np.maximum(np.asarray(x, dtype=np.float64), 1e-300) / th
        with np.errstate(over="ignore"):
            return np.exp(special.xlogy(k - 1.0, y) - y - lgk) / th

    def revenue(self, x):
        return float(self.fare @ self.sales(x))

    def closing(self):
        """a at and above which x = 0: f Q(k, 0) = f."""
        return self.fare.copy()


def _smaller_tail(k, y, low):
    """P(k, y) where ``low``, Q(k, y) elsewhere: one incomplete gamma function per entry."""
    k, y, low = np.broadcast_arrays(k, y, low)
    out = np.empty(y.shape)
    out[low] = special.gammainc(k[low], y[low])
    out[~low] = special.gammaincc(k[~low], y[~low])
    return out


class _Sub:
    """The parameters of a subset of a GammaDemand's products (for the quantile)."""

    def __init__(self, parent, idx):
        self.k = parent.k[idx]
        self._lgk = parent._lgk[idx]

    quantile = GammaDemand.quantile
