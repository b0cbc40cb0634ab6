"""decomp: network bid prices by DLP, PNLP and Lagrangian decomposition.

    >>> from decomp import read_instance, solve
    >>> result = solve(read_instance("instances/p1k"), model="pnlp", method="lagrangian")
    >>> result.bid_prices            # {leg id: bid price}
"""

from .errors import DecompError, InstanceError, SolverUnavailableError, UnknownMethodError
from .instance import Instance
from .options import SolverOptions
from .registry import get_method, method_names, pairs, solve
from .result import Certificate, SolutionStatus, SolveResult, Termination

__all__ = [
    "Certificate", "DecompError", "Instance", "InstanceError", "SolutionStatus", "SolveResult",
    "SolverOptions", "SolverUnavailableError", "Termination", "UnknownMethodError",
    "get_method", "method_names", "pairs", "read_instance", "solve", "write_instance",
]


def read_instance(path, **kw):
    """Read an instance directory (CSV or Parquet); see :mod:`decomp.io`."""
    from .io import read_instance as _read

    return _read(path, **kw)


def write_instance(instance, path, **kw):
    """Write an instance directory atomically; see :mod:`decomp.io`."""
    from .io import write_instance as _write

    return _write(instance, path, **kw)
