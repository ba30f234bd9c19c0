"""Independent pieces of one detection run spread over the machine's cores (private).

OpenCV spreads its own filters over the cores, but the detector's Python-level loop over the
orientation sectors (ridge filter, then Hough) would use one. Sectors do not depend on each
other, so they run in a small pool of threads instead; numpy and OpenCV release the GIL while
they work. The number of threads follows OpenCV's own (``cv2.getNumThreads()``): the survey's
workers set it to 1 (one process per core already), and then every piece runs in turn in the
calling thread. Results come back in the order of the items, so the answer never depends on
the threads.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Iterable
from concurrent.futures import ThreadPoolExecutor

import cv2

from tracefit.cores import available_cores

MAX_THREADS = 4  # the pieces are few (12 orientation sectors): more threads would only wait

_pool: ThreadPoolExecutor | None = None
_pool_size = 0
_pool_lock = threading.Lock()
_inside = threading.local()


def _forget_pool_in_child() -> None:
    # a forked child has none of the parent's threads: its copy of the pool would wait forever
    global _pool, _pool_size, _pool_lock
    _pool, _pool_size, _pool_lock = None, 0, threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_pool_in_child)


def _threads() -> int:
    return max(1, min(cv2.getNumThreads(), available_cores(), MAX_THREADS))


def ordered_map(fn: Callable, items: Iterable) -> list:
    """``[fn(x) for x in items]``, the calls spread over threads when OpenCV may use more than one.

    A call made from inside one of the pool's threads runs its items in turn (no nesting,
    so no thread waits for a slot that it holds itself).
    """
    items = list(items)
    n = _threads()
    if n <= 1 or len(items) <= 1 or getattr(_inside, "flag", False):
        return [fn(x) for x in items]
    global _pool, _pool_size
    with _pool_lock:
        if _pool is None or _pool_size != n:
            if _pool is not None:
                _pool.shutdown(wait=False)
            _pool, _pool_size = ThreadPoolExecutor(n, thread_name_prefix="tracefit"), n
        pool = _pool

    def run(x):
        _inside.flag = True
        try:
            return fn(x)
        finally:
            _inside.flag = False

    return list(pool.map(run, items))
