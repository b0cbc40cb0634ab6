"""What a production task does when its method ends non-optimal: solve again with a robust method.

``decomp run --fallback METHOD`` (default ``auto``): when the primary method
ends at an iteration or time limit, in numerical trouble or uncertified, the
task is solved again from a cold start by the fallback, and the answer that is
certified optimal (else the one with the smaller certified gap) is published.
The task record says which method produced the published bid prices and what
each attempt ended with; the summary counts the tasks that needed it.

``auto`` picks, per task:

* DLP and PWL: ``highs`` (the LP by HiGHS' simplex/IPM, solved every DLP of the
  issue-12 family); the same for the sales-based LP of customer choice (``sblp``);
* PNLP with every product normal: ``ipopt`` (an interior-point method on the
  primal, solved all 206 normal-demand instances of that family);
* PNLP with gamma, Poisson or negative-binomial products (which ``ipopt``
  does not model): ``lagrangian:lbfgsb``, the Lagrangian dual minimized by
  L-BFGS-B on pi >= 0 (Byrd, Lu, Nocedal & Zhu 1995), a bound-constrained
  quasi-Newton method that needs no Newton system and no positivity of the
  bid prices: a second, different algorithm, not a proven one. A task that
  neither certifies ends ``not_optimal`` with its status and the smaller-gap
  answer, as always.

``none`` turns the fallback off. A fallback equal to the primary is skipped.
The fallback runs with the task's tolerance and time limit, without the
primary's iteration limit and solver-specific options (they belong to the
primary method).
"""

from __future__ import annotations

import dataclasses
import time

from ..errors import ConfigError, DecompError

AUTO, NONE = "auto", "none"


@dataclasses.dataclass(frozen=True)
class Fallback:
    method: str
    dual_method: str | None = None

    @property
    def label(self) -> str:
        return self.method if self.dual_method is None else f"{self.method}:{self.dual_method}"


def parse(text: str | None) -> str | Fallback | None:
    """``auto`` -> AUTO; ``none`` (or None) -> None; ``METHOD[:DUAL]`` -> Fallback."""
    if text is None or str(text).strip().lower() == NONE:
        return None
    text = str(text).strip()
    if text.lower() == AUTO:
        return AUTO
    method, _, dual = text.partition(":")
    if not method or (dual and dual not in ("newton", "lbfgsb", "subgradient")):
        raise ConfigError(f"--fallback {text!r}: expected auto, none, METHOD or lagrangian:DUAL "
                          f"(DUAL one of newton, lbfgsb, subgradient)")
    return Fallback(method, dual or None)


def choose(model: str, setting, instance) -> Fallback | None:
    """The fallback for this task's instance (None: no fallback)."""
    if setting is None or isinstance(setting, Fallback):
        return setting
    if model in ("dlp", "pwl", "sblp"):         # sblp: the sales LP of customer choice (decomp.choice)
        return Fallback("highs")
    if bool((instance.distributions() == "normal").all()):
        return Fallback("ipopt")
    return Fallback("lagrangian", "lbfgsb")


def _attempt(label, result=None, error=None, seconds=None) -> dict:
    if result is None:
        return {"method": label, "task_status": "failed", "error": error, "seconds": seconds}
    gap = result.gap
    return {"method": label, "task_status": "ok" if result.ok else "not_optimal",
            "termination": result.termination.value, "solution_status": result.solution_status.value,
            "gap": None if gap is None else float(gap), "iterations": result.iterations,
            "message": None if result.ok else (result.message or result.termination.value),
            "seconds": seconds}


def _gap(result) -> float:
    g = result.gap
    return float("inf") if g is None or g != g else float(g)


def solve_with_fallback(instance, model, method, options, warm_start, setting, solve):
    """(published result, its method label, attempts) -- ``solve`` is :func:`decomp.registry.solve`."""
    t0 = time.perf_counter()
    primary = solve(instance, model=model, method=method, options=options, warm_start=warm_start)
    label = method if options.dual_method == "newton" or method != "lagrangian" else f"{method}:{options.dual_method}"
    attempts = [_attempt(label, primary, seconds=time.perf_counter() - t0)]
    if primary.ok:
        return primary, label, attempts
    fb = choose(model, setting, instance)
    if fb is None or fb.label == label or (fb.method == method and fb.dual_method is None):
        return primary, label, attempts
    fb_options = options.replace(iteration_limit=None, solver_options={},
                                 dual_method=fb.dual_method or "newton")
    t1 = time.perf_counter()
    try:
        second = solve(instance, model=model, method=fb.method, options=fb_options)
    except DecompError as exc:          # e.g. the fallback is not installed here: keep the primary's answer
        attempts.append(_attempt(fb.label, error=f"{type(exc).__name__}: {exc}", seconds=time.perf_counter() - t1))
        return primary, label, attempts
    attempts.append(_attempt(fb.label, second, seconds=time.perf_counter() - t1))
    if second.ok or _gap(second) < _gap(primary):
        return second, fb.label, attempts
    return primary, label, attempts
