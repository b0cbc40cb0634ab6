"""The methods of the choice-based sales LP (model ``sblp``), registered under the usual names.

* ``highs``: the LP from the arrays (:mod:`decomp.choice.lp`) with highspy in one
  ``passModel``. HiGHS' interior-point method with crossover is the default here
  (``solver_options={"solver": "simplex"}`` for the simplex method): on generated
  networks the simplex method took 5.3 s at 10,000 products against 1.9 s, and had
  not finished after 12 minutes at 100,000 against 27 s (one run each, shared machine);
* ``pyomo-highs``: the Pyomo model :mod:`models.sblp` through Pyomo's ``appsi_highs``;
* ``lagrangian``: the decomposition by market (:mod:`decomp.choice.lagrangian`).

Every answer is certified by :func:`decomp.choice.certify.certify` from the instance
alone, and rated optimal only when the solver converged and the certified gap is within
the tolerance (:func:`decomp.certify.solution_status`).
"""

from __future__ import annotations

import time

import numpy as np

from ..certify import solution_status
from ..errors import ConfigError
from ..registry import register
from ..result import SolutionStatus, SolveResult, Termination
from . import certify as choice_certify
from .data import require


def choice_result(instance, method, options, *, termination, x, pi, marks, iterations, solver, solver_version,
                  raw_status, message, history=(), extra_options=None) -> SolveResult:
    """The :class:`SolveResult` of sales ``x`` and bid prices ``pi`` on the sales LP (either may be None)."""
    t0, t1, t2 = marks
    cert = None if x is None else choice_certify.certify(instance, x, np.zeros(instance.n_legs) if pi is None else pi)
    t3 = time.perf_counter()
    status = solution_status(termination, cert, options.tol, have_solution=x is not None)
    if pi is None and status is SolutionStatus.OPTIMAL:
        status = SolutionStatus.FEASIBLE
    dual_known = cert is not None and pi is not None
    return SolveResult(
        model="sblp", method=method, termination=termination, solution_status=status,
        objective=None if cert is None else cert.primal_value, bound=cert.dual_value if dual_known else None,
        gap=cert.gap if dual_known else None, leg_ids=instance.leg_ids, bid_price_array=pi,
        product_ids=instance.product_ids, allocation=x, iterations=iterations,
        seconds={"build": t1 - t0, "solve": t2 - t1, "certify": t3 - t2}, solver=solver,
        solver_version=solver_version, raw_status=raw_status, message=message, certificate=cert,
        history=history, options={**options.to_dict(), **dict(extra_options or {})})


def _check_model(name, model):
    if model != "sblp":
        raise ConfigError(f"this {name!r} method solves the 'sblp' model, not {model!r}")


@register
class SalesLPHighs:
    """The sales LP from the arrays with highspy (interior point and crossover by default)."""

    name = "highs"
    models = ("sblp",)

    @classmethod
    def available(cls):
        from ..methods.highs import HighsArrays

        return HighsArrays.available()

    def solve(self, instance, model, options, warm_start=None):
        from ..methods.common import import_solver
        from ..methods.highs import highs_version, iteration_count, run_lp, termination
        from .lp import lp_arrays

        highspy = import_solver("highspy", "pip install highspy")
        _check_model(self.name, model)
        t0 = time.perf_counter()
        require(instance)
        lp = lp_arrays(instance)
        Mx = lp.matrix
        inf = highspy.kHighsInf
        h_lp = highspy.HighsLp()
        h_lp.num_col_, h_lp.num_row_ = int(Mx.shape[1]), int(Mx.shape[0])
        h_lp.col_cost_ = lp.cost
        h_lp.col_lower_ = lp.col_lower
        h_lp.col_upper_ = np.where(np.isinf(lp.col_upper), inf, lp.col_upper)
        h_lp.row_lower_ = np.where(np.isinf(lp.row_lower), -inf, lp.row_lower)
        h_lp.row_upper_ = lp.row_upper
        h_lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        h_lp.a_matrix_.start_ = Mx.indptr.astype(np.int32)
        h_lp.a_matrix_.index_ = Mx.indices.astype(np.int32)
        h_lp.a_matrix_.value_ = Mx.data.astype(np.float64)
        h_lp.sense_ = highspy.ObjSense.kMaximize
        if "solver" not in options.solver_options:
            options = options.replace(solver_options={"solver": "ipm", **options.solver_options})
        h, t1, t2 = run_lp(highspy, h_lp, options, f"the sales LP of {instance.name}")
        ms = h.getModelStatus()
        sol = h.getSolution()
        L, P = instance.n_legs, instance.n_products
        x = np.asarray(sol.col_value[:P], dtype=np.float64) if sol.value_valid else None
        pi = np.asarray(sol.row_dual[:L], dtype=np.float64) if sol.dual_valid else None
        iters = iteration_count(h.getInfo())
        return choice_result(instance, self.name, options, termination=termination(ms), x=x, pi=pi,
                             marks=(t0, t1, t2), iterations=iters, solver="highspy", solver_version=highs_version(),
                             raw_status=ms.name, message=h.modelStatusToString(ms))


@register
class SalesLPPyomoHighs:
    """The sales LP built in Pyomo (:mod:`models.sblp`) and solved with appsi_highs."""

    name = "pyomo-highs"
    models = ("sblp",)

    @classmethod
    def available(cls):
        from ..methods.pyomo_highs import PyomoHighs

        return PyomoHighs.available()

    def solve(self, instance, model, options, warm_start=None):
        from ..methods.highs import highs_version
        from ..methods.pyomo_highs import solve_appsi, termination
        from models import sblp

        _check_model(self.name, model)
        t0 = time.perf_counter()
        require(instance)
        m = sblp.build(instance)
        t1 = time.perf_counter()
        res, x, pi, iters = solve_appsi(m, instance, options, sblp.allocation)
        t2 = time.perf_counter()
        return choice_result(instance, self.name, options, termination=termination(res.termination_condition),
                             x=x, pi=pi, marks=(t0, t1, t2), iterations=iters, solver="pyomo appsi_highs",
                             solver_version=highs_version(), raw_status=res.termination_condition.name, message=None)


@register
class SalesLPLagrangian:
    """The sales LP by Lagrangian relaxation of the leg capacities, decomposed by market."""

    name = "lagrangian"
    models = ("sblp",)

    @classmethod
    def available(cls):
        from ..methods.highs import HighsArrays

        ok, reason = HighsArrays.available()
        return (True, "numpy/scipy and highspy (the master LP)") if ok else (False, reason)

    def solve(self, instance, model, options, warm_start=None):
        from threadpoolctl import threadpool_limits

        from . import lagrangian

        _check_model(self.name, model)
        if options.solver_options:
            raise ConfigError(f"the sblp 'lagrangian' method takes no solver options, got "
                              f"{sorted(options.solver_options)}")
        require(instance)
        start = None if warm_start is None else _prices(instance, warm_start)
        t0 = time.perf_counter()
        with threadpool_limits(1, "blas"):      # idle BLAS threads spin against the numpy work (see DEVELOPERS)
            out = lagrangian.solve(instance, options, warm_start=start)
        t1 = t0 + out.seconds_build
        t2 = time.perf_counter()
        return choice_result(instance, self.name, options, termination=out.termination, x=out.x, pi=out.pi,
                             marks=(t0, t1, t2), iterations=out.iterations, solver="decomp-choice-lagrangian",
                             solver_version=_version(), raw_status=out.raw_status, message=out.message,
                             history=out.history,
                             extra_options={"newton_iterations": out.newton_iterations,
                                            "master_rounds": out.master_rounds, "free_markets": out.free_markets,
                                            "start": "warm" if warm_start is not None else "zero"})


def _prices(instance, warm_start) -> np.ndarray:
    """Warm-start bid prices as an array aligned with the legs (a dict by leg id or an array)."""
    if isinstance(warm_start, dict):
        return np.array([max(0.0, float(warm_start.get(leg, 0.0))) for leg in instance.leg_ids.tolist()])
    a = np.asarray(warm_start, dtype=np.float64)
    if a.shape != (instance.n_legs,) or not np.all(np.isfinite(a)):
        raise ConfigError(f"warm start: expected {instance.n_legs} finite bid prices, got shape {a.shape}")
    return np.maximum(a, 0.0)


def _version():
    from .. import __version__

    return __version__
