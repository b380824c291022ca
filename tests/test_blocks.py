"""Ranges of particle blocks over threads, each worker thread with its own copy of the fields
(``walkers.engine.blocks``): every range run once, the copies equal to the fields, made once per
set of fields and thread, and the moved particles bitwise those of one thread."""

from __future__ import annotations

import threading

import numba
import numpy as np
import pytest

from walkers import workloads
from walkers.engine import blocks, mover

TWO = min(2, int(numba.config.NUMBA_NUM_THREADS))


@pytest.fixture
def threads():
    """numba's thread count set to two for the test, then restored."""
    before = numba.get_num_threads()
    numba.set_num_threads(TWO)
    yield TWO
    numba.set_num_threads(before)


def fields_of(size=4):
    return ((np.arange(size, dtype=np.float64), (np.ones((2, size)),)), np.zeros(3, np.int64))


def recorded(nblocks, fields):
    """(range, thread, fields) of every call that ``spread_blocks`` made."""
    calls = []
    lock = threading.Lock()

    def run(first, last, given):
        with lock:
            calls.append(((first, last), threading.get_ident(), given))

    blocks.spread_blocks(nblocks, run, fields)
    return calls


def test_every_block_is_run_once_and_only_the_workers_read_copies(threads):
    if threads < 2:
        pytest.skip("numba has one thread here")
    fields = fields_of()
    calls = recorded(100, fields)
    covered = sorted(b for (lo, hi), _, _ in calls for b in range(lo, hi))
    assert covered == list(range(100))
    caller = threading.get_ident()
    for _, thread, given in calls:
        if thread == caller:
            assert given is fields
        else:
            # a copy: the same values, none of the same arrays
            assert given is not fields
            mine, theirs = blocks._arrays(given), blocks._arrays(fields)
            pairs = zip(mine, theirs, strict=True)
            assert all(a is not b and np.array_equal(a, b) for a, b in pairs)


def test_a_worker_copies_fields_once_and_again_only_when_they_change():
    first, second = fields_of(), fields_of()
    pool = blocks._workers(1)
    a = pool.submit(blocks.own_fields, first).result()
    again = pool.submit(blocks.own_fields, first).result()
    other = pool.submit(blocks.own_fields, second).result()
    assert a is again  # kept while the same arrays come
    assert other is not a and blocks._arrays(other)[0] is not second[0][0]
    # another thread's copy is its own
    assert blocks.own_fields(first) is not a


def test_a_workers_copy_has_the_numba_types_of_the_fields():
    """A read-only field (a broadcast K, a depth frame of a file) is copied read-only, a
    writable one writable: numba types the two apart, so a copy of another type would make the
    step kernel compile, and load from its cache, a second time for the worker threads."""
    readonly = np.broadcast_to(np.arange(6.0), (2, 6))[None].copy()
    readonly.flags.writeable = False
    fields = ((np.ones((1, 2, 6)), readonly), (np.zeros(3),))
    copy = blocks._workers(1).submit(blocks.own_fields, fields).result()
    originals, copies = blocks._arrays(fields), blocks._arrays(copy)
    assert all(a is not b for a, b in zip(originals, copies, strict=True))
    assert [numba.typeof(a) for a in copies] == [numba.typeof(a) for a in originals]
    # the check can fail: a plain copy of the read-only array is another numba type
    assert numba.typeof(readonly.copy()) != numba.typeof(readonly)


def test_fields_larger_than_the_limits_are_shared(monkeypatch):
    """Shared above the bound of one copy, or of all workers' copies together (many cores)."""
    fields = fields_of(size=1000)  # 24 024 bytes
    own = blocks._workers(1)
    monkeypatch.setattr(blocks, "COPIED_FIELD_BYTES", 1000)
    assert own.submit(blocks.own_fields, fields).result() is fields
    monkeypatch.setattr(blocks, "COPIED_FIELD_BYTES", 10**6)
    assert own.submit(blocks.own_fields, fields).result() is not fields
    monkeypatch.setattr(blocks, "COPIED_TOTAL_BYTES", 10**5)
    assert own.submit(blocks.own_fields, fields, 3).result() is not fields  # 3 copies: 72 072 bytes
    assert own.submit(blocks.own_fields, fields, 7).result() is fields  # 7 copies: 168 168 bytes


def test_two_threads_with_copied_fields_move_particles_as_one_thread_does(threads):
    """The scenario workload (gridded, flow-aligned K with the drift, drying, decay, the bridge
    test), through two windows of the same flow: each window's fields are copied for the worker
    and the result is bitwise that of one thread."""
    flow, transport = workloads.scenario_workload(nx=60, ny=30, frames=4)
    start = workloads.initial_state(5000, flow)
    windows = [(0.0, 3600.0), (3600.0, 7200.0)]
    inputs = [mover.kernel_inputs(flow, flow.window(*w), transport) for w in windows]
    results = []
    for count in (1, threads):
        numba.set_num_threads(count)
        state = start.copy()
        for w, ((t0, _), window) in enumerate(zip(windows, inputs, strict=True)):
            for call in range(3):  # the second and third calls reuse the worker's copy
                step0 = 120 * w + 20 * call
                mover.advance(state, window, t0 + call * 600.0, 30.0, 20, step0, 11)
        results.append(state)
    for name, arr in results[0].arrays().items():
        assert np.array_equal(arr, results[1].arrays()[name], equal_nan=True), name
    assert np.ptp(results[0].x) > 0.0


def test_a_window_is_copied_once_over_the_calls_that_step_through_it(threads, monkeypatch):
    """Calls with the same kernel inputs (depth-averaged, on a lattice) give the worker the same
    fields, so it copies them at the first call only; a new window is copied again."""
    if threads < 2:
        pytest.skip("numba has one thread here")
    copies = []
    copied = blocks._copied

    def counted(fields):
        if isinstance(fields, tuple) and isinstance(fields[0], tuple):  # a call's, not a part
            copies.append(fields)
        return copied(fields)

    monkeypatch.setattr(blocks, "_copied", counted)
    flow, transport = workloads.reference_workload(nx=60, ny=30, frames=3)
    state = workloads.initial_state(20_000, flow)
    first = mover.kernel_inputs(flow, flow.window(0.0, 3600.0), transport)
    for call in range(4):
        mover.advance(state, first, 300.0 * call, 30.0, 10, 10 * call, 3)
    assert len(copies) == 1
    second = mover.kernel_inputs(flow, flow.window(3600.0, 7200.0), transport)
    mover.advance(state, second, 3600.0, 30.0, 10, 120, 3)
    assert len(copies) == 2
