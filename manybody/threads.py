"""Threads on this machine: the cores we may use, BLAS held to one thread, and an ordered map.

The simulation (chunks of settings) and the estimate (parts of the records)
both run a function over many items on a few threads and consume the results
in order; at most a few results per worker wait, so memory stays flat.
"""

from __future__ import annotations

import os
import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager

#: marks the threads of an ordered_map pool while they work (see spare_workers)
_WORKER = threading.local()


def available_cores() -> int:
    """The number of cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        return os.cpu_count() or 1


def spare_workers() -> int:
    """Threads a kernel may start from here: 1 inside a worker of :func:`ordered_map`, else the available cores.

    A kernel called from a pool that already keeps every core busy (parts of
    the records estimated side by side) runs in its own thread; called from the
    main thread (one part, or a notebook) it may share its work among the cores.
    """
    return 1 if getattr(_WORKER, "busy", False) else available_cores()


def _as_worker(fn):
    """fn, marked while it runs as work of a pool thread (see :func:`spare_workers`)."""
    def run(item):
        _WORKER.busy = True
        try:
            return fn(item)
        finally:
            _WORKER.busy = False
    return run


@contextmanager
def single_threaded_blas():
    """BLAS on one thread inside (our own threads share the cores instead), when threadpoolctl is installed.

    Our kernels multiply chunk-sized matrices, for which a multithreaded
    OpenBLAS mostly waits on its own threads (on a busy 2-core machine one BLAS
    thread was 5x faster), and several of our threads calling it wait on each
    other's pools. One BLAS thread also gives the same sums whoever runs them.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        yield
        return
    with threadpool_limits(limits=1, user_api="blas"):
        yield


def ordered_results(submit, items, window: int):
    """The results of ``submit(item)`` (futures) for every item, in order, with at most ``window`` pending.

    An error or an early stop of the consumer cancels what has not started.
    """
    items = iter(items)
    # range first in zip: it stops without taking one item too many from ``items``
    pending = deque(submit(item) for _, item in zip(range(window), items))
    try:
        while pending:
            result = pending.popleft().result()
            for item in items:  # refill one slot
                pending.append(submit(item))
                break
            yield result
    finally:
        for future in pending:
            future.cancel()


def ordered_map(fn, items, workers: int, ahead: int = 2):
    """fn(item) for every item, yielded in order, on ``workers`` threads (1: the plain loop here).

    At most ``ahead`` x workers results are pending.
    """
    if workers <= 1:
        yield from map(fn, items)
        return
    fn = _as_worker(fn)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        yield from ordered_results(lambda item: pool.submit(fn, item), items, ahead * workers)


def ordered_map_one_blas(fn, items, workers: int, ahead: int = 2):
    """:func:`ordered_map` with BLAS held to one thread (:func:`single_threaded_blas`) until the last result.

    Our threads share the cores instead of BLAS, and every item gets the same
    arithmetic whatever the number of workers.
    """
    with single_threaded_blas():
        yield from ordered_map(fn, items, workers, ahead)
