"""The benchmark behind ``walkers bench``: speed, memory and start-up of the particle engine.

One run measures, on a fixed reference workload (an invented basin: a 2-D gridded, time-varying
flow, bilinear in space and linear in time, with land, reflecting and absorbing edges and noise on):

- particle-steps per second of the compiled engine on one and on two threads, and of the
  plain-numpy twin on the same particles, with their ratio (and the largest difference between
  the two, which must stay at round-off);
- the same for the scenario workload, the basin run with the estuary demo's options (estimated
  flow-aligned dispersion on the grid with the drift term, drying flats, decay), its rate beside
  the reference one, and the cost of an RK4 step against an Euler step;
- the same for the curvilinear workload (the basin on a rotated, bent curvilinear grid, stepped in
  index space), the mesh workload and the three-dimensional one (:mod:`walkers.workloads`);
- bytes of particle state per particle, and the peak memory of a 10-million-particle run (measured
  in a child process with ``resource.getrusage``, or projected from a smaller one in quick mode);
- concentration-gridding throughput (particles per second through ``reduce.concentration``);
- the time from a fresh interpreter to the first kernel call's return (kernels cached on disk).

Rates are medians over repeats; the load average is reported and one-thread rates are also given
per CPU-second of this process. Ratios (a workload over the reference, RK4 over Euler, two
threads over one) are medians of back-to-back pairs (:func:`_paired_ratios`). The text report
and the targets: :mod:`walkers.bench_report`. How cost grows with particles, steps, grid and
members: :mod:`walkers.scaling`.
"""

from __future__ import annotations

import dataclasses
import json
import os
import resource
import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import Any, Literal

import numba
import numpy as np

import walkers
from walkers.engine import kernels, mesh_inputs, mover
from walkers.engine.state import ParticleState
from walkers.fields.base import FlowField, centre_to_edges
from walkers.scenario.config import OutputGrid, Transport
from walkers.workloads import (
    CELL,
    DT,
    curvilinear_workload,
    gridded_workload,
    initial_state,
    mesh_workload,
    reference_workload,
    scenario_workload,
    threed_workload,
)

KEY = 20260101
MAX_THREADS = int(numba.config.NUMBA_NUM_THREADS)  # type: ignore[attr-defined]


def _inputs(flow: FlowField, transport: Transport) -> mover.KernelInputs:
    return mover.kernel_inputs(flow, flow.window(0.0, float(flow.times[-1])), transport)


def _timed(fn: Callable[[], object]) -> tuple[float, float]:
    """(wall seconds, CPU seconds of this process) taken by fn()."""
    c = time.process_time()
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t, time.process_time() - c


def _rate(
    inputs: mover.KernelInputs,
    start: ParticleState,
    steps: int,
    repeats: int,
    stepper: Literal["fast", "reference"] = "fast",
) -> tuple[float, float, ParticleState]:
    """Median particle-steps per wall second and per CPU second; the state after the last run."""
    walls, cpus = [], []
    out = start
    for _ in range(repeats):
        out = start.copy()

        def go(out=out):
            mover.advance(out, inputs, 0.0, DT, steps, 0, KEY, stepper)

        w, c = _timed(go)
        walls.append(len(start) * steps / w)
        cpus.append(len(start) * steps / max(c, 1e-9))
    return statistics.median(walls), statistics.median(cpus), out


def _paired_ratios(
    base: tuple[mover.KernelInputs, ParticleState],
    other: tuple[mover.KernelInputs, ParticleState],
    steps: int,
    pairs: int,
    threads: tuple[int, int] = (1, 1),
) -> tuple[float, float]:
    """Median speed of ``other`` over ``base`` per wall and per CPU second, from runs of the two
    back to back, on ``threads`` (base's, other's) threads: the speed of a shared virtual
    machine drifts (on this one by up to a factor of two over tens of seconds), and a ratio of
    medians taken minutes apart carries that drift; a ratio of neighbours does not."""
    walls, cpus = [], []
    for _ in range(pairs):
        timed = []
        for (inputs, start), count in zip((base, other), threads, strict=True):
            numba.set_num_threads(count)
            out = start.copy()

            def go(out=out, inputs=inputs):
                mover.advance(out, inputs, 0.0, DT, steps, 0, KEY)

            timed.append(_timed(go))
        walls.append(timed[0][0] / timed[1][0])
        cpus.append(timed[0][1] / max(timed[1][1], 1e-9))
    return statistics.median(walls), statistics.median(cpus)


def _engine_rates(
    inputs: mover.KernelInputs,
    start: ParticleState,
    steps: int,
    repeats: int,
    two: int,
    note: Callable[[str], None],
    name: str,
) -> dict[str, Any]:
    """One workload through the compiled engine on one and on ``two`` threads (the kernel is
    compiled or loaded first): wall and CPU rates of one thread, wall rate of two, the state
    after the last run on two threads."""
    note(f"compiling or loading the kernels, {name} workload")
    mover.advance(start.copy(), inputs, 0.0, DT, 2, 0, KEY)
    note(f"compiled engine, {name} workload, 1 thread")
    numba.set_num_threads(1)
    one_wall, one_cpu, _ = _rate(inputs, start, steps, repeats)
    note(f"compiled engine, {name} workload, {two} threads")
    numba.set_num_threads(two)
    two_wall, _, moved = _rate(inputs, start, steps, repeats)
    return {
        "one_wall": one_wall,
        "one_cpu": one_cpu,
        "two_wall": two_wall,
        "moved": moved,
    }


def _largest_difference(
    inputs: mover.KernelInputs, start: ParticleState, steps: int, twin: ParticleState
) -> float:
    """Largest difference (grid units) between the compiled engine and the numpy twin's state
    ``twin`` after the same steps from ``start``."""
    same = start.copy()
    mover.advance(same, inputs, 0.0, DT, steps, 0, KEY, "fast")
    return max(float(np.max(np.abs(same.x - twin.x))), float(np.max(np.abs(same.y - twin.y))))


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return "unknown"


def _child(code: str, timeout: float = 300.0) -> tuple[dict, float]:
    """Run ``python -c code`` (which prints one JSON object last); return it and the wall time."""
    t = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        timeout=timeout,
        check=True,
        env={**os.environ, "PYTHONWARNINGS": "ignore"},
    )
    return json.loads(done.stdout.strip().splitlines()[-1]), time.perf_counter() - t


_FIRST_STEP = """
import time
t0 = time.perf_counter()
import json
import numpy as np
from walkers.bench import initial_state, reference_workload, DT, KEY, _inputs
from walkers.engine import mover
flow, transport = reference_workload(40, 20, 3)
inputs = _inputs(flow, transport)
state = initial_state(100, flow)
mover.advance(state, inputs, 0.0, DT, 1, 0, KEY)
print(json.dumps({"first_step_s": time.perf_counter() - t0}))
"""

_MEMORY = """
import json, resource
import numpy as np
from walkers.run import reduce
from walkers.bench import initial_state, reference_workload, output_grid, DT, KEY, _inputs
from walkers.engine import mover
from walkers.fields.base import centre_to_edges
flow, transport = reference_workload()
inputs = _inputs(flow, transport)
state = initial_state({n}, flow)
mover.advance(state, inputs, 0.0, DT, 2, 0, KEY)
grid = output_grid(flow)
measure = reduce.cell_measure(grid, False, 2)
xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
depths = reduce.particle_depths(state, flow.depth.data[0], xe, ye)
reduce.concentration(state, depths, grid, measure)
print(json.dumps({{"peak_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}}))
"""

_BASELINE = """
import json, resource
from walkers.bench import reference_workload, _inputs
from walkers.engine import mover
flow, transport = reference_workload()
_inputs(flow, transport)
print(json.dumps({"peak_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))
"""


def output_grid(flow: FlowField) -> OutputGrid:
    """An output grid of the flow's cells (the gridding benchmark's grid)."""
    return OutputGrid(
        x0=float(flow.x[0]),
        dx=CELL,
        nx=flow.x.size,
        y0=float(flow.y[0]),
        dy=CELL,
        ny=flow.y.size,
    )


def _gridding_rates(flow: FlowField, state: ParticleState, repeats: int) -> tuple[float, float]:
    """Particles per second through the box-counting kernel alone, and through
    ``reduce.concentration`` (the kernel plus the weights m / h and the division by the cell
    volume), medians over repeats."""
    from walkers.run import reduce

    grid = output_grid(flow)
    measure = reduce.cell_measure(grid, False, 2)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    depths = reduce.particle_depths(state, flow.depth.data[0], xe, ye)
    weight = state.mass / depths
    total = np.zeros((grid.ny, grid.nx))
    count = np.zeros((grid.ny, grid.nx), dtype=np.int64)

    def box_count():
        kernels.grid_mass(
            state.x,
            state.y,
            weight,
            state.status,
            grid.x0,
            grid.dx,
            grid.nx,
            grid.y0,
            grid.dy,
            grid.ny,
            total,
            count,
        )

    def concentration():
        reduce.concentration(state, depths, grid, measure)

    rates = []
    for fn in (box_count, concentration):
        fn()
        rates.append(statistics.median(len(state) / _timed(fn)[0] for _ in range(repeats)))
    return rates[0], rates[1]


def _first_step_times(repeats: int) -> tuple[list[float], list[float]]:
    """Seconds to the end of the first step in a fresh process on a warm kernel cache: as the
    child measures it, and the child's wall time."""
    first = []
    first_wall = []
    for _ in range(repeats):
        out, wall = _child(_FIRST_STEP)
        first.append(out["first_step_s"])
        first_wall.append(wall)
    return first, first_wall


def _peak_memory(n_mem: int) -> tuple[dict, float, str]:
    """Peak memory of a child moving ``n_mem`` particles; the peak for 10 M particles, measured or
    projected from the per-particle growth over a baseline child; and how it was found."""
    baseline, _ = _child(_BASELINE)
    peak, _ = _child(_MEMORY.format(n=n_mem))
    per_particle = (peak["peak_bytes"] - baseline["peak_bytes"]) / n_mem
    target = 10_000_000
    if n_mem == target:
        peak_10m = float(peak["peak_bytes"])
        method = "measured"
    else:
        peak_10m = float(baseline["peak_bytes"] + per_particle * target)
        method = f"projected from {n_mem:,} particles"
    return peak, peak_10m, method


def _compute_speedup(two: int, pairs: int, rounds: int = 20_000_000) -> float:
    """How much of ``two`` cores the machine gives now: the throughput of ``two`` threads each
    running ``kernels.hash_chain`` (arithmetic only, no memory, no shared data) over that of
    one, median of back-to-back pairs. On a virtual machine whose cores the host shares, this
    falls below ``two`` and bounds what any code gets from a second thread."""
    kernels.hash_chain(1, 10)
    ratios = []
    with ThreadPoolExecutor(two) as pool:
        for _ in range(pairs):
            one = _timed(lambda: kernels.hash_chain(1, rounds))[0]
            both = _timed(
                lambda: list(pool.map(lambda k: kernels.hash_chain(k, rounds), range(two)))
            )[0]
            ratios.append(two * one / both)
    return statistics.median(ratios)


def _machine(load_before: tuple[float, float, float], compute_speedup: float) -> dict[str, Any]:
    """The machine the figures were measured on, its load before and after, and the speed-up of
    a compute-only loop from one thread to two (:func:`_compute_speedup`)."""
    return {
        "nproc": os.cpu_count(),
        "cpu_model": _cpu_model(),
        "numba_threads_available": int(MAX_THREADS),
        "load_average_before": [round(v, 2) for v in load_before],
        "load_average_after": [round(v, 2) for v in os.getloadavg()],
        "compute_only_1_to_2_threads": round(compute_speedup, 3),
    }


def _workload(
    flow: FlowField, transport: Transport, n: int, nsteps: int, twin_steps: int, reps: int
) -> dict[str, Any]:
    """A workload as measured: grid, frames, time step, particles, steps, repeats, options."""
    return {
        "grid_cells": [int(flow.x.size), int(flow.y.size)],
        "frames": int(flow.times.size),
        "dt_s": DT,
        "particles": n,
        "steps_compiled": nsteps,
        "steps_twin": twin_steps,
        "repeats": reps,
        "edges": dict(transport.edges),
        "dispersion_m2_s": [transport.dispersion.k1, transport.dispersion.k2],
        "dispersion_mode": transport.dispersion.mode,
        "dispersion_gridded": transport.dispersion.k1_field is not None,
        "decay_rate_per_s": transport.decay_rate,
        "land_fraction": float(1.0 - flow.wet.data[0].mean()),
        "dry_fraction_first_last_frame": [float(1.0 - f.mean()) for f in flow.wet.data[[0, -1]]],
    }


def run_benchmark(
    *,
    quick: bool = False,
    particles: int | None = None,
    repeats: int | None = None,
    steps: int | None = None,
    memory_particles: int | None = None,
    progress: Callable[[str], None] | None = None,
) -> dict:
    """Measure the engine on the reference and the scenario workloads; every figure in one dict.

    Parameters
    ----------
    quick : smaller sizes and fewer repeats (finishes in well under 30 s on two cores); the peak
        memory of 10 M particles is then projected from a 1 M-particle child process.
    particles : particles moved (default 200 000; 20 000 in quick mode).
    repeats : timed repeats per figure, medians reported (default 5; 3 in quick mode).
    steps : steps of 30 s per timed run of the compiled engine (default 50; 20 in quick mode);
        the numpy twin runs a fifth of them (at least 2).
    memory_particles : particles of the memory child process (default 10 M; 1 M in quick mode).
    progress : called with a short note before each stage.

    Returns a dict of plain numbers and strings (see docs/performance.md for each key).
    """
    note = progress or (lambda _msg: None)
    n = int(particles or (20_000 if quick else 200_000))
    reps = int(repeats or (3 if quick else 5))
    nsteps = int(steps or (20 if quick else 50))
    twin_steps = max(2, nsteps // 5)
    n_mem = int(memory_particles or (1_000_000 if quick else 10_000_000))
    flow, transport = reference_workload()
    inputs = _inputs(flow, transport)
    start = initial_state(n, flow)
    load_before = os.getloadavg()
    threads_before = numba.get_num_threads()
    two = min(2, MAX_THREADS)
    try:
        ref = _engine_rates(inputs, start, nsteps, reps, two, note, "reference")
        note("numpy twin, reference workload")
        numba.set_num_threads(1)
        twin_wall, twin_cpu, twin_out = _rate(inputs, start, twin_steps, reps, "reference")
        s_flow, s_transport = scenario_workload()
        s_start = initial_state(n, s_flow)
        s_inputs = _inputs(s_flow, s_transport)
        sce = _engine_rates(s_inputs, s_start, nsteps, reps, two, note, "scenario")
        rk4 = dataclasses.replace(s_transport, scheme="rk4")
        note("scenario workload with RK4, 1 thread")
        numba.set_num_threads(1)
        rk4_inputs = _inputs(s_flow, rk4)
        rk4_wall, _, _ = _rate(rk4_inputs, s_start, nsteps, reps)
        note("numpy twin, scenario workload")
        s_twin = _rate(s_inputs, s_start, twin_steps, 1, "reference")[2]
        c_flow, c_transport = curvilinear_workload()
        c_start = initial_state(n, c_flow)
        c_inputs = _inputs(c_flow, c_transport)
        cur = _engine_rates(c_inputs, c_start, nsteps, reps, two, note, "curvilinear")
        note("reference workload with K on the grid, 1 thread")
        g_flow, g_transport = gridded_workload()
        numba.set_num_threads(1)
        g_inputs = _inputs(g_flow, g_transport)
        gridded_wall, _, _ = _rate(g_inputs, start, nsteps, reps)
        m_flow, m_transport = mesh_workload()
        m_start = initial_state(n, m_flow)
        m_inputs = mesh_inputs.mesh_kernel_inputs(
            m_flow, m_flow.window(0.0, float(m_flow.times[-1])), m_transport
        )
        note("compiled engine, mesh workload, 1 thread")
        mesh_inputs.locate_particles(m_flow, m_start)
        mover.advance(m_start.copy(), m_inputs, 0.0, DT, 2, 0, KEY)
        mesh_wall, mesh_cpu, _ = _rate(m_inputs, m_start, nsteps, reps)
        note("compiled engine, three-dimensional workload, 1 thread")
        t_inputs, t_start = threed_workload(flow, transport, start)
        threed_wall, _, _ = _rate(t_inputs, t_start, nsteps, reps)
        note("numpy twin, curvilinear workload")
        numba.set_num_threads(1)
        c_twin = _rate(c_inputs, c_start, twin_steps, 1, "reference")[2]
        note("ratios to the reference workload, back-to-back pairs, 1 thread")
        base = (inputs, start)
        pairs = max(reps, 7)
        ratio = {
            name: _paired_ratios(base, other, nsteps, pairs)
            for name, other in (
                ("scenario", (s_inputs, s_start)),
                ("curvilinear", (c_inputs, c_start)),
                ("mesh", (m_inputs, m_start)),
                ("threed", (t_inputs, t_start)),
            )
        }
        rk4_speed = _paired_ratios((s_inputs, s_start), (rk4_inputs, s_start), nsteps, pairs)
        gridded_speed = _paired_ratios(
            (g_inputs, start),
            (c_inputs, c_start),
            nsteps,
            pairs,
        )
        note("1 -> 2 threads, back-to-back pairs, and a compute-only loop the same way")
        compute_speedup = _compute_speedup(two, pairs)
        speedup = {
            name: _paired_ratios(pair, pair, nsteps, pairs, threads=(1, two))[0]
            for name, pair in (("reference", base), ("scenario", (s_inputs, s_start)))
        }
    finally:
        numba.set_num_threads(threads_before)
    difference = _largest_difference(inputs, start, twin_steps, twin_out)
    s_difference = _largest_difference(s_inputs, s_start, twin_steps, s_twin)
    c_difference = _largest_difference(c_inputs, c_start, twin_steps, c_twin)
    moved = ref["moved"]
    note("gridding")
    gridding, concentration = _gridding_rates(flow, moved, max(reps, 5))
    note("first step on a warm cache (child processes)")
    first, first_wall = _first_step_times(min(reps, 2 if quick else 3))
    note(f"peak memory of {n_mem:,} particles (child process)")
    peak, peak_10m, method = _peak_memory(n_mem)
    return {
        "walkers_version": walkers.__version__,
        "caution": walkers.CAUTION,
        "machine": _machine(load_before, compute_speedup),
        "workload": _workload(flow, transport, n, nsteps, twin_steps, reps),
        "scenario_workload": _workload(s_flow, s_transport, n, nsteps, twin_steps, reps),
        "compiled_steps_per_s_1thread": ref["one_wall"],
        "compiled_steps_per_cpu_s_1thread": ref["one_cpu"],
        "compiled_steps_per_s_2threads": ref["two_wall"],
        "threads_used_for_2": two,
        "numpy_steps_per_s": twin_wall,
        "numpy_steps_per_cpu_s": twin_cpu,
        "compiled_over_numpy": ref["one_wall"] / twin_wall,
        "compiled_over_numpy_cpu": ref["one_cpu"] / twin_cpu,
        "speedup_1_to_2_threads": speedup["reference"],
        "compiled_minus_numpy_max_m": difference,
        "scenario_steps_per_s_1thread": sce["one_wall"],
        "scenario_steps_per_cpu_s_1thread": sce["one_cpu"],
        "scenario_steps_per_s_2threads": sce["two_wall"],
        "ratio_pairs": pairs,
        "scenario_over_reference": ratio["scenario"][0],
        "scenario_over_reference_cpu": ratio["scenario"][1],
        "scenario_speedup_1_to_2_threads": speedup["scenario"],
        "scenario_rk4_steps_per_s_1thread": rk4_wall,
        "rk4_over_euler_cost": 1.0 / rk4_speed[0],
        "rk4_over_euler_cost_cpu": 1.0 / rk4_speed[1],
        "scenario_compiled_minus_numpy_max_m": s_difference,
        "curvilinear_workload": _workload(c_flow, c_transport, n, nsteps, twin_steps, reps),
        "curvilinear_steps_per_s_1thread": cur["one_wall"],
        "curvilinear_steps_per_cpu_s_1thread": cur["one_cpu"],
        "curvilinear_steps_per_s_2threads": cur["two_wall"],
        "curvilinear_over_reference": ratio["curvilinear"][0],
        "curvilinear_over_reference_cpu": ratio["curvilinear"][1],
        "curvilinear_compiled_minus_numpy_max_cells": c_difference,
        "gridded_steps_per_s_1thread": gridded_wall,
        "mesh_steps_per_s_1thread": mesh_wall,
        "mesh_steps_per_cpu_s_1thread": mesh_cpu,
        "mesh_over_reference": ratio["mesh"][0],
        "mesh_over_reference_cpu": ratio["mesh"][1],
        "threed_steps_per_s_1thread": threed_wall,
        "threed_over_reference": ratio["threed"][0],
        "threed_over_reference_cpu": ratio["threed"][1],
        "curvilinear_over_gridded": gridded_speed[0],
        "curvilinear_over_gridded_cpu": gridded_speed[1],
        "bytes_per_particle": start.nbytes // len(start),
        "peak_memory_10m_bytes": peak_10m,
        "peak_memory_method": method,
        "peak_memory_measured_particles": n_mem,
        "peak_memory_measured_bytes": float(peak["peak_bytes"]),
        "gridding_particles_per_s": gridding,
        "concentration_particles_per_s": concentration,
        "first_step_warm_s": statistics.median(first),
        "first_step_warm_wall_s": statistics.median(first_wall),
        "peak_memory_this_process_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
    }
