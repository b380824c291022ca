"""Run one simulation: release particles, move them through the flow, reduce at output times.

This is the Python entry point of a single run; the command line and the ensemble call it. It
returns an :class:`xarray.Dataset` (layout in ``docs/outputs.md``) holding the concentration
fields, receptor series, mass budget and cloud moments at every output time.

Memory does not grow with the length of a run: the 3-D fields (concentration, particle counts,
smoothed concentration) of a run whose fields would exceed
:data:`walkers.run.store.FIELD_MEMORY_BUDGET` go to a temporary file as each output time is computed
(:class:`walkers.run.store.DiskFields`), and the returned Dataset reads them lazily (dask, one chunk
per output time), so :func:`walkers.outputs.writer.write_results` streams them to the output file.
The maximum concentration is kept as a running maximum; the series over time (budget, receptors,
moments, sampled tracks) are small and stay in memory.

Guards on the way (each names the time and, where there is one, the place):

- every window of flow frames is checked for non-finite velocity in wet cells before particles
  move through it (flow readers check their files; this catches any other flow source);
- after every call of the engine, a non-finite particle position stops the run with
  :class:`~walkers.errors.RunFailure`;
- a run whose mass budget could not hold to :data:`BUDGET_PRECISION` is refused at the door
  (see :func:`check_budget_precision`);
- the engine is called for at most :data:`PARTICLE_STEPS_PER_CALL` particle-steps at a time, so
  Ctrl-C (or SIGTERM turned into KeyboardInterrupt) is handled promptly between calls.
"""

from __future__ import annotations

import dataclasses
import math
import os
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import xarray as xr

from walkers.engine import mesh_inputs, mover
from walkers.engine.randomness import run_streams
from walkers.engine.releases import make_particles
from walkers.engine.state import IN_WATER, WAITING, ParticleState
from walkers.engine.timestep import check_time_step
from walkers.errors import InputError, RunFailure
from walkers.fields.base import FlowField, FlowWindow, centre_to_edges
from walkers.fields.geo import metres_per_degree
from walkers.fields.mesh_field import is_mesh_flow
from walkers.run import column, reduce
from walkers.run.accumulate import _Accumulator, _field_variables
from walkers.run.accumulate_column import column_settings
from walkers.run.store import FieldMode, field_store
from walkers.scenario.column_output import ColumnOutput
from walkers.scenario.config import OutputGrid, Receptor, Release, Transport

ProgressCallback = Callable[[float, float, int], None]

#: Unit roundoff of IEEE 754 binary64 arithmetic, 2**-53.
UNIT_ROUNDOFF = 2.0**-53
#: Relative precision (of the mass released) to which the mass budget must close and the decayed
#: mass be known.
BUDGET_PRECISION = 1e-9
#: Most steps of a run with decay. Each step multiplies every particle's mass by the rounded factor
#: exp(-k dt) and rounds the product, so after S steps the relative error of a particle's mass is
#: at most about 2 S u (u = :data:`UNIT_ROUNDOFF`; the factor's own rounding repeats, so the errors
#: add up rather than average out; Higham 2002, Accuracy and Stability of Numerical Algorithms,
#: 2nd ed., §3.1, from memory). 2 S u <= 1e-9 gives S <= 4.5e6 steps.
MAX_DECAY_STEPS = int(BUDGET_PRECISION / (2.0 * UNIT_ROUNDOFF))
#: Most particle-steps handed to the engine in one call: about 0.1 s at the design speed of 40 M
#: particle-steps per second. Python handles signals only between calls, so this bounds the delay
#: of Ctrl-C. Runs with fewer particle-steps per output interval make one call per interval.
PARTICLE_STEPS_PER_CALL = 4_000_000


@dataclass
class RunState:
    """Everything needed to continue a run: the particles, the index of the next output and the
    reductions recorded so far."""

    particles: ParticleState
    owner: np.ndarray
    next_output: int
    results: _Accumulator


def _check_window(flow: FlowField, start: float, end: float) -> None:
    if flow.steady:
        return
    lo, hi = float(flow.times[0]), float(flow.times[-1])
    if start < lo - 1e-6 or end > hi + 1e-6:
        raise InputError(
            f"the run [{start:g} s, {end:g} s] lies outside the flow frames [{lo:g} s, {hi:g} s] "
            f"({flow.time_units}); shorten the run or supply frames that cover it"
        )


def check_budget_precision(particles: int, steps: int, decay_rate: float, dt: float) -> None:
    """Refuse a run whose mass budget could not hold to :data:`BUDGET_PRECISION` (relative).

    Two sources of rounding error (u = 2**-53):

    - the budget's terms are float64 sums over at most N particles; numpy sums pairwise, with a
      relative error below about (log2 N + 16) u (Higham 2002, §4.2, from memory): below 5e-15
      for the N <= 1e8 particles a run may hold (:data:`walkers.scenario.MAX_PARTICLES`, which
      memory sets, not precision);
    - with decay, each particle's mass is multiplied once per step: after S steps its relative
      error is at most about 2 S u, so S is capped at :data:`MAX_DECAY_STEPS` (4.5e6).

    particles, steps : the run's particle count and number of steps of ``dt`` seconds.

    Raises InputError naming the count and what to change.
    """
    from walkers.scenario.keys import MAX_PARTICLES

    if particles > MAX_PARTICLES:
        raise InputError(
            f"releases: {particles} particles in all; at most {MAX_PARTICLES:.0e} per run "
            "(memory and the precision of the mass budget); use fewer particles or an ensemble"
        )
    if decay_rate > 0.0 and steps > MAX_DECAY_STEPS:
        raise InputError(
            f"run.time_step: this run with decay takes {steps} steps; rounding in the per-step "
            f"decay of each particle's mass (up to 2 x 2^-53 a step) could then exceed "
            f"{BUDGET_PRECISION:g} of the mass budget, so at most {MAX_DECAY_STEPS} steps are "
            f"allowed; use a time step of at least {math.ceil(steps * dt / MAX_DECAY_STEPS)} s "
            f"(this one is {dt:g} s, after any sub-steps) or a shorter run"
        )


def _when(flow: FlowField, t: float) -> str:
    """Time ``t`` (s, flow frame) as ISO 8601 for messages; seconds if the units are unusual."""
    from walkers.fields.times import iso_times

    try:
        stamp = xr.DataArray(
            [t], dims="time", attrs={"units": flow.time_units, "calendar": flow.calendar}
        )
        return iso_times(stamp)[0]
    except (InputError, ValueError, TypeError):
        return f"{t:g} s ({flow.time_units})"


def _cells_of(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the cells on either side of each point (the same cell unless on an edge)."""
    edges = centre_to_edges(centres)
    top = centres.size - 1
    left = np.clip(np.searchsorted(edges, points, side="left") - 1, 0, top)
    right = np.clip(np.searchsorted(edges, points, side="right") - 1, 0, top)
    return left, right


def check_window_velocity(flow: FlowField, window: FlowWindow) -> None:
    """Raise InputError naming variable, place and frame time of any non-finite velocity that
    lies in a wet cell (on a cell edge: between two wet cells) of the window's frames."""
    for var, frames in ((flow.u, window.u), (flow.v, window.v)):
        if np.isfinite(frames).all():
            continue
        il, ir = _cells_of(var.x, flow.x)
        jl, jr = _cells_of(var.y, flow.y)
        for f in range(frames.shape[0]):
            wet = window.wet[min(f, window.wet.shape[0] - 1)] > 0
            inside = wet[np.ix_(jl, il)] & wet[np.ix_(jr, ir)] & wet[np.ix_(jl, ir)]
            inside &= wet[np.ix_(jr, il)]
            bad = ~np.isfinite(frames[f]) & inside
            if bad.any():
                j, i = (int(n[0]) for n in np.nonzero(bad))
                t = float(
                    window.times[f] if frames.shape[0] == window.times.size else window.times[0]
                )
                raise InputError(
                    f"flow {flow.source!r}: velocity {var.name or 'u/v'!r} is {frames[f, j, i]} "
                    f"at x={var.x[i]:.10g}, y={var.y[j]:.10g} in the frame at {_when(flow, t)}, "
                    "where the cell is wet; fix the flow there, or mark the cell as land or dry"
                )


def _check_positions(
    particles: ParticleState,
    owner: np.ndarray,
    releases: Sequence[Release],
    flow: FlowField,
    t0: float,
    t1: float,
) -> None:
    """Raise RunFailure if a particle position became NaN or infinite between t0 and t1 (s)."""
    bad = ~(np.isfinite(particles.x) & np.isfinite(particles.y))
    if not bad.any():
        return
    p = int(np.flatnonzero(bad)[0])
    raise RunFailure(
        f"{int(bad.sum())} particle(s) got a non-finite position while moving between "
        f"{_when(flow, t0)} and {_when(flow, t1)} (first: particle {p} of release "
        f"{releases[int(owner[p])].name!r}); the flow, depth or dispersion met there is not "
        "finite. Check the flow with 'walkers inspect' and the dispersion coefficients; "
        "nothing was written"
    )


def output_times(start: float, end: float, interval: float, dt: float) -> np.ndarray:
    """Output times (s) from start to end every interval; interval must be a multiple of dt."""
    if not end > start:
        raise InputError(f"run end ({end:g} s) must be after its start ({start:g} s)")
    ratio = interval / dt
    if abs(ratio - round(ratio)) > 1e-9 * ratio or round(ratio) < 1:
        raise InputError(
            f"output interval {interval:g} s must be a whole multiple of the time step {dt:g} s"
        )
    n = (end - start) / interval
    if abs(n - round(n)) > 1e-9 * max(n, 1):
        short = (end - start) - math.floor(n) * interval
        raise InputError(
            f"run length {end - start:g} s (run.end - run.start) must be a whole multiple of the "
            f"output interval {interval:g} s (run.output_interval); end the run {short:g} s "
            f"earlier or {interval - short:g} s later"
        )
    return float(start) + float(interval) * np.arange(int(round(n)) + 1, dtype=np.float64)


def simulate(
    flow: FlowField,
    transport: Transport,
    releases: Sequence[Release],
    *,
    start: float,
    end: float,
    output_interval: float,
    output_grid: OutputGrid,
    receptors: Sequence[Receptor] = (),
    seed: int = 0,
    member: int | None = None,
    tracks: int = 0,
    time_step_check: Literal["fail", "substep", "warn", "off"] = "fail",
    stepper: Literal["fast", "reference"] = "fast",
    progress: ProgressCallback | None = None,
    title: str = "",
    scenario_text: str = "",
    resume: RunState | None = None,
    on_output: Callable[[RunState], None] | None = None,
    fields: FieldMode = "auto",
    field_folder: str | os.PathLike | None = None,
    column_output: ColumnOutput | None = None,
) -> xr.Dataset:
    """Run one simulation and return its result Dataset.

    Parameters
    ----------
    flow : the flow field (from a reader or an analytic flow).
    transport : time step, scheme, dispersion, decay and edges.
    releases : what is released where and when (times in the flow's seconds).
    start, end : run window (s, in the flow's time frame ``flow.time_units``).
    output_interval : time between outputs (s), a whole multiple of ``transport.dt``.
    output_grid : where concentration is estimated.
    receptors : places where concentration is recorded at every output time.
    seed : the run's seed; ``member`` selects an ensemble member's independent streams.
    tracks : number of particles whose positions are kept at every output time.
    time_step_check : on a too-long time step, fail, sub-step, warn, or skip the check.
    stepper : "fast", the compiled kernels, or their numpy twin (same numbers, slower).
    progress : called as progress(simulated seconds, total seconds, particles in water).
    resume : continue from a saved :class:`RunState` (same arguments otherwise).
    on_output : called with the :class:`RunState` after each output time (for checkpoints).
    fields : where the 3-D fields are kept while the run goes on: ``"memory"``, ``"disk"``
        (streamed to a temporary file and returned as lazy dask arrays), or ``"auto"`` (on disk when
        they would exceed :data:`walkers.run.store.FIELD_MEMORY_BUDGET`). A resumed run keeps the
        store of its saved state. The values are the same either way.
    field_folder : where an on-disk store makes its temporary folder (default: the system's
        temporary folder). It is removed if the run fails or is interrupted, and otherwise when
        the returned Dataset (and everything read lazily from it) is dropped, or at exit.
    column_output : in a three-dimensional run (``transport.vertical``), the water-column outputs
        (depth bands, profiles at receptors, a section; the defaults of
        :class:`~walkers.scenario.column_output.ColumnOutput` when None); unused in depth-averaged
        runs.
    """
    if not releases:
        raise InputError("no releases: a run needs at least one release")
    times = output_times(start, end, output_interval, transport.dt)
    _check_window(flow, start, end)
    substeps = _substeps(flow, transport, start, end, time_step_check)
    dt = transport.dt / substeps
    steps_per_output = int(round(output_interval / dt))
    check_budget_precision(
        sum(int(r.particles) for r in releases),
        steps_per_output * (len(times) - 1),
        transport.decay_rate,
        dt,
    )
    walk_key, release_rng = run_streams(seed, member)
    shape = (len(times), output_grid.ny, output_grid.nx)
    settings = None
    if transport.vertical is not None:
        settings = column_settings(column_output, transport.vertical)
    variables = _field_variables(output_grid, settings)
    if resume is None:
        particles, owner = released_particles(releases, flow, release_rng, transport)
        first = 0
        store = field_store(shape, variables, fields, field_folder)
        edges = len(flow.kind().edge_names)
        acc = _Accumulator(
            len(times), output_grid, len(receptors), tracks, store, edges, column=settings
        )
    else:
        _check_resume(resume, shape, variables, len(times))
        particles, owner, first = resume.particles, resume.owner, resume.next_output
        acc = resume.results
        acc.resume_column(settings)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    measure = reduce.cell_measure(output_grid, flow.geographic, flow.ndim)
    mpu = _metres_per_unit(flow, None)
    track_index = (
        np.linspace(0, len(particles) - 1, tracks).round().astype(np.int64) if tracks else None
    )
    try:
        for k in range(first, len(times)):
            t = float(times[k])
            if k > 0:
                t_prev = float(times[k - 1])
                step0 = (k - 1) * steps_per_output
                _advance_interval(
                    particles,
                    owner,
                    releases,
                    flow,
                    transport,
                    t_prev,
                    t,
                    dt,
                    steps_per_output,
                    step0,
                    walk_key,
                    stepper,
                )
            enter_water(particles, t)
            depths = _particle_depths_at(particles, flow, t, xe, ye)
            seen = physical_view(particles, flow)
            conc, count = reduce.concentration(seen, depths, output_grid, measure)
            acc.record(k, seen, depths, conc, count, receptors, output_grid, flow, mpu, track_index)
            if progress is not None:
                progress(t - start, end - start, int(acc.in_water[k]))
            if on_output is not None:
                on_output(RunState(particles, owner, k + 1, acc))
        return acc.dataset(
            times, flow, output_grid, receptors, releases, seed, member, title, scenario_text
        )
    except BaseException:
        # a failed or interrupted run leaves no temporary files (a checkpoint keeps its own)
        acc.fields.discard()
        raise


def released_particles(
    releases: Sequence[Release],
    flow: FlowField,
    release_rng: np.random.Generator,
    transport: Transport | None = None,
) -> tuple[ParticleState, np.ndarray]:
    """The particles of ``releases`` placed with ``release_rng`` (in the engine's coordinates),
    and the index of each particle's release; in a three-dimensional run (``transport.vertical``)
    also placed in their water columns (:func:`walkers.run.column.place_in_columns`)."""
    centre = np.mean([np.atleast_2d(r.coords)[0] for r in releases], axis=0)
    particles, owner = make_particles(releases, release_rng, _metres_per_unit(flow, centre[1]))
    _to_engine_coordinates(particles, owner, releases, flow)
    if transport is not None and transport.vertical is not None:
        column.check_column_flow(flow, transport.vertical)
        column.place_in_columns(particles, owner, releases, flow, release_rng)
    return particles, owner


def _metres_per_unit(flow: FlowField, y: float | None) -> tuple[float, float]:
    """Metres per unit of the scenario's coordinates along x and y: 1 on projected grids, the
    WGS84 radii of curvature on geographic ones, at the grid row nearest ``y`` (degrees north),
    or their mean over the grid when ``y`` is None."""
    if not flow.geographic:
        return 1.0, 1.0
    if is_mesh_flow(flow):
        g = flow.grid.geometry
        rows = flow.grid.to_physical(g.node_x, g.node_y)[1] if y is None else np.array([float(y)])
        mx, my = metres_per_degree(rows)
        return float(mx.mean()), float(my.mean())
    if flow.curvilinear:
        rows = flow.grid.centres()[1].ravel() if y is None else np.array([float(y)])
        mx, my = metres_per_degree(rows)
        return float(mx.mean()), float(my.mean())
    mx, my = metres_per_degree(flow.y)
    if y is None:
        return float(mx.mean()), float(my.mean())
    j = int(np.clip(np.searchsorted(flow.y, y), 0, flow.y.size - 1))
    return float(mx[j]), float(my[j])


def _to_engine_coordinates(
    particles: ParticleState, owner: np.ndarray, releases: Sequence[Release], flow: FlowField
) -> None:
    """Particle positions from the scenario's coordinates to the engine's (index space on a
    curvilinear grid; nothing to do on a rectilinear one). A release outside the grid is an
    InputError naming it."""
    if is_mesh_flow(flow):
        inside = flow.grid.locate(particles.x, particles.y) >= 0
        particles.x[:], particles.y[:] = flow.grid.to_engine(particles.x, particles.y)
        if not inside.all():
            p = int(np.flatnonzero(~inside)[0])
            raise InputError(
                f"release {releases[int(owner[p])].name!r}: {int((~inside).sum())} particle(s) "
                f"start outside the mesh (first at x={particles.x[p]:.10g}, "
                f"y={particles.y[p]:.10g}); move the release into the mesh's faces"
            )
        mesh_inputs.locate_particles(flow, particles)
        return
    if not flow.curvilinear:
        return
    a, b = flow.grid.to_engine(particles.x, particles.y)
    outside = ~np.isfinite(a)
    if outside.any():
        p = int(np.flatnonzero(outside)[0])
        raise InputError(
            f"release {releases[int(owner[p])].name!r}: {int(outside.sum())} particle(s) start "
            f"outside the curvilinear grid (first at x={particles.x[p]:.10g}, "
            f"y={particles.y[p]:.10g}); move the release into the grid's cells"
        )
    particles.x[:], particles.y[:] = a, b


def physical_view(particles: ParticleState, flow: FlowField) -> ParticleState:
    """The particles with positions in the scenario's coordinates (the particles themselves on
    a rectilinear grid or a projected mesh; a copy of the positions mapped out of index space on
    a curvilinear grid, or out of a lon/lat mesh's local projection)."""
    if not (flow.curvilinear or (is_mesh_flow(flow) and flow.geographic)):
        return particles
    x, y = flow.grid.to_physical(particles.x, particles.y)
    return dataclasses.replace(particles, x=x, y=y)


def enter_water(particles: ParticleState, t: float) -> None:
    """Particles released at or before time ``t`` (s) that still wait enter the water now, so
    the output at ``t`` holds them (a release at an output time is in that output). The engine's
    next step then moves them from ``t``, as it would have from their release time."""
    waiting = particles.status == WAITING
    particles.status[waiting & (particles.release_time <= t)] = IN_WATER


def _substeps(
    flow: FlowField,
    transport: Transport,
    start: float,
    end: float,
    time_step_check: Literal["fail", "substep", "warn", "off"],
) -> int:
    """Sub-steps per time step: the transport's, or more when the time-step check asks for them
    (``"substep"``); ``"fail"`` raises and ``"warn"`` warns on a too-long time step instead."""
    substeps = int(transport.substeps)
    if time_step_check != "off":
        report = check_time_step(flow, transport, start, end)
        if not report.ok:
            if time_step_check == "fail":
                raise InputError(report.message())
            if time_step_check == "substep":
                substeps = max(substeps, report.substeps_needed)
            else:
                warnings.warn(report.message(), stacklevel=3)
    return substeps


def _check_resume(
    resume: RunState, shape: tuple[int, int, int], variables: dict[str, type], outputs: int
) -> None:
    """InputError unless a saved run state fits this run's output times and grid."""
    first = resume.next_output
    saved = resume.results.fields
    if saved.shape != shape or set(saved.variables) != set(variables) or not 0 < first <= outputs:
        raise InputError(
            "the saved run state does not fit this run (different output times or grid); "
            "start the run afresh"
        )


def _advance_interval(
    particles: ParticleState,
    owner: np.ndarray,
    releases: Sequence[Release],
    flow: FlowField,
    transport: Transport,
    t_prev: float,
    t: float,
    dt: float,
    steps: int,
    step0: int,
    walk_key: int,
    stepper: Literal["fast", "reference"],
) -> None:
    """Move the particles through the output interval from ``t_prev`` to ``t`` in ``steps`` steps
    of ``dt`` (the first numbered ``step0``), in calls of at most :data:`PARTICLE_STEPS_PER_CALL`
    particle-steps, checking positions after each call."""
    window = flow.window(t_prev, t)
    if is_mesh_flow(flow):
        inputs = mesh_inputs.mesh_kernel_inputs(flow, window, transport)
    else:
        check_window_velocity(flow, window)
        inputs = mover.kernel_inputs(flow, window, transport)
    if transport.vertical is not None:
        inputs = column.column_inputs(inputs, flow, window, transport.vertical, dt)
    per_call = max(1, PARTICLE_STEPS_PER_CALL // max(len(particles), 1))
    for s in range(0, steps, per_call):
        n = min(per_call, steps - s)
        t_call = t_prev + s * dt
        mover.advance(particles, inputs, t_call, dt, n, step0 + s, walk_key, stepper)
        _check_positions(particles, owner, releases, flow, t_call, t_call + n * dt)


def _particle_depths_at(
    particles: ParticleState, flow: FlowField, t: float, xe: np.ndarray, ye: np.ndarray
) -> np.ndarray:
    """The water depth (m) at each particle at time ``t``: the flow frame nearest in time (only
    the depth's frames are read)."""
    i0, i1 = flow.frame_range(t, t)
    depth = flow.depth.frames(i0, i1)
    times = flow.times[i0 : i1 + 1]
    frame = 0 if depth.shape[0] == 1 else int(np.argmin(np.abs(times - t)))
    if is_mesh_flow(flow):
        return mesh_inputs.depths_at(flow, depth[frame], particles)
    return reduce.particle_depths(particles, depth[frame], xe, ye)
