"""The continuation of the kinks' smoothing in the Newton phase.

With smoothing level theta the kinks of the piecewise-linear terms are smoothed in
log(a) (:mod:`decomp.distributions.kinks`): the smoothed dual q_theta is convex and
smooth, q_theta >= q, and it exceeds q only near the kinks, by about 0.4 theta r_k each.
Projected Newton minimizes q_theta until its decrement is below STAGE times that excess
at the current point (the level is then minimized as far as it can tell q from
q_theta), and theta falls by DROP, from START to END. The minimizers of q_theta tend to
a dual optimum as theta -> 0, but the smoothed terms grow steep near their kinks (their
curvature is about 1/(a theta)), so Newton is used only to the level END, where the
bid prices are close enough to fix all but a few kinks (:mod:`.master`).
"""

from __future__ import annotations

START = 0.3
DROP = 0.3
END = 3e-3
#: A level is minimized when the Newton decrement is below this fraction of the excess;
STAGE = 0.1
#: or it is left after STAGE_ITERATIONS Newton iterations (where the smoothed terms are
#: nearly kinked themselves, the decrement may cycle at a level).
STAGE_ITERATIONS = 15


class Continuation:
    """The smoothing level theta (0 when there are no kinks) and when to lower it."""

    def __init__(self, has_kinks, start=None):
        self.theta = float(START if start is None else start) if has_kinks else 0.0
        self.iterations = 0

    def count(self):
        """One more Newton iteration at this level."""
        self.iterations += 1

    def stage_too_long(self) -> bool:
        return self.iterations >= STAGE_ITERATIONS

    def stage_done(self, decrement, excess) -> bool:
        return decrement <= STAGE * excess

    def lower(self):
        """The next level, or None when it would be below END (the phase is done)."""
        new = self.theta * DROP
        if new < END:
            return None
        self.theta = new
        self.iterations = 0
        return new
