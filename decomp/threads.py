"""Threads for numpy work over products (numpy releases the GIL in its loops).

One shared pool per thread count, and the CPUs this process may run on.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

#: From this many products on, work over products is split over threads.
FROM_PRODUCTS = 200_000

_POOLS: dict[int, ThreadPoolExecutor] = {}


def pool(threads: int) -> ThreadPoolExecutor:
    """The shared pool of ``threads`` threads (created on first use)."""
    p = _POOLS.get(threads)
    if p is None:
        p = _POOLS[threads] = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="decomp")
    return p


def available() -> int:
    """The CPUs this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        return os.cpu_count() or 1


def slices(n: int, threads: int | None, from_items: int | None = None) -> list[tuple[int, int]]:
    """[lo, hi) ranges splitting n products over the threads (one range when
    n is below ``from_items``, FROM_PRODUCTS when None, or one thread is asked for)."""
    k = available() if threads is None else int(threads)
    if k < 2 or n < (FROM_PRODUCTS if from_items is None else from_items):
        return [(0, n)]
    cuts = [n * i // k for i in range(k + 1)]
    return list(zip(cuts[:-1], cuts[1:]))


def map_slices(fn, n: int, threads: int | None = None, from_items: int | None = None) -> list:
    """[fn(lo, hi) for each range of :func:`slices`], on the shared pool when
    there is more than one."""
    parts = slices(n, threads, from_items)
    if len(parts) == 1:
        return [fn(*parts[0])]
    return list(pool(len(parts)).map(lambda r: fn(*r), parts))
