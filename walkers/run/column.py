"""The run side of three-dimensional runs: particles placed in their water columns, and the
vertical step's inputs for each window of flow frames (``walkers.engine.vertical``).

A run is three-dimensional when its transport has a :class:`~walkers.scenario.config.Vertical`
(the scenario's [vertical] table). Then:

- after the horizontal placement, :func:`place_in_columns` gives each particle its start height
  (``sigma``, the height above the bed as a fraction of the depth of its cell in the flow frame
  nearest its release time) and its settling velocity (drawn from its release's mix, with the
  run's release generator after every horizontal draw, so depth-averaged runs draw exactly as
  before);
- for each window, :func:`column_inputs` adds the depth frames and the bed shear velocity u* on
  the cells (:func:`walkers.engine.coefficients.shear_velocity` of the depth and the
  depth-averaged speed at the cell centres, with the roughness of the scenario) to the kernel
  inputs, and checks the step against Visser's criterion.

On an unstructured mesh a particle's column is its face: depth and u* are per face (a node depth
or velocity is taken as the mean of the face's corners), used piecewise constant as a cell's on a
grid. A layered mesh file's velocity is kept on its levels and sampled at each particle's
height, as on grids, and so are its w and K_z (on the faces, the columns; the reader's
``ugrid_fields._column_variable``).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from walkers.engine import drift, mesh_inputs, mover
from walkers.engine.coefficients import shear_velocity
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.base import FlowField, FlowWindow, centre_to_edges
from walkers.fields.mesh_field import is_mesh_flow
from walkers.run import reduce
from walkers.scenario.config import Release, Vertical

if TYPE_CHECKING:
    from walkers.scenario.specs import Scenario


def check_column_flow(flow: FlowField, vertical: Vertical) -> None:
    """InputError unless ``flow`` can carry a three-dimensional run: a 2-D flow on a rectilinear
    or curvilinear grid or an unstructured mesh with a water depth of its own (not the
    scenario's constant fill)."""
    if flow.ndim != 2:
        raise InputError(
            "vertical: a three-dimensional run needs a 2-D flow with a water depth; this flow is "
            "a 1-D channel (remove [vertical])"
        )
    if flow.depth.name == "constant depth":
        raise InputError(
            f"vertical: the flow file {flow.source!r} has no water depth (flow.depth only fills "
            "one in); a three-dimensional run needs the depth of every column from the file: "
            "add a depth or water level to it, or remove [vertical]"
        )


def place_in_columns(
    particles: ParticleState,
    owner: np.ndarray,
    releases: Sequence[Release],
    flow: FlowField,
    rng: np.random.Generator,
) -> None:
    """Give every particle its start height and settling velocity (see the module docstring);
    in place. Positions are the engine's (index space on a curvilinear grid)."""
    n = len(particles)
    sigma = np.zeros(n)
    settling = np.zeros(n)
    needs_depth = any(r.start_height == "above_bed" for r in releases)
    depth = _depth_at_release(particles, flow) if needs_depth else np.zeros(0)
    for i, r in enumerate(releases):
        mine = np.flatnonzero(owner == i)
        if r.start_height == "surface":
            sigma[mine] = 1.0
        elif r.start_height == "column":
            sigma[mine] = rng.uniform(0.0, 1.0, mine.size)
        elif r.start_height == "above_bed":
            h = depth[mine]
            sigma[mine] = np.where(
                h > r.height_above_bed, r.height_above_bed / np.maximum(h, 1e-9), 1.0
            )
        w = np.asarray(r.settling, dtype=np.float64)
        if w.size == 1:
            settling[mine] = w[0]
        else:
            share = np.asarray(r.settling_fractions, dtype=np.float64)
            settling[mine] = w[rng.choice(w.size, size=mine.size, p=share / share.sum())]
    particles.in_column(sigma, settling)


def _depth_at_release(particles: ParticleState, flow: FlowField) -> np.ndarray:
    """The water depth (m) of each particle's cell (its face on a mesh: the column the vertical
    step walks in) in the flow frame nearest its release time."""
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    frame = np.zeros(len(particles), dtype=np.int64)
    if not flow.steady and flow.depth.data.shape[0] > 1:
        t, rt = flow.times, particles.release_time
        after = np.clip(np.searchsorted(t, rt), 1, t.size - 1)
        frame = np.where(rt - t[after - 1] <= t[after] - rt, after - 1, after)
    out = np.zeros(len(particles))
    for f in np.unique(frame):
        pick = frame == f
        if is_mesh_flow(flow):
            assert particles.face is not None  # located when placed (simulate)
            h = mesh_inputs.column_depths(flow, flow.depth.frames(int(f), int(f)))
            out[pick] = h[0, 0, particles.face[pick]]
            continue
        part = ParticleState.from_arrays(
            particles.x[pick],
            particles.y[pick],
            np.ones(int(pick.sum())),
            np.zeros(int(pick.sum())),
        )
        out[pick] = reduce.particle_depths(part, flow.depth.frames(int(f), int(f))[0], xe, ye)
    return out


def cell_shear_velocity(flow: FlowField, window: FlowWindow, vertical: Vertical) -> np.ndarray:
    """Bed shear velocity u* (m s-1) on the cells for each frame of the window (nf, ny, nx): the
    depth-averaged speed interpolated to the cell centres (physical speed on a curvilinear grid),
    with the roughness of ``vertical``; 0 in dry cells, and everywhere when nothing uses u* (a
    constant K_z or one from the file without resuspension). On a mesh, per face (nf, 1, nface):
    the speed of the face's velocity (corner means of node velocities) and the face's column
    depth (:func:`column_depth`), with the same roughness."""
    if is_mesh_flow(flow):
        nface = window.wet.shape[-1]
        if not vertical.uses_shear_velocity:
            return np.zeros((1, 1, nface))
        wet = window.wet > 0
        return _shear_velocity(
            vertical,
            np.where(wet, column_depth(flow, window), 0.0),
            np.where(wet, mesh_inputs.face_speeds(flow, window), 0.0),
        )
    ny, nx = flow.depth.data.shape[1:]
    if not vertical.uses_shear_velocity:
        return np.zeros((1, ny, nx))
    nf = max(window.u.shape[0], window.v.shape[0], window.depth.shape[0])
    out = np.zeros((nf, ny, nx))
    for f in range(nf):
        u, v = drift.velocity_at_centres(flow, window, f)
        if flow.curvilinear:
            jac = flow.grid.jacobian
            u, v = (
                jac[..., 0, 0] * u + jac[..., 0, 1] * v,
                jac[..., 1, 0] * u + jac[..., 1, 1] * v,
            )
        h = window.depth[min(f, window.depth.shape[0] - 1)]
        wet = window.wet[min(f, window.wet.shape[0] - 1)] > 0
        speed = np.where(wet, np.hypot(np.nan_to_num(u), np.nan_to_num(v)), 0.0)
        out[f] = _shear_velocity(vertical, np.where(wet, h, 0.0), speed)
    return out


def _shear_velocity(vertical: Vertical, depth: np.ndarray, speed: np.ndarray) -> np.ndarray:
    """u* (m s-1) of depth (m) and depth-averaged speed (m s-1) with the run's bed roughness."""
    return shear_velocity(
        depth, speed, manning_n=vertical.manning_n, drag_coefficient=vertical.drag_coefficient
    )


def column_depth(flow: FlowField, window: FlowWindow) -> np.ndarray:
    """The depth frames (m) of the vertical step's columns: the cells' (nf or 1, ny, nx), or on
    a mesh the faces' (nf or 1, 1, nface; :func:`walkers.engine.mesh_inputs.column_depths`)."""
    if is_mesh_flow(flow):
        return mesh_inputs.column_depths(flow, window.depth)
    return np.ascontiguousarray(window.depth)


def column_inputs(
    inputs: mover.KernelInputs,
    flow: FlowField,
    window: FlowWindow,
    vertical: Vertical,
    dt: float,
) -> mover.KernelInputs:
    """The kernel inputs of a window with the vertical step: depth and u* frames on the cells,
    K_z mode and value, the bed's deposition velocity; the step dt (s) checked against Visser's
    criterion (``mover.with_column``)."""
    return mover.column_inputs(
        inputs,
        flow,
        window,
        vertical,
        cell_shear_velocity(flow, window, vertical),
        dt,
        depth=column_depth(flow, window),
    )


def describe_scenario_column(scenario: Scenario, flow: FlowField) -> list[str]:
    """Lines for ``walkers inspect`` of a scenario: whether its run is three-dimensional, K_z and
    the bed, each release's behaviour, and the vertical substeps Visser's criterion asks of its
    time step over the run (InputError when the flow cannot carry a 3-D run)."""
    from walkers.engine import vertical as column_step
    from walkers.engine.dispersion import transport_for
    from walkers.run.runner import flow_offset

    transport = transport_for(scenario, flow)
    v = transport.vertical
    if v is None:
        return ["Run: depth-averaged (no [vertical] section)"]
    check_column_flow(flow, v)
    offset = flow_offset(scenario, flow)
    window = flow.window(offset, offset + scenario.duration)
    ustar = cell_shear_velocity(flow, window, v)
    h = column_depth(flow, window)
    shape = np.broadcast_shapes(h.shape, ustar.shape)
    params = column_step.column_params(
        v.kz_mode, v.coefficient, v.deposition_velocity, substep_fraction=v.substep_fraction
    )
    substeps = column_step.check_substeps(
        scenario.dt,
        np.ascontiguousarray(np.broadcast_to(h, shape)),
        np.ascontiguousarray(np.broadcast_to(ustar, shape)),
        params,
    )
    return [
        f"Run: three-dimensional: {describe_vertical(v, flow)}",
        f"  releases in the water column: {describe_releases(scenario.releases)}",
        f"  vertical substeps per time step of {scenario.dt:g} s: up to {substeps} (Visser 1997: "
        f"each at most {v.substep_fraction:g} / max|d2K_z/dz2| in columns deeper than "
        f"{column_step.SHALLOW_COLUMN:g} m)",
    ]


def describe_vertical(vertical: Vertical, flow: FlowField) -> str:
    """The run's vertical step in words: K_z, the bed, and what the flow file gives of the
    water column (layered velocities, a vertical velocity, K_z; ``flow.attrs["column"]``, set by
    the reader of a three-dimensional run), with the velocity below the lowest layer centre."""
    column = flow.attrs.get("column") or (
        "velocity: the depth mean at every height; vertical velocity: none (no vertical advection)"
    )
    if is_mesh_flow(flow) and not flow.attrs.get("column"):
        column = (
            "velocity: the depth mean at every height (no layers kept from the mesh file); "
            "vertical velocity: none (no vertical advection); K_z: none in the file (w and K_z "
            "are read with layered velocities only)"
        )
    layers = getattr(flow, "column", None)
    if layers is not None and layers.levels.size > 1:
        if vertical.manning_n is None and vertical.drag_coefficient is None:
            column += "; below the lowest layer centre its value (no bed roughness given)"
        else:
            column += "; below the lowest layer centre the law of the wall to z0 of the roughness"
    return f"{vertical.describe()}; from the flow file: {column}"


def describe_releases(releases: Sequence[Release]) -> str:
    """Each release's behaviour in the water column and start height, in words."""
    parts = []
    for r in releases:
        w = np.asarray(r.settling, dtype=np.float64)
        if r.behaviour == "neutral":
            motion = "neutral"
        elif r.behaviour == "rising":
            motion = f"rising at {-w[0] * 1e3:.4g} mm/s"
        elif w.size == 1:
            motion = f"settling at {w[0] * 1e3:.4g} mm/s"
        else:
            mix = ", ".join(
                f"{100 * f:.3g} % at {v * 1e3:.4g} mm/s"
                for v, f in zip(w, r.settling_fractions, strict=True)
            )
            motion = f"settling ({mix})"
        start = {
            "surface": "from the surface",
            "bed": "from the bed",
            "column": "spread over the column",
            "above_bed": f"from {r.height_above_bed:g} m above the bed",
        }[r.start_height]
        parts.append(f"{r.name}: {motion}, {start}")
    return "; ".join(parts)
