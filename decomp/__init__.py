"""decomp: network bid prices by DLP, PNLP and Lagrangian decomposition.

    >>> import decomp
    >>> result = decomp.solve("instances/p1k", model="pnlp", method="lagrangian", tol=1e-6)
    >>> result.bid_prices                       # {leg id: bid price}
    >>> result.decide("L1 L2", fare=250)        # accept or reject, with the breakdown
    >>> decomp.leg_table(instance, result)      # pandas DataFrames joined to the network
"""

from importlib import metadata as _metadata

from .errors import DecompError, InstanceError, SolverUnavailableError, UnknownMethodError
from .instance import Instance
from .options import SolverOptions
from .registry import get_method, method_names, pairs, solve
from .result import SCHEMA_VERSION, Certificate, SolutionStatus, SolveResult, Termination

try:
    __version__ = _metadata.version("decomp")
except _metadata.PackageNotFoundError:      # running from a checkout that is not installed
    __version__ = "0+unknown"

__all__ = [
    "Certificate", "DecompError", "Instance", "InstanceError", "SolutionStatus", "SolveResult",
    "SolverOptions", "SolverUnavailableError", "Termination", "UnknownMethodError",
    "SCHEMA_VERSION", "__version__", "check_instance", "get_method", "leg_table", "method_names", "pairs",
    "product_table", "read_instance", "read_result", "solve", "write_instance",
]


def read_instance(path, **kw):
    """Read an instance directory (CSV or Parquet); see :mod:`decomp.io`."""
    from .io import read_instance as _read

    return _read(path, **kw)


def write_instance(instance, path, **kw):
    """Write an instance directory atomically; see :mod:`decomp.io`."""
    from .io import write_instance as _write

    return _write(instance, path, **kw)


def check_instance(instance) -> None:
    """Run every check of :func:`read_instance` on an in-memory instance; raise InstanceError."""
    from .validation import check_instance as _check

    _check(instance)


def read_result(path) -> SolveResult:
    """A result back from a result JSON (any layout decomp writes); see :meth:`SolveResult.from_json`."""
    return SolveResult.from_json(path)


def leg_table(instance, result):
    """One row per leg (pandas DataFrame); see :mod:`decomp.tables`."""
    from .tables import leg_table as _legs

    return _legs(instance, result)


def product_table(instance, result):
    """One row per product (pandas DataFrame); see :mod:`decomp.tables`."""
    from .tables import product_table as _products

    return _products(instance, result)
