"""Solver options: one frozen, validated config for every method.

Per-call changes go through :func:`dataclasses.replace`; a caller's dict is
never mutated. ``solver_options`` passes solver-specific settings through
(Ipopt or HiGHS option names) and is copied on construction.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from types import MappingProxyType
from typing import Any, Mapping

from .errors import ConfigError


@dataclasses.dataclass(frozen=True)
class SolverOptions:
    """Options common to every method.

    tol:            target relative optimality tolerance (certified gap for the
                    Lagrangian method; passed as the solver's tolerance otherwise).
    time_limit:     wall-clock seconds for the solve, or None for no limit.
    iteration_limit: iterations, or None for the method's default.
    threads:        solver threads (HiGHS; for 'lagrangian' the threads its product
                    subproblems are split over from 200,000 products on), or None
                    for the solver's default (all CPUs of the process for
                    'lagrangian'; production runs pass 1 per worker).
    segments:       pieces per product in the piecewise-linear PNLP model.
    dual_method:    Lagrangian dual minimizer: 'newton', 'lbfgsb' or 'subgradient'.
    verbose:        let the solver print its log.
    solver_options: passthrough of solver-specific options.
    """

    tol: float = 1e-9
    time_limit: float | None = None
    iteration_limit: int | None = None
    threads: int | None = None
    segments: int = 16
    dual_method: str = "newton"
    verbose: bool = False
    solver_options: Mapping[str, Any] = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        # Types first: a value of the wrong type (time_limit="10" from a config file) is a ConfigError
        # naming the option, never a TypeError from a comparison further down.
        _number("tol", self.tol)
        _number("time_limit", self.time_limit, optional=True)
        for name in ("iteration_limit", "threads"):
            _whole(name, getattr(self, name), optional=True)
        _whole("segments", self.segments)
        if not isinstance(self.verbose, bool):
            raise ConfigError(f"verbose must be True or False, got {self.verbose!r} ({type(self.verbose).__name__})")
        if not isinstance(self.solver_options, Mapping):
            raise ConfigError(f"solver_options must be a dict of solver option names to values, got "
                              f"{self.solver_options!r} ({type(self.solver_options).__name__})")
        if not (math.isfinite(self.tol) and 0 < self.tol < 1):
            raise ConfigError(f"tol must be a number in (0, 1), got {self.tol!r}")
        if self.time_limit is not None and not (self.time_limit > 0):
            raise ConfigError(f"time_limit must be positive seconds or None, got {self.time_limit!r}")
        if self.iteration_limit is not None and self.iteration_limit < 1:
            raise ConfigError(f"iteration_limit must be a positive integer or None, got {self.iteration_limit!r}")
        if self.threads is not None and self.threads < 1:
            raise ConfigError(f"threads must be a positive integer or None, got {self.threads!r}")
        if self.segments < 1:
            raise ConfigError(f"segments must be a positive integer, got {self.segments!r}")
        if self.dual_method not in ("newton", "lbfgsb", "subgradient"):
            raise ConfigError(f"dual_method must be 'newton', 'lbfgsb' or 'subgradient', got {self.dual_method!r}")
        object.__setattr__(self, "solver_options", MappingProxyType(dict(self.solver_options)))

    def replace(self, **changes) -> "SolverOptions":
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        # not dataclasses.asdict: it deep-copies, and a mappingproxy cannot be copied
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        d["solver_options"] = dict(self.solver_options)
        return d


def _number(name: str, value, optional: bool = False) -> None:
    """A real number (not a bool, not text), or None when ``optional``; ConfigError otherwise."""
    if value is None and optional:
        return
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ConfigError(f"{name} must be a number{' or None' if optional else ''}, got {value!r} "
                          f"({type(value).__name__})")


def _whole(name: str, value, optional: bool = False) -> None:
    """A whole number (3 or 3.0), or None when ``optional``; ConfigError otherwise."""
    _number(name, value, optional)
    if value is not None and not (math.isfinite(value) and int(value) == value):
        raise ConfigError(f"{name} must be a whole number{' or None' if optional else ''}, got {value!r}")


def as_options(options=None, **changes) -> SolverOptions:
    """A :class:`SolverOptions` from None, an instance or a dict, with ``changes`` applied.

    Unknown names raise :class:`ConfigError` listing the valid ones; the
    caller's dict is not changed.
    """
    valid = [f.name for f in dataclasses.fields(SolverOptions)]
    if options is None:
        base = {}
    elif isinstance(options, SolverOptions):
        base = None
    elif isinstance(options, Mapping):
        base = dict(options)
    else:
        raise ConfigError(f"options must be a SolverOptions, a dict or None, got {type(options).__name__}")
    unknown = sorted((set(base or {}) | set(changes)) - set(valid))
    if unknown:
        raise ConfigError(f"unknown option{'s' if len(unknown) > 1 else ''} {', '.join(map(repr, unknown))}; "
                          f"valid options: {', '.join(valid)}")
    if base is None:
        return options.replace(**changes) if changes else options
    return SolverOptions(**{**base, **changes})
