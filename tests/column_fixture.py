"""A small three-dimensional result made by the run's accumulator from particles placed by hand
(``ParticleState.in_column``), for the output, file and figure tests of the water-column outputs.

A cloud of 6 000 particles of 0.05 kg about (200 m, 0 m), inside the output grid, in water 6 m
deep on an invented projected grid (EPSG:32631): heights above the bed exponential with a 1.5 m
scale, a growing share of the particles on the bed (10 %, 20 %, ... at the output times), two
receptors (a circle and an output cell), a section along a bent line and four sampled tracks.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from pyproj import CRS

from walkers.engine.state import IN_WATER, ON_BED, ParticleState
from walkers.fields.analytic import analytic_flow
from walkers.fields.base import centre_to_edges
from walkers.run import reduce
from walkers.run.accumulate import _Accumulator, _field_variables
from walkers.run.store import field_store
from walkers.scenario.column_output import ColumnOutput, DepthBand, SectionLine
from walkers.scenario.config import OutputGrid, Receptor

DEPTH = 6.0  # m
PARTICLES = 6_000
MASS = 0.05  # kg a particle
GRID = OutputGrid(x0=5.0, dx=10.0, nx=40, y0=-195.0, dy=10.0, ny=40)
RECEPTORS = [Receptor("jetty", 200.0, 0.0, 25.0), Receptor("gauge", 240.0, 10.0, 0.0)]
COLUMN = ColumnOutput(
    bands=(
        DepthBand("surface", "surface", 0.0, 1.0),
        DepthBand("bottom", "bed", 0.0, 1.0),
        DepthBand("whole_column", "column"),
    ),
    levels=6,
    section=SectionLine(
        "channel", np.array([[110.0, -20.0], [200.0, 0.0], [290.0, 40.0]]), 20.0, 15.0
    ),
)


def column_flow():
    """A still basin 6 m deep, 400 m x 400 m, on a projected CRS."""
    flow = analytic_flow(
        "uniform", x_range=(0.0, 400.0), y_range=(-200.0, 200.0), nx=41, ny=41, depth=DEPTH
    )
    return dataclasses.replace(flow, crs_wkt=CRS.from_epsg(32631).to_wkt())


def column_results(
    nt: int = 4, fields: str = "memory", column: ColumnOutput | None = COLUMN, tracks: int = 4
):
    """(result Dataset, accumulator, flow) of ``nt`` output times an hour apart."""
    flow = column_flow()
    times = np.arange(nt) * 3600.0
    store = field_store((nt, GRID.ny, GRID.nx), _field_variables(GRID, column), fields)  # type: ignore[arg-type]
    acc = _Accumulator(nt, GRID, len(RECEPTORS), tracks, store, column=column)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    measure = reduce.cell_measure(GRID, False, 2)
    rng = np.random.default_rng(2024)
    track_index = np.linspace(0, PARTICLES - 1, tracks).round().astype(np.int64) if tracks else None
    for k in range(nt):
        spread = 15.0 + 6.0 * k  # m: the cloud stays well inside the output grid
        x = 200.0 + 5.0 * k + spread * rng.standard_normal(PARTICLES)
        y = spread * rng.standard_normal(PARTICLES)
        z = np.minimum(rng.exponential(1.5, PARTICLES), DEPTH)
        p = ParticleState.from_arrays(x, y, np.full(PARTICLES, MASS), np.zeros(PARTICLES))
        on_bed = rng.uniform(size=PARTICLES) < 0.1 * (k + 1)
        if column is not None:  # a depth-averaged run's particles have no heights
            p.in_column(z / DEPTH)
        p.status[:] = np.where(on_bed & (column is not None), ON_BED, IN_WATER)
        depths = reduce.particle_depths(p, flow.depth.data[0], xe, ye)
        conc, count = reduce.concentration(p, depths, GRID, measure)
        acc.record(k, p, depths, conc, count, RECEPTORS, GRID, flow, (1.0, 1.0), track_index)
    ds = acc.dataset(times, flow, GRID, RECEPTORS, [], 7, None, "column outputs", "")
    return ds, acc, flow
