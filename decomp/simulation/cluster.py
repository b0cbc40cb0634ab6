"""Where the path batches run: in this process, or on Dask workers.

The embedded cluster is the one production runs use
(:func:`decomp.production.runner.start_cluster`: one single-threaded worker
process per core); ``scheduler`` connects to a running Dask scheduler instead.
"""

from __future__ import annotations

import contextlib


@contextlib.contextmanager
def open_client(workers: int | None = None, scheduler: str | None = None):
    """Yield a ``distributed.Client``, or None for in-process runs (``workers == 0``)."""
    if scheduler is None and workers == 0:
        yield None
        return
    if scheduler is not None:
        from distributed import Client

        client = Client(scheduler)
        try:
            yield client
        finally:
            client.close()
        return
    from ..production.runner import start_cluster

    cluster, client = start_cluster(workers)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
