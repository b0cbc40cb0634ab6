"""The network the dual method works on: live legs and products, grouped by leg tuple.

Built once per solve, everything here is independent of the bid prices:

- pre-processing: products on a leg of zero capacity get x = 0 and leave the
  problem; legs no remaining product uses get bid price 0 and leave it too;
- each product's allocation is bounded by u_j = ceil(2 (smallest capacity of
  its legs)) + 1. A x <= c already implies x_j <= u_j, so the bound changes no
  optimum and no optimal bid price (it is inactive at every optimum, its
  multiplier is 0), but it keeps every subproblem bounded: the dual is finite
  and continuous on all of pi >= 0, including where a product's legs all
  have bid price 0;
- products are grouped by their tuple of legs (per-iteration sums over
  products become sums over groups), and the Hessian's pattern (pairs of legs
  sharing a group) is computed once (:mod:`decomp.lagrangian.hessian`);
- the subproblems (:class:`decomp.distributions.Products`): one object per demand
  family and the table of kinks of the piecewise-linear parts.

:meth:`Network.evaluate` gives the dual q(pi) (exact and, with ``smoothing`` theta > 0,
with the kinks smoothed in log(a), see :mod:`decomp.distributions.kinks`), its gradient
c - A x(pi) and the per-product curvature w = -dx/da.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import scipy.sparse as sp

from .. import distributions


@dataclasses.dataclass(eq=False)
class DualPoint:
    """The dual at one pi: per-leg arrays over live legs, per-product over live products."""

    pi: np.ndarray
    a_g: np.ndarray        # per group: sum of the legs' bid prices
    x: np.ndarray          # subproblem solutions (smoothed where smoothing > 0)
    x_g: np.ndarray        # per group: sum of x
    w: np.ndarray          # -dx/da (>= 0)
    w_g: np.ndarray        # per group: sum of w
    load: np.ndarray       # A x
    grad: np.ndarray       # c - A x: the gradient of the (smoothed) dual
    value: float           # the dual the line search minimizes (smoothed when smoothing > 0)
    exact: float           # the exact dual q(pi): an upper bound on the PNLP optimum
    smoothing: float       # theta of the kinks' smoothing (0: exact)


class Network:
    """Live legs and products of an instance, grouped for the dual method."""

    def __init__(self, instance, threads=1):
        P, L = instance.n_products, instance.n_legs
        self.instance = instance
        #: how many times the dual was evaluated (the loop's measure of its own work)
        self.evaluations = 0
        #: (bid prices, allocation) of the last exact evaluation (:meth:`response`)
        self._last_exact = None
        cap = instance.capacity
        lpp = instance.legs_per_product
        leg_index = instance.leg_index
        prod_of_nnz = np.repeat(np.arange(P, dtype=np.int64), lpp)
        self.zero_leg = zero_leg = cap <= 0
        dead = np.bincount(prod_of_nnz, weights=zero_leg[leg_index], minlength=P) > 0
        live_nnz = ~dead[prod_of_nnz]
        used = np.bincount(leg_index[live_nnz], minlength=L) > 0
        self.dead = dead
        self.legs = np.nonzero(used)[0]
        self.n = n = len(self.legs)
        leg_map = np.full(L, -1, dtype=np.int64)
        leg_map[self.legs] = np.arange(n)
        self.prods = np.nonzero(~dead)[0] if np.any(dead) else None
        lpp_l = lpp[self.prods] if self.prods is not None else lpp
        idx_l = leg_map[leg_index[live_nnz]]
        self.cap = np.ascontiguousarray(cap[self.legs], dtype=np.float64)
        self.n_products = len(lpp_l)
        self._group(lpp_l, idx_l)
        # the allocation bound u_j = 2 min(capacity of its legs) + 1 (whole seats), per group
        self.upper_g = np.ceil(2.0 * self._min_capacity_g()) + 1.0
        self.upper = self.to_products(self.upper_g)
        self.products = distributions.Products.from_instance(instance, self.prods, self.upper, threads)
        #: per leg: the largest fare of its products (a price scale)
        self.fare_scale = np.zeros(self.n)
        if self.G:
            f_g = self._max_fare_g()
            np.maximum.at(self.fare_scale, self.A_g.nonzero()[0], f_g[self.A_g.nonzero()[1]])

    # -- grouping ------------------------------------------------------------------------
    def _group(self, lpp_l, idx_l):
        """Products with the same tuple of legs form a group (runs of equal rows in
        the usual file order; otherwise by sorting)."""
        Pl = len(lpp_l)
        K = max(int(lpp_l.max(initial=0)), 1)
        ptr = np.zeros(Pl + 1, dtype=np.int64)
        np.cumsum(lpp_l, out=ptr[1:])
        M = np.zeros((Pl, K), dtype=np.int64, order="F")       # 0 = no leg
        last = max(len(idx_l) - 1, 0)
        for k in range(K):                                     # a loop over leg positions
            col = idx_l[np.minimum(ptr[:-1] + k, last)] + 1 if len(idx_l) else np.zeros(Pl, np.int64)
            M[:, k] = np.where(lpp_l > k, col, 0)
        if Pl:
            same = np.ones(Pl - 1, dtype=bool)
            for k in range(K):
                same &= M[1:, k] == M[:-1, k]
            starts = np.concatenate([[0], np.nonzero(~same)[0] + 1])
        else:
            starts = np.zeros(0, dtype=np.int64)
        self.g_start = self.g_count = self.g_of_p = None
        if len(starts) <= 0.6 * max(Pl, 1):
            self.g_start = starts
            self.g_count = np.diff(np.append(starts, Pl))
            Mg = M[starts]
        else:
            Mg, inv = np.unique(M, axis=0, return_inverse=True)
            inv = inv.reshape(-1)
            if len(Mg) <= 0.6 * max(Pl, 1):
                self.g_of_p = inv
            else:
                Mg = M
        self.Mg = np.asarray(Mg, order="F")
        self.G = G = len(Mg)
        gi, gk = np.nonzero(Mg)
        self.AT_g = sp.csr_matrix((np.ones(len(gi)), (gi, Mg[gi, gk] - 1)), shape=(G, self.n))
        self.A_g = self.AT_g.T.tocsr()

    def _min_capacity_g(self):
        capx = np.append(self.cap, np.inf)                     # index -1 (no leg) -> inf
        return capx[self.Mg - 1].min(axis=1) if self.G else np.zeros(0)

    @property
    def fare(self):
        return self.products.fare

    def _max_fare_g(self):
        f = self.products.fare
        if self.g_start is not None:
            return np.maximum.reduceat(f, self.g_start) if len(f) else np.zeros(0)
        if self.g_of_p is not None:
            out = np.zeros(self.G)
            np.maximum.at(out, self.g_of_p, f)
            return out
        return f.copy()

    def to_products(self, per_group):
        if self.g_start is not None:
            return np.repeat(per_group, self.g_count)
        if self.g_of_p is not None:
            return per_group[self.g_of_p]
        return per_group

    def to_groups(self, per_product):
        if self.g_start is not None:
            if len(per_product) == 0:
                return np.zeros(0)
            return np.add.reduceat(per_product, self.g_start)
        if self.g_of_p is not None:
            return np.bincount(self.g_of_p, weights=per_product, minlength=self.G)
        return per_product

    def load(self, per_product):
        """A y: the load of an allocation on each live leg."""
        return self.A_g @ self.to_groups(per_product)

    def group_of(self, products):
        """The group index of each of the given product indices."""
        if self.g_start is not None:
            return np.searchsorted(self.g_start, products, side="right") - 1
        if self.g_of_p is not None:
            return self.g_of_p[products]
        return products

    def products_by_group(self):
        """(ptr, members): the products of group g are members[ptr[g]:ptr[g + 1]]."""
        if getattr(self, "_by_group", None) is None:
            P = self.n_products
            if self.g_start is not None:
                self._by_group = (np.append(self.g_start, P), np.arange(P))
            elif self.g_of_p is not None:
                members = np.argsort(self.g_of_p, kind="stable")
                ptr = np.zeros(self.G + 1, dtype=np.int64)
                np.cumsum(np.bincount(self.g_of_p, minlength=self.G), out=ptr[1:])
                self._by_group = (ptr, members)
            else:
                self._by_group = (np.arange(P + 1), np.arange(P))
        return self._by_group

    def members_of(self, groups):
        """(products, their groups): every product of the given groups."""
        ptr, members = self.products_by_group()
        counts = ptr[groups + 1] - ptr[groups]
        ends = np.cumsum(counts)
        at = np.arange(ends[-1] if len(ends) else 0) - np.repeat(ends - counts - ptr[groups], counts)
        return members[at], np.repeat(groups, counts)

    def allocation_of(self, products, a):
        """The subproblem solutions x_j(a_j) of the given products (no smoothing)."""
        return self.products.subset(products).respond(a).x

    @functools.cached_property
    def zero_threshold(self):
        """Per product: the bid-price sum a at and above which its allocation is 0."""
        return self.products.closing()

    def fare_of(self, products):
        return self.products.fare[products]

    def full_allocation(self, x_live):
        """Live products' allocation placed into the instance's product order (0 elsewhere)."""
        x = np.zeros(self.instance.n_products)
        if self.prods is None:
            x[:] = x_live
        else:
            x[self.prods] = x_live
        return x

    def full_prices(self, pi_live):
        pi = np.zeros(self.instance.n_legs)
        pi[self.legs] = pi_live
        return pi

    # -- the dual --------------------------------------------------------------------------
    def evaluate(self, pi, smoothing=0.0) -> DualPoint:
        """q(pi) with every product's allocation in [0, u_j]; with ``smoothing`` theta > 0
        the kinks are smoothed (``value`` is the smoothed dual, ``exact`` stays q(pi))."""
        self.evaluations += 1
        a_g = self.AT_g @ pi
        a = self.to_products(a_g)
        r = self.products.respond(a, smoothing)
        if smoothing == 0:
            self._last_exact = (pi.copy(), r.x)
        x_g, w_g = self.to_groups(r.x), self.to_groups(r.w)
        load = self.A_g @ x_g
        cp = float(self.cap @ pi)
        return DualPoint(pi=pi, a_g=a_g, x=r.x, x_g=x_g, w=r.w, w_g=w_g, load=load, grad=self.cap - load,
                         value=r.value + cp, exact=r.exact + cp, smoothing=smoothing)

    def response(self, pi):
        """Every product's allocation x(pi) (exact), from the last exact evaluation where it
        was at ``pi``."""
        if self._last_exact is not None and np.array_equal(self._last_exact[0], pi):
            return self._last_exact[1]
        return self.evaluate(pi).x

    def revenue(self, y):
        """sum_j f_j S_j(y_j) (piecewise-linear parts from the kink table)."""
        return self.products.revenue(y)

