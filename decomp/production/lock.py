"""One run per output folder: an exclusive lock on ``out/.lock`` for the whole run.

Two ``decomp run`` into one folder would mix their answers (one task solved at
tol 1e-3, the next at 1e-9) and leave ``summary.json`` and ``run.json``
disagreeing. The lock is ``fcntl.flock`` on an open file: the kernel drops it
when the holder exits, however it exits (``kill -9`` included), so a stale
lock cannot block the next run. The file holds who took it (host, pid, start
time, command line) so that a refused run can name the holder. ``flock`` is
advisory and local: it does not lock across machines on a network file
system that does not pass it through; give each machine its own folder.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import pathlib
import socket
import sys

from ..errors import DecompError

LOCK_FILE = ".lock"


class RunLockedError(DecompError):
    """Another run holds the output folder; the message names it."""


class OutputLock:
    """``with OutputLock(out):`` holds the folder's lock (RunLockedError when another run has it)."""

    def __init__(self, out):
        self.path = pathlib.Path(out) / LOCK_FILE
        self._fd = None

    def __enter__(self):
        import fcntl

        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = _read_holder(fd)
            os.close(fd)
            raise RunLockedError(f"another decomp run is writing to {self.path.parent} ({holder}); wait for it "
                                 f"to finish or choose another --out") from None
        except BaseException:
            os.close(fd)
            raise
        info = {"host": socket.gethostname(), "pid": os.getpid(),
                "started": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
                "command": " ".join(sys.argv)[:500]}
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, (json.dumps(info) + "\n").encode(), 0)
        except OSError:
            pass                     # a full disk: the lock holds all the same, only the holder is not named
        self._fd = fd
        return self

    def __exit__(self, *exc):
        if self._fd is not None:
            os.close(self._fd)       # closing the descriptor drops the flock
            self._fd = None
        return False


def _read_holder(fd) -> str:
    try:
        info = json.loads(os.pread(fd, 4096, 0).decode("utf-8", "replace"))
        return f"pid {int(info['pid'])} on {str(info['host'])[:100]}, started {str(info['started'])[:40]}"
    except (OSError, ValueError, KeyError, TypeError):
        return "holder unknown"
