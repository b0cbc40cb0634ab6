"""The PNLP by Lagrangian relaxation of the leg capacities.

Relaxing A x <= c with bid prices pi >= 0 splits the PNLP into one newsvendor
problem per product, max_{0 <= x_j <= u_j} f_j S_j(x_j) - a_j x_j with
a_j = (A^T pi)_j, solved in closed form or by a table lookup
(:mod:`decomp.distributions`). The dual q(pi) = sum_j h_j(a_j) + c.pi is convex,
an upper bound on the optimum for every pi >= 0, and its minimum equals the PNLP
optimum (strong duality for a concave program with linear constraints).

The dual is minimized over pi >= 0 by projected Newton with an epsilon-active set
and Armijo's rule along the projection arc (Bertsekas 1982). Smooth terms (normal
and gamma demand) are exact; the piecewise-linear ones (discrete demand, known
demand, and the leading linear piece of low-CV products: their "kinks") are
smoothed in log(a), less and less, until the bid prices say which kinks can still
matter. Then a restricted problem that fixes the others is solved exactly by a
primal-dual interior-point method, and every fixed kink is checked at its bid
prices (column generation). Each iterate's exact dual value is an upper bound and
a recovered feasible allocation's exact revenue a lower bound; the method stops
when their certified gap is within tol.

Modules, in the order of the algorithm:

- :mod:`.network`: live legs and products, groups by leg tuple, the dual's value,
  gradient and curvature;
- :mod:`.hessian`: the reduced Hessian's pattern and factorization;
- :mod:`.newton`: the projected Newton step and the arc search;
- :mod:`.continuation`: the smoothing level of the kinks;
- :mod:`.recovery`: a feasible allocation and its revenue;
- :mod:`.master`: the restricted problem and the pricing of its fixed kinks;
- :mod:`.interior`: the primal-dual interior-point method on it;
- :mod:`.loop`: the two phases, their stopping test and status table;
- :mod:`.alternatives`: L-BFGS-B and projected subgradient on the same dual;
- :mod:`.prices`: starting points, warm starts, exact zeros, closed legs.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from ..certify import relative_gap
from .alternatives import run_lbfgsb, run_subgradient
from .hessian import LegSystem
from .loop import Outcome, run
from .network import Network
from .prices import FLOOR, fare_start, price_closed_legs, snap_zeros, warm_prices

#: Default iteration limits per dual method.
ITERATION_LIMITS = {"newton": 200, "lbfgsb": 5000, "subgradient": 5000}
#: The kinks' first smoothing level from a warm start (its bid prices are close already).
WARM_THETA = 0.03


def _reported_prices(net, out, x_live, fare_max, floor, tol):
    """The bid prices to report: below ZERO_RESOLUTION of the largest fare set to exactly 0,
    or, if that moves the certified gap above tol (convexity bounds the move by the
    resolution times the gradient, which is not always small enough), only those at the
    method's floor; or none. The certificate is computed again at the prices reported."""
    if out.pi is None:
        return np.zeros(net.n)
    primal = net.revenue(x_live)
    limit = max(tol, out.gap)
    for resolution in (None, 2.0 * floor):
        pi = snap_zeros(out.pi, fare_max) if resolution is None else np.where(out.pi <= resolution, 0.0, out.pi)
        if np.array_equal(pi, out.pi):
            return pi
        gap = relative_gap(net.evaluate(pi).exact, primal)
        if gap <= limit:
            return pi
    return out.pi


@dataclasses.dataclass
class DualSolution:
    """The loop's outcome on the instance's legs and products, with phase times."""

    pi: np.ndarray           # per leg of the instance (exact zeros on slack legs)
    x: np.ndarray            # per product of the instance
    outcome: Outcome
    linear_solver: str
    seconds_build: float
    seconds_solve: float


def solve_dual(instance, tol, dual_method="newton", iteration_limit=None, time_limit=None,
               threads=1, warm_start=None, linear_solver="auto", mixed=True) -> DualSolution:
    t0 = time.perf_counter()
    net = Network(instance, threads=threads)
    system = LegSystem(net, linear_solver, mixed) if dual_method == "newton" else None
    pi0 = fare_start(net)
    if warm_start is not None:
        default = net.full_prices(pi0)
        pi0 = warm_prices(instance, warm_start, default)[net.legs]
    t1 = time.perf_counter()
    fare_max = float(instance.fare.max(initial=1.0))
    floor = FLOOR * fare_max
    limit = iteration_limit or ITERATION_LIMITS[dual_method]
    deadline = None if time_limit is None else t0 + time_limit
    if dual_method == "newton":
        theta = WARM_THETA if warm_start is not None else None
        out = run(net, system, pi0, tol, limit, deadline, t1, floor, theta, warm=warm_start is not None)
    elif dual_method == "lbfgsb":
        out = run_lbfgsb(net, pi0, tol, limit, deadline, t1, floor)
    else:
        out = run_subgradient(net, pi0, tol, limit, deadline, t1, floor)
    x_live = out.x if out.x is not None else np.zeros(net.n_products)
    pi = net.full_prices(_reported_prices(net, out, x_live, fare_max, floor, tol))
    price_closed_legs(instance, net, pi)
    x = net.full_allocation(x_live)
    kind = "none" if system is None else ("schur" if system.schur else "dense")
    return DualSolution(pi=pi, x=x, outcome=out, linear_solver=kind,
                        seconds_build=t1 - t0, seconds_solve=time.perf_counter() - t1)
