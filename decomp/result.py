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
import math
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

#: Name and version of the one result schema (``decomp solve``, ``decomp run`` tasks, baselines).
SCHEMA = "decomp.result"
SCHEMA_VERSION = 1

SCHEMA_DOC = """decomp.result, version 1: one JSON object.

schema, schema_version   "decomp.result", 1
model, method            e.g. "pnlp", "lagrangian"
termination              why the solver stopped: optimal, iteration_limit, time_limit, infeasible,
                         unbounded, numerical_error, error, unknown
solution_status          how good the answer is: optimal (certified), feasible, infeasible, no_solution
ok                       true when termination and solution_status are both optimal
objective, bound, gap    expected revenue of the allocation, dual bound, certified relative gap
iterations, seconds      iterations; wall seconds by phase (build, solve, certify)
solver, solver_version, raw_status, message    the solver's own words
certificate              max_violation, max_violation_rel, kkt_residual, dual_value, primal_value,
                         gap, min_bid_price
options                  the SolverOptions used
n_legs, n_products       sizes
bid_prices               {leg id: bid price}, fare units per seat, >= 0, in the instance's leg order
allocation               (optional) {product id: allocation}
history                  (optional) per-iteration records of iterative methods
context                  who produced it: instance, instance_path, versions, task, case, ... (free form)
Non-finite numbers are written as the strings "inf", "-inf", "nan".
Tables use the same column names everywhere: leg, bid_price (bid-price files), and
decomp.tables.LEG_COLUMNS / PRODUCT_COLUMNS.
"""


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

    def __repr__(self) -> str:
        def g(v, fmt):
            return "n/a" if v is None else format(v, fmt)

        return (f"SolveResult({self.model} by {self.method}: {self.termination.value}/"
                f"{self.solution_status.value}, objective {g(self.objective, ',.6g')}, gap {g(self.gap, '.2e')}, "
                f"{len(self.leg_ids):,} legs, {len(self.product_ids):,} products, "
                f"iterations {self.iterations}, {sum(self.seconds.values()):.3g} s)")

    def displacement(self, legs) -> float:
        """The displacement cost of an itinerary: the sum of its legs' bid prices.

        ``legs``: leg ids as a sequence or one text separated by spaces; an
        unknown leg raises :class:`~decomp.errors.InstanceError`.
        """
        from .decision import leg_bid_prices

        return float(sum(leg_bid_prices(self.leg_ids, self.bid_price_array, legs)[1]))

    def decide(self, legs, fare):
        """Accept or reject a request for itinerary ``legs`` at ``fare`` under the bid-price rule.

        Returns a :class:`decomp.decision.Decision` (accept when the fare is at
        least the displacement, with each leg's bid price and the margin), carrying
        this result's status: from a result that is not certified optimal it holds a warning.
        """
        from .decision import decide

        return decide(self.leg_ids, self.bid_price_array, legs, fare,
                      source_status=f"{self.termination.value}/{self.solution_status.value}", source_ok=self.ok)

    def to_json_dict(self, include_history: bool = True, include_allocation: bool = False,
                     context: Mapping[str, Any] | None = None) -> dict:
        """The result as a plain dict in the one output schema (see :data:`SCHEMA_DOC`).

        ``include_allocation`` adds ``allocation`` by product id (it can be
        large; :meth:`save` always includes it, since the leg and product tables
        need it); ``context`` (instance name, versions, task key, ...) is kept as is.
        """
        def num(v):
            if v is None:
                return None
            v = float(v)
            return v if math.isfinite(v) else str(v)

        out = {
            "schema": SCHEMA,
            "schema_version": SCHEMA_VERSION,
            "model": self.model,
            "method": self.method,
            "termination": self.termination.value,
            "solution_status": self.solution_status.value,
            "ok": self.ok,
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
            "options": {k: (v if isinstance(v, (int, float, str, bool, type(None))) else
                            dict(v) if isinstance(v, Mapping) else str(v))
                        for k, v in self.options.items()},
            "n_legs": int(len(self.leg_ids)),
            "n_products": int(len(self.product_ids)),
            "bid_prices": {k: num(v) for k, v in self.bid_prices.items()},
        }
        if include_allocation and self.allocation is not None:
            out["allocation"] = {str(k): num(v) for k, v in zip(self.product_ids.tolist(), self.allocation.tolist())}
        if include_history:
            out["history"] = [dataclasses.asdict(h) for h in self.history]
        out["context"] = dict(context or {})
        return out

    def save(self, path, context: Mapping[str, Any] | None = None) -> "pathlib.Path":
        """Write the result to ``path`` (JSON in the one output schema, atomically) and return the path.

        Everything the tables and decisions need comes back with :meth:`load` or
        :func:`decomp.read_result`: bid prices, the allocation (which
        :meth:`to_json_dict` leaves out unless asked), certificate and history.
        ``context`` (free form, e.g. where the instance came from) is kept under ``context``.
        """
        import pathlib

        from .atomic import write_json

        path = pathlib.Path(path)
        write_json(path, self.to_json_dict(include_allocation=True, context=context))
        return path

    @classmethod
    def load(cls, path) -> "SolveResult":
        """A result saved by :meth:`save` (or any result file decomp writes); see :meth:`from_json`."""
        return cls.from_json(path)

    @classmethod
    def from_json(cls, source) -> "SolveResult":
        """A result back from the output schema: a dict, a JSON text, or a path to a result file.

        Also reads the layouts written before the schema had a version (``decomp
        solve``'s, a ``decomp run`` task's and a baseline case's result.json).
        ``product_ids`` and ``allocation`` come back only when the file holds the
        allocation; ``history`` as plain dicts turned into :class:`IterationRecord`.
        Raises :class:`~decomp.errors.InstanceError` naming the file and field.
        """
        data, where = _load_json(source)
        return _from_dict(normalize(data, where), where)


# -- reading results back ------------------------------------------------------------

def _load_json(source):
    """(dict, where) from a dict, a JSON text or a path (a folder: its result.json)."""
    import pathlib

    from . import jsonfile
    from .errors import InstanceError

    if isinstance(source, Mapping):
        return dict(source), None
    if isinstance(source, str) and source.lstrip().startswith("{"):
        return jsonfile.loads(source), None
    path = pathlib.Path(source)
    if path.is_dir():
        path = path / "result.json"
    data = jsonfile.read(path, missing="result file not found")
    if not isinstance(data, dict):
        raise InstanceError("a result file holds one JSON object", file=path)
    return data, path


def normalize(data: dict, where=None) -> dict:
    """Any result layout decomp has written, as a dict in the current schema.

    ``where``: the file it came from (a baseline case keeps its bid prices in a
    table beside it). Layouts without ``schema_version``: ``decomp solve``'s
    (``status`` = the stopping reason), a ``decomp run`` task's (the result under
    ``result``, the task under ``task`` and ``record``) and a baseline case's
    (``termination``, bid prices in ``bid_prices_file``).
    """
    from .errors import InstanceError

    version = data.get("schema_version")
    if version is not None:
        if data.get("schema") != SCHEMA or version != SCHEMA_VERSION:
            raise InstanceError(f"unknown result schema {data.get('schema')!r} version {version!r}; "
                                f"this decomp reads {SCHEMA!r} version {SCHEMA_VERSION}", file=where,
                                column="schema_version", value=version)
        return dict(data)
    out = dict(data)
    context = {}
    if isinstance(data.get("result"), dict) and "task" in data:          # a decomp run task
        out = dict(data["result"])
        context = {k: data[k] for k in ("task", "fingerprint", "record") if k in data}
    elif "case" in data and "bid_prices_file" in data:                   # a baseline case
        if where is None:
            raise InstanceError("a baseline case result needs its file path (its bid prices are in "
                                f"{data['bid_prices_file']})", column="bid_prices_file")
        name = data["bid_prices_file"]
        if not isinstance(name, str) or not name or "/" in name or "\\" in name or name in (".", ".."):
            raise InstanceError("bid_prices_file must name a file beside result.json (a plain file name)",
                                file=where, column="bid_prices_file", value=str(name)[:200])
        table = where.parent / name
        out["bid_prices"] = read_bid_price_table(table)
        context = {k: data[k] for k in ("case", "instance", "instance_fingerprint", "wall_seconds") if k in data}
    for k in ("instance", "instance_path", "versions"):
        if k in out and k not in context:
            context[k] = out.pop(k)
    if "termination" not in out and "status" in out:
        out["termination"] = out.pop("status")
    for field in ("model", "method", "termination", "solution_status"):
        if field not in out:
            raise InstanceError(f"not a decomp result: no '{field}'", file=where, column=field)
    if not isinstance(out.get("bid_prices"), dict):
        raise InstanceError("no 'bid_prices' object in result file", file=where, column="bid_prices")
    out.update(schema=SCHEMA, schema_version=SCHEMA_VERSION, context=context)
    return out


def _number(v, where, column):
    from .errors import InstanceError

    if v is None:
        return None
    if isinstance(v, bool):
        raise InstanceError("expected a number", file=where, column=column, value=v)
    try:
        return float(v)
    except (TypeError, ValueError) as exc:
        raise InstanceError("expected a number", file=where, column=column, value=v) from exc


def _from_dict(d: dict, where) -> "SolveResult":
    from .errors import InstanceError

    bp = d["bid_prices"]
    legs = np.array([str(k) for k in bp], dtype=object)
    prices = np.array([_number(v, where, f"bid_prices.{k}") for k, v in bp.items()], dtype=np.float64)
    alloc = d.get("allocation")
    products, x = np.array([], dtype=object), None
    if isinstance(alloc, dict):
        products = np.array([str(k) for k in alloc], dtype=object)
        x = np.array([_number(v, where, f"allocation.{k}") for k, v in alloc.items()], dtype=np.float64)
    cert = d.get("certificate")
    try:
        certificate = None if cert is None else Certificate(**{
            f.name: _number(cert.get(f.name), where, f"certificate.{f.name}")
            for f in dataclasses.fields(Certificate)})
        history = tuple(IterationRecord(**h) for h in d.get("history") or ())
        return SolveResult(
            model=str(d["model"]), method=str(d["method"]), termination=d["termination"],
            solution_status=d["solution_status"], objective=_number(d.get("objective"), where, "objective"),
            bound=_number(d.get("bound"), where, "bound"), gap=_number(d.get("gap"), where, "gap"),
            leg_ids=legs, bid_price_array=prices, product_ids=products, allocation=x,
            iterations=d.get("iterations"), seconds=d.get("seconds") or {}, solver=str(d.get("solver")),
            solver_version=d.get("solver_version"), raw_status=d.get("raw_status"), message=d.get("message"),
            certificate=certificate, history=history, options=d.get("options") or {})
    except (TypeError, ValueError, AttributeError) as exc:
        raise InstanceError(f"not a readable decomp result ({exc})", file=where) from exc


def read_bid_price_table(path) -> dict:
    """Bid prices by leg id from a table (CSV or Parquet by suffix) with columns leg, bid_price.

    ``leg_id`` is read as ``leg`` (the name earlier versions wrote). A leg listed twice is refused
    (which row is meant is ambiguous: a table of ``decomp tables``, one row per leg, period and
    seats left, is not a bid-price vector).
    """
    import pathlib

    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    from .errors import InstanceError

    path = pathlib.Path(path)
    try:
        if path.suffix.lower() == ".parquet":
            with pq.ParquetFile(path) as parquet:   # pq.read_table would import pyarrow.dataset
                table = parquet.read()
        else:
            table = pcsv.read_csv(path, convert_options=pcsv.ConvertOptions(
                column_types={"leg": pa.string(), "leg_id": pa.string()}))
    except FileNotFoundError as exc:
        raise InstanceError("bid-price file not found", file=path) from exc
    except (pa.ArrowException, OSError) as exc:
        raise InstanceError(f"cannot read the bid-price table ({exc})", file=path) from exc
    leg_col = "leg" if "leg" in table.column_names else "leg_id" if "leg_id" in table.column_names else None
    if leg_col is None or "bid_price" not in table.column_names:
        raise InstanceError("a bid-price table needs the columns leg, bid_price", file=path,
                            column="leg" if leg_col is None else "bid_price")
    try:
        legs = pc.cast(table.column(leg_col), pa.string()).to_pylist()
        prices = pc.cast(table.column("bid_price"), pa.float64()).to_pylist()
    except pa.ArrowException as exc:
        raise InstanceError(f"not a number ({exc})", file=path, column="bid_price") from exc
    out: dict = {}
    for i, (leg, v) in enumerate(zip(legs, prices), start=1):
        if leg is None or v is None:
            raise InstanceError("missing value", file=path, row=i, column=leg_col if leg is None else "bid_price")
        if leg in out:
            first = legs.index(leg) + 1
            hint = (" (this is a table of 'decomp tables', one row per leg, period and seats left: give a "
                    "result of 'decomp solve' instead)" if "period" in table.column_names else "")
            raise InstanceError(f"leg '{leg}' is listed twice (first in row {first}): which bid price is meant is "
                                f"ambiguous{hint}", file=path, row=i, column=leg_col, value=leg)
        out[leg] = v
    return out


@dataclasses.dataclass(frozen=True)
class BidPriceSource:
    """Bid prices read back from a file, with the status of the solve that produced them.

    ``termination`` / ``solution_status`` are None when the file carries no status (a bid-price
    table); ``ok`` is then None too (unknown), else whether both are optimal.
    """

    path: str
    prices: Mapping[str, float]
    termination: str | None = None
    solution_status: str | None = None

    @property
    def ok(self) -> bool | None:
        if self.termination is None:
            return None
        return self.termination == "optimal" and self.solution_status == "optimal"

    @property
    def status(self) -> str:
        return "unknown" if self.termination is None else f"{self.termination}/{self.solution_status}"


def read_bid_price_source(path) -> BidPriceSource:
    """Bid prices by leg id, and the solve's status, from anything decomp writes them to.

    A result JSON (``decomp solve``, a ``decomp run`` task, a baseline case, any
    schema version), a folder holding one (a run task's or a baseline case's
    folder), or a bid-price table (``.csv`` / ``.parquet`` with columns leg,
    bid_price; no status). A leg listed twice is refused (:func:`read_bid_price_table`;
    a JSON key twice, :mod:`decomp.jsonfile`).
    """
    import pathlib

    p = pathlib.Path(path)
    if p.suffix.lower() in (".csv", ".parquet"):
        return BidPriceSource(str(p), read_bid_price_table(p))
    data, where = _load_json(p)
    d = normalize(data, where)
    prices = {str(leg): _number(v, where, f"bid_prices.{leg}") for leg, v in d["bid_prices"].items()}
    return BidPriceSource(str(where or p), prices, str(d["termination"]), str(d["solution_status"]))


def read_bid_prices(path) -> dict:
    """Bid prices by leg id from anything decomp writes them to (see :func:`read_bid_price_source`)."""
    return dict(read_bid_price_source(path).prices)
