"""Warm-start bid prices brought into the range where an optimum lies.

A warm start is input (an earlier result file, an earlier run's output): a
value of 1e308 made every task non-optimal. No optimum needs a bid price on
leg i above F_i, the largest fare of the products that use it: at pi_i > F_i
every such product already has a_j >= pi_i > f_j and sells nothing, so lowering
pi_i to F_i leaves every subproblem's value unchanged and lowers c_i pi_i in the
Lagrangian dual q(pi) = c.pi + sum_j max_x (f_j E min(x, D_j) - a_j x) (the DLP
dual likewise). So each warm-start value is clamped to [0, F_i] (0 for a leg no
product uses); NaN and infinite values are dropped (the method's own start is
used for those legs). ``decomp.solve`` applies this to every warm start, for every method.
"""

from __future__ import annotations

import numpy as np


def leg_fare_caps(instance) -> np.ndarray:
    """F_i: the largest fare of the products using leg i (0 where none does)."""
    caps = np.zeros(instance.n_legs)
    owner = np.repeat(np.arange(instance.n_products), instance.legs_per_product)
    np.maximum.at(caps, instance.leg_index, instance.fare[owner])
    return caps


def bounded_warm_start(instance, warm):
    """(warm start with every value in [0, F_i], number of values changed or dropped).

    ``warm`` is a dict by leg id (returned as a dict; legs not in the instance kept for the method to
    report) or an array aligned with ``instance.leg_ids`` (returned as an array, non-finite -> 0).
    """
    if warm is None:
        return None, 0
    caps = leg_fare_caps(instance)
    if isinstance(warm, dict) or hasattr(warm, "keys"):
        pos = instance.leg_position()
        out, changed = {}, 0
        for leg, v in warm.items():
            try:
                x = float(v)
            except (TypeError, ValueError):
                changed += 1
                continue
            if not np.isfinite(x):
                changed += 1
                continue
            i = pos.get(leg)
            y = x if i is None else min(max(x, 0.0), float(caps[i]))
            changed += y != x
            out[leg] = y
        return out, int(changed)
    arr = np.asarray(warm, dtype=np.float64)
    if arr.shape != caps.shape:
        return arr, 0              # the method reports the wrong shape
    finite = np.where(np.isfinite(arr), arr, 0.0)
    out = np.clip(finite, 0.0, caps)
    return out, int(np.count_nonzero((out != arr) | ~np.isfinite(arr)))
