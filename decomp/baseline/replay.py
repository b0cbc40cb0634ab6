"""Which recorded options a baseline check may replay.

A baseline folder is data, not instructions. Its manifest detects damage, not
malice (see :mod:`.folder`), so whoever can edit the folder could otherwise
choose the options ``decomp baseline check`` passes to Ipopt and HiGHS -- and
some of those write files: Ipopt's ``output_file`` truncates any file the user
can write, HiGHS' ``log_file`` creates one. So a recorded case is replayed only
with the :class:`~decomp.options.SolverOptions` fields (each validated there)
and with solver-specific options from the allow-list below, whose values are
numbers, booleans or short keywords; none of them names a file. Anything else
is refused, naming the option (``folder.check_recorded_options`` turns it into a
:class:`~.folder.BaselineError` naming the file: exit 2).
"""

from __future__ import annotations

import math
import re
from typing import Mapping

from ..errors import ConfigError

#: Solver-specific options that may be replayed: none of them reads or writes a file.
REPLAYABLE = frozenset({
    # Ipopt: termination, barrier, scaling, linear solver, output level (printed, never written)
    "tol", "max_iter", "max_wall_time", "max_cpu_time", "acceptable_tol", "acceptable_iter",
    "constr_viol_tol", "dual_inf_tol", "compl_inf_tol", "bound_relax_factor", "honor_original_bounds",
    "mu_strategy", "mu_init", "mu_oracle", "nlp_scaling_method", "obj_scaling_factor",
    "hessian_approximation", "limited_memory_max_history", "linear_solver", "print_level", "sb",
    "bound_push", "bound_frac", "warm_start_init_point", "warm_start_bound_push",
    "warm_start_mult_bound_push", "fixed_variable_treatment",
    # HiGHS: algorithm, limits, tolerances, console output
    "presolve", "solver", "parallel", "threads", "time_limit", "simplex_strategy",
    "simplex_iteration_limit", "ipm_iteration_limit", "primal_feasibility_tolerance",
    "dual_feasibility_tolerance", "ipm_optimality_tolerance", "run_crossover", "random_seed",
    "output_flag", "log_to_console",
    # decomp's Lagrangian method
    "start", "smoothing", "damping", "bid_tol", "precision",
})

_KEYWORD = re.compile(r"[A-Za-z0-9_.+-]{1,64}")


def check_replayable(options: Mapping) -> None:
    """Raise ConfigError unless every solver-specific option is on the allow-list with a plain value."""
    so = options.get("solver_options") or {}
    if not isinstance(so, Mapping):
        raise ConfigError("solver_options must be an object of option names and values")
    refused = sorted(str(k)[:80] for k in so if k not in REPLAYABLE)
    if refused:
        raise ConfigError(f"solver option(s) {refused} may not be replayed from a baseline (only options "
                          f"that name no file are: see decomp.baseline.replay.REPLAYABLE)")
    for k, v in so.items():
        plain = (isinstance(v, bool) or (isinstance(v, (int, float)) and math.isfinite(v))
                 or (isinstance(v, str) and _KEYWORD.fullmatch(v)))
        if not plain:
            raise ConfigError(f"solver option {k!r} has value {str(v)[:80]!r}: only numbers, booleans and "
                              f"short keywords are replayed from a baseline")
