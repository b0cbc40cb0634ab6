"""The Lagrangian loop: relax, step, recover, certify, until the certified gap is within tol.

Two phases share one pair of certified bounds (:class:`Bounds`): the exact dual value at
the best bid prices so far, an upper bound, and the exact revenue of the best feasible
allocation so far, a lower bound. The loop stops, in either phase, when

    gap = (q(pi_best) - F(y_best)) / max(1, |F(y_best)|) <= tol,

and reports every stop through one table (:data:`STATUS`).

1. **Newton** (:func:`newton_phase`): projected Newton on the bound-constrained dual
   (:mod:`.newton`), each iteration recovering a feasible allocation (:mod:`.recovery`).
   Where products have kinks (piecewise-linear parts, :mod:`decomp.distributions.kinks`)
   the dual it minimizes has them smoothed at level theta, lowered by a continuation
   (:mod:`.continuation`) once each level is minimized, down to THETA_END: this
   identifies, cheaply, which kinks can matter at the optimum. Without kinks the dual
   is smooth and Newton converges quadratically; where it stalls instead (nearly kinked
   smooth terms: low-CV or gamma demand near closing) the loop goes on to phase 2.
2. **Master** (:func:`master_phase`): the restricted problem that fixes the kinks far
   from the current bid-price sums (:mod:`.master`), solved by the primal-dual
   interior-point method (:mod:`.interior`), or where it has kinks only, a linear
   program, by HiGHS's dual simplex (:mod:`.lpmaster`); its bid prices are checked against every
   fixed kink when it is solved (the first master also at each of its certificates), and
   the windows grow until none is violated (column generation).
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from ..result import Termination
from . import continuation, interior, lpmaster, master, newton
from .bounds import Bounds, record
from .continuation import Continuation
from .prices import settled
from .recovery import recover, within_capacity

#: Below this many products the recovery runs at every Newton iteration; above, only
#: once the decrement (about twice q(pi) - q*) allows a gap within tol, and where the
#: phase stops at a limit (so that every stop has a certificate; the history shows no
#: gap before the first recovery).
RECOVER_ALWAYS_BELOW = 50_000
#: With only smooth products (unique bid prices) and tol <= 1e-7, Newton also waits until
#: its next step moves no bid price by more than this fraction of itself,
BID_TOL = 1e-6
#: or by more than this fraction: then it takes that step (one more evaluation of the
#: dual, not an iteration) and reports its point if the dual did not rise. Near a
#: solution the steps converge quadratically, so the bid prices after it are off by
#: about C times the step's square (C measured up to 160 on the ladder's warm starts: a
#: step of at most 3e-5 leaves an error of at most about 1.5e-7).
FINAL_STEP = 3e-5
#: Newton without kinks has stalled when neither its decrement (an estimate of q(pi) - q*)
#: nor the certified gap has fallen by a factor STALL_FACTOR in STALL_WINDOW iterations
#: (quadratic convergence does far better): nearly kinked smooth terms (low-CV or gamma
#: demand near closing), where the decrement may also cycle. At most NEWTON_ALONE
#: iterations in any case: Newton on a smooth dual that has not converged by then is
#: outside the region where its quadratic model holds, and the interior-point method,
#: whose convergence does not depend on that model, goes on.
STALL_WINDOW, STALL_FACTOR, NEWTON_ALONE = 8, 10.0, 16
#: It has also stalled when an arc search ended at a step of at most SHORT_STEP: near a
#: minimizer with a Lipschitz Hessian the full step is accepted (the local theory of
#: projected Newton), so two halvings mean the quadratic model fails at this scale (an
#: allocation's steep fall to 0 near closing), and the interior-point method, whose
#: convergence does not rest on that model, goes on from there. (1/16 before: p1m gamma
#: spent 3 more iterations and 11 more dual evaluations, about 2 s, on steps of 1/8 to 1/32
#: that moved the dual by 5e-9 of itself; no other model's count changed.)
SHORT_STEP = 1.0 / 4.0
#: Newton steps at most that settle the bid prices after a master phase (:func:`settle`).
SETTLE_STEPS = 3
#: Rounds of master and pricing at most.
MASTER_ROUNDS = 8
#: The first this many rounds price the fixed kinks at every certificate of the master and
#: leave it at the first violation (the first master's windows are a guess from the Newton
#: phase, and the end of its solve is mostly spent on the wrong problem); later rounds solve
#: their master to the end before pricing, so that the rounds stay few.
EARLY_PRICED_ROUNDS = 1
#: A warm start's direct master phase (:func:`warm_master_phase`) gives way to the Newton
#: phase at a master of more than this many times the free kinks of its first windows.
WARM_GROWTH = 4.0
#: The master phase's iteration limit (or the caller's, if larger).
MASTER_LIMIT = 300

#: Every stop of the loop: word -> (termination, what it means).
STATUS = {
    "optimal": (Termination.OPTIMAL, "certified gap within tol"),
    "iteration_limit": (Termination.ITERATION_LIMIT, "iteration limit reached"),
    "time_limit": (Termination.TIME_LIMIT, "time limit reached"),
    "no_decrease": (Termination.NUMERICAL_ERROR,
                    "no decrease along the projection arc of the Newton or the scaled gradient direction "
                    "(the dual is flat to rounding here)"),
    "numerical_error": (Termination.NUMERICAL_ERROR, "the interior-point method could take no step"),
    "master_solved": (Termination.NUMERICAL_ERROR,
                      "the restricted problem is solved and every fixed kink priced consistent, "
                      "but the certified gap is above tol"),
    "master_rounds": (Termination.ITERATION_LIMIT, f"{MASTER_ROUNDS} rounds of master and pricing"),
}


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


@dataclasses.dataclass
class LoopState:
    """What both phases share: the problem, the limits, the bounds and the history."""

    net: object
    system: object
    tol: float
    limit: int
    deadline: float | None
    t0: float
    floor: float
    bounds: Bounds = dataclasses.field(default_factory=Bounds)
    history: list = dataclasses.field(default_factory=list)
    iterations: int = 0
    newton_iterations: int = 0
    master_rounds: int = 0
    lp_masters: int = 0            # masters solved as linear programs by HiGHS (lpmaster)
    empty_masters: int = 0         # masters without variables (every kink fixed)
    simplex_iterations: int = 0
    barrier_iterations: int = 0    # HiGHS's interior-point iterations on linear-program masters

    def out_of_time(self) -> bool:
        return self.deadline is not None and time.perf_counter() > self.deadline


def run(net, system, pi0, tol, limit, deadline, t0, floor, theta_start=None, warm=False) -> Outcome:
    """Newton, then where it hands over, the master phase. From a warm start on a network of
    kinks only, the master phase first (:func:`warm_master_phase`)."""
    state = LoopState(net, system, tol, limit, deadline, t0, floor)
    if warm and _linear_masters(net):
        word = warm_master_phase(state, pi0)
        if word is not None:
            return _outcome(state, word)
        pi0 = state.bounds.pi if state.bounds.pi is not None else pi0
    before = state.iterations
    word, pi = newton_phase(state, pi0, theta_start)
    state.newton_iterations = state.iterations - before
    if word in ("identified", "stalled", "no_decrease"):
        if not state.out_of_time():
            word = master_phase(state, pi)
            if word == "optimal" and _must_settle(net, tol):
                settle(state)
        else:
            # out of time at the hand-over: the certificate of this stop needs an allocation
            # (large networks recover only near the optimum)
            state.bounds.offer_primal(*recover(net, net.evaluate(pi)))
            word = "time_limit" if word != "no_decrease" else word
    return _outcome(state, word)


# ---------------------------------------------------------------------------------------
# Phase 1: projected Newton, with the kinks smoothed by a continuation
# ---------------------------------------------------------------------------------------
def newton_phase(state, pi0, theta_start=None):
    """(word, bid prices to go on from): "optimal", a limit, "identified" (the smoothing is
    down to its end level), "stalled" or "no_decrease"."""
    net, system, bounds = state.net, state.system, state.bounds
    # where every master will be a linear program (kinks only), a coarser last level
    end = continuation.END_LINEAR if _linear_masters(net) else continuation.END
    cont = Continuation(net.products.has_kinks, theta_start, end)
    pt = net.evaluate(np.maximum(pi0, state.floor), cont.theta)
    fare_max = float(net.fare.max(initial=1.0))
    eps_bar = 1e-3 * fare_max
    lam = newton.LAM_START
    bounds.offer_dual(pt)
    always = net.n_products < RECOVER_ALWAYS_BELOW
    settle = BID_TOL if _must_settle(net, state.tol) else None
    chords = not net.products.has_kinks     # the curvature corrections of newton (smooth terms only)
    previous = None
    step_len = 0.0
    decrements, gaps, steps = [], [], []
    while True:
        dirn = newton.direction(net, system, pt, lam, eps_bar, state.floor, previous, chords)
        near = dirn.decrement <= 10.0 * state.tol * max(1.0, abs(pt.exact))
        it = state.iterations + 1
        limit = "iteration_limit" if it >= state.limit else "time_limit" if state.out_of_time() else None
        if always or limit or (near and _worth_recovering(pt, dirn, bounds, state.tol, settle, fare_max)):
            bounds.offer_primal(*recover(net, pt, dirn, system, both=always))
        state.history.append(record(it, bounds, pt.pi, step_len, state.t0))
        state.iterations = it
        if bounds.gap <= state.tol and _may_stop(net, pt, dirn, bounds, settle, fare_max):
            return "optimal", bounds.pi
        if limit:
            return limit, pt.pi
        previous = None
        if cont.theta > 0 and len(decrements) >= NEWTON_ALONE:
            return "identified", pt.pi
        if cont.theta > 0 and (cont.stage_done(dirn.decrement, pt.value - pt.exact)
                               or cont.stage_too_long()):
            if cont.lower() is None:
                return "identified", pt.pi
            lam, pt = newton.LAM_START, _smoothed_again(net, pt, cont, bounds)
            continue
        decrements.append(dirn.decrement)
        gaps.append(bounds.gap)
        cont.count()
        if cont.theta == 0 and (_stalled(decrements) and _stalled(gaps) or _halving(steps)
                                or len(gaps) >= NEWTON_ALONE):
            return "stalled", bounds.pi
        taken = newton.step(net, system, pt, lam, eps_bar, state.floor, dirn)
        if taken is None:
            if cont.theta > 0:
                if cont.lower() is None:
                    return "identified", pt.pi
                lam, pt = newton.LAM_START, _smoothed_again(net, pt, cont, bounds)
                continue
            bounds.offer_primal(*recover(net, pt))
            return ("optimal" if bounds.gap <= state.tol else "no_decrease"), bounds.pi
        previous = pt if chords else None
        pt, _, step_len, lam = taken
        steps.append(step_len)
        bounds.offer_dual(pt)


def _smoothed_again(net, pt, cont, bounds):
    """The dual at ``pt``'s bid prices at the continuation's new (lower) smoothing level."""
    pt = net.evaluate(pt.pi, cont.theta)
    bounds.offer_dual(pt)
    return pt


def _stalled(values) -> bool:
    """``values`` (decrements or gaps) have not fallen by STALL_FACTOR in the last
    STALL_WINDOW iterations (a gap still infinite, before any recovery, has not either)."""
    if len(values) <= STALL_WINDOW:
        return False
    then, now = values[-STALL_WINDOW - 1], values[-1]
    return not now <= then / STALL_FACTOR


def _halving(steps) -> bool:
    """The last arc search ended at a step <= SHORT_STEP."""
    return bool(steps) and steps[-1] <= SHORT_STEP


def _worth_recovering(pt, dirn, bounds, tol, settle, fare_max) -> bool:
    """Near the optimum, a recovery (a pass over the products) is of use only where Newton
    could stop: not once the gap is certified (the dual bound still falls, so it stays
    within tol), nor while the bid prices must still settle and the next step moves one by
    more than FINAL_STEP (see _may_stop): there the allocation it predicts is still off by
    about that step, far more than the dual value. (A stop at a limit recovers anyway.)"""
    if bounds.gap <= tol:
        return False
    return settle is None or settled(pt.pi, np.maximum(pt.pi + dirn.d, dirn.lower), FINAL_STEP, fare_max)


def _may_stop(net, pt, dirn, bounds, settle, fare_max) -> bool:
    """At a certified gap within tol: stop unless bid prices must settle (``settle``) and
    Newton's next step still moves one by more than that; a step of at most FINAL_STEP
    is taken first, its point becoming the reported one if the dual did not rise."""
    new = np.maximum(pt.pi + dirn.d, dirn.lower)
    if settle is None or settled(pt.pi, new, settle, fare_max):
        return True
    if not settled(pt.pi, new, FINAL_STEP, fare_max):
        return False
    final = net.evaluate(new)
    if final.exact > bounds.dual:
        return False
    bounds.dual, bounds.pi = final.exact, final.pi
    return True


def _must_settle(net, tol) -> bool:
    """Whether the bid prices must settle to BID_TOL besides the certified gap: with only
    smooth products (the bid prices are unique) and tol <= 1e-7."""
    return not net.products.has_kinks and tol <= 1e-7


def settle(state):
    """After a certified master phase (smooth products only; the master itself has gone on
    until its last step moved no bid price by more than BID_TOL, see
    :func:`.interior.solve_master`): Newton steps on the exact dual
    from the best bid prices, at most SETTLE_STEPS, until the next would move none by more
    than BID_TOL; each new point is kept where the dual did not rise (it is a bound like any
    other). The certificate bounds the revenue's gap; the interior-point method's bid prices
    may still be off by about the square root of that gap over the dual's curvature (2e-6 of
    a bid price on a two-leg network at a gap of 1.3e-10), and near the optimum Newton's
    steps converge quadratically."""
    net, bounds = state.net, state.bounds
    fare_max = float(net.fare.max(initial=1.0))
    pt = net.evaluate(np.maximum(bounds.pi, state.floor))
    for _ in range(SETTLE_STEPS):
        dirn = newton.direction(net, state.system, pt, newton.LAM_MIN, 1e-3 * fare_max, state.floor)
        new = np.maximum(pt.pi + dirn.d, dirn.lower)
        if settled(pt.pi, new, BID_TOL, fare_max):
            return
        pt = net.evaluate(new)
        if pt.exact > bounds.dual:
            return
        bounds.dual, bounds.pi = pt.exact, pt.pi


# ---------------------------------------------------------------------------------------
# Phase 2: the restricted problem, its interior-point solve, and pricing
# ---------------------------------------------------------------------------------------
def master_phase(state, pi, max_growth=None):
    """Masters and pricing rounds from bid prices ``pi`` until certified or a limit; with
    ``max_growth``, "too_large" instead of a master of more than that many times the free
    kinks of the first windows (at least one per leg)."""
    net, bounds = state.net, state.bounds
    share = None
    if len(net.products.i_smooth):
        if not np.isfinite(bounds.primal):
            # flat_share needs a revenue: the response at pi, scaled into the capacities
            pt = net.evaluate(pi)
            bounds.offer_dual(pt)
            bounds.offer_primal(*within_capacity(net, np.minimum(pt.x, net.upper)))
        share = master.flat_share(net, state.tol, bounds.primal)
    lo, hi = master.first_windows(net, pi)
    caps = master.first_caps(net, pi)
    max_free = None if max_growth is None else max_growth * max(int((hi - lo).sum()), net.n)
    limit = max(state.limit, MASTER_LIMIT)
    word = "master_rounds"
    warm = None
    for round_ in range(MASTER_ROUNDS):
        m = master.build(net, lo, hi, share, caps)
        if max_free is not None and len(m.kink) > max_free:
            return "too_large"
        state.master_rounds += 1
        # a master of kinks only is a linear program (:mod:`.lpmaster`)
        method = lpmaster if m.size and not len(m.smooth) else interior
        # each method restarts only from its own kind of kept state (a later master may have
        # smooth parts where the one before had none: pricing opens a jump fixed empty)
        start = warm if isinstance(warm, lpmaster.Model if method is lpmaster else interior.Snapshot) else None
        word, its, pi, cur = method.solve_master(net, state.system, m, pi, state.tol, limit, state.deadline,
                                                 state.t0, state.bounds, state.history, state.iterations,
                                                 early_pricing=round_ < EARLY_PRICED_ROUNDS, warm=start,
                                                 settle=BID_TOL if _must_settle(net, state.tol) else None)
        if isinstance(cur, lpmaster.Vertex):
            state.lp_masters += 1
            state.simplex_iterations += cur.simplex_iterations
            state.barrier_iterations += cur.barrier_iterations
        elif not m.size:
            state.empty_masters += 1
        warm = getattr(cur, "snapshot", None)
        state.iterations += its
        if word in ("optimal", "time_limit", "iteration_limit", "numerical_error"):
            return word
        windows = master.price(net, m, pi)
        if windows is None:
            return "optimal" if state.bounds.gap <= state.tol else "master_solved"
        lo, hi, caps = windows
        word = "master_rounds"
    return word


def _linear_masters(net) -> bool:
    """Whether every master is a linear program solved by HiGHS (:mod:`.lpmaster`): products
    with kinks only, and highspy installed."""
    return not len(net.products.i_smooth) and net.products.has_kinks and lpmaster.available()


def warm_master_phase(state, pi):
    """From warm-start bid prices on a network of kinks only (its masters are linear
    programs, :mod:`.lpmaster`): the master phase straight away, its first windows taken at
    the warm bid prices. Near the old optimum they hold the kinks that can matter, and
    pricing frees any other (column generation is exact from any windows); the Newton phase
    would only find the same windows again (p100k Poisson after a 5% change of the means:
    6 Newton iterations before the masters). Returns the loop's word, or None where the
    warm start proves far from this network's optimum: pricing grows a master to more than
    WARM_GROWTH times the kinks of the first windows (at least one per leg; after a 5%
    change of the means later masters were at most 1.1 times the first, p10k negative
    binomial and a 300-product Poisson network of means 3 times the generator's; from bid
    prices five times too high the second was 190 and 1,050 times the first, 3.5 s of
    simplex where the Newton phase takes 0.4 s), or the rounds run out. The loop then goes
    on with Newton from the best bid prices so far."""
    word = master_phase(state, pi, max_growth=WARM_GROWTH)
    return None if word in ("master_rounds", "too_large", "master_solved") else word


def _outcome(state, word) -> Outcome:
    bounds = state.bounds
    term, meaning = STATUS[word] if word in STATUS else (Termination.NUMERICAL_ERROR, word)
    if term is not Termination.OPTIMAL and bounds.gap <= state.tol:
        term, word, meaning = Termination.OPTIMAL, "optimal", STATUS["optimal"][1]
    msg = f"{meaning} after {state.iterations} iterations"
    if state.master_rounds:
        rounds, lp, empty = state.master_rounds, state.lp_masters, state.empty_masters
        barrier = f"{state.barrier_iterations} interior-point and " if state.barrier_iterations else ""
        kinds = [(lp, f"as linear programs by HiGHS ({barrier}{state.simplex_iterations} simplex iterations)"),
                 (rounds - lp - empty, "by the interior-point method"),
                 (empty, "without variables (every kink fixed)")]
        kinds = [(n, how) for n, how in kinds if n]
        by = f" {kinds[0][1]}" if len(kinds) == 1 else ": " + ", ".join(f"{n} {how}" for n, how in kinds)
        msg += f" (projected Newton {state.newton_iterations}, then {rounds} round(s) of the restricted problem{by})"
    pi = bounds.pi if bounds.pi is not None else np.zeros(state.net.n)
    x = bounds.x if bounds.x is not None else np.zeros(state.net.n_products)
    return Outcome(pi=pi, x=x, gap=bounds.gap, termination=term, raw_status=word, message=msg,
                   iterations=state.iterations, history=tuple(state.history))
