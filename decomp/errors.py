"""Typed exceptions. Messages say what went wrong and what to do."""

from __future__ import annotations


class DecompError(Exception):
    """Base class of every error decomp raises on purpose."""


def printable(text: str) -> str:
    """``text`` with every non-printable character (controls, line separators, bidirectional
    overrides) written as its escape, so that no input can drive the terminal a message goes to."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)


class InstanceError(DecompError, ValueError):
    """An instance file is missing, malformed or inconsistent.

    Carries the file, the 1-based data row (header excluded), the column, the
    offending value and the reason, so a person can find and fix it.
    """

    #: Longest value echoed in a message (a 10 MB bad line must not become a 10 MB message).
    VALUE_CHARS = 200

    def __init__(self, reason: str, *, file=None, row=None, column=None, value=None):
        reason = printable(str(reason))
        if len(reason) > 5 * self.VALUE_CHARS:   # a reason quoting a value (an unknown leg id, a parser's line)
            reason = reason[:5 * self.VALUE_CHARS] + f"... ({len(reason)} characters)"
        self.reason = reason
        self.file = None if file is None else printable(str(file))
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
            parts.append(f"column '{printable(str(column))}'")
        where = ", ".join(parts)
        shown = "" if value is None else f" (value {value!r})"
        super().__init__(f"{where}: {reason}{shown}" if where else f"{reason}{shown}")


class UnknownMethodError(DecompError, ValueError):
    """A method name or a model/method pair that the registry does not know."""


class SolverUnavailableError(DecompError, RuntimeError):
    """A solver library or interface is missing; the message says how to install it."""


class ConfigError(DecompError, ValueError):
    """An option value outside its domain."""


class OutputPathError(DecompError, ValueError):
    """An output path that cannot be one: empty, a folder where a file goes (or the reverse), a
    device, a path through a file, or a folder decomp did not write and may not replace. The
    message names the option and the path; nothing has been written."""

    def __init__(self, reason: str, *, path=None, option=None):
        self.path = None if path is None else str(path)
        self.option = option
        where = " ".join(p for p in (option, None if path is None else repr(printable(str(path)))) if p)
        super().__init__(f"{where}: {printable(reason)}" if where else printable(reason))


class EnvironmentRefusedError(DecompError, OSError):
    """The machine refused a write: the disk or quota is full, the folder is read-only, or
    permission is denied. Names the path the user gave (not a temporary file beside it); what
    was written before stays whole (writes are atomic)."""

    def __init__(self, path, cause: OSError):
        super().__init__(cause.errno, cause.strerror or str(cause), str(path))
        self.path = str(path)
        self.cause = cause

    def __str__(self) -> str:
        return f"cannot write {printable(self.path)}: {self.strerror} [Errno {self.errno}]"
