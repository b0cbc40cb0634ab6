"""The exact finish: a restricted master LP over offer sets, priced market by market until nothing is left.

At bid prices pi near the optimum most markets' best offer set is unambiguous: no
product's net fare is within ``delta`` of the market's best value. Those markets are
*fixed* to that set and enter the master together, as one column (their summed sales,
revenue and seats) with a share t in [0, 1]. The others are *free*: each has a
convexity row (its offer sets' shares add up to at most 1; the rest is offering
nothing) and columns for its revenue-ordered sets near the threshold
(:mod:`decomp.choice.columns`). Products outside every market are fixed open or closed
the same way, or free with a share in [0, 1]. The master is the choice-based LP
(Liu and van Ryzin 2008) restricted to these columns; HiGHS solves it by the dual
simplex method, and each round adds to the same HiGHS model, so it starts from the
last basis.

Pricing at the master's duals (pi for the legs, sigma_m for the convexity rows) is exact
(:func:`decomp.choice.mnl.best_offer`): a free market whose best set earns
arrivals_m R_m(pi) > sigma_m gets that set as a new column; a fixed market whose set
earns less than its best at pi, or another product fixed the wrong way, becomes free
(its set leaves the aggregate column and becomes a column of its own). When nothing
is added, the master's primal (its columns' sales, a feasible point of the sales LP)
and its duals pi give equal values: every market then earns its best at pi, so q(pi)
equals the master's objective (LP duality; the certificate checks it independently).
Each round adds a column or frees a market, and there are finitely many, so the loop
ends.

The duals of a restricted master can swing far from the optimum (a known trait of
column generation), and pricing at such duals frees many markets for nothing. So the
master is stabilized by a box around the starting bid prices (the boxstep method,
Marsten, Hogan and Blankenship 1975): on each leg it may buy seats at p_hi = pi0 + D
or sell seats at p_lo = pi0 - D, which keeps its duals in [p_lo, p_hi]. A finish with
seats bought or sold is not an answer: the box is widened (D x 4) on those legs and
the rounds go on; the loop ends only when no seat is traded and pricing adds nothing,
so the answer is that of the unstabilized master.
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.sparse as sp

from . import columns as cols_mod
from . import mnl

log = logging.getLogger(__name__)


@dataclasses.dataclass(frozen=True)
class Round:
    """One master solve and its pricing (kept on the history)."""

    round: int
    free_markets: int
    columns: int
    objective: float
    added_columns: int
    freed: int
    simplex_iterations: int
    seconds: float


@dataclasses.dataclass(frozen=True)
class Duals:
    """The master's answer: objective, duals pi (legs) and sigma (per market; 0 for fixed ones)."""

    objective: float
    pi: np.ndarray
    sigma: np.ndarray
    iterations: int


def free_markets(net, pi, delta_m, smooth_R=None) -> np.ndarray:
    """Markets with a product within ``delta_m`` of their best value at ``pi``, or of ``smooth_R``
    (the smoothed dual's value, which lies above it)."""
    mp = net.mp
    r_m, _ = net.net_fares(pi)
    R, _ = mnl.best_offer(mp, r_m)
    dm = delta_m[mp.market]
    near = (np.abs(r_m - R[mp.market]) <= dm) & (r_m > -dm)
    if smooth_R is not None:
        near |= np.abs(r_m - smooth_R[mp.market]) <= dm
    return np.bincount(mp.market, weights=near, minlength=mp.n_markets) > 0


def candidate_sets(net, ranges, markets, pi, delta_m) -> cols_mod.Columns:
    """For each of ``markets``: the revenue-ordered sets whose threshold lies within delta of R_m at pi."""
    mp = net.mp
    if len(markets) == 0:
        return cols_mod.Columns.empty(net.n_legs)
    r_m, _ = net.net_fares(pi)
    R, _ = mnl.best_offer(mp, r_m)
    chosen = np.zeros(mp.n_markets, dtype=bool)
    chosen[np.asarray(markets, dtype=np.int64)] = True
    near = chosen[mp.market] & (np.abs(r_m - R[mp.market]) <= delta_m[mp.market]) & (r_m > 0)
    thr_m = np.concatenate([np.asarray(markets, dtype=np.int64), mp.market[near]])
    thr = np.concatenate([R[markets] + delta_m[markets], r_m[near]])
    return cols_mod.threshold_sets(net, ranges, thr_m, r_m, thr)


class Master:
    """The restricted master LP, kept in one HiGHS model across rounds.

    LP columns: 0 is the aggregate of the fixed markets and products; then, in the
    order added, offer-set columns (``self.cols``) and shares of free other products.
    Rows: the legs, then one convexity row per free market in the order freed.
    """

    def __init__(self, net, pi, free, delta_m, delta_o, ranges, box, verbose=False):
        import highspy

        from ..methods.highs import new_highs

        self.net, self.ranges = net, ranges
        mp = net.mp
        r_m, r_o = net.net_fares(pi)
        _, offered = mnl.best_offer(mp, r_m)
        self.free = np.asarray(free, dtype=bool).copy()
        self.fixed_offered = offered & ~self.free[mp.market]
        self.free_o = np.abs(r_o) <= delta_o
        self.open_o = r_o > 0
        self.row_of = np.full(mp.n_markets, -1, dtype=np.int64)
        self.cols = cols_mod.Columns.empty(net.n_legs)
        self.lp_col_of_set = np.zeros(0, dtype=np.int64)      # LP column of each offer-set column
        self.lp_col_of_o = np.full(len(net.mean_o), -1, dtype=np.int64)
        self.n_rows, self.n_cols = net.n_legs, 0
        self.rounds: list[Round] = []
        self._inf = highspy.kHighsInf
        self.h = h = new_highs(verbose)
        h.setOptionValue("output_flag", bool(verbose))
        h.changeObjectiveSense(highspy.ObjSense.kMaximize)
        L = net.n_legs
        h.addRows(L, np.full(L, -self._inf), net.capacity.astype(np.float64), 0, np.zeros(0, np.int32),
                  np.zeros(0, np.int32), np.zeros(0))
        load, rev = self._aggregate()
        self._agg_load = load
        nz = np.flatnonzero(load)
        # HiGHS keeps one thread scheduler per process; an earlier solve with another thread count
        # (the simulation's threads=1) would make this run fail unless it is reset
        h.resetGlobalScheduler(True)
        h.addCol(rev, 0.0, 1.0, len(nz), nz.astype(np.int32), load[nz])
        self.n_cols = 1
        self._add_box(np.asarray(pi, dtype=np.float64), np.broadcast_to(np.asarray(box, dtype=np.float64), (L,)))
        self._add_rows(np.flatnonzero(self.free))
        self._add_sets(candidate_sets(net, ranges, np.flatnonzero(self.free), pi, delta_m))
        self._add_shares(np.flatnonzero(self.free_o))

    # -- the LP ---------------------------------------------------------------------
    def _aggregate(self):
        x_m, x_o = self.fixed_sales()
        return self.net.load(x_m, x_o), float(self.net.fare_m @ x_m + self.net.fare_o @ x_o)

    def fixed_sales(self):
        """Sales of the fixed markets' sets and of the fixed-open other products (the aggregate column)."""
        x_m = mnl.sales(self.net.mp, self.fixed_offered)
        x_o = np.where(~self.free_o & self.open_o, self.net.mean_o, 0.0)
        return x_m, x_o

    def _add_box(self, center, width):
        """Seats to buy on each leg at center + width and to sell at center - width (the stabilizing box)."""
        L = self.net.n_legs
        self.box_center, self.box_width = center.copy(), width.copy()
        idx = np.arange(L, dtype=np.int32)
        cap = self.net.capacity
        # no bid price exceeds the largest fare on its leg: a box reaching beyond it is dropped
        self.box_top = np.zeros(L)
        np.maximum.at(self.box_top, self.net.legs_m.indices,
                      np.repeat(self.net.fare_m, np.diff(self.net.legs_m.indptr)))
        np.maximum.at(self.box_top, self.net.legs_o.indices,
                      np.repeat(self.net.fare_o, np.diff(self.net.legs_o.indptr)))
        buy_up = np.where(center + width <= self.box_top, self._inf, 0.0)
        sell_up = np.where(center - width > 0, cap, 0.0)      # selling at price 0 is no bound (pi >= 0 anyway)
        self.h.addCols(L, -(center + width), np.zeros(L), buy_up, L, idx, idx, np.full(L, -1.0))
        self.h.addCols(L, np.maximum(center - width, 0.0), np.zeros(L), sell_up.astype(np.float64), L, idx, idx,
                       np.ones(L))
        self.buy_cols = 1 + np.arange(L)
        self.sell_cols = 1 + L + np.arange(L)
        self.n_cols += 2 * L

    def _widen_box(self, legs):
        """Four times the box's width on ``legs`` (at least 1e-3 of the top fare; a side that reaches 0 or
        the top fare is dropped, so a leg is widened a bounded number of times)."""
        self.box_width[legs] = np.maximum(4.0 * self.box_width[legs], 1e-3 * self.box_top[legs])
        for i in legs:                                  # a few legs per widening
            c, w = self.box_center[i], self.box_width[i]
            buy, sell = int(self.buy_cols[i]), int(self.sell_cols[i])
            self.h.changeColCost(buy, float(-(c + w)))
            self.h.changeColCost(sell, float(max(c - w, 0.0)))
            if c + w > self.box_top[i]:
                self.h.changeColBounds(buy, 0.0, 0.0)
            if c - w <= 0:
                self.h.changeColBounds(sell, 0.0, 0.0)

    def traded(self) -> np.ndarray:
        """Legs on which the current master solution buys or sells seats (the box binds)."""
        col = np.asarray(self.h.getSolution().col_value)
        tiny = 1e-9 * np.maximum(1.0, self.net.capacity)
        return np.flatnonzero((col[self.buy_cols] > tiny) | (col[self.sell_cols] > tiny))

    def _add_rows(self, markets):
        k = len(markets)
        if k == 0:
            return
        self.h.addRows(k, np.full(k, -self._inf), np.ones(k), 0, np.zeros(0, np.int32), np.zeros(0, np.int32),
                       np.zeros(0))
        self.row_of[markets] = self.n_rows + np.arange(k)
        self.n_rows += k

    def _add_sets(self, new: cols_mod.Columns):
        if new.n == 0:
            return
        conv = sp.csc_matrix((np.ones(new.n), (self.row_of[new.market], np.arange(new.n))),
                             shape=(self.n_rows, new.n))
        M = (sp.vstack([new.loads, sp.csc_matrix((self.n_rows - self.net.n_legs, new.n))], format="csc") + conv)
        M = M.tocsc()
        self.h.addCols(new.n, new.revenue, np.zeros(new.n), np.full(new.n, self._inf), M.nnz,
                       M.indptr[:-1].astype(np.int32), M.indices.astype(np.int32), M.data)
        self.lp_col_of_set = np.concatenate([self.lp_col_of_set, self.n_cols + np.arange(new.n)])
        self.n_cols += new.n
        self.cols = self.cols.concat(new)

    def _add_shares(self, products):
        k = len(products)
        if k == 0:
            return
        net = self.net
        M = (net.legs_o[products].T @ sp.diags(net.mean_o[products])).tocsc()
        self.h.addCols(k, net.fare_o[products] * net.mean_o[products], np.zeros(k), np.ones(k), M.nnz,
                       M.indptr[:-1].astype(np.int32), M.indices.astype(np.int32), M.data)
        self.lp_col_of_o[products] = self.n_cols + np.arange(k)
        self.n_cols += k

    def _update_aggregate(self):
        load, rev = self._aggregate()
        changed = np.flatnonzero(load != self._agg_load)
        for i in changed:                                     # one call per leg whose seats changed
            self.h.changeCoeff(int(i), 0, float(load[i]))
        self.h.changeColCost(0, rev)
        self._agg_load = load

    # -- rounds -----------------------------------------------------------------------
    def solve(self, time_limit=None) -> tuple[str, Duals | None]:
        """Run HiGHS on the current master: (HiGHS model status name, duals or None)."""
        if time_limit is not None:
            self.h.setOptionValue("time_limit", float(max(time_limit, 1e-3)))
        self.h.run()
        status = self.h.getModelStatus().name
        info = self.h.getInfo()
        if status != "kOptimal":
            return status, None
        dual = np.asarray(self.h.getSolution().row_dual)
        L = self.net.n_legs
        sigma = np.zeros(self.net.mp.n_markets)
        fm = np.flatnonzero(self.row_of >= 0)
        sigma[fm] = np.maximum(dual[self.row_of[fm]], 0.0)
        return status, Duals(objective=float(info.objective_function_value), pi=np.maximum(dual[:L], 0.0),
                             sigma=sigma, iterations=int(info.simplex_iteration_count))

    def price(self, duals: Duals, eps: float) -> tuple[int, int]:
        """Add the columns and free the markets (and products) the duals ask for; (added, freed)."""
        net, mp = self.net, self.net.mp
        r_m, r_o = net.net_fares(duals.pi)
        R, offered = mnl.best_offer(mp, r_m)
        best = mp.arrivals * R
        want = np.flatnonzero(self.free & (best - duals.sigma > eps))
        fixed_value = mp.arrivals * mnl.set_value(mp, r_m, self.fixed_offered)
        newly = np.flatnonzero(~self.free & (best - fixed_value > eps))
        loss_o = np.where(self.open_o, np.maximum(-r_o, 0.0), np.maximum(r_o, 0.0)) * net.mean_o
        wrong_o = np.flatnonzero(~self.free_o & (loss_o > eps))
        if len(newly) or len(wrong_o):
            keep_old = cols_mod.offered_sets(net, newly, self.fixed_offered)   # the set they were fixed to
            self.free[newly] = True
            self.fixed_offered &= ~self.free[mp.market]
            self.free_o[wrong_o] = True
            self._update_aggregate()
            self._add_rows(newly)
            self._add_sets(keep_old)
            self._add_shares(wrong_o)
        else:
            keep_old = cols_mod.Columns.empty(net.n_legs)
        new_best = cols_mod.offered_sets(net, np.concatenate([want, newly]), offered)
        self._add_sets(new_best)
        return new_best.n + keep_old.n, len(newly) + len(wrong_o)

    def primal(self):
        """(sales of the market products, of the other products) of the current master solution."""
        col = np.asarray(self.h.getSolution().col_value)
        t_fixed = float(np.clip(col[0], 0.0, 1.0))
        fixed_m, fixed_o = self.fixed_sales()
        t_sets = np.maximum(col[self.lp_col_of_set], 0.0) if self.cols.n else np.zeros(0)
        x_m = t_fixed * fixed_m + self.cols.product_sales(t_sets, len(self.net.mp.market))
        x_o = t_fixed * fixed_o
        fo = np.flatnonzero(self.lp_col_of_o >= 0)
        x_o[fo] = np.clip(col[self.lp_col_of_o[fo]], 0.0, 1.0) * self.net.mean_o[fo]
        return x_m, x_o

    def run(self, eps: float, max_rounds: int, deadline=None):
        """Solve and price until nothing is added: (status, duals of the last solve); rounds in ``self.rounds``."""
        duals = None
        for k in range(1, max_rounds + 1):
            t0 = time.perf_counter()
            remaining = None if deadline is None else deadline - t0
            if remaining is not None and remaining <= 0:
                return "time_limit", duals
            status, d = self.solve(remaining)
            if d is None:
                return status, duals
            duals = d
            added, freed = self.price(d, eps)
            self.rounds.append(Round(k, int(self.free.sum()), self.cols.n, d.objective, added, freed, d.iterations,
                                     time.perf_counter() - t0))
            log.debug("master round %d: objective %.12g, %d free markets, %d columns, +%d columns, %d freed",
                      k, d.objective, int(self.free.sum()), self.cols.n, added, freed)
            if added == 0 and freed == 0:
                binding = self.traded()
                if len(binding) == 0:
                    return "optimal", duals
                self._widen_box(binding)
        return "round_limit", duals
