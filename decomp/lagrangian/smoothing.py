"""Continuation of the barrier smoothing of the piecewise-linear segments (:mod:`.segments`).

With smoothing level delta the smoothed dual q_delta satisfies

    q_delta(pi) <= q(pi) <= q_delta(pi) + delta (1 + log(1 + 1/delta)) E,   E = sum r w,

over the segments. The continuation minimizes q_delta (projected Newton, which
converges on each stage) until its Newton decrement is below STAGE delta E,
then multiplies delta by DROP, down to the level at which the bound
above is 1e-2 tol |q|. Then min q_delta is within that of q*, so the exact dual
at the stages' minimizers tends to q*, and the barrier solutions, strictly
inside their segments, tend to a primal optimum. The certificate always uses
the exact dual.
"""

from __future__ import annotations

import math

START = 1e-1
DROP = 0.25
#: A stage ends when the Newton decrement is below this fraction of delta E.
STAGE = 1e-2


def error_bound(delta, scale) -> float:
    return delta * (1.0 + math.log1p(1.0 / delta)) * scale if delta > 0 else 0.0


class Continuation:
    """The smoothing level delta and when to lower it."""

    def __init__(self, segments, tol, start=START):
        self.scale = segments.scale if len(segments) else 0.0
        self.tol = tol
        self.delta = float(start) if self.scale > 0 else 0.0

    def at_floor(self, q) -> bool:
        return error_bound(self.delta, self.scale) <= 1e-2 * self.tol * max(1.0, abs(q))

    def next(self, decrement, q) -> float | None:
        """A lower delta once this stage is minimized, else None."""
        if self.delta <= 0 or self.at_floor(q) or decrement > STAGE * self.delta * self.scale:
            return None
        return self.lower()

    def lower(self) -> float:
        self.delta *= DROP
        return self.delta
