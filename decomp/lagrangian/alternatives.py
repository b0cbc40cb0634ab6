"""Two first-order dual methods on the same bounded subproblems, for comparison.

``lbfgsb``: scipy's L-BFGS-B with the bounds pi >= 0 (Byrd, Lu, Nocedal and
Zhu 1995), on the exact dual. ``subgradient``: projected subgradient steps
with Polyak's rule toward the best primal value. Both stop on the same
certified gap as Newton and report their limits otherwise.
"""

from __future__ import annotations

import logging
import time

import numpy as np

from ..result import Termination
from .bounds import Bounds, record
from .loop import Outcome
from .recovery import recover

log = logging.getLogger(__name__)

#: L-BFGS-B's messages (prefixes) -> Termination. Its own tests are off (ftol = gtol = 0),
#: so reaching them means the dual stopped decreasing in floating point: not certified.
LBFGSB_STATUS = {
    "CONVERGENCE": Termination.NUMERICAL_ERROR,
    "STOP: TOTAL NO. OF ITERATIONS REACHED LIMIT": Termination.ITERATION_LIMIT,
    "STOP: TOTAL NO. OF F,G EVALUATIONS EXCEEDS LIMIT": Termination.ITERATION_LIMIT,
    "ABNORMAL": Termination.NUMERICAL_ERROR,
    "ERROR": Termination.ERROR,
}


def lbfgsb_termination(message: str) -> Termination:
    msg = str(message).upper()
    for prefix, term in LBFGSB_STATUS.items():
        if msg.startswith(prefix):
            return term
    log.warning("L-BFGS-B message %r has no mapping; reported as unknown", message)
    return Termination.UNKNOWN


class _Stop(Exception):
    pass


def run_lbfgsb(net, pi0, tol, limit, deadline, t0, floor) -> Outcome:
    from scipy.optimize import minimize

    best = Bounds()
    history = []
    state = {"last": None, "stop": None}

    def fun(p):
        pt = net.evaluate(np.asarray(p, dtype=np.float64))
        state["last"] = pt
        return pt.exact, -pt.load + net.cap

    def callback(intermediate_result):
        p = np.asarray(intermediate_result.x, dtype=np.float64)
        pt = state["last"]
        if pt is None or not np.array_equal(pt.pi, p):
            pt = net.evaluate(p)
        best.offer_dual(pt)
        best.offer_primal(*recover(net, pt))
        history.append(record(len(history) + 1, best, pt.pi, 1.0, t0))
        if best.gap <= tol:
            state["stop"] = Termination.OPTIMAL
            raise StopIteration
        if deadline is not None and time.perf_counter() > deadline:
            state["stop"] = Termination.TIME_LIMIT
            raise StopIteration

    res = minimize(fun, np.maximum(pi0, floor), jac=True, method="L-BFGS-B", bounds=[(floor, None)] * net.n, callback=callback,
                   options={"maxiter": limit, "maxfun": 20 * limit, "ftol": 0.0, "gtol": 0.0, "maxcor": 20})
    pt = net.evaluate(np.asarray(res.x, dtype=np.float64))
    best.offer_dual(pt)
    best.offer_primal(*recover(net, pt))
    term = state["stop"] or (Termination.OPTIMAL if best.gap <= tol else lbfgsb_termination(res.message))
    msg = f"L-BFGS-B: {res.message}; best certified gap {best.gap:.3g}"
    return Outcome(pi=best.pi, x=best.x, gap=best.gap, termination=term, raw_status=str(res.message),
                   message=msg, iterations=int(res.nit), history=tuple(history))


def run_subgradient(net, pi0, tol, limit, deadline, t0, floor) -> Outcome:
    best = Bounds()
    history = []
    pt = net.evaluate(np.maximum(pi0, floor))
    term, raw = Termination.ITERATION_LIMIT, "iteration_limit"
    lam, stall, it = 1.0, 0, 0
    while True:
        before = best.dual
        best.offer_dual(pt)
        best.offer_primal(*recover(net, pt))
        if best.dual < before:
            stall = 0
        else:
            stall += 1
            if stall >= 20:                     # halve Polyak's factor when the dual stalls
                lam, stall = 0.5 * lam, 0
        history.append(record(it, best, pt.pi, lam, t0))
        if best.gap <= tol:
            term, raw = Termination.OPTIMAL, "optimal"
            break
        if it >= limit:
            break
        if deadline is not None and time.perf_counter() > deadline:
            term, raw = Termination.TIME_LIMIT, "time_limit"
            break
        it += 1
        g = pt.grad
        gg = float(g @ g)
        if gg <= 0:
            term, raw = Termination.NUMERICAL_ERROR, "zero_gradient"
            break
        pt = net.evaluate(np.maximum(pt.pi - lam * (pt.exact - best.primal) / gg * g, floor))
    msg = f"subgradient: best certified gap {best.gap:.3g} after {it} iterations"
    return Outcome(pi=best.pi, x=best.x, gap=best.gap, termination=term, raw_status=raw, message=msg,
                   iterations=it, history=tuple(history))
