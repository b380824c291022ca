"""The step's arguments for a flow on an unstructured mesh (:class:`walkers.fields.mesh.MeshFlow`).

The step loop is the one of :func:`walkers.engine.kernels.compiled_mover` with its ``mesh``
option: the argument tuples keep their shapes and carry the mesh (node coordinates in place of
the cell edges, values per node or face as ``(frames, 1, n)`` arrays, wet per face), the
topology travels in its own tuple, and each particle's last face is kept between calls so that
the face walk starts where the particle was (:class:`MeshParticles`).

Dispersion on a mesh is constant (along the axes or aligned with the flow, K_L and K_T); the
drift (1/h) ∇·(hK) is computed per face and frame from the depth and K on the nodes
(``meshwalk.face_drift``, Green–Gauss), and used piecewise constant.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from walkers.engine import kernels, meshwalk, twin
from walkers.engine.mover import KernelInputs
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.mesh import NODE, MeshFlow, MeshVariable
from walkers.scenario.config import Transport

MIN_DRIFT_DEPTH = 0.05  # m; as on grids (walkers.engine.mover)


def _frames(var: MeshVariable, i0: int, i1: int) -> np.ndarray:
    """Frames i0..i1 of a mesh variable as (nf, 1, n) float64 (a steady one: its one frame)."""
    data = var.data[0:1] if var.steady else var.data[i0 : i1 + 1]
    return np.ascontiguousarray(np.asarray(data, dtype=np.float64)[:, None, :])


def frame_range(flow: MeshFlow, t0: float, t1: float) -> tuple[int, int]:
    """Indices of the frames whose span covers [t0, t1] (s)."""
    if flow.steady:
        return 0, 0
    i0 = int(np.searchsorted(flow.times, t0, side="right")) - 1
    i1 = int(np.searchsorted(flow.times, t1, side="left"))
    return max(i0, 0), min(i1, len(flow.times) - 1)


def _on_nodes(flow: MeshFlow, var: MeshVariable, frames: np.ndarray) -> np.ndarray:
    """(nf, nnode) node values of a variable given on nodes or faces."""
    values = frames[:, 0, :]
    if var.location == NODE:
        return values
    return flow.geometry.node_mean_of_faces(values)


def mesh_drift(
    flow: MeshFlow, u: np.ndarray, v: np.ndarray, depth: np.ndarray, transport: Transport
) -> tuple[np.ndarray, np.ndarray, bool]:
    """The drift (1/h) ∇·(hK) per face for each frame, (nf, 1, nface) twice, and whether it can
    be anything but zero (K and h both uniform: it cannot)."""
    g = flow.geometry
    d = transport.dispersion
    nf = max(u.shape[0], depth.shape[0])
    h_nodes = np.maximum(_on_nodes(flow, flow.depth, depth), MIN_DRIFT_DEPTH)
    aligned = d.mode == "aligned" and d.k1 != d.k2
    if not aligned and np.ptp(h_nodes) == 0.0:
        zeros = np.zeros((1, 1, g.nface))
        return zeros, zeros, False
    dx = np.zeros((nf, 1, g.nface))
    dy = np.zeros((nf, 1, g.nface))
    un = _on_nodes(flow, flow.u, u)
    vn = _on_nodes(flow, flow.v, v)
    for f in range(nf):
        h = h_nodes[min(f, h_nodes.shape[0] - 1)]
        if aligned:
            uu, vv = un[min(f, un.shape[0] - 1)], vn[min(f, vn.shape[0] - 1)]
            speed2 = uu * uu + vv * vv
            moving = speed2 > 0.0
            safe = np.where(moving, speed2, 1.0)
            kl = np.where(moving, d.k1, d.k2)
            kxx = d.k2 + (kl - d.k2) * np.where(moving, uu * uu / safe, 1.0)
            kyy = d.k2 + (kl - d.k2) * np.where(moving, vv * vv / safe, 0.0)
            kxy = (kl - d.k2) * np.where(moving, uu * vv / safe, 0.0)
        else:
            kxx = np.full(g.nnode, d.k1)
            kyy = np.full(g.nnode, d.k2)
            kxy = np.zeros(g.nnode)
        dx[f, 0], dy[f, 0] = meshwalk.face_drift(
            g.node_x, g.node_y, g.face_nodes, g.area, h, kxx, kxy, kyy
        )
    return dx, dy, True


def mesh_kernel_inputs(flow: MeshFlow, t0: float, t1: float, transport: Transport) -> KernelInputs:
    """The kernel's argument tuples for the frames covering [t0, t1] (s) of a mesh flow."""
    d = transport.dispersion
    if d.k1_field is not None or d.k2_field is not None:
        raise InputError(
            "dispersion on a mesh: coefficients on a grid (estimated from the flow) are not "
            "available on unstructured meshes yet; give constant coefficients"
        )
    g = flow.geometry
    i0, i1 = frame_range(flow, t0, t1)
    times = np.ascontiguousarray(flow.times[i0 : i1 + 1] if not flow.steady else flow.times[:1])
    u, v = _frames(flow.u, i0, i1), _frames(flow.v, i0, i1)
    depth = _frames(flow.depth, i0, i1)
    wet_rows = flow.wet[0:1] if flow.wet.shape[0] == 1 else flow.wet[i0 : i1 + 1]
    wet = np.ascontiguousarray(np.asarray(wet_rows, dtype=np.uint8)[:, None, :])
    drift_x, drift_y, has_drift = mesh_drift(flow, u, v, depth, transport)
    if flow.u.location != flow.v.location:
        raise InputError(f"mesh {flow.source!r}: u and v must be on the same location")
    none = np.zeros(1)
    kconst = np.array([d.k1, d.k2, d.multiplier])
    opts = np.array(
        [
            2,
            1 if transport.scheme == "rk4" else 0,
            1 if d.mode == "aligned" else 0,
            1 if has_drift and transport.drift_correction else 0,
            0,  # no bridge test at mesh boundaries
            transport.max_reflections,
            0,
            0,
            1 if flow.u.location == NODE else 2,
        ],
        dtype=np.int64,
    )
    return KernelInputs(
        flow=(none, none, u, none, none, v, np.zeros(4)),
        cells=(g.node_x, g.node_y, wet, none, none, np.zeros(4)),
        disp=(
            drift_x * d.multiplier,
            drift_y * d.multiplier,
            np.zeros((1, 1, 1)),
            np.zeros((1, 1, 1)),
            kconst,
            np.zeros((1, 1, 1)),
        ),
        times=times,
        opts=opts,
        edges_mode=np.zeros(4, dtype=np.int64),
        decay_rate=transport.decay_rate,
        topology=(g.face_nodes, g.neighbours, flow.open_boundaries.edge_open, None),
    )


@dataclass
class MeshParticles:
    """Each particle's last face (-1: not yet known), kept between calls of the step."""

    face: np.ndarray

    @classmethod
    def locate(cls, flow: MeshFlow, state: ParticleState) -> MeshParticles:
        """The faces of the particles' positions (a k-d tree on face centroids, then the walk);
        InputError if one lies outside the mesh."""
        g = flow.geometry
        start = g.nearest_faces(state.x, state.y)
        face = meshwalk.locate_points(
            g.node_x, g.node_y, g.face_nodes, g.neighbours, start, state.x, state.y
        )
        if np.any(face < 0):
            p = int(np.flatnonzero(face < 0)[0])
            raise InputError(
                f"mesh {flow.source!r}: particle {p} at ({state.x[p]:.10g}, {state.y[p]:.10g}) "
                "lies outside the mesh; place releases inside its faces"
            )
        return cls(face)


def advance_on_mesh(
    state: ParticleState,
    faces: MeshParticles,
    inputs: KernelInputs,
    t0: float,
    dt: float,
    nsteps: int,
    step0: int,
    key: int,
    stepper: str = "fast",
) -> None:
    """Advance the particles on a mesh, their faces kept in ``faces``: the compiled step
    (``stepper`` "fast") or its numpy twin ("reference"), the same numbers."""
    assert inputs.topology is not None
    topology = (*inputs.topology[:3], faces.face)
    (kernels if stepper == "fast" else twin).advance(
        state.x,
        state.y,
        state.mass,
        state.initial_mass,
        state.release_time,
        state.exit_time,
        state.status,
        inputs.flow,
        inputs.cells,
        inputs.disp,
        inputs.times,
        inputs.opts,
        inputs.edges_mode,
        float(t0),
        float(dt),
        int(nsteps),
        int(step0),
        np.uint64(key),
        float(inputs.decay_rate),
        topology,
    )
