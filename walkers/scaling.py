"""How the compiled engine's cost grows with particles, steps, grid size and members (the
"How cost grows" table of docs/performance.md), on the benchmark's reference workload."""

from __future__ import annotations

import statistics

import numba
import numpy as np

from walkers.bench import DT, KEY, _inputs, _timed
from walkers.engine import mover
from walkers.workloads import initial_state, reference_workload


def fit_slope(sizes: list[float], seconds: list[float]) -> float:
    """Slope of log(seconds) against log(size): cost ∝ size^slope."""
    return float(np.polyfit(np.log(sizes), np.log(seconds), 1)[0])


def scaling_study(repeats: int = 3, threads: int = 1) -> dict:
    """How the compiled engine's cost grows with particles, steps, grid size and members.

    Each factor is varied over three sizes with the others fixed (50 000 particles, 40 steps,
    200 × 100 cells, 1 member); times are CPU seconds of this process (one thread by default,
    so that other work on the machine disturbs them less than wall time), medians of
    ``repeats``; the slope of a least-squares line through log(time) against log(size) is
    reported (1 = proportional).
    """
    before = numba.get_num_threads()
    numba.set_num_threads(threads)

    def timed(n=50_000, steps=40, nx=200, ny=100, members=1):
        flow, transport = reference_workload(nx, ny)
        inputs = _inputs(flow, transport)
        start = initial_state(n, flow)
        mover.advance(start.copy(), inputs, 0.0, DT, 1, 0, KEY)
        runs = []
        for _ in range(repeats):
            states = [start.copy() for _ in range(members)]

            def go(states=states):
                for k, s in enumerate(states):
                    mover.advance(s, inputs, 0.0, DT, steps, 0, KEY + k)

            runs.append(_timed(go)[1])
        return statistics.median(runs)

    plans: dict[str, tuple[list[float], list[dict]]] = {
        "particles": (
            [25e3, 50e3, 100e3, 200e3],
            [{"n": v} for v in (25_000, 50_000, 100_000, 200_000)],
        ),
        "steps": ([20, 40, 80, 160], [{"steps": v} for v in (20, 40, 80, 160)]),
        "grid_cells": (
            [5e3, 20e3, 80e3, 320e3],
            [{"nx": a, "ny": b} for a, b in ((100, 50), (200, 100), (400, 200), (800, 400))],
        ),
        "members": ([1, 2, 4], [{"members": v} for v in (1, 2, 4)]),
    }
    out = {}
    try:
        for name, (xs, runs) in plans.items():
            secs = [timed(**kw) for kw in runs]
            out[name] = {"sizes": xs, "seconds": secs, "slope": fit_slope(xs, secs)}
    finally:
        numba.set_num_threads(before)
    return out
