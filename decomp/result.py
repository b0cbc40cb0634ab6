"""The one answer type every method returns, and the statuses on it.

Two levels of status are kept apart. A call that cannot run at all (missing
library, bad input) raises a typed exception. A call that ran returns a
:class:`SolveResult` whose ``termination`` says why the solver stopped and
whose ``solution_status`` says how good the returned point is; a non-optimal
outcome is never returned as if it were an answer.
"""

from __future__ import annotations

import dataclasses
import enum
import json
import math
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np


class Termination(str, enum.Enum):
    """Why the solver stopped."""

    OPTIMAL = "optimal"                    # converged to the requested tolerance
    ITERATION_LIMIT = "iteration_limit"
    TIME_LIMIT = "time_limit"
    INFEASIBLE = "infeasible"
    UNBOUNDED = "unbounded"
    NUMERICAL_ERROR = "numerical_error"    # solver reported numerical trouble
    ERROR = "error"                        # solver ran and failed otherwise
    UNKNOWN = "unknown"                    # a solver code we have no mapping for


class SolutionStatus(str, enum.Enum):
    """How good the returned allocation and bid prices are."""

    OPTIMAL = "optimal"          # certified to tolerance
    FEASIBLE = "feasible"        # primal feasible, not (yet) certified optimal
    INFEASIBLE = "infeasible"    # the returned point violates capacities
    NO_SOLUTION = "no_solution"  # nothing usable came back


@dataclasses.dataclass(frozen=True)
class Certificate:
    """What the answer is worth, computed independently of the solver.

    ``max_violation`` is the largest capacity excess max_i (A x - c)_i in seats
    (0 when feasible); ``max_violation_rel`` divides by max(1, c_i).
    ``kkt_residual`` (PNLP) is the largest violation of the per-product
    optimality condition f_j S_j'(x_j) = a_j (a_j the sum of the product's bid
    prices), complementary with x_j, relative to the fare; for the DLP it is
    the largest reduced-cost violation relative to the fare.
    ``dual_value`` is the Lagrangian (PNLP) or LP (DLP) dual objective at the
    returned bid prices, an upper bound on the optimum; ``primal_value`` is the
    objective of the returned allocation; ``gap`` = (dual - primal) / max(1,
    |primal|), which certifies the allocation when it is feasible.
    """

    max_violation: float
    max_violation_rel: float
    kkt_residual: float | None
    dual_value: float | None
    primal_value: float
    gap: float | None
    min_bid_price: float

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def _ro(a) -> np.ndarray | None:
    if a is None:
        return None
    out = np.array(a, dtype=np.float64, copy=True)
    out.setflags(write=False)
    return out


@dataclasses.dataclass(frozen=True)
class IterationRecord:
    """One iteration of an iterative method (kept on the result's history)."""

    iteration: int
    dual_value: float
    primal_value: float | None
    gap: float | None
    step: float
    pi_norm: float
    seconds: float


@dataclasses.dataclass(frozen=True, eq=False)
class SolveResult:
    """A method's answer. Every field is always present (None when not known).

    Sign convention: ``bid_price_array[i]`` is the shadow price of one seat on
    leg ``leg_ids[i]`` in fare units, >= 0; a product is worth selling when its
    fare is at least the sum of its legs' bid prices. ``objective`` is expected
    revenue (PNLP, with demand floored at zero) or revenue (DLP) of the
    returned allocation; ``bound`` is the dual value at the returned bid prices.
    ``seconds`` holds wall time by phase: ``build``, ``solve``, ``certify``.
    """

    model: str
    method: str
    termination: Termination
    solution_status: SolutionStatus
    objective: float | None
    bound: float | None
    gap: float | None
    leg_ids: np.ndarray
    bid_price_array: np.ndarray | None
    product_ids: np.ndarray
    allocation: np.ndarray | None
    iterations: int | None
    seconds: Mapping[str, float]
    solver: str
    solver_version: str | None
    raw_status: str | None
    message: str | None
    certificate: Certificate | None = None
    history: tuple = ()
    options: Mapping[str, Any] = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "bid_price_array", _ro(self.bid_price_array))
        object.__setattr__(self, "allocation", _ro(self.allocation))
        object.__setattr__(self, "seconds", MappingProxyType(dict(self.seconds)))
        object.__setattr__(self, "options", MappingProxyType(dict(self.options)))
        object.__setattr__(self, "history", tuple(self.history))
        object.__setattr__(self, "termination", Termination(self.termination))
        object.__setattr__(self, "solution_status", SolutionStatus(self.solution_status))

    @property
    def ok(self) -> bool:
        """True when the solver converged and the answer is certified optimal."""
        return self.termination is Termination.OPTIMAL and self.solution_status is SolutionStatus.OPTIMAL

    @property
    def bid_prices(self) -> dict:
        """Bid prices by leg id (see the class docstring for the sign convention)."""
        if self.bid_price_array is None:
            return {}
        return dict(zip(self.leg_ids.tolist(), self.bid_price_array.tolist()))

    def to_json_dict(self, include_history: bool = True) -> dict:
        """A plain dict for JSON output (allocation excluded: it can be large)."""
        def num(v):
            if v is None:
                return None
            v = float(v)
            return v if math.isfinite(v) else str(v)

        out = {
            "model": self.model,
            "method": self.method,
            "status": self.termination.value,
            "solution_status": self.solution_status.value,
            "objective": num(self.objective),
            "bound": num(self.bound),
            "gap": num(self.gap),
            "iterations": self.iterations,
            "seconds": {k: float(v) for k, v in self.seconds.items()},
            "solver": self.solver,
            "solver_version": self.solver_version,
            "raw_status": self.raw_status,
            "message": self.message,
            "certificate": None if self.certificate is None else {
                k: num(v) for k, v in self.certificate.to_dict().items()},
            "options": {k: (v if isinstance(v, (int, float, str, bool, type(None))) else str(v))
                        for k, v in self.options.items()},
            "bid_prices": {k: num(v) for k, v in self.bid_prices.items()},
            "n_products": int(len(self.product_ids)),
            "n_legs": int(len(self.leg_ids)),
        }
        if include_history:
            out["history"] = [dataclasses.asdict(h) for h in self.history]
        return out


def read_bid_prices(path) -> dict:
    """Bid prices by leg id from a result JSON written by ``decomp solve``."""
    from .errors import InstanceError

    try:
        with open(path) as fh:
            data = json.load(fh)
    except FileNotFoundError as exc:
        raise InstanceError("result file not found", file=path) from exc
    except json.JSONDecodeError as exc:
        raise InstanceError(f"not valid JSON ({exc.msg} at line {exc.lineno})", file=path) from exc
    bp = data.get("bid_prices") if isinstance(data, dict) else None
    if not isinstance(bp, dict):
        raise InstanceError("no 'bid_prices' object in result file", file=path, column="bid_prices")
    out = {}
    for leg, v in bp.items():
        try:
            out[str(leg)] = float(v)
        except (TypeError, ValueError) as exc:
            raise InstanceError("bid price is not a number", file=path, column=f"bid_prices.{leg}", value=v) from exc
    return out
