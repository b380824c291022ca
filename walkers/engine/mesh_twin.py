"""The numpy twin of the step's velocity on an unstructured mesh (``kernels.frame_value``,
``mesh_value``, ``mesh_velocity`` and the advective part of the step on a mesh), vectorised over
particles, operation for operation as the compiled code; see there for the contracts."""

from __future__ import annotations

import numpy as np

from walkers.engine import meshwalk_twin
from walkers.engine import twin as _twin


def frame_value(arr, it, wt, n):
    """Twin of ``kernels.frame_value``: values n of (nf, 1, n) arrays, linear in time."""
    if arr.shape[0] == 1:
        return arr[0, 0, n]
    f = arr[it, 0, n]
    return np.where(wt > 0.0, f + wt * (arr[np.minimum(it + 1, arr.shape[0] - 1), 0, n] - f), f)


def mesh_value(arr, lay, it, wt, n):
    """Twin of ``kernels.mesh_value``: values n of (nf, 1, n) frames, or of layered frames
    (nf nl or nl, 1, n) in the layers of lay = (nl, k, wz) (arrays k, wz; wz < 0: towards 0
    below the lowest layer centre, as ``twin._sample``)."""
    nl, k, wz = lay
    if nl == 1:
        return frame_value(arr, it, wt, n)
    top = arr.shape[0] - 1
    if arr.shape[0] == nl:
        it, wt = np.zeros_like(it), np.zeros_like(wt)

    def in_time(q):
        f0 = np.minimum(it * nl + k + q, top)
        f = arr[f0, 0, n]
        g = arr[np.minimum(f0 + nl, top), 0, n]
        return np.where(wt > 0.0, f + wt * (g - f), f)

    out = in_time(0)
    out = np.where(wz > 0.0, out + wz * (in_time(1) - out), out)
    return np.where(wz < 0.0, out * (1.0 + wz), out)


def mesh_velocity(flow, mesh_t, on_nodes, it, wt, faces, x, y, lay):
    """Twin of ``kernels.mesh_velocity`` (node values with the corner weights, or per face; in
    the particles' layers lay)."""
    U, V = flow[2], flow[5]
    if not on_nodes:
        return mesh_value(U, lay, it, wt, faces), mesh_value(V, lay, it, wt, faces)
    node_x, node_y, face_nodes = mesh_t
    w = meshwalk_twin.face_weights(node_x, node_y, face_nodes, faces, x, y)
    u = np.zeros(x.size)
    v = np.zeros(x.size)
    for c in range(4):
        node = face_nodes[faces, c]
        present = node >= 0
        safe = np.where(present, node, 0)
        u = np.where(present, u + w[:, c] * mesh_value(U, lay, it, wt, safe), u)
        v = np.where(present, v + w[:, c] * mesh_value(V, lay, it, wt, safe), v)
    return u, v


def mesh_advect(flow, mesh_t, neighbours, on_nodes, times, scheme, x, y, t, h, faces, lay):
    """Twin of the advective part of the kernel's step on a mesh (Euler or RK4, the stage
    points located by walking from the particle's face; in the particles' layers lay)."""
    node_x, node_y, face_nodes = mesh_t

    def at(tt, xx, yy, start):
        it, wt = _twin._time_weight(times, tt)
        g = meshwalk_twin.locate_points(node_x, node_y, face_nodes, neighbours, start, xx, yy)
        found = np.where(g >= 0, g, start)
        return mesh_velocity(flow, mesh_t, on_nodes, it, wt, found, xx, yy, lay)

    it, wt = _twin._time_weight(times, t)
    u1, v1 = mesh_velocity(flow, mesh_t, on_nodes, it, wt, faces, x, y, lay)
    if scheme == 0:
        return u1 * h, v1 * h, u1, v1
    u2, v2 = at(t + 0.5 * h, x + 0.5 * h * u1, y + 0.5 * h * v1, faces)
    u3, v3 = at(t + 0.5 * h, x + 0.5 * h * u2, y + 0.5 * h * v2, faces)
    u4, v4 = at(t + h, x + h * u3, y + h * v3, faces)
    return (
        h * (u1 + 2.0 * u2 + 2.0 * u3 + u4) / 6.0,
        h * (v1 + 2.0 * v2 + 2.0 * v3 + v4) / 6.0,
        u1,
        v1,
    )
