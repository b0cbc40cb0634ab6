"""Normal demand D ~ N(mean, std^2), floored at zero (std > 0).

Expected sales S(x) = std (G(-m/s) - G(z)), z = (x - m)/s, G the standard normal loss
(:mod:`decomp.normal`); marginal sales S'(x) = P(D > x); the subproblem's solution is
the fractile x = m + s Phibar^{-1}(a/f), with -dx/da = s / (f phi(z)), and 0 for a >= f.

In double precision a/f cannot come closer to 1 than 2^-53, so the fractile cannot fall
below JUMP_Z standard deviations under the mean before it drops to 0 at a = f: where
m + s JUMP_Z > 0 (std below about mean / 8.2) the allocation jumps there, and
:attr:`NormalDemand.jump` gives the width of that leading piece, on which S' is 1 to
double precision. The caller treats it as a kink of slope f (see
:mod:`decomp.distributions.kinks`) and this class's response beyond it as the remainder.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .. import normal as _normal
from .. import threads as _threads

_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
#: Phibar^{-1}(1 - 2^-53): how far below the mean the fractile can go before a/f rounds to 1.
JUMP_Z = float(special.ndtri(2.0 ** -53))
#: Smallest ratio a/f used in a fractile (a = 0 would mean an unbounded allocation).
MIN_RATIO = _normal.MIN_RATIO
#: Newton steps of :meth:`NormalDemand.flat_from` (from its start, log G is nearly linear
#: in z^2: four steps leave a relative error in the spill far below 1e-3).
FLAT_STEPS = 6


class NormalDemand:
    """The subproblems of products with normal demand (arrays over those products)."""

    name = "normal"

    def __init__(self, fare, mean, std, threads=1):
        self.threads = threads
        self.fare = f = np.asarray(fare, dtype=np.float64)
        self.mean = m = np.asarray(mean, dtype=np.float64)
        self.std = s = np.asarray(std, dtype=np.float64)
        self.n = len(f)
        self.jump = np.maximum(m + s * JUMP_Z, 0.0)
        fs = f * s
        self._invf = 1.0 / f
        self._fs_pdf = fs * _INV_SQRT_2PI                       # f s / sqrt(2 pi)
        self._sG0 = s * loss_at_minus(m / s)                   # s G(-m/s) = S(inf)
        self._fsG0 = f * self._sG0                              # f S(inf)
        self._sof = (s / f) * np.sqrt(2.0 * np.pi)              # w = this / exp(-z^2/2)
        self._cap_w = bool(len(f) and self._sof.max() > 1.0)

    # -- the subproblem ---------------------------------------------------------------------
    def respond(self, a):
        """(x, w, value) at bid-price sums ``a``: the fractile, -dx/da and f S(x) - a x.
        From decomp.threads.FROM_PRODUCTS products on, in slices of products on threads
        (each product's answer is its own; numpy releases the GIL)."""
        out = (np.empty(self.n), np.empty(self.n), np.empty(self.n))
        values = _threads.map_slices(lambda lo, hi: self._respond(a[lo:hi], out, lo, hi), self.n, self.threads)
        return out[0], out[1], float(sum(values))

    def _respond(self, a, out, lo, hi):
        """:meth:`respond` for the products lo:hi (``a`` theirs), written in place into
        ``out`` = (x, w, e) at lo:hi (e: exp(-z^2/2), 0 where x = 0); returns the value."""
        sl = slice(lo, hi)
        x, w, e = out[0][sl], out[1][sl], out[2][sl]
        r = np.multiply(a, self._invf[sl], out=e)
        np.clip(r, MIN_RATIO, 1.0, out=r)
        z = special.ndtri(r, out=r)                 # ndtri(ratio) = -(the usual z)
        np.multiply(self.std[sl], z, out=x)
        np.subtract(self.mean[sl], x, out=x)
        np.maximum(x, 0.0, out=x)
        inside = x > 0
        np.square(z, out=z)
        z *= -0.5
        np.exp(z, out=e)                            # exp(-z^2/2)
        ins = inside.astype(np.float64)
        e *= ins
        am = np.multiply(a, self.mean[sl], out=w)
        value = float(self._fsG0[sl] @ ins) - float(self._fs_pdf[sl] @ e) - float(am @ ins)
        np.maximum(e, 1e-300, out=w)
        np.divide(self._sof[sl], w, out=w)
        w *= ins
        if self._cap_w:
            np.minimum(w, 1e300, out=w)
        return value

    # -- sales --------------------------------------------------------------------------------
    def sales(self, x, idx=None):
        """S(x) for the products ``idx`` (all when None)."""
        m, s = (self.mean, self.std) if idx is None else (self.mean[idx], self.std[idx])
        return _normal.expected_sales(x, m, s)

    def slope(self, x, idx=None):
        """S'(x) = P(D > x)."""
        m, s = (self.mean, self.std) if idx is None else (self.mean[idx], self.std[idx])
        return special.ndtr(-(np.asarray(x, dtype=np.float64) - m) / s)

    def density(self, x, idx=None):
        """-S''(x): the demand's density at x."""
        m, s = (self.mean, self.std) if idx is None else (self.mean[idx], self.std[idx])
        return _normal.pdf((np.asarray(x, dtype=np.float64) - m) / s) / s

    def terms(self, x):
        """(S(x), S'(x), -S''(x)) of every product; from decomp.threads.FROM_PRODUCTS
        products on, in slices of products on threads."""
        if len(_threads.slices(self.n, self.threads)) == 1:
            return self._terms(x, slice(None))
        out = np.empty((3, self.n))

        def part(lo, hi):
            out[:, lo:hi] = self._terms(x[lo:hi], slice(lo, hi))

        _threads.map_slices(part, self.n, self.threads)
        return out[0], out[1], out[2]

    def _terms(self, x, at):
        """:meth:`terms` of the slice ``at`` of the products (``x`` the slice's), from one
        density and one tail probability each: with z = (x - m)/s,
        S'(x) = Phibar(z), -S''(x) = phi(z)/s and
        S(x) = s (G(-m/s) - G(z)), G(z) = phi(z) - z Phibar(z) (the interior-point method
        asks for all three at every trial point). For z >> 0 that difference cancels, but
        its absolute error, about 1e-16 phi(z), is far below a fare's rounding; at x = 0
        it repeats G(-m/s)'s own operations, so S(0) = 0 exactly."""
        s = self.std[at]
        z = np.subtract(x, self.mean[at])
        z /= s
        tail = special.ndtr(-z)
        dens = np.multiply(z, z)
        dens *= -0.5
        np.exp(dens, out=dens)
        dens *= _INV_SQRT_2PI
        loss = np.multiply(z, tail)
        np.subtract(dens, loss, out=loss)
        sales = self._sG0[at] - s * np.maximum(loss, 0.0)
        dens /= s
        return sales, tail, dens

    def subset(self, idx):
        """The products ``idx`` alone."""
        return NormalDemand(self.fare[idx], self.mean[idx], self.std[idx], self.threads)

    def revenue(self, x):
        """sum_j f_j S_j(x_j), as f s (G(-m/s) - G(z))."""
        z = (np.asarray(x, dtype=np.float64) - self.mean) / self.std
        return float(self._fsG0.sum() - self.fare @ (self.std * _normal.loss(z)))

    def closing(self):
        """a at and above which x = 0: f P(D > 0)."""
        return self.fare * special.ndtr(self.mean / self.std)

    @property
    def most_sales(self):
        """S(inf) = E[max(D, 0)] = s G(-m/s): the expected sales with unlimited seats."""
        return self._sG0

    def flat_from(self, share):
        """x where the expected spill E[(D - x)^+] = s G(z) falls to ``share`` of the most
        sales S(inf) (positive even where the mean is not): G(z) = share S(inf) / s."""
        return self.mean + self.std * loss_inverse(np.log(share * self._sG0 / self.std))


def loss_inverse(target):
    """z >= 0 with log G(z) = ``target`` (G the standard normal loss): Newton on log G from
    G(z) ~ phi(z) / z^2, with d log G / dz = -Phibar(z) / G(z) (both written with erfcx, so
    that the factor exp(-z^2/2) they share cancels)."""
    z = np.sqrt(np.maximum(-2.0 * (target + np.log(np.sqrt(2.0 * np.pi))), 1.0))
    for _ in range(FLAT_STEPS):
        tail = 0.5 * special.erfcx(z * np.sqrt(0.5))             # Phibar(z) exp(z^2/2)
        scaled = _INV_SQRT_2PI - z * tail                        # G(z) exp(z^2/2)
        log_g = np.log(np.maximum(scaled, 1e-300)) - 0.5 * z * z
        z = np.maximum(z + (log_g - target) * scaled / tail, 0.0)
    return z


def loss_at_minus(t):
    """G(-t) = pdf(t) + t Phi(t) (normal loss); direct where t >= 0 (no cancellation)."""
    t = np.asarray(t, dtype=np.float64)
    out = np.exp(-0.5 * t * t)
    out *= _INV_SQRT_2PI
    out += t * special.ndtr(t)
    neg = t < 0
    if np.any(neg):
        out[neg] = _normal.loss(-t[neg])
    return out
