"""Log-barrier smoothing of the piecewise-linear parts of the product subproblems.

Where a product's expected sales are piecewise linear, its dual term is too,
and the allocation jumps at breakpoints. Each linear piece is a segment:
a slope r (the fare times the marginal sales on the piece) and a width w (the
seats it spans), entered by a variable 0 <= y <= w with revenue r y:

- std = 0: one segment, slope f, width min(mean, u);
- Poisson and negative binomial: one segment per seat k < u, slope f P(D > k),
  width 1 (expected sales are taken piecewise linear between whole seats);
- normal and gamma demand whose fractile jumps in double precision (std below
  about mean / 8.2): the first L seats, over which P(D > x) is 1 to rounding,
  are one segment of slope f; the rest of the allocation stays smooth.

The smoothed term of a segment is the barrier problem

    phi_mu(g) = max_{0 < y < w} g y + mu [log(2y / w) + log(2(w - y) / w)],   g = r - a,

solved in closed form (a quadratic), with mu = delta r w. The barrier is <= 0,
so phi_mu <= phi = max(g, 0) w, and phi - phi_mu <= mu (1 + log(1 + |g| w / mu)):
the smoothed dual is a lower approximation of the exact one, within
delta (1 + log(1 + 1/delta)) sum r w. It is smooth with positive curvature
dy/dg = 1 / (mu (1/y^2 + 1/(w - y)^2)), so no leg goes flat, and the
continuation in delta (:mod:`.smoothing`) follows the barrier's central path
toward the exact dual (the interior-point argument; Fiacco and McCormick 1968).
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .. import distributions

_TOP_RATIO_GAP = 2.0 ** -53
_TAIL = 1e-12


class Segments:
    """The linear segments of the live products (flat arrays, one entry per segment)."""

    def __init__(self, sub, upper):
        prod, off, width, slope = [], [], [], []
        n_i = getattr(sub, "i_norm", None)
        if sub.all_normal:
            jump_idx = np.flatnonzero(sub.n_jump > 0)
            prod.append(jump_idx); off.append(np.zeros(len(jump_idx)))
            width.append(np.minimum(sub.n_jump[jump_idx], upper[jump_idx])); slope.append(sub.fare[jump_idx])
        else:
            if len(n_i):
                j = np.flatnonzero(sub.n_jump > 0)
                p = n_i[j]
                prod.append(p); off.append(np.zeros(len(p)))
                width.append(np.minimum(sub.n_jump[j], upper[p])); slope.append(sub.fare[p])
            if len(sub.i_gam):
                k, theta = distributions.gamma_params(sub.g_m, sub.g_s)
                L = theta * special.gammainccinv(k, 1.0 - _TOP_RATIO_GAP)
                j = np.flatnonzero(L > 0)
                p = sub.i_gam[j]
                prod.append(p); off.append(np.zeros(len(p)))
                width.append(np.minimum(L[j], upper[p])); slope.append(sub.fare[p])
            if len(sub.i_det):
                p = sub.i_det
                prod.append(p); off.append(np.zeros(len(p))); width.append(sub.t_m.copy()); slope.append(sub.t_f.copy())
            if len(sub.i_dis):
                # whole seats up to the bound u, but not beyond the tail where P(D > k) <= 1e-12
                # (those segments are dropped below, and a bound of twice a large capacity
                # would otherwise mean millions of them)
                tail = distributions.discrete_fractile(_TAIL, sub.d_fam, sub.d_m, sub.d_s)
                u = np.minimum(np.asarray(sub.d_u, dtype=np.float64), tail).astype(np.int64)
                p = np.repeat(sub.i_dis, u)
                pos = np.repeat(np.arange(len(u)), u)
                k = np.arange(len(p)) - np.repeat(np.cumsum(u) - u, u)
                sf = distributions.discrete_sf(k, sub.d_fam[pos], sub.d_m[pos], sub.d_s[pos])
                prod.append(p); off.append(k.astype(np.float64)); width.append(np.ones(len(p)))
                slope.append(sub.d_f[pos] * sf)
        cat = (lambda parts, dt=np.float64: np.concatenate(parts).astype(dt) if parts else np.zeros(0, dt))
        prod, off, width, slope = cat(prod, np.int64), cat(off), cat(width), cat(slope)
        # segments worth less than _TAIL of their product's fare stay exact (unsmoothed): their
        # value is below any tolerance, and their barrier would underflow
        keep = (width > 0) & (slope * width > _TAIL * sub.fare[prod] if len(prod) else np.zeros(0, bool))
        self.prod, self.off, self.width, self.slope = prod[keep], off[keep], width[keep], slope[keep]
        self.n_products = sub.n
        self.scale = float(self.slope @ self.width)

    def __len__(self):
        return len(self.prod)

    def smooth(self, a, x_exact, delta):
        """(x, w, value change) replacing the segments' exact allocation in ``x_exact`` by
        the barrier solutions at level ``delta``; ``a`` per product."""
        p, w, r = self.prod, self.width, self.slope
        g = r - a[p]
        mu = delta * r * w
        gw = g * w
        D = np.sqrt(gw * gw + 4.0 * mu * mu)
        # D - g w, as 4 mu^2 / (D + g w) where g >= 0: it does not cancel (a cancellation of
        # 1e-16 g w against mu would make y, and the smoothed dual with it, noisy at
        # 1e-16 g w / mu relative)
        D_less = np.where(gw >= 0, 4.0 * mu * mu / (D + np.abs(gw)), D - gw)
        denom = D_less + 2.0 * mu
        y = 2.0 * mu * w / denom
        rest = w * D_less / denom                        # w - y
        curv = 1.0 / (mu * (1.0 / (y * y) + 1.0 / (rest * rest)))
        full = x_exact[p] >= self.off + w * (1.0 - 1e-12)
        n = self.n_products
        # the exact allocation holds the whole segment where it is full and none of it otherwise
        x = x_exact + np.bincount(p, weights=np.where(full, -rest, y), minlength=n)
        x = np.maximum(x, 0.0)
        dw = np.bincount(p, weights=curv, minlength=n)
        barrier = np.log(2.0 * y / w) + np.log(2.0 * rest / w)
        change = float(np.sum(np.where(full, -g * rest, g * y) + mu * barrier))
        return x, dw, change
