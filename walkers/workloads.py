"""The benchmark's workloads: an invented basin with land, tide and open edges, as the reference
(fast-path) workload, with the estuary demo's options (the scenario workload), and laid on a
rotated curvilinear grid (the curvilinear workload). ``walkers bench`` times the engine on them
(:mod:`walkers.bench`); the tests use them as realistic inputs.
"""

from __future__ import annotations

import math

import numpy as np

from walkers.engine import mover, vertical
from walkers.engine.coefficients import shear_velocity
from walkers.engine.dispersion import resolve_dispersion
from walkers.engine.state import ParticleState
from walkers.fields.analytic import curvilinear_flow, grid_flow
from walkers.fields.base import FlowField, GriddedVariable
from walkers.scenario.config import Dispersion, Transport
from walkers.scenario.specs import DispersionSpec

CELL = 20.0  # m, cell size of the reference workload
DT = 30.0  # s, time step
FRAME_INTERVAL = 3600.0  # s between flow frames


def reference_workload(
    nx: int = 200, ny: int = 100, frames: int = 7
) -> tuple[FlowField, Transport]:
    """The reference basin: nx × ny cells of 20 m, ``frames`` hourly frames of a tidal flow
    (0.3 m s-1 amplitude, period 12.42 h) with a cross-channel swirl, an island and a jetty of
    land, west and south edges reflecting, east and north absorbing, K = 1 and 0.5 m2 s-1."""
    xc = CELL * (np.arange(nx) + 0.5)
    yc = CELL * (np.arange(ny) + 0.5)
    X, Y = np.meshgrid(xc, yc)
    lx, ly = nx * CELL, ny * CELL
    land = ((X - 0.6 * lx) / (0.08 * lx)) ** 2 + ((Y - 0.5 * ly) / (0.15 * ly)) ** 2 < 1.0
    land |= (Y > 0.85 * ly) & (X > 0.2 * lx) & (X < 0.4 * lx)

    def velocity(X, Y, t):
        phase = np.cos(2.0 * np.pi * t / 44712.0)
        return 0.3 * phase + 0.05 * np.sin(Y / 300.0), 0.05 * np.cos(X / 500.0) * phase

    times = FRAME_INTERVAL * np.arange(frames, dtype=np.float64)
    flow = grid_flow(xc, yc, times, velocity, depth=8.0, wet=~land)
    transport = Transport(
        dt=DT,
        dispersion=Dispersion(k1=1.0, k2=0.5),
        edges={
            "west": "reflecting",
            "east": "absorbing",
            "south": "reflecting",
            "north": "absorbing",
        },
    )
    return flow, transport


def scenario_workload(nx: int = 200, ny: int = 100, frames: int = 7) -> tuple[FlowField, Transport]:
    """The reference basin with the settings of the estuary demo: a tide of 1 m amplitude over a
    bed that shoals to the north, so that tidal flats dry and flood (wet mask per frame, minimum
    depth 0.1 m); dispersion estimated from depth and speed (Manning n = 0.025, meandering,
    floor 0.5 m2 s-1), gridded and aligned with the flow, with the drift term; decay with a
    half-life of 2 days; absorbing edges with the bridge test; the demo's 60 s step taken as two
    sub-steps of 30 s (``DT``)."""
    flow, transport = reference_workload(nx, ny, frames)
    land = flow.wet.data[0] < 0.5
    Y = np.broadcast_to(flow.y[:, None], land.shape)
    bed = 8.0 - 10.0 * np.clip((Y / (ny * CELL) - 0.4) / 0.4, 0.0, 1.0)  # m below datum
    tide = np.cos(2.0 * np.pi * flow.times / 44712.0)  # m above datum
    depth = np.maximum(bed[None] + tide[:, None, None], 0.0)
    wet = (depth >= 0.1) & ~land[None]
    flow.depth = GriddedVariable(flow.x, flow.y, depth, "depth", "m")
    flow.wet = GriddedVariable(flow.x, flow.y, wet.astype(np.float64), "wet", "1")
    spec = DispersionSpec("estimated", manning_n=0.025, transverse_factor=0.6, minimum=0.5)
    scenario = Transport(
        dt=DT,
        dispersion=resolve_dispersion(spec, flow),
        decay_rate=np.log(2.0) / (2 * 86400.0),
        edges=transport.edges,
    )
    return flow, scenario


def initial_state(n: int, flow: FlowField, seed: int = 1) -> ParticleState:
    """n particles spread over the western water of the basin, all released at t = 0 (in the
    engine's coordinates: index space on the curvilinear workload)."""
    rng = np.random.default_rng(seed)
    lx, ly = flow.x[-1], flow.y[-1]
    if getattr(flow.kind(), "mesh", False):
        g = flow.attrs["mesh"].geometry
        lx, ly = g.node_x.max(), g.node_y.max()
    x = rng.uniform(0.05 * lx, 0.3 * lx, n)
    y = rng.uniform(0.1 * ly, 0.8 * ly, n)
    return ParticleState.from_arrays(x, y, np.ones(n), np.zeros(n))


def gridded_workload(nx: int = 200, ny: int = 100, frames: int = 7):
    """The reference basin with its (uniform) K given on the grid: the same physics, through the
    general step (K sampled at each particle, the drift term on) — what a curvilinear grid's
    step always does, measured on a rectilinear grid."""
    flow, transport = reference_workload(nx, ny, frames)
    shape = flow.wet.data.shape[1:]
    k1, k2 = transport.dispersion.k1, transport.dispersion.k2
    gridded = Dispersion(k1_field=np.full(shape, k1), k2_field=np.full(shape, k2))
    return flow, Transport(dt=DT, dispersion=gridded, edges=transport.edges)


CURVILINEAR_ANGLE = math.radians(30.0)  # the curvilinear workload's grid axis i from east


def curvilinear_workload(nx: int = 200, ny: int = 100, frames: int = 7):
    """The reference basin laid on a curvilinear grid: its cells turned 30 degrees from east and
    sheared by a gentle bend (a row's cells shift by up to half a cell across the basin), the
    same land, flow (along the grid) and dispersion, edges named by grid index. The engine steps
    it in index space with the full tensor K̃ and the metric drift on: the cost of a grid kind."""
    ref, ref_transport = reference_workload(nx, ny, frames)
    a, b = np.meshgrid(np.arange(nx + 1) * CELL, np.arange(ny + 1) * CELL)
    a = a + 0.5 * CELL * np.sin(np.pi * b / (ny * CELL))  # the bend
    c, s = math.cos(CURVILINEAR_ANGLE), math.sin(CURVILINEAR_ANGLE)
    cx, cy = a * c - b * s, a * s + b * c
    land = ref.wet.data[0] < 0.5

    def velocity(X, Y, t):
        # the reference flow, along the basin's own axes, turned with the grid
        along, across = X * c + Y * s, -X * s + Y * c
        phase = np.cos(2.0 * np.pi * t / 44712.0)
        u = 0.3 * phase + 0.05 * np.sin(across / 300.0)
        v = 0.05 * np.cos(along / 500.0) * phase
        return u * c - v * s, u * s + v * c

    flow = curvilinear_flow(cx, cy, ref.times, velocity, depth=8.0, wet=~land)
    edges = {"first_i": "reflecting", "last_i": "absorbing"}
    edges |= {"first_j": "reflecting", "last_j": "absorbing"}
    transport = Transport(dt=DT, dispersion=ref_transport.dispersion, edges=edges)
    return flow, transport


def mesh_workload(nx: int = 200, ny: int = 100, frames: int = 7):
    """The reference basin as an unstructured mesh: its nodes at the corners of the 20 m cells,
    each cell cut into two triangles (diagonals alternating), the same land (dry faces), flow
    (on the nodes) and dispersion, the east and north sides open boundaries. Returns the mesh
    flow as the run stage sees it (:func:`walkers.fields.mesh_field.mesh_field`) and the
    transport."""
    from walkers.fields.mesh import MeshFlow, MeshVariable, build_geometry
    from walkers.fields.mesh_field import mesh_field
    from walkers.fields.mesh_open import coast_only, mark_nodes

    ref, ref_transport = reference_workload(nx, ny, frames)
    xs, ys = np.arange(nx + 1) * CELL, np.arange(ny + 1) * CELL
    X, Y = np.meshgrid(xs, ys)
    nid = np.arange(X.size).reshape(X.shape)
    a, b = nid[:-1, :-1].ravel(), nid[:-1, 1:].ravel()
    c, d = nid[1:, 1:].ravel(), nid[1:, :-1].ravel()
    odd = ((np.arange(ny)[:, None] + np.arange(nx)[None, :]) % 2).ravel() == 1
    fill = np.full(a.size, -1)
    first = np.where(odd[:, None], np.stack([a, b, c, fill], 1), np.stack([a, b, d, fill], 1))
    second = np.where(odd[:, None], np.stack([a, c, d, fill], 1), np.stack([b, c, d, fill], 1))
    faces = np.concatenate([first, second])
    g = build_geometry(X.ravel(), Y.ravel(), faces, where="the mesh workload")
    land = (ref.wet.data[0] < 0.5).ravel()
    wet = ~np.concatenate([land, land])
    bounds = mark_nodes(g, coast_only(g), "east", nid[:, -1], where="the mesh workload")
    bounds = mark_nodes(g, bounds, "north", nid[-1, ::-1], where="the mesh workload")
    times = ref.times
    # the reference flow at the nodes (the same function as reference_workload's)
    phase = np.cos(2.0 * np.pi * times / 44712.0)[:, None]
    u = 0.3 * phase + 0.05 * np.sin(Y.ravel() / 300.0)[None, :]
    v = 0.05 * np.cos(X.ravel() / 500.0)[None, :] * phase
    mesh = MeshFlow(
        g,
        times,
        ref.time_units,
        ref.calendar,
        MeshVariable("node", u, "u", "m s-1"),
        MeshVariable("node", v, "v", "m s-1"),
        MeshVariable("node", np.full((1, g.nnode), 8.0), "depth", "m"),
        wet[None].astype(np.uint8),
        bounds,
        source="the mesh workload",
    )
    transport = Transport(dt=DT, dispersion=ref_transport.dispersion)
    return mesh_field(mesh), transport


def threed_workload(flow: FlowField, transport: Transport, start: ParticleState):
    """The reference basin in three dimensions: a parabolic K_z from u* = sqrt(C_d) |U| with
    C_d = 0.0025 (``walkers.engine.coefficients``), the particles of ``start`` at mid-depth
    settling at 0.1 mm s-1, a reflecting bed. Returns (kernel inputs, state)."""
    window = flow.window(0.0, float(flow.times[-1]))
    ustar = shear_velocity(window.depth, np.hypot(window.u, window.v), drag_coefficient=0.0025)
    inputs = mover.kernel_inputs(flow, window, transport)
    inputs = mover.with_column(inputs, window.depth, ustar, vertical.KZ_PARABOLIC, dt=DT)
    return inputs, start.copy().in_column(0.5, 1e-4)
