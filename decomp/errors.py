"""Typed exceptions. Messages say what went wrong and what to do."""

from __future__ import annotations


class DecompError(Exception):
    """Base class of every error decomp raises on purpose."""


class InstanceError(DecompError, ValueError):
    """An instance file is missing, malformed or inconsistent.

    Carries the file, the 1-based data row (header excluded), the column, the
    offending value and the reason, so a person can find and fix it.
    """

    def __init__(self, reason: str, *, file=None, row=None, column=None, value=None):
        self.reason = reason
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        self.value = value
        parts = []
        if self.file is not None:
            parts.append(self.file)
        if row is not None:
            parts.append(f"row {row}")
        if column is not None:
            parts.append(f"column '{column}'")
        where = ", ".join(parts)
        shown = "" if value is None else f" (value {value!r})"
        super().__init__(f"{where}: {reason}{shown}" if where else f"{reason}{shown}")


class UnknownMethodError(DecompError, ValueError):
    """A method name or a model/method pair that the registry does not know."""


class SolverUnavailableError(DecompError, RuntimeError):
    """A solver library or interface is missing; the message says how to install it."""


class ConfigError(DecompError, ValueError):
    """An option value outside its domain."""
