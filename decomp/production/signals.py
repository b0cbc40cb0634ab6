"""SIGTERM ends a run the way Ctrl-C does: what is not finished is cancelled, the summary is written
and marked interrupted, and a rerun with the same arguments finishes the rest."""

from __future__ import annotations

import contextlib
import signal
import threading


class Terminated(KeyboardInterrupt):
    """Raised in the main thread when the process receives SIGTERM."""


def _raise_terminated(signum, frame):
    raise Terminated("SIGTERM")


@contextlib.contextmanager
def terminate_as_interrupt():
    """Within the block, SIGTERM raises :class:`Terminated` (a KeyboardInterrupt) in the main thread.

    Outside the main thread (where Python cannot install handlers) nothing changes."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class Deferred:
    """The signals that arrived while :func:`deferred` held them (``names``: 'SIGINT', 'SIGTERM')."""

    def __init__(self):
        self.names: list = []

    def __bool__(self) -> bool:
        return bool(self.names)

    @property
    def first(self) -> str | None:
        return self.names[0] if self.names else None


@contextlib.contextmanager
def deferred():
    """Within the block, SIGINT and SIGTERM are recorded instead of raised: the end of a run (closing
    the cluster, writing the summary) is not cut short by a signal that arrives after the last task.
    Yields a :class:`Deferred` that says which arrived. Outside the main thread nothing changes."""
    held = Deferred()
    if threading.current_thread() is not threading.main_thread():
        yield held
        return

    def record(signum, frame):
        held.names.append(signal.Signals(signum).name)

    previous = {s: signal.signal(s, record) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield held
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)
