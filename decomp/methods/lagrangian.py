"""Method ``lagrangian``: the PNLP by Lagrangian relaxation of the leg capacities.

Relaxing A x <= c with bid prices pi >= 0 splits the PNLP into one newsvendor
problem per product (:mod:`decomp.distributions`, closed form, numpy over
products). The dual q(pi) = sum_j max_x [f_j S_j(x) - a_j x] + c.pi (a = A^T pi)
is convex with gradient c - A x(pi) and Hessian A diag(-dx/da) A^T, and strong
duality holds, so minimizing it gives the exact PNLP optimum.

The loop, one small step at a time:

1. relax: subproblems at a = A^T pi (:class:`_Network.evaluate`);
2. recover a feasible allocation: the allocation Newton's linear model
   predicts at pi + d, y = x - w (A^T d), corrected once more on the same
   factorization so that A y = c, clipped at 0 and scaled down by the smallest
   capacity / load over each product's legs (other dual methods, and
   non-normal demand: x(pi) scaled the same way);
3. certify: gap = (q(pi) - primal) / max(1, |primal|), q(pi) an upper bound
   on the optimum and primal a lower bound on the recovered allocation's
   expected revenue (a Taylor bound, or the exact value in the final phase);
   stop at gap <= ``options.tol`` (and settled bid prices, see ``bid_tol``).
   Newton skips the recovery while its decrement (an estimate of q(pi) - q*,
   so of a lower bound on the gap) is above 1.5 tol and while only the bid
   prices settle: the history then pairs q(pi) with the best allocation
   recovered so far, still a certified (if stale) gap;
4. step: a new pi by the chosen dual method (``SolverOptions.dual_method``):

   ``newton`` (default)
       Newton's method on the dual with Armijo backtracking on the exact dual
       value. The Hessian A diag(w) A^T is assembled from a pattern computed
       once (products grouped by their leg tuple, so the per-iteration work is
       one weighted bincount), scaled symmetrically by its diagonal (the
       diagonal spans 1 to 1e300: legs with slack get pi far below 1) and
       factored by dense Cholesky, either whole or, when an independent set of
       legs (no product uses two of them) is large, through its Schur
       complement (in mixed precision, refined in double). pi stays strictly
       positive: decreases are taken in log(pi), pi <- pi exp(t d / pi),
       increases as pi + t d (projecting a slack leg to 0 would send its
       products to the clip of the fractile). At convergence pi + d is
       returned with the allocation predicted for it.
   ``lbfgsb``
       scipy's L-BFGS-B with bounds pi >= 0. It stalls on the flat dual at
       large sizes and then reports ITERATION_LIMIT (or NUMERICAL_ERROR when its
       line search fails), never a false optimum.
   ``subgradient``
       projected subgradient steps with the Polyak rule toward the best primal
       value; slow, for comparison.

Non-smooth products (std = 0, Poisson, negative binomial, and normal ones with
std < mean / 8.2, whose fractile jumps to 0 at a = f in double precision) make
the dual piecewise linear in their a_j. Newton then works on a smoothed dual
(each such term averaged over a_j +- eps, eps = delta * f_j, see
:meth:`decomp.distributions.Subproblems.evaluate`): delta starts at 1e-3 and
drops 10x after every full Newton step or once the smoothed dual is nearly
minimized (Newton decrement below 1e-2 delta |q|), down to 1e-3 * tol. The gap
is always certified with the exact dual and the exact expected sales (and
again by :func:`decomp.certify.certify`), so smoothing never makes an answer
look better than it is. Legs whose Hessian row vanishes (all their products
flat) take a halving or doubling step in the gradient's direction, safeguarded
by the line search. This works (tests: std = 0 products mixed with random
ones, Poisson and negative-binomial networks, the std -> 0 limit) but needs
tens to hundreds of iterations when most demand is near-deterministic, and
an all-deterministic instance (the DLP itself) is not solved: use 'highs'.

Convergence (measured on the ladder): Newton's middle phase is linear, not
quadratic, because the dual is only piecewise C^2: a product's curvature
w = s / (f pdf(z)) jumps to 0 where its allocation reaches x = 0, and is
largest just there (near-deterministic products in the tail). At 100,000
products the full step failed exactly at the iterations where 3 to 84 products
crossed x = 0, whose terms made all of the quadratic model's error (4.9 against
a predicted decrease of 2.1 with 3 crossings); once no product crosses, the
decrement falls quadratically (8e-3, 4e-4, 5e-7, 1e-12). Not the cause:
the log-space step (plain steps give the same error), the mixed precision and
the Schur complement (identical iterates in double precision and dense).
Tried without gain: interpolated backtracking (the minimizer along the ray is
below t = 0.5), secant curvatures for the products a step is predicted to
cross (one iteration less at best, for a second factorization per iteration),
treating predicted entrants as inside.

Crossing products (what did help): the Hessian gives a product that crossed
x = 0 between the previous iterate and this one its secant slope |dx| / |da| instead of
its local -dx/da (0 just outside, largest just inside), so the model sees
the curvature it shows if the next step crosses back
(:meth:`_Network._secant_curvature`; no extra factorization). Measured on
12 date instances of 100,000 products: 132 to 119 Newton iterations cold,
94 to 84 warm-started; 300,000 products: 13 to 11 cold, 7 to 5 warm (+-5 %).

Settling bid prices: near the optimum a few legs' bid prices can keep
moving for several iterations while the gap is already certified: their
curvature comes mostly from one product sitting at x = 0, whose curvature is
largest just there and 0 beyond, so full steps overshoot and come back. When
at most 2% of the legs (or 8) still move by more than bid_tol, Newton takes
one block step instead (:meth:`_Network.settle_block`: Newton on those legs
alone, only their products evaluated, the others held), at most three times
per solve and never twice in a row. Measured at 1,000,000 products: 12 to
10 iterations, bid-price error against a tol-1e-12 solve 9e-7 to 8e-9.

Threads: from 200,000 products on, the product subproblems (the fractiles,
their per-group sums) are split at group boundaries into one slice per thread
(``SolverOptions.threads``, default all CPUs of the process); numpy releases
the GIL on them. The factorizations stay on one BLAS thread. Measured at
1,000,000 products on 2 cores: one dual evaluation 73 ms on one thread, 42 ms
on two.

Pre-processing: products on a leg of zero capacity get x = 0 and leave the
problem; so do legs no remaining product uses (pi = 0, the gradient is c > 0).
A zero-capacity leg gets the smallest bid price that closes all its products:
max_j (f_j S_j'(0) - the product's other bid prices)^+.

Solver-specific options (``SolverOptions.solver_options``): ``start``
("fare" default: half the demand-weighted fare per leg of the products on
each leg, measured fewer iterations than "heuristic"), ``linear_solver``
("auto", "dense", "schur"), ``smoothing`` (initial delta), ``bid_tol`` (Newton stops when the gap
is within tol and its next step moves no bid price of at least 1e-3 of the
largest by more than bid_tol relative, default 1e-4 when tol <= 1e-7 and
none for looser tolerances, which ask for speed; the step is then taken,
and measured errors against Ipopt at tol 1e-12 were below 1e-6; not applied
with non-smooth products, whose optimal bid prices need not be unique),
``damping`` (Levenberg-Marquardt factor for non-smooth products, default 0),
``precision`` ("mixed" default: the Schur complement is formed and factored in
single precision and the solve refined in double precision to a residual of
1e-11, falling back to double precision when refinement stalls; "double").
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.linalg import blas

from .. import certify as _certify
from .. import distributions
from .. import threads as _threads
from ..errors import ConfigError
from ..registry import register
from ..result import IterationRecord, SolveResult, Termination

log = logging.getLogger(__name__)

#: Default iteration limits per dual method.
ITERATION_LIMITS = {"newton": 200, "lbfgsb": 5000, "subgradient": 5000}

#: L-BFGS-B's task messages (scipy's ``res.message`` prefixes) -> Termination.
#: Its own convergence tests are switched off (ftol = gtol = 0), so reaching
#: them means the dual stopped decreasing in floating point: not certified.
LBFGSB_STATUS = {
    "CONVERGENCE": Termination.NUMERICAL_ERROR,
    "STOP: TOTAL NO. OF ITERATIONS REACHED LIMIT": Termination.ITERATION_LIMIT,
    "STOP: TOTAL NO. OF F,G EVALUATIONS EXCEEDS LIMIT": Termination.ITERATION_LIMIT,
    "ABNORMAL": Termination.NUMERICAL_ERROR,
    "ERROR": Termination.ERROR,
}

_ARMIJO = 1e-4
#: Newton recovers a primal allocation only once its decrement (relative) is
#: within this many tol: above it the gap cannot be within tol (measured
#: gap / decrement 0.9 to 1.7 at 1,000,000 products).
_FAR = 1.5
#: While bid prices settle near the optimum, recover (and certify) every this many iterations.
_SETTLE_CHECK = 8
#: Secant curvature for products that crossed x = 0 (see the module docstring).
_SECANT = True
#: Block steps on the legs whose bid prices still move (see the module docstring).
_BLOCK = True
#: Cap on the number of backtracking halvings in one Newton line search.
_MAX_BACKTRACK = 60


def lbfgsb_termination(message: str) -> Termination:
    msg = str(message).upper()
    for prefix, term in LBFGSB_STATUS.items():
        if msg.startswith(prefix):
            return term
    log.warning("L-BFGS-B message %r has no mapping; reported as unknown", message)
    return Termination.UNKNOWN


# ---------------------------------------------------------------------------
# The reduced problem: active legs, live products, their grouping by leg tuple
# ---------------------------------------------------------------------------
@dataclasses.dataclass(eq=False)
class _Point:
    pi: np.ndarray
    a_g: np.ndarray       # per group: sum of the legs' bid prices
    x: np.ndarray
    x_g: np.ndarray       # per group: sum of x
    w: np.ndarray
    revenue: float        # sum_j f_j S_j(x_j)
    load: np.ndarray
    grad: np.ndarray
    value: float          # the (possibly smoothed) dual value the line search uses
    exact: float          # the exact dual value q(pi) (an upper bound)
    smoothing: float
    density: np.ndarray | None = None   # normal fast path: exp(-z^2/2) at x
    w_g: np.ndarray | None = None       # per group: sum of w (when computed with x_g)


class _Network:
    """The problem left after pre-processing, with everything precomputed that
    does not depend on pi (built once per solve)."""

    def __init__(self, instance, linear_solver="auto", mixed=True, tol=1e-9, threads=1):
        self.mixed = bool(mixed)
        self.tol = float(tol)
        P, L = instance.n_products, instance.n_legs
        self.instance = instance
        cap = instance.capacity
        lpp = instance.legs_per_product
        leg_index = instance.leg_index
        zero_leg = cap <= 0
        if np.any(zero_leg):
            prod_of_nnz = np.repeat(np.arange(P, dtype=np.int64), lpp)
            dead = np.bincount(prod_of_nnz, weights=zero_leg[leg_index], minlength=P) > 0
            live_nnz = ~dead[prod_of_nnz]
            used = np.bincount(leg_index[live_nnz], minlength=L) > 0
        else:
            dead = np.zeros(P, dtype=bool)
            used = np.bincount(leg_index, minlength=L) > 0
        self.dead = dead
        self.zero_leg = zero_leg
        self.legs = np.nonzero(used)[0]            # active legs (positive capacity, used)
        self.n = n = len(self.legs)
        leg_map = np.full(L, -1, dtype=np.int64)
        leg_map[self.legs] = np.arange(n)
        if np.any(dead):
            self.prods = np.nonzero(~dead)[0]
            lpp_l = lpp[self.prods]
            idx_l = leg_map[leg_index[live_nnz]]
        else:
            self.prods = None
            lpp_l = lpp
            idx_l = leg_map[leg_index]
        self.cap = np.ascontiguousarray(cap[self.legs])
        self.sub = distributions.Subproblems.from_instance(instance, self.prods)
        Pl = len(lpp_l)
        self.n_products = Pl
        # -- products grouped by their tuple of legs ---------------------------------
        K = int(lpp_l.max(initial=0))
        K = max(K, 1)
        ptr = np.zeros(Pl + 1, dtype=np.int64)
        np.cumsum(lpp_l, out=ptr[1:])
        M = np.zeros((Pl, K), dtype=np.int64, order="F")           # 0 = no leg; columns contiguous
        last = max(len(idx_l) - 1, 0)
        for k in range(K):                                         # a loop over leg positions
            col = idx_l[np.minimum(ptr[:-1] + k, last)] + 1 if len(idx_l) else np.zeros(Pl, np.int64)
            M[:, k] = np.where(lpp_l > k, col, 0)
        if Pl:
            same = np.ones(Pl - 1, dtype=bool)
            for k in range(K):                                     # column by column (contiguous)
                same &= M[1:, k] == M[:-1, k]
            starts = np.concatenate([[0], np.nonzero(~same)[0] + 1])
        else:
            starts = np.zeros(0, dtype=np.int64)
        if len(starts) <= 0.6 * max(Pl, 1):
            # consecutive runs of the same legs (the usual file order)
            self.g_start = starts
            self.g_count = np.diff(np.append(starts, Pl))
            self.g_of_p = None
            Mg = M[starts]
        else:
            # any order: group by sorting (one-time cost)
            Mg, inv = np.unique(M, axis=0, return_inverse=True)
            inv = inv.reshape(-1)
            if len(Mg) <= 0.6 * max(Pl, 1):
                self.g_of_p = inv
            else:
                Mg, self.g_of_p = M, None
            self.g_start = None
            self.g_count = None
        self.Mg = Mg
        self.G = G = len(Mg)
        gi, gk = np.nonzero(Mg)
        legs_g = Mg[gi, gk] - 1
        self.AT_g = sp.csr_matrix((np.ones(len(gi)), (gi, legs_g)), shape=(G, n))
        self.A_g = self.AT_g.T.tocsr()
        self._ratio_buf = np.ones(n + 1)
        # -- Hessian pattern: lower-triangle pairs of legs sharing a group --------------
        # (each unordered pair of positions once: the diagonal, then (max, min) of
        # two distinct legs)
        rows, cols, egrp = [], [], []
        Mg = np.asarray(Mg, order="F")
        for p in range(K):
            gp = np.flatnonzero(Mg[:, p])
            lp = Mg[gp, p] - 1
            rows.append(lp); cols.append(lp); egrp.append(gp)
            for q in range(p + 1, K):
                cq = Mg[gp, q] - 1
                ok = (cq >= 0) & (cq != lp)
                r, c = lp[ok], cq[ok]
                rows.append(np.maximum(r, c)); cols.append(np.minimum(r, c)); egrp.append(gp[ok])
        rows = np.concatenate(rows); cols = np.concatenate(cols); egrp = np.concatenate(egrp)
        key = rows * n + cols
        if n * n <= 64 * max(len(key), 1) + 2 ** 24:
            # distinct pairs by marking a dense table (no sort): O(n^2 + entries)
            mark = np.zeros(n * n, dtype=bool)
            mark[key] = True
            ukey = np.flatnonzero(mark)
            rank = np.cumsum(mark, dtype=np.int64)
            e_pair = rank[key] - 1
            del mark, rank
        else:
            ukey, e_pair = np.unique(key, return_inverse=True)
        # pair <- group incidence (each group adds its curvature to every pair of
        # its legs): the Hessian's pair values are one sparse product E w_g
        self.E = sp.csr_matrix((np.ones(len(egrp)), (e_pair, egrp)), shape=(len(ukey), G))
        del egrp, e_pair
        self.p_row = ukey // n
        self.p_col = ukey % n
        self.n_pairs = len(ukey)
        isdiag = self.p_row == self.p_col
        self.diag_pair = np.full(n, -1, dtype=np.int64)
        self.diag_pair[self.p_row[isdiag]] = np.nonzero(isdiag)[0]
        self.off = np.nonzero(~isdiag)[0]
        self._setup_linear_solver(linear_solver)
        self._setup_threads(threads)
        self.leg_curvature_scale = self.A_g @ self.to_groups(np.maximum(self.sub.mean, 1e-12) / self.sub.fare)

    # -- linear algebra set-up -----------------------------------------------------------
    def _setup_linear_solver(self, choice):
        n = self.n
        r, c = self.p_row[self.off], self.p_col[self.off]
        indep = np.zeros(n, dtype=bool)
        if choice in ("auto", "schur") and n > 1:
            adj = sp.csr_matrix((np.ones(len(r)), (r, c)), shape=(n, n))
            adj = (adj + adj.T).tocsr()
            deg = np.diff(adj.indptr)
            blocked = np.zeros(n, dtype=bool)
            # greedy independent set, low degree first (a loop over legs, not products)
            for i in np.argsort(deg, kind="stable"):
                if not blocked[i]:
                    indep[i] = True
                    blocked[adj.indices[adj.indptr[i]:adj.indptr[i + 1]]] = True
        use_schur = choice == "schur" or (choice == "auto" and indep.sum() >= 0.25 * n and n >= 200)
        self.schur = bool(use_schur and indep.any())
        if self.schur:
            self.I = np.nonzero(indep)[0]
            self.R = np.nonzero(~indep)[0]
            nI, nR = len(self.I), len(self.R)
            loc = np.empty(n, dtype=np.int64)
            loc[self.I] = np.arange(nI)
            loc[self.R] = np.arange(nR)
            pr, pc = self.p_row, self.p_col
            rr = ~indep[pr] & ~indep[pc]
            ir = indep[pr] ^ indep[pc]
            if np.any(indep[pr] & indep[pc] & (pr != pc)):
                raise AssertionError("independent set has a coupled pair")
            self.s_rr = np.nonzero(rr)[0]
            a, b = loc[pr[rr]], loc[pc[rr]]
            lo_, hi_ = np.maximum(a, b), np.minimum(a, b)
            self.s_rr_flat = lo_ + nR * hi_                   # Fortran order, lower triangle
            self.s_ir = np.nonzero(ir)[0]
            iI = np.where(indep[pr[ir]], loc[pr[ir]], loc[pc[ir]])
            iR = np.where(indep[pr[ir]], loc[pc[ir]], loc[pr[ir]])
            self.s_ir_flat = iI + nI * iR                     # MT (nI x nR), Fortran order
            self.MT = np.zeros((nI, nR), order="F")
            self.S = np.zeros((nR, nR), order="F")
            self.MT32 = np.zeros((nI, nR), dtype=np.float32, order="F")
            self.S32 = np.zeros((nR, nR), dtype=np.float32, order="F")
        else:
            self.flat = self.p_row + n * self.p_col            # Fortran order, lower triangle
            self.Hbuf = np.zeros((n, n), order="F")

    # -- group <-> product ----------------------------------------------------------------
    def to_products(self, per_group):
        if self.g_start is not None:
            return np.repeat(per_group, self.g_count)
        if self.g_of_p is not None:
            return per_group[self.g_of_p]
        return per_group

    def group_of(self, products):
        """The group index of each of the given product indices."""
        if self.g_start is not None:
            return np.searchsorted(self.g_start, products, side="right") - 1
        if self.g_of_p is not None:
            return self.g_of_p[products]
        return products

    def to_groups(self, per_product):
        if self.g_start is not None:
            if len(per_product) == 0:
                return np.zeros(0)
            return np.add.reduceat(per_product, self.g_start)
        if self.g_of_p is not None:
            return np.bincount(self.g_of_p, weights=per_product, minlength=self.G)
        return per_product

    # -- the dual ------------------------------------------------------------------------------
    def evaluate(self, pi, smoothing=0.0) -> _Point:
        a_g = self.AT_g @ pi
        w_g = None
        if self._chunks is not None and not (smoothing > 0 and self.sub.n_has_jump):
            x, w, dens, x_g, w_g, value, revenue = self._evaluate_threads(a_g)
            exact = value
        else:
            v = self.sub.evaluate(self.to_products(a_g), smoothing)
            x, w, dens, value, exact, revenue = v.x, v.w, v.density, v.value, v.exact_value, v.revenue
            x_g = self.to_groups(x)
        load = self.A_g @ x_g
        cp = float(self.cap @ pi)
        return _Point(pi=pi, a_g=a_g, x=x, x_g=x_g, w=w, revenue=revenue, load=load,
                      grad=self.cap - load, value=value + cp, exact=exact + cp,
                      smoothing=smoothing, density=dens, w_g=w_g)

    def _setup_threads(self, threads):
        """Split the products into one slice per thread at group boundaries (normal
        demand, products in runs of the same legs, and enough of them to pay for
        the threads), or no split."""
        self._chunks = None
        P = self.n_products
        if threads < 2 or P < _threads.FROM_PRODUCTS or self.g_start is None or not self.sub.all_normal:
            return
        cuts = np.searchsorted(self.g_start, np.arange(1, threads) * P // threads)
        gb = np.unique(np.concatenate([[0], cuts, [self.G]]))
        pb = np.append(self.g_start, P)[gb]
        self._chunks = [(int(gb[i]), int(gb[i + 1]), int(pb[i]), int(pb[i + 1])) for i in range(len(gb) - 1)]
        self._pool = _threads.pool(threads)

    def _evaluate_threads(self, a_g):
        """The normal subproblems and their per-group sums, one product slice per thread."""
        P, sub = self.n_products, self.sub
        x, w, e = np.empty(P), np.empty(P), np.empty(P)
        x_g, w_g = np.empty(self.G), np.empty(self.G)
        count, start = self.g_count, self.g_start

        def part(chunk):
            g0, g1, p0, p1 = chunk
            value, rev = sub.normal_slice(np.repeat(a_g[g0:g1], count[g0:g1]), p0, p1, x, w, e)
            x_g[g0:g1] = np.add.reduceat(x[p0:p1], start[g0:g1] - p0)
            w_g[g0:g1] = np.add.reduceat(w[p0:p1], start[g0:g1] - p0)
            return value, rev

        sums = list(self._pool.map(part, self._chunks))
        return x, w, e, x_g, w_g, sum(v for v, _ in sums), sum(r for _, r in sums)

    def _scale_to_capacity(self, load):
        """Per-group factor: the smallest capacity / load over the group's legs (<= 1)."""
        over = load > self.cap
        if not np.any(over):
            return None
        ratio = self._ratio_buf
        ratio[:-1] = 1.0
        ratio[:-1][over] = self.cap[over] / load[over] * (1.0 - 1e-14)
        return ratio[self.Mg - 1].min(axis=1)

    def greedy_recover(self, pt):
        """The last Newton-predicted allocation at ``pt`` made feasible by cutting,
        on each overloaded leg, the groups of least marginal value a_g first
        (instead of scaling every product of the leg by the same factor), or
        None when it needed no cut. A leg with a tiny bid price also carries
        products whose other legs are dear; proportional scaling cuts those too
        and can leave a gap of 1e-8 that no further Newton step closes.
        Vectorized over the (leg, group) pairs of overloaded legs only."""
        last = getattr(self, "_unscaled", None)
        if last is None or last[0] is not pt or last[1] is None:
            return None
        _, y, load = last
        over = np.nonzero(load > self.cap)[0]
        if len(over) == 0:
            return None
        y_g = self.to_groups(y)
        rows_A = self.A_g[over]
        counts = np.diff(rows_A.indptr)
        row = np.repeat(np.arange(len(over)), counts)
        g = rows_A.indices
        order = np.lexsort((pt.a_g[g], row))                # by leg, then by marginal value
        g, row = g[order], row[order]
        amount = rows_A.data[order] * y_g[g]
        csum = np.cumsum(amount)
        start = np.concatenate([[0], np.cumsum(counts)[:-1]])
        before = csum - amount - (csum[start] - amount[start])[row]
        excess = (load[over] - self.cap[over]) * (1.0 + 1e-12) + 1e-12 * np.maximum(1.0, self.cap[over])
        cut = np.clip(excess[row] - before, 0.0, amount)
        frac = np.divide(cut, amount, out=np.zeros_like(cut), where=amount > 0)
        factor = np.ones(self.G)
        np.minimum.at(factor, g, 1.0 - frac)
        return y * self.to_products(np.clip(factor, 0.0, 1.0))

    def _close_slack(self, pt, y):
        """One more Newton correction of the predicted allocation: legs left
        with slack or overload (clipping at 0, products held at the clip) get
        A W A^T lam = c - A y solved with the factorization of this iteration,
        and y += W A^T lam (W = diag(w))."""
        last = getattr(self, "_last", None)
        if last is None or last[0] is not pt or getattr(self, "_inv", None) is None:
            return y
        _, dsc, flat = last
        r = self.cap - self.A_g @ self.to_groups(y)
        rhs = r * dsc
        rhs[flat] = 0.0
        try:
            lam = self._inv(rhs) * dsc
        except (np.linalg.LinAlgError, sla.LinAlgError, FloatingPointError):
            return y
        lam[flat] = 0.0
        dy = self.to_products(self.AT_g @ lam)
        dy *= pt.w
        if pt.density is not None:
            dy[pt.density <= _clip_density()] = 0.0
        y = y + dy
        return np.maximum(y, 0.0, out=y)

    def recover(self, pt, d=None, want_y=True, cheap=False):
        """A feasible allocation y and a lower bound on its expected revenue.

        Without ``d``: y = x(pi), each product scaled down by the smallest
        capacity / load over its legs. With the Newton direction ``d`` at pt:
        y = max(0, x - w (A^T d)), the allocation Newton's linear model predicts
        at pi + d (A y = c on every leg, so it is feasible up to rounding and
        its revenue is within second order of the optimum), then scaled the
        same way. The bound: exact expected sales for non-normal families; for
        normal ones f S(y) >= f S(x) + a (y - x) - c (y - x)^2 / 2 with c the
        largest f |S''| between x and y
        (:meth:`decomp.distributions.Subproblems.curvature_bound`), no
        special function needed but one exp. y is None unless ``want_y`` (or needed).
        ``cheap``: skip the extra Newton correction and the tighter curvature
        bound (a valid but looser bound, used while the dual is still far from
        its minimum and the gap cannot be within tol anyway).
        """
        sub = self.sub
        if d is None:
            scale_g = self._scale_to_capacity(pt.load)
            if scale_g is None:
                return (pt.x if want_y else None), pt.revenue
            if sub.all_normal:
                # products of a group share a and the factor: first-order part per group
                cut = scale_g - 1.0
                dy_g = cut * pt.x_g
                dy = pt.x * self.to_products(cut)
                y = pt.x + dy if want_y else None
            else:
                y = pt.x * self.to_products(scale_g)
        else:
            da = self.to_products(self.AT_g @ d)
            y = da * pt.w
            if pt.density is not None:
                # products held at the fractile's clip (a/f = MIN_RATIO) do not
                # move with a: their w (kept for the Hessian) would predict huge
                # changes from tiny ones in a
                y[pt.density <= _clip_density()] = 0.0
            np.subtract(pt.x, y, out=y)
            if pt.density is not None and not cheap:
                # entrants: products at x = 0 (w = 0, so the linear model keeps
                # them closed) whose a at pi + d falls below the point where they
                # open get their exact allocation there; left out, their seats
                # (few, but at a marginal value near the fare) are lost
                a_new = self.to_products(pt.a_g)
                a_new += da
                ent = np.flatnonzero((pt.x <= 0) & (a_new < sub.open_threshold()))
                if len(ent):
                    y[ent] = sub.normal_allocation(ent, a_new[ent])
            np.maximum(y, 0.0, out=y)
            if not cheap:
                y = self._close_slack(pt, y)
            load_y = self.A_g @ self.to_groups(y)
            scale_g = self._scale_to_capacity(load_y)
            # kept for greedy_recover: the allocation before scaling, and its loads
            self._unscaled = (pt, None if scale_g is None else y.copy(), load_y)
            if scale_g is not None:
                y *= self.to_products(scale_g)
            if sub.all_normal:
                dy = y - pt.x
                dy_g = self.to_groups(dy)
        if not sub.all_normal:
            return y, float(sub.fare @ sub.expected_sales(y))
        lin = float(pt.a_g @ dy_g)
        yy = pt.x + dy if y is None else y
        dy2 = np.square(dy)
        # Taylor's bound uses f S'(x) = a, true inside only: products opened from
        # x = 0 (f S'(0) <= a there) get their exact revenue change instead
        opened = _opened(pt, yy)
        exact = 0.0
        if len(opened):
            lin -= float(pt.a_g[self.group_of(opened)] @ dy[opened])
            dy2[opened] = 0.0
            exact = sub.revenue_change(opened, pt.x[opened], yy[opened])
        # the cheap bound (largest density anywhere) first; the tighter one
        # (largest density between x and y, one exp) only when it matters
        quad = 0.5 * float(sub.curvature() @ dy2)
        if quad > 1e-4 * self.tol * abs(pt.revenue) and not cheap:
            if pt.density is not None:
                quad = 0.5 * float(sub.curvature_bound_at(pt.x, yy, pt.density) @ dy2)
            else:
                quad = 0.5 * float(sub.curvature_bound(pt.x, yy) @ dy2)
        return y, pt.revenue + lin - quad + exact

    def revenue_bound(self, pt, y):
        """A lower bound on sum_j f_j S_j(y_j), within 1e-2 tol of the exact value.

        Per product, Taylor's bound f S(y) >= f S(x) + a (y - x) - c (y - x)^2 / 2
        (c from :meth:`decomp.distributions.Subproblems.curvature_bound_at`) and,
        for the products whose c (y - x)^2 / 2 terms are largest, until the others
        sum to at most 1e-2 tol |revenue|, the exact change f (S(y) - S(x)).
        Products opened from x = 0 always get the exact change (Taylor's bound
        with a = f S'(x) holds inside only). Near the optimum few products move
        much, so this costs a fraction of the exact revenue of every product
        (one loss-function pass over all of them).
        Non-normal demand, or no density at x: the exact revenue."""
        sub = self.sub
        if not sub.all_normal or pt.density is None or len(y) == 0:
            return sub.revenue(y)
        dy = y - pt.x
        q = sub.curvature_bound_at(pt.x, y, pt.density)
        q *= np.square(dy)
        q *= 0.5
        bound = pt.revenue + float(pt.a_g @ self.to_groups(dy)) - float(q.sum())
        exact = _largest_terms(q, 1e-2 * self.tol * max(1.0, abs(pt.revenue)))
        opened = _opened(pt, y)
        if len(opened):              # Taylor's bound holds inside only (see recover)
            if exact is None:
                exact = np.zeros(len(y), dtype=bool)
            exact[opened] = True
        if exact is None:
            return bound
        idx = np.flatnonzero(exact)
        bound += float(q[idx].sum()) - float(pt.a_g[self.group_of(idx)] @ dy[idx])
        return bound + sub.revenue_change(idx, pt.x[idx], y[idx])

    # -- Newton ------------------------------------------------------------------------------------
    def settle_block(self, pt, legs, rtol, max_iter=30):
        """Newton on the bid prices of ``legs`` alone, every other bid price held:
        the exact minimum of the dual over that block (a block-coordinate step,
        so the dual decreases), from ``pt``. Only the products on those legs
        take part, so for a few legs an iteration costs a tiny fraction of a
        full one. Used when the gap is certified (or nearly) and a few bid
        prices still move: a leg whose curvature comes from a product sitting
        at x = 0 (its curvature is largest just there and 0 beyond) makes full
        Newton steps overshoot and come back for several iterations.
        Returns the new bid prices (all legs), or None when the block is
        degenerate. Normal demand, products in runs of the same legs."""
        AU = self.A_g[legs]
        groups = np.unique(AU.indices)
        if len(groups) == 0:
            return None
        AUg = AU[:, groups].tocsr()
        AUgT = AUg.T.tocsr()
        counts = self.g_count[groups]
        offsets = np.zeros(len(groups), dtype=np.int64)
        np.cumsum(counts[:-1], out=offsets[1:])
        prod = np.repeat(self.g_start[groups] - offsets, counts) + np.arange(int(counts.sum()))
        sub = distributions.Subproblems(self.sub.fare[prod], self.sub.mean[prod], self.sub.std[prod])
        cap = self.cap[legs]
        pi0 = pt.pi[legs]
        a_fixed = pt.a_g[groups] - AUgT @ pi0

        def value(piU):
            v = sub.evaluate(np.repeat(a_fixed + AUgT @ piU, counts))
            return v, float(v.exact_value + cap @ piU)

        piU = pi0.copy()
        v, q = value(piU)
        for _ in range(max_iter):
            xg = np.add.reduceat(v.x, offsets)
            wg = np.add.reduceat(v.w, offsets)
            grad = cap - AUg @ xg
            H = (AUg.multiply(wg[None, :]) @ AUgT).toarray()
            dg = np.diag(H).copy()
            if not np.all(dg > 0):
                return None
            sc = 1.0 / np.sqrt(dg)
            Hs = H * sc[:, None] * sc[None, :]
            Hs[np.diag_indices_from(Hs)] = 1.0 + 1e-12
            try:
                d = sla.cho_solve(sla.cho_factor(Hs, lower=True, check_finite=False), -grad * sc,
                                  check_finite=False) * sc
            except (np.linalg.LinAlgError, sla.LinAlgError):
                return None
            if np.all(np.abs(d) <= rtol * piU):
                piU = _step(piU, d / piU, 1.0)
                break
            t, slope = 1.0, float(grad @ d)
            for _ in range(_MAX_BACKTRACK):
                trial = _step(piU, d / piU, t)
                vt, qt = value(trial)
                if qt <= q + _ARMIJO * min(float(grad @ (trial - piU)), 0.0) or \
                        (qt - q <= 1e-15 * (abs(q) + 1.0) and slope <= 0):
                    break
                t *= 0.5
            else:
                return None
            piU, v, q = trial, vt, qt
        pi = pt.pi.copy()
        pi[legs] = piU
        return pi

    def _secant_curvature(self, pt, prev, wg):
        """Per-group curvature with the products that crossed x = 0 between the
        previous point and this one given their secant slope |dx| / |da|
        instead of their local one (0 outside; largest just inside): the model
        then sees the curvature they will show if the next step crosses back."""
        if pt.density is None or prev.density is None or len(pt.x) != len(prev.x):
            return wg
        crossed = np.flatnonzero((pt.x > 0) != (prev.x > 0))
        if len(crossed) == 0:
            return wg
        g = self.group_of(crossed)
        da = np.abs(pt.a_g[g] - prev.a_g[g])
        dx = np.abs(pt.x[crossed] - prev.x[crossed])
        ok = da > 0
        w_sec = np.divide(dx, da, out=np.zeros_like(dx), where=ok)
        wg = wg.copy()
        np.add.at(wg, g[ok], w_sec[ok] - pt.w[crossed][ok])
        np.maximum(wg, 0.0, out=wg)
        return wg

    def newton_direction(self, pt, ridge=1e-12, damping=0.0, prev=None):
        """Newton's direction, or with ``damping`` mu > 0 the Levenberg-Marquardt
        one, (H + mu diag(r)) d = -g with r_i = sum of mean_j / f_j over the
        leg's products (the curvature of their terms smoothed over a window
        of width f): used for non-smooth products, whose Hessian is zero
        between breakpoints."""
        wg = self.to_groups(pt.w) if pt.w_g is None else pt.w_g
        if prev is not None:
            wg = self._secant_curvature(pt, prev, wg)
        hv = self.E @ wg
        if damping > 0:
            hv[self.diag_pair] += damping * self.leg_curvature_scale
        diag = hv[self.diag_pair]
        flat = ~(diag > 0) | ~np.isfinite(diag)
        dsc = np.where(flat, 1.0, 1.0 / np.sqrt(np.where(flat, 1.0, diag)))
        sv = hv * dsc[self.p_row]
        sv *= dsc[self.p_col]
        # Couplings of a leg with slack (diagonal up to 1e300) scale to 1e-150 and
        # below; their products would be subnormal and slow the factorization
        # a hundredfold. Below 1e-30 of the unit diagonal they change nothing
        # (1e-15 in single precision, where subnormals start near 1e-38).
        sv[np.abs(sv) < (1e-15 if self.mixed else 1e-30)] = 0.0
        sv[self.diag_pair] = 1.0 + ridge
        b = -pt.grad * dsc
        b[flat] = 0.0
        for attempt in range(6):
            try:
                u = self._solve(sv, b)
                break
            except (np.linalg.LinAlgError, sla.LinAlgError):
                ridge_k = 10.0 ** (-8 + 2 * attempt)
                sv[self.diag_pair] = 1.0 + ridge_k
        else:
            u = b.copy()                 # steepest descent in the scaled space
        d = u * dsc
        self._last = (pt, dsc, flat)
        if np.any(flat):
            g = pt.grad[flat]
            d[flat] = np.where(g > 0, -0.5 * pt.pi[flat], np.where(g < 0, pt.pi[flat], 0.0))
        return d, int(flat.sum())

    def _solve(self, sv, b):
        if not self.schur:
            H = self.Hbuf
            H.fill(0.0)
            H.ravel(order="F")[self.flat] = sv
            c = sla.cho_factor(H, lower=True, overwrite_a=True, check_finite=False)
            self._inv = lambda rhs: sla.cho_solve(c, rhs, check_finite=False)
            return self._inv(b)
        if self.mixed:
            try:
                return self._solve_schur_mixed(sv, b)
            except (np.linalg.LinAlgError, sla.LinAlgError, FloatingPointError):
                pass                     # fall back to double precision
        MT = self.MT
        c = self._schur_factor(sv, MT, self.S, blas.dsyrk)
        self._inv = lambda rhs: self._schur_apply_inverse(c, MT, rhs)
        return self._inv(b)

    def _schur_factor(self, sv, MT, S, syrk):
        """Fill the coupling block MT and H_RR (in S) from the scaled pairs ``sv``, then
        S <- H_RR - M M^T (M = MT^T) by ``syrk`` (dsyrk or ssyrk, the precision of MT
        and S) and return the Cholesky factor of this Schur complement."""
        # MT's pattern is fixed and nothing else writes MT: no refill needed
        # (S is overwritten by the factorization)
        S.fill(0.0)
        MT.ravel(order="F")[self.s_ir_flat] = sv[self.s_ir]
        S.ravel(order="F")[self.s_rr_flat] = sv[self.s_rr]
        S = syrk(-1.0, MT, beta=1.0, c=S, trans=1, lower=1, overwrite_c=1)
        return sla.cho_factor(S, lower=True, overwrite_a=True, check_finite=False)

    def _schur_apply_inverse(self, c, MT, b):
        """H^{-1} b from the Cholesky factor c of the Schur complement (unit I block)."""
        dt = MT.dtype
        bI, bR = b[self.I].astype(dt), b[self.R].astype(dt)
        uR = sla.cho_solve(c, bR - MT.T @ bI, check_finite=False)
        u = np.empty(self.n)
        u[self.R] = uR
        u[self.I] = bI - MT @ uR
        return u

    def _scaled_matrix(self, sv):
        """The scaled Hessian (float64) as a symmetric CSR matrix, from its
        lower-triangle pairs ``sv`` (the pattern is built once)."""
        if getattr(self, "_hs_perm", None) is None:
            off = self.off
            rows = np.concatenate([self.p_row, self.p_col[off]])
            cols = np.concatenate([self.p_col, self.p_row[off]])
            src = np.concatenate([np.arange(self.n_pairs), off])
            order = np.lexsort((cols, rows))
            self._hs_perm = src[order]
            self._hs_indices = cols[order].astype(np.int32)
            self._hs_indptr = np.zeros(self.n + 1, dtype=np.int32)
            np.cumsum(np.bincount(rows, minlength=self.n), out=self._hs_indptr[1:])
        return sp.csr_matrix((sv[self._hs_perm], self._hs_indices, self._hs_indptr), shape=(self.n, self.n))

    def _solve_schur_mixed(self, sv, b):
        """The Schur-complement solve in single precision (half the time of the
        dominant syrk and Cholesky), then iterative refinement in double
        precision against the exact scaled Hessian until the residual is
        1e-11 of b (falls back to double precision if it does not get there)."""
        MT = self.MT32
        c = self._schur_factor(sv, MT, self.S32, blas.ssyrk)
        Hs = self._scaled_matrix(sv)
        u = self._refined(c, MT, Hs, b)
        self._inv = lambda rhs: self._refined(c, MT, Hs, rhs)
        return u

    def _refined(self, c, MT, Hs, b):
        u = self._schur_apply_inverse(c, MT, b)
        bn = float(np.abs(b).max()) or 1.0
        prev = np.inf
        for _ in range(8):
            res = b - Hs @ u
            rn = float(np.abs(res).max())
            if not np.isfinite(rn) or rn > 0.5 * prev:
                raise FloatingPointError("refinement stalled")
            if rn <= 1e-11 * bn:
                return u
            u += self._schur_apply_inverse(c, MT, res)
            prev = rn
        raise FloatingPointError("refinement did not converge")

    # -- starting points ----------------------------------------------------------------------
    def start(self, kind="fare"):
        """A cold-start pi (strictly positive)."""
        n = self.n
        if n == 0:
            return np.zeros(0)
        sub = self.sub
        share_g = 1.0 / np.maximum(self.AT_g.sum(axis=1).A1, 1.0)
        share = sub.fare * self.to_products(share_g)      # fare per leg of each product
        mean = np.maximum(sub.mean, 0.0)
        dem = self.A_g @ self.to_groups(mean)
        rev = self.A_g @ self.to_groups(share * mean)
        avg = rev / np.maximum(dem, 1e-300)
        if kind == "fare":
            return np.maximum(0.5 * avg, 1e-12)
        # heuristic: legs whose mean demand exceeds capacity get a price that
        # grows with the excess, legs with slack a small one
        lf = dem / np.maximum(self.cap, 1e-300)
        pi = avg * np.clip(1.0 - 1.0 / np.maximum(lf, 1e-12), 0.0, 1.0)
        return np.maximum(pi, 1e-3 * avg)


def _opened(pt, y):
    """Products at x = 0 in ``pt`` that have seats in ``y`` (normal fast path)."""
    if pt.density is None:
        return np.zeros(0, dtype=np.int64)
    return np.flatnonzero((pt.x <= 0) & (y > 0))


def _largest_terms(q, budget):
    """Mask of the largest of the terms q >= 0 such that the rest sum to at most
    ``budget`` (within a factor 2 of the fewest: terms are bucketed by binary
    exponent, no sort), or None when all of them do."""
    total = float(q.sum())
    if total <= budget:
        return None
    _, e = np.frexp(q)
    lo = int(e.min())
    csum = np.cumsum(np.bincount(e - lo, weights=q))
    keep = int(np.searchsorted(csum, budget, side="right"))    # buckets below stay Taylor
    return (e >= lo + keep) & (q > 0)


def _clip_density():
    """exp(-z^2/2) at the fractile's clip z = -ndtri(MIN_RATIO), times 1 + 1e-9."""
    from scipy import special

    z = special.ndtri(distributions.MIN_RATIO)
    return float(np.exp(-0.5 * z * z)) * (1.0 + 1e-9)


def _warm_pi(instance, warm_start, default):
    """Bid prices aligned with the instance's legs from a dict or an array."""
    L = instance.n_legs
    if isinstance(warm_start, dict) or hasattr(warm_start, "keys"):
        pos = instance.leg_position()
        unknown = [k for k in warm_start if k not in pos]
        if unknown:
            log.warning("warm start names %d legs not in the instance (ignored), e.g. %r",
                        len(unknown), unknown[0])
        out = default.copy()
        for k, v in warm_start.items():
            if k in pos and v is not None and np.isfinite(float(v)):
                out[pos[k]] = float(v)
        return out
    arr = np.asarray(warm_start, dtype=np.float64)
    if arr.shape != (L,):
        raise ConfigError(f"warm start has shape {arr.shape}; expected ({L},), one bid price per leg "
                          "in instance.leg_ids order (or pass a dict by leg id)")
    return np.where(np.isfinite(arr), arr, default)


@register
class LagrangianMethod:
    """The PNLP by Lagrangian decomposition of the leg capacities (see the module docstring)."""

    name = "lagrangian"
    models = ("pnlp",)

    @classmethod
    def available(cls):
        return True, "numpy/scipy only"

    def solve(self, instance, model, options, warm_start=None) -> SolveResult:
        if model != "pnlp":
            raise ConfigError(f"method 'lagrangian' solves the 'pnlp' model only, not {model!r}")
        so = dict(options.solver_options)
        known = {"start", "linear_solver", "smoothing", "damping", "bid_tol", "precision"}
        unknown = set(so) - known
        if unknown:
            raise ConfigError(f"unknown lagrangian solver option(s) {sorted(unknown)}; valid: {sorted(known)}")
        linear_solver = so.get("linear_solver", "auto")
        if linear_solver not in ("auto", "dense", "schur"):
            raise ConfigError(f"linear_solver must be 'auto', 'dense' or 'schur', got {linear_solver!r}")
        start_kind = so.get("start", "fare")
        precision = so.get("precision", "mixed")
        if precision not in ("mixed", "double"):
            raise ConfigError(f"precision must be 'mixed' or 'double', got {precision!r}")
        if start_kind not in ("heuristic", "fare"):
            raise ConfigError(f"start must be 'heuristic' or 'fare', got {start_kind!r}")

        t0 = time.perf_counter()
        with _blas_threads(1, instance.n_legs):
            net = _Network(instance, linear_solver, mixed=precision == "mixed", tol=options.tol,
                           threads=options.threads or _threads.available())
            pi_full0 = np.zeros(instance.n_legs)
            pi_full0[net.legs] = net.start(start_kind)
            if warm_start is not None:
                pi_full0 = _warm_pi(instance, warm_start, pi_full0)
            pi0 = pi_full0[net.legs]
            # strictly positive start: zero or negative bid prices go to a tiny positive value
            floor = 1e-200 * float(net.sub.fare.max(initial=1.0))
            pi0 = np.maximum(pi0, floor)
            t1 = time.perf_counter()

            method = options.dual_method
            limit = options.iteration_limit or ITERATION_LIMITS[method]
            deadline = None if options.time_limit is None else t0 + options.time_limit
            runner = {"newton": _newton, "lbfgsb": _lbfgsb, "subgradient": _subgradient}[method]
            out = runner(net, pi0, options, limit, deadline, so, t1)
        t2 = time.perf_counter()

        pi_full = np.zeros(instance.n_legs)
        pi_full[net.legs] = out["pi"]
        x_full = np.zeros(instance.n_products)
        if net.prods is None:
            x_full[:] = out["x"]
        else:
            x_full[net.prods] = out["x"]
        _price_zero_legs(instance, net, pi_full)
        cert = _certify.certify(instance, "pnlp", x_full, pi_full, threads=options.threads)
        t3 = time.perf_counter()
        term = out["termination"]
        sstatus = _certify.solution_status(term, cert, gap_tol=options.tol)
        if term is Termination.OPTIMAL and sstatus.value != "optimal":
            # the independent certificate disagrees with the loop's own: say so
            log.warning("lagrangian: loop gap %.3g but certificate gap %.3g / violation %.3g",
                        out["gap"], cert.gap, cert.max_violation_rel)
        from .highs import options_record

        return SolveResult(
            model=model, method=self.name, termination=term, solution_status=sstatus,
            objective=cert.primal_value, bound=cert.dual_value, gap=cert.gap,
            leg_ids=instance.leg_ids, bid_price_array=pi_full, product_ids=instance.product_ids,
            allocation=x_full, iterations=out["iterations"],
            seconds={"build": t1 - t0, "solve": t2 - t1, "certify": t3 - t2},
            solver=f"decomp-lagrangian-{method}", solver_version=_version(),
            raw_status=out["raw_status"], message=out["message"], certificate=cert,
            history=out["history"],
            options={**options_record(options), "linear_solver": "schur" if net.schur else "dense",
                     "start": "warm" if warm_start is not None else start_kind})


#: Below this many legs the dense factorizations are too small for BLAS threads to matter.
_BLAS_LIMIT_FROM_LEGS = 300


def _blas_threads(n, n_legs):
    """Limit BLAS threads for the dense factorizations (called with 1: a busy 2-core
    machine makes spinning BLAS threads 10x slower than one, and idle BLAS threads
    spin against the product threads: at 1,000,000 products two BLAS threads made
    the product subproblems 1.7 times slower); a no-op without threadpoolctl or on
    small networks, where the library scan (about 10 ms) would cost more than it saves."""
    import contextlib

    if n_legs < _BLAS_LIMIT_FROM_LEGS:
        return contextlib.nullcontext()
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        return contextlib.nullcontext()
    return threadpool_limits(limits=int(n), user_api="blas")


def _version():
    try:
        from importlib.metadata import version

        return version("decomp")
    except Exception:  # noqa: BLE001 - metadata missing in a source checkout
        return None


def _price_zero_legs(instance, net, pi_full):
    """Smallest bid prices on zero-capacity legs that close every product on them."""
    if not np.any(net.dead):
        return
    dead = np.nonzero(net.dead)[0]
    sub = distributions.Subproblems.from_instance(instance, dead)
    thr = sub.zero_threshold()
    lpp = instance.legs_per_product
    ptr = instance.leg_ptr
    # nnz of dead products without a Python loop over products
    starts = ptr[dead]
    counts = lpp[dead]
    idx = np.repeat(starts - np.cumsum(np.concatenate([[0], counts[:-1]])), counts) + np.arange(counts.sum())
    legs = instance.leg_index[idx]
    owner = np.repeat(np.arange(len(dead)), counts)
    other = np.bincount(owner, weights=pi_full[legs], minlength=len(dead))
    need = np.maximum(thr - other, 0.0)
    zl = net.zero_leg
    on_zero = zl[legs]
    best = np.zeros(instance.n_legs)
    np.maximum.at(best, legs[on_zero], need[owner[on_zero]])
    pi_full[zl] = best[zl]


def _step(pi, rel, t):
    """The trial point along Newton's direction d (rel = d / pi), kept > 0.

    Decreases are taken in u = log(pi), pi exp(t d / pi): slack legs, whose load
    grows like sqrt(log(1 / pi)), then fall in a few steps instead of
    overshooting below zero; increases are the plain Newton step pi + t d (in
    log space a leg rising from 1e-40 would force a tiny t on every leg).
    Both agree with pi + t d to first order. Measured at 10,000 / 100,000
    products: 9 / 8 iterations, against 12 / 12 with log steps both ways and
    60+ with projected (floored) plain steps.
    """
    r = t * rel
    out = np.clip(r, -700.0, 0.0)
    np.exp(out, out=out)
    np.copyto(out, 1.0 + r, where=r > 0)
    out *= pi
    return np.maximum(out, 1e-300, out=out)


def _record(it, pt, primal, gap, step, t_start):
    return IterationRecord(iteration=it, dual_value=float(pt.exact), primal_value=float(primal),
                           gap=float(gap), step=float(step), pi_norm=float(np.linalg.norm(pt.pi)),
                           seconds=time.perf_counter() - t_start)


def _gap(dual, primal):
    return (dual - primal) / max(1.0, abs(primal))


# ---------------------------------------------------------------------------
# Dual methods
# ---------------------------------------------------------------------------
def _newton(net, pi, options, limit, deadline, so, t_start):
    tol = options.tol
    nonsmooth = net.sub.nonsmooth
    delta = float(so.get("smoothing", 1e-3)) if nonsmooth else 0.0
    delta_min = 1e-3 * tol
    history = []
    pt = net.evaluate(pi, delta)
    term, raw, msg = Termination.ITERATION_LIMIT, "iteration_limit", None
    it = 0
    t = 0.0
    final_pi = None
    mu = float(so.get("damping", 0.0))
    bid_tol = float(so.get("bid_tol", 1e-4 if tol <= 1e-7 else np.inf))
    certified = False          # the gap was within tol at some earlier iteration
    unsettled = 0              # iterations near the optimum with bid prices still moving
    prev = None                # the previous iterate (secant curvature of crossing products)
    block, n_block = False, 0  # the last iteration was a block step; how many so far
    best_primal = -np.inf      # the best certified primal value so far
    while True:
        d, n_flat = net.newton_direction(pt, damping=mu, prev=prev if _SECANT else None)
        # bid prices settled: Newton's step is below bid_tol relative on every leg
        # priced at least 1e-3 of the largest (the dual is flat in some directions,
        # so a small gap alone does not pin the bid prices down)
        big = pt.pi >= 1e-3 * pt.pi.max(initial=0.0)
        settled = nonsmooth or not np.any(np.abs(d[big]) > bid_tol * pt.pi[big])
        # Newton's decrement -g.d / 2 estimates q(pi) - q*, a lower bound on the
        # gap (measured: gap / decrement between 0.9 and 1.7 at 1,000,000
        # products). While it is far above tol (smooth duals only), and while
        # only the bid prices are still settling (the gap was certified within
        # tol before), no recovery: the record pairs q(pi) with the best
        # allocation recovered so far (feasible, so still a certified gap; at
        # the first iteration the cheap recovery, without the extra correction
        # and with the global curvature bound), and the stopping iteration
        # recovers again at its own point. Nor while the bid prices still move
        # by more than bid_tol (Newton cannot stop there), except every
        # _SETTLE_CHECK-th such iteration, so that a run that ends at its
        # iteration or time limit while settling has a recent certificate.
        dec_rel = -0.5 * float(pt.grad @ d) / max(1.0, abs(pt.exact))
        far = net.sub.all_normal and not nonsmooth and dec_rel > _FAR * tol
        cheap = far
        if not settled and not far:
            unsettled += 1
        waiting = not settled and np.isfinite(best_primal) and unsettled % _SETTLE_CHECK != 0
        if ((certified or waiting) and not settled) or (far and it > 0 and np.isfinite(best_primal)):
            y_n, p_newton, p_scaled = None, best_primal, -np.inf
            cheap = True
        else:
            # two recoveries: the scaled x(pi) and the Newton-predicted allocation
            # (only the latter for normal demand, where it is measured better)
            y_n, p_newton = net.recover(pt, d, want_y=True, cheap=cheap)
            p_scaled = -np.inf if net.sub.all_normal else net.recover(pt, want_y=False)[1]
        last_drop = (history[-1].dual_value - pt.exact) / max(1.0, abs(pt.exact)) if history else np.inf
        if (net.sub.all_normal and not cheap and tol < _gap(pt.exact, p_newton) <= 1e-3
                and (last_drop <= 10.0 * tol or not nonsmooth)):
            # final phase: the exact revenue of y (one loss-function pass)
            # instead of its Taylor bound, which lags the dual by orders of
            # magnitude (with a smooth dual this phase starts once Newton's
            # decrement is within 1.5 tol, see `far`)
            p_newton = max(p_newton, net.revenue_bound(pt, y_n))
            y_g = net.greedy_recover(pt) if _gap(pt.exact, p_newton) > tol else None
            if y_g is not None:
                p_greedy = net.revenue_bound(pt, y_g)
                if p_greedy > p_newton:
                    y_n, p_newton = y_g, p_greedy
        use_newton = p_newton >= p_scaled
        primal = max(p_scaled, p_newton)
        best_primal = max(best_primal, primal)
        gap = _gap(pt.exact, primal)
        history.append(_record(it, pt, primal, gap, t, t_start))
        log.debug("newton %d: q=%.12g primal=%.12g (scaled %.12g) gap=%.3g dec=%.3g step=%g flat=%d delta=%g%s%s",
                  it, pt.exact, primal, p_scaled, gap, dec_rel, t, n_flat, pt.smoothing,
                  " (cheap)" if cheap else "", "" if settled else " (settling)")
        certified = certified or gap <= tol
        if gap <= tol and settled:
            term, raw, msg = Termination.OPTIMAL, "optimal", f"certified gap {gap:.3g} <= tol {tol:g}"
            # The Newton-predicted allocation belongs to pi + d: return that pi
            # too when its dual value is no worse (one more evaluation, no
            # factorization). On flat directions of the dual, pi + d is far
            # closer to the optimal bid prices than pi (quadratic convergence).
            trial = net.evaluate(_step(pt.pi, d / pt.pi, 1.0), 0.0)
            if use_newton and trial.exact <= pt.exact:
                final_pi = trial.pi
                gap = _gap(trial.exact, primal)
            break
        if it >= limit:
            msg = f"iteration limit {limit} reached at gap {gap:.3g}"
            break
        if deadline is not None and time.perf_counter() > deadline:
            term, raw, msg = Termination.TIME_LIMIT, "time_limit", f"time limit reached at gap {gap:.3g}"
            break
        it += 1
        block_last, block = block, False
        if (_BLOCK and not block_last and n_block < 3 and not settled and not far and not nonsmooth
                and net.sub.all_normal and net.g_start is not None):
            moving = np.nonzero(big & (np.abs(d) > bid_tol * pt.pi))[0]
            if 0 < len(moving) <= max(8, 0.02 * net.n):
                new_pi = net.settle_block(pt, moving, 1e-2 * bid_tol)
                if new_pi is not None:
                    nt = net.evaluate(new_pi, pt.smoothing)
                    if nt.value <= pt.value:
                        prev, pt, t, block = pt, nt, 1.0, True
                        n_block += 1
                        continue
        rel = d / pt.pi
        slope = float(pt.grad @ d)
        t = 1.0
        accepted = None
        for _ in range(_MAX_BACKTRACK):
            trial = _step(pt.pi, rel, t)
            nt = net.evaluate(trial, pt.smoothing)
            dec = float(pt.grad @ (trial - pt.pi))
            noise = 1e-15 * (abs(pt.value) + 1.0)
            if nt.value <= pt.value + _ARMIJO * min(dec, 0.0) or (nt.value - pt.value <= noise and dec <= 0):
                accepted = nt
                break
            t *= 0.5
        if accepted is None:
            term, raw = Termination.NUMERICAL_ERROR, "line_search_failed"
            msg = f"line search found no decrease (directional derivative {slope:.3g}) at gap {gap:.3g}"
            break
        prev, pt = pt, accepted
        if mu > 0:        # Levenberg-Marquardt damping follows the step length
            mu = mu * 10.0 if t < 0.1 else (mu * 0.1 if t == 1.0 else mu)
            mu = min(max(mu, 1e-12), 1e12)
        # continuation: lower the smoothing once the smoothed dual is nearly
        # minimized (its Newton decrement small against the smoothing's own
        # error, about delta |q|) or the line search stalls
        if nonsmooth and delta > delta_min and (t == 1.0 or -slope <= 1e-2 * delta * abs(pt.value)):
            delta = max(delta_min, 0.1 * delta)
            pt = net.evaluate(pt.pi, delta)
    if term is Termination.OPTIMAL and use_newton and y_n is not None:
        y = y_n                   # recovered at this point with this d (not again)
    else:
        y, _ = net.recover(pt, d if use_newton else None)
    return dict(pi=pt.pi if final_pi is None else final_pi, x=y, gap=gap, termination=term, raw_status=raw, message=msg,
                iterations=it, history=tuple(history))


def _lbfgsb(net, pi, options, limit, deadline, so, t_start):
    from scipy.optimize import minimize

    tol = options.tol
    history = []
    best = {"gap": np.inf, "pi": pi, "x": None, "stop": None}

    def fun(p):
        pt = net.evaluate(np.asarray(p, dtype=np.float64))
        best["last"] = pt
        return pt.exact, pt.grad

    def callback(intermediate_result):
        p = np.asarray(intermediate_result.x, dtype=np.float64)
        pt = best.get("last")
        if pt is None or not np.array_equal(pt.pi, p):
            pt = net.evaluate(p)
        y, primal = net.recover(pt)
        gap = _gap(pt.exact, primal)
        k = len(history) + 1
        history.append(_record(k, pt, primal, gap, 1.0, t_start))
        if gap < best["gap"]:
            best.update(gap=gap, pi=pt.pi.copy(), x=y)
        if gap <= tol:
            best["stop"] = Termination.OPTIMAL
            raise StopIteration
        if deadline is not None and time.perf_counter() > deadline:
            best["stop"] = Termination.TIME_LIMIT
            raise StopIteration

    res = minimize(fun, pi, jac=True, method="L-BFGS-B", bounds=[(0.0, None)] * net.n,
                   callback=callback,
                   options={"maxiter": limit, "maxfun": 20 * limit, "ftol": 0.0, "gtol": 0.0, "maxcor": 20})
    if best["x"] is None:
        pt = net.evaluate(np.asarray(res.x, dtype=np.float64))
        y, primal = net.recover(pt)
        best.update(gap=_gap(pt.exact, primal), pi=pt.pi, x=y)
    if best["stop"] is not None:
        term = best["stop"]
    else:
        term = lbfgsb_termination(res.message)
    msg = f"L-BFGS-B: {res.message}; best certified gap {best['gap']:.3g}"
    return dict(pi=best["pi"], x=best["x"], gap=best["gap"], termination=term,
                raw_status=str(res.message), message=msg, iterations=int(res.nit), history=tuple(history))


def _subgradient(net, pi, options, limit, deadline, so, t_start):
    """Projected subgradient with the Polyak step toward the best primal value."""
    tol = options.tol
    history = []
    pt = net.evaluate(pi)
    best_pt, best_x, best_primal = pt, None, -np.inf
    term, raw = Termination.ITERATION_LIMIT, "iteration_limit"
    gap = np.inf
    it = 0
    lam = 1.0
    best_dual = np.inf
    stall = 0
    while True:
        y, primal = net.recover(pt)
        if primal > best_primal:
            best_primal, best_x = primal, y
        if pt.exact < best_dual:
            best_dual, best_pt, stall = pt.exact, pt, 0
        else:
            stall += 1
            if stall >= 20:             # halve the Polyak factor when the dual stalls
                lam, stall = 0.5 * lam, 0
        gap = _gap(best_dual, best_primal)
        history.append(_record(it, pt, primal, gap, lam, t_start))
        if gap <= tol:
            term, raw = Termination.OPTIMAL, "optimal"
            break
        if it >= limit:
            break
        if deadline is not None and time.perf_counter() > deadline:
            term, raw = Termination.TIME_LIMIT, "time_limit"
            break
        it += 1
        g = pt.grad
        gg = float(g @ g)
        if gg <= 0:
            term, raw = Termination.OPTIMAL, "zero_gradient"
            break
        step = lam * (pt.exact - best_primal) / gg
        pt = net.evaluate(np.maximum(pt.pi - step * g, 0.0))
    msg = f"subgradient: best certified gap {gap:.3g} after {it} iterations"
    return dict(pi=best_pt.pi, x=best_x, gap=gap, termination=term, raw_status=raw, message=msg,
                iterations=it, history=tuple(history))
