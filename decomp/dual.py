"""The Lagrangian dual of the PNLP's leg capacities.

Relaxing A x <= c with bid prices pi >= 0 splits the PNLP into one problem per
product, max_{x_j >= 0} f_j S_j(x_j) - a_j x_j with a_j = (A^T pi)_j, solved in
closed form (the newsvendor fractile). The dual function

    q(pi) = sum_j [f_j S_j(x_j(pi)) - a_j x_j(pi)] + c . pi

is convex, an upper bound on the PNLP optimum for every pi >= 0, with gradient
c - A x(pi) and Hessian A diag(-dx_j/da_j) A^T.
"""

from __future__ import annotations

import dataclasses

import numpy as np



@dataclasses.dataclass(frozen=True, eq=False)
class DualPoint:
    """q(pi) and what came with it; arrays are per product or per leg."""

    pi: np.ndarray          # per leg
    value: float            # q(pi)
    gradient: np.ndarray    # per leg: c - A x
    x: np.ndarray           # per product: subproblem solutions
    dxda: np.ndarray        # per product: dx_j/da_j (<= 0)
    a: np.ndarray           # per product: sum of its legs' bid prices
    revenue: float          # sum_j f_j S_j(x_j)


def subproblems(instance, a):
    """Per-product solutions x_j(a_j) and dx_j/da_j, by each product's distribution."""
    from . import distributions

    return distributions.subproblems(instance, a)


def evaluate(instance, pi, subproblems=None) -> DualPoint:
    """The dual function, its gradient and the subproblem solutions at ``pi``.

    ``subproblems``: a prebuilt :class:`decomp.distributions.Subproblems` of the
    instance (saves its set-up when evaluating many times).
    """
    from . import distributions

    pi = np.asarray(pi, dtype=np.float64)
    if subproblems is None:
        subproblems = distributions.Subproblems.from_instance(instance)
    a = instance.leg_sum(pi)
    v = subproblems.evaluate(a)
    value = float(v.value + instance.capacity @ pi)
    gradient = instance.capacity - instance.leg_load(v.x)
    return DualPoint(pi=pi, value=value, gradient=gradient, x=v.x, dxda=-v.w, a=a,
                     revenue=float(v.revenue))


def dual_value(instance, pi) -> float:
    """q(pi): an upper bound on the PNLP optimum for any pi >= 0."""
    return evaluate(instance, pi).value
