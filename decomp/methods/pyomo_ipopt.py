"""Method ``pyomo-ipopt``: the PNLP built in Pyomo (:mod:`models.pnlp`) and solved
with Pyomo's cyipopt interface (``SolverFactory('cyipopt')``, PyNumero + ASL).

Bid prices come from a ``dual`` IMPORT Suffix on the model: Pyomo loads
Ipopt's constraint multipliers there, >= 0 for this maximization (the same
values as ``mult_g`` in method ``ipopt``). Ipopt's options are those of method
``ipopt`` (``bound_relax_factor = 0`` by default, see there), except that the
time limit is passed as ``max_cpu_time``: Pyomo's cyipopt interface (6.10)
cannot read back Ipopt's wall-time status (-5) and fails on it.

Loading an interior-point solution puts tiny negative values into variables
bounded at 0, and Pyomo logs one warning per such variable; the ``pyomo.core``
logger is raised to ERROR while the solution is loaded.
"""

from __future__ import annotations

import contextlib
import logging
import time

import numpy as np

from ..errors import ConfigError, SolverUnavailableError
from ..registry import register
from ..result import Termination
from .common import certified_result, map_status
from .ipopt import ipopt_options, ipopt_version, start_point, termination as ipopt_termination
from .ipopt import ProgressLog, nonnegative_bid_prices, require_normal, warm_start_array
from .ipopt import progress as ipopt_progress

log = logging.getLogger(__name__)

#: Pyomo TerminationCondition (member name) -> Termination, used when Pyomo
#: gives no Ipopt return code. A test checks that every member is listed.
PYOMO_STATUS = {
    "unknown": Termination.UNKNOWN,
    "maxTimeLimit": Termination.TIME_LIMIT,
    "maxIterations": Termination.ITERATION_LIMIT,
    "minFunctionValue": Termination.ERROR,
    "minStepLength": Termination.NUMERICAL_ERROR,
    "globallyOptimal": Termination.OPTIMAL,
    "locallyOptimal": Termination.OPTIMAL,
    "feasible": Termination.NUMERICAL_ERROR,     # e.g. Ipopt's "acceptable level"
    "optimal": Termination.OPTIMAL,
    "maxEvaluations": Termination.ITERATION_LIMIT,
    "other": Termination.ERROR,
    "unbounded": Termination.UNBOUNDED,
    "infeasible": Termination.INFEASIBLE,
    "infeasibleOrUnbounded": Termination.INFEASIBLE,
    "invalidProblem": Termination.ERROR,
    "intermediateNonInteger": Termination.ERROR,
    "noSolution": Termination.NUMERICAL_ERROR,
    "solverFailure": Termination.NUMERICAL_ERROR,
    "internalSolverError": Termination.ERROR,
    "error": Termination.ERROR,
    "userInterrupt": Termination.ERROR,
    "resourceInterrupt": Termination.ERROR,
    "licensingProblems": Termination.ERROR,
}


def pyomo_termination(cond) -> Termination:
    return map_status(PYOMO_STATUS, cond, "Pyomo termination condition")


@contextlib.contextmanager
def quiet_pyomo_load():
    """Raise the ``pyomo.core`` logger to ERROR (per-variable bound warnings on load)."""
    logger = logging.getLogger("pyomo.core")
    old = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(old)


@register
class PyomoIpopt:
    """PNLP as a Pyomo model, solved with SolverFactory('cyipopt')."""

    name = "pyomo-ipopt"
    models = ("pnlp",)

    @classmethod
    def available(cls):
        try:
            import pyomo.environ as pyo
            from pyomo.contrib.pynumero.asl import AmplInterface
        except ImportError as exc:
            return False, f"Pyomo/PyNumero cannot be imported ({exc})"
        try:
            if not AmplInterface.available():
                return False, "PyNumero's ASL library is missing; run scripts/build_pynumero.py"
            if not pyo.SolverFactory("cyipopt").available():
                return False, "cyipopt is not installed; pip install cyipopt"
        except Exception as exc:                        # noqa: BLE001  (report, do not crash)
            return False, f"cyipopt availability check failed: {exc}"
        return True, ""

    def solve(self, instance, model, options, warm_start=None):
        import pyomo.environ as pyo

        from models import dlp, pnlp
        from models.common import paused_gc

        if model != "pnlp":
            raise ConfigError(f"method 'pyomo-ipopt' solves the pnlp, not {model!r}")
        require_normal(instance, self.name)
        t0 = time.perf_counter()
        pi0 = warm_start_array(instance, warm_start)
        x0 = start_point(instance, pi0)
        m = pnlp.build(instance, x0=x0)
        m.dual = pyo.Suffix(direction=pyo.Suffix.IMPORT)
        solver = pyo.SolverFactory("cyipopt")
        if not solver.available():
            raise SolverUnavailableError("SolverFactory('cyipopt') is not available; pip install cyipopt")
        opts = ipopt_options(options)
        if "max_wall_time" in opts and "max_wall_time" not in options.solver_options:
            opts["max_cpu_time"] = opts.pop("max_wall_time")
        counter = {"iterations": 0}
        t1 = time.perf_counter()
        ipopt_progress.info("pyomo-ipopt: model of %d products built in %.1f s; solving", instance.n_products,
                            t1 - t0)
        # iteration lines are logged too, but Pyomo captures the process's output while it solves
        # (unless verbose), so on the terminal only the line above shows before the solve returns
        show = ProgressLog("pyomo-ipopt")

        def on_iteration(nlp, problem, alg_mod, iter_count, obj_value, inf_pr, inf_du, mu, d_norm,
                         regularization_size, alpha_du, alpha_pr, ls_trials):   # Pyomo >= 6.8 signature
            counter["iterations"] = int(iter_count)
            show(iter_count, -obj_value, inf_pr)      # PyNumero minimizes -revenue for the maximized model
            return True
        with paused_gc(), quiet_pyomo_load():
            res = solver.solve(m, tee=bool(options.verbose), options=opts,
                               intermediate_callback=on_iteration)
        t2 = time.perf_counter()
        code = getattr(res.solver, "return_code", None)
        if code is not None:
            name, term = ipopt_termination(code)
            raw = f"{int(code)} {name}"
        else:
            term = pyomo_termination(res.solver.termination_condition)
            raw = str(res.solver.termination_condition)
        x = dlp.allocation(m, instance)
        pi = dlp.bid_prices(m, instance, m.dual)
        finite = bool(np.all(np.isfinite(x)) and np.all(np.isfinite(pi)))
        msg = res.solver.message
        msg = msg.decode(errors="replace") if isinstance(msg, bytes) else (None if msg is None else str(msg))
        if pi is not None and finite:
            pi, note = nonnegative_bid_prices(pi, instance.fare)
            if note:
                msg = f"{msg}; {note}" if msg else note
        return certified_result(
            instance, model, self.name, options, termination=term, x=x if finite else None,
            pi=pi if finite else None, seconds={"build": t1 - t0, "solve": t2 - t1}, iterations=counter["iterations"],
            solver="pyomo cyipopt", solver_version=ipopt_version(), raw_status=raw, message=msg,
            extra_options={"ipopt": opts})
