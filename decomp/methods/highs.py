"""Method ``highs``: the DLP and the piecewise-linear PNLP straight from the arrays with highspy.

The LP is passed to HiGHS in one ``passModel`` call, column-wise, built from
the instance's CSR incidence without Python loops over products:

* DLP: max f.x  s.t.  A x <= c,  0 <= x <= mean;
* PWL: max sum_jk f_j s_jk y_jk  s.t.  sum_j A_ij sum_k y_jk <= c_i,
  0 <= y_jk <= w_jk (segments from :func:`decomp.segments.segments`; zero-width
  segments are left out).

Bid prices are the capacity rows' duals. HiGHS reports ``row_dual`` of a
maximization with the sign that makes binding ``<=`` rows >= 0, which is our
convention; tiny negative values from round-off are kept in the result (the
certificate projects and reports the smallest).
"""

from __future__ import annotations

import contextlib
import logging
import os
import sys
import time

import numpy as np

from ..errors import ConfigError
from ..registry import register
from ..result import Termination
from .common import certified_result, import_available, import_solver, map_status

log = logging.getLogger(__name__)

#: HiGHS model status (``highspy.HighsModelStatus`` member name) -> Termination.
#: A test checks that every member of the enum is listed.
STATUS = {
    "kNotset": Termination.ERROR,                 # no solve happened
    "kLoadError": Termination.ERROR,
    "kModelError": Termination.ERROR,
    "kPresolveError": Termination.ERROR,
    "kSolveError": Termination.NUMERICAL_ERROR,
    "kPostsolveError": Termination.NUMERICAL_ERROR,
    "kModelEmpty": Termination.OPTIMAL,           # no columns: x = () is optimal
    "kOptimal": Termination.OPTIMAL,
    "kInfeasible": Termination.INFEASIBLE,
    # our LPs are bounded (0 <= x <= bound), so "unbounded or infeasible" means infeasible
    "kUnboundedOrInfeasible": Termination.INFEASIBLE,
    "kUnbounded": Termination.UNBOUNDED,
    "kObjectiveBound": Termination.ERROR,         # objective bound / target / solution limit:
    "kObjectiveTarget": Termination.ERROR,        # limits decomp never sets
    "kSolutionLimit": Termination.ERROR,
    "kTimeLimit": Termination.TIME_LIMIT,
    "kIterationLimit": Termination.ITERATION_LIMIT,
    "kUnknown": Termination.UNKNOWN,
    "kInterrupt": Termination.ERROR,
    "kHighsInterrupt": Termination.ERROR,
    "kMemoryLimit": Termination.ERROR,
}


@contextlib.contextmanager
def quiet_stdout(quiet: bool = True):
    """Send the process's standard output (file descriptor 1) to /dev/null.

    highspy prints its banner from C++ when a ``Highs`` object is created,
    before any option can turn output off; this keeps command output readable.
    """
    if not quiet:
        yield
        return
    sys.stdout.flush()
    saved = os.dup(1)
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, 1)
        yield
    finally:
        os.dup2(saved, 1)
        os.close(saved)
        os.close(devnull)


def new_highs(verbose: bool = False):
    """A ``highspy.Highs`` with its banner and log silenced unless ``verbose``."""
    import highspy

    with quiet_stdout(not verbose):
        h = highspy.Highs()
    if not verbose:
        h.setOptionValue("output_flag", False)
    return h


def termination(model_status) -> Termination:
    """Map a HiGHS model status (enum member or its name) to a Termination."""
    return map_status(STATUS, model_status, "HiGHS model status")


def lp_arrays(instance, model: str, segments: int):
    """The LP as arrays: (cost, upper, csc matrix L x n, column -> product index).

    Lower bounds are 0, rows are A(.) <= c. For the DLP the columns are the
    products; for the PWL they are the nonzero-width segments.
    """
    A = instance.A.tocsc()
    if model == "dlp":
        cols = np.arange(instance.n_products, dtype=np.int64)
        return instance.fare.copy(), np.maximum(instance.mean, 0.0), A, cols
    from ..segments import segments as segment_table

    _, width, slope = segment_table(instance, segments)
    keep = width > 0
    cols = np.nonzero(keep)[0]                              # product of each kept segment
    cost = (instance.fare[:, None] * slope)[keep]
    upper = width[keep]
    return cost, upper, A[:, cols], cols


def status_words(status) -> str:
    """A HiGHS status in words for messages ('kError' -> 'error'); the code itself stays in raw_status."""
    name = getattr(status, "name", str(status))
    return (name[1:] if name[:1] == "k" and name[1:2].isupper() else name).lower()


def _set(h, name, value):
    import highspy

    status = h.setOptionValue(name, value)
    if status != highspy.HighsStatus.kOk:
        raise ConfigError(f"HiGHS rejected option {name}={value!r} (HiGHS status: {status_words(status)})")


def highs_version() -> str:
    import highspy

    return f"HiGHS {highspy.HIGHS_VERSION_MAJOR}.{highspy.HIGHS_VERSION_MINOR}.{highspy.HIGHS_VERSION_PATCH}"


def highs_option_values(options) -> dict:
    """HiGHS option values for ``options``, shared by both HiGHS paths (``solver_options``
    last, so they win). Output and the time limit are set by each path its own way."""
    values = {}
    if options.iteration_limit is not None:
        values["simplex_iteration_limit"] = int(options.iteration_limit)
        values["ipm_iteration_limit"] = int(options.iteration_limit)
    if options.threads is not None:
        values["threads"] = int(options.threads)
    # HiGHS' feasibility tolerances accept [1e-10, ...]; never looser than its 1e-7 default.
    ftol = float(min(1e-7, max(1e-10, options.tol)))
    values["primal_feasibility_tolerance"] = ftol
    values["dual_feasibility_tolerance"] = ftol
    values.update(dict(options.solver_options))
    return values


def apply_options(h, options):
    """Set ``options`` on the highspy object ``h`` (every return code checked)."""
    _set(h, "output_flag", bool(options.verbose))
    if options.time_limit is not None:
        _set(h, "time_limit", float(options.time_limit))
    for k, v in highs_option_values(options).items():
        _set(h, k, v)


def run_lp(highspy, lp, options, what: str):
    """A new Highs with ``options``, ``lp`` passed to it and run: (h, t1, t2), t1 when the
    model is passed, t2 when the run ends. A model HiGHS rejects is a ConfigError naming
    ``what``."""
    h = new_highs(options.verbose)
    apply_options(h, options)
    status = h.passModel(lp)
    if status == highspy.HighsStatus.kError:
        raise ConfigError(f"HiGHS rejected {what} (HiGHS status: {status_words(status)})")
    t1 = time.perf_counter()
    if options.threads is not None:
        # HiGHS keeps one thread scheduler per process; a run asking for a
        # different thread count than the first one fails unless it is reset.
        h.resetGlobalScheduler(True)
    h.run()
    return h, t1, time.perf_counter()


def iteration_count(info) -> int:
    """Simplex and interior-point iterations of a HiGHS run (its info; -1 means none)."""
    return int(info.simplex_iteration_count) + max(0, int(info.ipm_iteration_count))


@register
class HighsArrays:
    """DLP or PWL from the sparse arrays, one ``passModel``, duals from ``row_dual``."""

    name = "highs"
    models = ("dlp", "pwl")

    @classmethod
    def available(cls):
        return import_available("highspy", "pip install highspy")

    def solve(self, instance, model, options, warm_start=None):
        highspy = import_solver("highspy", "pip install highspy")
        if model not in self.models:
            raise ConfigError(f"method 'highs' solves {self.models}, not {model!r}")
        t0 = time.perf_counter()
        cost, upper, M, cols = lp_arrays(instance, model, options.segments)
        L, n = M.shape
        lp = highspy.HighsLp()
        lp.num_col_ = int(n)
        lp.num_row_ = int(L)
        lp.col_cost_ = cost
        lp.col_lower_ = np.zeros(n)
        lp.col_upper_ = upper
        lp.row_lower_ = np.full(L, -highspy.kHighsInf)
        lp.row_upper_ = instance.capacity.copy()
        lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        lp.a_matrix_.start_ = M.indptr.astype(np.int32)
        lp.a_matrix_.index_ = M.indices.astype(np.int32)
        lp.a_matrix_.value_ = M.data.astype(np.float64)
        lp.sense_ = highspy.ObjSense.kMaximize
        h, t1, t2 = run_lp(highspy, lp, options, f"the {model} LP of {instance.name}")
        ms = h.getModelStatus()
        term = termination(ms)
        iters = iteration_count(h.getInfo())
        sol = h.getSolution()
        x = pi = None
        if sol.value_valid and n == len(sol.col_value):
            y = np.asarray(sol.col_value, dtype=np.float64)
            x = np.bincount(cols, weights=y, minlength=instance.n_products) if model == "pwl" else y
        if sol.dual_valid and L == len(sol.row_dual):
            pi = np.asarray(sol.row_dual, dtype=np.float64)
        elif L == 0:
            pi = np.zeros(0)
        return certified_result(
            instance, model, self.name, options, termination=term, x=x, pi=pi,
            seconds={"build": t1 - t0, "solve": t2 - t1},
            iterations=iters, solver="highspy", solver_version=highs_version(),
            raw_status=ms.name, message=h.modelStatusToString(ms))
