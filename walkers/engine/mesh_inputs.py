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

import numpy as np

from walkers.engine import meshwalk
from walkers.engine.drift import MIN_DRIFT_DEPTH, aligned_tensor
from walkers.engine.mover import KernelInputs
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.base import FlowField, FlowWindow
from walkers.fields.mesh import NODE, MeshFlow
from walkers.scenario.config import Transport


def _on_nodes(mesh: MeshFlow, location: str, values: np.ndarray) -> np.ndarray:
    """(nf, nnode) node values of (nf, n) values given on nodes or faces."""
    if location == NODE:
        return values
    return mesh.geometry.node_mean_of_faces(values)


def mesh_drift(
    flow: FlowField, window: FlowWindow, transport: Transport
) -> tuple[np.ndarray, np.ndarray, bool]:
    """The drift (1/h) ∇·(hK) per face for each frame of the window, (nf, 1, nface) twice, and
    whether it can be anything but zero (K and h both uniform: it cannot)."""
    mesh: MeshFlow = flow.attrs["mesh"]
    g = mesh.geometry
    d = transport.dispersion
    nf = max(window.u.shape[0], window.depth.shape[0])
    h_nodes = np.maximum(
        _on_nodes(mesh, mesh.depth.location, window.depth[:, 0, :]), MIN_DRIFT_DEPTH
    )
    aligned = d.mode == "aligned" and d.k1 != d.k2
    if not aligned and np.ptp(h_nodes) == 0.0:
        zeros = np.zeros((1, 1, g.nface))
        return zeros, zeros, False
    if not aligned and window.depth.shape[0] == 1:
        nf = 1  # h and K the same in every frame
    dx = np.zeros((nf, 1, g.nface))
    dy = np.zeros((nf, 1, g.nface))
    un = _on_nodes(mesh, mesh.u.location, window.u[:, 0, :])
    vn = _on_nodes(mesh, mesh.v.location, window.v[:, 0, :])
    for f in range(nf):
        h = h_nodes[min(f, h_nodes.shape[0] - 1)]
        if aligned:
            uu, vv = un[min(f, un.shape[0] - 1)], vn[min(f, vn.shape[0] - 1)]
            kxx, kyy, kxy = aligned_tensor(uu, vv, d.k1, d.k2)
        else:
            kxx = np.full(g.nnode, d.k1)
            kyy = np.full(g.nnode, d.k2)
            kxy = np.zeros(g.nnode)
        dx[f, 0], dy[f, 0] = meshwalk.face_drift(
            g.node_x, g.node_y, g.face_nodes, g.area, h, kxx, kxy, kyy
        )
    return dx, dy, True


def mesh_kernel_inputs(flow: FlowField, window: FlowWindow, transport: Transport) -> KernelInputs:
    """The kernel's argument tuples for a window of frames of a mesh flow
    (:func:`walkers.fields.mesh_field.mesh_field`)."""
    d = transport.dispersion
    if d.k1_field is not None or d.k2_field is not None:
        raise InputError(
            "dispersion on a mesh: coefficients on a grid (estimated from the flow) are not "
            "available on unstructured meshes yet; give constant coefficients"
        )
    mesh: MeshFlow = flow.attrs["mesh"]
    g = mesh.geometry
    if transport.edges:
        raise InputError(
            f"[edges] {', '.join(transport.edges)}: a mesh has no such edges; its boundary is "
            "coast except the open boundaries the file or [[flow.open_boundaries]] names "
            "(absorbing)"
        )
    if mesh.u.location != mesh.v.location:
        raise InputError(f"mesh {mesh.source!r}: u and v must be on the same location")
    drift_x, drift_y, has_drift = mesh_drift(flow, window, transport)
    wet = np.ascontiguousarray(window.wet, dtype=np.uint8)
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
            1 if mesh.u.location == NODE else 2,
        ],
        dtype=np.int64,
    )
    return KernelInputs(
        flow=(none, none, window.u, none, none, window.v, np.zeros(4)),
        cells=(g.node_x, g.node_y, wet, none, none, np.zeros(4)),
        disp=(
            drift_x * d.multiplier,
            drift_y * d.multiplier,
            np.zeros((1, 1, 1)),
            np.zeros((1, 1, 1)),
            kconst,
            np.zeros((1, 1, 1)),
        ),
        times=window.times,
        opts=opts,
        edges_mode=np.zeros(4, dtype=np.int64),
        decay_rate=transport.decay_rate,
        topology=(g.face_nodes, g.neighbours, mesh.open_boundaries.edge_open),
    )


def face_values(flow: FlowField, location: str, values: np.ndarray) -> np.ndarray:
    """(nf, 1, nface) face values of (nf, 1, n) values on the mesh's nodes or faces: the mean of
    each face's corners (the value of the linear or bilinear interpolant at its parametric
    centre) for node values, the values themselves for face values."""
    if location != NODE:
        return np.ascontiguousarray(values, dtype=np.float64)
    g = flow.attrs["mesh"].geometry
    return np.ascontiguousarray(g.face_mean_of_nodes(values[:, 0, :])[:, None, :])


def column_depths(flow: FlowField, depth: np.ndarray) -> np.ndarray:
    """The water depth (m) of each face's column, (nf, 1, nface), from depth frames (nf, 1, n):
    the depth of the three-dimensional step, which uses it piecewise constant per face (as it
    uses a cell's depth on a grid)."""
    return face_values(flow, flow.attrs["mesh"].depth.location, depth)


def face_speeds(flow: FlowField, window: FlowWindow) -> np.ndarray:
    """The depth-averaged speed (m s-1) on each face for each frame of the window, (nf, 1,
    nface): |(u, v)| of the face's velocity (the corner means of node velocities)."""
    mesh: MeshFlow = flow.attrs["mesh"]
    u = face_values(flow, mesh.u.location, window.u)
    v = face_values(flow, mesh.v.location, window.v)
    return np.hypot(u, v)


def locate_particles(flow: FlowField, state: ParticleState, what: str = "particle") -> None:
    """Each particle's face (a k-d tree on face centroids, then the walk) into ``state.face``;
    InputError naming ``what`` if one lies outside the mesh."""
    g = flow.attrs["mesh"].geometry
    start = g.nearest_faces(state.x, state.y)
    face = meshwalk.locate_points(
        g.node_x, g.node_y, g.face_nodes, g.neighbours, start, state.x, state.y
    )
    if np.any(face < 0):
        p = int(np.flatnonzero(face < 0)[0])
        raise InputError(
            f"{what} {p} at ({state.x[p]:.10g}, {state.y[p]:.10g}) lies outside the mesh of "
            f"{flow.source}; place releases inside its faces"
        )
    state.face = face


def depths_at(flow: FlowField, depth: np.ndarray, state: ParticleState) -> np.ndarray:
    """Water depth (m) at each particle from one frame of the mesh's depth (1, n): the face's
    value, or the nodes' interpolated at the particle."""
    mesh: MeshFlow = flow.attrs["mesh"]
    g = mesh.geometry
    if state.face is None:
        locate_particles(flow, state)
    assert state.face is not None
    face = np.maximum(state.face, 0)
    values = np.ascontiguousarray(depth[0])
    if mesh.depth.location != NODE:
        return values[face]
    return meshwalk.interpolate_points(
        g.node_x, g.node_y, g.face_nodes, values, face, state.x, state.y
    )
