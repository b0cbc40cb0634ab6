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
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np

from .bounds import record
from .interior import _certify, solve_master as interior_solve

log = logging.getLogger(__name__)

#: HiGHS's primal and dual feasibility tolerances for the master (in units of the largest
#: fare and of seats; its default is 1e-7): the certificate asks the gap within tol, 1e-9
#: by default.
FEASIBILITY = 1e-10


@dataclasses.dataclass
class Vertex:
    """The master's optimal vertex: its free kinks' seats."""

    owner: np.ndarray
    y: np.ndarray
    simplex_iterations: int
    snapshot = None            # (the interior-point method's restart point; a vertex has none)

    def allocation(self, master):
        return master.fixed_x + np.bincount(self.owner, weights=self.y, minlength=len(master.fixed_x))


def solve_master(net, system, master, pi0, tol, limit, deadline, t0, bounds, history, first_iteration,
                 early_pricing=False, warm=None):
    """The master's linear program by HiGHS (one iteration of the loop), certified over the
    whole problem; the same words and returns as :func:`.interior.solve_master`. Without
    highspy installed, the interior-point method solves it."""
    try:
        import highspy
    except ImportError:
        return interior_solve(net, system, master, pi0, tol, limit, deadline, t0, bounds, history,
                              first_iteration, early_pricing=early_pricing, warm=warm)
    from ..methods.highs import new_highs

    fmax = float(net.fare.max(initial=1.0))
    k = net.products.kinks
    cols = net.A_g[:, net.group_of(master.kink_owner)].tocsc()
    width = k.widths(master.kink)
    lp = highspy.HighsLp()
    lp.num_col_, lp.num_row_ = int(cols.shape[1]), int(cols.shape[0])
    lp.col_cost_ = k.slope[master.kink] / fmax
    lp.col_lower_ = np.zeros(len(width))
    lp.col_upper_ = width
    lp.row_lower_ = np.full(net.n, -highspy.kHighsInf)
    lp.row_upper_ = np.maximum(master.capacity, 0.0)
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = cols.indptr.astype(np.int32)
    lp.a_matrix_.index_ = cols.indices.astype(np.int32)
    lp.a_matrix_.value_ = cols.data.astype(np.float64)
    lp.sense_ = highspy.ObjSense.kMaximize
    h = new_highs()
    for name, value in (("solver", "simplex"), ("primal_feasibility_tolerance", FEASIBILITY),
                        ("dual_feasibility_tolerance", FEASIBILITY)):
        h.setOptionValue(name, value)
    if deadline is not None:
        h.setOptionValue("time_limit", max(deadline - time.perf_counter(), 1e-3))
    h.passModel(lp)
    h.run()
    status = h.getModelStatus()
    sol = h.getSolution()
    if status == highspy.HighsModelStatus.kTimeLimit:
        history.append(record(first_iteration + 1, bounds, pi0, 0.0, t0))
        return "time_limit", 1, pi0, None
    if status != highspy.HighsModelStatus.kOptimal or not (sol.value_valid and sol.dual_valid):
        log.warning("HiGHS ended the restricted problem (%d kinks) with status %s; the interior-point "
                    "method solves it instead", len(master.kink), h.modelStatusToString(status))
        return interior_solve(net, system, master, pi0, tol, limit, deadline, t0, bounds, history,
                              first_iteration, early_pricing=early_pricing, warm=warm)
    vertex = Vertex(owner=master.kink_owner, y=np.clip(np.asarray(sol.col_value), 0.0, width),
                    simplex_iterations=int(h.getInfo().simplex_iteration_count))
    pi = np.maximum(np.asarray(sol.row_dual, dtype=np.float64), 0.0) * fmax
    _certify(net, master, vertex, pi, bounds)
    history.append(record(first_iteration + 1, bounds, pi, 0.0, t0))
    return ("optimal" if bounds.gap <= tol else "master_solved"), 1, pi, vertex
