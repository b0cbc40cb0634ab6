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
#: The last level where every master is a linear program (kinks only: Poisson, negative
#: binomial, known demand), solved exactly by the dual simplex, each pricing round from the
#: last basis (:mod:`.lpmaster`): the windows need not be found as finely, since the rounds
#: that widen them cost little. One level fewer than END (the levels run 0.3, 0.09, 0.027):
#: p1m Poisson 17 -> 9 Newton iterations, solve 5.7 -> 4.0 s (the first master 34,359 ->
#: 34,497 free kinks); two fewer (0.05) was faster still on the ladder (3.6 s) but doubled the
#: first master where products have many kinks (means and capacities 30 times the ladder's,
#: p10k: 67,108 -> 136,922 free kinks, solve 1.5 -> 3.5 s), which one fewer does not (1.4 s).
END_LINEAR = 0.02
#: A level is minimized when the Newton decrement is below this fraction of the excess;
STAGE = 0.1
#: or it is left after STAGE_ITERATIONS Newton iterations (where the smoothed terms are
#: nearly kinked themselves, the decrement may cycle at a level).
STAGE_ITERATIONS = 15


class Continuation:
    """The smoothing level theta (0 when there are no kinks) and when to lower it."""

    def __init__(self, has_kinks, start=None, end=END):
        self.theta = float(START if start is None else start) if has_kinks else 0.0
        self.end = end
        self.iterations = 0

    def count(self):
        """One more Newton iteration at this level."""
        self.iterations += 1

    def stage_too_long(self) -> bool:
        return self.iterations >= STAGE_ITERATIONS

    def stage_done(self, decrement, excess) -> bool:
        # (a negative decrement is no estimate: the projection turned the step uphill)
        return 0.0 <= decrement <= STAGE * excess

    def lower(self):
        """The next level, or None when it would be below the last (the phase is done)."""
        new = self.theta * DROP
        if new < self.end:
            return None
        self.theta = new
        self.iterations = 0
        return new
