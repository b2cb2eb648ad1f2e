"""Running a compiled kernel over chunks of its items in several threads.

The kernels are compiled with ``nogil=True`` and take the range of items they work on as their
first two arguments, so plain Python threads run them in parallel. This replaces numba's
``parallel=True`` loops, which cost seconds of extra compile time per kernel on the first call
and keep idle threads spinning between calls (harmful on a machine shared with other work).
The number of threads is numba's (:func:`numba.get_num_threads`, set by ``workers=``).
"""

from __future__ import annotations

import os
import threading

__all__ = ["run_chunks"]

_pool = None
_pool_size = 0
_pool_pid = None
_lock = threading.Lock()


def _executor(n):
    global _pool, _pool_size, _pool_pid
    with _lock:
        # a forked child inherits the pool object but not its threads: make a new one
        if _pool is None or _pool_size < n or _pool_pid != os.getpid():
            from concurrent.futures import ThreadPoolExecutor

            if _pool is not None and _pool_pid == os.getpid():
                _pool.shutdown(wait=False)
            _pool = ThreadPoolExecutor(max_workers=n, thread_name_prefix="dic-kernel")
            _pool_size = n
            _pool_pid = os.getpid()
        return _pool


def run_chunks(kernel, n, *args, per_thread=4, min_chunk=1):
    """Call ``kernel(lo, hi, *args)`` over ``[0, n)`` in chunks, in parallel threads.

    Parameters
    ----------
    kernel : callable
        A compiled function that releases the GIL and handles items ``lo`` to ``hi - 1``.
    n : int
        Number of items.
    *args
        The kernel's further arguments.
    per_thread : int, optional
        Chunks per thread (more chunks balance the load when a core is busy elsewhere).
    min_chunk : int, optional
        Smallest number of items worth a chunk of its own.
    """
    from numba import get_num_threads

    threads = max(1, int(get_num_threads()))
    nchunk = max(1, min(threads * per_thread, n // max(1, min_chunk)))
    if threads == 1 or nchunk == 1:
        if n > 0:
            kernel(0, n, *args)
        return
    bounds = [(k * n // nchunk, (k + 1) * n // nchunk) for k in range(nchunk)]
    pool = _executor(threads - 1)
    # the calling thread takes chunks too: no thread sits idle waiting for the others
    it = iter(bounds)
    lock = threading.Lock()

    def worker():
        while True:
            with lock:
                b = next(it, None)
            if b is None:
                return
            kernel(b[0], b[1], *args)

    futures = [pool.submit(worker) for _ in range(threads - 1)]
    worker()
    for f in futures:
        # a helper that has not started yet finds no work left: no need to wait for it
        if not f.cancel():
            f.result()
