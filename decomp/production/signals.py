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
