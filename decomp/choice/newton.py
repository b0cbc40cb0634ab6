"""Getting close: projected Newton on the smoothed dual, with the smoothing driven towards zero.

The dual q(pi) of the sales LP is piecewise linear (:mod:`decomp.choice.dual`);
q_mu replaces each kink by a softplus of width mu_m = t x (the market's top fare).
For a decreasing sequence of t, q_mu is minimized over pi >= 0 by projected Newton
(Bertsekas 1982): legs at pi_i = 0 whose gradient pushes them below 0 (the
epsilon-active set) take a scaled gradient step, the others the Newton step of the
leg-size Hessian restricted to them, and Armijo's rule along the projection arc
picks the step. The direction is shortened as a whole (so it stays a descent
direction) when it would move a bid price by more than a quarter of the largest fare:
far from the optimum the smoothed dual is nearly linear along legs whose products
are all far from their markets' thresholds, and the pure Newton step is huge there.

Each level stops when Newton's step would move no bid price by more than ``close``
smoothing widths (t times the median top fare: the iterate is then within the region
where the level's quadratic model holds, and the next level starts close), after a
full step of at most ``settled`` widths (Newton's next step would be much smaller: no
Hessian is computed to find that out), or when
Newton's decrement g'H^-1 g is below ``decrement x t`` of the dual value (the
smoothing changes the dual by about t times its size: a level need not be solved
more finely than that). This phase only has to come close: the exact answer comes from
:mod:`decomp.choice.master`, whose result does not depend on where this phase stops
(only its work does).
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.linalg as sla

from . import dual

log = logging.getLogger(__name__)

ARMIJO = 1e-4
MAX_HALVINGS = 30


@dataclasses.dataclass(frozen=True)
class Schedule:
    """Smoothing levels t (relative to each market's top fare): start, factor, last."""

    start: float = 0.15
    factor: float = 0.5
    last: float = 1e-3
    decrement: float = 1e-3
    close: float = 0.5
    settled: float = 2.0
    max_iterations: int = 60


@dataclasses.dataclass(frozen=True)
class Step:
    """One Newton iteration (kept on the history)."""

    iteration: int
    t: float
    value: float
    decrement: float
    step: float
    free_legs: int
    seconds: float


def _active(pi, g, eps, fixed):
    """The epsilon-active set: legs held at 0 (and legs never priced: unused or closed)."""
    return fixed | ((pi <= eps) & (g > 0))


def _direction(H, g, pi, active):
    """Newton direction on the free legs; the active legs go to 0. Also the decrement g_F' H_FF^-1 g_F."""
    free = ~active
    d = np.zeros_like(g)
    if free.any():
        Hf = H[np.ix_(free, free)]
        scale = float(np.max(np.diag(Hf), initial=0.0))
        reg = 1e-10 * scale if scale > 0 else 1.0
        Hf[np.diag_indices_from(Hf)] += reg
        try:
            c = sla.cho_factor(Hf, lower=True, check_finite=False)
            d[free] = -sla.cho_solve(c, g[free], check_finite=False)
        except np.linalg.LinAlgError:
            d[free] = -g[free] / np.maximum(np.diag(Hf), reg)
        if not np.all(np.isfinite(d)):
            d[free] = -g[free] / max(scale, 1.0)
    d[active] = -pi[active]
    return d, float(-g[free] @ d[free])


def approach(net, pi0, schedule: Schedule = Schedule(), deadline: float | None = None, fixed=None):
    """(bid prices, last smoothing level t, history, evaluations) near the minimum of q over pi >= 0."""
    L = net.n_legs
    fixed = np.zeros(L, dtype=bool) if fixed is None else fixed
    pi = np.where(fixed, 0.0, np.maximum(np.asarray(pi0, dtype=np.float64), 0.0))
    max_step = 0.25 * float(max(net.top.max(initial=0.0), net.fare_o.max(initial=0.0), 1.0))
    width = net.fare_scale
    history, evals = [], 0
    t = schedule.start
    it = 0
    t0 = time.perf_counter()
    while True:
        mu_m, mu_o = t * np.maximum(net.top, 1e-12), t * net.fare_o
        point = dual.smoothed(net, pi, mu_m, mu_o, near=None if not history else (pi, point))
        evals += 1
        last = t <= schedule.last * (1 + 1e-12)
        level_tol = schedule.decrement * t * max(1.0, abs(point.value))
        while it < schedule.max_iterations:
            it += 1
            g = point.gradient
            proj = np.abs(pi - np.maximum(pi - g, 0.0))
            active = _active(pi, g, min(1e-6, float(proj.max(initial=0.0))), fixed)
            d, dec = _direction(dual.hessian(net, point), g, pi, active)
            size = float(np.abs(d).max(initial=0.0))
            if size > max_step:
                d *= max_step / size
                dec *= max_step / size
            if dec <= 2 * level_tol or size <= schedule.close * t * width:
                history.append(Step(it, t, point.value, dec, 0.0, int((~active).sum()), time.perf_counter() - t0))
                break
            alpha = 1.0
            for _ in range(MAX_HALVINGS):
                trial = np.maximum(pi + alpha * d, 0.0)
                trial[fixed] = 0.0
                cand = dual.smoothed(net, trial, mu_m, mu_o, near=(pi, point))
                evals += 1
                expect = float(g @ (pi - trial))        # first-order decrease along the projection arc
                if cand.value <= point.value - ARMIJO * max(expect, 0.0):
                    break
                alpha *= 0.5
            moved = float(np.abs(trial - pi).max(initial=0.0))
            pi, point = trial, cand
            history.append(Step(it, t, point.value, dec, moved, int((~active).sum()), time.perf_counter() - t0))
            if deadline is not None and time.perf_counter() > deadline:
                return pi, t, history, evals
            if alpha == 1.0 and size <= schedule.settled * t * width:
                break          # a full step within the quadratic region: the next would be far smaller
        if last or it >= schedule.max_iterations:
            return pi, t, history, evals
        t = max(t * schedule.factor, schedule.last)
