"""What every direct method does after its solver returns: certify, rate, assemble the result.

One place for the rules that all methods share: the certificate is computed
from the instance (:func:`decomp.certify.certify`), the solution status from
the termination and the certificate by one gap rule (:func:`decomp.certify.solution_status`:
certified gap within ``SolverOptions.tol``), an answer without bid prices is never
rated optimal (its bound would not be the solver's), and ``bound``/``gap`` are
left None when there are no bid prices to evaluate the dual at.
"""

from __future__ import annotations

import importlib
import logging
import time

import numpy as np

from .. import certify as _certify
from ..errors import SolverUnavailableError
from ..result import SolutionStatus, SolveResult, Termination

log = logging.getLogger(__name__)


def certified_result(instance, model: str, method: str, options, *, termination, x, pi, seconds,
                     iterations, solver: str, solver_version, raw_status, message,
                     history=(), extra_options=None) -> SolveResult:
    """The :class:`SolveResult` of allocation ``x`` and bid prices ``pi`` (either may be None).

    ``seconds``: the method's phases before the certificate (``build``, ``solve``); the
    certificate's own time is measured here. ``message``: the method's words, or a function of
    the certificate (None without an allocation) returning them. ``extra_options``: a mapping
    added to the recorded options (e.g. the Ipopt option values used).
    """
    t0 = time.perf_counter()
    cert = None
    if x is not None:
        cert = _certify.certify(instance, model, x, np.zeros(instance.n_legs) if pi is None else pi,
                                segments=options.segments, threads=options.threads)
    seconds = {**seconds, "certify": time.perf_counter() - t0}
    status = _certify.solution_status(termination, cert, options.tol, have_solution=x is not None)
    if pi is None and status is SolutionStatus.OPTIMAL:
        status = SolutionStatus.FEASIBLE          # no duals: the bound is not the solver's
    elif Termination(termination) is Termination.OPTIMAL and cert is not None and status is not SolutionStatus.OPTIMAL:
        log.warning("%s: the solver stopped as optimal, but its certificate shows gap %.3g and capacity "
                    "violation %.3g: reported %s", method, cert.gap, cert.max_violation_rel, status.value)
    dual_known = cert is not None and pi is not None
    return SolveResult(
        model=model, method=method, termination=termination, solution_status=status,
        objective=None if cert is None else cert.primal_value,
        bound=cert.dual_value if dual_known else None,
        gap=cert.gap if dual_known else None,
        leg_ids=instance.leg_ids, bid_price_array=pi, product_ids=instance.product_ids,
        allocation=x, iterations=iterations, seconds=seconds,
        solver=solver, solver_version=solver_version, raw_status=raw_status,
        message=message(cert) if callable(message) else message, certificate=cert, history=history,
        options={**options.to_dict(), **dict(extra_options or {})})


def map_status(table, code, what: str):
    """``table[name]`` for a solver status given as an enum member or its name; an
    unknown name maps to ``Termination.UNKNOWN`` with a warning naming ``what``."""
    name = getattr(code, "name", str(code))
    if name not in table:
        log.warning("%s %r has no mapping; reported as unknown", what, name)
        return Termination.UNKNOWN
    return table[name]


def import_available(module: str, install: str):
    """``available()`` of a method that needs only ``module``: (ok, reason), no side effects."""
    try:
        importlib.import_module(module)
    except ImportError as exc:
        return False, f"{module} is not installed ({exc}); {install}"
    return True, ""


def import_solver(module: str, install: str):
    """The solver module, or SolverUnavailableError saying how to install it."""
    try:
        return importlib.import_module(module)
    except ImportError as exc:
        raise SolverUnavailableError(f"{module} is not installed; {install}") from exc
