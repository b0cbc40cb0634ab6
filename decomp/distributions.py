"""Demand distributions in the PNLP subproblems, dispatched per product.

Each distribution supplies expected sales S(x) = E[min(max(D, 0), x)], the
fractile x(a) = argmax_{x >= 0} f S(x) - a x with dx/da, and S'(x). Only the
normal distribution is wired in here so far; others raise a clear error.
"""

from __future__ import annotations

import numpy as np

from . import normal
from .errors import InstanceError


def _check_normal(instance):
    if instance.distribution is not None:
        other = set(np.unique(instance.distribution).tolist()) - {"normal"}
        if other:
            raise InstanceError(f"demand distribution(s) {sorted(other)} are not supported yet",
                                column="distribution")


def subproblems(instance, a):
    _check_normal(instance)
    x, dxda, _ = normal.fractile(a, instance.fare, instance.mean, instance.std)
    return x, dxda


def expected_sales(instance, x):
    _check_normal(instance)
    return normal.expected_sales(x, instance.mean, instance.std)


def marginal_sales(instance, x):
    _check_normal(instance)
    return normal.marginal_sales(x, instance.mean, instance.std)
