"""What both phases of the Lagrangian loop (and the alternative dual methods) keep: the
certified bounds and the iteration history.

The best upper bound is the exact dual value at the best bid prices so far (any pi >= 0
bounds the optimum from above: weak duality); the best lower bound is the exact revenue of
the best feasible allocation so far. Their relative gap is the certificate's
(:func:`decomp.certify.relative_gap`).
"""

from __future__ import annotations

import time

import numpy as np

from ..certify import relative_gap
from ..result import IterationRecord


class Bounds:
    """The best upper bound (exact dual) and best lower bound (a feasible allocation)."""

    def __init__(self):
        self.dual = np.inf
        self.pi = None
        self.primal = -np.inf
        self.x = None

    def offer_dual(self, pt):
        if pt.exact < self.dual:
            self.dual, self.pi = pt.exact, pt.pi

    def offer_primal(self, y, value):
        if value > self.primal:
            self.primal, self.x = value, y

    @property
    def gap(self) -> float:
        if self.x is None:
            return np.inf
        return relative_gap(self.dual, self.primal)


def record(it, bounds, pi, step, t0):
    """The history's entry of iteration ``it``: the bounds so far, the step, |pi|, seconds since t0."""
    return IterationRecord(iteration=it, dual_value=float(bounds.dual) if np.isfinite(bounds.dual) else None,
                           primal_value=None if bounds.x is None else float(bounds.primal),
                           gap=float(bounds.gap) if np.isfinite(bounds.gap) else None, step=float(step),
                           pi_norm=float(np.linalg.norm(pi)), seconds=time.perf_counter() - t0)
