"""Typed exceptions. Messages say what went wrong and what to do."""

from __future__ import annotations


class DecompError(Exception):
    """Base class of every error decomp raises on purpose."""


class InstanceError(DecompError, ValueError):
    """An instance file is missing, malformed or inconsistent.

    Carries the file, the 1-based data row (header excluded), the column, the
    offending value and the reason, so a person can find and fix it.
    """

    #: Longest value echoed in a message (a 10 MB bad line must not become a 10 MB message).
    VALUE_CHARS = 200

    def __init__(self, reason: str, *, file=None, row=None, column=None, value=None):
        reason = str(reason)
        if len(reason) > 5 * self.VALUE_CHARS:   # a reason quoting a value (an unknown leg id, a parser's line)
            reason = reason[:5 * self.VALUE_CHARS] + f"... ({len(reason)} characters)"
        self.reason = reason
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        if isinstance(value, (str, bytes)) and len(value) > self.VALUE_CHARS:
            value = value[:self.VALUE_CHARS] + (f"... ({len(value)} characters)" if isinstance(value, str)
                                                else f"... ({len(value)} bytes)".encode())
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
