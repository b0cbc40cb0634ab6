"""The worker plugin of the embedded cluster (its own module: it imports distributed, which the
rest of :mod:`decomp.production` imports only when a cluster is used)."""

from __future__ import annotations

import signal
import threading

from distributed.diagnostics.plugin import WorkerPlugin


class IgnoreSigint(WorkerPlugin):
    """The worker process ignores SIGINT: a Ctrl-C at the terminal reaches the whole process group,
    and only the client decides what it means (it closes the cluster). Registered with the client, so
    a worker the nanny restarts after a loss gets it too."""

    def setup(self, worker):
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.SIG_IGN)
