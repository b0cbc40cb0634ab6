"""Known demand: a point mass at max(mean, 0) (std = 0 in a continuous family, or a
discrete family with mean 0). S(x) = min(x, m): one linear piece of slope 1 up to the
mean, so one kink of slope f and width min(m, u) (:mod:`.kinks`)."""

from __future__ import annotations

import numpy as np

from .kinks import KinkTable


class KnownDemand:
    """The subproblems of products whose demand is known (arrays over those products)."""

    name = "known"

    def __init__(self, fare, mean):
        self.fare = np.asarray(fare, dtype=np.float64)
        self.mean = np.maximum(np.asarray(mean, dtype=np.float64), 0.0)
        self.n = len(self.fare)

    def sales(self, x, idx=None):
        m = self.mean if idx is None else self.mean[idx]
        return np.minimum(np.maximum(np.asarray(x, dtype=np.float64), 0.0), m)

    def slopes(self, x, idx=None):
        """(right, left) derivatives of min(x, m): 1 below m, 0 above; at m, 0 and 1."""
        m = self.mean if idx is None else self.mean[idx]
        x = np.asarray(x, dtype=np.float64)
        right = (x < m).astype(np.float64)
        left = ((x <= m) & (m > 0)).astype(np.float64)
        return right, left

    def closing(self):
        return np.where(self.mean > 0, self.fare, 0.0)

    def kinks(self, upper, owner):
        width = np.minimum(self.mean, np.asarray(upper, dtype=np.float64))
        keep = width > 0
        return KinkTable(np.asarray(owner)[keep], np.ones(int(keep.sum()), dtype=np.int64),
                         self.fare[keep], unit=width[keep])
