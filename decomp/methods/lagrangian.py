"""Method ``lagrangian``: the PNLP by Lagrangian relaxation of the leg capacities.

The algorithm lives in :mod:`decomp.lagrangian` (projected Newton on the
bound-constrained dual, Bertsekas 1982; see its docstring). This module
registers it as a method: it checks the options, runs the dual method,
re-certifies the answer independently (:func:`decomp.certify.certify`) at the
bid prices it reports, and builds the :class:`~decomp.result.SolveResult`.

Solver-specific options (``SolverOptions.solver_options``):
``linear_solver`` ("auto" default, "dense", "schur") and ``precision``
("mixed" default, "double") of the reduced-Hessian factorization.
"""

from __future__ import annotations

import logging
import time

from .. import certify as _certify
from .. import lagrangian as _lagrangian
from ..errors import ConfigError
from ..registry import register
from ..result import SolveResult, Termination
from .. import threads as _threads

log = logging.getLogger(__name__)

ITERATION_LIMITS = _lagrangian.ITERATION_LIMITS
_OPTIONS = {"linear_solver": ("auto", "dense", "schur"), "precision": ("mixed", "double")}


def _solver_options(options) -> dict:
    so = dict(options.solver_options)
    unknown = set(so) - set(_OPTIONS)
    if unknown:
        raise ConfigError(f"unknown lagrangian solver option(s) {sorted(unknown)}; valid: {sorted(_OPTIONS)}")
    out = {}
    for key, allowed in _OPTIONS.items():
        value = so.get(key, allowed[0])
        if value not in allowed:
            raise ConfigError(f"{key} must be one of {', '.join(map(repr, allowed))}, got {value!r}")
        out[key] = value
    return out


@register
class LagrangianMethod:
    """The PNLP by Lagrangian decomposition of the leg capacities."""

    name = "lagrangian"
    models = ("pnlp",)

    @classmethod
    def available(cls):
        return True, "numpy/scipy only"

    def solve(self, instance, model, options, warm_start=None) -> SolveResult:
        if model != "pnlp":
            raise ConfigError(f"method 'lagrangian' solves the 'pnlp' model only, not {model!r}")
        so = _solver_options(options)
        with _blas_threads(1):
            sol = _lagrangian.solve_dual(
                instance, options.tol, dual_method=options.dual_method,
                iteration_limit=options.iteration_limit, time_limit=options.time_limit,
                threads=options.threads or _threads.available(), warm_start=warm_start,
                linear_solver=so["linear_solver"], mixed=so["precision"] == "mixed")
        t2 = time.perf_counter()
        cert = _certify.certify(instance, "pnlp", sol.x, sol.pi, threads=options.threads)
        t3 = time.perf_counter()
        out = sol.outcome
        term = out.termination
        sstatus = _certify.solution_status(term, cert, gap_tol=options.tol)
        # the message states the result's own certificate, the gap field's number; the loop's
        # bounds are named only where they disagree with it about tol
        message = f"{out.message}; certified gap {cert.gap:.3g}"
        if (out.gap <= options.tol) != (cert.gap <= options.tol):
            message += f" (the loop's own bounds gave {out.gap:.3g})"
        if term is Termination.OPTIMAL and sstatus.value != "optimal":
            log.warning("lagrangian: loop gap %.3g but certificate gap %.3g / violation %.3g",
                        out.gap, cert.gap, cert.max_violation_rel)
        from .highs import options_record

        return SolveResult(
            model=model, method=self.name, termination=term, solution_status=sstatus,
            objective=cert.primal_value, bound=cert.dual_value, gap=cert.gap,
            leg_ids=instance.leg_ids, bid_price_array=sol.pi, product_ids=instance.product_ids,
            allocation=sol.x, iterations=out.iterations,
            seconds={"build": sol.seconds_build, "solve": sol.seconds_solve, "certify": t3 - t2},
            solver=f"decomp-lagrangian-{options.dual_method}", solver_version=_version(),
            raw_status=out.raw_status, message=message, certificate=cert, history=out.history,
            options={**options_record(options), "linear_solver": sol.linear_solver,
                     "start": "warm" if warm_start is not None else "fare"})


_CONTROLLER = None


def _blas_threads(n):
    """One BLAS thread for the factorizations: idle OpenBLAS threads spin against the
    product threads, and on small systems their wake-up dominates (generator-sweep draw
    11, 152 legs, solved in 15.5 s with two BLAS threads and 1.8 s with one). The library
    scan is done once (a cached controller: 0.014 ms per limit, against 1.7 ms for a
    fresh scan)."""
    global _CONTROLLER
    import contextlib

    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        return contextlib.nullcontext()
    if _CONTROLLER is None:
        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER.limit(limits=int(n), user_api="blas")


def _version():
    try:
        from importlib.metadata import version

        return version("decomp")
    except Exception:  # noqa: BLE001 - metadata missing in a source checkout
        return None
