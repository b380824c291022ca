"""Ranges of blocks of particles spread over threads, for the compiled step kernel.

The step kernel (``kernels.compiled_mover``) is serial, releases the GIL, and moves the blocks
[first, last) of ``kernels.BLOCK`` particles it is given. :func:`spread_blocks` hands ranges of
about nblocks / (8 threads) blocks to a pool of Python threads and to the calling thread; each
takes the next range when done with one, so the threads finish together (a thread slowed by
other work on its core takes fewer ranges). The number of threads is numba's
(``numba.set_num_threads`` of the calling thread; ``walkers bench`` and the ensemble set it).
Particles are independent and their random numbers are keyed by particle and step, so the split
does not change a bit of the result.

Each worker thread reads its own copy of the call's fields (velocity, dispersion, drift, wet and
column frames; :func:`own_fields`), made by that thread when the fields change and kept until
they do: two threads that read the same cache-sized arrays ran at 0.5–0.75 of the speed of two
threads that read copies of them, on this project's two-core virtual machine, while arrays read
from memory cost the same either way (docs/performance.md). Fields are shared when they are
larger than ``COPIED_FIELD_BYTES``, or when the copies of all workers together would be larger
than ``COPIED_TOTAL_BYTES`` (a machine with many cores).

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
import numpy as np

#: Fields up to this size (bytes, all arrays of a call) are copied for each worker thread. The
#: cells a plume covers may fit a cache while the whole grid does not, so the bound is set by
#: what a copy costs (memory, and some 10 ms each time the window changes), not by a cache.
COPIED_FIELD_BYTES = 64 * 2**20

#: Most bytes of the copies of all worker threads together (the fields of one call times the
#: worker threads): on many cores, smaller fields only are copied.
COPIED_TOTAL_BYTES = 256 * 2**20

#: Each worker thread's copy of the last fields it was given, with the fields it copies.
_OWN = threading.local()

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


def _arrays(fields: Any) -> list[np.ndarray]:
    """The arrays of a nested tuple, in order."""
    if isinstance(fields, tuple):
        return [a for item in fields for a in _arrays(item)]
    return [fields]


def _copied(fields: Any) -> Any:
    """A nested tuple of arrays with each array copied, read-only where the original is: numba
    types a read-only array apart from a writable one, so a copy that differed would make the
    step kernel compile (and load) once more for the worker threads."""
    if isinstance(fields, tuple):
        return tuple(_copied(item) for item in fields)
    copy = fields.copy()
    copy.flags.writeable = fields.flags.writeable
    return copy


def own_fields(fields: Any, workers: int = 1) -> Any:
    """This thread's copy of ``fields`` (a nested tuple of arrays), made on the first call with
    these arrays and kept until it is called with others; ``fields`` itself when larger than
    ``COPIED_FIELD_BYTES``, or when ``workers`` threads' copies of them would be larger than
    ``COPIED_TOTAL_BYTES``."""
    arrays = _arrays(fields)
    size = sum(a.nbytes for a in arrays)
    if size > COPIED_FIELD_BYTES or size * workers > COPIED_TOTAL_BYTES:
        _OWN.last = None  # an older copy is not kept for nothing
        return fields
    last = getattr(_OWN, "last", None)
    if (
        last is None
        or len(last[0]) != len(arrays)
        or any(a is not b for a, b in zip(last[0], arrays, strict=True))
    ):
        _OWN.last = last = (arrays, _copied(fields))
    return last[1]


def spread_blocks(nblocks: int, run: Callable[[int, int, Any], None], fields: Any) -> None:
    """Call ``run(first, last, fields)`` for ranges of blocks covering ``range(nblocks)``, on
    numba's number of threads (``numba.get_num_threads``): the calling thread, with ``fields``,
    and threads - 1 workers, each with its own copy (:func:`own_fields`), take the next range
    of about nblocks / (8 threads) blocks until none is left."""
    threads = min(numba.get_num_threads(), nblocks)
    if threads <= 1:
        run(0, nblocks, fields)
        return
    size = max(1, nblocks // (8 * threads))
    ranges = iter([(lo, min(lo + size, nblocks)) for lo in range(0, nblocks, size)])
    lock = threading.Lock()

    def work(worker: bool) -> None:
        own = own_fields(fields, threads - 1) if worker else fields
        while True:
            with lock:
                span = next(ranges, None)
            if span is None:
                return
            run(*span, own)

    pool = _workers(threads - 1)
    futures = [pool.submit(work, True) for _ in range(threads - 1)]
    work(False)
    for future in futures:
        future.result()
