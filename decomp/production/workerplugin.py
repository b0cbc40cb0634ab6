"""The worker plugin of the embedded cluster (its own module: it imports distributed, which the
rest of :mod:`decomp.production` imports only when a cluster is used)."""

from __future__ import annotations

import logging
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
        logging.getLogger("distributed.worker").addFilter(_after_the_scheduler)


#: What a worker logs (with a traceback) when its heartbeat finds the scheduler gone. The
#: scheduler lives in the client's process and goes when the client closes the cluster, so
#: this is the order of a close, not a fault: at a Ctrl-C to the whole process group a worker
#: sometimes beat once more in between (seen once in a loaded test run).
_HEARTBEAT_LOST = "Failed to communicate with scheduler during heartbeat"


def _after_the_scheduler(record) -> bool:
    return not str(record.msg).startswith(_HEARTBEAT_LOST)
