"""Method ``pyomo-highs``: the DLP or the PWL PNLP built in Pyomo (:mod:`models`) and
solved through Pyomo's APPSI HiGHS interface.

Bid prices are the duals of ``model.capacity`` from ``solver.get_duals()``;
for this maximization HiGHS reports them >= 0 (the same values as
``row_dual`` in method ``highs``).
"""

from __future__ import annotations

import logging
import time

import numpy as np

from ..errors import ConfigError, SolverUnavailableError
from ..registry import register
from ..result import Termination
from .common import certified_result, map_status
from .highs import highs_option_values, highs_version, iteration_count

log = logging.getLogger(__name__)

#: APPSI TerminationCondition (member name) -> Termination. A test checks every member.
STATUS = {
    "unknown": Termination.UNKNOWN,
    "maxTimeLimit": Termination.TIME_LIMIT,
    "maxIterations": Termination.ITERATION_LIMIT,
    "objectiveLimit": Termination.ERROR,          # a limit decomp never sets
    "minStepLength": Termination.NUMERICAL_ERROR,
    "optimal": Termination.OPTIMAL,
    "unbounded": Termination.UNBOUNDED,
    "infeasible": Termination.INFEASIBLE,
    "infeasibleOrUnbounded": Termination.INFEASIBLE,   # our LPs are bounded
    "error": Termination.ERROR,
    "interrupted": Termination.ERROR,
    "licensingProblems": Termination.ERROR,
}


def termination(cond) -> Termination:
    return map_status(STATUS, cond, "APPSI termination condition")


def solve_appsi(m, instance, options, allocation):
    """Solve the Pyomo LP ``m`` (capacity rows as in :mod:`models.common`) with Pyomo's
    appsi_highs under ``options``: (results, x, pi, iterations). ``allocation(m, instance)``
    reads the allocation once the primal values are loaded; x or pi is None where the solver
    has none (or x is not finite), iterations None when the highspy object is not reachable."""
    try:
        from pyomo.contrib.appsi.solvers import Highs
    except ImportError as exc:
        raise SolverUnavailableError("Pyomo's APPSI HiGHS interface is missing; pip install pyomo highspy") from exc
    from models import dlp
    from models.common import paused_gc

    opt = Highs()
    opt.config.load_solution = False
    opt.config.stream_solver = bool(options.verbose)
    if options.time_limit is not None:
        opt.config.time_limit = float(options.time_limit)
    opt.highs_options = highs_option_values(options)
    with paused_gc():
        res = opt.solve(m)
    raw = getattr(opt, "_solver_model", None)            # the highspy object, for counts only
    iters = None if raw is None else iteration_count(raw.getInfo())
    try:
        for v, val in opt.get_primals().items():
            v.set_value(val, skip_validation=True)
        x = allocation(m, instance)
    except RuntimeError:
        x = None
    try:
        pi = dlp.bid_prices(m, instance, opt.get_duals())
    except RuntimeError:
        pi = None
    if x is not None and not np.all(np.isfinite(x)):
        x = None
    return res, x, pi, iters


@register
class PyomoHighs:
    """DLP or PWL as a Pyomo model, solved with appsi_highs."""

    name = "pyomo-highs"
    models = ("dlp", "pwl")

    @classmethod
    def available(cls):
        try:
            from pyomo.contrib.appsi.solvers import Highs
        except ImportError as exc:
            return False, f"Pyomo's APPSI HiGHS interface cannot be imported ({exc})"
        try:
            ok = Highs().available()
        except Exception as exc:                        # noqa: BLE001  (report, do not crash)
            return False, f"appsi_highs availability check failed: {exc}"
        return (True, "") if ok else (False, "appsi_highs: highspy not found; pip install highspy")

    def solve(self, instance, model, options, warm_start=None):
        from models import dlp, pwl

        if model not in self.models:
            raise ConfigError(f"method 'pyomo-highs' solves {self.models}, not {model!r}")
        t0 = time.perf_counter()
        m = dlp.build(instance) if model == "dlp" else pwl.build(instance, options.segments)
        t1 = time.perf_counter()
        res, x, pi, iters = solve_appsi(m, instance, options, dlp.allocation if model == "dlp" else pwl.allocation)
        term = termination(res.termination_condition)
        t2 = time.perf_counter()                          # solve includes loading the answer
        return certified_result(
            instance, model, self.name, options, termination=term, x=x, pi=pi,
            seconds={"build": t1 - t0, "solve": t2 - t1},
            iterations=iters, solver="pyomo appsi_highs", solver_version=highs_version(),
            raw_status=res.termination_condition.name, message=None)
