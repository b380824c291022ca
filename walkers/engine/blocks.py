"""Ranges of blocks of particles spread over threads, for the compiled step kernel.

The step kernel (``kernels.compiled_mover``) is serial, releases the GIL, and moves the blocks
[first, last) of ``kernels.BLOCK`` particles it is given. :func:`spread_blocks` hands ranges of
about nblocks / (8 threads) blocks to a pool of Python threads and to the calling thread; each
takes the next range when done with one, so the threads finish together (a thread slowed by
other work on its core takes fewer ranges). The number of threads is numba's
(``numba.set_num_threads`` of the calling thread; ``walkers bench`` and the ensemble set it).
Particles are independent and their random numbers are keyed by particle and step, so the split
does not change a bit of the result.

One serial kernel per option set replaced a numba ``parallel=True`` kernel beside the serial one
that runs of a block or less used: numba compiled the parallel loop three times slower, and
every option set that a run used was compiled twice (docs/performance.md).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numba

#: The worker threads of ``spread_blocks`` (threads - 1 of them), with the process that made them
#: (a pool is not carried into a forked child).
_POOL: dict[str, Any] = {"pool": None, "workers": 0, "pid": 0}
_POOL_LOCK = threading.Lock()


def _workers(count: int) -> ThreadPoolExecutor:
    """A pool of at least ``count`` threads, made on first use and kept."""
    with _POOL_LOCK:
        if _POOL["pool"] is None or _POOL["workers"] < count or _POOL["pid"] != os.getpid():
            if _POOL["pool"] is not None and _POOL["pid"] == os.getpid():
                _POOL["pool"].shutdown(wait=False)
            _POOL["pool"] = ThreadPoolExecutor(count, thread_name_prefix="walkers-step")
            _POOL["workers"] = count
            _POOL["pid"] = os.getpid()
        return _POOL["pool"]


def spread_blocks(nblocks: int, run: Callable[[int, int], None]) -> None:
    """Call ``run(first, last)`` for ranges of blocks covering ``range(nblocks)``, on numba's
    number of threads (``numba.get_num_threads``): the calling thread and threads - 1 workers
    each take the next range of about nblocks / (8 threads) blocks until none is left."""
    threads = min(numba.get_num_threads(), nblocks)
    if threads <= 1:
        run(0, nblocks)
        return
    size = max(1, nblocks // (8 * threads))
    ranges = iter([(lo, min(lo + size, nblocks)) for lo in range(0, nblocks, size)])
    lock = threading.Lock()

    def work() -> None:
        while True:
            with lock:
                span = next(ranges, None)
            if span is None:
                return
            run(*span)

    pool = _workers(threads - 1)
    futures = [pool.submit(work) for _ in range(threads - 1)]
    work()
    for future in futures:
        future.result()
