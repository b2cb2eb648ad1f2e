"""Threaded chunk runner of the compiled kernels (dic.images.parallel)."""

import os
import sys

import numba
import numpy as np
import pytest
from numba import njit

from dic.images.parallel import run_chunks


@njit(nogil=True)
def _count(lo, hi, hits):
    for i in range(lo, hi):
        hits[i] += 1


@pytest.mark.parametrize("n", [0, 1, 7, 1000, 12345])
def test_every_item_exactly_once(n):
    # common practice, no source: a parallel split must cover each item once, whatever n
    prev = numba.get_num_threads()
    try:
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        hits = np.zeros(n, np.int64)
        run_chunks(_count, n, hits)
        np.testing.assert_array_equal(hits, np.ones(n, np.int64))
    finally:
        numba.set_num_threads(prev)


@pytest.mark.skipif(sys.platform == "win32", reason="fork is POSIX only")
@pytest.mark.filterwarnings("ignore:.*fork.*:DeprecationWarning")
def test_works_in_a_forked_child():
    # a forked child inherits the pool object without its threads; it must not hang
    hits = np.zeros(100, np.int64)
    run_chunks(_count, 100, hits)
    pid = os.fork()
    if pid == 0:
        h = np.zeros(100, np.int64)
        run_chunks(_count, 100, h)
        os._exit(0 if np.all(h == 1) else 1)
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0
