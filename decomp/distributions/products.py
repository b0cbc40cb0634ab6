"""The product subproblems of an instance, split into smooth parts and kinks.

Each product j has the subproblem max_{0 <= x <= u_j} f_j S_j(x) - a_j x, a_j the sum
of its legs' bid prices. :class:`Products` builds, once per solve, one family object per
demand family (:mod:`.normal`, :mod:`.gamma`, :mod:`.discrete`, :mod:`.known`) and one
:class:`~.kinks.KinkTable` holding every piecewise-linear part:

- discrete products: all their kinks (one per seat);
- known demand: one kink (slope f, width min(m, u));
- normal and gamma products whose allocation jumps in double precision (low CV): the
  leading linear piece as one kink (slope f, width the family's ``jump``); the rest of
  the product, beyond it, is its smooth remainder.

:meth:`Products.respond` gives every product's allocation x(a), curvature w = -dx/da and
dual term f S(x) - a x: exact (``theta`` = 0) or with the kinks smoothed in log(a) at
level ``theta`` (:meth:`~.kinks.KinkTable.smoothed`), the smooth parts always exact.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np

from ..errors import InstanceError
from .discrete import DiscreteDemand
from .gamma import GammaDemand
from .kinks import KinkTable
from .known import KnownDemand
from .normal import NormalDemand

NORMAL, GAMMA, POISSON, NEGBIN = 0, 1, 2, 3
#: The family names, indexed by their codes.
FAMILIES = ("normal", "gamma", "poisson", "negbin")
#: A normal or gamma product's leading linear piece (its jump) becomes a kink when it is
#: wider than this fraction of its mean (normal demand with CV below about 0.11); narrower
#: ones stay with the smooth part, exact to 2^-53 of the fare times the piece (the
#: fractile cannot resolve a / f closer to 1), so the smooth method handles them.
JUMP_MIN = 0.1


@dataclasses.dataclass(frozen=True, eq=False)
class Response:
    """Per product: allocation x, curvature w = -dx/da (>= 0; 0 on exact kinks); the sum of
    the dual terms ``value`` (smoothed where theta > 0) and ``exact`` (always exact), and
    the revenue sum_j f_j S_j(x_j) where exact."""

    x: np.ndarray
    w: np.ndarray
    value: float
    exact: float


class Products:
    """The subproblems of a set of products: families, kink table, bounds."""

    def __init__(self, fare, mean, std, codes=None, upper=None, threads=1):
        fare = np.asarray(fare, dtype=np.float64)
        mean = np.asarray(mean, dtype=np.float64)
        std = np.asarray(std, dtype=np.float64)
        self.n = n = len(fare)
        self.fare, self.mean, self.std = fare, mean, std
        self.codes = np.zeros(n, np.int8) if codes is None else np.asarray(codes, dtype=np.int8)
        self.upper = np.full(n, np.inf) if upper is None else np.asarray(upper, dtype=np.float64)
        if not np.all(fare > 0):
            j = int(np.flatnonzero(~(fare > 0))[0])
            raise InstanceError("fare must be positive", row=j + 1, column="fare", value=float(fare[j]))
        c = self.codes
        disc = (c == POISSON) | (c == NEGBIN)
        known = (((c == NORMAL) & ~(std > 0)) | ((c == GAMMA) & ~((std > 0) & (mean > 0)))
                 | (disc & ~(mean > 0)))
        nb = (c == NEGBIN) & ~known
        bad = nb & ~(std * std > mean * (1.0 + 1e-12))
        if np.any(bad):
            j = int(np.flatnonzero(bad)[0])
            raise InstanceError("negative binomial demand needs std^2 > mean (use poisson when equal)",
                                row=j + 1, column="std", value=float(std[j]))
        self.i_norm = np.flatnonzero((c == NORMAL) & ~known)
        self.i_gam = np.flatnonzero((c == GAMMA) & ~known)
        self.i_dis = np.flatnonzero(disc & ~known)
        self.i_known = np.flatnonzero(known)
        self.normal = NormalDemand(fare[self.i_norm], mean[self.i_norm], std[self.i_norm], threads)
        self.threads = threads
        self.gamma = GammaDemand(fare[self.i_gam], mean[self.i_gam], std[self.i_gam], threads)
        self.discrete = DiscreteDemand(fare[self.i_dis], mean[self.i_dis], std[self.i_dis],
                                       (c[self.i_dis] == NEGBIN))
        self.known = KnownDemand(fare[self.i_known], mean[self.i_known])
        self.all_normal = len(self.i_norm) == n
        self.i_smooth = np.concatenate([self.i_norm, self.i_gam])
        # the jump of each product (0 where none): the width of its leading kink
        self.jump = np.zeros(n)
        self.jump[self.i_norm] = np.minimum(self.normal.jump, self.upper[self.i_norm])
        self.jump[self.i_gam] = np.minimum(self.gamma.jump, self.upper[self.i_gam])
        self.jump[self.jump <= JUMP_MIN * np.maximum(mean, 0.0)] = 0.0
        self.kinks = self._kink_table()
        self._flat = {}                     # flat_from's answers, per share

    def _kink_table(self):
        """Every piecewise-linear part in one table (jumps, discrete seats, known demand)."""
        jumped = np.flatnonzero(self.jump > 0)
        jumps = KinkTable(jumped, np.ones(len(jumped), np.int64), self.fare[jumped], unit=self.jump[jumped])
        tables = [jumps, self.discrete.kinks(self.upper[self.i_dis], self.i_dis),
                  self.known.kinks(self.upper[self.i_known], self.i_known)]
        return KinkTable.concatenate(tables)

    @classmethod
    def from_instance(cls, instance, products=None, upper=None, threads=1):
        codes = family_codes(instance)
        idx = slice(None) if products is None else products
        return cls(instance.fare[idx], instance.mean[idx], instance.std[idx],
                   None if codes is None else codes[idx], upper, threads)

    def subset(self, idx):
        """The subproblems of the products ``idx`` (same bounds)."""
        return Products(self.fare[idx], self.mean[idx], self.std[idx], self.codes[idx], self.upper[idx],
                        self.threads)

    @property
    def has_kinks(self) -> bool:
        return len(self.kinks) > 0

    # -- the subproblems ----------------------------------------------------------------------
    def respond(self, a, theta=0.0) -> Response:
        """Allocation, curvature and dual terms at bid-price sums ``a`` (per product)."""
        a = np.asarray(a, dtype=np.float64)
        x = np.zeros(self.n)
        w = np.zeros(self.n)
        value = exact = 0.0
        for idx, fam in ((self.i_norm, self.normal), (self.i_gam, self.gamma)):
            if not len(idx):
                continue
            if len(idx) == self.n:
                idx = slice(None)           # one family: views, not copies of every array
            xs, ws, v = fam.respond(a[idx])
            xs, ws, v = self._bounded(idx, fam, a[idx], xs, ws, v)
            # the jump, where there is one, belongs to the kink table
            jump = self.jump[idx]
            on = jump > 0
            if np.any(on):
                open_ = a[idx] < self.fare[idx]
                xs = np.where(on & open_, np.maximum(xs - jump, 0.0), xs)
                ws = np.where(on & ~(xs > 0), 0.0, ws)
                v -= float(jump @ np.maximum(self.fare[idx] - a[idx], 0.0))
            x[idx], w[idx] = xs, ws
            value += v
            exact += v
        k = self.kinks
        if len(k.owner):
            ak = np.maximum(a[k.owner], 1e-300)
            kr = k.smoothed(ak, theta, self.threads) if theta > 0 else k.exact(ak, self.threads)
            x[k.owner] += kr.x
            w[k.owner] += kr.w
            v = float(kr.value.sum())
            value += v
            exact += v - kr.excess
        return Response(x=x, w=w, value=value, exact=exact)

    def _bounded(self, idx, fam, a, x, w, value):
        """Clip smooth allocations at the bound u (concave terms: the bounded maximum is the
        clipped one) and correct their dual terms."""
        u = self.upper[idx]
        over = np.flatnonzero(x > u)
        if not len(over):
            return x, w, value
        x, w = x.copy(), w.copy()
        sales = fam.sales(np.stack([x[over], u[over]]), over)
        value += float(fam.fare[over] @ (sales[1] - sales[0]) - a[over] @ (u[over] - x[over]))
        x[over] = u[over]
        w[over] = 0.0
        return x, w, value

    # -- expected sales ------------------------------------------------------------------------
    def expected_sales(self, x):
        """S_j(x_j) for every product (exact: incomplete gamma and beta functions for the
        discrete families)."""
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        out = np.zeros(self.n)
        out[self.i_norm] = self.normal.sales(x[self.i_norm])
        out[self.i_gam] = self.gamma.sales(x[self.i_gam])
        out[self.i_dis] = self.discrete.sales(x[self.i_dis])
        out[self.i_known] = self.known.sales(x[self.i_known])
        return out

    def revenue(self, x):
        """sum_j f_j S_j(x_j): smooth families in closed form, piecewise-linear ones from the
        kink table (the same numbers to about 1e-16 of a fare per seat)."""
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        total = self.normal.revenue(x[self.i_norm]) if len(self.i_norm) else 0.0
        if len(self.i_gam):
            total += self.gamma.revenue(x[self.i_gam])
        k = self.kinks
        pl = self.jump[k.owner] == 0
        if np.any(pl):
            total += float(k.revenue(x[k.owner])[pl].sum())
        return total

    def marginal_sales(self, x):
        """(right, left) derivatives of S_j at x_j: equal where smooth; at a kink the
        slopes on either side (+inf before the first for x = 0 of a piecewise-linear part)."""
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        right = np.zeros(self.n)
        left = np.zeros(self.n)
        for idx, fam in ((self.i_norm, self.normal), (self.i_gam, self.gamma)):
            if len(idx):
                right[idx] = left[idx] = fam.slope(x[idx])
        if len(self.i_dis):
            right[self.i_dis], left[self.i_dis] = self.discrete.slopes(x[self.i_dis])
        if len(self.i_known):
            right[self.i_known], left[self.i_known] = self.known.slopes(x[self.i_known])
        return right, left

    def density(self, x):
        """-S_j''(x_j): the demand density for smooth families, 0 for piecewise-linear ones."""
        x = np.asarray(x, dtype=np.float64)
        out = np.zeros(self.n)
        for idx, fam in ((self.i_norm, self.normal), (self.i_gam, self.gamma)):
            if len(idx):
                d = fam.density(x[idx])
                out[idx] = np.where(x[idx] < self.jump[idx], 0.0, d)
        return out

    def closing(self):
        """Per product: the bid-price sum a at and above which its allocation is 0."""
        out = np.zeros(self.n)
        out[self.i_norm] = self.normal.closing()
        out[self.i_gam] = self.gamma.closing()
        out[self.i_dis] = self.discrete.closing()
        out[self.i_known] = self.known.closing()
        return out

    def smooth_worth(self):
        """sum f S(inf) over the smooth products: their revenue with unlimited seats."""
        return float(self.normal.fare @ self.normal.most_sales + self.gamma.fare @ self.gamma.most_sales)

    def flat_from(self, share):
        """Per product: the allocation beyond which its expected spill E[(D - x)^+] is at most
        ``share`` of its most sales S(inf) (the seats beyond add at most f share S(inf) to its
        revenue); the bound u for products without a smooth part. Computed once per share."""
        if share not in self._flat:
            out = self.upper.copy()
            for i, fam in ((self.i_norm, self.normal), (self.i_gam, self.gamma)):
                flat = fam.flat_from(share)
                out[i] = np.where(flat < out[i], flat, out[i])      # (never a NaN)
            self._flat[share] = out
        return self._flat[share]

    # -- smooth parts of chosen products (the interior-point method's variables) --------------
    def _by_family(self, products):
        """[(family, positions in ``products``, indices in the family)] for smooth products."""
        products = np.asarray(products, dtype=np.int64)
        out = []
        for idx, fam in ((self.i_norm, self.normal), (self.i_gam, self.gamma)):
            if not len(idx) or not len(products):
                continue
            loc = np.searchsorted(idx, products)
            loc = np.minimum(loc, len(idx) - 1)
            hit = idx[loc] == products
            if np.any(hit):
                out.append((fam, np.flatnonzero(hit), loc[hit]))
        return out

    def smooth_part(self, products):
        """The smooth products ``products`` as a :class:`SmoothPart` (their revenue, slope
        and curvature at allocations, evaluated again and again by the interior-point
        method)."""
        return SmoothPart([(fam.subset(loc), pos) for fam, pos, loc in self._by_family(products)],
                          len(products))

    def marginal_value(self, products, x):
        """f S'(x+) of the products ``products`` at their allocations ``x``: the value of the
        next seat (kink table for piecewise-linear parts, closed forms for smooth ones)."""
        products = np.asarray(products, dtype=np.int64)
        x = np.maximum(np.asarray(x, dtype=np.float64), 0.0)
        out = np.zeros(len(x))
        for fam, pos, loc in self._by_family(products):
            out[pos] = fam.fare[loc] * fam.slope(x[pos], loc)
        k = self.kinks
        if len(k.owner):
            row = self.kink_row(products)
            has = np.flatnonzero(row >= 0)
            if len(has):
                right = k.right_slope(row[has], x[has])
                jump = self.jump[products[has]]
                pl = jump == 0
                # a jump product beyond its jump is smooth (set above); below it its slope is f
                out[has[pl]] = right[pl]
                below = ~pl & (x[has] < jump)
                out[has[below]] = self.fare[products[has][below]]
        return out

    def kink_row(self, products):
        """Per product of ``products``: its owner row in the kink table, or -1."""
        return self._owner_row[np.asarray(products, dtype=np.int64)]

    @functools.cached_property
    def _owner_row(self):
        row = np.full(self.n, -1, dtype=np.int64)
        row[self.kinks.owner] = np.arange(self.kinks.n_owners)
        return row


class SmoothPart:
    """A fixed list of smooth (normal or gamma) products, each family's parameters
    gathered once: f S(x), f S'(x) and -f S''(x) at their whole allocations x (jump
    included)."""

    def __init__(self, parts, n):
        self.parts = parts        # [(family object over the part's products, their positions)]
        self.n = n

    def terms(self, x):
        """(f S(x), f S'(x), -f S''(x)), from one tail probability per product (each family
        in slices of products on threads from its own threshold on)."""
        x = np.asarray(x, dtype=np.float64)
        value, slope, curv = np.zeros(self.n), np.zeros(self.n), np.zeros(self.n)
        for fam, pos in self.parts:
            sales, sl, dens = fam.terms(x[pos])
            value[pos] = fam.fare * sales
            slope[pos] = fam.fare * sl
            curv[pos] = fam.fare * dens
        return value, slope, curv


def family_codes(instance) -> np.ndarray | None:
    """Per-product family code (int8), or None when every product is normal.

    Raises InstanceError naming the first row with an unknown name.
    """
    names = instance.distribution
    if names is None:
        default = str(instance.meta.get("distribution", "normal")).strip().lower()
        if default not in FAMILIES:
            raise InstanceError(f"unknown demand distribution in meta; use one of {', '.join(FAMILIES)}",
                                column="distribution", value=default)
        code = FAMILIES.index(default)
        return None if code == NORMAL else np.full(instance.n_products, code, dtype=np.int8)
    names = np.asarray(names, dtype=object)
    codes = np.full(len(names), -1, dtype=np.int8)
    for code, fam in enumerate(FAMILIES):          # a loop over 4 names, not over products
        codes[names == fam] = code
    left = np.nonzero(codes < 0)[0]
    if len(left):                                  # other spellings ("Normal ", "GAMMA")
        uniq, inv = np.unique(np.asarray(names[left], dtype=str), return_inverse=True)
        inv = inv.reshape(-1)
        fixed = np.empty(len(uniq), dtype=np.int8)
        for i, name in enumerate(uniq):
            key = name.strip().lower()
            if key not in FAMILIES:
                j = int(left[np.nonzero(inv == i)[0][0]])
                raise InstanceError(f"unknown demand distribution; use one of {', '.join(FAMILIES)}",
                                    row=j + 1, column="distribution", value=name)
            fixed[i] = FAMILIES.index(key)
        codes[left] = fixed[inv]
    return None if not np.any(codes != NORMAL) else codes
