"""The Lagrangian loop: relax, step, recover, certify, until the certified gap is within tol.

Each iteration: the projected Newton direction at pi (:mod:`.newton`); a
feasible allocation predicted from it and its exact revenue
(:mod:`.recovery`), a lower bound on the optimum, while the exact dual value
at the best pi so far is an upper bound; stop when

    gap = (q(pi_best) - F(y_best)) / max(1, |F(y_best)|) <= tol;

otherwise lower the smoothing level (:mod:`.smoothing`) or take the step
(Armijo along the projection arc). Where products have linear segments, an LP
completes the recovered allocation now and then (:mod:`.polish`, within the
work budget of :class:`LPBudget`), and from iteration CROSSOVER_FROM on the bid
prices that allocation asks for (:mod:`.crossover`) are a further dual bound,
from which Newton goes on when they are lower on its smoothed dual too.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from ..result import IterationRecord, Termination
from . import interior, newton, polish
from .crossover import prices_from_allocation
from .prices import ZERO_RESOLUTION
from .recovery import recover
from .smoothing import Continuation

#: Below this many products the recovery runs at every iteration; above, only
#: once the decrement (about twice q(pi) - q*) allows a gap within tol.
RECOVER_ALWAYS_BELOW = 50_000
#: The LP completion (:mod:`.polish`) runs once the decrement allows a gap within tol,
#: and every POLISH_EVERY iterations in any case: on degenerate instances the barrier's
#: stages can settle the dual while the decrement stays large.
POLISH_EVERY = 10
#: From this iteration on (the barrier's stages are slow to settle the dual: the family's
#: median is 20 iterations), the completion's allocation also proposes bid prices
#: (:mod:`.crossover`). Not earlier: where the dual is degenerate, its prices are a
#: vertex of the optimal set, while Newton's settle on the smoothed central path's limit.
CROSSOVER_FROM = 50
#: With only smooth products (unique bid prices) and tol <= 1e-7, the loop also waits
#: until Newton's next step moves no bid price by more than this fraction of itself,
BID_TOL = 1e-6
#: or by more than this fraction: then it takes that step (one more evaluation of the
#: dual, not an iteration) and reports its point if the dual did not rise. Near a
#: solution the steps converge quadratically (Newton's local theorem; the held set is
#: identified there), so the bid prices after it are off by about C times the step's
#: square. C is large where products sit at the edge of closing (measured up to 160 on
#: the ladder's warm starts: a step of 9.4e-5 left an error of 1.4e-6), hence a step
#: of at most 3e-5 (an error of at most 1.5e-7 at that C).
FINAL_STEP = 3e-5
#: Projected Newton hands over to the interior-point method (:mod:`.interior`) after this
#: many iterations without a certified gap within tol, where that method applies (no
#: discrete demand). Newton settles the family's median draw in about 20 iterations and
#: the ladder's rungs in 7 to 13; what it has not settled by this many is, as measured,
#: the low-CV class whose dual terms are nearly kinks, where Newton creeps for hundreds
#: of iterations and the interior-point method converges in 100 to 160.
INTERIOR_AFTER = 50
#: The interior-point phase's own iteration limit (or the caller's, if larger): from a
#: cold start it takes 70 to 190 iterations on the low-CV class (generator sweep, family).
INTERIOR_LIMIT = 400


def _may_stop(net, pt, dirn, best, settle, fare_max) -> bool:
    """At a certified gap within tol: stop unless bid prices must settle (``settle``) and
    Newton's next step still moves one by more than that; a step of at most FINAL_STEP
    is taken first, its point becoming the reported one if the dual did not rise."""
    new = np.maximum(pt.pi + dirn.d, dirn.lower)
    if settle is None or _settled(pt, new, settle, fare_max):
        return True
    if not _settled(pt, new, FINAL_STEP, fare_max):
        return False
    final = net.evaluate(new)
    if final.exact > best.dual:
        return False
    best.dual, best.pi = final.exact, final.pi
    return True


def _settled(pt, new, bid_tol, fare_max):
    """The step to ``new`` moves every bid price by at most bid_tol of itself (or of 1e-3
    of the largest, for the smallest ones)."""
    scale = np.maximum(pt.pi, 1e-3 * float(pt.pi.max(initial=0.0)))
    # legs below the reporting resolution on both sides are reported at 0 either way
    zero = np.maximum(pt.pi, new) <= ZERO_RESOLUTION * fare_max
    return bool(np.all((np.abs(new - pt.pi) <= bid_tol * scale) | zero))


@dataclasses.dataclass
class Outcome:
    pi: np.ndarray
    x: np.ndarray
    gap: float
    termination: Termination
    raw_status: str
    message: str
    iterations: int
    history: tuple


class Certified:
    """The best upper bound (exact dual) and best lower bound (a recovered allocation)."""

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
        return (self.dual - self.primal) / max(1.0, abs(self.primal))


def _record(it, pt, best, step, t0):
    return IterationRecord(iteration=it, dual_value=float(pt.exact),
                           primal_value=None if best.x is None else float(best.primal),
                           gap=float(best.gap) if np.isfinite(best.gap) else None, step=float(step),
                           pi_norm=float(np.linalg.norm(pt.pi)), seconds=time.perf_counter() - t0)


def run(net, system, pi0, tol, limit, deadline, t0, floor) -> Outcome:
    """Projected Newton, then, if it has not certified within INTERIOR_AFTER iterations
    and the network allows, the interior-point method (its own limit: the larger of
    ``limit`` and INTERIOR_LIMIT), keeping the same best bounds (both certify with the
    exact dual and an exact revenue)."""
    best = Certified()
    handover = INTERIOR_AFTER if interior.applies(net) and limit > INTERIOR_AFTER else limit
    # stalled LPs may run over budget only where no interior-point phase follows
    first = run_newton(net, system, pi0, tol, handover, deadline, t0, floor, best,
                       lp_overrun=handover == limit)
    if first.termination is not Termination.ITERATION_LIMIT or handover == limit:
        return first
    fare_max = float(net.sub.fare.max(initial=1.0))
    raw, its, history = interior.run_interior(net, system, tol, max(limit, INTERIOR_LIMIT), deadline,
                                              t0, best.pi, fare_max, best)
    history = first.history + tuple(dataclasses.replace(h, iteration=h.iteration + handover)
                                    for h in history)
    term = {"optimal": Termination.OPTIMAL, "time_limit": Termination.TIME_LIMIT,
            "iteration_limit": Termination.ITERATION_LIMIT}.get(raw, Termination.NUMERICAL_ERROR)
    msg = (f"projected Newton: no certified gap within tol after {handover} iterations; "
           f"interior point: {raw} after {its} more, certified gap {best.gap:.3g}")
    return Outcome(pi=best.pi, x=best.x, gap=best.gap, termination=term, raw_status=f"interior_{raw}",
                   message=msg, iterations=handover + its, history=history)


def run_newton(net, system, pi0, tol, limit, deadline, t0, floor, best=None, lp_overrun=True) -> Outcome:
    cont = Continuation(net.segments, tol)
    pt = net.evaluate(np.maximum(pi0, floor), cont.delta)
    fare_max = float(net.sub.fare.max(initial=1.0))
    eps_bar = 1e-3 * fare_max
    lam = newton.LAM_START
    best = Certified() if best is None else best
    best.offer_dual(pt)
    history = []
    always = net.n_products < RECOVER_ALWAYS_BELOW
    # bid prices are unique when every term is smooth: then also wait until they settle
    settle = BID_TOL if (not len(net.segments) and tol <= 1e-7) else None
    step_len = 0.0
    lp_budget = LPBudget(net, overrun=lp_overrun)
    # the chord corrections of the curvatures (newton.kink_curvature from the iterate before
    # pt, newton.chord_update from the step) only without linear segments: their smoothed
    # allocations follow the barrier between stages, and with them a mixed-demand family
    # draw (194) ended at the iteration limit
    previous = None
    chords = not len(net.segments)
    for it in range(1, limit + 1):
        dirn = newton.direction(net, system, pt, lam, eps_bar, floor, previous, chords)
        near = dirn.decrement <= 10.0 * tol * max(1.0, abs(pt.exact))
        if always or it == 1 or near:
            y, value = recover(net, pt, dirn.d, dirn.lower, both=always)
            best.offer_primal(y, value)
            lp_budget.observe(best.gap)
            if best.gap > tol and (near or it % POLISH_EVERY == 0):
                plan = polish.plan(net, pt)
                if plan is not None and lp_budget.allows(plan.sizes):
                    lp_budget.charge(_polish(net, pt, y, best, plan, it >= CROSSOVER_FROM, floor))
        history.append(_record(it, pt, best, step_len, t0))
        if best.gap <= tol and _may_stop(net, pt, dirn, best, settle, fare_max):
            return _outcome(best, Termination.OPTIMAL, "optimal", it, history)
        if deadline is not None and time.perf_counter() > deadline:
            return _outcome(best, Termination.TIME_LIMIT, "time_limit", it, history)
        previous = None          # set again below only when a Newton step is taken
        jump = _jump(net, pt, best)
        if jump is not None:
            pt, lam = jump, newton.LAM_START
            continue
        lower = cont.next(max(dirn.decrement, dirn.stationarity), pt.exact)
        if lower is not None:
            lam = newton.LAM_START
            pt = net.evaluate(pt.pi, lower)
            best.offer_dual(pt)
            continue
        taken = newton.step(net, system, pt, lam, eps_bar, floor, dirn)
        if taken is None and cont.delta > 0 and not cont.at_floor(pt.exact):
            # the smoothed dual is flat to rounding at this level: go on to the next one
            lam = newton.LAM_START
            pt = net.evaluate(pt.pi, cont.lower())
            best.offer_dual(pt)
            continue
        if taken is None:
            best.offer_primal(*recover(net, pt))
            if best.gap <= tol:
                return _outcome(best, Termination.OPTIMAL, "optimal", it, history)
            return _outcome(best, Termination.NUMERICAL_ERROR, "no_decrease", it, history,
                            "no decrease along the projection arc of the Newton or the scaled "
                            "gradient direction (the dual is flat to rounding here)")
        previous = pt if chords else None
        pt, _, step_len, lam = taken
        best.offer_dual(pt)
    if best.gap <= tol:
        # the last step's dual value closed the gap: certified, as at any stop
        return _outcome(best, Termination.OPTIMAL, "optimal", limit, history)
    return _outcome(best, Termination.ITERATION_LIMIT, "iteration_limit", limit, history)


def _jump(net, pt, best):
    """The best dual bound's point, when it is not the iterate's and is lower on the
    iterate's smoothed dual too (the crossover's prices): Newton goes on from there.
    A descent on the smoothed dual, so the convergence argument is unchanged."""
    noise = 1e-12 * max(1.0, abs(pt.exact))
    if best.dual >= pt.exact - noise or np.array_equal(best.pi, pt.pi):
        return None
    cand = net.evaluate(best.pi, pt.smoothing)
    return cand if cand.value < pt.value - noise else None


def _polish(net, pt, y, best, plan, crossover, floor):
    """The LP completion of ``y`` by the LPs of ``plan`` (:mod:`.polish`) and, with
    ``crossover``, the bid prices its allocation asks for (:mod:`.crossover`), offered as
    bounds; the LPs' sizes (columns)."""
    completed, sizes = polish.complete(net, pt, y, plan)
    if completed is None:
        return sizes
    best.offer_primal(*completed)
    if crossover:
        pi_x = prices_from_allocation(net, completed[0])
        if pi_x is not None:
            best.offer_dual(net.evaluate(np.maximum(pi_x, floor)))
    return sizes


class LPBudget:
    """When the LP completions of :func:`_polish` may run. On a large low-CV network one
    LP costs as much as a hundred Newton iterations, so an LP runs only if the LPs,
    it included, stay within the work of the rest of the run (they at most double
    it) or within FREE_SECONDS. Work is counted, not timed, so the answer (and the
    iteration count) never depends on the machine's speed or load: a dual evaluation
    and an LP are charged by a cost model measured on the reference machine (2-core
    x86 VM, HiGHS 1.12 through scipy): an evaluation 0.2 ms plus 1.2 us per product
    and 15 ns per linear segment (whole seats of discrete demand), an LP
    LP_BASE + LP_SECONDS (columns / LP_COLUMNS) ^ LP_POWER (HiGHS's time grows much
    faster than its column count on these LPs of a few rows and many columns: 0.15 s
    at 28,000 columns, 1.3 s at 64,000, 7 to 40 s at 146,000; 0.03 to 0.045 s at
    6,300, most of it the call's set-up). An LP's size is
    counted before it runs (:func:`.polish.plan`).

    Over budget, the LPs still run once the certified gap has not fallen below PROGRESS
    of its value at the last such fall in STALL consecutive recoveries, if they cost at
    most STALL_FACTOR times the rest: the dual has then settled, or creeps, and the
    primal side must close the gap (each time they fail the wait doubles, so there are at most a few).
    A gap that shrinks by less than half in STALL recoveries counts as stalled: with
    "any shrinking" instead, a creeping dual kept a 52-product low-CV family draw
    (1163) from its LPs, which are 0.03 s each, and it ended at the iteration limit."""

    FREE_SECONDS = 1.0
    EVAL_SECONDS, EVAL_PER_PRODUCT, EVAL_PER_SEGMENT = 2e-4, 1.2e-6, 1.5e-8
    LP_BASE, LP_SECONDS, LP_COLUMNS, LP_POWER = 0.03, 1.3, 64_000, 2.5
    STALL, STALL_FACTOR, PROGRESS = 10, 10.0, 0.5

    def __init__(self, net, overrun=True):
        self.net = net
        #: whether stalled LPs may run over budget (not where the interior-point method
        #: takes over a stalled run: generator draw 25, 38,468 low-CV products, spent
        #: 73 s in one such LP before the handover, and the method then took 1.5 s)
        self.overrun = overrun
        self.spent = 0.0
        self.wait = self.STALL
        self.gap = np.inf
        self.unmoved = 0

    def observe(self, gap):
        """After each recovery: the certified gap."""
        if gap < self.PROGRESS * self.gap:
            self.gap, self.unmoved = gap, 0
        else:
            self.unmoved += 1

    def allows(self, sizes) -> bool:
        """Whether LPs of these sizes (columns) may run now."""
        rest = self._rest()
        cost = sum(self._lp_seconds(c) for c in sizes)
        if self.spent + cost <= max(self.FREE_SECONDS, rest):
            return True
        if self.overrun and self.unmoved >= self.wait and self.spent + cost <= self.STALL_FACTOR * rest:
            self.wait *= 2
            self.unmoved = 0
            return True
        return False

    def charge(self, sizes):
        """After the LPs ran: their sizes (columns)."""
        self.spent += sum(self._lp_seconds(c) for c in sizes)

    def _lp_seconds(self, columns):
        return self.LP_BASE + self.LP_SECONDS * (columns / self.LP_COLUMNS) ** self.LP_POWER

    def _rest(self):
        net = self.net
        per_evaluation = (self.EVAL_SECONDS + self.EVAL_PER_PRODUCT * net.n_products
                          + self.EVAL_PER_SEGMENT * len(net.segments))
        return net.evaluations * per_evaluation


def _outcome(best, term, raw, it, history, why=""):
    msg = f"projected Newton: {raw} after {it} iterations, certified gap {best.gap:.3g}"
    if why:
        msg += f"; {why}"
    return Outcome(pi=best.pi, x=best.x, gap=best.gap, termination=term, raw_status=raw, message=msg,
                   iterations=it, history=tuple(history))
