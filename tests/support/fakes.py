"""Stand-ins for a solver and a clock, for the baseline tests (no solver library needed).

:func:`canned_solver` answers with given bid prices on any network; its certificate's dual value
is the DLP's LP dual objective written out here (:func:`dlp_dual`), independently of
decomp.certify. :class:`FakeClock` makes every solve last a given time.
"""

from __future__ import annotations

import numpy as np

from decomp.result import Certificate, SolutionStatus, SolveResult, Termination


class FakeClock:
    """A timer whose every solve lasts ``duration`` seconds (two calls per solve)."""

    def __init__(self, duration):
        self.duration = duration
        self.t = 100.0
        self.calls = 0

    def __call__(self):
        self.calls += 1
        if self.calls % 2 == 0:
            self.t += self.duration
        return self.t


def dlp_dual(inst, pi):
    """LP dual objective of the DLP, written out here independently of decomp.certify:
    min c.pi + mean.s s.t. A^T pi + s >= f, pi, s >= 0 (LP duality), best s = (f - A^T pi)^+."""
    pi = np.asarray(pi, dtype=np.float64)
    return float(inst.capacity @ pi + inst.mean @ np.maximum(inst.fare - inst.A.T @ pi, 0.0))


def canned_solver(bid_prices, objective=1000.0, termination=Termination.OPTIMAL):
    """A stand-in solve function for the series network (no solver library needed)."""
    def fake(instance, model, method, options):
        pi = np.array(bid_prices, dtype=np.float64)
        cert = Certificate(max_violation=0.0, max_violation_rel=0.0, kkt_residual=0.0,
                           dual_value=dlp_dual(instance, pi), primal_value=objective,
                           gap=0.0, min_bid_price=float(pi.min()))
        return SolveResult(model=model, method=method, termination=termination,
                           solution_status=SolutionStatus.OPTIMAL if termination is Termination.OPTIMAL
                           else SolutionStatus.FEASIBLE, objective=objective, bound=objective, gap=0.0,
                           leg_ids=instance.leg_ids, bid_price_array=pi, product_ids=instance.product_ids,
                           allocation=np.array([10.0]), iterations=1, seconds={"solve": 0.0},
                           solver="canned", solver_version=None, raw_status=None, message=None,
                           certificate=cert, options={})
    return fake
