"""A restricted problem of kinks only is a linear program: solved by HiGHS's dual simplex.

With Poisson, negative-binomial or known demand every product's revenue is piecewise
linear, and the master (:mod:`.master`) keeps its free kinks y_k in [0, w_k] with revenue
r_k y_k under the capacities the fixed kinks leave:

    max  sum r_k y_k   s.t.  sum_k A_j(k) y_k <= c',  0 <= y <= w.

The interior-point method (:mod:`.interior`) solves it too, but not robustly: where each
product has many free kinks (larger means: a product of mean 6 has some seven within the
first master's window) its free steps are short, and the monotone mode crawls along the
kinks one at a time. On a 10,000-product Poisson network with means and capacities 30
times the ladder's it stopped at its iteration limit (300) with gap 3.7e-9, where the
simplex method solved each master in 0.3 s. The simplex method ends at a vertex: the
master's exact optimum and exact duals (the bid prices, not unique where the optimum is
degenerate, as with any LP), which the loop prices against the fixed kinks and certifies
over the whole problem like any other master. Where HiGHS ends without an optimum
(numerical trouble), the interior-point method solves that master instead, and the log
says so; without highspy it solves them all.

Each pricing round adds the freed kinks to the kept HiGHS model as columns at the bound
their reduced cost favours, and the dual simplex goes on from the last basis. Where
pricing added more columns than the model had and they do not fit at those bounds (bid
prices that fell to 0 on slack legs make every kink of their products profitable),
HiGHS's interior-point method with crossover solves that master afresh instead.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import logging
import time

import numpy as np

from .bounds import record
from .interior import _certify, solve_master as interior_solve
from .recovery import recover

log = logging.getLogger(__name__)

#: HiGHS's primal and dual feasibility tolerances for the master (in units of the largest
#: fare and of seats; its default is 1e-7): the certificate asks the gap within tol, 1e-9
#: by default.
FEASIBILITY = 1e-10
#: HiGHS's presolve, off: on the masters of held-out negative binomial networks of 24,000-38,000
#: products (4-14 legs, up to 50,000 columns) it took 2-4 s to remove a few redundant rows and
#: parallel columns where the dual simplex then needed 0.2-0.5 s (family draws 9007, 9012, 9018:
#: solve 3.8 / 4.8 / 2.0 s -> 1.7 / 0.3 / 0.7 s); the ladder's Poisson and negative binomial
#: masters take the same time either way (p1m: 0.4 and 0.8 s of simplex).
PRESOLVE = "off"


@dataclasses.dataclass
class Vertex:
    """The master's optimal vertex: its free kinks' seats (in the model's column order), and
    the model, kept for the next round (:class:`Model`)."""

    owner: np.ndarray
    y: np.ndarray
    simplex_iterations: int       # the dual simplex's, or the crossover's after the barrier
    barrier_iterations: int       # HiGHS's interior-point method's (0 where the simplex solved it)
    snapshot: "Model"

    def allocation(self, master):
        return master.fixed_x + np.bincount(self.owner, weights=self.y, minlength=len(master.fixed_x))


class Model:
    """The HiGHS model of a master and the kinks of its columns. Pricing only frees kinks
    (the windows grow, none is fixed again) and the capacities left by the fixed seats only
    grow with it, so the next round's master is this one with more columns and larger row
    bounds: HiGHS takes them into the solved model and starts from its optimal basis (each
    new column enters at its bound 0; the dual simplex repairs the rest), instead of from
    nothing."""

    def __init__(self, net, fmax):
        import highspy

        from ..methods.highs import new_highs

        self.net, self.fmax, self.highspy = net, fmax, highspy
        self.h = new_highs()
        for name, value in (("primal_feasibility_tolerance", FEASIBILITY),
                            ("dual_feasibility_tolerance", FEASIBILITY), ("presolve", PRESOLVE)):
            self.h.setOptionValue(name, value)
        self.h.changeObjectiveSense(highspy.ObjSense.kMaximize)
        n = net.n
        self.h.addRows(n, np.full(n, -highspy.kHighsInf), np.zeros(n), 0, np.zeros(0, dtype=np.int32),
                       np.zeros(0, dtype=np.int32), np.zeros(0))
        self.kink = np.zeros(0, dtype=np.int64)      # the columns' kinks, in column order
        self.owner = np.zeros(0, dtype=np.int64)

    def holds(self, master) -> bool:
        """Whether every column of this model is a free kink of ``master``."""
        return bool(np.all(np.isin(self.kink, master.kink, assume_unique=True)))

    def take(self, master) -> tuple[int, bool]:
        """Add the master's free kinks this model lacks as columns; its capacities as row
        bounds. Returns (how many columns are new, whether they fit). After a solve, each new column starts at the bound its
        reduced cost at the last duals favours (its upper bound where the kink is profitable,
        as pricing found it), so that the kept basis stays dual feasible and the dual simplex
        goes on from it. (HiGHS puts a new column at 0 and repairs the dual infeasibility
        itself, which took 32 s for the 184,724 columns of one pricing round, 0 simplex
        iterations, on a 38,661-product negative binomial network; 0.03 s this way.)
        They fit where that basis is also primal feasible (the seats of the new columns at their
        upper bounds fit into the rows' slack), hence optimal."""
        net, highspy = self.net, self.highspy
        k = net.products.kinks
        new = ~np.isin(master.kink, self.kink, assume_unique=True)
        kink, owner = master.kink[new], master.kink_owner[new]
        fits = False
        if len(kink):
            basis = self.h.getBasis()
            solved = basis.valid
            if solved:
                sol = self.h.getSolution()
                duals, load = np.asarray(sol.row_dual, dtype=np.float64), np.asarray(sol.row_value, dtype=np.float64)
            cols = net.A_g[:, net.group_of(owner)].tocsc()
            cost, width = k.slope[kink] / self.fmax, k.widths(kink)
            self.h.addCols(len(kink), cost, np.zeros(len(kink)), width,
                           int(cols.nnz), cols.indptr[:-1].astype(np.int32), cols.indices.astype(np.int32),
                           cols.data.astype(np.float64))
            self.kink = np.concatenate([self.kink, kink])
            self.owner = np.concatenate([self.owner, owner])
            if solved:
                profitable = cost - cols.T @ duals > 0
                status = np.array([highspy.HighsBasisStatus.kLower, highspy.HighsBasisStatus.kUpper], dtype=object)
                basis.col_status = list(basis.col_status) + status[profitable.astype(np.int64)].tolist()
                self.h.setBasis(basis)
                # (a row whose slack is nonbasic is at its bound: nothing more fits there)
                more = cols @ np.where(profitable, width, 0.0)
                slack = np.array([st == highspy.HighsBasisStatus.kBasic for st in basis.row_status])
                room = np.where(slack, master.capacity - load, 0.0)
                fits = bool(np.all(more <= room + FEASIBILITY * (1.0 + np.abs(master.capacity))))
        rows = np.arange(net.n, dtype=np.int32)
        self.h.changeRowsBounds(net.n, rows, np.full(net.n, -highspy.kHighsInf), np.maximum(master.capacity, 0.0))
        return len(kink), fits


def available() -> bool:
    """Whether highspy is installed (else the interior-point method solves every master)."""
    return importlib.util.find_spec("highspy") is not None


def solve_master(net, system, master, pi0, tol, limit, deadline, t0, bounds, history, first_iteration,
                 early_pricing=False, warm=None, settle=None):
    """The master's linear program by HiGHS (one iteration of the loop), certified over the
    whole problem; the same words and returns as :func:`.interior.solve_master` (``settle``
    is for networks of smooth products only, whose masters are never linear programs). ``warm``:
    the last round's :class:`Model`, extended where it still fits. Without highspy installed,
    the interior-point method solves it."""
    if not available():
        return interior_solve(net, system, master, pi0, tol, limit, deadline, t0, bounds, history,
                              first_iteration, early_pricing=early_pricing)
    import highspy

    fmax = float(net.fare.max(initial=1.0))
    warm = warm if isinstance(warm, Model) and warm.holds(master) else None
    model = warm or Model(net, fmax)
    new, fits = model.take(master)
    h = model.h
    # Pricing added more columns than the model had, and they do not fit at their bounds: the
    # dual simplex would repair that one bound flip at a time (50,474 iterations, 85 s, on a
    # 15,888-product negative binomial network whose master grew from 7,281 to 420,583
    # columns), so HiGHS's interior-point method with crossover solves it afresh (3 s there),
    # the dual simplex where that ends without an optimum.
    barrier = warm is not None and new > len(model.kink) - new and not fits
    for solver in ("ipm", "simplex") if barrier else ("simplex",):
        h.setOptionValue("solver", solver)
        if deadline is not None:
            h.setOptionValue("time_limit", max(deadline - time.perf_counter(), 1e-3))
        h.run()
        status = h.getModelStatus()
        if status == highspy.HighsModelStatus.kOptimal or status == highspy.HighsModelStatus.kTimeLimit:
            break
    sol = h.getSolution()
    if status == highspy.HighsModelStatus.kTimeLimit or (
            status != highspy.HighsModelStatus.kOptimal and deadline is not None and time.perf_counter() > deadline):
        # (past the deadline whatever HiGHS says: the interior-point fallback below would
        # start after it; a multi-million-column master ran 190 s over a 60 s limit that way)
        # the stop still needs a certificate: the dual at the bid prices the master started
        # from, and the allocation recovered there (large networks recover only near the end)
        pt = net.evaluate(np.maximum(pi0, 0.0))
        bounds.offer_dual(pt)
        bounds.offer_primal(*recover(net, pt))
        history.append(record(first_iteration + 1, bounds, pi0, 0.0, t0))
        return "time_limit", 1, pi0, None
    if status != highspy.HighsModelStatus.kOptimal or not (sol.value_valid and sol.dual_valid):
        log.warning("HiGHS ended the restricted problem (%d kinks) with status %s; the interior-point "
                    "method solves it instead", len(master.kink), h.modelStatusToString(status))
        return interior_solve(net, system, master, pi0, tol, limit, deadline, t0, bounds, history,
                              first_iteration, early_pricing=early_pricing)
    width = net.products.kinks.widths(model.kink)
    info = h.getInfo()
    vertex = Vertex(owner=model.owner, y=np.clip(np.asarray(sol.col_value), 0.0, width),
                    simplex_iterations=int(info.simplex_iteration_count) + int(info.crossover_iteration_count),
                    barrier_iterations=int(info.ipm_iteration_count), snapshot=model)
    pi = np.maximum(np.asarray(sol.row_dual, dtype=np.float64), 0.0) * fmax
    _certify(net, master, vertex, pi, bounds)
    history.append(record(first_iteration + 1, bounds, pi, 0.0, t0))
    return ("optimal" if bounds.gap <= tol else "master_solved"), 1, pi, vertex
