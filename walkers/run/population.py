"""Several members of an ensemble moved as one particle population, reduced member by member.

Members that share the flow and the transport differ only in per-particle values: where and when
their particles enter the water, their masses (all in :class:`~walkers.engine.state.ParticleState`
already) and a factor on the dispersion coefficients and their drift
(``ParticleState.dispersion_multiplier``). They are therefore one population: member b holds the
contiguous particles ``bounds[b]:bounds[b + 1]``, one kernel call per output interval moves all
of them (:func:`walkers.run.simulate._advance_interval`, as for a single run), and at each output
time each member is reduced on its own — its concentration field, receptor values and mass budget,
and in three dimensions its depth bands and deposit, by the same functions as a single run
(:mod:`walkers.run.reduce`, :func:`walkers.run.accumulate_column.column_fields`) — and handed to
callbacks that fold it into running sums. Nothing of size members × cells × times is kept here.

Each member's particles are placed by the member's own release generator
(``run_streams(seed, member)``), so a member starts exactly as its own run would. The random walk
of the population draws from one key, that of its first member, with the particle's index in the
population (the counter-based generator of :mod:`walkers.engine.kernels` hashes key, particle and
step): different from the streams of the members' separate runs, the same for any number of
threads.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import xarray as xr

from walkers.engine.randomness import run_streams
from walkers.engine.state import ParticleState
from walkers.fields.base import FlowField, centre_to_edges
from walkers.run import reduce
from walkers.run.accumulate import _result_coordinates
from walkers.run.accumulate_column import column_fields, column_settings
from walkers.run.simulate import (
    _advance_interval,
    _check_window,
    _particle_depths_at,
    _substeps,
    check_budget_precision,
    enter_water,
    output_times,
    physical_view,
    released_particles,
)
from walkers.scenario.column_output import ColumnOutput
from walkers.scenario.config import OutputGrid, Receptor, Release, Transport

#: Called at each output time for each member: (output index, member's place in the population,
#: concentration (ny, nx) kg m-3, receptor values (nrec,) kg m-3, mass budget as
#: :func:`walkers.run.reduce.mass_budget` gives it).
MemberOutput = Callable[[int, int, np.ndarray, np.ndarray, dict], None]
#: Called at each output time for each member of a three-dimensional population: (output index,
#: member's place in the population, concentration in each depth band (bands, ny, nx) kg m-3,
#: deposit on the bed (ny, nx) kg m-2 or None), as :func:`column_fields` gives them.
MemberColumnOutput = Callable[[int, int, np.ndarray, np.ndarray | None], None]


@dataclass
class Population:
    """The particles of several members: member b holds particles ``bounds[b]:bounds[b + 1]``.

    owner : index into ``releases`` (every member's releases, member after member) per particle.
    """

    particles: ParticleState
    owner: np.ndarray
    bounds: np.ndarray
    releases: list[Release]

    @property
    def members(self) -> int:
        return len(self.bounds) - 1

    def member(self, state: ParticleState, b: int) -> ParticleState:
        """Member b's particles of ``state`` (this population or a view of it), as views."""
        lo, hi = int(self.bounds[b]), int(self.bounds[b + 1])
        parts = {k: v[lo:hi] for k, v in state.arrays().items()}
        return ParticleState(**parts)


def make_population(
    member_releases: Sequence[Sequence[Release]],
    multipliers: Sequence[float],
    members: Sequence[int],
    seed: int,
    flow: FlowField,
    transport: Transport | None = None,
) -> Population:
    """The population of ``members`` (their numbers in the ensemble), member m releasing
    ``member_releases[i]`` (times in the flow's seconds) with dispersion ``multipliers[i]``; each
    member's particles are placed by its own release generator, as in its own run (in their
    water columns too when ``transport.vertical`` is set: heights and settling velocities are
    carried per particle like the multiplier)."""
    parts: list[ParticleState] = []
    owners: list[np.ndarray] = []
    releases: list[Release] = []
    for rels, member in zip(member_releases, members, strict=True):
        particles, owner = released_particles(rels, flow, run_streams(seed, member)[1], transport)
        parts.append(particles)
        owners.append(owner + len(releases))
        releases += list(rels)
    sizes = np.array([len(p) for p in parts])
    bounds = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    state = ParticleState(
        **{k: np.concatenate([p.arrays()[k] for p in parts]) for k in parts[0].arrays()},
        dispersion_multiplier=np.repeat(np.asarray(multipliers, dtype=np.float64), sizes),
    )
    return Population(state, np.concatenate(owners), bounds, releases)


def simulate_population(
    flow: FlowField,
    transport: Transport,
    population: Population,
    on_output: MemberOutput,
    *,
    start: float,
    end: float,
    output_interval: float,
    output_grid: OutputGrid,
    receptors: Sequence[Receptor],
    walk_key: int,
    time_step_check: Literal["fail", "substep", "warn", "off"] = "fail",
    stepper: Literal["fast", "reference"] = "fast",
    column_output: ColumnOutput | None = None,
    on_column: MemberColumnOutput | None = None,
) -> np.ndarray:
    """Move the population from ``start`` to ``end`` (s, flow frame) and call ``on_output`` for
    each member at each output time (see :data:`MemberOutput`); return the output times (s).
    In a three-dimensional run, also ``on_column`` with the member's depth bands and deposit
    (:data:`MemberColumnOutput`) of the water-column outputs ``column_output`` as a single run
    makes them (:func:`~walkers.run.accumulate_column.column_settings`).

    The time step is checked (and sub-stepped) for the member with the largest dispersion
    multiplier, so every member moves with the steps the most demanding one needs.
    """
    times = output_times(start, end, output_interval, transport.dt)
    _check_window(flow, start, end)
    particles = population.particles
    multipliers = particles.dispersion_multiplier
    largest = float(multipliers.max()) if multipliers is not None and len(multipliers) else 1.0
    d = transport.dispersion
    checked = dataclasses.replace(
        transport, dispersion=dataclasses.replace(d, multiplier=d.multiplier * largest)
    )
    substeps = _substeps(flow, checked, start, end, time_step_check)
    dt = transport.dt / substeps
    steps = int(round(output_interval / dt))
    check_budget_precision(len(particles), steps * (len(times) - 1), transport.decay_rate, dt)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    measure = reduce.cell_measure(output_grid, flow.geographic, flow.ndim)
    no_receptors = np.zeros(0)
    settings = None
    if on_column is not None and transport.vertical is not None:
        settings = column_settings(column_output, transport.vertical)
    for k in range(len(times)):
        t = float(times[k])
        if k > 0:
            _advance_interval(
                particles,
                population.owner,
                population.releases,
                flow,
                transport,
                float(times[k - 1]),
                t,
                dt,
                steps,
                (k - 1) * steps,
                walk_key,
                stepper,
            )
        enter_water(particles, t)
        depths = _particle_depths_at(particles, flow, t, xe, ye)
        seen = physical_view(particles, flow)
        for b in range(population.members):
            mine = population.member(seen, b)
            h = depths[population.bounds[b] : population.bounds[b + 1]]
            conc, _ = reduce.concentration(mine, h, output_grid, measure)
            values = no_receptors
            if receptors:
                values = reduce.receptor_values(
                    mine, h, receptors, conc, output_grid, flow.geographic, flow.ndim
                )
            on_output(k, b, conc, values, reduce.mass_budget(mine))
            if settings is not None and on_column is not None:
                on_column(k, b, *column_fields(mine, h, settings, output_grid, measure))
    return times


def result_frame(
    times: np.ndarray, flow: FlowField, grid: OutputGrid, receptors: Sequence[Receptor]
) -> xr.Dataset:
    """The coordinates of a run's result (times, cells, receptors, the edges' bearings) and the
    attributes that describe its flow, with no data: what an ensemble's result is built on."""
    geo = flow.geographic
    xunits, yunits = ("degrees_east", "degrees_north") if geo else ("m", "m")
    coords = _result_coordinates(times, flow, grid, receptors, xunits, yunits)
    attrs = {"crs_wkt": flow.crs_wkt or "", "geographic": int(geo), "source": flow.source}
    return xr.Dataset(coords=coords, attrs=attrs).drop_vars("edge")
